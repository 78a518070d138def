"""End-to-end runs of the pipeline on synthetic surveys whose truth is known.

The surveys are invented scenarios built by :mod:`wetmap.demo` (invented data, used
here because the true wet outlines must be known). The outside references are the
geometry library (shapely areas and intersections) and the physics checked in
test_radiometry.py.
"""

from __future__ import annotations

import json
import math
import os

import numpy as np
import pytest
import rasterio
import shapely

from wetmap.demo import RoofScene, write_roof_survey
from wetmap.errors import WetmapError
from wetmap.pipeline import RESULT_FILES, process_survey, run_survey


def _iou(a, b) -> float:
    return a.intersection(b).area / a.union(b).area


def _wet_union(result):
    return shapely.union_all([a.geometry for a in result.anomalies if a.status in ("wet", "unverified")])


@pytest.fixture(scope="module")
def flown(tmp_path_factory):
    """The default invented warehouse roof (north-up float32 mosaic in degC)."""
    folder = tmp_path_factory.mktemp("flown")
    truth = write_roof_survey(folder)
    return folder, truth, process_survey(folder)


def test_recovers_wet_area_within_5_percent_and_iou_0_9(flown):
    _, truth, result = flown
    true_wet = shapely.union_all(truth.wet)
    found = _wet_union(result)
    s = result.summary()
    assert s["wet_area_m2"] == pytest.approx(true_wet.area, rel=0.05)
    assert _iou(found, true_wet) >= 0.9
    for poly in truth.wet:  # each true wet area found on its own
        best = max(_iou(a.geometry, poly) for a in result.anomalies)
        assert best >= 0.85


def test_refuted_patch_is_dry_and_excluded_unit_never_reported(flown):
    _, truth, result = flown
    dry = [a for a in result.anomalies if a.status == "dry"]
    assert len(dry) == 1
    assert _iou(dry[0].geometry, truth.refuted[0]) >= 0.85
    excluded = shapely.union_all(truth.exclusions)
    for a in result.anomalies:
        assert a.geometry.intersection(excluded).area < 0.05 * a.area_m2


def test_statuses_follow_the_cores(flown):
    _, truth, result = flown
    by_status = {s: [a for a in result.anomalies if a.status == s] for s in ("wet", "dry", "unverified")}
    assert len(by_status["wet"]) == 2
    assert len(by_status["unverified"]) == 1  # the small area has no core (scenario)
    for a in by_status["wet"]:
        assert a.confirmations
    s = result.summary()
    assert s["wet_area_m2"] == pytest.approx(s["confirmed_wet_area_m2"] + s["unverified_area_m2"])
    assert s["roof_area_m2"] == pytest.approx(truth.outline.area - sum(e.area for e in truth.exclusions), rel=1e-9)


def test_surface_temperature_recovered_to_0_05_c(flown):
    """Radiometric correction: median error <= 0.05 degC against the true surface field."""
    _, truth, result = flown
    # the demo raster's grid and the plan grid share the pixel lattice; compare on the common window
    inv = ~truth.transform
    col0, row0 = inv @ (result.grid.transform.c, result.grid.transform.f)
    r0, c0 = int(round(row0)), int(round(col0))
    true = truth.surface_c[r0:r0 + result.grid.rows, c0:c0 + result.grid.cols]
    got = result.surface_c[: true.shape[0], : true.shape[1]]
    both = np.isfinite(true) & np.isfinite(got)
    assert both.sum() > 100_000
    assert float(np.median(np.abs(got[both] - true[both]))) <= 0.05


def test_perimeter_is_the_outline_not_the_staircase(flown):
    _, truth, result = flown
    rect = truth.wet[0]  # an axis-aligned 8 x 5 m rectangle in the scenario
    a = max(result.anomalies, key=lambda a: _iou(a.geometry, rect))
    assert a.perimeter_m == pytest.approx(rect.length, rel=0.05)


