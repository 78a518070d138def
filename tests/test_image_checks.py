"""wetmap.image_checks: resolution, focus, reflections and display range.

Outside values are named beside each check (pinhole geometry, hand-computed Jacobians,
common practice). Scenes are invented demo data built with :mod:`wetmap.demo`.
"""

from __future__ import annotations

import json
import math
import shutil
import sys
from pathlib import Path

import numpy as np
import pytest
import shapely
from affine import Affine
from scipy import ndimage
from shapely.geometry import box

from wetmap import demo
from wetmap import image_checks as imagery
from wetmap.errors import SurveyError
from wetmap.register import blend_frames, ground_sampling_m, resample_frame
from wetmap.survey import load_survey

ROOT = Path(__file__).resolve().parents[1]
WAREHOUSE = ROOT / "sample_surveys" / "warehouse_roof"
WALKED = ROOT / "sample_surveys" / "walked_roof"


# --------------------------------------------------------------------------------------
# Resolution
# --------------------------------------------------------------------------------------


def test_mosaic_gsd_from_known_transforms():
    # north-up 5 cm: |det| = 0.0025 m2 -> 0.05 m (hand-computed)
    p = imagery.mosaic_gsd_m(Affine(0.05, 0.0, 512300.0, 0.0, -0.05, 5463140.0))
    assert (p.gsd_m, p.x_m, p.y_m) == pytest.approx((0.05, 0.05, 0.05))
    # rotated 30° with 0.2 x 0.1 m pixels: |det| = 0.02 -> sqrt(0.02) = 0.141421 m; axes 0.2 and 0.1 (hand-computed)
    p = imagery.mosaic_gsd_m(Affine.rotation(30) @ Affine.scale(0.2, -0.1))
    assert p.gsd_m == pytest.approx(0.141421, abs=1e-6)
    assert (p.x_m, p.y_m) == pytest.approx((0.2, 0.1))
    # sheared: a = 0.1, b = 0.05, d = 0, e = -0.1: |det| = 0.01 -> 0.1 m; row axis hypot(0.05, 0.1) = 0.111803 m
    p = imagery.mosaic_gsd_m(Affine(0.1, 0.05, 0.0, 0.0, -0.1, 0.0))
    assert p.gsd_m == pytest.approx(0.1)
    assert (p.x_m, p.y_m, p.coarse_m) == pytest.approx((0.1, 0.111803, 0.111803), abs=1e-6)


def test_frame_gsd_range_from_a_known_homography():
    """x = 0.05 c / w, y = 0.05 r / w, w = 1 + 0.001 r.

    Jacobian (hand-computed): dx/dc = 0.05 / w, dx/dr = -0.00005 c / w^2, dy/dc = 0,
    dy/dr = 0.05 / w^2, so det = 0.0025 / w^3 at every column and sqrt(det) = 0.05 w^-1.5.
    Over rows -0.5 .. 100.5 (the outer pixel edges of a 101-row frame): largest
    0.05 / 0.9995^1.5 = 0.0500375 m, smallest 0.05 / 1.1005^1.5 = 0.0433097 m. The longest
    footprint side is at the corner c = 100.5, r = -0.5: the larger singular value of
    [[0.050025, -0.0050301], [0, 0.0500500]] is 0.0526157 m (numpy.linalg.svd of that matrix).
    """
    m = np.array([[0.05, 0.0, 0.0], [0.0, 0.05, 0.0], [0.0, 0.001, 1.0]])
    g = imagery.frame_gsd_range_m(m, (101, 101))
    assert g.high_m == pytest.approx(0.0500375, abs=2e-7)
    assert g.low_m == pytest.approx(0.0433097, abs=2e-7)
    assert g.coarse_max_m == pytest.approx(0.0526157, abs=2e-7)
    assert g.low_m < g.gsd_m < g.high_m
    # restricted to plan bounds that hold only the frame's first rows (y < 0.5 m -> r < 10.1)
    near = imagery.frame_gsd_range_m(m, (101, 101), bounds=(-1.0, -1.0, 10.0, 0.5))
    assert near.low_m > 0.05 / 1.011 ** 1.5 - 1e-6


