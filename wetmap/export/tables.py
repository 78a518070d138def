"""``summary.json`` and ``quantities.csv``.

``quantities.csv`` is one table a spreadsheet opens as it is. The ``row`` column says
what each row is:

- ``anomaly``: one per anomaly, with its attributes;
- ``section``: one per roof section, then ``(outside sections)`` for the part of the roof
  in no section (only when sections were given); these rows add up to the total row;
- ``total``: the whole roof;
- ``range``: ``low end`` and ``high end`` of the counted wet area (``wet_area_*``) at the
  thresholds of :func:`wetmap.confirm.area_thresholds`, widened by the outline's uncertainty;
- ``board range``: without ``[repair] board_origin``, the ``fewest`` and ``most`` whole
  ``boards`` over the board-grid origins tried; the total row gives the median
  (:func:`wetmap.quantities.board_takeoff_over_origins`);
- ``bill``: one per line of the bill of quantities (``bill_item``, ``bill_unit``,
  ``bill_quantity``, ``rate``, ``amount``, ``currency``), then ``bill total``.

Column names carry their units (``_m2``, ``_m``, ``_c``, ``_ft2``, ``_squares``); the
``_ft2`` and ``_squares`` columns appear when ``[repair] area_units`` asks for them.

A hull side (``kind = "hull"``) speaks hull: ``side_area_*`` instead of ``roof_area_*``,
no board or tear-off columns (a hull is billed by area and edge length), and the bill's
area lines give their areas in ``repair_area_*``.
"""

from __future__ import annotations

import csv
import json
import math
import re
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..quantities import OUTSIDE_SECTIONS, Quantities, SectionTotals, compute_quantities, convert_area

if TYPE_CHECKING:
    from ..pipeline import SurveyResult

__all__ = ["write_summary", "write_quantities", "quantity_columns", "quantities_of", "QUANTITY_COLUMNS",
           "spreadsheet_cell"]

#: The columns every quantities.csv has, in order (unit columns and the bill's follow).
QUANTITY_COLUMNS = (
    "row", "id", "status", "section", "area_m2", "perimeter_m", "delta_mean_c", "delta_max_c",
    "confirmations", "counted_wet",
    "roof_area_m2", "confirmed_wet_area_m2", "unverified_area_m2", "confirmed_dry_area_m2", "wet_area_m2",
    "wet_fraction", "replace_flag", "repair_area_m2", "repair_perimeter_m", "boards", "board_area_m2",
    "tearoff_area_m2",
)

#: Area columns also given in each extra unit (``area_ft2``, ...).
_CONVERTED = ("area", "roof_area", "wet_area", "repair_area", "tearoff_area")

_BILL_COLUMNS = ("bill_item", "bill_unit", "bill_quantity", "rate", "amount", "currency")


#: First characters that make a spreadsheet evaluate a cell as a formula (OWASP, "CSV Injection").
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")


def spreadsheet_cell(value: Any) -> Any:
    """``value`` as a CSV cell that a spreadsheet shows and never evaluates.

    A text starting with ``= + - @``, a tab or a carriage return is prefixed with a single
    quote (OWASP's advice against CSV injection); numbers, and texts that are plain numbers
    (a negative number is a number, not a formula), are left as they are. Every CSV wetmap
    writes passes its cells through here.

    Examples
    --------
    >>> spreadsheet_cell("=SUM(A1:A9)"), spreadsheet_cell("@A1"), spreadsheet_cell("-1.250"), spreadsheet_cell(-3)
    ("'=SUM(A1:A9)", "'@A1", '-1.250', -3)
    """
    if not isinstance(value, str) or not value.startswith(_FORMULA_START) or _NUMBER.match(value):
        return value
    return "'" + value


def _clean(value):
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_clean(v) for v in value]
    return value


def quantities_of(result: "SurveyResult") -> Quantities:
    """The result's quantities step (computed from the result if it does not carry it)."""
    if result.quantities is not None:
        return result.quantities
    s = result.survey
    return compute_quantities([a.geometry for a in result.anomalies], [a.status for a in result.anomalies],
                              outline=result.outline, exclusions=result.exclusions, sections=result.sections,
                              settings=s.repair, prices=s.prices, kind=s.survey.kind)


#: Hull columns: roof names renamed, board and tear-off columns dropped (``None``).
_HULL_NAMES = {"roof_area": "side_area", "boards": None, "board_area": None, "tearoff_area": None}


def _hull_name(column: str) -> str | None:
    for roof, hull in _HULL_NAMES.items():
        if column == roof or column.startswith(roof + "_"):
            return None if hull is None else hull + column[len(roof):]
    return column


def quantity_columns(area_units: tuple[str, ...], *, kind: str = "roof") -> tuple[str, ...]:
    """The quantities.csv header for the given area units and kind of survey.

    >>> quantity_columns(("m2", "ft2"))[-11:-6]
    ('area_ft2', 'roof_area_ft2', 'wet_area_ft2', 'repair_area_ft2', 'tearoff_area_ft2')
    >>> quantity_columns(("m2", "ft2"), kind="hull")[-10:-6]
    ('area_ft2', 'side_area_ft2', 'wet_area_ft2', 'repair_area_ft2')
    """
    extra = tuple(f"{name}_{u}" for u in area_units if u != "m2" for name in _CONVERTED)
    columns = QUANTITY_COLUMNS + extra + _BILL_COLUMNS
    if kind == "hull":
        columns = tuple(c for c in (_hull_name(c) for c in columns) if c is not None)
    return columns


def write_summary(result: "SurveyResult", path: Path) -> None:
    """The totals, warnings, per-section figures and the bill as JSON (areas in m2)."""
    path.write_text(json.dumps(_clean(result.summary()), indent=2, ensure_ascii=False) + "\n", encoding="utf-8")


