"""Change between two surveys of the same roof: new, grown, shrunk and gone wet areas.

Owners who re-survey a roof every year want to know whether the wet area is growing
and where. Both surveys' anomaly layers are read (``results/anomalies.gpkg``); the
areas counted as wet (``wet`` and ``unverified`` by default) are compared:

- ``new``: counted wet now, in a place where nothing was counted wet before;
- ``grown``: counted wet now, added to an area that was already counted wet;
- ``shrunk``: counted wet before, no longer, beside an area that still is;
- ``gone``: counted wet before, and nothing of that area is counted wet now.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Literal

import numpy as np
import shapely
from shapely.geometry import Polygon
from shapely.geometry.base import BaseGeometry

from .verdicts import STATUSES, counted_statuses
from .errors import InputFileError, MissingFileError, WetmapError
from .survey import load_survey

__all__ = ["ChangeKind", "Change", "Comparison", "compare_areas", "read_counted", "read_units", "compare_results"]

ChangeKind = Literal["new", "grown", "shrunk", "gone"]
COUNTED_DEFAULT = tuple(sorted(counted_statuses(include_unverified=True), key=STATUSES.index))


@dataclass(frozen=True)
class Change:
    """One changed area (a polygon) and its kind."""

    kind: ChangeKind
    geometry: Polygon
    area_m2: float


@dataclass(frozen=True)
class Comparison:
    """All changes and their totals (m2)."""

    changes: tuple[Change, ...]
    old_wet_m2: float
    new_wet_m2: float
    crs: str | None
    old_areas: tuple[BaseGeometry, ...] = ()
    """The earlier survey's areas counted as wet (for the change map and report)."""
    new_areas: tuple[BaseGeometry, ...] = ()
    """The later survey's areas counted as wet."""
    counted: tuple[str, ...] = COUNTED_DEFAULT
    """The statuses counted as wet."""
    units: str = "metric"
    """How the change map and report show figures: the later survey's ``[report] units``."""

    def totals(self) -> dict[str, float]:
        by = {k: 0.0 for k in ("new", "grown", "shrunk", "gone")}
        for c in self.changes:
            by[c.kind] += c.area_m2
        return by

    def summary(self) -> dict:
        t = self.totals()
        growth = self.new_wet_m2 - self.old_wet_m2
        return {
            "old_wet_area_m2": round(self.old_wet_m2, 4),
            "new_wet_area_m2": round(self.new_wet_m2, 4),
            "growth_m2": round(growth, 4),
            "growth_pct": round(100.0 * growth / self.old_wet_m2, 2) if self.old_wet_m2 > 0 else None,
            **{f"{k}_m2": round(v, 4) for k, v in t.items()},
            "counts": {k: sum(1 for c in self.changes if c.kind == k) for k in t},
        }


def _parts(geom: BaseGeometry) -> list[Polygon]:
    return [p for p in shapely.get_parts(geom) if isinstance(p, Polygon) and not p.is_empty]


def compare_areas(old: list[BaseGeometry], new: list[BaseGeometry], *, min_part_m2: float = 0.0,
                  crs: str | None = None) -> Comparison:
    """Classify the differences between two sets of wet areas (plan coordinates).

    Parameters
    ----------
    old, new
        Areas counted as wet in the earlier and the later survey.
    min_part_m2
        Changed parts smaller than this are left out (slivers along a re-traced boundary).

    Examples
    --------
    >>> from shapely.geometry import box
    >>> c = compare_areas([box(0, 0, 2, 2), box(10, 0, 11, 1)], [box(0, 0, 3, 2), box(20, 0, 21, 2)])
    >>> sorted((ch.kind, ch.area_m2) for ch in c.changes)
    [('gone', 1.0), ('grown', 2.0), ('new', 2.0)]
    """
    old_u = shapely.union_all(np.asarray(old, dtype=object)) if old else Polygon()
    new_u = shapely.union_all(np.asarray(new, dtype=object)) if new else Polygon()
    changes: list[Change] = []
    for diff, other, (touching, alone) in (
        (new_u.difference(old_u), old_u, ("grown", "new")),
        (old_u.difference(new_u), new_u, ("shrunk", "gone")),
    ):
        sources = _parts(new_u if touching == "grown" else old_u)
        for part in _parts(diff):
            if part.area < max(min_part_m2, 1e-9):
                continue
            source = next((s for s in sources if s.intersection(part).area > 0.5 * part.area), part)
            kind = touching if source.intersection(other).area > 0 else alone
            changes.append(Change(kind=kind, geometry=part, area_m2=float(part.area)))  # type: ignore[arg-type]
    return Comparison(changes=tuple(changes), old_wet_m2=float(old_u.area), new_wet_m2=float(new_u.area), crs=crs,
                      old_areas=tuple(_parts(old_u)), new_areas=tuple(_parts(new_u)))