def test_frame_gsd_matches_pinhole_geometry():
    """A camera 6.5 m above the roof, tilted 40° from straight down, 160 px across a 50° field.

    Focal length f = 80 / tan(25°) = 171.5605 px; at the principal point (pinhole geometry,
    hand-computed) the footprint is H / (f cos θ) = 0.049459 m across the view and
    H / (f cos² θ) = 0.064564 m along it; sqrt(det) = H / (f cos^1.5 θ) = 0.056509 m.
    """
    cam = demo.CameraStation.aimed(10.0, 10.0, height_m=6.5, heading_deg=30.0, tilt_deg=40.0)
    image_to_plan = np.linalg.inv(cam.scene_to_image())
    c0, r0 = (160 - 1) / 2, (120 - 1) / 2
    fine, coarse = ground_sampling_m(image_to_plan, np.array([c0]), np.array([r0]))
    assert fine[0] == pytest.approx(0.049459, abs=2e-6)
    assert coarse[0] == pytest.approx(0.064564, abs=2e-6)
    g = imagery.frame_gsd_range_m(image_to_plan, (120, 160))
    assert g.low_m < 0.056509 < g.high_m
    assert g.gsd_m == pytest.approx(0.056509, rel=0.05)  # the median is near the centre's value


def test_optics_gsd():
    # IFOV x distance: 1.1 mrad at 30 m = 0.033 m (hand-computed)
    assert imagery.optics_gsd_m(1.1, 30.0) == pytest.approx(0.033)
    # a 640 px detector behind a 25° lens: IFOV = 0.436332 rad / 640 = 0.681769 mrad; at 35 m 0.023862 m
    assert imagery.optics_gsd_m(math.radians(25) / 640 * 1e3, 35.0) == pytest.approx(0.023862, abs=1e-6)


# --------------------------------------------------------------------------------------
# The pixel-count rule (3 x 3 pixels across the smallest width: common practice)
# --------------------------------------------------------------------------------------


def test_feature_width_of_simple_shapes():
    assert imagery.feature_width_m(box(0, 0, 4, 1)) == pytest.approx(1.0)           # a 4 x 1 m strip
    assert imagery.feature_width_m(shapely.Point(0, 0).buffer(0.5, 64)) == pytest.approx(1.0, abs=0.01)  # disc
    rotated = shapely.affinity.rotate(box(0, 0, 3, 0.6), 25)
    assert imagery.feature_width_m(rotated) == pytest.approx(0.6, abs=1e-6)
    # an L of 1 m legs: its minimum rotated rectangle is 5 m wide; the largest inscribed circle sits in the
    # corner square, centre (a, a) with a = sqrt(2) (1 - a): a = 0.585786, width 2a = 1.171573 (hand-computed)
    ell = box(0, 0, 5, 1).union(box(0, 0, 1, 5))
    assert imagery.feature_width_m(ell) == pytest.approx(1.171573, abs=0.002)


@pytest.mark.parametrize("side_m, gsd_m, reliable", [
    (0.25, 0.1, False),   # 2.5 pixels across: too small
    (0.29, 0.1, False),   # 2.9
    (0.31, 0.1, True),    # 3.1
    (5.0, 0.1, True),     # 50 pixels: a large anomaly
    (0.5, 0.2, False),    # 2.5 pixels of a coarse camera
])
def test_pixel_count_rule(side_m, gsd_m, reliable):
    width = imagery.feature_width_m(box(0, 0, side_m, side_m))
    assert (imagery.pixels_across(width, gsd_m) >= imagery.MIN_PIXELS_ACROSS) is reliable


def test_smallest_reliable_area():
    # 3 x 3 pixels of 5 cm: (0.15 m)^2 = 0.0225 m2; of 10 cm: 0.09 m2 (hand-computed)
    assert imagery.smallest_reliable_area_m2(0.05) == pytest.approx(0.0225)
    assert imagery.smallest_reliable_area_m2(0.1, pixels_across=5) == pytest.approx(0.25)


