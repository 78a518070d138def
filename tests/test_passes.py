"""Tests for wetmap.passes and several passes in one night through the pipeline.

The fast array functions are checked against slow, obviously-correct references
(``numpy.polyfit`` per pixel, pairwise overlap counting). The two-pass survey is an
invented scenario built with :mod:`wetmap.demo` (invented data, used because the truth must
be known): the wet areas persist through the night and an extra warm patch seen in the
first pass only (residual sun or surface water) fades.
"""

from __future__ import annotations

import json
from datetime import time as clock_time
from types import SimpleNamespace

import numpy as np
import pytest
import rasterio
import shapely
from affine import Affine

from wetmap.demo import MARGIN_M, RoofScene, render_roof, write_roof_survey
from wetmap.passes import (
    align_to_grid,
    compare_passes,
    cooling_rate,
    group_passes,
    match_regions,
    pass_hours,
)
from wetmap.pipeline import process_survey, run_survey
from wetmap.polygons import label_regions

# ------------------------------------------------------------------ pure functions


def test_cooling_rate_matches_polyfit_per_pixel():
    rng = np.random.default_rng(3)
    hours = [0.5, 1.25, 2.0, 3.5]
    stack = rng.normal(5.0, 2.0, size=(4, 6, 7))
    stack[rng.random(stack.shape) < 0.2] = np.nan
    got = cooling_rate(list(stack), hours)
    for r in range(6):
        for c in range(7):
            ok = np.isfinite(stack[:, r, c])
            if ok.sum() < 2:
                assert np.isnan(got[r, c])
            else:  # the slow reference: a least-squares line through the pixel's passes
                slope = np.polyfit(np.asarray(hours)[ok], stack[ok, r, c], 1)[0]
                assert got[r, c] == pytest.approx(-slope, abs=1e-5)


def _slow_links(labels, counts, min_overlap):
    """Pairs of (pass, label) whose overlap reaches min_overlap of the smaller region."""
    links = set()
    for p in range(len(labels)):
        for q in range(p + 1, len(labels)):
            for i in range(1, counts[p] + 1):
                for j in range(1, counts[q] + 1):
                    a, b = labels[p] == i, labels[q] == j
                    if (a & b).sum() >= min_overlap * min(a.sum(), b.sum()) and (a & b).any():
                        links.add(((p, i), (q, j)))
    return links


def test_match_regions_against_pairwise_reference():
    rng = np.random.default_rng(5)
    labels, counts = [], []
    for _ in range(3):
        lab, n = label_regions(rng.random((30, 30)) > 0.6)
        labels.append(lab)
        counts.append(n)
    track_of, n_tracks = match_regions(labels, counts, min_overlap=0.3)
    for (p, i), (q, j) in _slow_links(labels, counts, 0.3):
        assert track_of[p][i - 1] == track_of[q][j - 1]
    # every track is held together by reference links (no spurious merges)
    parent = {(p, i): (p, i) for p in range(3) for i in range(1, counts[p] + 1)}

    def find(x):
        while parent[x] != x:
            x = parent[x]
        return x

    for a, b in _slow_links(labels, counts, 0.3):
        parent[find(a)] = find(b)
    groups = {}
    for p in range(3):
        for i in range(1, counts[p] + 1):
            groups.setdefault(find((p, i)), set()).add(int(track_of[p][i - 1]))
    assert all(len(g) == 1 for g in groups.values())
    assert n_tracks == len(groups)


def test_group_passes_orders_a_night_across_midnight():
    items = [SimpleNamespace(time=clock_time(0, 30)), SimpleNamespace(time=clock_time(22, 0)),
             SimpleNamespace(time=None)]
    groups, notes = group_passes(items, sunset=clock_time(17, 0))
    assert [g.label for g in groups] == ["22:00", "00:30"]
    assert [g.hours for g in groups] == [5.0, 7.5]
    assert len(groups[-1].mosaics) == 2 and notes  # the untimed entry joins the last pass, with a note
    assert pass_hours(clock_time(0, 30)) > pass_hours(clock_time(22, 0))  # without sunset: hours after noon


