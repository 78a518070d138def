"""Tests of wetmap.register: control points -> projective transform, leave-one-out, mosaicking.

Outside references: scikit-image's ``ProjectiveTransform`` (a general-purpose reference
library) and homographies built from a pinhole camera model (textbook projective
geometry: a plane seen by a pinhole camera maps to the image by ``K [r1 r2 t]``).
Pipeline-level checks use invented demo scenes from :mod:`wetmap.demo` whose truth is
known exactly.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from pathlib import Path

import numpy as np
import pytest
import shapely
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st
from skimage.transform import ProjectiveTransform

from wetmap import demo
from wetmap.errors import SurveyError
from wetmap.register import (
    MAX_FORESHORTENING,
    blend_frames,
    check_point_set,
    choose_pixel_m,
    fit_projective,
    frame_gsd_m,
    ground_sampling_m,
    leave_one_out,
    project,
    register_points,
    resample_frame,
)

CAMERA = demo.CameraStation.aimed(0.0, 0.0, height_m=6.5, heading_deg=30.0, tilt_deg=40.0)


def _camera_h(cam: demo.CameraStation = CAMERA, *, offset=(0.0, 0.0)) -> np.ndarray:
    """Image (col, row) -> plan (x, y) of a pinhole camera over the plane, plan shifted by ``offset``."""
    g = cam.scene_to_image() @ np.array([[1.0, 0, -offset[0]], [0, 1.0, -offset[1]], [0, 0, 1.0]])
    return np.linalg.inv(g)


def _points(h: np.ndarray, n: int, seed: int, size=(160, 120)) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    cr = np.column_stack([rng.uniform(5, size[0] - 5, n), rng.uniform(5, size[1] - 5, n)])
    x, y = project(h, cr[:, 0], cr[:, 1])
    return cr, np.column_stack([x, y])


def _same_homography(a: np.ndarray, b: np.ndarray) -> float:
    """Largest difference of two homographies after scaling both to unit norm and the same sign."""
    a = a / np.linalg.norm(a)
    b = b / np.linalg.norm(b)
    b = b * np.sign(np.sum(a * b))
    return float(np.max(np.abs(a - b)))


# ----- the fit ------------------------------------------------------------------------


@pytest.mark.parametrize("n", [4, 5, 9])
def test_fit_recovers_a_known_homography_exactly(n):
    """Noiseless points of a pinhole-camera homography: the same matrix, residuals ~0."""
    h = _camera_h(offset=(512_300.0, 5_463_100.0))  # UTM-sized plan coordinates
    cr, xy = _points(h, n, seed=n)
    fit = fit_projective(cr, xy)
    assert _same_homography(fit.matrix, h) < 1e-9
    assert fit.rms_px < 1e-6 and fit.rms_m < 1e-6
    assert np.all(fit.residuals_px < 1e-6) and np.all(fit.residuals_m < 1e-6)
    assert not fit.mirrored  # a camera looking down at a roof never gives a mirror image


def test_fit_agrees_with_scikit_image_on_noiseless_points():
    """Against skimage.transform.ProjectiveTransform (reference library): same transform."""
    h = _camera_h()
    cr, xy = _points(h, 8, seed=3)
    ref = ProjectiveTransform.from_estimate(cr, xy) if hasattr(ProjectiveTransform, "from_estimate") \
        else ProjectiveTransform()
    if not hasattr(ProjectiveTransform, "from_estimate"):  # pragma: no cover - older scikit-image
        ref.estimate(cr, xy)
    assert _same_homography(fit_projective(cr, xy).matrix, ref.params) < 1e-8
    grid_c, grid_r = np.meshgrid(np.arange(0, 160, 20.0), np.arange(0, 120, 20.0))
    ours = np.column_stack(project(fit_projective(cr, xy).matrix, grid_c.ravel(), grid_r.ravel()))
    assert np.allclose(ours, ref(np.column_stack([grid_c.ravel(), grid_r.ravel()])), atol=1e-8)


def test_fit_on_noisy_points_is_no_worse_than_scikit_image_in_pixels():
    """With picking noise, our least squares on image residuals beats (or ties) the linear estimate."""
    h = _camera_h()
    cr, xy = _points(h, 12, seed=5)
    noisy = cr + np.random.default_rng(5).normal(0, 0.7, cr.shape)
    ours = fit_projective(noisy, xy)
    ref = ProjectiveTransform.from_estimate(xy, noisy)  # plan -> image, as our residuals are measured
    ref_px = np.hypot(*(ref(xy) - noisy).T)
    assert ours.rms_px <= math.sqrt(np.mean(ref_px ** 2)) + 1e-9
    assert 0.2 < ours.rms_px < 1.0  # about the noise put in (0.7 px per axis, 8 of 24 dof used)
    # and the two transforms agree to a fraction of a pixel over the frame
    grid_c, grid_r = np.meshgrid(np.arange(0, 160, 20.0), np.arange(0, 120, 20.0))
    a = np.column_stack(project(np.linalg.inv(ours.matrix), *project(ours.matrix, grid_c.ravel(), grid_r.ravel())))
    assert np.allclose(a, np.column_stack([grid_c.ravel(), grid_r.ravel()]), atol=1e-6)


def test_residual_units_follow_the_ground_sampling():
    """An affine frame of 5 cm pixels: one point 2 px off has a 0.1 m plan residual scale."""
    cr = np.array([[0, 0], [99, 0], [99, 79], [0, 79]], dtype=float)
    xy = np.column_stack([100 + 0.05 * cr[:, 0], 200 - 0.05 * cr[:, 1]])
    fit = fit_projective(cr, xy)
    assert fit.rms_px < 1e-9
    sampling = ground_sampling_m(fit.matrix, np.array([50.0]), np.array([40.0]))
    assert np.allclose(sampling, 0.05)


@settings(max_examples=40, deadline=None)
@given(u=st.floats(-5, 5), v=st.floats(-5, 5), height=st.floats(2, 20), heading=st.floats(0, 360),
       tilt=st.floats(0.5, 55), seed=st.integers(0, 10_000))
def test_fit_is_exact_for_any_camera_pose(u, v, height, heading, tilt, seed):
    """Property: noiseless points from any camera pose give back the camera's homography."""
    cam = demo.CameraStation.aimed(u, v, height_m=height, heading_deg=heading, tilt_deg=tilt)
    h = _camera_h(cam)
    cr, xy = _points(h, 6, seed)
    try:
        check_point_set(cr, xy)
    except SurveyError:
        return  # a random draw with three points on one line: refused, which is right
    fit = fit_projective(cr, xy)
    assert fit.rms_px < 1e-6
    assert _same_homography(fit.matrix, h) < 1e-6