@pytest.fixture(scope="module")
def warehouse_strict(tmp_path_factory):
    """The warehouse sample with min_area_m2 = 0.05 and min_pixels_across = 20 (settings only)."""
    folder = tmp_path_factory.mktemp("strict") / "survey"
    shutil.copytree(WAREHOUSE, folder, ignore=shutil.ignore_patterns("results"))
    toml = folder / "survey.toml"
    text = toml.read_text(encoding="utf-8").replace("delta_c = 1.0", "delta_c = 1.0\nmin_area_m2 = 0.05")
    toml.write_text(text + "\n[limits]\nmin_pixels_across = 20\n", encoding="utf-8")
    from wetmap.pipeline import process_survey

    return process_survey(folder)


def test_small_and_large_anomalies_on_a_sample(warehouse_strict):
    """0.1 m pixels: the 2 x 1.5 m patch spans about 15 pixels, the large areas 30-50 (invented demo data)."""
    r = warehouse_strict
    im = r.imagery
    assert im.smallest_reliable_area_m2 == pytest.approx((20 * 0.1) ** 2)
    for a, across in zip(r.anomalies, im.anomaly_pixels_across):
        width = imagery.feature_width_m(a.exact)  # measured on the exact outline
        assert across == pytest.approx(width / 0.1, rel=1e-6)
        assert (imagery.UNDER_RESOLVED_FLAG in a.flags) is (across < 20)
    assert any(imagery.UNDER_RESOLVED_FLAG in a.flags for a in r.anomalies)
    assert any(not a.flags for a in r.anomalies)
    text = " ".join(r.warnings)
    assert "min_area_m2 = 0.05" in text and "min_pixels_across" in text
    s = r.summary()
    assert s["imagery"]["under_resolved"] == [a.id for a in r.anomalies if a.flags]
    mosaic = s["imagery"]["sources"][0]
    assert mosaic["kind"] == "mosaic" and mosaic["gsd_m"] == pytest.approx(0.1)


# --------------------------------------------------------------------------------------
# Focus
# --------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def frames():
    """The walked roof's frames (invented demo data), apparent degC."""
    rendered, _ = demo.render_walked_roof()
    return [f.apparent_c for f in rendered]


def test_noise_estimate_recovers_known_noise():
    # white noise of 0.1 on a plane plus a step: the mask cancels the plane, the median ignores the step
    rng = np.random.default_rng(3)
    img = np.add.outer(np.arange(200.0), np.arange(300.0)) * 0.02
    img[:, 150:] += 3.0
    assert imagery.image_noise_sigma(img + rng.normal(0, 0.1, img.shape)) == pytest.approx(0.1, rel=0.05)


def test_blurred_frame_ranks_lower_and_sharpness_is_monotone_in_blur(frames):
    sigmas = (0.5, 1.0, 2.0, 4.0)
    for img in frames[:4]:
        scores = [imagery.sharpness(img).index] + [imagery.sharpness(ndimage.gaussian_filter(img, s)).index
                                                    for s in sigmas]
        assert all(np.isfinite(scores))
        assert all(a > b for a, b in zip(scores, scores[1:])), scores  # monotone in blur
        assert scores[3] < 0.6 * scores[0]  # sigma 2: well below the original (a margin)
        assert scores[0] - scores[1] > 0.03  # even sigma 0.5 costs something


def test_noise_does_not_make_a_frame_sharper(frames):
    rng = np.random.default_rng(5)
    img = frames[0]
    base = imagery.sharpness(img).index
    noisy = imagery.sharpness(img + rng.normal(0.0, 0.2, img.shape)).index  # four times the camera noise
    assert noisy == pytest.approx(base, abs=0.03)
    blurred = ndimage.gaussian_filter(img, 2.0)
    assert imagery.sharpness(blurred + rng.normal(0.0, 0.2, img.shape)).index < 0.6 * base


def test_sharpness_ignores_units_and_no_data(frames):
    img = frames[1]
    s = imagery.sharpness(img).index
    assert imagery.sharpness(img * 1.8 + 32).index == pytest.approx(s, abs=1e-3)  # degF: same index
    holed = img.copy()
    holed[:20, :30] = np.nan
    assert imagery.sharpness(holed).index == pytest.approx(s, abs=0.05)
    assert not imagery.sharpness(np.full((50, 50), 4.0)).judged  # nothing to judge