def _f(value: float | None, digits: int = 3) -> str:
    return "" if value is None or not math.isfinite(value) else f"{value:.{digits}f}"


def write_quantities(result: "SurveyResult", path: Path) -> None:
    """Anomaly, section, total and bill rows (areas m2, lengths m, deltas degC; see the module)."""
    q = quantities_of(result)
    units = tuple(u for u in result.survey.repair.area_units if u != "m2")
    hull = result.survey.survey.kind == "hull"
    columns = quantity_columns(("m2", *units), kind=result.survey.survey.kind)
    counted = {"wet", "unverified"} if result.survey.repair.include_unverified else {"wet"}

    def converted(row: dict[str, Any], **areas_m2: float | None) -> None:
        for name, value in areas_m2.items():
            row[f"{name}_m2"] = _f(value)
            for u in units:
                row[f"{name}_{u}"] = _f(None if value is None else convert_area(value, u))  # type: ignore[arg-type]

    rows: list[dict[str, Any]] = []
    area = perim = counted_area = 0.0
    for a in result.anomalies:
        is_counted = a.status in counted
        row = {"row": "anomaly", "id": a.id, "status": a.status, "section": a.section or "",
               "perimeter_m": _f(a.perimeter_m), "delta_mean_c": _f(a.delta_mean_c),
               "delta_max_c": _f(a.delta_max_c), "confirmations": " ".join(a.confirmations),
               "counted_wet": "yes" if is_counted else "no"}
        converted(row, area=a.area_m2)
        rows.append(row)
        area += a.area_m2
        perim += a.perimeter_m
        counted_area += a.area_m2 if is_counted else 0.0

    def totals_row(kind: str, t: SectionTotals | None, **fields: Any) -> dict[str, Any]:
        row = {"row": kind, **fields}
        if t is not None:
            anomaly_area = t.confirmed_wet_area_m2 + t.unverified_area_m2 + t.confirmed_dry_area_m2
            counted_here = t.confirmed_wet_area_m2 + (t.unverified_area_m2 if "unverified" in counted else 0.0)
            row.update(counted_wet=_f(counted_here), confirmed_wet_area_m2=_f(t.confirmed_wet_area_m2),
                       unverified_area_m2=_f(t.unverified_area_m2), confirmed_dry_area_m2=_f(t.confirmed_dry_area_m2),
                       wet_fraction=_f(t.wet_fraction, 6), replace_flag="yes" if t.replace_flag else "no",
                       boards=t.boards, board_area_m2=_f(t.board_area_m2))
            converted(row, area=anomaly_area, roof_area=t.area_m2, wet_area=t.wet_area_m2,
                      repair_area=t.repair_area_m2, tearoff_area=t.tearoff_area_m2)
        return row

    for t in q.sections:
        rows.append(totals_row("section", t, section=t.name))
    o = q.outside
    if o is not None and (o.area_m2 > 0 or o.boards or o.repair_area_m2 > 0
                          or o.wet_area_m2 + o.confirmed_dry_area_m2 > 0):
        rows.append(totals_row("section", o, section=OUTSIDE_SECTIONS))

    by = {s: 0.0 for s in ("wet", "dry", "unverified")}
    for a in result.anomalies:
        by[a.status] += a.area_m2
    roof_area = result.roof.area
    total = {"row": "total", "status": f"{len(result.anomalies)} anomalies", "perimeter_m": _f(perim),
             "counted_wet": _f(counted_area), "confirmed_wet_area_m2": _f(by["wet"]),
             "unverified_area_m2": _f(by["unverified"]), "confirmed_dry_area_m2": _f(by["dry"]),
             "wet_fraction": _f(q.wet_fraction, 6), "replace_flag": "yes" if q.replace_flag else "no",
             "repair_perimeter_m": _f(q.repair_perimeter_m), "boards": q.takeoff.count,
             "board_area_m2": _f(q.takeoff.board_area_m2)}
    converted(total, area=area, roof_area=roof_area, wet_area=by["wet"] + by["unverified"],
              repair_area=q.repair.area, tearoff_area=q.takeoff.tearoff_area_m2)
    rows.append(total)
    ar = getattr(result, "area_range", None)
    if ar is not None:  # the counted wet area's range across the thresholds the cores allow
        for end, value in (("low end", ar.low_m2), ("high end", ar.high_m2)):
            row = {"row": "range", "status": end}
            converted(row, wet_area=value)
            rows.append(row)

    if q.takeoff.count_range is not None:  # no board origin given: the count over grid origins
        for end, value in zip(("fewest", "most"), q.takeoff.count_range):
            rows.append({"row": "board range", "status": f"{end} over {q.takeoff.origins_tried} grid origins",
                         "boards": value})

    bill = q.bill
    for line in bill.lines:
        row = {"row": "bill", "bill_item": line.item, "bill_unit": line.unit,
               "bill_quantity": _f(line.quantity, 0 if line.unit in ("board", "item") else 2),
               "rate": _f(line.rate, 2), "amount": _f(line.amount, 2), "currency": bill.currency or ""}
        for u, value in line.areas:
            row[f"{'repair_area' if hull else 'tearoff_area'}_{u}"] = _f(value, 2)
        rows.append(row)
    rows.append({"row": "bill", "bill_item": "bill total", "amount": _f(bill.total, 2),
                 "currency": bill.currency or ""})

    if hull:  # hull names; no board or tear-off columns
        rows = [{name: v for name, v in ((_hull_name(k), v) for k, v in r.items()) if name is not None}
                for r in rows]
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=list(columns), restval="")
        w.writeheader()
        w.writerows({k: spreadsheet_cell(v) for k, v in row.items()} for row in rows)