def test_foreshortening_at_the_image_centre_is_one_over_cos_tilt():
    """Pinhole geometry (textbook): at the principal point a plane tilted by theta to the image
    plane is shortened by cos(theta) along the tilt; the pixel footprint there is
    distance / focal across and distance / (focal cos theta) along."""
    for tilt in (0.0, 20.0, 40.0, 60.0):
        cam = demo.CameraStation.aimed(0, 0, height_m=5.0, heading_deg=0, tilt_deg=max(tilt, 1e-9))
        h = _camera_h(cam)
        fine, coarse = ground_sampling_m(h, np.array([79.5]), np.array([59.5]))
        focal = 80.0 / math.tan(math.radians(25.0))
        distance = 5.0 / math.cos(math.radians(tilt))
        assert math.isclose(fine[0], distance / focal, rel_tol=1e-9)
        assert math.isclose(coarse[0] / fine[0], 1.0 / math.cos(math.radians(tilt)), rel_tol=1e-9)


# ----- degenerate point sets ----------------------------------------------------------

WHERE = "/s/survey.toml: [[frame]] #2 points"


@pytest.mark.parametrize("cr, xy, expected", [
    pytest.param([[0, 0], [10, 0], [20, 0], [30, 0]], [[0, 0], [1, 0], [2, 0], [3, 0]],
                 "all 4 points lie on one line in the image", id="all-collinear"),
    pytest.param([[0, 0], [10, 0], [20, 0], [5, 9]], [[0, 0], [1, 0], [2, 0.5], [3, 3]],
                 "points 1, 2, 3 lie on one line in the image and only 1 point(s) off it", id="three-of-four"),
    pytest.param([[0, 0], [40, 3], [8, 30], [50, 45]], [[0, 0], [1, 0], [2, 0], [3, 0]],
                 "all 4 points lie on one line in the plan", id="collinear-on-plan"),
    pytest.param([[0, 0], [10, 0], [10, 0.2], [0, 10], [5, 8]], [[0, 0], [1, 0], [1.5, 0.2], [0, 1], [0.5, 0.8]],
                 "points 2 and 3 are the same image point", id="duplicate-image"),
    pytest.param([[0, 0], [10, 0], [10, 10], [0, 10], [4, 6]], [[0, 0], [1, 0], [1, 1], [0, 1], [1, 1]],
                 "points 3 and 5 are the same plan point", id="duplicate-plan"),
    pytest.param([[0, 0], [10, 0], [10, 10]], [[0, 0], [1, 0], [1, 1]], "3 control points", id="too-few"),
    pytest.param([[0, 0], [10, 0], [20, 0], [30, 0], [40, 0], [5, 9]],
                 [[0, 0], [1, 0], [2, 0], [3, 0], [4, 0], [3, 3]],
                 "points 1, 2, 3, 4, 5 lie on one line in the image and only 1 point(s) off it", id="one-off-line"),
])
def test_degenerate_sets_are_refused_naming_the_entry(cr, xy, expected):
    with pytest.raises(SurveyError) as err:
        fit_projective(np.array(cr, float), np.array(xy, float), where=WHERE)
    assert len(err.value.problems) == 1
    line = err.value.problems[0]
    assert line.startswith(WHERE + ": ")
    assert expected in line


