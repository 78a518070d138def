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