def test_flag_blurred_compares_with_the_other_frames(frames):
    scores = [imagery.sharpness(f).index for f in frames]
    scores[4] = imagery.sharpness(ndimage.gaussian_filter(frames[4], 2.5)).index
    flagged, rel = imagery.flag_blurred(scores, ratio=0.5)
    assert flagged.tolist() == [i == 4 for i in range(len(frames))]
    assert rel[4] < 0.5 < rel[np.arange(len(frames)) != 4].min()


# --------------------------------------------------------------------------------------
# Reflections
# --------------------------------------------------------------------------------------


def _pair_scene():
    """Two overlapping frames (from opposite sides) of a 12 x 8 m roof at 4 °C with a real wet patch (+2.5 °C,
    2 x 1.5 m at u 3-5, v 3-4.5) and a warm reflection (+3 °C, 0.45 m radius at u 8.5, v 4)
    planted in the first frame only (invented demo data). Emissivity 1, so apparent = surface.
    """
    pixel = 0.025
    rows, cols = int(8 / pixel), int(12 / pixel)
    t = Affine(pixel, 0, 0, 0, -pixel, 8.0)
    field = np.full((rows, cols), 4.0)
    cc, rr = np.meshgrid(np.arange(cols) + 0.5, np.arange(rows) + 0.5)
    u, v = t @ (cc, rr)
    wet = (u >= 3) & (u <= 5) & (v >= 3) & (v <= 4.5)
    field[wet] += 2.5
    rng = np.random.default_rng(2)
    stations = [demo.CameraStation.aimed(6.0, 0.5, height_m=6.5, heading_deg=90.0, tilt_deg=35.0),
                demo.CameraStation.aimed(6.0, 7.5, height_m=6.5, heading_deg=270.0, tilt_deg=35.0)]
    images = []
    for cam in stations:
        app, g = demo.render_frame(cam, field, t, plan_from_scene=Affine.identity(), emissivity=1.0,
                                   reflected_c=-20.0, outside_c=1.0, noise_c=0.05, rng=rng)
        images.append((app, g))
    # the reflection: a disc on the roof seen by frame 0 only
    app, g = images[0]
    h = np.linalg.inv(g)
    ic, ir = np.meshgrid(np.arange(app.shape[1], dtype=float), np.arange(app.shape[0], dtype=float))
    w = h[2, 0] * ic + h[2, 1] * ir + h[2, 2]
    px, py = (h[0, 0] * ic + h[0, 1] * ir + h[0, 2]) / w, (h[1, 0] * ic + h[1, 1] * ir + h[1, 2]) / w
    disc = np.clip((0.45 - np.hypot(px - 8.5, py - 4.0)) / pixel + 0.5, 0, 1)
    images[0] = (app + 3.0 * disc, g)
    return images


def test_reflection_in_one_view_is_flagged_and_a_real_wet_area_is_not():
    images = _pair_scene()
    grid_t, grid_shape = Affine(0.05, 0, 0, 0, -0.05, 8.0), (160, 240)
    views, parts = [], []
    for k, (app, g) in enumerate(images):
        matrix = np.linalg.inv(g)
        part = resample_frame(app + 273.15, matrix, grid_transform=grid_t, grid_shape=grid_shape)
        parts.append(part)
        views.append(imagery.FrameView(
            path=f"view{k}", window=part.window, values_k=part.values, weights=part.weights, gsd_m=part.gsd_m,
            gsd=imagery.frame_gsd_range_m(matrix, app.shape), sharpness=imagery.sharpness(app)))
    surface_c = blend_frames(parts, grid_shape) - 273.15
    background = np.full(grid_shape, 4.0)  # the dry roof, known here
    from wetmap.polygons import label_regions, polygonize

    mask = ndimage.binary_opening(np.nan_to_num(surface_c - background) > 1.0, iterations=2)
    labels, n = label_regions(mask)
    polys = polygonize(labels, n, grid_t)
    assert n == 2  # the wet patch and the reflection, both found in the blend
    widths = [imagery.feature_width_m(p) for p in polys]
    suspects, compared = imagery.multi_view_reflections(labels, n, views, background, threshold_c=1.0,
                                                        transform=grid_t, widths_m=widths)
    cx = [p.centroid.x for p in polys]
    wet_id, refl_id = (1, 2) if cx[0] < cx[1] else (2, 1)
    assert len(compared[wet_id]) == 2 and len(compared[refl_id]) == 2  # both frames see both
    assert refl_id in suspects and wet_id not in suspects
    s = suspects[refl_id]
    assert s.rule == "one viewpoint" and "view0" in s.reason and "view1" in s.reason
    seen = {v.path: v.delta_mean_c for v in s.views}
    assert seen["view0"] > 1.0 and abs(seen["view1"]) < 0.3
    wet_seen = [v.delta_mean_c for v in compared[wet_id]]
    assert min(wet_seen) == pytest.approx(max(wet_seen), abs=0.3)  # a real wet area: the same from both