def test_two_lines_of_points_are_enough():
    """Points on two lines (e.g. along two roof edges) determine the transform."""
    h = _camera_h()
    cr = np.array([[10, 10], [60, 10], [120, 10], [10, 100], [60, 100], [120, 100]], float)
    x, y = project(h, cr[:, 0], cr[:, 1])
    assert fit_projective(cr, np.column_stack([x, y])).rms_px < 1e-6


# ----- leave-one-out ------------------------------------------------------------------


SPREAD = np.array([[8, 6], [150, 9], [153, 112], [6, 110], [80, 58], [45, 85], [115, 30], [40, 25],
                   [120, 95], [78, 12], [79, 108], [12, 60]], dtype=float)


def _spread_points(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Marks spread over a 160 x 120 frame (as a surveyor picks them), plan positions exact."""
    h = _camera_h()
    cr = SPREAD[:n] + np.random.default_rng(n).uniform(-3, 3, (n, 2))
    x, y = project(h, cr[:, 0], cr[:, 1])
    return cr, np.column_stack([x, y])


@pytest.mark.parametrize("bad", range(12))
def test_leave_one_out_names_a_planted_bad_point(bad):
    """12 marks picked at whole pixels, one of them 8 px off: that one is named."""
    cr, xy = _spread_points(12)
    picked = np.round(cr)
    picked[bad] += [6.0, -5.3]
    reg = register_points(picked, xy, where=WHERE)
    assert reg.loo.suspect == bad
    assert f"point {bad + 1} does not fit" in reg.loo.note
    assert 5 < reg.loo.error_px[bad] < 11  # about the 8 px put in
    assert reg.loo.error_m[bad] > 0


def test_leave_one_out_with_six_points_names_an_interior_bad_point():
    cr, xy = _spread_points(6)
    picked = np.round(cr)
    picked[4] += [6.0, -5.3]  # the mark in the middle of the frame
    assert leave_one_out(picked, xy).suspect == 4


@pytest.mark.parametrize("n", [6, 7, 8, 10])
def test_leave_one_out_never_names_the_wrong_point(n):
    """With few points a corner mark's error can be absorbed by the fit; then the suspect is
    left unnamed (or the candidates listed), never a good point named."""
    cr, xy = _spread_points(n)
    for bad in range(n):
        picked = np.round(cr)
        picked[bad] += [6.0, -5.3]
        loo = leave_one_out(picked, xy)
        assert loo.suspect in (None, bad)
        if loo.note is not None:
            assert f"point {bad + 1} " in loo.note


def test_leave_one_out_finds_a_typo_in_plan_coordinates():
    """A plan coordinate off by 0.5 m (e.g. a digit typed wrong) on a noiseless set."""
    cr = np.array([[0, 0], [100, 0], [100, 80], [0, 80], [50, 40], [20, 60], [80, 20]], dtype=float)
    xy = np.column_stack([0.05 * cr[:, 0], -0.05 * cr[:, 1]])
    xy[5] += [0.0, 0.5]
    loo = leave_one_out(cr, xy)
    assert loo.suspect == 5
    assert loo.error_px[5] == pytest.approx(10.0, abs=1e-6)
    assert loo.error_m[5] == pytest.approx(0.5, abs=1e-6)


def test_leave_one_out_raises_no_false_alarm_on_good_points():
    """Many sets of 6-12 good points picked at whole pixels: no suspect named."""
    h = _camera_h()
    for seed in range(30):
        n = 6 + seed % 7
        cr, xy = _points(h, n, seed)
        loo = leave_one_out(np.round(cr), xy)
        assert loo.suspect is None and loo.note is None, (seed, loo.note)


def test_five_points_report_disagreement_without_naming():
    """With 5 points any 4 fit exactly: the misfit is reported, no point is named."""
    h = _camera_h()
    cr, xy = _points(h, 5, seed=8)
    cr[2] += [7.0, 4.0]
    loo = leave_one_out(cr, xy)
    assert loo.suspect is None
    assert "sixth control point" in loo.note
    assert np.all(loo.rest_rms_px < 1e-6)


def test_four_points_have_no_leave_one_out():
    cr, xy = _spread_points(4)
    reg = register_points(cr, xy)
    assert reg.loo.suspect is None and reg.loo.note is None and np.all(np.isnan(reg.loo.error_px))


# ----- pixel size, resampling, blending -----------------------------------------------


def test_choose_pixel_m_rounds_down_to_the_series():
    assert choose_pixel_m([0.0564, 0.0535, 0.0560]) == 0.05
    assert choose_pixel_m([0.0234, 0.0236]) == 0.02
    assert choose_pixel_m([0.031, math.nan]) == 0.03
    assert choose_pixel_m([0.9]) == 0.8
    with pytest.raises(ValueError):
        choose_pixel_m([math.nan])


def test_frame_gsd_is_the_root_of_the_jacobian_determinant():
    """Affine frame, 4 x 6 cm pixels: sqrt(det J) = sqrt(0.04 * 0.06) everywhere."""
    h = np.array([[0.04, 0, 10.0], [0, -0.06, 20.0], [0, 0, 1]])
    assert frame_gsd_m(h, (100, 100), (0, 0, 100, 100)) == pytest.approx(math.sqrt(0.04 * 0.06))
    assert math.isnan(frame_gsd_m(h, (100, 100), (50, 50, 60, 60)))  # lands elsewhere


def _slow_resample(values, h, transform, shape):
    """Obviously-correct reference: per plan pixel, solve for the image point, bilinear by hand."""
    rows, cols = values.shape
    out = np.full(shape, np.nan)
    for r in range(shape[0]):
        for c in range(shape[1]):
            x, y = transform @ (c + 0.5, r + 0.5)
            u, v, w = np.linalg.solve(h, [x, y, 1.0])
            u, v = u / w, v / w
            if not (-0.5 <= u <= cols - 0.5 and -0.5 <= v <= rows - 0.5):
                continue
            u, v = min(max(u, 0), cols - 1), min(max(v, 0), rows - 1)
            c0, r0 = min(int(u), cols - 2), min(int(v), rows - 2)
            fu, fv = u - c0, v - r0
            out[r, c] = ((1 - fu) * (1 - fv) * values[r0, c0] + fu * (1 - fv) * values[r0, c0 + 1]
                         + (1 - fu) * fv * values[r0 + 1, c0] + fu * fv * values[r0 + 1, c0 + 1])
    return out


def test_resample_matches_a_slow_reference():
    """Oblique camera, 40 x 30 frame of smooth values, onto a 0.1 m plan grid."""
    cam = demo.CameraStation.aimed(0, 0, height_m=4.0, heading_deg=20, tilt_deg=35, size_px=(40, 30))
    h = _camera_h(cam)
    rr, cc = np.mgrid[0:30, 0:40]
    values = (280 + 0.3 * cc + 0.2 * rr + np.sin(cc / 3.0)).astype(np.float32)
    transform = Affine(0.1, 0, -1.0, 0, -0.1, 7.0)
    shape = (80, 90)
    part = resample_frame(values, h, grid_transform=transform, grid_shape=shape)
    full = np.full(shape, np.nan)
    r0, r1, c0, c1 = part.window
    full[r0:r1, c0:c1] = part.values
    ref = _slow_resample(values.astype(float), h, transform, shape)
    assert np.isfinite(full).sum() > 1000
    assert np.array_equal(np.isfinite(full), np.isfinite(ref))
    assert np.nanmax(np.abs(full - ref)) < 1e-3


def test_resample_leaves_out_the_sky_and_grazing_views():
    """A frame whose upper part is sky: nothing beyond the horizon or past the foreshortening limit."""
    cam = demo.CameraStation.aimed(0, 0, height_m=2.0, heading_deg=90, tilt_deg=80, size_px=(80, 60))
    h = _camera_h(cam)
    w_top = h[2] @ [40, 0, 1.0]
    assert w_top * (h[2] @ [40, 59, 1.0]) < 0  # the horizon crosses this frame
    values = np.full((60, 80), 275.0, dtype=np.float32)
    transform = Affine(0.25, 0, -30.0, 0, -0.25, 60.0)
    part = resample_frame(values, h, grid_transform=transform, grid_shape=(240, 240))
    assert part is not None and part.covered > 0
    assert np.nanmax(part.gsd_m) < 10  # no pixel from near the horizon
    r0, r1, c0, c1 = part.window
    cols, rows = np.meshgrid(np.arange(c0, c1) + 0.5, np.arange(r0, r1) + 0.5)
    xs, ys = transform @ (cols, rows)
    used = part.weights > 0
    u, v = project(np.linalg.inv(h), xs[used], ys[used])
    fine, coarse = ground_sampling_m(h, u, v)
    assert np.all(coarse <= MAX_FORESHORTENING * fine + 1e-9)
    assert np.all(ys[used] > 0)  # everything used lies in front of the camera (it looks along +y)


def test_blend_favours_the_sharper_view():
    """Two frames of the same plan area: the one with half the ground sampling distance gets
    four times the weight (weight ~ 1 / gsd**2)."""
    transform = Affine(0.1, 0, 0.0, 0, -0.1, 10.0)
    near = np.array([[0.02, 0, 0.0], [0, -0.02, 10.0], [0, 0, 1]])  # 2 cm pixels, 500 x 500
    far = np.array([[0.04, 0, 0.0], [0, -0.04, 10.0], [0, 0, 1]])   # 4 cm pixels, 250 x 250
    a = resample_frame(np.full((500, 500), 10.0, np.float32), near, grid_transform=transform, grid_shape=(100, 100))
    b = resample_frame(np.full((250, 250), 20.0, np.float32), far, grid_transform=transform, grid_shape=(100, 100))
    out = blend_frames([a, b], (100, 100))
    centre = out[40:60, 40:60]  # far from both frames' edges: full taper
    assert np.allclose(centre, (4 * 10.0 + 1 * 20.0) / 5.0, atol=1e-4)
    assert np.isfinite(out).all()


# ----- through the pipeline -------------------------------------------------------------

HALF_TOML = """\
[survey]
title = "Half-covered test plan"
kind = "roof"
crs = "local"

[conditions]
air_c = 5.0
humidity_pct = 70
reflected_c = -20.0

[camera]
emissivity = 0.94

[plan]
outline = "plan/outline.geojson"
pixel_m = 0.1

[[frame]]
path = "frames/west.npy"
units = "C"
points = [[0, 0, 0.05, 9.95], [49, 0, 4.95, 9.95], [49, 99, 4.95, 0.05], [0, 99, 0.05, 0.05], [25, 50, 2.55, 4.95]]

[detect]
delta_c = 1.0
min_area_m2 = 0.2
"""


def _outline(folder: Path, ring) -> None:
    import json

    (folder / "plan").mkdir(parents=True, exist_ok=True)
    doc = {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {}, "geometry": {"type": "Polygon", "coordinates": [ring]}}]}
    (folder / "plan" / "outline.geojson").write_text(json.dumps(doc), encoding="utf-8")


def test_coverage_is_exact_on_a_half_covered_plan(tmp_path):
    """A 10 x 10 m plan, one nadir frame of 10 cm pixels covering exactly its west half.

    Plan pixel centres at x = 4.95 fall on image column 49 (inside), at x = 5.05 on column
    50 (outside the 50-column frame): 50.0 m2 covered, 50.0 m2 uncovered, exactly.
    """
    from wetmap.pipeline import process_survey
    from wetmap.radiometry import apparent_from_surface

    folder = tmp_path / "half"
    _outline(folder, [[0, 0], [10, 0], [10, 10], [0, 10], [0, 0]])
    (folder / "survey.toml").write_text(HALF_TOML, encoding="utf-8")
    surface = np.full((100, 50), 4.0)
    surface[30:50, 10:30] += 2.5  # a 2 x 2 m warm square, x 1-3, y 5-7
    apparent = np.asarray(apparent_from_surface(surface + 273.15, emissivity=0.94, reflected_k=253.15)) - 273.15
    (folder / "frames").mkdir()
    np.save(folder / "frames" / "west.npy", apparent.astype(np.float32))
    result = process_survey(folder)
    cov = result.coverage
    assert cov.roof_pixels_m2 == pytest.approx(100.0, abs=1e-9)
    assert cov.covered_m2 == pytest.approx(50.0, abs=1e-9)
    assert cov.uncovered_m2 == pytest.approx(50.0, abs=1e-9)
    assert cov.uncovered_pct == pytest.approx(50.0, abs=1e-9)
    assert np.isnan(result.surface_c[:, 50:]).all() and np.isfinite(result.surface_c[:, :50]).all()
    assert np.isnan(result.detection.delta_c[:, 50:]).all()  # uncovered is never dry
    assert any("not surveyed, which does not mean dry" in w for w in result.warnings)
    assert [round(a.area_m2, 1) for a in result.anomalies] == [4.0]
    assert result.surface_c[5, 5] == pytest.approx(4.0, abs=1e-3)  # radiometry inverted per frame
    summary = result.summary()
    assert summary["coverage"]["uncovered_m2"] == 50.0
    (reg,) = summary["registration"]
    assert reg["path"] == "frames/west.npy" and reg["points"] == 5
    assert reg["rms_px"] < 1e-6 and reg["suspect_point"] is None
    assert reg["covered_m2"] == pytest.approx(50.0)
    assert summary["method"]["pixel_m"] == 0.1 and summary["method"]["pixel_m_source"] == "[plan] pixel_m"


def test_a_misplaced_point_is_named_in_the_warnings(tmp_path):
    """The same survey with 7 points, one typed 0.5 m off: named in warnings and summary."""
    from wetmap.pipeline import process_survey

    folder = tmp_path / "typo"
    _outline(folder, [[0, 0], [10, 0], [10, 10], [0, 10], [0, 0]])
    text = HALF_TOML.replace(
        "[25, 50, 2.55, 4.95]]", "[25, 50, 2.55, 4.95], [10, 80, 1.05, 1.95], [40, 20, 4.05, 8.45]]")
    (folder / "survey.toml").write_text(text, encoding="utf-8")
    (folder / "frames").mkdir()
    np.save(folder / "frames" / "west.npy", np.full((100, 50), 0.0, np.float32))
    result = process_survey(folder)
    (reg,) = result.summary()["registration"]
    assert reg["suspect_point"] == 7
    assert reg["suspect_m"] == pytest.approx(0.5, abs=0.05)
    assert any("west.npy ([[frame]] #1): point 7 does not fit" in w for w in result.warnings)


@pytest.fixture(scope="module")
def walked(tmp_path_factory):
    """The invented walked roof with a 5 cm true field (quicker), written and run."""
    from wetmap.pipeline import run_survey

    folder = tmp_path_factory.mktemp("walked")
    scene = demo.WalkedRoofScene()
    scene = dataclasses.replace(scene, roof=dataclasses.replace(scene.roof, pixel_m=0.05))
    truth = demo.write_walked_roof_survey(folder, scene)
    return truth, run_survey(folder)


def test_walked_roof_recovers_its_wet_areas(walked):
    """Oblique frames rendered from a known plan field: wet area within 8 %, IoU >= 0.85
    (acceptance figures of the project's issue; invented demo data)."""
    truth, result = walked
    found = shapely.union_all([a.geometry for a in result.anomalies if a.status != "dry"])
    true = shapely.union_all(truth.wet)
    assert abs(found.area / true.area - 1) <= 0.08
    assert found.intersection(true).area / found.union(true).area >= 0.85
    status = {a.status for a in result.anomalies}
    assert status == {"wet", "dry", "unverified"}  # plies refuted by C3, the small patch not cored
    refuted = shapely.union_all([a.geometry for a in result.anomalies if a.status == "dry"])
    assert refuted.intersection(truth.refuted[0]).area > 0.8 * truth.refuted[0].area


def test_walked_roof_reports_registration_and_coverage(walked):
    truth, result = walked
    s = result.summary()
    assert len(s["registration"]) == len(demo.WalkedRoofScene().stations)
    for reg in s["registration"]:
        assert reg["points"] == 8 and reg["rms_px"] < 0.6 and reg["rms_m"] < 0.05  # whole-pixel picking
        assert reg["suspect_point"] is None and 0.03 < reg["gsd_m"] < 0.09
    assert s["method"]["pixel_m"] == 0.05
    assert s["method"]["pixel_m_source"].startswith("the frames' median ground sampling distance")
    assert s["coverage"]["uncovered_pct"] < 1.0
    assert s["area_label"] == "roof"


def test_mosaic_and_frames_land_on_one_grid(tmp_path):
    """A flown mosaic missing the south-west corner plus one frame of that corner (from a
    lift outside the building): the corner is covered and its wet area found whole."""
    import rasterio

    from wetmap.pipeline import process_survey

    scene = demo.RoofScene(pixel_m=0.25)
    folder = tmp_path / "both"
    truth = demo.write_roof_survey(folder, scene)
    tif = folder / "thermal" / "roof_pass1.tif"
    with rasterio.open(tif, "r+") as dst:
        data = dst.read(1)
        rows, cols = data.shape
        u = -demo.MARGIN_M + (np.arange(cols) + 0.5) * scene.pixel_m
        v = scene.size_m[1] + demo.MARGIN_M - (np.arange(rows) + 0.5) * scene.pixel_m
        gap = (u[None, :] < 14.0) & (v[:, None] < 12.0)
        data[gap] = demo.NODATA_FLOAT
        dst.write(data, 1)
    cam = demo.CameraStation.aimed(-3.0, -3.0, height_m=18.0, heading_deg=38.0, tilt_deg=30.0, size_px=(320, 240))
    rng = np.random.default_rng(0)
    apparent, g = demo.render_frame(cam, truth.surface_c, truth.transform, plan_from_scene=scene.plan_from_roof,
                                    emissivity=scene.emissivity, reflected_c=scene.reflected_render_c,
                                    outside_c=scene.dry_c - 3.0, noise_c=0.05, rng=rng)
    (folder / "frames").mkdir()
    np.save(folder / "frames" / "corner.npy", apparent.astype(np.float32))
    marks = np.array([scene.plan_from_roof @ (mu, mv) for mu in (0.0, 4.0, 8.0, 12.0) for mv in (0.0, 4.0, 8.0)])
    w = marks @ g[2, :2] + g[2, 2]
    c = (marks @ g[0, :2] + g[0, 2]) / w
    r = (marks @ g[1, :2] + g[1, 2]) / w
    pts = [[int(round(ci)), int(round(ri)), round(float(x), 3), round(float(y), 3)]
           for ci, ri, (x, y) in zip(c, r, marks) if 2 <= ci <= 317 and 2 <= ri <= 237]
    assert len(pts) >= 8
    with open(folder / "survey.toml", "a", encoding="utf-8") as f:
        f.write(f'\n[[frame]]\npath = "frames/corner.npy"\nunits = "C"\npoints = {pts}\n')
    result = process_survey(folder)
    gap_area = shapely.box(0, 0, 14, 12).area
    assert result.coverage.uncovered_m2 < 0.05 * gap_area  # the frame filled the corner
    assert result.grid.pixel_m == scene.pixel_m  # the mosaic's grid: it is read without resampling
    wet1 = truth.wet[0]  # 8 x 5 m, u 8-16, v 6-11: across the seam of mosaic and frame
    hit = [a for a in result.anomalies if a.geometry.intersects(wet1)]
    assert len(hit) == 1 and hit[0].status == "wet"
    assert abs(hit[0].area_m2 / wet1.area - 1) <= 0.08
    assert hit[0].geometry.intersection(wet1).area / hit[0].geometry.union(wet1).area >= 0.85
    assert len(result.summary()["registration"]) == 1


# ----- the bundled sample -------------------------------------------------------------

SAMPLE = Path(__file__).resolve().parents[1] / "sample_surveys" / "walked_roof"


def test_bundled_walked_roof_is_current(tmp_path):
    """sample_surveys/walked_roof equals what the generator writes (regenerate with
    ``python -m wetmap.demo --scene walked sample_surveys/walked_roof``)."""
    import sys

    if not SAMPLE.is_dir():
        pytest.skip("sample_surveys/walked_roof not present in this checkout")
    if sys.version_info >= (3, 11):
        import tomllib
    else:  # pragma: no cover
        import tomli as tomllib
    demo.write_walked_roof_survey(tmp_path)
    assert tomllib.loads((SAMPLE / "survey.toml").read_text("utf-8")) == \
        tomllib.loads((tmp_path / "survey.toml").read_text("utf-8"))
    for name in ("plan/outline.geojson", "plan/exclusions.geojson", "plan/sections.geojson", "cores.csv"):
        assert (SAMPLE / name).read_text("utf-8") == (tmp_path / name).read_text("utf-8"), name
    from wetmap.frames import read_frame

    for f in sorted((tmp_path / "frames").iterdir()):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            kw = dict(scale=0.01, offset=-273.15) if f.suffix == ".png" else {}
            a = read_frame(SAMPLE / "frames" / f.name, units="C", **kw).values_k
            b = read_frame(f, units="C", **kw).values_k
        assert np.allclose(a, b, atol=0.006), f.name
    total = sum(p.stat().st_size for p in SAMPLE.rglob("*") if p.is_file() and "results" not in p.parts)
    assert total < 1_000_000
