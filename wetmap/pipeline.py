"""``run_survey()``: the stages wired in one direction, results written atomically.

survey.toml -> plan -> imagery on the plan grid -> surface temperature -> background,
delta, mask -> polygons -> confirmations -> quantities -> results/.

Results are written to a staging folder beside the destination and swapped into place
only when every file was written (:mod:`wetmap.outputs`); a failed run leaves earlier
results exactly as they were.
"""

from __future__ import annotations

import contextlib
import logging
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
import shapely
from pyproj import CRS
from shapely.geometry import Polygon
from shapely.geometry.base import BaseGeometry

from .conditions import check_conditions, estimate_reflected_c
from .verdicts import (ThresholdCheck, Verdicts, assign_status, counted_statuses, sample_at_points, suggest_cores,
                      threshold_check, wet_area_range)
from .confirmations import Confirmations
from .cooldown import plan_survey_window
from .detect import EDGE_FLAG, UNIT_FLAG, Detection, background_warnings, default_background_m, edge_flags
from .errors import InputFileError, ProcessingError, SurveyError, WetmapError
from .export import cad, gis, report, tables, webmap
from .export.forked import write_beside
from .frames import read_frame
from .image_checks import ImageryReport, assess_imagery, frame_views
from .outputs import replacing
from .photos import Photo, nearest_anomalies
from .passes import PassComparison, align_to_grid, choose_primary, compare_passes, group_passes, pass_contrast_c
from .polygons import SIMPLIFY_TOLERANCE_PX, RegionStats, label_regions, simplify_outlines
from .prework import prepare_survey
from .quantities import Quantities, compute_quantities, largest_overlap
from .radiometry import (Radiometry, apparent_from_surface, atmospheric_transmittance, section_emissivity_correction,
                         surface_from_apparent, to_surface_k)
from .rasters import PlanGrid, inspect_raster, plan_grid_for, read_onto_grid
from .register import (GIRTH_STRETCH_MAX, MAX_VIEW_ANGLE_DEG, SUSPECT_MIN_PX, FrameReport, Registration,
                       blend_frames, choose_pixel_m, frame_gsd_m, fresnel_emissivity, girth_stretch, placement_ranks,
                       register_points, resample_frame)
from .results import (OUTSIDE_SECTIONS, RESULT_FILES, Anomaly, CoresThreshold, Coverage, SurveyResult, area_word,
                      large_wet_shares)
from .sun import with_sun_times
from .survey import Limits, Survey, load_survey
from .tiles import TiledDetection, WindowProgress, detect_array, detect_in_windows
from .windows import pixel_edges, roof_mask, section_label_raster
from .vectors import Section
from .wording import wording_of

__all__ = ["process_survey", "write_results", "run_survey", "check_survey",
           "Plan", "plan_stage", "OnGrid", "imagery_stage", "Found", "detection_stage", "Judged", "verdict_stage",
           "image_check_stage", "anomalies_of", "quantity_stage",
           # the result model, importable from here too (wetmap.results)
           "Anomaly", "SurveyResult", "RESULT_FILES"]

log = logging.getLogger(__name__)

Progress = Callable[[str], None]




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


def _emit(progress: Progress | None, message: str) -> None:
    log.info(message)
    if progress is not None:
        progress(message)


def _union(geoms) -> BaseGeometry:
    return shapely.union_all(np.asarray(list(geoms), dtype=object)) if geoms else Polygon()


