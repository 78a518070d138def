"""Reading cores and meter readings (``cores.csv``) into plain arrays.

Columns ``id,x,y`` (plan coordinates) and at least one of

- ``result``: ``wet`` or ``dry`` (a core cut and inspected);
- ``moisture_pct``: moisture content by weight (ASTM C1616: (wet - dry) / dry x 100 %),
  judged wet above ``[cores] wet_above_pct``;
- ``reading``: a meter reading on the meter's own scale, judged wet above
  ``[cores] wet_above``;
- ``sound``: a percussion sounding (tapping the skin), ``dull`` or ``solid`` (any case).
  ``dull`` (a void, debonded skin or soft core under the hammer) says wet, like a wet
  reading. ``solid`` is judged dry but is weaker than a core or reading: a well-bonded
  skin over wet core still sounds solid, so a solid sounding never refutes an anomaly on
  its own (see :attr:`Confirmations.decisive` and :func:`wetmap.verdicts.assign_status`).

On each row the first of these that holds a value decides (so a sounding decides only a
row with no core result, moisture content or reading). Other columns are kept
as text for the map and report. The delimiter may be ``,`` or ``;`` (then a decimal
comma is accepted too). Messages give the row as a spreadsheet shows it: the line of
the file, the header being row 1.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import numpy as np

from .errors import InputFileError

__all__ = ["Confirmations", "read_confirmations", "Basis", "JUDGED_COLUMNS"]

Basis = Literal["result", "moisture_pct", "reading", "sound"]

#: The judgement columns, in the order in which they decide a row.
JUDGED_COLUMNS: tuple[Basis, ...] = ("result", "moisture_pct", "reading", "sound")

_RESULT_WORDS = {"wet": True, "dry": False}
#: Percussion soundings: a dull note says wet (void, debonded skin, soft core); solid says dry.
_SOUND_WORDS = {"dull": True, "solid": False}


@dataclass(frozen=True)
class Confirmations:
    """Cores and readings, one entry per row of cores.csv.

    Attributes
    ----------
    ids
        Row identifiers, as written.
    xs, ys
        Plan coordinates, metres, shape ``(n,)``.
    wet
        Judgement per row, bool ``(n,)``.
    basis
        Which column decided each row.
    values
        The number judged (``moisture_pct`` or ``reading``), NaN for a ``result`` row.
    extra
        Other columns, name -> texts.
    """

    ids: tuple[str, ...]
    xs: np.ndarray
    ys: np.ndarray
    wet: np.ndarray
    basis: tuple[Basis, ...]
    values: np.ndarray
    extra: dict[str, tuple[str, ...]] = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.ids)

    @property
    def decisive(self) -> np.ndarray:
        """Rows that can decide an anomaly's status, bool ``(n,)``: all but solid soundings.

        A solid sounding is judged dry, but a well-bonded skin over wet core sounds solid
        too, so it does not refute a warm patch on its own (nor bound the threshold check).
        """
        return ~np.asarray([b == "sound" for b in self.basis], dtype=bool) | np.asarray(self.wet, dtype=bool)

    @staticmethod
    def empty() -> "Confirmations":
        z = np.zeros(0)
        return Confirmations((), z, z.copy(), np.zeros(0, bool), (), z.copy())


def read_confirmations(path: Path, *, wet_above: float | None = None,
                       wet_above_pct: float | None = None) -> Confirmations:
    """Read and judge ``cores.csv`` (columns ``result``, ``moisture_pct``, ``reading``, ``sound``).

    Parameters
    ----------
    path
        The CSV file.
    wet_above
        Threshold for the ``reading`` column (meter scale); required if any row is judged by it.
    wet_above_pct
        Threshold for the ``moisture_pct`` column; required if any row is judged by it.

    Raises
    ------
    InputFileError
        A missing column, a malformed number or result, a duplicated id, or a row that
        needs a threshold that is not set; the message names the file, row and column.
    """
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise InputFileError(f"{path}: not UTF-8 text; save the cores table as CSV (UTF-8)") from None
    except OSError as err:
        raise InputFileError(f"{path}: cannot be read ({err.strerror or err}); check the file") from None
    if "\0" in text:
        raise InputFileError(f"{path}: holds NUL characters, so it is not a text table; save the cores table as CSV (UTF-8)")
    lines = text.splitlines()
    if not lines or not lines[0].strip():
        raise InputFileError(f"{path}: is empty; expected a header id,x,y,result (or moisture_pct, reading, sound)")
    delimiter = ";" if lines[0].count(";") > lines[0].count(",") else ","
    decimal_comma = delimiter == ";"
    reader = csv.DictReader(lines, delimiter=delimiter)
    try:
        header = [h.strip() for h in (reader.fieldnames or [])]
    except csv.Error as err:
        raise InputFileError(f"{path}: row 1 cannot be read as CSV ({err}); save the cores table as CSV") from None
    reader.fieldnames = header
    problems: list[str] = []  # every row's problems, reported at once
    repeated = sorted({h for h in header if h and header.count(h) > 1})
    if repeated:
        problems.append(f"{path}: column {', '.join(repr(h) for h in repeated)} appears twice in the header; "
                        "expected each column once")
    for col in ("id", "x", "y"):
        if col not in header:
            problems.append(f"{path}: column '{col}' is missing; expected columns id,x,y and result, "
                            "moisture_pct, reading or sound")
    judged = [c for c in JUDGED_COLUMNS if c in header]
    if not judged:
        problems.append(f"{path}: no judgement column; add 'result' (wet/dry), 'moisture_pct', 'reading' "
                        "or 'sound' (dull/solid)")
    if problems:
        raise InputFileError(problems)

    def number(row_no: int, col: str, value: str) -> float | None:
        v = value.strip()
        if decimal_comma:
            v = v.replace(",", ".")
        try:
            out = float(v)
        except ValueError:
            problems.append(f"{path}: row {row_no}, column '{col}' = {_shown(value)}: expected a number")
            return None
        if not math.isfinite(out):
            problems.append(f"{path}: row {row_no}, column '{col}' = {_shown(value)}: expected a finite number")
            return None
        return out

    ids: list[str] = []
    xs: list[float] = []
    ys: list[float] = []
    wet: list[bool] = []
    basis: list[Basis] = []
    values: list[float] = []
    extra_cols = [c for c in header if c not in ("id", "x", "y", *JUDGED_COLUMNS)]
    extra: dict[str, list[str]] = {c: [] for c in extra_cols}
    missing_threshold: set[str] = set()
    rows = iter(reader)
    while True:
        try:
            row = next(rows)
        except StopIteration:
            break
        except csv.Error as err:
            problems.append(f"{path}: row {reader.line_num} cannot be read as CSV ({err}); fix the quoting on that row")
            break
        # the row number a spreadsheet shows: the line in the file (csv skips blank lines itself)
        row_no = reader.line_num
        if any((v or "").strip() for v in row.get(None, ())):  # more values than header columns (blank extras pass)
            problems.append(
                f"{path}: row {row_no} has {len(header) + len(row[None])} values but the header has "
                f"{len(header)} columns; a decimal comma in a comma-separated file? "
                "use a decimal point, or ';' as the delimiter"
            )
            continue
        if not any((v or "").strip() for v in row.values() if isinstance(v, str)):
            continue  # blank line
        ident = (row.get("id") or "").strip()
        ok = True
        if not ident:
            problems.append(f"{path}: row {row_no}, column 'id' is empty; give every core an id")
            ok = False
        elif ident in ids:
            problems.append(f"{path}: row {row_no}, column 'id' = {_shown(ident)} repeats; ids must be unique")
            ok = False
        x = number(row_no, "x", row.get("x") or "")
        y = number(row_no, "y", row.get("y") or "")
        if x is None or y is None:
            ok = False
        decided: tuple[bool, float, Basis] | None = None
        for col in judged:
            raw = (row.get(col) or "").strip()
            if not raw:
                continue
            if col == "result":
                word = raw.lower()
                if word not in _RESULT_WORDS:
                    problems.append(f"{path}: row {row_no}, column 'result' = {_shown(raw)}: expected wet or dry")
                    ok = False
                else:
                    decided = (_RESULT_WORDS[word], math.nan, "result")
            elif col == "sound":
                word = raw.lower()
                if word not in _SOUND_WORDS:
                    problems.append(f"{path}: row {row_no}, column 'sound' = {_shown(raw)}: expected dull or solid "
                                    "(a percussion sounding)")
                    ok = False
                else:
                    decided = (_SOUND_WORDS[word], math.nan, "sound")
            else:
                value = number(row_no, col, raw)
                limit = wet_above_pct if col == "moisture_pct" else wet_above
                if value is None:
                    ok = False
                elif limit is None:
                    key = "wet_above_pct" if col == "moisture_pct" else "wet_above"
                    if col not in missing_threshold:  # said once, at its first row
                        problems.append(
                            f"{path}: row {row_no} is judged by column '{col}' but [cores] {key} is not set; "
                            f"add {key} = ... to survey.toml (the level above which a {col} reading counts as wet)"
                        )
                    missing_threshold.add(col)
                    ok = False
                else:
                    decided = (value > limit, value, col)  # type: ignore[assignment]
            break
        else:
            problems.append(
                f"{path}: row {row_no} (id {_shown(ident)[1:-1]}) has no value in {', '.join(judged)}; "
                "give a result (wet/dry), a number or a sounding (dull/solid)"
            )
            ok = False
        if not ok or decided is None:
            continue
        ids.append(ident)
        xs.append(x)  # type: ignore[arg-type]
        ys.append(y)  # type: ignore[arg-type]
        wet.append(decided[0])
        values.append(decided[1])
        basis.append(decided[2])
        for c in extra_cols:
            extra[c].append((row.get(c) or "").strip())
    if problems:
        raise InputFileError(problems)
    return Confirmations(
        ids=tuple(ids),
        xs=np.asarray(xs, dtype=float),
        ys=np.asarray(ys, dtype=float),
        wet=np.asarray(wet, dtype=bool),
        basis=tuple(basis),
        values=np.asarray(values, dtype=float),
        extra={c: tuple(v) for c, v in extra.items()},
    )


def _shown(value: str, limit: int = 60) -> str:
    """``repr(value)`` on one line, cut to ``limit`` characters (a problem is one line)."""
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 4] + "...'"
