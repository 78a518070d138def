"""The result model: what a run computed, the rule of what counts as wet, the summary schema.

Every exporter (:mod:`wetmap.export`) and the CLI read a :class:`SurveyResult`; none of
them depends on :mod:`wetmap.pipeline`, which builds it. ``summary.json`` is
:meth:`SurveyResult.summary` (written by :func:`wetmap.export.tables.write_summary`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from shapely.geometry import Polygon
from shapely.geometry.base import BaseGeometry

from . import __version__
from .verdicts import NOT_REFUTED, AreaRange, Status, SuggestedCore, ThresholdCheck, Verdicts, counted_statuses
from .confirmations import Confirmations
from .detect import Detection, large_share
from .image_checks import ImageryReport
from .passes import PassComparison
from .photos import Photo
from .quantities import OUTSIDE_SECTIONS, BoardTakeoff, Quantities, SectionTotals
from .radiometry import Radiometry
from .rasters import PlanGrid
from .register import FrameReport
from .survey import Survey
from .tiles import FullRasters
from .vectors import Section
from .wording import wording_of

__all__ = ["Anomaly", "Coverage", "CoresThreshold", "SurveyResult", "HULL_AXES", "OUTSIDE_SECTIONS",
           "large_wet_shares", "area_word", "RESULT_FILES"]

#: Files every run writes (map.html and report.html are added by their exporters).
RESULT_FILES = (
    "summary.json",
    "anomalies.gpkg",
    "anomalies.geojson",
    "repair.gpkg",
    "repair.dxf",
    "quantities.csv",
    "bill.csv",
    "takeoff.xlsx",
    "surface_c.tif",
    "delta_c.tif",
)


@dataclass(frozen=True)
class Anomaly:
    """One anomaly polygon with its attributes (names as in the output format)."""

    id: int
    geometry: Polygon
    """The outline simplified within :data:`wetmap.polygons.SIMPLIFY_TOLERANCE_PX` of a pixel
    (what the repair margin, the files, the map and the report draw); ``area_m2`` and
    ``perimeter_m`` are measured on the exact outline."""
    status: Status
    area_m2: float
    perimeter_m: float
    delta_mean_c: float
    delta_max_c: float
    confirmations: tuple[str, ...]
    section: str | None
    flags: str = ""
    """Imagery flags (``"; "``-separated): ``reflection suspect``, ``under-resolved`` (:mod:`wetmap.image_checks`)."""
    exact: Polygon | None = None
    """The exact outline ``area_m2``, ``perimeter_m`` and the imagery checks are measured on
    (``geometry`` is its simplified copy); ``None``: ``geometry`` is exact."""


@dataclass(frozen=True)
class Coverage:
    """How much of the surveyed area has thermal data, m2 (``summary.json`` ``coverage``)."""

    roof_pixels_m2: float
    """Pixels whose centre lies in the surveyed part of the roof, as area."""
    covered_m2: float
    """Of those, the pixels with thermal data."""
    uncovered_m2: float
    uncovered_pct: float
    """``uncovered_m2`` as a percentage of ``roof_pixels_m2`` (100 with no roof pixel)."""
    edge_band_m2: float | None = None
    """The band along the outline left out (``[detect] edge_buffer_m``), when asked for."""
    exclusion_band_m2: float | None = None
    """The band around the exclusions left out (``[detect] exclusion_buffer_m``), when asked for."""

    @classmethod
    def of_pixels(cls, roof_px: int, covered_px: int, pixel_area_m2: float, *,
                  bands_m2: dict[str, float] | None = None) -> "Coverage":
        """From pixel counts; ``bands_m2`` as :func:`wetmap.pipeline.surveyed_part` returns them.

        >>> Coverage.of_pixels(200, 150, 0.25).as_dict()
        {'roof_pixels_m2': 50.0, 'covered_m2': 37.5, 'uncovered_m2': 12.5, 'uncovered_pct': 25.0}
        """
        return cls(roof_pixels_m2=roof_px * pixel_area_m2, covered_m2=covered_px * pixel_area_m2,
                   uncovered_m2=(roof_px - covered_px) * pixel_area_m2,
                   uncovered_pct=100.0 * (roof_px - covered_px) / roof_px if roof_px else 100.0,
                   **(bands_m2 or {}))

    def as_dict(self) -> dict[str, float]:
        """The figures by name; a band only when it was asked for."""
        return {k: v for k, v in vars(self).items() if v is not None}


@dataclass(frozen=True)
class CoresThreshold:
    """``[detect] delta_c = "cores"``: the range the cores allow and its middle, degC."""

    low_c: float
    """Largest delta-T at a dry core."""
    high_c: float
    """Smallest delta-T at a wet core."""
    chosen_c: float
    wet: int
    dry: int


@dataclass(frozen=True)
class SurveyResult:
    """Everything a run computed; exporters read only this."""

    survey: Survey
    grid: PlanGrid
    surface_c: np.ndarray
    detection: Detection
    outline: BaseGeometry
    exclusions: BaseGeometry
    roof: BaseGeometry
    sections: tuple[Section, ...]
    anomalies: tuple[Anomaly, ...]
    confirmations: Confirmations
    verdicts: Verdicts
    confirmation_delta_c: np.ndarray
    repair: BaseGeometry
    takeoff: BoardTakeoff
    section_totals: tuple[SectionTotals, ...]
    radiometry: Radiometry
    coverage: Coverage
    warnings: tuple[str, ...] = field(default_factory=tuple)
    passes: PassComparison | None = None
    """Several passes of one night compared (``None`` for a single pass)."""
    quantities: Quantities | None = None
    """The whole quantities step (outside-sections figures, board sections, bill)."""
    threshold: ThresholdCheck | None = None
    """The chosen threshold against the confirmations."""
    area_range: AreaRange | None = None
    """The counted wet area with its range."""
    suggested_cores: tuple[SuggestedCore, ...] = ()
    """Where one more core is worth most."""
    registration: tuple[FrameReport, ...] = ()
    """Registration figures of each ``[[frame]]`` of the primary pass."""
    full_rasters: FullRasters | None = None
    """Processed in windows (:mod:`wetmap.tiles`): the full-resolution ``surface_c.tif`` and
    ``delta_c.tif`` on disk and the full grid. ``grid``, ``surface_c`` and ``detection``'s
    arrays are then a preview (block means, :data:`wetmap.windows.PREVIEW_MAX_SIDE`); the
    anomalies and their statistics are exact. ``None``: the whole array is in memory."""
    imagery: ImageryReport | None = None
    """Resolution, focus, reflection and display-range findings."""
    cores_threshold: CoresThreshold | None = None
    """``[detect] delta_c = "cores"``: the range the cores allowed and the threshold taken."""
    section_checks: tuple[tuple[str, ThresholdCheck], ...] = ()
    """``(section name, ThresholdCheck)``: the threshold against the cores inside each section."""
    photos: tuple[tuple[Photo, int, float], ...] = ()
    """``(photo, index of the nearest anomaly or -1, distance to its outline m)``: the usable
    site photos, cores' first then photos.csv's (:mod:`wetmap.photos`)."""

    @property
    def counted_statuses(self) -> frozenset[Status]:
        """The statuses counted as wet for the repair (``[repair] include_unverified``;
        :func:`wetmap.verdicts.counted_statuses`). Every table, figure, map and the
        repair outline count by this one rule."""
        return counted_statuses(include_unverified=self.survey.repair.include_unverified)

    def is_counted(self, anomaly: Anomaly) -> bool:
        """Whether ``anomaly`` is counted as wet for the repair (:attr:`counted_statuses`)."""
        return anomaly.status in self.counted_statuses

    def summary(self) -> dict[str, Any]:
        """The ``summary.json`` content (areas in m2)."""
        by: dict[str, float] = {"wet": 0.0, "dry": 0.0, "unverified": 0.0}
        for a in self.anomalies:
            by[a.status] += a.area_m2
        roof_area = self.roof.area
        wet = sum(by[st] for st in NOT_REFUTED)
        d, s = self.detection, self.survey
        bg = self.background_entries()
        return {
            "title": s.survey.title,
            "kind": s.survey.kind,
            "crs": s.survey.crs,
            "side": s.survey.side,
            "area_label": area_word(s),
            **({"plan_axes": dict(HULL_AXES)} if s.survey.kind == "hull" else {}),
            "roof_area_m2": round(roof_area, 4),
            "anomaly_count": len(self.anomalies),
            "wet_area_m2": round(wet, 4),
            "confirmed_wet_area_m2": round(by["wet"], 4),
            "unverified_area_m2": round(by["unverified"], 4),
            "confirmed_dry_area_m2": round(by["dry"], 4),
            "wet_fraction": round(wet / roof_area, 6) if roof_area > 0 else 0.0,
            "repair_area_m2": round(self.repair.area, 4),
            "boards": self.takeoff.count,
            "boards_range": list(self.takeoff.count_range) if self.takeoff.count_range is not None else None,
            "board_area_m2": round(self.takeoff.board_area_m2, 4),
            "tearoff_area_m2": round(self.takeoff.tearoff_area_m2, 4),
            **self._quantity_entries(),
            "warnings": list(self.warnings),
            **({"passes": self.passes.summary()} if self.passes is not None else {}),
            **self._calibration_entries(),
            **({"imagery": self.imagery.as_dict(),
                "reflection_suspect": [r.as_dict() for r in self.imagery.reflections]}
               if self.imagery is not None else {}),
            "sections": [
                {**{k: (round(v, 4) if isinstance(v, float) else v) for k, v in vars(t).items()},
                 **({"background": bg[t.name]["method"]} if t.name in bg else {})}
                for t in self.section_totals
            ],
            "background": list(bg.values()),
            "large_wet_share": [{"where": w, "wet_fraction": round(f, 6)}
                                for w, f in large_wet_shares(self.quantities, s)],
            "coverage": {k: round(v, 4) for k, v in self.coverage.as_dict().items()},
            "registration": [r.as_dict() for r in self.registration],
            "confirmations": {
                "count": len(self.confirmations),
                "wet": int(self.confirmations.wet.sum()),
                "dry": int((~self.confirmations.wet).sum()),
                "outside_anomalies": int((self.verdicts.anomaly_of < 0).sum()),
            },
            "method": {
                "band_um": list(self.radiometry.band_um),
                "emissivity": self.radiometry.emissivity,
                **({"section_emissivity": {sec.name: sec.emissivity for sec in self.sections
                                           if sec.emissivity is not None}}
                   if any(sec.emissivity is not None for sec in self.sections) else {}),
                "reflected_c": round(self.radiometry.reflected_c, 3),
                "reflected_source": self.radiometry.reflected_source,
                "reflected_estimated": not self.radiometry.reflected_source.startswith("measured"),
                "transmittance": round(self.radiometry.transmittance, 5),
                "transmittance_source": self.radiometry.transmittance_source,
                "delta_c": d.threshold_c,
                "delta_c_source": ("the middle of the range the cores allow" if self.cores_threshold is not None
                                   else "[detect] delta_c"),
                **({"delta_c_cores": {"dry_max_c": self.cores_threshold.low_c, "wet_min_c": self.cores_threshold.high_c,
                                      "wet_cores": self.cores_threshold.wet, "dry_cores": self.cores_threshold.dry}}
                   if self.cores_threshold is not None else {}),
                "background": s.detect.background,
                "background_m": round(d.background_m, 3),
                "min_area_m2": s.detect.min_area_m2,
                "pixel_m": (self.full_rasters.grid if self.full_rasters is not None else self.grid).pixel_m,
                "pixel_m_source": _pixel_source(s),
                "perimeter": "length of the smoothed outline (mid-edge rule), not the pixel staircase",
                "margin_m": s.repair.margin_m,
                "board_m": list(s.repair.board_m) if s.repair.board_m else None,
                "include_unverified": s.repair.include_unverified,
                "board_angle_deg": round(self.takeoff.angle_deg, 6) if s.repair.board_m else None,
                "board_origin": [round(v, 4) for v in self.takeoff.origin_xy] if s.repair.board_m else None,
                "board_origin_rule": self.takeoff.origin_rule if s.repair.board_m else None,
                "replace_above_pct": s.repair.replace_above_pct,
                "area_units": list(s.repair.area_units),
                "units": getattr(getattr(s, "report", None), "units", "metric"),  # [report] units of the outputs
                "processing": self._processing(),
            },
            "wetmap_version": __version__,
        }

    def background_entries(self) -> dict[str, dict[str, Any]]:
        """The dry background of each section (method, reason, trend figures), by section name.

        The rest of the roof outside every section is listed only when it has thermal data.
        """
        model = getattr(self.detection, "background", None)
        if model is None:
            return {}
        return {e.name: e.as_dict() for e in model.sections
                if not (e.method == "none" and e.name == OUTSIDE_SECTIONS)}

    def _processing(self) -> dict[str, Any]:
        """summary.json ``method.processing``: whole array, or windows and what used the preview."""
        if self.full_rasters is None:
            return {"mode": "whole array"}
        return {**self.full_rasters.as_dict(),
                "preview": (f"block means of {self.full_rasters.preview_factor} x {self.full_rasters.preview_factor} "
                            "pixels: the wet-area range, the suggested boundary cores, the figures and the map "
                            "overlays; anomalies, their statistics, confirmation delta-T and the rasters are full "
                            "resolution")}

    def _calibration_entries(self) -> dict[str, Any]:
        """summary.json entries of the threshold check, the area range and the suggested cores."""
        out: dict[str, Any] = {}
        if self.area_range is not None:
            r = self.area_range
            out["wet_area_range_m2"] = [round(r.low_m2, 4), round(r.high_m2, 4)]
            out["wet_area_range"] = {
                "likely_m2": round(r.likely_m2, 4), "low_m2": round(r.low_m2, 4), "high_m2": round(r.high_m2, 4),
                "threshold_low_c": r.threshold_low_c, "threshold_high_c": r.threshold_high_c,
                "geometric_m2": round(r.geometric_m2, 4),
            }
        if self.section_checks:
            out["threshold_check_by_section"] = [
                {"section": name, "range_c": [t.low_c, t.high_c], "range_bounded_by": list(t.bounded_by),
                 "separable": t.separable, "confusion": t.confusion, "misclassified": list(t.misclassified),
                 "wet_cores": t.n_wet, "dry_cores": t.n_dry}
                for name, t in self.section_checks]
        if self.threshold is not None:
            t = self.threshold
            out["threshold_check"] = {
                "chosen_c": t.chosen_c, "range_c": [t.low_c, t.high_c], "range_bounded_by": list(t.bounded_by),
                "errors_at_best": t.errors, "separable": t.separable, "confusion": t.confusion,
                "misclassified": list(t.misclassified), "wet_cores": t.n_wet, "dry_cores": t.n_dry,
            }
        out["suggested_cores"] = [
            {"x": c.x, "y": c.y, "kind": c.kind, "anomaly": c.anomaly, "reason": c.reason}
            for c in self.suggested_cores
        ]
        return out

    def _quantity_entries(self) -> dict[str, Any]:
        """summary.json entries of the quantities step (areas m2, lengths m)."""
        q = self.quantities
        if q is None:
            return {}
        out: dict[str, Any] = {"repair_perimeter_m": round(q.repair_perimeter_m, 4), "replace_flag": q.replace_flag}
        if q.outside is not None:
            out["outside_sections"] = {k: (round(v, 4) if isinstance(v, float) else v)
                                       for k, v in vars(q.outside).items() if k not in ("assembly", "insulation")}
        out["bill"] = q.bill.as_dict()
        return out


#: What plan x and y mean on a hull side (``summary.json`` ``plan_axes``).
HULL_AXES = (("x", "station (m along the hull)"), ("y", "girth (m up from the keel)"))


def area_word(survey: Survey) -> str:
    """``"roof"``, or ``"hull side"`` (with its side when given): the surveyed area in words."""
    return wording_of(survey).area


def _pixel_source(survey: Survey) -> str:
    if survey.plan.pixel_m is not None:
        return "[plan] pixel_m"
    if survey.mosaics:
        return "the finest mosaic's pixel size"
    return "the frames' median ground sampling distance, rounded down (1-1.5-2-2.5-3-4-5-6-8 series)"


def large_wet_shares(quantities: Quantities | None, survey: Survey) -> list[tuple[str, float]]:
    """``(where, wet fraction)`` of each section (or the whole roof, or the roof outside every
    section) whose anomalies fill more than ``[repair] replace_above_pct`` of it (roofs only)."""
    above = survey.repair.replace_above_pct
    if quantities is None or above is None or survey.survey.kind != "roof":
        return []
    out = [(f"section {t.name}", t.wet_fraction) for t in quantities.sections
           if large_share(t.wet_fraction, above_pct=above)]
    if quantities.outside is not None and quantities.outside.area_m2 > 0 and large_share(
            quantities.outside.wet_fraction, above_pct=above):
        out.append(("the roof outside every section", quantities.outside.wet_fraction))
    if not quantities.sections and large_share(quantities.wet_fraction, above_pct=above):
        out.append(("the whole roof", quantities.wet_fraction))
    return out