@pytest.mark.parametrize(
    "scene",
    [
        RoofScene(rotation_deg=23.0, seed=4),  # rotated raster transform: resampled onto a north-up grid
        RoofScene(dtype="uint16", units="K", seed=5),  # integer raster with scale/offset
        RoofScene(units="F", seed=6),
    ],
    ids=["rotated", "uint16-K", "fahrenheit"],
)
def test_variants_recover_the_same_truth(tmp_path, scene):
    truth = write_roof_survey(tmp_path, scene)
    result = process_survey(tmp_path)
    true_wet = shapely.union_all(truth.wet)
    found = _wet_union(result)
    assert found.area == pytest.approx(true_wet.area, rel=0.06)
    assert _iou(found, true_wet) >= 0.88


def test_results_written_with_the_format_names(tmp_path):
    folder = tmp_path / "s"
    write_roof_survey(folder)
    result = run_survey(folder)
    out = folder / "results"
    for name in RESULT_FILES:
        assert (out / name).is_file(), name
    summary = json.loads((out / "summary.json").read_text())
    for key in ("roof_area_m2", "anomaly_count", "wet_area_m2", "confirmed_wet_area_m2", "unverified_area_m2",
                "confirmed_dry_area_m2", "wet_fraction", "repair_area_m2", "boards", "warnings", "sections"):
        assert key in summary
    assert summary["anomaly_count"] == len(result.anomalies)

    import pyogrio

    frame = pyogrio.read_dataframe(out / "anomalies.gpkg", layer="anomalies")
    # the format's attributes, in its order; wetmap may add more after them
    assert list(frame.columns[:8]) == ["id", "status", "area_m2", "perimeter_m", "delta_mean_c", "delta_max_c",
                                       "confirmations", "section"]
    assert frame.crs.to_epsg() == 32633
    assert set(frame["status"]) <= {"wet", "dry", "unverified"}
    gj = json.loads((out / "anomalies.geojson").read_text())
    lon, lat = gj["features"][0]["geometry"]["coordinates"][0][0]
    assert -180 <= lon <= 180 and -90 <= lat <= 90  # RFC 7946 longitude/latitude
    # the GeoJSON polygons are the GPKG polygons, reprojected (pyproj as the reference)
    from pyproj import Transformer

    tr = Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True)
    x, y = frame.geometry.iloc[0].exterior.coords[0]
    assert tr.transform(x, y) == pytest.approx((lon, lat), abs=1e-9)

    with rasterio.open(out / "surface_c.tif") as src:
        assert src.crs.to_epsg() == 32633
        assert src.transform == result.grid.transform
        data = src.read(1)
        assert np.isnan(src.nodata)
        np.testing.assert_array_equal(np.isnan(data), np.isnan(result.surface_c))
    with rasterio.open(out / "delta_c.tif") as src:
        delta = src.read(1)
        assert np.nanmax(delta) > 1.0

    rows = (out / "quantities.csv").read_text().splitlines()
    assert rows[0].startswith("row,id,status")
    kinds = [r.split(",")[0] for r in rows[1:]]
    assert kinds.count("anomaly") == len(result.anomalies)
    assert "total" in kinds


def test_geodesic_area_agrees_with_plan_area(flown):
    """Plan areas in UTM agree with pyproj's geodesic area within 0.1 % (pyproj.Geod.geometry_area_perimeter)."""
    from pyproj import Geod, Transformer

    _, _, result = flown
    tr = Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True)
    geod = Geod(ellps="WGS84")
    for a in result.anomalies:
        lonlat = shapely.transform(a.exact, lambda xy: np.column_stack(tr.transform(xy[:, 0], xy[:, 1])))
        area, _ = geod.geometry_area_perimeter(lonlat)
        assert abs(area) == pytest.approx(a.area_m2, rel=1e-3)  # area_m2 is the exact outline's