def test_a_warm_spot_that_moves_with_the_viewpoint_is_flagged():
    """Two views see a warm spot of the same strength 0.8 m apart: the rule ``moves``."""
    grid_t, shape = Affine(0.05, 0, 0, 0, -0.05, 5.0), (100, 100)
    cc, rr = np.meshgrid(np.arange(100) + 0.5, np.arange(100) + 0.5)
    x, y = grid_t @ (cc, rr)
    views = []
    for k, cx in enumerate((2.1, 2.9)):
        spot = 2.0 * (np.hypot(x - cx, y - 2.5) < 0.6)
        views.append(imagery.FrameView(
            path=f"v{k}", window=(0, 100, 0, 100), values_k=(277.15 + spot).astype(np.float32),
            weights=np.ones(shape, np.float32), gsd_m=np.full(shape, 0.05, np.float32),
            gsd=imagery.GsdRange(0.05, 0.05, 0.05, 0.05), sharpness=imagery.Sharpness(0.8, 0.05, 1.0)))
    blended = np.mean([v.values_k for v in views], axis=0) - 273.15 - 4.0
    labels, n = ndimage.label(blended > 0.5)
    assert n == 1
    poly_w = imagery.feature_width_m(shapely.box(1.5, 1.9, 3.5, 3.1))
    suspects, _ = imagery.multi_view_reflections(labels, n, views, np.full(shape, 4.0), threshold_c=1.0,
                                                 transform=grid_t, widths_m=[poly_w])
    assert suspects[1].rule == "moves"
    assert "0.80 m" in suspects[1].reason


def test_specular_words():
    assert imagery.specular_words("standing-seam metal roof") == "metal"
    assert imagery.specular_words("Galvanised steel sheet") == "metal"
    assert imagery.specular_words("TPO, mechanically fastened on polyiso") == "thermoplastic single-ply"
    assert imagery.specular_words("glazed roof light") == "glass"
    assert imagery.specular_words("built-up roof on steel deck") is None       # the deck is not the surface
    assert imagery.specular_words("EPDM on cellular glass") is None
    assert imagery.specular_words("fibreglass-reinforced bitumen") is None
    assert imagery.specular_words(None) is None


def test_warm_patch_on_a_declared_metal_section_is_flagged(tmp_path):
    """The warehouse sample with section B declared standing-seam metal: B's anomalies are suspects."""
    folder = tmp_path / "survey"
    shutil.copytree(WAREHOUSE, folder, ignore=shutil.ignore_patterns("results"))
    sections = json.loads((folder / "plan" / "sections.geojson").read_text(encoding="utf-8"))
    for f in sections["features"]:
        if f["properties"]["name"] == "B":
            f["properties"]["assembly"] = "standing-seam metal roof over the warehouse"
    (folder / "plan" / "sections.geojson").write_text(json.dumps(sections), encoding="utf-8")
    from wetmap.pipeline import process_survey

    r = process_survey(folder)
    b = [a for a in r.anomalies if a.section == "B"]
    assert b and all(imagery.REFLECTION_FLAG in a.flags for a in b)
    assert all(imagery.REFLECTION_FLAG not in a.flags for a in r.anomalies if a.section != "B")
    rs = r.summary()["reflection_suspect"]
    assert {s["id"] for s in rs} == {a.id for a in b}
    assert all(s["rule"] == "specular surface" and "metal" in s["surface"] for s in rs)


# --------------------------------------------------------------------------------------
# Display range
# --------------------------------------------------------------------------------------