def _radiometry(survey: Survey, warnings: list[str]) -> Radiometry:
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
    :mod:`wetmap.windows` computes it, so whole-array and windowed runs give the same pixels)."""
    return roof_mask(geoms, grid.transform, grid.shape)


@dataclass(frozen=True)
class _RegisteredFrame:
    """One ``[[frame]]``: its surface temperature (K, image pixels) and its registration."""

    name: str
    surface_k: np.ndarray
    registration: Registration


def _register_frames(survey: Survey, radiometry: Radiometry, warnings: list[str],
                     progress: Progress | None) -> list[_RegisteredFrame]:
    """Read each frame, correct it to surface temperature and fit its control points."""
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
        surface = to_surface_k(image.values_k, radiometry)
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
    (``[limits] exclude_blurred``; :mod:`wetmap.image_checks`); ``views``, when given, receives
    each placed frame as a :class:`wetmap.image_checks.FrameView`.
    """
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
    :class:`wetmap.image_checks.FrameView` per placed frame.
    """
    crs = None if survey.survey.is_local else survey.survey.crs
    infos = [inspect_raster(m.path, origin=m.origin, pixel_m=m.pixel_m, survey_crs=crs) for m in survey.mosaics]
    for m, info in zip(survey.mosaics, infos):
        if info.crs is not None and crs is not None:
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
        surface = to_surface_k(apparent, radiometry)
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
    det = detect_array(g_surface, g_usable, pixel_m=grid.pixel_m, threshold_c=sdt.delta_c,
                       background_m=background_m, min_area_m2=sdt.min_area_m2,
                       labels=_section_labels(detect_on.section_geoms, grid), names=detect_on.names,
                       choice=sdt.background, cores=_core_pixels(detect_on.conf, grid),
                       applied_c=threshold_c).detection
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



def _group_names(sections, area_word: str) -> tuple[str, ...]:
    """One name per section label: the sections in order, then the rest of the roof; or the whole roof."""
    if not sections:
        return (area_word,)
    return (*(s.name for s in sections), OUTSIDE_SECTIONS)


def _section_labels(geoms, grid: PlanGrid) -> np.ndarray | None:
    """Section label of every pixel (pixel-centre rule of :mod:`wetmap.windows`), or ``None`` with no sections."""
    if not geoms:
        return None
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


def _large_share_warnings(quantities: Quantities, survey: Survey) -> list[str]:
    """A plain warning for each large wet share (:func:`large_wet_shares`)."""
    return [f"{where}: anomalies fill {100 * f:.0f} % of it, a large wet share: this figure decides between repair "
            "and replacement (some local codes require replacement above 25 % wet; a trade rule of thumb repairs "
            "only under about 30 %), so confirm the wet boundary with cores and check which rule applies"
            for where, f in large_wet_shares(quantities, survey)]


# ------------------------------------------------------------------------------------------
# The stages of a run: each takes the earlier stages' results and returns its own (frozen)
# ------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Plan:
    """The plan stage: the survey, its plan layers and confirmations checked, the radiometry."""

    survey: Survey
    outline: BaseGeometry
    exclusions: BaseGeometry
    roof: BaseGeometry
    """Outline minus exclusions."""
    surveyed: BaseGeometry
    """The roof minus the bands left out (``[detect] edge_buffer_m``, ``exclusion_buffer_m``)."""
    bands_m2: dict[str, float]
    sections: tuple[Section, ...]
    specular: Any
    """``[plan] specular``: surfaces that show reflections (:mod:`wetmap.image_checks`)."""
    confirmations: Confirmations
    group_names: tuple[str, ...]
    """One background group per section label (:func:`_group_names`)."""
    radiometry: Radiometry
    background_m: float
    warnings: tuple[str, ...]
    photos: tuple[Photo, ...] = ()
    """The usable site photos, found and checked once (:func:`wetmap.photos.find_photos`)."""

    @property
    def section_geoms(self) -> list:
        return [s.geometry for s in self.sections]


def plan_stage(survey: Survey, *, progress: Progress | None = None) -> Plan:
    """Every pre-work check at once (:func:`wetmap.prework.prepare_survey`), the surveyed part
    of the roof, the background groups and the radiometry. ``wetmap check`` runs this stage too."""
    warnings: list[str] = []
    _emit(progress, "reading the plan and checking every input")
    prepared = prepare_survey(survey)  # every problem at once
    warnings.extend(prepared.warnings)
    outline, exclusions, roof = prepared.outline, prepared.exclusions, prepared.roof
    sections = tuple(prepared.sections)
    conf = prepared.confirmations if prepared.confirmations is not None else Confirmations.empty()
    sdt = survey.detect
    surveyed, bands_m2 = _surveyed_part(roof, outline, exclusions, edge_buffer_m=sdt.edge_buffer_m,
                                        exclusion_buffer_m=sdt.exclusion_buffer_m)
    if surveyed.area <= 0:
        raise InputFileError(f"{survey.file}: [detect] edge_buffer_m = {sdt.edge_buffer_m:g} and exclusion_buffer_m = "
                             f"{sdt.exclusion_buffer_m:g} leave nothing of the roof to survey; make them smaller")
    if survey.frames and any(sec.emissivity is not None for sec in sections):
        warnings.append("sections.geojson gives emissivities per section: they correct the mosaics' pixels; "
                        "[[frame]] pixels are corrected with [camera] emissivity")
    radiometry = _radiometry(survey, warnings)
    x0, y0, x1, y1 = outline.bounds
    background_m = sdt.background_m or default_background_m(survey.survey.kind, max(x1 - x0, y1 - y0))
    return Plan(survey=survey, outline=outline, exclusions=exclusions, roof=roof, surveyed=surveyed,
                bands_m2=bands_m2, sections=sections, specular=prepared.specular, confirmations=conf,
                group_names=_group_names(sections, area_word(survey)), radiometry=radiometry,
                background_m=background_m, warnings=tuple(warnings), photos=prepared.photos)


class _CoresRule:
    """``[detect] delta_c = "cores"``: the threshold from the confirmations' delta-T
    (:func:`threshold_from_cores`), remembered for the summary."""

    def __init__(self, plan: Plan):
        self.plan = plan
        self.found: list[CoresThreshold] = []

    def __call__(self, core_delta: np.ndarray) -> float:
        conf = self.plan.confirmations
        self.found.append(threshold_from_cores(conf.ids, core_delta, conf.wet, file=self.plan.survey.file))
        return self.found[-1].chosen_c


@dataclass(frozen=True)
class OnGrid:
    """The imagery stage: the primary pass's surface temperature on the plan grid.

    In windows (``tiled``), ``grid`` and ``surface_c`` are the preview and the detection is
    already made (:func:`wetmap.tiles.detect_in_windows`); otherwise the whole array is in
    memory with its roof mask and section labels.
    """

    primary: Survey
    """The survey with the primary pass's imagery only."""
    grid: PlanGrid
    surface_c: np.ndarray
    in_roof: np.ndarray | None
    section_labels: np.ndarray | None
    tiled: TiledDetection | None
    coverage: Coverage
    constant: bool
    registration: tuple[FrameReport, ...]
    views: tuple[Any, ...]
    """The placed frames (:class:`wetmap.image_checks.FrameView`), for the image checks."""
    pass_groups: tuple[Any, ...]
    pass_images: tuple[_PassImage, ...] | None
    choice: tuple | None
    """The primary pass's index, rule, contrasts and the detections made choosing it."""
    warnings: tuple[str, ...]

    @property
    def full_grid(self) -> PlanGrid:
        """The full-resolution grid (``grid`` unless in windows)."""
        return self.tiled.full_rasters.grid if self.tiled is not None else self.grid


