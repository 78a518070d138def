"""Detection on roofs rendered independently of wetmap (tests/scene_render.py).

Each scene is an invented flat roof: a dry level with a natural gradient (2 K across the
roof plus 0.6 K along it and 0.5 K of curvature), wet areas 2 K warmer, 0.12 K pixel
noise (seeded), turned into apparent temperature by the renderer's own band-Planck
measurement equation, written as a survey folder and run through ``process_survey``.
The truth is the wet polygons; areas within 5 % and IoU >= 0.9 are this project's
acceptance tolerances for large wet areas (common practice: a wet area priced from a
survey is expected within a few percent).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import shapely
from scipy import constants

import scene_render as sr
from wetmap.verdicts import sample_at_points
from wetmap.detect import BackgroundModel, fit_trend, block_centres
from wetmap.tiles import detect_array
from wetmap.errors import SurveyError
from wetmap.pipeline import process_survey, run_survey


def _run(scene, folder, **kw):
    return process_survey(scene.write(folder), **kw)


# ------------------------------------------------------------------------------
# The renderer itself against outside values
# ------------------------------------------------------------------------------


def test_renderer_band_radiance_matches_published_fractions():
    """8-14 um at 300 K holds 0.37574 of sigma T^4 (Incropera, Fundamentals of Heat and Mass
    Transfer, table of blackbody radiation functions: F(4200 um K) - F(2400 um K)); the whole
    spectrum gives sigma T^4 / pi (Stefan-Boltzmann, sigma from scipy.constants, CODATA)."""
    t = 300.0
    exitance = constants.sigma * t ** 4 / math.pi
    assert sr.band_radiance(t, (8.0, 14.0)) / exitance == pytest.approx(0.37574, abs=1e-4)
    assert sr.band_radiance(t, (0.5, 1000.0)) / exitance == pytest.approx(1.0, abs=2e-4)


def test_renderer_apparent_temperature_of_a_grey_surface():
    """A blackbody reads its own temperature; a grey body reads between itself and the reflected
    temperature (measurement equation, ASTM E1862 form)."""
    surface = np.array([5.0, 10.0])
    np.testing.assert_allclose(sr.apparent_c(surface, emissivity=1.0, reflected_c=-20.0), surface, atol=2e-3)
    grey = sr.apparent_c(surface, emissivity=0.9, reflected_c=-20.0)
    assert np.all(grey < surface) and np.all(grey > -20.0)


# ------------------------------------------------------------------------------
# Large wet areas come out whole
# ------------------------------------------------------------------------------


@pytest.mark.parametrize("make", [sr.corner_scene, sr.bay_scene, sr.square_scene], ids=["corner", "bay", "square"])
def test_large_wet_areas_come_out_whole(make, tmp_path):
    scene = make()
    result = _run(scene, tmp_path / "roof")
    found, truth = sr.found_geometry(result), scene.truth()
    assert found.area == pytest.approx(truth.area, rel=0.05)
    assert sr.iou(found, truth) >= 0.9
    summary = result.summary()
    assert all(e["method"] == "trend" for e in summary["background"])
    # every wet core lies inside an anomaly
    assert not [w for w in summary["warnings"] if "says wet but lies outside" in w]


def test_corner_scene_reports_each_section_background_and_large_share(tmp_path):
    """The 620 m2 region is 38 % of section A: a large wet share, said next to the replace flag."""
    scene = sr.corner_scene()
    folder = scene.write(tmp_path / "roof")
    run_survey(folder)
    summary = json.loads((folder / "results" / "summary.json").read_text())
    by_name = {e["section"]: e for e in summary["background"]}
    assert set(by_name) == {"A", "B"}
    assert by_name["A"]["method"] == "trend" and "smooth" in by_name["A"]["reason"]
    assert {s["name"]: s["background"] for s in summary["sections"]} == {"A": "trend", "B": "trend"}
    a = next(s for s in summary["sections"] if s["name"] == "A")
    assert a["wet_fraction"] == pytest.approx(scene.wet[0].union(scene.wet[1]).area / 1620.0, rel=0.05)
    # 25 %: some local codes; 30 %: a trade rule of thumb (common practice)
    assert [e["where"] for e in summary["large_wet_share"]] == ["section A"]
    assert any("section A: anomalies fill 3" in w and "large wet share" in w for w in summary["warnings"])
    by_section = {e["section"]: e for e in summary["threshold_check_by_section"]}
    assert (by_section["A"]["wet_cores"], by_section["A"]["dry_cores"]) == (2, 1)  # W1, W2 / D1
    assert (by_section["B"]["wet_cores"], by_section["B"]["dry_cores"]) == (0, 1)  # D2
    assert by_section["A"]["misclassified"] == [] and by_section["A"]["separable"]
    report = (folder / "results" / "report.html").read_text(encoding="utf-8")
    assert "Large wet share" in report and "Dry background, A" in report and "within each section" in report


def test_bay_scene_sets_the_replace_flag(tmp_path):
    """45 % wet: the replace-or-repair flag (above 25 %, common practice / local codes) is set."""
    result = _run(sr.bay_scene(), tmp_path / "roof")
    s = result.summary()
    assert s["wet_fraction"] == pytest.approx(0.45, rel=0.05)
    assert s["replace_flag"] is True
    assert [e["where"] for e in s["large_wet_share"]] == ["the whole roof"]


def test_local_method_still_misses_what_it_always_missed(tmp_path):
    """Forcing the local method on the 45 % bay shows what the trend fixes (a contrast, so the
    test above means something): the local median takes most of the bay for its background."""
    scene = sr.bay_scene(detect='delta_c = 1.0\nbackground = "local"')
    result = _run(scene, tmp_path / "roof")
    assert result.summary()["background"][0]["method"] == "local"
    assert sr.found_geometry(result).area < 0.5 * scene.truth().area


def test_auto_keeps_the_local_method_where_the_dry_surface_is_not_smooth(tmp_path):
    """A dry surface with 0.5 K waves 10 m long (no wet area): no trend fits it, so "auto"
    takes the local median, says why, and finds nothing; forcing the trend warns."""
    scene = sr.square_scene(wave_c=0.5)
    scene.wet = []
    result = _run(scene, tmp_path / "auto")
    (entry,) = result.summary()["background"]
    assert entry["method"] == "local" and entry["reason"].startswith("not smooth")
    assert entry["trend_spread_c"] > entry["smooth_limit_c"]
    assert len(result.anomalies) == 0
    assert any("the dry surface is not smooth" in w for w in result.warnings)
    forced = _run(sr.square_scene(wave_c=0.5, detect='delta_c = 1.0\nbackground = "trend"'), tmp_path / "trend")
    assert forced.summary()["background"][0]["method"] == "trend"
    assert any('background = "trend" but the dry blocks scatter' in w for w in forced.warnings)


# ------------------------------------------------------------------------------
# Sections: no false anomaly at a step, in any orientation, with either method
# ------------------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["offgrid", "diagonal"])
@pytest.mark.parametrize("choice", ["auto", "local"])
def test_no_anomaly_at_a_section_step(kind, choice, tmp_path):
    scene = sr.step_scene(kind, detect=f'delta_c = 1.0\nbackground = "{choice}"')
    result = _run(scene, tmp_path / "roof")
    assert len(result.anomalies) == 0
    assert [e["section"] for e in result.summary()["background"]] == ["West", "East"]


def test_step_without_sections_is_seen(tmp_path):
    """The same 2.5 K step with no sections.geojson: one trend cannot follow a step, so the
    warm section shows up (the sections are what removes it)."""
    folder = sr.step_scene("diagonal").write(tmp_path / "roof")
    (folder / "plan" / "sections.geojson").unlink()
    toml = folder / "survey.toml"
    toml.write_text(toml.read_text().replace('sections = "plan/sections.geojson"\n', ""))
    result = process_survey(folder)
    assert sum(a.area_m2 for a in result.anomalies) > 100.0


def test_section_emissivity_is_applied_to_its_pixels(tmp_path):
    """With its emissivity in sections.geojson the East section's surface temperature is right
    (no offset, no anomaly); without it, East reads cooler than West by about a kelvin."""
    folder = sr.emissivity_scene().write(tmp_path / "roof")
    result = process_survey(folder)
    west = result.surface_c[:, :290][np.isfinite(result.surface_c[:, :290])]
    east = result.surface_c[:, 320:][np.isfinite(result.surface_c[:, 320:])]
    scene = sr.emissivity_scene()
    truth = scene.surface()
    assert np.median(east) - np.median(west) == pytest.approx(np.median(truth[:, 320:]) - np.median(truth[:, :290]),
                                                              abs=0.02)
    assert len(result.anomalies) == 0
    assert result.summary()["method"]["section_emissivity"] == {"East": 0.85}
    gj = folder / "plan" / "sections.geojson"
    data = json.loads(gj.read_text())
    data["features"][1]["properties"].pop("emissivity")
    gj.write_text(json.dumps(data))
    plain = process_survey(folder)
    east_plain = plain.surface_c[:, 320:][np.isfinite(plain.surface_c[:, 320:])]
    assert np.median(east) - np.median(east_plain) > 0.5


def test_section_emissivity_out_of_range_is_refused(tmp_path):
    from wetmap.errors import InputFileError

    folder = sr.emissivity_scene().write(tmp_path / "roof")
    gj = folder / "plan" / "sections.geojson"
    data = json.loads(gj.read_text())
    data["features"][1]["properties"]["emissivity"] = 1.4
    gj.write_text(json.dumps(data))
    with pytest.raises(InputFileError, match="East.*emissivity 1.4"):
        process_survey(folder)


# ------------------------------------------------------------------------------
# Edges and rooftop units
# ------------------------------------------------------------------------------


def test_parapet_band_is_flagged_or_left_out(tmp_path):
    result = _run(sr.parapet_scene(), tmp_path / "flag")
    assert result.anomalies and all("edge band" in a.flags for a in result.anomalies)
    assert any('flag "edge band"' in w for w in result.warnings)
    buffered = _run(sr.parapet_scene(detect="delta_c = 1.0\nedge_buffer_m = 1.2"), tmp_path / "buffer")
    assert len(buffered.anomalies) == 0
    outline = shapely.box(0, 0, 50.35, 30.45)
    band = outline.area - outline.buffer(-1.2, join_style="mitre").area
    assert buffered.coverage.edge_band_m2 == pytest.approx(band, rel=1e-9)
    assert any("not surveyed" in w and "edge_buffer_m" in w for w in buffered.warnings)
    out = tmp_path / "out"
    run_survey(tmp_path / "buffer", out=out)
    assert "Band along the roof edge left out (not surveyed)" in (out / "report.html").read_text(encoding="utf-8")
    assert json.loads((out / "summary.json").read_text())["coverage"]["edge_band_m2"] == pytest.approx(band, rel=1e-4)


def test_unit_halo_is_flagged_or_left_out(tmp_path):
    folder = sr.unit_scene().write(tmp_path / "flag")
    run_survey(folder)
    import geopandas

    layer = geopandas.read_file(folder / "results" / "anomalies.gpkg", layer="anomalies")
    assert len(layer) and all("next to a rooftop unit" in f for f in layer["flags"])
    assert "next to a rooftop unit" in (folder / "results" / "map.html").read_text(encoding="utf-8")
    assert "next to a rooftop unit" in (folder / "results" / "report.html").read_text(encoding="utf-8")
    buffered = _run(sr.unit_scene(detect="delta_c = 1.0\nexclusion_buffer_m = 1.0"), tmp_path / "buffer")
    assert len(buffered.anomalies) == 0
    assert buffered.coverage.exclusion_band_m2 == pytest.approx(5.0 ** 2 - 3.0 ** 2, rel=1e-6)


def test_large_wet_area_at_the_edge_is_not_an_edge_band(tmp_path):
    result = _run(sr.corner_scene(), tmp_path / "roof")
    assert not any(a.flags for a in result.anomalies)


# ------------------------------------------------------------------------------
# Threshold from the cores
# ------------------------------------------------------------------------------


def test_threshold_from_cores_is_the_middle_of_their_range(tmp_path):
    scene = sr.corner_scene(detect='delta_c = "cores"')
    result = _run(scene, tmp_path / "roof")
    conf = result.confirmations
    d = sample_at_points(result.detection.delta_c, result.grid.transform, conf.xs, conf.ys)
    expected = 0.5 * (d[~conf.wet].max() + d[conf.wet].min())
    assert result.detection.threshold_c == pytest.approx(expected, abs=1e-4)
    m = result.summary()["method"]
    assert m["delta_c"] == result.detection.threshold_c
    assert m["delta_c_source"].startswith("the middle of the range")
    found = sr.found_geometry(result)
    assert found.area == pytest.approx(scene.truth().area, rel=0.05)


def test_threshold_from_cores_refuses_when_the_cores_allow_no_range(tmp_path):
    scene = sr.corner_scene(detect='delta_c = "cores"')
    scene.cores.append(("W9", 72.0, 20.0, "wet"))  # a "wet" core in the dry field: colder than a dry core
    with pytest.raises(SurveyError, match="W9.*allow no threshold"):
        process_survey(scene.write(tmp_path / "roof"))


def test_delta_c_text_other_than_cores_is_refused(tmp_path):
    with pytest.raises(SurveyError, match='delta_c.*"cores"'):
        process_survey(sr.square_scene(detect='delta_c = "auto"').write(tmp_path / "roof"))


# ------------------------------------------------------------------------------
# The trend fit on the block grid
# ------------------------------------------------------------------------------


def _blocks(shape, block, seed=0, wet=None):
    rows_px, cols_px = block_centres(shape, block)
    rr, cc = np.meshgrid(rows_px, cols_px, indexing="ij")
    plane = 5.0 + 0.004 * cc - 0.003 * rr
    values = plane + np.random.default_rng(seed).normal(0.0, 0.01, plane.shape)
    if wet is not None:
        values = values + 2.0 * wet(rr, cc)
    return values, plane, rr, cc


@pytest.mark.parametrize("wet", [
    lambda r, c: c < 0.45 * c.max(),                        # 45 % in one bay
    lambda r, c: (r < 0.7 * r.max()) & (c < 0.7 * c.max()),  # about half, reaching a corner
    lambda r, c: (r - 150) ** 2 + (c - 250) ** 2 < 120 ** 2,  # a large disc in the middle
])
def test_trend_recovers_the_dry_plane_under_large_wet_areas(wet):
    values, plane, rr, cc = _blocks((300, 500), 10, wet=wet)
    fit = fit_trend(values.ravel(), rr.ravel(), cc.ravel(), threshold_c=1.0)
    assert fit is not None
    assert np.abs(fit.at(rr, cc) - plane).max() < 0.03
    assert fit.spread_c < 0.02


def test_dry_core_lowers_the_start_but_never_raises_it():
    """A dry core on a warm patch of another cause (extra plies) does not lift the surface."""
    values, plane, rr, cc = _blocks((300, 500), 10, wet=lambda r, c: c < 0.6 * c.max())
    dry = np.zeros(values.shape, bool)
    dry[5, 5] = True  # inside the warm part
    fit = fit_trend(values.ravel(), rr.ravel(), cc.ravel(), threshold_c=1.0, dry=dry.ravel())
    assert np.abs(fit.at(rr, cc) - plane).max() < 0.03


def test_dry_core_anchors_the_level_when_almost_everything_is_wet():
    """90 % wet around a dry island: no robust start alone finds the dry level, the dry core
    in the island does (and the fit without it is wrong, so the anchor is what helps)."""
    radius = math.sqrt(0.1 * 300 * 500 / math.pi)
    values, plane, rr, cc = _blocks((300, 500), 10, wet=lambda r, c: (r - 150) ** 2 + (c - 250) ** 2 > radius ** 2)
    dry = np.zeros(values.shape, bool)
    dry[15, 25] = True  # the block at the island's centre
    anchored = fit_trend(values.ravel(), rr.ravel(), cc.ravel(), threshold_c=1.0, dry=dry.ravel())
    assert np.abs(anchored.at(rr, cc) - plane).max() < 0.03
    alone = fit_trend(values.ravel(), rr.ravel(), cc.ravel(), threshold_c=1.0)
    assert np.abs(alone.at(rr, cc) - plane).max() > 1.0


def test_model_windows_equal_the_whole_array():
    """A window of the evaluated model equals the same pixels of the whole array, bit for bit,
    for trend and local sections alike."""
    scene = sr.step_scene("diagonal")
    surface = scene.surface().astype(np.float32)
    from wetmap.windows import pixel_edges, section_label_raster, section_labels

    edges = [pixel_edges(g, scene.transform) for _, g, _ in scene.sections]
    labels = section_label_raster(edges, surface.shape)
    for choice in ("trend", "local"):
        model = detect_array(surface, np.ones(surface.shape, bool), pixel_m=0.1, background_m=12.0, threshold_c=1.0,
                             min_area_m2=0.0, labels=labels, names=("West", "East", "rest"),
                             choice=choice).detection.background
        assert isinstance(model, BackgroundModel)
        whole = model.evaluate(labels)
        part = model.evaluate(section_labels(edges, row0=80, col0=160, shape=(97, 131)), row0=80, col0=160)
        assert np.array_equal(part.view(np.uint32), whole[80:177, 160:291].view(np.uint32))


# ------------------------------------------------------------------------------
# The sample surveys keep their answers
# ------------------------------------------------------------------------------

#: wet_area_m2 and anomaly_count of the sample surveys with the previous background (the
#: local block median over the whole roof), recorded from `wetmap run` before this change.
SAMPLE_BEFORE = {"walked_roof": (15.7691, 4), "warehouse_roof": (96.4164, 4), "yacht_hull": (0.9344, 4)}


@pytest.mark.parametrize("name", sorted(SAMPLE_BEFORE))
def test_sample_surveys_keep_their_answers(name):
    from pathlib import Path

    folder = Path(__file__).resolve().parent.parent / "sample_surveys" / name
    s = process_survey(folder).summary()
    area, count = SAMPLE_BEFORE[name]
    assert s["anomaly_count"] == count
    assert s["wet_area_m2"] == pytest.approx(area, rel=0.01)


def test_threshold_from_cores_without_a_cores_table_is_refused_before_work(tmp_path):
    scene = sr.square_scene(detect='delta_c = "cores"')
    scene.cores = []
    with pytest.raises(SurveyError, match=r'delta_c.*"cores": needs cores'):
        process_survey(scene.write(tmp_path / "roof"))