def test_failed_run_leaves_earlier_results_untouched(tmp_path):
    folder = tmp_path / "s"
    write_roof_survey(folder)
    run_survey(folder)
    out = folder / "results"
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    toml = folder / "survey.toml"
    toml.write_text(toml.read_text().replace("emissivity = 0.94", "emissivity = 1.4"))
    with pytest.raises(WetmapError) as err:
        run_survey(folder)
    assert "emissivity" in str(err.value)
    after = {p.name: p.read_bytes() for p in out.iterdir()}
    assert before == after
    leftovers = [p.name for p in folder.iterdir() if p.name.startswith(".results")]
    assert leftovers == []


def test_failure_while_writing_keeps_old_results(tmp_path, monkeypatch):
    folder = tmp_path / "s"
    write_roof_survey(folder)
    run_survey(folder)
    out = folder / "results"
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    from wetmap.export import gis

    def broken(*args, **kwargs):
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(gis, "write_raster", broken)
    with pytest.raises(OSError):
        run_survey(folder)
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert [p.name for p in folder.iterdir() if p.name.startswith(".results")] == []


def test_wet_core_outside_every_anomaly_is_warned(tmp_path):
    folder = tmp_path / "s"
    truth = write_roof_survey(folder)
    x0, y0, _, _ = truth.outline.bounds
    with (folder / "cores.csv").open("a") as fh:
        fh.write(f"C99,{x0 + 30.0:.2f},{y0 + 2.0:.2f},wet,80,added for the test\n")
    result = process_survey(folder)
    assert any("C99" in w and "missed" in w for w in result.warnings)


def test_no_contrast_gives_empty_result(tmp_path):
    """A constant mosaic must give no anomaly, not an error (common practice: no contrast, no detection)."""
    folder = tmp_path / "s"
    write_roof_survey(folder)
    path = folder / "thermal" / "roof_pass1.tif"
    with rasterio.open(path, "r+") as dst:
        data = dst.read(1)
        data[np.isfinite(data) & (data != dst.nodata)] = 5.0
        dst.write(data, 1)
    result = process_survey(folder)
    assert result.anomalies == ()
    assert any("constant" in w for w in result.warnings)


def test_all_nodata_is_refused_and_earlier_results_kept(tmp_path):
    folder = tmp_path / "s"
    write_roof_survey(folder)
    run_survey(folder)
    before = {p.name: p.read_bytes() for p in (folder / "results").iterdir() if p.is_file()}
    path = folder / "thermal" / "roof_pass1.tif"
    with rasterio.open(path, "r+") as dst:
        data = dst.read(1)
        data[:] = dst.nodata
        dst.write(data, 1)
    with pytest.raises(WetmapError) as err:
        run_survey(folder)
    assert "no data inside the outline" in str(err.value) and "roof_pass1.tif" in str(err.value)
    after = {p.name: p.read_bytes() for p in (folder / "results").iterdir() if p.is_file()}
    assert after == before


def test_partial_coverage_is_reported_not_called_dry(tmp_path):
    folder = tmp_path / "s"
    truth = write_roof_survey(folder)
    path = folder / "thermal" / "roof_pass1.tif"
    with rasterio.open(path, "r+") as dst:
        data = dst.read(1)
        half = data.shape[1] // 2
        data[:, half:] = dst.nodata
        dst.write(data, 1)
        t = dst.transform
    result = process_survey(folder)
    # the uncovered part is the roof east of the cut: compare with shapely (exact up to pixel centres)
    x_cut = (t @ (half, 0))[0]
    xmin, ymin, xmax, ymax = truth.outline.bounds
    east = shapely.box(x_cut, ymin - 1, xmax + 1, ymax + 1)
    roof = truth.outline.difference(shapely.union_all(truth.exclusions))
    expected = roof.intersection(east).area
    assert result.coverage.uncovered_m2 == pytest.approx(expected, rel=0.02)
    assert any("not surveyed" in w for w in result.warnings)