def imagery_stage(plan: Plan, *, progress: Progress | None = None, scheduler: Any = None, tile_px: int | None = None,
                  window_progress: WindowProgress | None = None, scratch: str | Path | None = None,
                  threshold_from: Callable[[np.ndarray], float] | None = None) -> OnGrid:
    """The passes grouped and the primary one chosen; its imagery on the plan grid, corrected to
    surface temperature (in windows for one pass of large mosaics on the grid's lattice), and
    the coverage of the surveyed roof."""
    survey, sdt = plan.survey, plan.survey.detect
    warnings: list[str] = []
    frame_reports: list[FrameReport] = []
    frame_views: list = []
    # several passes (imagery with different times): the pass with the greatest wet-dry
    # contrast is the primary detection (wetmap.passes.choose_primary)
    pass_groups, notes = group_passes(survey.mosaics, survey.frames, sunset=survey.conditions.sunset)
    warnings.extend(notes)
    detect_on = _DetectOn(section_geoms=tuple(plan.section_geoms), names=plan.group_names, conf=plan.confirmations)
    pass_images: list[_PassImage] | None = None
    choice = None
    if len(pass_groups) > 1:
        pass_images = _pass_images(survey, pass_groups, plan.outline, plan.radiometry, progress,
                                   sections=plan.sections)
        choice = _choose_primary_pass(survey, pass_images, plan.surveyed, plan.background_m, progress,
                                      detect_on=detect_on)
        for k, image in enumerate(pass_images):
            if k != choice[0]:
                warnings.extend(image.warnings)
    primary = survey if choice is None else replace(
        survey, mosaics=pass_groups[choice[0]].mosaics, frames=pass_groups[choice[0]].frames)
    conf = plan.confirmations
    # one pass of large mosaics on the plan grid's lattice: in windows, same result (wetmap.tiles)
    tiled = None if len(pass_groups) > 1 else detect_in_windows(
        primary, outline=plan.outline, roof=plan.surveyed, radiometry=plan.radiometry, background_m=plan.background_m,
        tile_px=tile_px, scheduler=scheduler, scratch=None if scratch is None else Path(scratch), progress=progress,
        window_progress=window_progress, sections=plan.section_geoms, names=plan.group_names, choice=sdt.background,
        section_emissivity=tuple(sec.emissivity for sec in plan.sections),
        cores=(conf.xs, conf.ys, conf.wet), threshold_from=threshold_from)
    in_roof = labels_px = None
    if tiled is None:
        if pass_images is not None and choice is not None:  # several passes: the chosen one, already read
            chosen = pass_images[choice[0]]
            grid, surface_c = chosen.grid, chosen.surface_c
            warnings.extend(chosen.warnings)
            frame_reports.extend(chosen.registration)
            frame_views.extend(chosen.views)
        else:
            grid, surface_c = _surface_on_grid(primary, plan.outline, plan.radiometry, warnings, progress,
                                               registration=frame_reports, views=frame_views,
                                               sections=plan.sections)
        _emit(progress, "masking the roof")
        in_roof = _mask_of(plan.surveyed, grid)
        labels_px = _section_labels(plan.section_geoms, grid)
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
    coverage = Coverage.of_pixels(roof_px, covered_px, px_area, bands_m2=plan.bands_m2)
    for key, what, setting in (("edge_band_m2", "along the outline", "edge_buffer_m"),
                               ("exclusion_band_m2", "around the exclusions", "exclusion_buffer_m")):
        if key in plan.bands_m2:
            warnings.append(f"{plan.bands_m2[key]:.1f} m2 in the band {what} ([detect] {setting} = "
                            f"{getattr(sdt, setting):g}) is left out: not surveyed, which does not mean dry")
    words_area = area_word(survey)
    if covered_px == 0:  # nothing to detect on: a confident empty answer would be wrong
        raise ProcessingError(f"{survey.file}: no usable thermal data on the {words_area} (all nodata, the imagery "
                              "misses the outline, or every pixel lost in the apparent-to-surface correction): check "
                              "the imagery's placement and nodata, [camera] emissivity and [conditions] reflected_c; "
                              "earlier results are kept")
    if coverage.uncovered_pct > 0.5:
        warnings.append(
            f"{coverage.uncovered_m2:.1f} m2 ({coverage.uncovered_pct:.1f} %) of the {words_area} has no thermal data: "
            "it is not surveyed, which does not mean dry"
        )
    if constant:
        warnings.append(f"the thermal data on the {words_area} are constant: no contrast, nothing can be detected")
    return OnGrid(primary=primary, grid=grid, surface_c=surface_c, in_roof=in_roof, section_labels=labels_px,
                  tiled=tiled, coverage=coverage, constant=constant, registration=tuple(frame_reports),
                  views=tuple(frame_views), pass_groups=tuple(pass_groups),
                  pass_images=None if pass_images is None else tuple(pass_images), choice=choice,
                  warnings=tuple(warnings))