def test_display_range_ignores_the_40c_rooftop_unit():
    """The warehouse sample's raster (invented demo data): the rooftop unit (40 °C) is an exclusion."""
    import rasterio

    from wetmap.windows import roof_mask
    from wetmap.vectors import read_layer, read_outline

    with rasterio.open(WAREHOUSE / "thermal" / "roof_pass1.tif") as ds:
        values = ds.read(1, masked=True).filled(np.nan).astype(np.float64)
        t = ds.transform
    outline, _ = read_outline(WAREHOUSE / "plan" / "outline.geojson", survey_crs="EPSG:32633")
    excl = shapely.union_all(read_layer(WAREHOUSE / "plan" / "exclusions.geojson", survey_crs="EPSG:32633",
                                        what="exclusions").geometries)
    roof = roof_mask(outline.difference(excl), t, values.shape) & np.isfinite(values)
    unit = roof_mask(outline, t, values.shape) & (values > 30)
    assert unit.sum() > 500  # the unit's casing, about 40 °C apparent
    r = imagery.roof_display_range(values, roof)
    assert r.high_c < 10.0 and r.low_c > -2.0
    assert not (roof & unit).any()
    # a 10 x 10 m window around the unit: with the unit counted (outline only) the range is stretched to it
    win = np.zeros(values.shape, bool)
    r0, c0 = rasterio.transform.rowcol(t, 512337.0, 5463113.0)
    win[r0:r0 + 100, c0 - 50:c0 + 50] = True
    stretched = imagery.roof_display_range(values, win & roof_mask(outline, t, values.shape))
    kept = imagery.roof_display_range(values, win & roof)
    assert stretched.high_c > 30.0
    assert kept.high_c < 8.0


def test_display_range_is_centred_on_the_dry_background(warehouse_strict):
    r = warehouse_strict
    dr = r.imagery.surface_range
    usable = np.isfinite(r.detection.delta_c)
    assert dr.centre_c == pytest.approx(float(np.median(r.detection.background_c[usable])), abs=1e-6)
    assert (dr.low_c + dr.high_c) / 2 == pytest.approx(dr.centre_c)
    p1, p99 = np.percentile(r.surface_c[usable], [1, 99])
    assert dr.low_c <= p1 + 1e-6 and dr.high_c >= p99 - 1e-6
    d = r.imagery.delta_range
    assert d.centre_c == 0.0 and d.high_c == -d.low_c >= 2 * r.detection.threshold_c


# --------------------------------------------------------------------------------------
# The planted faults, end to end (invented demo data)
# --------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def faulted(tmp_path_factory):
    """The walked roof with f05 blurred and a reflection seen by f03 only, run twice:
    with the blurred frame kept out of the blend (default) and blended in."""
    from wetmap.pipeline import run_survey

    folder = tmp_path_factory.mktemp("faults") / "survey"
    truth = demo.write_walked_roof_survey(folder, demo.WALKED_IMAGERY_FAULTS)
    result = run_survey(folder, out=folder / "results")
    kept = folder.parent / "kept"
    shutil.copytree(folder, kept, ignore=shutil.ignore_patterns("results"))
    (kept / "survey.toml").write_text((kept / "survey.toml").read_text(encoding="utf-8")
                                      + "\n[limits]\nexclude_blurred = false\n", encoding="utf-8")
    blended_in = run_survey(kept, out=kept / "results", map_html=False, report_html=False)
    return truth, result, blended_in, folder / "results"


