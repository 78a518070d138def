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
from .confirmations import Confirmations, read_confirmations
from .detect import Detection, default_background_m, detect_anomalies
from .errors import InputFileError, ProcessingError
from .outputs import replacing
from .passes import PassComparison, align_to_grid, compare_passes, group_passes
from .polygons import RegionStats, label_regions, polygonize, region_stats
from .quantities import BoardTakeoff, Quantities, SectionTotals, compute_quantities, largest_overlap
from .rasters import PlanGrid, inspect_raster, plan_grid_for, read_onto_grid
from .register import SUSPECT_MIN_PX, FrameReport, Registration
from .survey import Survey, load_survey
from .tiles import FullRasters, WindowProgress, detect_in_windows
from .vectors import Section, read_layer, read_outline, read_sections

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
    "surface_c.tif",
    "delta_c.tif",
)


@dataclass(frozen=True)
class Anomaly:
    """One anomaly polygon with its attributes (names as in the output format)."""

    id: int
    geometry: Polygon
    status: Status
    area_m2: float
    perimeter_m: float
    delta_mean_c: float
    delta_max_c: float
    confirmations: tuple[str, ...]
    section: str | None
    flags: str = ""
    """Imagery flags (``"; "``-separated): ``reflection suspect``, ``under-resolved`` (:mod:`wetmap.imagery`)."""


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

    def summary(self) -> dict[str, Any]:
        """The ``summary.json`` content (areas in m2)."""
        by: dict[str, float] = {"wet": 0.0, "dry": 0.0, "unverified": 0.0}
        for a in self.anomalies:
            by[a.status] += a.area_m2
        roof_area = self.roof.area
        wet = by["wet"] + by["unverified"]
        d, s = self.detection, self.survey
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
                {k: (round(v, 4) if isinstance(v, float) else v) for k, v in vars(t).items()}
                for t in self.section_totals
            ],
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
                "reflected_c": round(self.radiometry.reflected_c, 3),
                "reflected_source": self.radiometry.reflected_source,
                "transmittance": round(self.radiometry.transmittance, 5),
                "transmittance_source": self.radiometry.transmittance_source,
                "delta_c": d.threshold_c,
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
                "replace_above_pct": s.repair.replace_above_pct,
                "area_units": list(s.repair.area_units),
                "processing": self._processing(),
            },
            "wetmap_version": __version__,
        }

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


def _area_word(survey: Survey) -> str:
    """``"roof"``, or ``"hull side"`` (with its side when given): the surveyed area in words."""
    if survey.survey.kind != "hull":
        return "roof"
    return f"{survey.survey.side} hull side" if survey.survey.side else "hull side"


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
        est = estimate_reflected_c(cond.air_c, cond.humidity_pct, cond.sky or "clear", sky_view=sky_view)
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
        reg = register_points(pts[:, :2], pts[:, 2:], where=where)
        surface = _to_surface_k(image.values_k, radiometry)
        lost = int(np.count_nonzero(np.isnan(surface) & ~np.isnan(image.values_k)))
        if lost:
            warnings.append(f"{name}: {lost} pixels could not be corrected (apparent temperature too low for the "
                            "emissivity and reflected temperature given): check [camera] emissivity and "
                            "[conditions] reflected_c")
        fit = reg.fit
        if reg.loo.note:
            warnings.append(f"{name} ([[frame]] #{i + 1}): {reg.loo.note}")
        elif fit.rms_px > SUSPECT_MIN_PX:
            warnings.append(f"{name} ([[frame]] #{i + 1}): the control points fit to {fit.rms_px:.1f} px RMS "
                            f"({fit.rms_m:.3g} m): placement is uncertain; check them")
        if fit.mirrored and survey.survey.kind == "roof":
            warnings.append(f"{name} ([[frame]] #{i + 1}): the frame is a mirror image of the plan; check that each "
                            "point is [col, row, x, y] (not x and y swapped) and that the image is not flipped")
        out.append(_RegisteredFrame(name=name, surface_k=surface, registration=reg))
    return out