def test_compare_passes_on_arrays():
    """Two passes on a 20 x 20 grid (1 m pixels): a persistent patch and one that fades."""
    t = Affine(1.0, 0, 0, 0, -1.0, 20.0)
    delta1 = np.zeros((20, 20)); delta1[2:6, 2:6] = 2.0; delta1[12:16, 12:16] = 2.0
    delta2 = np.zeros((20, 20)); delta2[2:6, 2:6] = 2.1; delta2[12:16, 12:16] = 0.3
    surf1, surf2 = 5.0 + delta1, 3.0 + delta2
    lab1, n1 = label_regions(delta1 > 1.0)
    lab2, n2 = label_regions(delta2 > 1.0)
    result = compare_passes([surf1, surf2], [delta1, delta2], [lab1, lab2], [n1, n2], hours=[1.0, 3.0],
                            pass_labels=["18:00", "20:00"], transform=t)
    assert len(result.anomalies) == 1
    a = result.anomalies[0]
    assert a.persistence == 2 and a.seen_in == ("18:00", "20:00") and not a.fading
    assert a.cooling_vs_background_c_per_h == pytest.approx(-0.05)  # delta rose 0.1 K in 2 h
    assert len(result.faded) == 1
    f = result.faded[0]
    assert (f.x, f.y) == pytest.approx((14.0, 6.0))
    assert f.area_m2 == pytest.approx(16.0)
    assert f.cooling_vs_background_c_per_h == pytest.approx(0.85)  # (2.0 - 0.3) / 2 h
    assert np.allclose(result.cooling_c_per_h[0, 0], 1.0)  # the dry roof: 5 -> 3 °C in 2 h
    assert any("gone by the 20:00 pass" in w for w in result.warnings())


def test_fading_flag_on_a_primary_anomaly():
    t = Affine(1.0, 0, 0, 0, -1.0, 10.0)
    d1 = np.zeros((10, 10)); d1[2:6, 2:6] = 4.0
    d2 = np.zeros((10, 10)); d2[2:6, 2:6] = 1.5
    lab1, n1 = label_regions(d1 > 1.0)
    lab2, n2 = label_regions(d2 > 1.0)
    result = compare_passes([d1, d2], [d1, d2], [lab1, lab2], [n1, n2], hours=[0.0, 2.0],
                            pass_labels=["a", "b"], transform=t)
    assert result.anomalies[0].fading  # 1.5 < 0.5 x 4.0
    assert any("anomaly 1 is fading" in w for w in result.warnings())


def test_fading_judged_against_the_model_on_arrays():
    # the same 4.0 -> 1.5 K decay as above is kept when the cool-down model predicts the
    # contrast of that assembly to fall from 0.8 to 0.35 K (1.5 / 0.35 is 0.94 of 4.0 / 0.8),
    # and still flagged when the model predicts a flat contrast (values invented)
    t = Affine(1.0, 0, 0, 0, -1.0, 10.0)
    d1 = np.zeros((10, 10)); d1[2:6, 2:6] = 4.0
    d2 = np.zeros((10, 10)); d2[2:6, 2:6] = 1.5
    lab1, n1 = label_regions(d1 > 1.0)
    lab2, n2 = label_regions(d2 > 1.0)
    kept = compare_passes([d1, d2], [d1, d2], [lab1, lab2], [n1, n2], hours=[0.0, 2.0], pass_labels=["a", "b"],
                          transform=t, model_delta_c=np.array([[0.8, 0.35]]))
    assert not kept.anomalies[0].fading and kept.anomalies[0].model_delta_by_pass_c == (0.8, 0.35)
    assert not any("is fading" in w for w in kept.warnings())
    flat = compare_passes([d1, d2], [d1, d2], [lab1, lab2], [n1, n2], hours=[0.0, 2.0], pass_labels=["a", "b"],
                          transform=t, model_delta_c=np.array([[0.8, 0.8]]))
    assert flat.anomalies[0].fading and "cool-down model" in flat.anomalies[0].fade_basis
    # a model predicting no contrast at a pass says nothing there: the raw rule is not used either
    from wetmap.passes import MODEL_MIN_C, judge_fading

    assert judge_fading([4.0, 1.5], model_c=[0.8, MODEL_MIN_C / 2]) == (False, judge_fading([4.0, 1.5],
                                                                                           model_c=[0.8, 0.8])[1])
    with pytest.raises(ValueError, match="model_delta_c"):
        compare_passes([d1, d2], [d1, d2], [lab1, lab2], [n1, n2], hours=[0.0, 2.0], pass_labels=["a", "b"],
                       transform=t, model_delta_c=np.array([0.8, 0.35]))