def test_planted_faults_are_found(faulted):
    truth, r, _, out = faulted
    s = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert s["imagery"]["blurred"] == ["frames/f05.png"]
    f05 = [x for x in s["imagery"]["sources"] if x["path"] == "frames/f05.png"][0]
    assert f05["flags"] == ["blurred"] and f05["blending"].startswith("used only where")
    # the reflection: one suspect, where it was planted, seen warm by f03 and not by f08
    x, y = demo.WALKED_IMAGERY_FAULTS.roof.plan_from_roof @ demo.WALKED_IMAGERY_FAULTS.reflection[1:]
    suspects = [a for a in r.anomalies if imagery.REFLECTION_FLAG in a.flags]
    assert len(suspects) == 1 and suspects[0].geometry.distance(shapely.Point(x, y)) == 0
    entry = s["reflection_suspect"][0]
    assert entry["id"] == suspects[0].id and entry["rule"] == "one viewpoint"
    assert {v["path"] for v in entry["views"]} == {"frames/f03.png", "frames/f08.png"}
    # no real wet area is a suspect
    for a in r.anomalies:
        if any(a.geometry.intersects(w) for w in truth.wet):
            assert imagery.REFLECTION_FLAG not in a.flags
    text = " ".join(s["warnings"])
    assert "f05.png" in text and "lowers the temperatures" in text and "reflection suspect" in text
    # the flag travels to the GIS files and the report
    import geopandas as gpd

    g = gpd.read_file(out / "anomalies.geojson")
    assert g.loc[g["id"] == suspects[0].id, "flags"].iloc[0] == imagery.REFLECTION_FLAG
    page = (out / "report.html").read_text(encoding="utf-8")
    assert 'id="reflection-suspects"' in page and "frames/f05.png" in page
    assert 'data-key="imagery.smallest_reliable_area_m2"' in page


def test_blurred_frame_is_kept_out_of_the_blend(faulted):
    """The wet area under f05 (cored wet, C1): its mean delta-T reads lower with the blurred frame blended in."""
    truth, r, blended_in, _ = faulted
    w1 = truth.wet[0]

    def on_w1(res):
        return max((a for a in res.anomalies if a.geometry.intersects(w1)), key=lambda a: a.geometry.intersection(w1).area)

    assert on_w1(r).delta_mean_c > on_w1(blended_in).delta_mean_c + 0.05
    src = [x for x in blended_in.summary()["imagery"]["sources"] if x["path"] == "frames/f05.png"][0]
    assert src["blending"] == "used (exclude_blurred = false)"


def test_bundled_samples_raise_no_imagery_flags():
    from wetmap.pipeline import process_survey

    for folder in (WAREHOUSE, WALKED):
        r = process_survey(folder)
        assert all(not a.flags for a in r.anomalies), folder
        assert r.imagery.reflections == () and not any(s.flags for s in r.imagery.sources)


# --------------------------------------------------------------------------------------
# Settings and the map
# --------------------------------------------------------------------------------------


def test_new_keys_are_read_and_checked(tmp_path):
    folder = tmp_path / "s"
    shutil.copytree(WAREHOUSE, folder, ignore=shutil.ignore_patterns("results"))
    toml = folder / "survey.toml"
    base = toml.read_text(encoding="utf-8")
    shapely_box = {"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {},
                   "geometry": shapely.geometry.mapping(box(512300, 5463100, 512302, 5463102))}]}
    (folder / "plan" / "specular.geojson").write_text(json.dumps(shapely_box), encoding="utf-8")
    text = (base.replace("emissivity = 0.94", "emissivity = 0.94\nifov_mrad = 1.1\ndistance_m = 30")
            .replace('sections = "plan/sections.geojson"',
                     'sections = "plan/sections.geojson"\nspecular = "plan/specular.geojson"')
            + "\n[limits]\nmin_pixels_across = 4\nfocus_ratio = 0.4\nreflection_ratio = 0.3\nexclude_blurred = false\n")
    toml.write_text(text, encoding="utf-8")
    s = load_survey(folder)
    assert s.camera.ifov_mrad == 1.1 and s.plan.specular.name == "specular.geojson"
    assert (s.limits.min_pixels_across, s.limits.focus_ratio, s.limits.reflection_ratio,
            s.limits.exclude_blurred) == (4.0, 0.4, 0.3, False)
    toml.write_text(base + "\n[limits]\nfocus_ratio = 2\nexclude_blurred = \"no\"\n", encoding="utf-8")
    with pytest.raises(SurveyError) as err:
        load_survey(folder)
    problems = "\n".join(err.value.problems)
    assert "[limits] focus_ratio" in problems and "[limits] exclude_blurred" in problems