def _frames_onto_grid(frames: list[_RegisteredFrame], grid: PlanGrid, outline: BaseGeometry,
                      warnings: list[str], *, limits=None, views: list | None = None
                      ) -> tuple[np.ndarray, list[FrameReport]]:
    """Resample and blend the frames on the plan grid (surface K, NaN where no frame).

    Frames far less sharp than the others are blended only where no sharper frame covers
    (``[limits] exclude_blurred``; :mod:`wetmap.imagery`); ``views``, when given, receives
    each placed frame as a :class:`wetmap.imagery.FrameView`.
    """
    from .imagery import frame_views
    from .register import blend_frames, frame_gsd_m, resample_frame
    from .survey import Limits

    parts, reports, placed = [], [], []
    for fr in frames:
        matrix = fr.registration.matrix
        part = resample_frame(fr.surface_k, matrix, grid_transform=grid.transform, grid_shape=grid.shape)
        if part is None:
            warnings.append(f"{fr.name}: lands nowhere on the plan grid (the outline's bounds): check its control "
                            "points' plan x, y")
        else:
            parts.append(part)
        placed.append(part)
        reports.append(FrameReport.build(
            fr.name, fr.registration, gsd_m=frame_gsd_m(matrix, fr.surface_k.shape, outline.bounds),
            covered_m2=(part.covered if part is not None else 0) * grid.pixel_area_m2))
    limits = limits or Limits()
    found = frame_views([fr.name for fr in frames], [fr.surface_k for fr in frames],
                        [fr.registration.matrix for fr in frames], placed, bounds=outline.bounds,
                        focus_ratio=limits.focus_ratio, exclude_blurred=limits.exclude_blurred)
    if views is not None:
        views.extend(found)
    return blend_frames(parts, grid.shape, fallback=[v.fallback for v in found]), reports


def _surface_on_grid(survey: Survey, outline: BaseGeometry, radiometry: Radiometry,
                     warnings: list[str], progress: Progress | None, *,
                     registration: list[FrameReport] | None = None,
                     views: list | None = None) -> tuple[PlanGrid, np.ndarray]:
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
        values = read_onto_grid(m.path, grid, info=info, units=m.units, scale=m.scale, offset=m.offset)
        if apparent is None:
            apparent = values
        else:  # later mosaics fill what earlier ones do not cover
            gap = np.isnan(apparent)
            apparent[gap] = values[gap]
    surface: np.ndarray | None = None
    if apparent is not None:
        _emit(progress, "correcting apparent to surface temperature")
        surface = _to_surface_k(apparent, radiometry)
        lost = int(np.count_nonzero(np.isnan(surface) & ~np.isnan(apparent)))
        if lost:
            warnings.append(
                f"{lost} pixels could not be corrected (apparent temperature too low for the emissivity and "
                "reflected temperature given): check [camera] emissivity and [conditions] reflected_c"
            )
    if frames:
        _emit(progress, "resampling and blending the frames on the plan grid")
        from_frames, reports = _frames_onto_grid(frames, grid, outline, warnings, limits=survey.limits, views=views)
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


