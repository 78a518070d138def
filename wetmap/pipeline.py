"""``run_survey()``: the stages wired in one direction, results written atomically.

survey.toml -> plan -> imagery on the plan grid -> surface temperature -> background,
delta, mask -> polygons -> confirmations -> quantities -> results/.

Results are written to a staging folder beside the destination and swapped into place
only when every file was written (:mod:`wetmap.outputs`); a failed run leaves earlier
results exactly as they were.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
import shapely
from shapely.geometry import Polygon
from shapely.geometry.base import BaseGeometry

from . import __version__
from .confirm import (AreaRange, Status, SuggestedCore, ThresholdCheck, Verdicts, assign_status,
                      sample_at_points, suggest_cores, threshold_check, wet_area_range)
from .confirmations import Confirmations
from .detect import (EDGE_FLAG, UNIT_FLAG, Detection, anomaly_mask, background_warnings, default_background_m,
                     detect_anomalies, edge_flags, large_share)
from .errors import InputFileError, ProcessingError, SurveyError
from .outputs import replacing
from .passes import PassComparison, align_to_grid, choose_primary, compare_passes, group_passes, pass_contrast_c
from .polygons import SIMPLIFY_TOLERANCE_PX, RegionStats, label_regions, polygonize, region_stats, simplify_outlines
from .quantities import BoardTakeoff, Quantities, SectionTotals, compute_quantities, largest_overlap
from .rasters import PlanGrid, inspect_raster, plan_grid_for, read_onto_grid
from .register import SUSPECT_MIN_PX, FrameReport, Registration
from .sun import with_sun_times
from .survey import Survey, load_survey
from .tiles import FullRasters, WindowProgress, detect_in_windows
from .vectors import Section
from .wording import wording_of

__all__ = ["Anomaly", "SurveyResult", "process_survey", "write_results", "run_survey", "check_survey", "RESULT_FILES"]

log = logging.getLogger(__name__)

Progress = Callable[[str], None]

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
    """Imagery flags (``"; "``-separated): ``reflection suspect``, ``under-resolved`` (:mod:`wetmap.imagery`)."""
    exact: Polygon | None = None
    """The exact outline ``area_m2``, ``perimeter_m`` and the imagery checks are measured on
    (``geometry`` is its simplified copy); ``None``: ``geometry`` is exact."""


@dataclass(frozen=True)
class Radiometry:
    """How apparent temperature was turned into surface temperature."""

    band_um: tuple[float, float]
    emissivity: float
    reflected_c: float
    reflected_source: str
    transmittance: float
    transmittance_source: str
    atmosphere_c: float


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
    coverage: dict[str, float]
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
    arrays are then a preview (block means, :data:`wetmap.tiles.PREVIEW_MAX_SIDE`); the
    anomalies and their statistics are exact. ``None``: the whole array is in memory."""
    imagery: Any = None
    """Resolution, focus, reflection and display-range findings (:class:`wetmap.imagery.ImageryReport`)."""
    cores_threshold: Any = None
    """``[detect] delta_c = "cores"``: the range the cores allowed and the threshold taken (:class:`CoresThreshold`)."""
    section_checks: tuple = ()
    """``(section name, ThresholdCheck)``: the threshold against the cores inside each section."""

    def summary(self) -> dict[str, Any]:
        """The ``summary.json`` content (areas in m2)."""
        by: dict[str, float] = {"wet": 0.0, "dry": 0.0, "unverified": 0.0}
        for a in self.anomalies:
            by[a.status] += a.area_m2
        roof_area = self.roof.area
        wet = by["wet"] + by["unverified"]
        d, s = self.detection, self.survey
        bg = self.background_entries()
        return {
            "title": s.survey.title,
            "kind": s.survey.kind,
            "crs": s.survey.crs,
            "side": s.survey.side,
            "area_label": _area_word(s),
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
            "coverage": {k: round(v, 4) for k, v in self.coverage.items()},
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


def _sounding_notes(conf: Confirmations, verdicts: Verdicts) -> list[str]:
    """Warnings for anomalies whose status rests on percussion soundings (weaker than a reading)."""
    notes: list[str] = []
    by_anomaly: dict[int, list[int]] = {}
    for i, a in enumerate(verdicts.anomaly_of.tolist()):
        if a >= 0:
            by_anomaly.setdefault(a, []).append(i)
    for a in sorted(by_anomaly):
        rows = by_anomaly[a]
        if any(conf.basis[i] != "sound" for i in rows):
            continue  # a core or reading inside decides
        dull = [conf.ids[i] for i in rows if conf.wet[i]]
        solid = [conf.ids[i] for i in rows if not conf.wet[i]]
        if dull:
            notes.append(f"anomaly {a + 1} is wet on dull soundings alone ({', '.join(dull)}): a dull note shows a "
                         "void or debonded skin; confirm wet core with a meter reading or a hole-saw sample")
        else:
            notes.append(f"anomaly {a + 1} has only solid soundings inside ({', '.join(solid)}): a well-bonded skin "
                         "over wet core sounds solid too, so it stays unverified; take a meter reading there")
    return notes


def _area_word(survey: Survey) -> str:
    """``"roof"``, or ``"hull side"`` (with its side when given): the surveyed area in words."""
    return wording_of(survey).area


def _pixel_source(survey: Survey) -> str:
    if survey.plan.pixel_m is not None:
        return "[plan] pixel_m"
    if survey.mosaics:
        return "the finest mosaic's pixel size"
    return "the frames' median ground sampling distance, rounded down (1-1.5-2-2.5-3-4-5-6-8 series)"


def _emit(progress: Progress | None, message: str) -> None:
    log.info(message)
    if progress is not None:
        progress(message)


def _union(geoms) -> BaseGeometry:
    return shapely.union_all(np.asarray(list(geoms), dtype=object)) if geoms else Polygon()


def _radiometry(survey: Survey, warnings: list[str]) -> Radiometry:
    from .conditions import estimate_reflected_c
    from .radiometry import atmospheric_transmittance

    cond, cam = survey.conditions, survey.camera
    if cond.reflected_c is not None:
        reflected, source = cond.reflected_c, "measured (as entered in [conditions] reflected_c)"
    else:
        sky_view = 1.0 if survey.survey.kind == "roof" else 0.5
        est = estimate_reflected_c(cond.air_c, cond.humidity_pct, cond.sky or "clear", sky_view=sky_view,
                                   band_um=cam.band_um)
        reflected, source = est.reflected_c, f"estimated: {est.model}"
        # the caution about the estimate is one of the condition warnings (wetmap.conditions)
    if cam.transmittance is not None:
        tau, tau_source = cam.transmittance, "as entered in [camera] transmittance"
    elif cam.distance_m > 0:
        tau = atmospheric_transmittance(cam.distance_m, air_c=cond.air_c, humidity_pct=cond.humidity_pct)
        tau_source = f"approximate water-vapour model over {cam.distance_m:g} m"
    else:
        tau, tau_source = 1.0, "no atmosphere (distance_m = 0)"
    return Radiometry(band_um=cam.band_um, emissivity=cam.emissivity, reflected_c=reflected,
                      reflected_source=source, transmittance=tau, transmittance_source=tau_source,
                      atmosphere_c=cond.air_c)


def _mask_of(geoms: BaseGeometry, grid: PlanGrid) -> np.ndarray:
    """Pixels whose centre lies inside ``geoms`` (the pixel-centre rule, computed as every window of
    :mod:`wetmap.tiles` computes it, so whole-array and windowed runs give the same pixels)."""
    from .tiles import roof_mask

    return roof_mask(geoms, grid.transform, grid.shape)


def section_emissivity_correction(surface_k: np.ndarray, apparent_k: np.ndarray, labels: np.ndarray | None,
                                  sections, radiometry: Radiometry) -> np.ndarray:
    """Surface temperature (K) of each section with its own ``emissivity`` (sections.geojson),
    from the apparent temperature (K); other pixels keep ``surface_k``. ``labels`` as
    :func:`wetmap.tiles.section_labels` (label ``k`` = ``sections[k]``)."""
    if labels is None:
        return surface_k
    for k, sec in enumerate(sections):
        if sec.emissivity is None or sec.emissivity == radiometry.emissivity:
            continue
        sel = labels == k
        if sel.any():
            surface_k[sel] = _to_surface_k(apparent_k[sel], replace(radiometry, emissivity=sec.emissivity))
    return surface_k


def _to_surface_k(apparent_k: np.ndarray, radiometry: Radiometry) -> np.ndarray:
    """Apparent -> surface temperature, K: the measurement equation inverted (NaN stays NaN).

    The same call for mosaics (on the plan grid) and frames (per frame, before resampling).
    """
    from .radiometry import surface_from_apparent

    return surface_from_apparent(
        apparent_k,
        emissivity=radiometry.emissivity,
        reflected_k=radiometry.reflected_c + 273.15,
        transmittance=radiometry.transmittance,
        atmosphere_k=radiometry.atmosphere_c + 273.15,
        band_um=radiometry.band_um,
    )


@dataclass(frozen=True)
class _RegisteredFrame:
    """One ``[[frame]]``: its surface temperature (K, image pixels) and its registration."""

    name: str
    surface_k: np.ndarray
    registration: Registration


def _register_frames(survey: Survey, radiometry: Radiometry, warnings: list[str],
                     progress: Progress | None) -> list[_RegisteredFrame]:
    """Read each frame, correct it to surface temperature and fit its control points."""
    from .errors import SurveyError
    from .frames import read_frame
    from .register import register_points

    out = []
    for i, f in enumerate(survey.frames):
        try:
            name = f.path.relative_to(survey.folder).as_posix()
        except ValueError:
            name = str(f.path)
        _emit(progress, f"reading and registering {name}")
        image = read_frame(f.path, units=f.units, scale=f.scale, offset=f.offset)
        warnings.extend(image.notes)
        pts = np.asarray(f.points, dtype=np.float64)
        where = f"{survey.file}: [[frame]] #{i + 1} points"
        rows, cols = image.shape
        off = np.flatnonzero((pts[:, 0] < -0.5) | (pts[:, 0] > cols - 0.5) | (pts[:, 1] < -0.5) | (pts[:, 1] > rows - 0.5))
        if len(off):
            k = int(off[0])
            raise SurveyError(
                f"{where}: point {k + 1} has [col, row] = [{pts[k, 0]:g}, {pts[k, 1]:g}], outside {name} "
                f"({cols} x {rows} pixels): expected -0.5 <= col <= {cols - 0.5:g} and -0.5 <= row <= {rows - 0.5:g}; "
                "check that each point is [col, row, x, y]"
            )
        reg = register_points(pts[:, :2], pts[:, 2:], where=where, piecewise=True)
        surface = _to_surface_k(image.values_k, radiometry)
        lost = int(np.count_nonzero(np.isnan(surface) & ~np.isnan(image.values_k)))
        if lost:
            warnings.append(f"{name}: {lost} pixels could not be corrected (apparent temperature too low for the "
                            "emissivity and reflected temperature given): check [camera] emissivity and "
                            "[conditions] reflected_c")
        fit = reg.fit
        if reg.loo.note and reg.model == "homography":
            warnings.append(f"{name} ([[frame]] #{i + 1}): {reg.loo.note}")
        elif reg.model != "homography":
            loo_px, loo_m = reg.models[reg.model]
            # a mark left out doubles the gap the model bridges; interpolation error grows with the
            # square of the gap, so placement with every mark is about a quarter of this figure
            if loo_px > 4 * SUSPECT_MIN_PX:
                warnings.append(f"{name} ([[frame]] #{i + 1}): registered {reg.model} on its {len(pts)} tape marks, "
                                f"but each mark lies {loo_px:.1f} px ({1000 * loo_m:.0f} mm on the skin) RMS from "
                                "where the others put it: placement between marks is uncertain; "
                                "add marks or check them")
        elif fit.rms_px > SUSPECT_MIN_PX:
            warnings.append(f"{name} ([[frame]] #{i + 1}): the control points fit to {fit.rms_px:.1f} px RMS "
                            f"({fit.rms_m:.3g} m): placement is uncertain; check them")
        if survey.survey.kind == "hull":
            from .register import GIRTH_STRETCH_MAX, girth_stretch

            stretch = girth_stretch(pts[:, :2], pts[:, 2:])
            if stretch is not None and stretch.ratio > GIRTH_STRETCH_MAX:
                warnings.append(
                    f"{name} ([[frame]] #{i + 1}): between y = {stretch.ys[0]:g} and {stretch.ys[1]:g} m at stations "
                    f"{stretch.xs[0]:g}-{stretch.xs[1]:g} m the tape marks lie {stretch.ratio:.2f} times farther apart "
                    "in the image per metre of y than per metre of station, which marks measured along the skin do "
                    "not show: the y values look like heights, not girths; give each mark's girth measured along "
                    "the skin from the keel (heights make areas small where the skin flares)")
        if fit.mirrored and survey.survey.kind == "roof":
            warnings.append(f"{name} ([[frame]] #{i + 1}): the frame is a mirror image of the plan; check that each "
                            "point is [col, row, x, y] (not x and y swapped) and that the image is not flipped")
        out.append(_RegisteredFrame(name=name, surface_k=surface, registration=reg))
    return out


def _frames_onto_grid(frames: list[_RegisteredFrame], grid: PlanGrid, outline: BaseGeometry,
                      warnings: list[str], *, limits=None, views: list | None = None,
                      max_view_angle_deg: float | None = None, kind: str = "roof",
                      radiometry: Radiometry | None = None, refractive_index: float | None = None
                      ) -> tuple[np.ndarray, list[FrameReport]]:
    """Resample and blend the frames on the plan grid (surface K, NaN where no frame).

    Frames far less sharp than the others are blended only where no sharper frame covers
    (``[limits] exclude_blurred``; :mod:`wetmap.imagery`); ``views``, when given, receives
    each placed frame as a :class:`wetmap.imagery.FrameView`.
    """
    from .imagery import frame_views
    from .register import MAX_VIEW_ANGLE_DEG, blend_frames, frame_gsd_m, placement_ranks, resample_frame
    from .survey import Limits

    parts, placed = [], []
    for fr in frames:
        part = resample_frame(fr.surface_k, fr.registration.mapping, grid_transform=grid.transform,
                              grid_shape=grid.shape)
        if part is None:
            warnings.append(f"{fr.name}: lands nowhere on the plan grid (the outline's bounds): check its control "
                            "points' plan x, y")
        else:
            if radiometry is not None and refractive_index is not None and part.view_angle_deg is not None:
                part = _emissivity_by_angle(part, radiometry, refractive_index)
            parts.append(part)
        placed.append(part)
    limits = limits or Limits()
    found = frame_views([fr.name for fr in frames], [fr.surface_k for fr in frames],
                        [fr.registration.matrix for fr in frames], placed, bounds=outline.bounds,
                        focus_ratio=limits.focus_ratio, exclude_blurred=limits.exclude_blurred)
    if views is not None:
        views.extend(found)
    max_angle = MAX_VIEW_ANGLE_DEG if max_view_angle_deg is None else max_view_angle_deg
    ranks = placement_ranks(parts, grid.shape, fallback=[v.fallback for v in found], max_view_angle_deg=max_angle)
    low = np.full(grid.shape, np.iinfo(np.int8).max, dtype=np.int8)
    for part, rank in zip(parts, ranks):
        r0, r1, c0, c1 = part.window
        np.minimum(low[r0:r1, c0:c1], np.where(rank >= 0, rank, np.iinfo(np.int8).max).astype(np.int8),
                   out=low[r0:r1, c0:c1])
    in_outline = _mask_of(outline, grid)
    reports = []
    ranked = iter(zip(parts, ranks))
    for fr, part in zip(frames, placed):
        figures: dict[str, Any] = {}
        if part is not None:
            _, rank = next(ranked)
            r0, r1, c0, c1 = part.window
            used = (rank >= 0) & (rank == low[r0:r1, c0:c1])
            angles = part.view_angle_deg[used] if part.view_angle_deg is not None else np.empty(0)
            angles = angles[np.isfinite(angles)]
            figures = {"view_angle_deg": (float(np.median(angles)), float(np.max(angles))) if len(angles)
                       else (float("nan"), float("nan")),
                       "used_m2": int(used.sum()) * grid.pixel_area_m2}
            if part.outside_marks is not None:
                extra = int((used & part.outside_marks & in_outline[r0:r1, c0:c1]).sum()) * grid.pixel_area_m2
                figures["extrapolated_m2"] = extra
                if extra > 0:
                    warnings.append(
                        f"{fr.name}: {extra:.2f} m2 of the {_area_word_kind(kind)} are placed from outside its tape "
                        "marks (no other frame covers them from within its marks): extrapolated, less certain; "
                        "add marks around that part")
        reports.append(FrameReport.build(
            fr.name, fr.registration, gsd_m=frame_gsd_m(fr.registration.matrix, fr.surface_k.shape, outline.bounds),
            covered_m2=(part.covered if part is not None else 0) * grid.pixel_area_m2, **figures))
    return blend_frames(parts, grid.shape, ranks=ranks), reports


def _emissivity_by_angle(part, radiometry: Radiometry, refractive_index: float):
    """A resampled frame's surface temperature redone with the emissivity of each pixel's viewing
    angle (Fresnel, :func:`wetmap.register.fresnel_emissivity`, scaled to ``[camera] emissivity``
    square-on): its apparent temperature is recovered with the square-on emissivity, then
    corrected again with the pixel's own."""
    from .radiometry import apparent_from_surface, surface_from_apparent
    from .register import fresnel_emissivity

    common = dict(reflected_k=radiometry.reflected_c + 273.15, transmittance=radiometry.transmittance,
                  atmosphere_k=radiometry.atmosphere_c + 273.15, band_um=radiometry.band_um)
    good = np.isfinite(part.values) & np.isfinite(part.view_angle_deg)
    if not good.any():
        return part
    ratio = fresnel_emissivity(part.view_angle_deg[good], refractive_index) / fresnel_emissivity(
        np.array(0.0), refractive_index)
    apparent = apparent_from_surface(part.values[good].astype(np.float64), emissivity=radiometry.emissivity, **common)
    values = part.values.copy()
    values[good] = surface_from_apparent(apparent, emissivity=np.clip(radiometry.emissivity * ratio, 1e-3, 1.0),
                                         **common)
    return replace(part, values=values)


def _area_word_kind(kind: str) -> str:
    return "hull side" if kind == "hull" else "roof"


def _surface_on_grid(survey: Survey, outline: BaseGeometry, radiometry: Radiometry,
                     warnings: list[str], progress: Progress | None, *,
                     registration: list[FrameReport] | None = None,
                     views: list | None = None, sections: tuple = ()) -> tuple[PlanGrid, np.ndarray]:
    """Mosaics and frames on one plan grid, as surface temperature in degC (NaN = no data).

    The grid's pixel is ``[plan] pixel_m``, else the finest mosaic's, else chosen from the
    frames' ground sampling distance. Mosaics are corrected on the grid; frames are
    corrected per frame, resampled and blended (:mod:`wetmap.register`). Mosaics win where
    they have data (the first one first); the frames fill what no mosaic covers.
    ``registration``, when given, receives one :class:`FrameReport` per frame; ``views`` one
    :class:`wetmap.imagery.FrameView` per placed frame.
    """
    from .register import choose_pixel_m, frame_gsd_m

    crs = None if survey.survey.is_local else survey.survey.crs
    infos = [inspect_raster(m.path, origin=m.origin, pixel_m=m.pixel_m, survey_crs=crs) for m in survey.mosaics]
    for m, info in zip(survey.mosaics, infos):
        if info.crs is not None and crs is not None:
            from pyproj import CRS

            if not CRS(info.crs).equals(CRS(crs)):
                warnings.append(f"{m.path.name}: CRS {info.crs} differs from the survey's {crs}; resampled")
    frames = _register_frames(survey, radiometry, warnings, progress) if survey.frames else []
    pixel_m = survey.plan.pixel_m
    if pixel_m is None and not infos and frames:
        gsds = [frame_gsd_m(f.registration.matrix, f.surface_k.shape, outline.bounds) for f in frames]
        if not any(np.isfinite(gsds)):
            raise ProcessingError(f"{survey.file}: no [[frame]] lands on the plan outline's bounds "
                                  f"{tuple(round(v, 3) for v in outline.bounds)}: check the control points' plan x, y")
        pixel_m = choose_pixel_m(gsds)
    grid = plan_grid_for(infos, outline.bounds, crs=crs, pixel_m=pixel_m)
    if grid.rows * grid.cols > 2_000_000_000:
        raise ProcessingError(f"{survey.file}: the plan grid would be {grid.rows} x {grid.cols} pixels; "
                              "check the outline's coordinates and the imagery's pixel size, or set [plan] pixel_m")
    apparent: np.ndarray | None = None
    for m, info in zip(survey.mosaics, infos):
        _emit(progress, f"reading {m.path.name}")
        values = read_onto_grid(m.path, grid, info=info, units=m.units, scale=m.scale, offset=m.offset,
                                inside=outline)
        if apparent is None:
            apparent = values
        else:  # later mosaics fill what earlier ones do not cover
            gap = np.isnan(apparent)
            apparent[gap] = values[gap]
    surface: np.ndarray | None = None
    if apparent is not None:
        _emit(progress, "correcting apparent to surface temperature")
        surface = _to_surface_k(apparent, radiometry)
        if any(sec.emissivity is not None for sec in sections):
            labels = _section_labels([sec.geometry for sec in sections], grid)
            surface = section_emissivity_correction(surface, apparent, labels, sections, radiometry)
        lost = int(np.count_nonzero(np.isnan(surface) & ~np.isnan(apparent)))
        if lost:
            warnings.append(
                f"{lost} pixels could not be corrected (apparent temperature too low for the emissivity and "
                "reflected temperature given): check [camera] emissivity and [conditions] reflected_c"
            )
    if frames:
        _emit(progress, "resampling and blending the frames on the plan grid")
        from_frames, reports = _frames_onto_grid(frames, grid, outline, warnings, limits=survey.limits, views=views,
                                                 max_view_angle_deg=survey.camera.max_view_angle_deg,
                                                 kind=survey.survey.kind, radiometry=radiometry,
                                                 refractive_index=survey.camera.refractive_index)
        if registration is not None:
            registration.extend(reports)
        if surface is None:
            surface = from_frames
        else:  # frames fill what the mosaics do not cover
            gap = np.isnan(surface)
            surface[gap] = from_frames[gap]
    assert surface is not None  # the survey loader guarantees a mosaic or a frame
    surface = surface.astype(np.float32, copy=False)
    surface -= np.float32(273.15)
    return grid, surface


def _condition_warnings(survey: Survey, sections, *, surface_c: float | None = None) -> list[str]:
    """The survey-condition checks (:func:`wetmap.conditions.check_conditions`) as warning lines."""
    from .conditions import check_conditions

    times = list(dict.fromkeys(item.time for item in (*survey.mosaics, *survey.frames) if item.time is not None))
    found = check_conditions(survey.conditions, survey.camera, survey.survey, limits=survey.limits,
                             sections=sections, surface_c=surface_c, pass_times=times,
                             surface_source=None if surface_c is None else "median dry background of the run")
    return [w.text for w in found]


@dataclass(frozen=True)
class _DetectOn:
    """What every pass's detection is made with besides its pixels: the sections (their
    geometries and group names) and the confirmations that anchor the dry background."""

    section_geoms: tuple
    names: tuple[str, ...]
    conf: Confirmations


@dataclass(frozen=True)
class _PassImage:
    """One pass on its own plan grid: surface temperature (°C) and what reading it said."""

    grid: PlanGrid
    surface_c: np.ndarray
    warnings: tuple[str, ...]
    registration: tuple[FrameReport, ...]
    views: tuple[Any, ...]


def _pass_images(survey: Survey, groups, outline: BaseGeometry, radiometry: Radiometry,
                 progress: Progress | None, *, sections: tuple = ()) -> list[_PassImage]:
    """Every pass's surface temperature on its own plan grid (each read once)."""
    out = []
    for g in groups:
        _emit(progress, f"pass {g.label}: surface temperature")
        sub = replace(survey, mosaics=g.mosaics, frames=g.frames)
        notes: list[str] = []
        reports: list[FrameReport] = []
        views: list = []
        g_grid, g_surface = _surface_on_grid(sub, outline, radiometry, notes, progress, registration=reports,
                                             views=views, sections=sections)
        out.append(_PassImage(g_grid, g_surface, tuple(notes), tuple(reports), tuple(views)))
    return out


def _detect_pass(image: _PassImage, grid: PlanGrid, in_roof: np.ndarray, survey: Survey,
                 background_m: float, *, detect_on: "_DetectOn",
                 threshold_c: float | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
    """One pass on ``grid``: its surface (NaN off the roof), delta-T, labels and count.

    ``threshold_c`` is the primary pass's applied threshold (``None``: ``[detect] delta_c``).
    """
    sdt = survey.detect
    g_surface = align_to_grid(image.surface_c, image.grid.transform, grid.transform, grid.shape)
    g_usable = in_roof & np.isfinite(g_surface)
    det = detect_anomalies(g_surface, g_usable, pixel_m=grid.pixel_m, delta_c=sdt.delta_c,
                           background_m=background_m, min_area_m2=sdt.min_area_m2,
                           labels=_section_labels(detect_on.section_geoms, grid), names=detect_on.names,
                           choice=sdt.background, cores=_core_pixels(detect_on.conf, grid), threshold_c=threshold_c)
    lab, n = label_regions(det.mask)
    return np.where(g_usable, g_surface, np.nan), det.delta_c, lab, n


def _choose_primary_pass(survey: Survey, images: list[_PassImage], roof: BaseGeometry, background_m: float,
                         progress: Progress | None, *, detect_on: "_DetectOn"
                         ) -> tuple[int, str, tuple[float, ...], dict]:
    """The pass with the greatest wet-dry contrast (:func:`wetmap.passes.choose_primary`).

    The passes are compared on the last pass's grid; their detections there are returned
    (pass index -> surface, delta, labels, count) for reuse when the primary pass has that grid.
    """
    _emit(progress, "comparing the passes' wet-dry contrast")
    grid = images[-1].grid
    in_roof = _mask_of(roof, grid)
    found = {k: _detect_pass(im, grid, in_roof, survey, background_m, detect_on=detect_on)
             for k, im in enumerate(images)}
    contrast = pass_contrast_c([found[k][1] for k in found], [found[k][2] for k in found],
                               [found[k][3] for k in found])
    index, rule = choose_primary(contrast)
    return index, rule, tuple(float(c) for c in contrast), {"grid": grid, "found": found}


def _fade_models(survey: Survey, sections, polys, hours: list[float],
                 warnings: list[str]) -> np.ndarray | None:
    """The cool-down model's wet-dry contrast (K) for each anomaly's assembly at each pass.

    The insulation is ``[cooldown] insulation`` when given, else the one the section holding
    most of the anomaly names; anomalies in no section use the largest section naming one.
    ``None`` (fading then judged on raw deltas, with a note) when the model cannot run: a
    hull, no sunset, no insulation named.
    """
    from .cooldown import plan_survey_window
    from .errors import WetmapError

    if not polys:
        return None
    section_of = largest_overlap(polys, [s.geometry for s in sections])
    plans: dict[int, np.ndarray | None] = {}
    reasons: list[str] = []
    out = np.full((len(polys), len(hours)), np.nan)
    for i, k in enumerate(section_of):
        if k not in plans:
            try:
                plan = plan_survey_window(survey, sections=[sections[k]] if k >= 0 else sections, step_s=300.0)
                plans[k] = np.interp(hours, plan.hours_after_sunset, plan.delta_c, left=np.nan, right=np.nan)
            except (WetmapError, ValueError) as err:
                plans[k] = None
                reasons.append(str(err).split(": ", 1)[-1])
        if plans[k] is not None:
            out[i] = plans[k]
    if reasons:
        warnings.append("fading between passes judged on the raw deltas for some anomalies (no cool-down model: "
                        f"{reasons[0]}); a closed-cell wet area whose contrast decays may then be flagged fading")
    return out if np.isfinite(out).any() else None


def _compare_passes(survey: Survey, groups, images: list[_PassImage], choice: tuple, warnings: list[str],
                    progress: Progress | None, *, grid: PlanGrid, surface_c: np.ndarray, in_roof: np.ndarray,
                    detection: Detection, labels: np.ndarray, count: int, background_m: float,
                    detect_on: "_DetectOn", sections=(), polys=()) -> PassComparison:
    """Detect anomalies in the other passes and compare them with the primary pass.

    The other passes use the primary pass's applied threshold; the detections made while
    choosing the primary pass are reused when they were made on this grid with it.
    """
    primary, rule, contrast, cache = choice
    same_grid = (cache["grid"].shape == grid.shape and cache["grid"].transform.almost_equals(grid.transform)
                 and survey.detect.delta_from != "cores")
    surfaces, deltas, label_list, counts = [], [], [], []
    for k, image in enumerate(images):
        if k == primary:
            surfaces.append(np.where(in_roof & np.isfinite(surface_c), surface_c, np.nan))
            deltas.append(detection.delta_c)
            label_list.append(labels)
            counts.append(count)
            continue
        _emit(progress, f"pass {groups[k].label}: detection")
        g_surface, g_delta, lab, n = (cache["found"][k] if same_grid
                                      else _detect_pass(image, grid, in_roof, survey, background_m,
                                                        detect_on=detect_on, threshold_c=detection.threshold_c))
        surfaces.append(g_surface)
        deltas.append(g_delta)
        label_list.append(lab)
        counts.append(n)
    hours = [g.hours for g in groups]
    model = _fade_models(survey, list(sections), list(polys), hours, warnings) if count else None
    _emit(progress, "matching anomalies across passes")
    result = compare_passes(surfaces, deltas, label_list, counts, hours=hours,
                            pass_labels=[g.label for g in groups], transform=grid.transform, primary=primary,
                            model_delta_c=model, contrast_c=contrast, primary_rule=rule)
    warnings.extend(result.warnings())
    return result


#: Name of the roof outside every section when sections are given (a background group of its own).
OUTSIDE_SECTIONS = "(outside the sections)"


def _group_names(sections, area_word: str) -> tuple[str, ...]:
    """One name per section label: the sections in order, then the rest of the roof; or the whole roof."""
    if not sections:
        return (area_word,)
    return (*(s.name for s in sections), OUTSIDE_SECTIONS)


def _section_labels(geoms, grid: PlanGrid) -> np.ndarray | None:
    """Section label of every pixel (pixel-centre rule of :mod:`wetmap.tiles`), or ``None`` with no sections."""
    if not geoms:
        return None
    from .tiles import pixel_edges, section_label_raster

    return section_label_raster([pixel_edges(g, grid.transform) for g in geoms], grid.shape)


def _core_pixels(conf: Confirmations, grid: PlanGrid) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """``(rows, cols, wet)`` of the confirmations on the grid (pixel indices), or ``None``."""
    if not len(conf):
        return None
    cols, rows = ~grid.transform @ (np.asarray(conf.xs, float), np.asarray(conf.ys, float))
    return np.floor(rows).astype(np.intp), np.floor(cols).astype(np.intp), np.asarray(conf.wet, bool)


def _surveyed_part(roof: BaseGeometry, outline: BaseGeometry, exclusions: BaseGeometry, *, edge_buffer_m: float,
                   exclusion_buffer_m: float) -> tuple[BaseGeometry, dict[str, float]]:
    """The roof minus the optional bands along the outline and around the exclusions.

    Returns the surveyed part and the area of each band left out (m2, ``edge_band_m2``,
    ``exclusion_band_m2``; only the bands asked for).
    """
    surveyed = roof
    areas: dict[str, float] = {}
    if edge_buffer_m > 0:
        inner = outline.buffer(-edge_buffer_m, join_style="mitre")
        cut = surveyed.intersection(inner)
        areas["edge_band_m2"] = float(surveyed.area - cut.area)
        surveyed = cut
    if exclusion_buffer_m > 0 and not exclusions.is_empty:
        cut = surveyed.difference(exclusions.buffer(exclusion_buffer_m, join_style="mitre"))
        areas["exclusion_band_m2"] = float(surveyed.area - cut.area)
        surveyed = cut
    return surveyed, areas


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


def threshold_from_cores(ids, core_delta_c: np.ndarray, wet: np.ndarray, *, file: Path) -> CoresThreshold:
    """The middle of the thresholds the cores allow: between the largest delta-T at a dry core
    and the smallest at a wet core.

    Raises
    ------
    SurveyError
        When there is no wet or no dry core with thermal data, or when a dry core is at least
        as warm as a wet core (no threshold separates them).

    >>> threshold_from_cores(("a", "b", "c"), np.array([2.0, 0.4, 0.8]), np.array([True, False, False]),
    ...                      file=Path("survey.toml")).chosen_c
    1.4
    """
    d = np.asarray(core_delta_c, dtype=float)
    w = np.asarray(wet, bool)
    ok = np.isfinite(d)
    ids = np.asarray(ids, dtype=object)
    if not (ok & w).any() or not (ok & ~w).any():
        missing = "wet" if not (ok & w).any() else "dry"
        raise SurveyError(f'{file}: [detect] delta_c = "cores" needs at least one {missing} core with thermal data '
                          f"({int((ok & w).sum())} wet, {int((ok & ~w).sum())} dry found): add cores or give a number")
    i_dry = np.flatnonzero(ok & ~w)[np.argmax(d[ok & ~w])]
    i_wet = np.flatnonzero(ok & w)[np.argmin(d[ok & w])]
    low, high = float(d[i_dry]), float(d[i_wet])
    if not high > low:
        raise SurveyError(f'{file}: [detect] delta_c = "cores": dry core {ids[i_dry]} (delta-T {low:+.2f} °C) is at '
                          f"least as warm as wet core {ids[i_wet]} ({high:+.2f} °C), so the cores allow no threshold; "
                          "give delta_c a number and check those cores")
    return CoresThreshold(low_c=round(low, 4), high_c=round(high, 4), chosen_c=round(0.5 * (low + high), 4),
                          wet=int((ok & w).sum()), dry=int((ok & ~w).sum()))


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


def _large_share_warnings(quantities: Quantities, survey: Survey) -> list[str]:
    """A plain warning for each large wet share (:func:`large_wet_shares`)."""
    return [f"{where}: anomalies fill {100 * f:.0f} % of it, a large wet share: this figure decides between repair "
            "and replacement (some local codes require replacement above 25 % wet; a trade rule of thumb repairs "
            "only under about 30 %), so confirm the wet boundary with cores and check which rule applies"
            for where, f in large_wet_shares(quantities, survey)]


def process_survey(folder: str | Path, *, progress: Progress | None = None, scheduler: Any = None,
                   tile_px: int | None = None, window_progress: WindowProgress | None = None,
                   scratch: str | Path | None = None) -> SurveyResult:
    """Run every stage on the survey in ``folder`` and return the results (nothing written).

    Parameters
    ----------
    folder
        The survey folder.
    progress
        Called with a message at each stage.
    scheduler
        Where windows run when the mosaic is processed in windows (:class:`wetmap.tiles.Engine`):
        ``None``/``"threads"``, ``"processes"``, ``"sync"``, a dask scheduler address or a
        ``distributed.Client``.
    tile_px
        Window side override (0: the whole array; ``None``: ``[detect] tile_px`` or by size).
    window_progress
        ``(stage, windows done, windows)`` as windows finish.
    scratch
        Folder for the windows' scratch folder (default: the survey folder).

    Raises
    ------
    WetmapError
        On any invalid input; the message names the file, key or row and the fix.
    """
    from .prework import prepare_survey

    survey = with_sun_times(load_survey(folder))  # sunset from place and date when not typed in
    warnings: list[str] = []

    _emit(progress, "reading the plan and checking every input")
    prepared = prepare_survey(survey)  # the same checks as `wetmap check`, every problem at once
    warnings.extend(prepared.warnings)
    outline, exclusions, roof = prepared.outline, prepared.exclusions, prepared.roof
    sections: list[Section] = list(prepared.sections)
    specular = prepared.specular  # [plan] specular: surfaces that show reflections (wetmap.imagery)

    conf = prepared.confirmations if prepared.confirmations is not None else Confirmations.empty()
    sdt = survey.detect
    surveyed, band_m2 = _surveyed_part(roof, outline, exclusions, edge_buffer_m=sdt.edge_buffer_m,
                                                   exclusion_buffer_m=sdt.exclusion_buffer_m)
    if surveyed.area <= 0:
        raise InputFileError(f"{survey.file}: [detect] edge_buffer_m = {sdt.edge_buffer_m:g} and exclusion_buffer_m = "
                             f"{sdt.exclusion_buffer_m:g} leave nothing of the roof to survey; make them smaller")
    section_geoms = [s.geometry for s in sections]
    if survey.frames and any(sec.emissivity is not None for sec in sections):
        warnings.append("sections.geojson gives emissivities per section: they correct the mosaics' pixels; "
                        "[[frame]] pixels are corrected with [camera] emissivity")
    group_names = _group_names(sections, _area_word(survey))
    detect_on = _DetectOn(section_geoms=tuple(section_geoms), names=group_names, conf=conf)
    threshold_from = None
    from_cores: list[CoresThreshold] = []
    if sdt.delta_from == "cores":
        def threshold_from(core_delta: np.ndarray) -> float:
            from_cores.append(threshold_from_cores(conf.ids, core_delta, conf.wet, file=survey.file))
            return from_cores[-1].chosen_c

    radiometry = _radiometry(survey, warnings)
    # several passes (imagery with different times): the pass with the greatest wet-dry
    # contrast is the primary detection (wetmap.passes.choose_primary)
    pass_groups, notes = group_passes(survey.mosaics, survey.frames, sunset=survey.conditions.sunset)
    warnings.extend(notes)
    frame_reports: list[FrameReport] = []
    frame_views: list = []  # the placed frames, for the imagery checks (wetmap.imagery)
    area_word = _area_word(survey)
    x0, y0, x1, y1 = outline.bounds
    background_m = sdt.background_m or default_background_m(survey.survey.kind, max(x1 - x0, y1 - y0))
    pass_images: list[_PassImage] | None = None
    choice = None
    if len(pass_groups) > 1:
        pass_images = _pass_images(survey, pass_groups, outline, radiometry, progress, sections=tuple(sections))
        choice = _choose_primary_pass(survey, pass_images, surveyed, background_m, progress, detect_on=detect_on)
        for k, image in enumerate(pass_images):
            if k != choice[0]:
                warnings.extend(image.warnings)
    primary = survey if choice is None else replace(
        survey, mosaics=pass_groups[choice[0]].mosaics, frames=pass_groups[choice[0]].frames)
    # one pass of large mosaics on the plan grid's lattice: in windows, same result (wetmap.tiles)
    tiled = None if len(pass_groups) > 1 else detect_in_windows(
        primary, outline=outline, roof=surveyed, radiometry=radiometry, background_m=background_m, tile_px=tile_px,
        scheduler=scheduler, scratch=None if scratch is None else Path(scratch), progress=progress,
        window_progress=window_progress, sections=section_geoms, names=group_names, choice=sdt.background,
        section_emissivity=tuple(sec.emissivity for sec in sections),
        cores=(conf.xs, conf.ys, conf.wet), threshold_from=threshold_from)
    if tiled is None:
        if pass_images is not None and choice is not None:  # several passes: the chosen one, already read
            chosen = pass_images[choice[0]]
            grid, surface_c = chosen.grid, chosen.surface_c
            warnings.extend(chosen.warnings)
            frame_reports.extend(chosen.registration)
            frame_views.extend(chosen.views)
        else:
            grid, surface_c = _surface_on_grid(primary, outline, radiometry, warnings, progress,
                                               registration=frame_reports, views=frame_views,
                                               sections=tuple(sections))
        _emit(progress, "masking the roof")
        in_roof = _mask_of(surveyed, grid)
        labels_px = _section_labels(section_geoms, grid)
        usable = in_roof & np.isfinite(surface_c)
        roof_px = int(in_roof.sum())
        covered_px = int(usable.sum())
        constant = bool(covered_px) and (np.nanmax(np.where(usable, surface_c, np.nan))
                                         == np.nanmin(np.where(usable, surface_c, np.nan)))
        px_area = grid.pixel_area_m2
    else:  # grid and surface_c are the preview; the full rasters are on disk
        grid, surface_c = tiled.grid, tiled.surface_c
        roof_px, covered_px, constant = tiled.roof_px, tiled.covered_px, tiled.constant
        px_area = tiled.full_rasters.grid.pixel_area_m2
        if tiled.lost_px:
            warnings.append(
                f"{tiled.lost_px} pixels could not be corrected (apparent temperature too low for the emissivity and "
                "reflected temperature given): check [camera] emissivity and [conditions] reflected_c"
            )
    coverage = {
        "roof_pixels_m2": roof_px * px_area,
        "covered_m2": covered_px * px_area,
        "uncovered_m2": (roof_px - covered_px) * px_area,
        "uncovered_pct": 100.0 * (roof_px - covered_px) / roof_px if roof_px else 100.0,
        **band_m2,
    }
    for key, what, setting in (("edge_band_m2", "along the outline", "edge_buffer_m"),
                               ("exclusion_band_m2", "around the exclusions", "exclusion_buffer_m")):
        if key in band_m2:
            warnings.append(f"{band_m2[key]:.1f} m2 in the band {what} ([detect] {setting} = "
                            f"{getattr(sdt, setting):g}) is left out: not surveyed, which does not mean dry")
    if covered_px == 0:  # nothing to detect on: a confident empty answer would be wrong
        raise ProcessingError(f"{survey.file}: no usable thermal data on the {area_word} (all nodata, the imagery "
                              "misses the outline, or every pixel lost in the apparent-to-surface correction): check "
                              "the imagery's placement and nodata, [camera] emissivity and [conditions] reflected_c; "
                              "earlier results are kept")
    if coverage["uncovered_pct"] > 0.5:
        warnings.append(
            f"{coverage['uncovered_m2']:.1f} m2 ({coverage['uncovered_pct']:.1f} %) of the {area_word} has no thermal data: "
            "it is not surveyed, which does not mean dry"
        )
    if constant:
        warnings.append(f"the thermal data on the {area_word} are constant: no contrast, nothing can be detected")
    if tiled is None:
        _emit(progress, "estimating the dry background and thresholding")
        core_px = _core_pixels(conf, grid)
        detection = detect_anomalies(surface_c, usable, pixel_m=grid.pixel_m, delta_c=sdt.delta_c,
                                     background_m=background_m, min_area_m2=sdt.min_area_m2, labels=labels_px,
                                     names=group_names, choice=sdt.background, cores=core_px)
        if threshold_from is not None:
            t = threshold_from(sample_at_points(detection.delta_c, grid.transform, conf.xs, conf.ys))
            detection = replace(detection, threshold_c=t,
                                mask=anomaly_mask(detection.delta_c, t, min_pixels=detection.min_pixels))
        _emit(progress, "outlining anomalies")
        labels, count = label_regions(detection.mask)
        stats = region_stats(labels, count, detection.delta_c)
        polys = polygonize(labels, count, grid.transform)
        dry_c = detection.background_c[usable]
        range_min_pixels = detection.min_pixels
    else:  # exact polygons and statistics; the preview's background and delta-T
        detection = tiled.detection
        count = len(tiled.polygons)
        stats = RegionStats(pixel_count=tiled.pixels, mean=tiled.delta_mean, max=tiled.delta_max)
        polys = list(tiled.polygons)
        dry_c = detection.background_c[np.isfinite(detection.background_c)]
        range_min_pixels = tiled.preview_min_pixels  # the wet-area range is computed on the preview
    if detection.background is not None:
        warnings.extend(background_warnings(detection.background, background_m=background_m, kind=survey.survey.kind))
    passes = None if pass_images is None else _compare_passes(
        survey, pass_groups, pass_images, choice, warnings, progress, grid=grid, surface_c=surface_c,
        in_roof=in_roof, detection=detection, labels=labels, count=count, background_m=background_m,
        detect_on=detect_on, sections=sections, polys=polys)
    warnings[:0] = _condition_warnings(survey, sections, surface_c=float(np.nanmedian(dry_c))
                                       if np.isfinite(dry_c).any() else None)

    verdicts = assign_status(polys, conf)
    conf_delta = (sample_at_points(detection.delta_c, grid.transform, conf.xs, conf.ys) if tiled is None
                  else tiled.full_rasters.sample(conf.xs, conf.ys))
    if len(conf):
        inside_roof = shapely.covers(outline, shapely.points(conf.xs, conf.ys))
        for i in np.flatnonzero(~inside_roof):
            warnings.append(f"{survey.cores.path.name}: {conf.ids[i]} at ({conf.xs[i]:.2f}, {conf.ys[i]:.2f}) "
                            "lies outside the outline; check its coordinates")
        for i in np.flatnonzero(conf.wet & (verdicts.anomaly_of < 0) & inside_roof):
            d = conf_delta[i]
            seen = f"delta-T there {d:+.2f} °C" if np.isfinite(d) else "no thermal data there"
            include = (f"; a threshold below {np.floor(d * 20) / 20:.2f} °C would include it"
                       if np.isfinite(d) and d > 0 else "")
            warnings.append(
                f"{conf.ids[i]} says wet but lies outside every anomaly ({seen}; threshold {detection.threshold_c:g} °C): "
                f"a possible missed wet area{include}"
            )
    words = wording_of(survey)
    if len(conf) == 0 and count:
        warnings.append(f"no {words.confirmations_any}: every anomaly is unverified; infrared alone does not "
                        f"establish {words.wet_words} (invasive verification is required)")
    warnings.extend(_sounding_notes(conf, verdicts))
    decisive = conf.decisive  # solid soundings neither refute an anomaly nor bound the threshold
    ids = np.asarray(conf.ids, dtype=object)
    check = threshold_check(tuple(ids[decisive].tolist()), conf_delta[decisive], conf.wet[decisive],
                            chosen_c=detection.threshold_c, words=words)
    if len(conf):
        warnings.extend(check.warnings)
    # the same check within each section (its own background, its own confirmations)
    section_checks: list[tuple[str, ThresholdCheck]] = []
    if sections and len(conf):
        points = shapely.points(conf.xs, conf.ys)
        for sec in sections:
            inside = shapely.covers(sec.geometry, points) & decisive
            if inside.any():
                section_checks.append((sec.name, threshold_check(tuple(ids[inside].tolist()), conf_delta[inside],
                                                                 conf.wet[inside], chosen_c=detection.threshold_c,
                                                                 words=words)))
    core_cols, core_rows = ~grid.transform @ (conf.xs[decisive], conf.ys[decisive])
    counted = ("wet", "unverified") if survey.repair.include_unverified else ("wet",)
    counted_polys = [p for p, st in zip(polys, verdicts.status) if st in counted]
    area_range, band = wet_area_range(
        detection.delta_c, check, likely_m2=float(sum(p.area for p in counted_polys)),
        perimeter_m=float(sum(p.length for p in counted_polys)), pixel_m=grid.pixel_m,
        min_pixels=range_min_pixels, core_rows=np.floor(core_rows).astype(np.intp),
        core_cols=np.floor(core_cols).astype(np.intp), core_wet=conf.wet[decisive],
        include_unverified=survey.repair.include_unverified)
    suggestions = suggest_cores(polys, verdicts.status, list(range(1, count + 1)), band=band,
                                transform=grid.transform, pixel_m=grid.pixel_m, min_pixels=range_min_pixels,
                                words=words)

    _emit(progress, "checking the imagery: resolution, focus, reflections, display range")
    from .imagery import assess_imagery

    imagery = assess_imagery(
        primary, grid_transform=grid.transform, grid_shape=grid.shape,
        grid_pixel_m=(tiled.full_rasters.grid if tiled is not None else grid).pixel_m, surface_c=surface_c,
        detection=detection, polygons=polys, labels=labels if tiled is None else None, frames=frame_views,
        sections=sections, specular=specular, outline=outline)
    warnings.extend(imagery.warnings)
    section_of = largest_overlap(polys, [s.geometry for s in sections])
    # anomalies hugging the roof edge or ringing a rooftop unit: a flag naming the likely cause
    place_flags = (edge_flags(polys, outline=outline, exclusions=exclusions) if survey.survey.kind == "roof"
                   else [()] * len(polys))
    for label in (EDGE_FLAG, UNIT_FLAG):
        ids = [str(i + 1) for i, f in enumerate(place_flags) if label in f]
        if ids:
            where = "along the roof edge" if label == EDGE_FLAG else "ringing an exclusion"
            setting = "edge_buffer_m" if label == EDGE_FLAG else "exclusion_buffer_m"
            warnings.append(f"anomal{'y' if len(ids) == 1 else 'ies'} {', '.join(ids)}: a narrow band {where} "
                            f"(flag \"{label}\"): often flashing, parapet or unit heat rather than wet insulation; "
                            f"check in daylight and by a core, or leave the band out with [detect] {setting}")
    # the later stages (margin, files, map, report) take outlines simplified within a
    # fraction of a pixel; areas, perimeters and every judgement above use the exact ones
    pixel_m = (tiled.full_rasters.grid if tiled is not None else grid).pixel_m
    drawn = simplify_outlines(polys, tolerance=SIMPLIFY_TOLERANCE_PX * pixel_m)  # (ring starts normalised)
    anomalies = tuple(
        Anomaly(
            id=i + 1,
            geometry=drawn[i],
            status=verdicts.status[i],
            area_m2=float(p.area),
            perimeter_m=float(p.length),
            delta_mean_c=float(stats.mean[i]),
            delta_max_c=float(stats.max[i]),
            confirmations=verdicts.confirmation_ids[i],
            section=sections[section_of[i]].name if section_of[i] >= 0 else None,
            flags="; ".join(f for f in (imagery.flags_text(i), *place_flags[i]) if f),
            exact=p,
        )
        for i, p in enumerate(polys)
    )

    _emit(progress, "repair quantities")
    quantities = compute_quantities(
        polys, [a.status for a in anomalies], outline=outline, exclusions=exclusions,
        sections=sections, settings=survey.repair, prices=survey.prices, kind=survey.survey.kind,
        drawn=[a.geometry for a in anomalies],
    )
    warnings.extend(quantities.notes)
    if quantities.takeoff.range_note:
        warnings.append(quantities.takeoff.range_note)
    warnings.extend(_large_share_warnings(quantities, survey))
    repair, takeoff, totals = quantities.repair, quantities.takeoff, quantities.sections
    return SurveyResult(
        survey=survey, grid=grid, surface_c=surface_c, detection=detection, outline=outline,
        exclusions=exclusions, roof=roof, sections=tuple(sections), anomalies=anomalies, confirmations=conf,
        verdicts=verdicts, confirmation_delta_c=conf_delta, repair=repair, takeoff=takeoff,
        section_totals=totals, radiometry=radiometry, coverage=coverage, warnings=tuple(warnings),
        passes=passes,
        quantities=quantities,
        threshold=check,
        area_range=area_range,
        suggested_cores=tuple(suggestions),
        registration=tuple(frame_reports),
        full_rasters=None if tiled is None else tiled.full_rasters,
        imagery=imagery,
        cores_threshold=from_cores[-1] if from_cores else None,
        section_checks=tuple(section_checks),
    )


def _write_files(result: SurveyResult, folder: Path, *,
                 extra_writers: tuple[Callable[[SurveyResult, Path], None], ...] = (),
                 map_html: bool = True, report_html: bool = True) -> None:
    """Write every result file into ``folder`` (a staging folder of :func:`wetmap.outputs.replacing`)."""
    from .export import cad, gis, report, tables, webmap

    finish_dxf = cad.write_dxf_beside(result, folder / "repair.dxf")  # a forked process (ezdxf holds the GIL)
    try:
        tables.write_summary(result, folder / "summary.json")
        tables.write_quantities(result, folder / "quantities.csv")
        tables.write_takeoff(result, folder / "takeoff.xlsx")
        gis.write_anomalies(result, folder / "anomalies.gpkg", folder / "anomalies.geojson")
        gis.write_repair(result, folder / "repair.gpkg")
        if result.full_rasters is not None:  # processed in windows: the full rasters are on disk
            result.full_rasters.place(folder)
        else:
            gis.write_raster(result.surface_c, result.grid, folder / "surface_c.tif")
            gis.write_raster(result.detection.delta_c, result.grid, folder / "delta_c.tif")
        if result.passes is not None:
            gis.write_raster(result.passes.cooling_c_per_h, result.grid, folder / "cooling_c_per_h.tif")
        if map_html:
            webmap.write_map(result, folder / "map.html")
        if report_html:
            report.write_report(result, folder / "report.html")
            report.write_pdf(result, folder / "report.pdf", html_text=(folder / "report.html").read_text(encoding="utf-8"))
        for writer in extra_writers:
            writer(result, folder)
    finally:
        finish_dxf()


#: Files of an earlier results folder that a run carries over (the plan of `wetmap window`).
KEPT_FILES = ("window.json", "window.png")


def write_results(result: SurveyResult, out_dir: Path, *, extra_writers: tuple[Callable[[SurveyResult, Path], None], ...] = (),
                  map_html: bool = True, report_html: bool = True) -> Path:
    """Write every result file into ``out_dir`` atomically (:func:`wetmap.outputs.replacing`).

    The files are written to a staging folder beside ``out_dir``; only when all are
    written is an existing ``out_dir`` (wetmap's own) replaced, in one step where the
    file system allows. On failure the staging folder is removed and ``out_dir`` is
    untouched. ``map_html`` / ``report_html`` false skip ``map.html`` / ``report.html``.

    Raises
    ------
    OutputError
        ``out_dir`` is, holds or lies in the survey folder (other than its ``results/``),
        is a file, holds files wetmap did not write, or another run holds its lock.
    """
    with replacing(out_dir, survey=result.survey.folder, keep=KEPT_FILES) as staging:
        _write_files(result, staging, extra_writers=extra_writers, map_html=map_html, report_html=report_html)
    return Path(out_dir).resolve()


def run_survey(folder: str | Path, *, out: str | Path | None = None, progress: Progress | None = None,
               extra_writers: tuple[Callable[[SurveyResult, Path], None], ...] = (),
               map_html: bool = True, report_html: bool = True, scheduler: Any = None,
               tile_px: int | None = None, window_progress: WindowProgress | None = None,
               surveys: tuple[str | Path, ...] = ()) -> SurveyResult:
    """Process the survey in ``folder`` and write its results (default ``folder/results``).

    The results folder is checked and locked before any work (:func:`wetmap.outputs.replacing`);
    ``surveys`` names further survey folders it must not be, hold or lie in.
    ``map_html`` / ``report_html`` false skip ``map.html`` / ``report.html``; ``scheduler``,
    ``tile_px`` and ``window_progress`` as in :func:`process_survey`.
    """
    survey = load_survey(folder)  # a missing survey fails here, before any folder is made
    out_dir = out if out is not None else survey.folder / "results"
    with replacing(out_dir, survey=survey.folder, surveys=surveys, keep=KEPT_FILES) as staging:
        # the window scratch folder lives in the staging folder: the full rasters are linked, not copied
        result = process_survey(survey.folder, progress=progress, scheduler=scheduler, tile_px=tile_px,
                                window_progress=window_progress, scratch=staging)
        _emit(progress, f"writing results to {out_dir}")
        _write_files(result, staging, extra_writers=extra_writers, map_html=map_html, report_html=report_html)
    return result


def check_survey(folder: str | Path) -> tuple[Survey, tuple[str, ...]]:
    """Validate a survey without processing it: survey.toml, plan files, rasters, cores.

    Makes every check a run makes before work (:func:`wetmap.prework.prepare_survey`: plan
    files, CRS at the site, mosaics' placement, coverage and units, grid size, cores, board
    take-off) and registers the frames. Returns the survey and the warnings found; raises
    :class:`WetmapError` listing every problem found (every survey.toml problem at once,
    then every pre-work problem at once).
    """
    from .prework import prepare_survey

    survey = with_sun_times(load_survey(folder))  # sunset from place and date when not typed in
    prepared = prepare_survey(survey)  # the same pre-work checks as a run, every problem at once
    warnings: list[str] = list(prepared.warnings)
    sections = list(prepared.sections)
    radiometry = _radiometry(survey, warnings)
    _register_frames(survey, radiometry, warnings, None)  # frame files readable, control points sound
    warnings[:0] = _condition_warnings(survey, sections)
    return survey, tuple(warnings)