@dataclass(frozen=True)
class Found:
    """The detection stage: background, delta-T, the anomaly outlines (exact) and their statistics."""

    detection: Detection
    polygons: tuple
    stats: RegionStats
    labels: np.ndarray | None
    """Region labels of the whole array (``None`` in windows)."""
    count: int
    dry_c: np.ndarray
    """The dry background over the usable roof (the preview's in windows), degC."""
    range_min_pixels: int
    """Smallest region of the wet-area range's grid (the preview's in windows)."""
    passes: PassComparison | None
    warnings: tuple[str, ...]


def detection_stage(plan: Plan, on_grid: OnGrid, *, progress: Progress | None = None,
                    threshold_from: Callable[[np.ndarray], float] | None = None) -> Found:
    """The dry background, delta-T and the cleaned anomaly regions: the one engine
    (:mod:`wetmap.tiles`) with one window for the array in memory, or the windows' result;
    then the other passes compared with the primary one."""
    survey, sdt = plan.survey, plan.survey.detect
    warnings: list[str] = []
    tiled, grid = on_grid.tiled, on_grid.grid
    labels = None
    if tiled is None:
        _emit(progress, "estimating the dry background and thresholding")
        usable = on_grid.in_roof & np.isfinite(on_grid.surface_c)
        found = detect_array(on_grid.surface_c, usable, pixel_m=grid.pixel_m, threshold_c=sdt.delta_c,
                             background_m=plan.background_m, min_area_m2=sdt.min_area_m2,
                             labels=on_grid.section_labels, names=plan.group_names, choice=sdt.background,
                             cores=_core_pixels(plan.confirmations, grid), threshold_from=threshold_from)
        detection = found.detection
        _emit(progress, "outlining anomalies")
        labels, count = label_regions(detection.mask)
        stats = RegionStats(pixel_count=found.pixels, mean=found.delta_mean, max=found.delta_max)
        polys = found.polygons(grid.transform)
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
        warnings.extend(background_warnings(detection.background, background_m=plan.background_m,
                                            kind=survey.survey.kind))
    passes = None
    if on_grid.pass_images is not None:
        detect_on = _DetectOn(section_geoms=tuple(plan.section_geoms), names=plan.group_names,
                              conf=plan.confirmations)
        passes = _compare_passes(
            survey, list(on_grid.pass_groups), list(on_grid.pass_images), on_grid.choice, warnings, progress,
            grid=grid, surface_c=on_grid.surface_c, in_roof=on_grid.in_roof, detection=detection, labels=labels,
            count=count, background_m=plan.background_m, detect_on=detect_on, sections=plan.sections, polys=polys)
    return Found(detection=detection, polygons=tuple(polys), stats=stats, labels=labels, count=count, dry_c=dry_c,
                 range_min_pixels=range_min_pixels, passes=passes, warnings=tuple(warnings))