def _compare_passes(survey: Survey, groups, outline: BaseGeometry, radiometry: Radiometry, warnings: list[str],
                    progress: Progress | None, *, grid: PlanGrid, surface_c: np.ndarray, in_roof: np.ndarray,
                    detection: Detection, labels: np.ndarray, count: int, background_m: float) -> PassComparison:
    """Detect anomalies in each earlier pass and compare them with the primary (last) pass."""
    sdt = survey.detect
    surfaces, deltas, label_list, counts = [], [], [], []
    for g in groups[:-1]:
        _emit(progress, f"pass {g.label}: surface temperature and detection")
        sub = replace(survey, mosaics=g.mosaics, frames=g.frames)
        g_grid, g_surface = _surface_on_grid(sub, outline, radiometry, warnings, progress)
        g_surface = align_to_grid(g_surface, g_grid.transform, grid.transform, grid.shape)
        g_usable = in_roof & np.isfinite(g_surface)
        det = detect_anomalies(g_surface, g_usable, pixel_m=grid.pixel_m, delta_c=sdt.delta_c,
                               background_m=background_m, min_area_m2=sdt.min_area_m2)
        lab, n = label_regions(det.mask)
        surfaces.append(np.where(g_usable, g_surface, np.nan))
        deltas.append(det.delta_c)
        label_list.append(lab)
        counts.append(n)
    surfaces.append(np.where(in_roof & np.isfinite(surface_c), surface_c, np.nan))
    deltas.append(detection.delta_c)
    label_list.append(labels)
    counts.append(count)
    _emit(progress, "matching anomalies across passes")
    result = compare_passes(surfaces, deltas, label_list, counts, hours=[g.hours for g in groups],
                            pass_labels=[g.label for g in groups], transform=grid.transform)
    warnings.extend(result.warnings())
    return result


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
    survey = load_survey(folder)
    crs = None if survey.survey.is_local else survey.survey.crs
    warnings: list[str] = []

    _emit(progress, "reading the plan")
    outline, notes = read_outline(survey.plan.outline, survey_crs=crs)
    warnings.extend(notes)
    exclusions: BaseGeometry = Polygon()
    if survey.plan.exclusions is not None:
        layer = read_layer(survey.plan.exclusions, survey_crs=crs, what="exclusions")
        warnings.extend(layer.notes)
        exclusions = _union(layer.geometries)
    sections: list[Section] = []
    if survey.plan.sections is not None:
        sections, notes = read_sections(survey.plan.sections, survey_crs=crs)
        warnings.extend(notes)
    specular: BaseGeometry | None = None  # [plan] specular: surfaces that show reflections (wetmap.imagery)
    if survey.plan.specular is not None:
        layer = read_layer(survey.plan.specular, survey_crs=crs, what="specular surfaces")
        warnings.extend(layer.notes)
        specular = _union(layer.geometries)
    roof = outline.difference(exclusions) if not exclusions.is_empty else outline
    if roof.area <= 0:
        raise InputFileError(f"{survey.plan.exclusions}: the exclusions cover the whole outline; nothing is left to survey")

    radiometry = _radiometry(survey, warnings)
    # several passes (imagery with different times): the last pass is the primary detection
    pass_groups, notes = group_passes(survey.mosaics, survey.frames, sunset=survey.conditions.sunset)
    warnings.extend(notes)
    primary = survey if len(pass_groups) == 1 else replace(
        survey, mosaics=pass_groups[-1].mosaics, frames=pass_groups[-1].frames)
    frame_reports: list[FrameReport] = []
    frame_views: list = []  # the placed frames, for the imagery checks (wetmap.imagery)
    area_word = _area_word(survey)
    sdt = survey.detect
    x0, y0, x1, y1 = outline.bounds
    background_m = sdt.background_m or default_background_m(survey.survey.kind, max(x1 - x0, y1 - y0))
    # one pass of large mosaics on the plan grid's lattice: in windows, same result (wetmap.tiles)
    tiled = None if len(pass_groups) > 1 else detect_in_windows(
        primary, outline=outline, roof=roof, radiometry=radiometry, background_m=background_m, tile_px=tile_px,
        scheduler=scheduler, scratch=None if scratch is None else Path(scratch), progress=progress,
        window_progress=window_progress)
    if tiled is None:
        grid, surface_c = _surface_on_grid(primary, outline, radiometry, warnings, progress,
                                           registration=frame_reports, views=frame_views)
        _emit(progress, "masking the roof")
        in_roof = _mask_of(roof, grid)
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
    }
    if covered_px == 0:
        warnings.append(f"no usable thermal data on the {area_word} (all nodata, or the imagery misses the outline): "
                        "nothing was detected; check the imagery's placement and nodata")
    elif coverage["uncovered_pct"] > 0.5:
        warnings.append(
            f"{coverage['uncovered_m2']:.1f} m2 ({coverage['uncovered_pct']:.1f} %) of the {area_word} has no thermal data: "
            "it is not surveyed, which does not mean dry"
        )
    if constant:
        warnings.append(f"the thermal data on the {area_word} are constant: no contrast, nothing can be detected")
    if tiled is None:
        _emit(progress, "estimating the dry background and thresholding")
        detection = detect_anomalies(surface_c, usable, pixel_m=grid.pixel_m, delta_c=sdt.delta_c,
                                     background_m=background_m, min_area_m2=sdt.min_area_m2)
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
    passes = None if len(pass_groups) == 1 else _compare_passes(
        survey, pass_groups, outline, radiometry, warnings, progress, grid=grid, surface_c=surface_c,
        in_roof=in_roof, detection=detection, labels=labels, count=count, background_m=background_m)
    warnings[:0] = _condition_warnings(survey, sections, surface_c=float(np.nanmedian(dry_c))
                                       if np.isfinite(dry_c).any() else None)

    if survey.cores is not None:
        conf = read_confirmations(survey.cores.path, wet_above=survey.cores.wet_above,
                                  wet_above_pct=survey.cores.wet_above_pct)
    else:
        conf = Confirmations.empty()
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
                f"{conf.ids[i]} says wet but lies outside every anomaly ({seen}; threshold {sdt.delta_c:g} °C): "
                f"a possible missed wet area{include}"
            )
    if len(conf) == 0 and count:
        warnings.append("no cores or readings: every anomaly is unverified; infrared alone does not "
                        "establish wet insulation (invasive verification is required)")
    check = threshold_check(conf.ids, conf_delta, conf.wet, chosen_c=sdt.delta_c)
    if len(conf):
        warnings.extend(check.warnings)
    core_cols, core_rows = ~grid.transform @ (conf.xs, conf.ys)
    counted = ("wet", "unverified") if survey.repair.include_unverified else ("wet",)
    counted_polys = [p for p, st in zip(polys, verdicts.status) if st in counted]
    area_range, band = wet_area_range(
        detection.delta_c, check, likely_m2=float(sum(p.area for p in counted_polys)),
        perimeter_m=float(sum(p.length for p in counted_polys)), pixel_m=grid.pixel_m,
        min_pixels=range_min_pixels, core_rows=np.floor(core_rows).astype(np.intp),
        core_cols=np.floor(core_cols).astype(np.intp), core_wet=conf.wet,
        include_unverified=survey.repair.include_unverified)
    suggestions = suggest_cores(polys, verdicts.status, list(range(1, count + 1)), band=band,
                                transform=grid.transform, pixel_m=grid.pixel_m, min_pixels=range_min_pixels)

    _emit(progress, "checking the imagery: resolution, focus, reflections, display range")
    from .imagery import assess_imagery

    imagery = assess_imagery(
        primary, grid_transform=grid.transform, grid_shape=grid.shape,
        grid_pixel_m=(tiled.full_rasters.grid if tiled is not None else grid).pixel_m, surface_c=surface_c,
        detection=detection, polygons=polys, labels=labels if tiled is None else None, frames=frame_views,
        sections=sections, specular=specular, outline=outline)
    warnings.extend(imagery.warnings)
    section_of = largest_overlap(polys, [s.geometry for s in sections])
    anomalies = tuple(
        Anomaly(
            id=i + 1,
            geometry=p,
            status=verdicts.status[i],
            area_m2=float(p.area),
            perimeter_m=float(p.length),
            delta_mean_c=float(stats.mean[i]),
            delta_max_c=float(stats.max[i]),
            confirmations=verdicts.confirmation_ids[i],
            section=sections[section_of[i]].name if section_of[i] >= 0 else None,
            flags=imagery.flags_text(i),
        )
        for i, p in enumerate(polys)
    )

    _emit(progress, "repair quantities")
    quantities = compute_quantities(
        [a.geometry for a in anomalies], [a.status for a in anomalies], outline=outline, exclusions=exclusions,
        sections=sections, settings=survey.repair, prices=survey.prices, kind=survey.survey.kind,
    )
    warnings.extend(quantities.notes)
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
    )


