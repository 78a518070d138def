"""``summary.json``, the take-off CSV files and ``takeoff.xlsx``.

Each CSV holds one kind of row, so that a plain SUM of a column is meaningful:

- ``quantities.csv``: one row per anomaly (``row`` = ``anomaly``), then the ``total`` row;
  ``counted_wet`` is ``yes``/``no`` on anomaly rows, the area counted as wet is
  ``counted_wet_area_m2`` on the total row;
- ``sections.csv``: one row per roof section, then ``(outside sections)`` for the part of
  the roof in no section (only when sections were given); these rows add up to the total;
- ``wet_area_range.csv``: ``low end`` and ``high end`` of the counted wet area
  (``wet_area_*``) at the thresholds of :func:`wetmap.verdicts.area_thresholds`, widened by
  the outline's uncertainty (written when the cores give a range);
- ``board_range.csv``: without ``[repair] board_origin``, the ``fewest`` and ``most``
  whole ``boards`` over the board-grid origins tried; the total row gives the median
  (:func:`wetmap.quantities.board_takeoff_over_origins`);
- ``bill.csv``: one row per line of the bill of quantities, then ``bill total``.

``takeoff.xlsx`` holds the same tables, one sheet each, with totals as formulas.

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

import numpy as np

from ..quantities import OUTSIDE_SECTIONS, Quantities, SectionTotals, compute_quantities, convert_area

if TYPE_CHECKING:
    from ..results import SurveyResult

__all__ = ["write_summary", "write_quantities", "write_takeoff", "quantity_tables", "quantity_columns",
           "quantities_of", "spreadsheet_cell", "QUANTITY_COLUMNS", "SECTION_COLUMNS", "BILL_COLUMNS",
           "TAKEOFF_FILES"]

#: The columns every quantities.csv has, in order (unit columns and the bill's follow).
QUANTITY_COLUMNS = (
    "row", "id", "status", "section", "area_m2", "perimeter_m", "delta_mean_c", "delta_max_c",
    "confirmations", "counted_wet",
    "roof_area_m2", "confirmed_wet_area_m2", "unverified_area_m2", "confirmed_dry_area_m2", "wet_area_m2",
    "wet_fraction", "replace_flag", "repair_area_m2", "repair_perimeter_m", "boards", "board_area_m2",
    "tearoff_area_m2", "counted_wet_area_m2",
)

#: Area columns also given in each extra unit (``area_ft2``, ...).
_CONVERTED = ("area", "roof_area", "wet_area", "repair_area", "tearoff_area")


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
                              settings=s.repair, prices=s.prices, kind=s.survey.kind,
                              wet_thickness_mm=result.confirmations.wet_thickness_mm)


#: Hull columns: roof names renamed, board and tear-off columns dropped (``None``).
_HULL_NAMES = {"roof_area": "side_area", "boards": None, "board_area": None, "tearoff_area": None}


def _hull_name(column: str) -> str | None:
    for roof, hull in _HULL_NAMES.items():
        if column == roof or column.startswith(roof + "_"):
            return None if hull is None else hull + column[len(roof):]
    return column


def quantity_columns(area_units: tuple[str, ...], *, kind: str = "roof") -> tuple[str, ...]:
    """The quantities.csv header for the given area units and kind of survey.

    >>> quantity_columns(("m2", "ft2"))[-5:]
    ('area_ft2', 'roof_area_ft2', 'wet_area_ft2', 'repair_area_ft2', 'tearoff_area_ft2')
    >>> quantity_columns(("m2", "ft2"), kind="hull")[-4:]
    ('area_ft2', 'side_area_ft2', 'wet_area_ft2', 'repair_area_ft2')
    """
    extra = tuple(f"{name}_{u}" for u in area_units if u != "m2" for name in _CONVERTED)
    columns = QUANTITY_COLUMNS + extra
    if kind == "hull":
        columns = tuple(c for c in (_hull_name(c) for c in columns) if c is not None)
    return columns


def write_summary(result: "SurveyResult", path: Path) -> None:
    """The totals, warnings, per-section figures and the bill as JSON (areas in m2)."""
    path.write_text(json.dumps(_clean(result.summary()), indent=2, ensure_ascii=False) + "\n", encoding="utf-8")


def _f(value: float | None, digits: int = 3) -> str:
    return "" if value is None or not math.isfinite(value) else f"{value:.{digits}f}"


#: Columns of sections.csv (areas per section; unit columns follow), of wet_area_range.csv and of bill.csv.
SECTION_COLUMNS = (
    "section", "area_m2", "counted_wet_area_m2", "roof_area_m2", "confirmed_wet_area_m2", "unverified_area_m2",
    "confirmed_dry_area_m2", "wet_area_m2", "wet_fraction", "replace_flag", "repair_area_m2", "boards",
    "board_area_m2", "tearoff_area_m2",
)
RANGE_COLUMNS = ("end", "wet_area_m2")
BOARD_RANGE_COLUMNS = ("end", "origins_tried", "boards")
BILL_COLUMNS = ("bill_item", "description", "bill_unit", "bill_quantity", "rate", "amount", "currency")


def _with_units(columns: tuple[str, ...], units: tuple[str, ...], kind: str) -> tuple[str, ...]:
    extra = tuple(f"{name}_{u}" for u in units if u != "m2" for name in _CONVERTED if f"{name}_m2" in columns)
    out = columns + extra
    if kind == "hull":
        out = tuple(c for c in (_hull_name(c) for c in out) if c is not None)
    return out


def quantity_tables(result: "SurveyResult") -> dict[str, tuple[tuple[str, ...], list[dict[str, Any]]]]:
    """The take-off as separate tables, each ``name -> (columns, rows)``; every value a text.

    ``quantities``: one row per anomaly, then a total row; ``sections``: one row per
    section (then ``(outside sections)``), adding up to the total; ``wet_area_range``: the
    low and high end of the counted wet area; ``bill``: the bill of quantities, then its
    total. ``counted_wet`` is ``yes``/``no`` on anomaly rows; the area counted as wet is
    ``counted_wet_area_m2`` (total and section rows).
    """
    q = quantities_of(result)
    units = tuple(u for u in result.survey.repair.area_units if u != "m2")
    kind = result.survey.survey.kind
    hull = kind == "hull"
    counted = result.counted_statuses

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

    def totals_row(t: SectionTotals, name: str) -> dict[str, Any]:
        anomaly_area = t.confirmed_wet_area_m2 + t.unverified_area_m2 + t.confirmed_dry_area_m2
        counted_here = t.confirmed_wet_area_m2 + (t.unverified_area_m2 if "unverified" in counted else 0.0)
        row = {"section": name, "counted_wet_area_m2": _f(counted_here),
               "confirmed_wet_area_m2": _f(t.confirmed_wet_area_m2), "unverified_area_m2": _f(t.unverified_area_m2),
               "confirmed_dry_area_m2": _f(t.confirmed_dry_area_m2), "wet_fraction": _f(t.wet_fraction, 6),
               "replace_flag": "yes" if t.replace_flag else "no", "boards": t.boards,
               "board_area_m2": _f(t.board_area_m2)}
        converted(row, area=anomaly_area, roof_area=t.area_m2, wet_area=t.wet_area_m2,
                  repair_area=t.repair_area_m2, tearoff_area=t.tearoff_area_m2)
        return row

    sections = [totals_row(t, t.name) for t in q.sections]
    o = q.outside
    if o is not None and (o.area_m2 > 0 or o.boards or o.repair_area_m2 > 0
                          or o.wet_area_m2 + o.confirmed_dry_area_m2 > 0):
        sections.append(totals_row(o, OUTSIDE_SECTIONS))

    by = {s: 0.0 for s in ("wet", "dry", "unverified")}
    for a in result.anomalies:
        by[a.status] += a.area_m2
    roof_area = result.roof.area
    total = {"row": "total", "status": f"{len(result.anomalies)} anomalies", "perimeter_m": _f(perim),
             "counted_wet_area_m2": _f(counted_area), "confirmed_wet_area_m2": _f(by["wet"]),
             "unverified_area_m2": _f(by["unverified"]), "confirmed_dry_area_m2": _f(by["dry"]),
             "wet_fraction": _f(q.wet_fraction, 6), "replace_flag": "yes" if q.replace_flag else "no",
             "repair_perimeter_m": _f(q.repair_perimeter_m), "boards": q.takeoff.count,
             "board_area_m2": _f(q.takeoff.board_area_m2)}
    converted(total, area=area, roof_area=roof_area, wet_area=by["wet"] + by["unverified"],
              repair_area=q.repair.area, tearoff_area=q.takeoff.tearoff_area_m2)
    rows.append(total)

    ranges: list[dict[str, Any]] = []
    ar = getattr(result, "area_range", None)
    if ar is not None:  # the counted wet area's range across the thresholds the cores allow
        for end, value in (("low end", ar.low_m2), ("high end", ar.high_m2)):
            row = {"end": end}
            converted(row, wet_area=value)
            ranges.append(row)

    board_range: list[dict[str, Any]] = []
    if q.takeoff.count_range is not None:  # no board origin given: the count over grid origins
        for end, value in zip(("fewest", "most"), q.takeoff.count_range):
            board_range.append({"end": end, "origins_tried": q.takeoff.origins_tried, "boards": value})

    bill = q.bill
    bill_rows: list[dict[str, Any]] = []
    for line in bill.lines:
        row = {"bill_item": line.item, "description": line.description, "bill_unit": line.unit,
               "bill_quantity": _f(line.quantity, 0 if line.unit in ("board", "item") else 2),
               "rate": _f(line.rate, 2), "amount": _f(line.amount, 2), "currency": bill.currency or ""}
        for u, value in line.areas:
            row[f"{'repair_area' if hull else 'tearoff_area'}_{u}"] = _f(value, 2)
        bill_rows.append(row)
    bill_rows.append({"bill_item": "bill total", "amount": _f(bill.total, 2), "currency": bill.currency or ""})
    area_name = "repair_area" if hull else "tearoff_area"
    bill_columns = BILL_COLUMNS + tuple(f"{area_name}_{u}" for u in ("m2", *units))

    def renamed(table: list[dict[str, Any]]) -> list[dict[str, Any]]:
        if not hull:
            return table
        return [{name: v for name, v in ((_hull_name(k), v) for k, v in r.items()) if name is not None}
                for r in table]

    cores_columns, core_rows = core_log(result)
    return {
        "quantities": (quantity_columns(("m2", *units), kind=kind), renamed(rows)),
        "sections": (_with_units(SECTION_COLUMNS, ("m2", *units), kind), renamed(sections)),
        "wet_area_range": (_with_units(RANGE_COLUMNS, ("m2", *units), kind), ranges),
        "board_range": (BOARD_RANGE_COLUMNS, [] if hull else board_range),
        "bill": (bill_columns, bill_rows),
        "cores": (cores_columns, core_rows),
    }


#: Leading columns of the core log (core_log.csv, the takeoff's "cores" sheet); the
#: columns of cores.csv beyond the judged ones follow (layers, thickness_mm, photo, ...).
CORE_LOG_COLUMNS = ("id", "x", "y", "grade", "counted_as", "basis", "value", "delta_c", "anomaly")


def core_log(result: "SurveyResult") -> tuple[tuple[str, ...], list[dict[str, Any]]]:
    """The cores as judged: one row per row of cores.csv, texts.

    ``grade`` is the trade's word (``wet``, ``damp``, ``dry``; a reading or sounding gives
    ``wet`` or ``dry``), ``counted_as`` what the statuses and quantities used (a damp core
    counts as ``[cores] damp_counts_as`` says). With imperial units a ``thickness_in``
    column follows ``thickness_mm`` (1 in = 25.4 mm, NIST SP 811).
    """
    c = result.confirmations
    extra = list(c.extra)
    imperial = getattr(getattr(result.survey, "report", None), "units", "metric") == "imperial"
    columns = list(CORE_LOG_COLUMNS) + extra
    if imperial and "thickness_mm" in extra:
        columns.insert(columns.index("thickness_mm") + 1, "thickness_in")
    rows = []
    for i, cid in enumerate(c.ids):
        row = {"id": cid, "x": _f(float(c.xs[i]), 3), "y": _f(float(c.ys[i]), 3), "grade": c.grade[i],
               "counted_as": "wet" if c.wet[i] else "dry", "basis": c.basis[i],
               "value": "" if not np.isfinite(c.values[i]) else _f(float(c.values[i]), 3),
               "delta_c": _f(float(result.confirmation_delta_c[i]), 3),
               "anomaly": str(int(result.verdicts.anomaly_of[i]) + 1) if result.verdicts.anomaly_of[i] >= 0 else ""}
        row.update({k: c.extra[k][i] for k in extra})
        if "thickness_in" in columns and c.extra["thickness_mm"][i]:
            row["thickness_in"] = _f(float(c.extra["thickness_mm"][i]) / 25.4, 2)
        rows.append(row)
    return tuple(columns), rows


#: The files of :func:`write_quantities`, beside quantities.csv.
TAKEOFF_FILES = {"sections": "sections.csv", "wet_area_range": "wet_area_range.csv",
                 "board_range": "board_range.csv", "bill": "bill.csv", "cores": "core_log.csv"}


def _write_csv(path: Path, columns: tuple[str, ...], rows: list[dict[str, Any]]) -> None:
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=list(columns), restval="", extrasaction="ignore")
        w.writeheader()
        w.writerows({k: spreadsheet_cell(v) for k, v in r.items()} for r in rows)


def write_quantities(result: "SurveyResult", path: Path) -> None:
    """quantities.csv (anomaly rows, then the total row) and beside it sections.csv,
    wet_area_range.csv (when the cores give a range) and bill.csv (areas m2, lengths m,
    deltas degC; see :func:`quantity_tables`)."""
    path = Path(path)
    tables = quantity_tables(result)
    _write_csv(path, *tables["quantities"])
    for name, file in TAKEOFF_FILES.items():
        columns, rows = tables[name]
        if rows:
            _write_csv(path.parent / file, columns, rows)


def _number(text: Any) -> Any:
    """A CSV text as a number when it is one (spreadsheets sum numbers, not texts)."""
    if isinstance(text, (int, float)) or not isinstance(text, str) or not text:
        return text if text != "" else None
    try:
        return int(text) if text.lstrip("-").isdigit() else float(text)
    except ValueError:
        return spreadsheet_cell(text)


def write_takeoff(result: "SurveyResult", path: Path) -> None:
    """``takeoff.xlsx``: one sheet per table of :func:`quantity_tables` (openpyxl).

    Numbers are stored as numbers and texts as texts (a text that looks like a formula is
    quoted by :func:`spreadsheet_cell`). Totals a contractor can audit are formulas: on the anomalies sheet the total
    row sums the anomaly rows' areas and perimeters; on the sections sheet a last row sums
    the sections; on the bill sheet each priced amount is ``ROUND(quantity * rate, 2)`` and
    the total sums the amounts. Header cells name the unit (``area_m2``, ``perimeter_m``).
    """
    from openpyxl import Workbook
    from openpyxl.styles import Font
    from openpyxl.utils import get_column_letter

    tables = quantity_tables(result)
    wb = Workbook()
    wb.remove(wb.active)
    bold = Font(bold=True)
    sheet_names = {"quantities": "anomalies", "sections": "sections", "wet_area_range": "wet area range",
                   "board_range": "board range", "bill": "bill", "cores": "cores"}
    for name, (columns, rows) in tables.items():
        if not rows and name != "quantities":
            continue
        ws = wb.create_sheet(sheet_names[name])
        ws.append(list(columns))
        for cell in ws[1]:
            cell.font = bold
        col = {c: get_column_letter(i + 1) for i, c in enumerate(columns)}
        for r in rows:
            ws.append([_number(r.get(c, "")) for c in columns])
        n = len(rows) + 1  # last data row
        if name == "quantities" and rows and rows[-1].get("row") == "total":
            first, last = 2, n - 1  # anomaly rows
            if last >= first:
                sums = [c for c in columns if c.startswith("area_") or c == "perimeter_m"]
                for c in sums:
                    ws[f"{col[c]}{n}"] = f"=SUM({col[c]}{first}:{col[c]}{last})"
            for cell in ws[n]:
                cell.font = bold
        elif name == "sections" and rows:
            ws.append(["total of the sections"])
            for c in columns:
                if c != "section" and c not in ("wet_fraction", "replace_flag"):
                    ws[f"{col[c]}{n + 1}"] = f"=SUM({col[c]}2:{col[c]}{n})"
            for cell in ws[n + 1]:
                cell.font = bold
        elif name == "bill":
            for i, r in enumerate(rows[:-1], start=2):
                if r.get("rate") and r.get("bill_quantity"):
                    ws[f"{col['amount']}{i}"] = f"=ROUND({col['bill_quantity']}{i}*{col['rate']}{i},2)"
            if any(r.get("amount") for r in rows[:-1]):
                ws[f"{col['amount']}{n}"] = f"=SUM({col['amount']}2:{col['amount']}{n - 1})"
            for cell in ws[n]:
                cell.font = bold
        for c, letter in col.items():
            ws.column_dimensions[letter].width = max(10, min(40, len(c) + 2))
        ws.freeze_panes = "A2"
    wb.save(Path(path))