def test_optics_gsd_counts_when_coarser(tmp_path):
    """[camera] ifov_mrad 6 at 30 m: 0.18 m, coarser than the 0.1 m mosaic: the mosaic is upsampled."""
    folder = tmp_path / "s"
    shutil.copytree(WAREHOUSE, folder, ignore=shutil.ignore_patterns("results"))
    toml = folder / "survey.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace(
        "emissivity = 0.94", "emissivity = 0.94\nifov_mrad = 6.0\ndistance_m = 30\ntransmittance = 1.0"),
        encoding="utf-8")
    from wetmap.pipeline import process_survey

    r = process_survey(folder)
    src = r.summary()["imagery"]["sources"][0]
    assert src["optics_gsd_m"] == pytest.approx(0.18) and "upsampled" in src["note"]
    assert r.imagery.reliable_gsd_m == pytest.approx(0.18)
    assert r.imagery.smallest_reliable_area_m2 == pytest.approx(0.54 ** 2)  # (3 x 0.18 m)^2


def test_map_embeds_the_range_control_and_stays_small(faulted):
    _, r, _, out = faulted
    page = (out / "map.html").read_text(encoding="utf-8")
    assert "wetmapDisplay" in page and "wetmap-display" in page
    dr = r.imagery.surface_range
    assert f"Colour range {dr.low_c:.1f} to {dr.high_c:.1f}" in page and "1st-99th percentile" in page
    assert len(page.encode("utf-8")) < 10_000_000
    from wetmap.export.webmap import remote_references

    assert remote_references(page) == []


def test_browser_recolours_the_overlay_offline(faulted, tmp_path, monkeypatch):
    """Headless chromium (skipped when not installed), via the map tests' DevTools client: the
    palette and range change the overlay's pixels; the reset gives back the pixels wetmap drew."""
    sys.path.insert(0, str(Path(__file__).parent))
    import test_webmap as tw

    probe = """
    (async () => {
      const img = () => document.querySelector('img.wetmap-surface');
      const pix = async () => {
        const i = img(); await i.decode();
        const c = document.createElement('canvas'); c.width = i.naturalWidth; c.height = i.naturalHeight;
        const x = c.getContext('2d'); x.drawImage(i, 0, 0);
        return Array.from(x.getImageData(Math.floor(c.width / 2), Math.floor(c.height / 2), 1, 1).data)
          .concat([c.width, c.height]);
      };
      const first = await pix();
      await window.wetmapDisplay.set(0, 0, 10, 'gray');
      const grey = await pix();
      await window.wetmapDisplay.reset();
      const back = await pix();
      return JSON.stringify({first, grey, back, panel: !!document.querySelector('.wetmap-display'),
                             bars: document.querySelectorAll('.wetmap-legend img').length});
    })()
    """
    monkeypatch.setattr(tw, "_PROBE", probe)
    _, _, _, out = faulted
    got, errors = tw._browse(out / "map.html", tmp_path / "profile")
    assert errors == []
    assert got["panel"] and got["bars"] == 2
    r, g, b, a, w, h = got["grey"]
    assert r == g == b and a == 255  # the grey palette
    assert got["back"] == got["first"]  # the page's own colouring equals wetmap's at the roof range
    assert got["first"][4:] == got["grey"][4:]  # same size: still aligned with the plan


def test_specular_plan_layer_flags_the_patch_on_it(tmp_path):
    """A [plan] specular polygon over one anomaly of the warehouse sample (invented): only it is a suspect."""
    from wetmap.pipeline import process_survey

    base = process_survey(WAREHOUSE)
    target = max(base.anomalies, key=lambda a: a.area_m2)
    folder = tmp_path / "s"
    shutil.copytree(WAREHOUSE, folder, ignore=shutil.ignore_patterns("results"))
    layer = {"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {"name": "metal hood"},
             "geometry": shapely.geometry.mapping(target.geometry.buffer(0.5))}]}
    (folder / "plan" / "specular.geojson").write_text(json.dumps(layer), encoding="utf-8")
    toml = folder / "survey.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace(
        'sections = "plan/sections.geojson"', 'sections = "plan/sections.geojson"\nspecular = "plan/specular.geojson"'),
        encoding="utf-8")
    r = process_survey(folder)
    flagged = [a for a in r.anomalies if imagery.REFLECTION_FLAG in a.flags]
    assert len(flagged) == 1 and flagged[0].geometry.equals(target.geometry)
    assert r.imagery.reflections[0].surface == "[plan] specular layer"