def _results_dir(path: Path) -> Path:
    path = Path(path)
    for candidate in (path, path / "results"):
        if (candidate / "anomalies.gpkg").is_file():
            return candidate
    raise MissingFileError(
        f"{path}: no anomalies.gpkg here or in {path / 'results'}; run `wetmap run` on that survey first"
    )


def read_counted(path: Path, *, counted: tuple[str, ...] = COUNTED_DEFAULT) -> tuple[list[BaseGeometry], str | None, float | None]:
    """Areas counted as wet in a survey's results, with its CRS and roof area."""
    import pyogrio

    results = _results_dir(path)
    frame = pyogrio.read_dataframe(results / "anomalies.gpkg", layer="anomalies")
    if "status" not in frame.columns:
        raise InputFileError(f"{results / 'anomalies.gpkg'}: no 'status' column; expected wetmap's anomaly layer")
    geoms = [g for g, s in zip(frame.geometry.values, frame["status"]) if s in counted]
    roof = None
    summary = results / "summary.json"
    if summary.is_file():
        roof = json.loads(summary.read_text(encoding="utf-8")).get("roof_area_m2")
    crs = frame.crs.to_string() if frame.crs is not None else None
    return geoms, crs, roof


def read_units(path: Path) -> str:
    """The ``[report] units`` of a run survey (``"metric"`` or ``"imperial"``).

    Read from its results' ``summary.json`` (``method.units``, what the run showed its
    figures in); for results written before that key, from the survey folder's
    ``survey.toml`` (``path`` itself or the results folder's parent); ``"metric"`` when
    neither says.
    """
    results = _results_dir(path)
    summary = results / "summary.json"
    if summary.is_file():
        try:
            units = json.loads(summary.read_text(encoding="utf-8")).get("method", {}).get("units")
        except (ValueError, AttributeError):
            units = None
        if units in ("metric", "imperial"):
            return units
    for folder in (Path(path), results.parent):
        if (folder / "survey.toml").is_file():
            try:
                return load_survey(folder).report.units
            except WetmapError:  # a survey.toml edited since the run: its figures stay metric
                return "metric"
    return "metric"


def compare_results(old: Path, new: Path, *, counted: tuple[str, ...] = COUNTED_DEFAULT,
                    min_part_m2: float = 0.0) -> Comparison:
    """Compare two surveys' results folders (or survey folders holding ``results/``).

    The comparison is shown in the later survey's units (:func:`read_units`).

    Raises
    ------
    InputFileError
        The two surveys are not on the same plan (another CRS, or roof areas differing
        by more than 1 %).
    """
    old_geoms, old_crs, old_roof = read_counted(old, counted=counted)
    new_geoms, new_crs, new_roof = read_counted(new, counted=counted)
    if old_crs != new_crs:
        raise InputFileError(
            f"{new}: plan CRS {new_crs or 'local'} differs from {old}'s {old_crs or 'local'}; "
            "compare surveys drawn on the same plan"
        )
    if old_roof and new_roof and abs(old_roof - new_roof) > 0.01 * old_roof:
        raise InputFileError(
            f"{new}: roof area {new_roof:.1f} m2 differs from {old}'s {old_roof:.1f} m2 by more than 1 %; "
            "compare surveys drawn on the same plan (same outline and exclusions)"
        )
    return replace(compare_areas(old_geoms, new_geoms, min_part_m2=min_part_m2, crs=new_crs), counted=counted,
                   units=read_units(new))