@dataclass(frozen=True)
class Judged:
    """The verdict stage: statuses from the confirmations, the threshold checked against them,
    the counted wet area's range and where the next core is worth most."""

    verdicts: Verdicts
    confirmation_delta_c: np.ndarray
    threshold: ThresholdCheck
    section_checks: tuple[tuple[str, ThresholdCheck], ...]
    area_range: Any
    suggested_cores: tuple[Any, ...]
    warnings: tuple[str, ...]


def verdict_stage(plan: Plan, on_grid: OnGrid, found: Found) -> Judged:
    """Each anomaly's status, the confirmations' delta-T, missed wet cores, the threshold
    check (whole roof and per section), the wet-area range and the suggested cores."""
    survey, conf, grid = plan.survey, plan.confirmations, on_grid.grid
    detection, polys = found.detection, list(found.polygons)
    warnings: list[str] = []
    verdicts = assign_status(polys, conf)
    conf_delta = (sample_at_points(detection.delta_c, grid.transform, conf.xs, conf.ys) if on_grid.tiled is None
                  else on_grid.tiled.full_rasters.sample(conf.xs, conf.ys))
    if len(conf):
        inside_roof = shapely.covers(plan.outline, shapely.points(conf.xs, conf.ys))
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
    if len(conf) == 0 and found.count:
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
    if plan.sections and len(conf):
        points = shapely.points(conf.xs, conf.ys)
        for sec in plan.sections:
            inside = shapely.covers(sec.geometry, points) & decisive
            if inside.any():
                section_checks.append((sec.name, threshold_check(tuple(ids[inside].tolist()), conf_delta[inside],
                                                                 conf.wet[inside], chosen_c=detection.threshold_c,
                                                                 words=words)))
    core_cols, core_rows = ~grid.transform @ (conf.xs[decisive], conf.ys[decisive])
    counted = counted_statuses(include_unverified=survey.repair.include_unverified)
    counted_polys = [p for p, st in zip(polys, verdicts.status) if st in counted]
    area_range, band = wet_area_range(
        detection.delta_c, check, likely_m2=float(sum(p.area for p in counted_polys)),
        perimeter_m=float(sum(p.length for p in counted_polys)), pixel_m=grid.pixel_m,
        min_pixels=found.range_min_pixels, core_rows=np.floor(core_rows).astype(np.intp),
        core_cols=np.floor(core_cols).astype(np.intp), core_wet=conf.wet[decisive],
        include_unverified=survey.repair.include_unverified)
    suggestions = suggest_cores(polys, verdicts.status, list(range(1, found.count + 1)), band=band,
                                transform=grid.transform, pixel_m=grid.pixel_m, min_pixels=found.range_min_pixels,
                                words=words)
    return Judged(verdicts=verdicts, confirmation_delta_c=conf_delta, threshold=check,
                  section_checks=tuple(section_checks), area_range=area_range, suggested_cores=tuple(suggestions),
                  warnings=tuple(warnings))