def test_choose_primary_by_contrast_and_ties():
    from wetmap.passes import choose_primary, pass_contrast_c

    assert choose_primary([0.9, 1.7, 1.2])[0] == 1  # the greatest
    assert choose_primary([1.70, 1.68, 0.5])[0] == 1  # within 0.085 K (5 %) of it: the later one
    assert choose_primary([1.70, 1.50, 0.5])[0] == 0  # 0.2 K lower: the earlier pass wins
    assert choose_primary([np.nan, np.nan, np.nan])[0] == 2  # nothing to compare: the last
    # contrast on the same pixels in every pass: a patch seen once does not count when one
    # is seen twice (slow reference: the mean over the persistent patch's union by hand)
    lab_a = np.zeros((10, 10), int); lab_a[1:4, 1:4] = 1; lab_a[6:9, 6:9] = 2
    lab_b = np.zeros((10, 10), int); lab_b[1:5, 1:4] = 1
    d_a = np.where(lab_a > 0, 2.0, 0.0)
    d_b = np.where(lab_b > 0, 1.0, 0.0)
    union = (lab_a == 1) | (lab_b == 1)
    got = pass_contrast_c([d_a, d_b], [lab_a, lab_b], [2, 1])
    assert got.tolist() == pytest.approx([d_a[union].mean(), d_b[union].mean()])


def test_align_to_grid_same_and_finer():
    v = np.arange(12, dtype=np.float32).reshape(3, 4)
    t = Affine(1.0, 0, 100.0, 0, -1.0, 50.0)
    assert align_to_grid(v, t, t, v.shape) is v
    fine = align_to_grid(v, t, Affine(0.5, 0, 100.0, 0, -0.5, 50.0), (6, 8))
    # v = 4 row + col is linear, so bilinear resampling is exact between source pixel centres
    r = (np.arange(6) + 0.5) * 0.5 - 0.5
    c = (np.arange(8) + 0.5) * 0.5 - 0.5
    inside = ((r >= 0) & (r <= 2))[:, None] & ((c >= 0) & (c <= 3))[None, :]
    expected = 4.0 * r[:, None] + c[None, :]
    assert np.allclose(fine[inside], expected[inside])
    assert np.isnan(fine[~inside]).all()  # beyond the source's pixel centres: no data


# ------------------------------------------------------------------ a two-pass survey

PIXEL_M = 0.2
PATCH_UV = (18.0, 24.0, 22.0, 28.0)  # warm patch of the first pass only, roof coordinates (invented)


@pytest.fixture(scope="module")
def two_pass(tmp_path_factory):
    """The invented warehouse roof imaged at 17:30 (dry roof 6 °C) and 19:55 (4 °C).

    The wet areas and the extra plies have the same excess in both passes; a 4 x 4 m
    patch 3 °C warmer (apparent) appears in the 17:30 pass only.
    """
    folder = tmp_path_factory.mktemp("two_pass")
    scene = RoofScene(pixel_m=PIXEL_M)
    truth = write_roof_survey(folder, scene)
    early, _ = render_roof(RoofScene(pixel_m=PIXEL_M, dry_c=6.0, seed=2))
    u0, v0, u1, v1 = PATCH_UV
    c0, c1 = int((u0 + MARGIN_M) / PIXEL_M), int((u1 + MARGIN_M) / PIXEL_M)
    r0, r1 = int((scene.size_m[1] + MARGIN_M - v1) / PIXEL_M), int((scene.size_m[1] + MARGIN_M - v0) / PIXEL_M)
    early[r0:r1, c0:c1] += 3.0
    with rasterio.open(folder / "thermal" / "roof_pass1.tif") as src:
        profile = src.profile
    with rasterio.open(folder / "thermal" / "roof_pass0.tif", "w", **profile) as dst:
        dst.write(early, 1)
    toml = folder / "survey.toml"
    toml.write_text(toml.read_text(encoding="utf-8")
                    + '\n[[mosaic]]\npath = "thermal/roof_pass0.tif"\nunits = "C"\ntime = "17:30"\n',
                    encoding="utf-8")
    patch_xy = (scene.origin_xy[0] + 0.5 * (u0 + u1), scene.origin_xy[1] + 0.5 * (v0 + v1))
    return folder, truth, process_survey(folder), patch_xy


