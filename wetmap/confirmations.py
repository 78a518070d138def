"""Reading cores and meter readings (``cores.csv``) into plain arrays.

Columns ``id,x,y`` (plan coordinates) and at least one of

- ``result``: ``wet``, ``damp`` or ``dry`` (a core cut and inspected, graded with the
  trade's words); a ``damp`` core counts as wet or as dry as ``[cores] damp_counts_as``
  says (wet by default), and keeps its grade for the map, the tables and the report;
- ``moisture_pct``: moisture content by weight (ASTM C1616: (wet - dry) / dry x 100 %),
  judged wet above ``[cores] wet_above_pct``;
- ``reading``: a meter reading on the meter's own scale, judged wet above
  ``[cores] wet_above``;
- ``sound``: a percussion sounding (tapping the skin), ``dull`` or ``solid`` (any case).
  ``dull`` (a void, debonded skin or soft core under the hammer) says wet, like a wet
  reading. ``solid`` is judged dry but is weaker than a core or reading: a well-bonded
  skin over wet core still sounds solid, so a solid sounding never refutes an anomaly on
  its own (see :attr:`Confirmations.decisive` and :func:`wetmap.verdicts.assign_status`).

Optional columns of the core log: ``layers`` (the build-up found, free text),
``thickness_mm`` (thickness of the wet layer removed, millimetres, a number above 0 and
up to 1000) and ``photo`` (an image in the survey folder, e.g. ``photos/c1.jpg``).

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

__all__ = ["Confirmations", "read_confirmations", "Basis", "JUDGED_COLUMNS", "GRADES"]

Basis = Literal["result", "moisture_pct", "reading", "sound"]

#: The judgement columns, in the order in which they decide a row.
JUDGED_COLUMNS: tuple[Basis, ...] = ("result", "moisture_pct", "reading", "sound")

_RESULT_WORDS = {"wet": True, "damp": True, "dry": False}  # damp: as [cores] damp_counts_as says
#: Grades of a core, wettest first (the trade's words).
GRADES = ("wet", "damp", "dry")
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
    grades
        Per row, ``"wet"``, ``"damp"`` or ``"dry"``: the grade as written for a ``result``
        row, the judgement for the other columns. Empty: taken from ``wet``.
    damp_counts_as
        How a damp core was counted (``wet`` holds the outcome).
    """

    ids: tuple[str, ...]
    xs: np.ndarray
    ys: np.ndarray
    wet: np.ndarray
    basis: tuple[Basis, ...]
    values: np.ndarray
    extra: dict[str, tuple[str, ...]] = field(default_factory=dict)
    grades: tuple[str, ...] = ()
    damp_counts_as: str = "wet"

    @property
    def grade(self) -> tuple[str, ...]:
        """Per row ``"wet"``, ``"damp"`` or ``"dry"`` (see ``grades``)."""
        return self.grades if len(self.grades) == len(self.ids) else tuple(
            "wet" if w else "dry" for w in np.asarray(self.wet, dtype=bool))

    @property
    def wet_thickness_mm(self) -> float | None:
        """Median ``thickness_mm`` of the rows counted wet that log one (mm), or ``None``.

        >>> c = Confirmations(("C1", "C2", "C3"), np.zeros(3), np.zeros(3), np.array([True, True, False]),
        ...                   ("result",) * 3, np.full(3, np.nan), {"thickness_mm": ("75", "", "90")})
        >>> c.wet_thickness_mm
        75.0
        """
        logged = self.extra.get("thickness_mm", ())
        values = [float(t) for t, w in zip(logged, np.asarray(self.wet, dtype=bool)) if t and w]
        return float(np.median(values)) if values else None

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
                       wet_above_pct: float | None = None, damp_counts_as: str = "wet") -> Confirmations:
    """Read and judge ``cores.csv`` (columns ``result``, ``moisture_pct``, ``reading``, ``sound``).

    Parameters
    ----------
    path
        The CSV file.
    wet_above
        Threshold for the ``reading`` column (meter scale); required if any row is judged by it.
    wet_above_pct
        Threshold for the ``moisture_pct`` column; required if any row is judged by it.
    damp_counts_as
        ``"wet"`` or ``"dry"``: how a ``result`` of ``damp`` counts.

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
    grades: list[str] = []
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
        grade = ""
        thickness = (row.get("thickness_mm") or "").strip()
        if thickness:
            t_mm = number(row_no, "thickness_mm", thickness)
            if t_mm is not None and not 0 < t_mm <= 1000:
                problems.append(f"{path}: row {row_no}, column 'thickness_mm' = {_shown(thickness)}: expected the "
                                "thickness of the wet layer in millimetres, above 0 and up to 1000")
                ok = False
            elif t_mm is None:
                ok = False
        for col in judged:
            raw = (row.get(col) or "").strip()
            if not raw:
                continue
            if col == "result":
                word = raw.lower()
                if word not in _RESULT_WORDS:
                    problems.append(f"{path}: row {row_no}, column 'result' = {_shown(raw)}: expected wet, damp "
                                    "or dry")
                    ok = False
                else:
                    decided = (word == "wet" or (word == "damp" and damp_counts_as == "wet"), math.nan, "result")
                    grade = word
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
        grades.append(grade or ("wet" if decided[0] else "dry"))
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
        grades=tuple(grades),
        damp_counts_as=damp_counts_as,
    )


def _shown(value: str, limit: int = 60) -> str:
    """``repr(value)`` on one line, cut to ``limit`` characters (a problem is one line)."""
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 4] + "...'"