def test_local_plan_runs_in_plan_metres(tmp_path):
    """A 'local' survey near (0, 0): areas in plan metres, GeoJSON in plan metres too."""
    folder = tmp_path / "s"
    scene = RoofScene(crs="EPSG:32633", origin_xy=(0.0, 0.0))
    truth = write_roof_survey(folder, scene)
    toml = folder / "survey.toml"
    toml.write_text(toml.read_text().replace('crs = "EPSG:32633"', 'crs = "local"'))
    result = run_survey(folder)
    found = _wet_union(result)
    assert _iou(found, shapely.union_all(truth.wet)) >= 0.9
    gj = json.loads((folder / "results" / "anomalies.geojson").read_text())
    xs = [c[0] for c in gj["features"][0]["geometry"]["coordinates"][0]]
    assert max(xs) == pytest.approx(max(x for x, _ in result.anomalies[0].geometry.exterior.coords), abs=1e-6)


def test_no_results_dir_created_when_survey_invalid(tmp_path):
    folder = tmp_path / "s"
    write_roof_survey(folder)
    os.remove(folder / "plan" / "outline.geojson")
    with pytest.raises(WetmapError) as err:
        run_survey(folder)
    assert "outline" in str(err.value) and "not found" in str(err.value)
    assert not (folder / "results").exists()


def test_min_area_drops_small_anomalies(tmp_path):
    folder = tmp_path / "s"
    write_roof_survey(folder)
    toml = folder / "survey.toml"
    toml.write_text(toml.read_text().replace("delta_c = 1.0", "delta_c = 1.0\nmin_area_m2 = 5.0"))
    result = process_survey(folder)
    assert all(a.area_m2 >= 5.0 - 1e-9 for a in result.anomalies)
    assert not any(a.status == "unverified" for a in result.anomalies)  # the 3 m2 area is dropped
    assert math.isclose(result.survey.detect.min_area_m2, 5.0)


def test_wet_area_range_brackets_the_truth(flown):
    """The invented scenario's true wet area (96 m2) lies inside wet_area_range_m2."""
    _, truth, result = flown
    low, high = result.summary()["wet_area_range_m2"]
    true_area = shapely.union_all(truth.wet).area
    assert low <= true_area <= high
    assert high - low < 0.5 * true_area  # and the range is informative, not the whole roof


def test_stages_run_alone_and_compose_into_the_run(flown):
    """Each named stage runs on its own, typed inputs in, typed outputs out, and the stages
    chained by hand give what process_survey gives (same outlines, statuses, statistics,
    threshold check and quantities)."""
    from wetmap.pipeline import (Found, Judged, OnGrid, Plan, anomalies_of, detection_stage, image_check_stage,
                                 imagery_stage, plan_stage, quantity_stage, verdict_stage)
    from wetmap.sun import with_sun_times
    from wetmap.survey import load_survey

    folder, _, result = flown
    plan = plan_stage(with_sun_times(load_survey(folder)))
    assert isinstance(plan, Plan)
    assert plan.roof.area == pytest.approx(result.roof.area, rel=1e-12)  # shapely areas of the same polygons
    on_grid = imagery_stage(plan)
    assert isinstance(on_grid, OnGrid) and on_grid.tiled is None and on_grid.coverage == result.coverage
    found = detection_stage(plan, on_grid)
    assert isinstance(found, Found) and found.count == len(result.anomalies) > 0
    judged = verdict_stage(plan, on_grid, found)
    assert isinstance(judged, Judged) and judged.verdicts.status == result.verdicts.status
    assert judged.threshold == result.threshold
    imagery = image_check_stage(plan, on_grid, found)
    anomalies, _ = anomalies_of(plan, on_grid, found, judged, imagery)
    assert [a.exact.equals(b.exact) for a, b in zip(anomalies, result.anomalies)] == [True] * len(anomalies)
    assert [a.delta_mean_c for a in anomalies] == [a.delta_mean_c for a in result.anomalies]
    quantities, _ = quantity_stage(plan, anomalies)
    assert quantities.repair.equals(result.repair) and quantities.takeoff.count == result.takeoff.count