def test_two_passes_are_found_and_the_last_is_primary(two_pass):
    _, _, result, _ = two_pass
    p = result.passes
    assert p is not None and p.labels == ("17:30", "19:55") and p.primary == 1
    assert result.summary()["passes"]["primary"] == "19:55"


def test_wet_areas_persist(two_pass):
    _, truth, result, _ = two_pass
    by_id = {a.region: a for a in result.passes.anomalies}
    assert len(by_id) == len(result.anomalies)
    for wet in truth.wet:
        a = max(result.anomalies, key=lambda a: a.geometry.intersection(wet).area)
        track = by_id[a.id]
        assert track.persistence == 2 and not track.fading
        assert abs(track.cooling_vs_background_c_per_h) < 0.15  # keeps its excess over the dry roof
        assert track.delta_by_pass_c[0] == pytest.approx(track.delta_by_pass_c[1], abs=0.4)


def test_the_warm_patch_fades_and_is_not_an_anomaly(two_pass):
    _, _, result, patch_xy = two_pass
    assert len(result.passes.faded) == 1
    f = result.passes.faded[0]
    assert f.seen_in == ("17:30",)
    assert (f.x, f.y) == pytest.approx(patch_xy, abs=0.3)
    assert f.area_m2 == pytest.approx(16.0, rel=0.15)
    assert f.cooling_vs_background_c_per_h > 0.8  # its ~3 K excess is gone within 2.4 h
    patch = shapely.Point(patch_xy).buffer(1.0)
    assert not any(a.geometry.intersects(patch) for a in result.anomalies)
    assert any("gone by the 19:55 pass" in w for w in result.warnings)


def test_cooling_raster_is_written(two_pass, tmp_path):
    folder, truth, result, _ = two_pass
    out = tmp_path / "results"
    run_survey(folder, out=out)
    with rasterio.open(out / "cooling_c_per_h.tif") as src:
        rate = src.read(1)
        assert src.transform == result.grid.transform
    # dry roof: 6 -> 4 °C (mean) between 17:30 and 19:55, i.e. 2 / (145 / 60) = 0.83 °C/h (invented scenario)
    dry = rate[np.isfinite(rate) & ~np.isnan(result.detection.delta_c) & ~result.detection.mask]
    assert float(np.median(dry)) == pytest.approx(2.0 / (145.0 / 60.0), abs=0.05)
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert summary["passes"]["count"] == 2 and len(summary["passes"]["faded"]) == 1
    assert all(a["persistence"] in (1, 2) for a in summary["passes"]["anomalies"])


def test_single_pass_survey_is_unchanged(tmp_path):
    write_roof_survey(tmp_path, RoofScene(pixel_m=0.5))
    result = process_survey(tmp_path)
    assert result.passes is None and "passes" not in result.summary()


# --------------------------------------- three passes rendered independently of wetmap
#
# An invented 40 x 24 m roof in plan metres: section A (west) polyiso boards, section B
# (east) perlite board. Rendered here: the surface temperature of each pass from the
# test's own cooling curves, turned into apparent temperature with the test's own
# band-integrated Planck radiance (scipy.integrate.quad over 7.5-14 um, scipy.constants)
# and the measurement equation L_app = eps L(T_s) + (1 - eps) L(T_refl) (ASTM E1862).
#
# - the dry roof cools 1.1 K/h from 8 °C at sunset, with a 2 K west-east gradient and
#   0.1 K noise (invented);
# - W_B, a wet area in the perlite (6 x 6 m): delta 1.0, 2.2, 1.7 K (residual sun holds the
#   contrast back early; invented), so the middle pass has the greatest contrast;
# - W_A, a wet area in the closed-cell polyiso (5 x 5 m): its contrast decays through the
#   night. The condition under test is an area that fades *at the cool-down model's rate*,
#   so its deltas are 1.5 K times the ratio wetmap.cooldown predicts for polyiso between
#   the passes, and 10 % lower still in the last pass;
# - S, surface water on the perlite (3 x 3 m): delta 2.0, 1.4, 0.2 K, far faster than wet
#   perlite cools (invented).