def image_check_stage(plan: Plan, on_grid: OnGrid, found: Found) -> ImageryReport:
    """Resolution, focus, reflections and the display range (:func:`wetmap.image_checks.assess_imagery`)."""
    grid = on_grid.grid
    return assess_imagery(
        on_grid.primary, grid_transform=grid.transform, grid_shape=grid.shape, grid_pixel_m=on_grid.full_grid.pixel_m,
        surface_c=on_grid.surface_c, detection=found.detection, polygons=list(found.polygons),
        labels=found.labels if on_grid.tiled is None else None, frames=list(on_grid.views),
        sections=list(plan.sections), specular=plan.specular, outline=plan.outline)


def anomalies_of(plan: Plan, on_grid: OnGrid, found: Found, judged: Judged,
                 imagery: ImageryReport) -> tuple[tuple[Anomaly, ...], tuple[str, ...]]:
    """The anomalies with their statuses, sections and flags (imagery, roof edge, rooftop unit),
    and the warnings of the edge and unit flags."""
    survey, polys, sections = plan.survey, list(found.polygons), plan.sections
    warnings: list[str] = []
    section_of = largest_overlap(polys, [s.geometry for s in sections])
    # anomalies hugging the roof edge or ringing a rooftop unit: a flag naming the likely cause
    place_flags = (edge_flags(polys, outline=plan.outline, exclusions=plan.exclusions) if survey.survey.kind == "roof"
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
    drawn = simplify_outlines(polys, tolerance=SIMPLIFY_TOLERANCE_PX * on_grid.full_grid.pixel_m)
    verdicts, stats = judged.verdicts, found.stats
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
    return anomalies, tuple(warnings)


def quantity_stage(plan: Plan, anomalies: tuple[Anomaly, ...]) -> tuple[Quantities, tuple[str, ...]]:
    """Repair outline, board take-off, section totals and bill (:func:`wetmap.quantities.compute_quantities`)."""
    survey = plan.survey
    quantities = compute_quantities(
        [a.exact for a in anomalies], [a.status for a in anomalies], outline=plan.outline,
        exclusions=plan.exclusions, sections=list(plan.sections), settings=survey.repair, prices=survey.prices,
        kind=survey.survey.kind, drawn=[a.geometry for a in anomalies],
        wet_thickness_mm=plan.confirmations.wet_thickness_mm,
    )
    warnings = list(quantities.notes)
    if quantities.takeoff.range_note:
        warnings.append(quantities.takeoff.range_note)
    warnings.extend(_large_share_warnings(quantities, survey))
    return quantities, tuple(warnings)


def process_survey(folder: str | Path, *, progress: Progress | None = None, scheduler: Any = None,
                   tile_px: int | None = None, window_progress: WindowProgress | None = None,
                   scratch: str | Path | None = None) -> SurveyResult:
    """Run every stage on the survey in ``folder`` and return the results (nothing written).

    The stages, in order: :func:`plan_stage`, :func:`imagery_stage`, :func:`detection_stage`,
    the survey-condition checks, :func:`verdict_stage`, :func:`image_check_stage`,
    :func:`anomalies_of` and :func:`quantity_stage`.

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
    survey = with_sun_times(load_survey(folder))  # sunset from place and date when not typed in
    plan = plan_stage(survey, progress=progress)
    from_cores = _CoresRule(plan) if survey.detect.delta_from == "cores" else None
    on_grid = imagery_stage(plan, progress=progress, scheduler=scheduler, tile_px=tile_px,
                            window_progress=window_progress, scratch=scratch, threshold_from=from_cores)
    found = detection_stage(plan, on_grid, progress=progress, threshold_from=from_cores)
    dry_c = found.dry_c
    conditions = _condition_warnings(survey, plan.sections, surface_c=float(np.nanmedian(dry_c))
                                     if np.isfinite(dry_c).any() else None)
    judged = verdict_stage(plan, on_grid, found)
    _emit(progress, "checking the imagery: resolution, focus, reflections, display range")
    imagery = image_check_stage(plan, on_grid, found)
    anomalies, flag_warnings = anomalies_of(plan, on_grid, found, judged, imagery)
    _emit(progress, "repair quantities")
    quantities, quantity_warnings = quantity_stage(plan, anomalies)
    warnings = (*conditions, *plan.warnings, *on_grid.warnings, *found.warnings, *judged.warnings,
                *imagery.warnings, *flag_warnings, *quantity_warnings)
    return SurveyResult(
        survey=survey, grid=on_grid.grid, surface_c=on_grid.surface_c, detection=found.detection,
        outline=plan.outline, exclusions=plan.exclusions, roof=plan.roof, sections=plan.sections,
        anomalies=anomalies, confirmations=plan.confirmations, verdicts=judged.verdicts,
        confirmation_delta_c=judged.confirmation_delta_c, repair=quantities.repair, takeoff=quantities.takeoff,
        section_totals=quantities.sections, radiometry=plan.radiometry, coverage=on_grid.coverage,
        warnings=tuple(warnings), passes=found.passes, quantities=quantities, threshold=judged.threshold,
        area_range=judged.area_range, suggested_cores=judged.suggested_cores, registration=on_grid.registration,
        full_rasters=None if on_grid.tiled is None else on_grid.tiled.full_rasters, imagery=imagery,
        cores_threshold=from_cores.found[-1] if from_cores is not None and from_cores.found else None,
        section_checks=judged.section_checks,
        photos=tuple((p, i, d) for p, (i, d) in zip(plan.photos, nearest_anomalies(
            plan.photos, [a.geometry for a in anomalies]))),
    )


def _write_files(result: SurveyResult, folder: Path, *,
                 extra_writers: tuple[Callable[[SurveyResult, Path], None], ...] = (),
                 map_html: bool = True, report_html: bool = True) -> None:
    """Write every result file into ``folder`` (a staging folder of :func:`wetmap.outputs.replacing`)."""
    with contextlib.ExitStack() as waits:  # on leaving, wait for the forked writers (their errors raise)
        if report_html:  # the longest writer first: the figures, then WeasyPrint's layout (Python, holding the GIL)
            waits.callback(write_beside(report.write_report, folder / "report.html", result, folder / "report.html",
                                        pdf=folder / "report.pdf", name="wetmap-report"))
        waits.callback(cad.write_dxf_beside(result, folder / "repair.dxf"))  # ezdxf holds the GIL: a forked process
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

    Runs the plan stage of a run (:func:`plan_stage`: every pre-work check of
    :func:`wetmap.prework.prepare_survey` -- plan files, CRS at the site, mosaics' placement,
    coverage and units, grid size, cores, board take-off -- the surveyed part and the
    radiometry) and registers the frames. Returns the survey and the warnings found; raises
    :class:`WetmapError` listing every problem found (every survey.toml problem at once,
    then every pre-work problem at once).
    """
    survey = with_sun_times(load_survey(folder))  # sunset from place and date when not typed in
    plan = plan_stage(survey)
    warnings: list[str] = list(plan.warnings)
    _register_frames(survey, plan.radiometry, warnings, None)  # frame files readable, control points sound
    warnings[:0] = _condition_warnings(survey, list(plan.sections))
    return survey, tuple(warnings)
