"""``summary.json`` and ``quantities.csv``."""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from ..pipeline import SurveyResult

__all__ = ["write_summary", "write_quantities", "QUANTITY_COLUMNS"]

QUANTITY_COLUMNS = (
    "row", "id", "status", "section", "area_m2", "perimeter_m", "delta_mean_c", "delta_max_c",
    "confirmations", "counted_wet",
)


def _clean(value):
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_clean(v) for v in value]
    return value


def write_summary(result: "SurveyResult", path: Path) -> None:
    """The totals, warnings and per-section figures as JSON (areas in m2)."""
    path.write_text(json.dumps(_clean(result.summary()), indent=2, ensure_ascii=False) + "\n", encoding="utf-8")


def write_quantities(result: "SurveyResult", path: Path) -> None:
    """One row per anomaly, then a total row (areas in m2, lengths in m, deltas in degC)."""
    counted = {"wet", "unverified"} if result.survey.repair.include_unverified else {"wet"}
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(QUANTITY_COLUMNS)
        area = perim = counted_area = 0.0
        for a in result.anomalies:
            is_counted = a.status in counted
            w.writerow(["anomaly", a.id, a.status, a.section or "", f"{a.area_m2:.3f}", f"{a.perimeter_m:.3f}",
                        f"{a.delta_mean_c:.3f}", f"{a.delta_max_c:.3f}", " ".join(a.confirmations),
                        "yes" if is_counted else "no"])
            area += a.area_m2
            perim += a.perimeter_m
            counted_area += a.area_m2 if is_counted else 0.0
        w.writerow(["total", "", f"{len(result.anomalies)} anomalies", "", f"{area:.3f}", f"{perim:.3f}", "", "",
                    "", f"{counted_area:.3f}"])