PASS_TIMES = ("18:00", "19:30", "21:30")  # sunset 17:30: 0.5, 2.0 and 4.0 h after
PASS_HOURS = (0.5, 2.0, 4.0)
ROOF_WH = (40.0, 24.0)
PX = 0.25
W_A = (5.0, 8.0, 10.0, 13.0)
W_B = (26.0, 6.0, 32.0, 12.0)
WATER = (24.0, 16.0, 27.0, 19.0)
EPS, REFL_C = 0.94, -20.0


def _band_radiance_here(t_k: float) -> float:
    """Blackbody radiance over 7.5-14 um, W m-2 sr-1 (Planck's law, scipy.constants, quad)."""
    from scipy import constants, integrate

    h, c, k = constants.h, constants.c, constants.k
    return integrate.quad(lambda lam: 2 * h * c**2 / lam**5 / np.expm1(h * c / (lam * k * t_k)),
                          7.5e-6, 14e-6, epsrel=1e-10)[0]


def _apparent_from_surface_here(surface_c: np.ndarray) -> np.ndarray:
    temps_k = np.arange(200.0, 330.0, 0.25)
    table = np.array([_band_radiance_here(t) for t in temps_k])
    radiance = EPS * np.interp(surface_c + 273.15, temps_k, table) \
        + (1 - EPS) * _band_radiance_here(REFL_C + 273.15)
    return np.interp(radiance, table, temps_k) - 273.15


def _polyiso_model_ratio(folder) -> np.ndarray:
    """The cool-down model's wet-dry contrast for polyiso at the pass times (wetmap.cooldown)."""
    from wetmap.cooldown import plan_survey_window
    from wetmap.survey import load_survey
    from wetmap.vectors import read_sections

    survey = load_survey(folder)
    sections, _ = read_sections(survey.plan.sections, survey_crs=None)
    plan = plan_survey_window(survey, sections=[s for s in sections if s.name == "A"], step_s=300.0)
    return np.interp(PASS_HOURS, plan.hours_after_sunset, plan.delta_c)


def _write_three_pass_survey(folder):
    import json as _json

    folder.mkdir(parents=True, exist_ok=True)
    (folder / "plan").mkdir()
    (folder / "thermal").mkdir()
    w, h = ROOF_WH

    def feature(geom, props):
        return {"type": "Feature", "properties": props, "geometry": shapely.geometry.mapping(geom)}

    def write(name, feats):
        (folder / "plan" / name).write_text(_json.dumps({"type": "FeatureCollection", "features": feats}))

    write("outline.geojson", [feature(shapely.box(0, 0, w, h), {"name": "invented roof"})])
    write("sections.geojson", [
        feature(shapely.box(0, 0, w / 2, h), {"name": "A", "assembly": "built-up roof on polyiso board",
                                              "insulation": "polyiso"}),
        feature(shapely.box(w / 2, 0, w, h), {"name": "B", "assembly": "built-up roof on perlite board",
                                              "insulation": "perlite"}),
    ])
    mosaics = "".join(f'\n[[mosaic]]\npath = "thermal/pass{i}.tif"\nunits = "C"\ntime = "{t}"\n'
                      for i, t in enumerate(PASS_TIMES))
    (folder / "survey.toml").write_text(f"""
[survey]
title = "Invented three-pass roof"
kind = "roof"
crs = "local"

[conditions]
air_c = 6.0
humidity_pct = 70.0
wind_m_s = 1.5
sky = "clear"
reflected_c = {REFL_C}
sunset = "17:30"
time = "19:30"

[camera]
emissivity = {EPS}

[plan]
outline = "plan/outline.geojson"
sections = "plan/sections.geojson"

[detect]
delta_c = 0.5
{mosaics}""", encoding="utf-8")
    for i in range(len(PASS_TIMES)):  # placeholders, so that the survey loads for the model below
        (folder / "thermal" / f"pass{i}.tif").write_bytes(b"")
    model = _polyiso_model_ratio(folder)
    w_a = 1.5 * model / model[0] * np.array([1.0, 1.0, 0.9])
    w_b = np.array([1.0, 2.2, 1.7])
    water = np.array([2.0, 1.4, 0.2])
    # the raster: 1 m of margin round the outline, north up, pixel centres at (col + 0.5, row + 0.5)
    margin = 1.0
    cols, rows = int((w + 2 * margin) / PX), int((h + 2 * margin) / PX)
    xs = -margin + (np.arange(cols) + 0.5) * PX
    ys = h + margin - (np.arange(rows) + 0.5) * PX
    xx, yy = np.meshgrid(xs, ys)

    def inside(box_xy):
        x0, y0, x1, y1 = box_xy
        return (xx >= x0) & (xx < x1) & (yy >= y0) & (yy < y1)

    rng = np.random.default_rng(11)
    transform = Affine(PX, 0.0, -margin, 0.0, -PX, h + margin)
    for p, hours in enumerate(PASS_HOURS):
        surface = 8.0 - 1.1 * hours + 2.0 * xx / w + rng.normal(0.0, 0.1, xx.shape)
        surface = surface + w_a[p] * inside(W_A) + w_b[p] * inside(W_B) + water[p] * inside(WATER)
        apparent = _apparent_from_surface_here(surface).astype(np.float32)
        with rasterio.open(folder / "thermal" / f"pass{p}.tif", "w", driver="GTiff", width=cols, height=rows,
                           count=1, dtype="float32", transform=transform) as dst:
            dst.write(apparent, 1)
    return {"model": model, "w_a": w_a, "w_b": w_b, "water": water}