def _write_files(result: SurveyResult, folder: Path, *,
                 extra_writers: tuple[Callable[[SurveyResult, Path], None], ...] = (),
                 map_html: bool = True, report_html: bool = True) -> None:
    """Write every result file into ``folder`` (a staging folder of :func:`wetmap.outputs.replacing`)."""
    from .export import cad, gis, report, tables, webmap

    tables.write_summary(result, folder / "summary.json")
    tables.write_quantities(result, folder / "quantities.csv")
    gis.write_anomalies(result, folder / "anomalies.gpkg", folder / "anomalies.geojson")
    gis.write_repair(result, folder / "repair.gpkg")
    cad.write_dxf(result, folder / "repair.dxf")
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
    for writer in extra_writers:
        writer(result, folder)


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

    Returns the survey and the warnings found; raises :class:`WetmapError` on the first
    file that cannot be used (every survey.toml problem at once).
    """
    survey = load_survey(folder)
    crs = None if survey.survey.is_local else survey.survey.crs
    warnings: list[str] = []
    _, notes = read_outline(survey.plan.outline, survey_crs=crs)
    warnings.extend(notes)
    if survey.plan.exclusions is not None:
        warnings.extend(read_layer(survey.plan.exclusions, survey_crs=crs, what="exclusions").notes)
    sections: list[Section] = []
    if survey.plan.sections is not None:
        sections, notes = read_sections(survey.plan.sections, survey_crs=crs)
        warnings.extend(notes)
    for m in survey.mosaics:
        inspect_raster(m.path, origin=m.origin, pixel_m=m.pixel_m, survey_crs=crs)
    if survey.cores is not None:
        read_confirmations(survey.cores.path, wet_above=survey.cores.wet_above,
                           wet_above_pct=survey.cores.wet_above_pct)
    radiometry = _radiometry(survey, warnings)
    _register_frames(survey, radiometry, warnings, None)  # frame files readable, control points sound
    warnings[:0] = _condition_warnings(survey, sections)
    return survey, tuple(warnings)