@pytest.fixture(scope="module")
def three_pass(tmp_path_factory):
    folder = tmp_path_factory.mktemp("three_pass") / "survey"
    truth = _write_three_pass_survey(folder)
    return truth, process_survey(folder)


def _track_at(result, box_xy):
    target = shapely.box(*box_xy)
    a = max(result.anomalies, key=lambda a: a.geometry.intersection(target).area)
    assert a.geometry.intersection(target).area > 0
    return a, {t.region: t for t in result.passes.anomalies}[a.id]


def test_primary_pass_is_the_one_with_the_greatest_contrast(three_pass):
    _, result = three_pass
    p = result.passes
    assert p.labels == PASS_TIMES
    assert p.primary == 1 and result.summary()["passes"]["primary"] == "19:30"  # not the last pass
    assert p.contrast_c[1] == max(p.contrast_c)
    assert "greatest wet-dry contrast" in p.primary_rule


def test_closed_cell_wet_area_fading_at_the_models_rate_is_kept(three_pass):
    truth, result = three_pass
    from wetmap.passes import judge_fading

    # the condition under test: its contrast falls below half between the first and last
    # pass, so a fixed ratio would have discarded it
    assert truth["w_a"][2] < 0.5 * truth["w_a"][0]
    a, track = _track_at(result, W_A)
    assert not track.fading and "cool-down model" in track.fade_basis
    assert judge_fading(track.delta_by_pass_c)[0]  # the fixed ratio alone calls it fading
    assert a.area_m2 == pytest.approx(25.0, rel=0.2)
    assert track.delta_by_pass_c == pytest.approx(tuple(truth["w_a"]), abs=0.25)
    # the model used is the polyiso one of its section
    assert track.model_delta_by_pass_c == pytest.approx(tuple(truth["model"]), rel=1e-6)
    assert not any(f"anomaly {a.id} is fading" in w for w in result.warnings)


def test_perlite_wet_area_kept_and_surface_water_fades(three_pass):
    _, result = three_pass
    a, track = _track_at(result, W_B)
    assert not track.fading and a.area_m2 == pytest.approx(36.0, rel=0.2)
    s, water = _track_at(result, WATER)
    assert water.fading  # 0.2 K in the last pass where wet perlite would still show most of its contrast
    assert any(f"anomaly {s.id} is fading" in w for w in result.warnings)


def test_without_a_cool_down_model_fading_uses_raw_deltas_and_says_so(tmp_path):
    # no [conditions] sunset: the cool-down model cannot run; the raw deltas are compared
    # (a fixed ratio) and a warning says that closed-cell wet areas may then be flagged
    folder = tmp_path / "survey"
    _write_three_pass_survey(folder)
    toml = folder / "survey.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace('sunset = "17:30"\n', ""), encoding="utf-8")
    result = process_survey(folder)
    assert any("judged on the raw deltas" in w and "sunset" in w for w in result.warnings)
    _, track = _track_at(result, W_A)
    assert track.fading and "no cool-down model" in track.fade_basis
