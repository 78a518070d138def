"""Tests of wetmap.demo: the invented demo surveys and their known truth.

Every scene, value and file here is invented demo data (an invented warehouse roof on an
arbitrary spot of UTM zone 33N); none of it describes a real site.
"""

from __future__ import annotations

import csv
import math
import sys
from pathlib import Path

import numpy as np
import pytest
import rasterio
import shapely
from rasterio import features
from shapely.geometry import Point, shape

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

from wetmap import demo
from wetmap.demo import RoofScene, render_roof, write_roof_survey

KELVIN = 273.15
REPO = Path(__file__).resolve().parents[1]
SAMPLE = REPO / "sample_surveys" / "warehouse_roof"

# A coarser grid keeps the variant tests quick; the geometry is the same.
COARSE = dict(pixel_m=0.25)


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    """The default invented roof written to a fresh folder: ``(folder, scene, truth)``."""
    folder = tmp_path_factory.mktemp("roof")
    scene = RoofScene()
    truth = write_roof_survey(folder, scene)
    return folder, scene, truth


def _decode_to_kelvin(raw: np.ndarray, *, units: str, scale: float, offset: float) -> np.ndarray:
    """Raster values -> apparent temperature in kelvin, as the survey format defines it."""
    value = raw.astype(float) * scale + offset
    if units == "K":
        return value
    if units == "C":
        return value + KELVIN
    return (value - 32.0) * 5.0 / 9.0 + KELVIN


def _read_cores(path: Path) -> list[dict]:
    with open(path, newline="", encoding="utf-8") as f:
        return list(csv.DictReader(f))


# ----- the folder follows the survey format ---------------------------------------------


def test_folder_has_every_file_the_format_requires(written):
    folder, scene, _ = written
    doc = tomllib.loads((folder / "survey.toml").read_text(encoding="utf-8"))
    assert doc["survey"]["kind"] == "roof"
    assert doc["survey"]["crs"] == scene.crs
    assert doc["survey"]["site"] == "invented demo site"
    for key in ("title", "date", "surveyor"):
        assert isinstance(doc["survey"][key], str)
    cond = doc["conditions"]
    assert cond["air_c"] == scene.air_c and cond["humidity_pct"] == scene.humidity_pct
    assert cond["wind_m_s"] == scene.wind_m_s and cond["sky"] == scene.sky
    assert cond["reflected_c"] == scene.reflected_c
    assert {"sunset", "time"} <= cond.keys()
    assert doc["camera"]["emissivity"] == scene.emissivity
    for key in ("outline", "exclusions", "sections"):
        assert (folder / doc["plan"][key]).is_file()
    assert len(doc["mosaic"]) == 1
    mosaic = doc["mosaic"][0]
    assert (folder / mosaic["path"]).is_file() and mosaic["path"].startswith("thermal/")
    assert mosaic["units"] == "C" and "scale" not in mosaic
    assert doc["detect"]["delta_c"] == 1.0
    assert (folder / doc["cores"]["path"]).is_file()
    assert doc["repair"] == {"margin_m": 0.3, "board_m": [1.2, 2.4]}
    assert not (folder / "results").exists()


def test_survey_toml_passes_validation(written):
    """The survey loader accepts the generated file as it is."""
    from wetmap.survey import load_survey

    folder, scene, _ = written
    survey = load_survey(folder)
    assert survey.survey.kind == "roof"
    assert survey.camera.emissivity == scene.emissivity
    assert survey.conditions.reflected_c == scene.reflected_c
    assert survey.detect.delta_c == 1.0


def test_vectors_carry_the_crs_and_the_truth(written):
    import geopandas as gpd

    folder, scene, truth = written
    outline = gpd.read_file(folder / "plan" / "outline.geojson")
    assert outline.crs.to_epsg() == 32633
    assert len(outline) == 1
    assert outline.geometry[0].equals_exact(truth.outline, 1e-6)

    excl = gpd.read_file(folder / "plan" / "exclusions.geojson")
    assert excl.crs.to_epsg() == 32633
    assert sorted(excl["kind"]) == ["rooftop unit", "skylight"]
    assert np.isclose(excl.area.sum(), sum(p.area for p in truth.exclusions))

    sections = gpd.read_file(folder / "plan" / "sections.geojson")
    assert sections.crs.to_epsg() == 32633
    assert len(sections) == 2
    assert {"name", "assembly", "insulation"} <= set(sections.columns)
    assert all(sections["assembly"].str.len() > 0)
    union = shapely.union_all(sections.geometry.values)
    assert math.isclose(union.area, truth.outline.area, rel_tol=1e-9)
    assert shapely.symmetric_difference(union, truth.outline).area < 1e-6


# ----- the raster ---------------------------------------------------------------------


def test_raster_crs_transform_nodata(written):
    folder, scene, truth = written
    with rasterio.open(folder / "thermal" / "roof_pass1.tif") as src:
        assert src.crs.to_epsg() == 32633
        assert src.transform.almost_equals(truth.transform)
        assert src.transform.almost_equals(scene.transform)
        assert (src.height, src.width) == scene.grid_shape == truth.surface_c.shape
        assert src.nodata == demo.NODATA_FLOAT
        assert src.dtypes[0] == "float32"
        assert src.block_shapes[0] == (256, 256)
        assert src.compression.name.lower() == "deflate"
        data = src.read(1)
        valid = src.read_masks(1) > 0
    # 0.10 m pixels over 60 x 40 m plus the margin each side (invented demo values)
    assert scene.grid_shape == (460, 660)
    assert truth.transform.c == scene.origin_xy[0] - demo.MARGIN_M
    assert truth.transform.f == scene.origin_xy[1] + scene.size_m[1] + demo.MARGIN_M
    # nodata exactly where the truth has no coverage: a strip along the east edge
    assert np.array_equal(valid, np.isfinite(truth.surface_c))
    assert np.array_equal(valid, data != demo.NODATA_FLOAT)
    strip = int(round(demo.NODATA_STRIP_M / scene.pixel_m))
    assert not valid[:, -strip:].any() and valid[:, :-strip].all()
    # the whole roof outline is covered
    outline_mask = features.geometry_mask([truth.outline], valid.shape, truth.transform, invert=True)
    assert valid[outline_mask].all()


def test_inverting_the_raster_returns_the_true_surface(written):
    from wetmap.radiometry import surface_from_apparent

    folder, scene, truth = written
    with rasterio.open(folder / "thermal" / "roof_pass1.tif") as src:
        data = src.read(1, masked=True)
    apparent_k = _decode_to_kelvin(data.filled(np.nan), units="C", scale=1.0, offset=0.0)
    valid = ~data.mask
    surface_k = surface_from_apparent(
        apparent_k[valid], emissivity=scene.emissivity,
        reflected_k=scene.reflected_c + KELVIN, transmittance=1.0,
    )
    err = np.abs(np.asarray(surface_k) - (truth.surface_c[valid] + KELVIN))
    assert err.max() < 1e-3


def test_apparent_differs_from_surface(written):
    """The raster holds apparent, not surface, temperature: a cold sky reflection
    (invented reflected_c = -20 degC) makes the 0.94-emissive membrane read colder."""
    folder, scene, truth = written
    with rasterio.open(folder / "thermal" / "roof_pass1.tif") as src:
        data = src.read(1, masked=True)
    roof = features.geometry_mask([truth.outline], data.shape, truth.transform, invert=True)
    diff = truth.surface_c[roof] - data.data[roof]
    assert 0.5 < np.median(diff) < 5.0


# ----- the truth ----------------------------------------------------------------------


def test_truth_geometry_lies_inside_the_outline(written):
    _, scene, truth = written
    outline = truth.outline
    assert outline.is_valid and math.isclose(outline.area, 60 * 40 - 12 * 8)  # notch 12 x 8 m
    assert outline.bounds == pytest.approx(
        (*scene.origin_xy, scene.origin_xy[0] + 60.0, scene.origin_xy[1] + 40.0)
    )
    assert 2 <= len(truth.wet) <= 3 and len(truth.refuted) >= 1 and len(truth.exclusions) == 2
    for poly in [*truth.wet, *truth.refuted, *truth.exclusions]:
        assert poly.is_valid and outline.contains(poly)
    anomalies = [*truth.wet, *truth.refuted]
    for i, a in enumerate(anomalies):
        for b in anomalies[i + 1:] + truth.exclusions:
            assert a.distance(b) > 1.0  # separate patches, well apart
    # invented demo areas: 8 x 5 m rectangle, L-shape, 2 x 1.5 m patch
    areas = sorted(p.area for p in truth.wet)
    assert areas == pytest.approx([3.0, 40.0, 53.0])
    assert truth.wet_area_m2 == pytest.approx(96.0)
    assert set(truth.sections) == {"A", "B"}


def test_surface_field_follows_the_scenario(written):
    """Wet plateaus sit wet_excess_c above the gradient; the unit is hot, the skylight
    cold, the ground colder than the membrane (all invented demo values)."""
    _, scene, truth = written
    t = truth.transform

    def at(poly):
        m = features.geometry_mask([poly.buffer(-0.5)], truth.surface_c.shape, t, invert=True)
        return truth.surface_c[m], truth.background_c[m]

    for poly in truth.wet:
        s, bg = at(poly)
        assert np.nanmean(s - bg) == pytest.approx(scene.wet_excess_c, abs=0.1)
    s, bg = at(truth.refuted[0])
    assert 1.2 < np.nanmean(s - bg) < scene.wet_excess_c
    unit = at(truth.exclusions[0].buffer(-0.4))[0]
    sky = at(truth.exclusions[1].buffer(-0.2))[0]
    assert np.nanmean(unit) == pytest.approx(40.0, abs=0.5)
    assert np.nanmean(sky) < scene.dry_c - 3
    # the dry background falls 1 degC over the 60 m length (warmer over the offices)
    bg = truth.background_c
    assert np.nanmean(bg[:, 40]) - np.nanmean(bg[:, 620]) == pytest.approx(1.0 * 58 / 60, abs=0.01)
    # ground beyond the parapet, at the raster's lower-left corner, is colder
    assert truth.surface_c[-5:, :5].mean() < scene.dry_c - 2


def test_threshold_at_delta_recovers_the_true_outline():
    """delta > 1.0 degC on the noise-free field gives back each true wet outline closely."""
    scene = RoofScene(noise_c=0.0)
    _, truth = render_roof(scene)
    mask = (truth.surface_c - truth.background_c) > 1.0
    found = [shape(g) for g, _ in features.shapes(mask.astype("uint8"), mask=mask, transform=truth.transform)]
    for poly in [*truth.wet, *truth.refuted]:
        hit = shapely.union_all([f for f in found if f.intersects(poly)])
        iou = shapely.intersection(hit, poly).area / shapely.union(hit, poly).area
        assert iou > (0.9 if poly.area < 5 else 0.98)
    # besides them only the hot rooftop unit, inside its exclusion
    others = [f for f in found if not any(f.intersects(p) for p in [*truth.wet, *truth.refuted])]
    assert len(others) == 1 and truth.exclusions[0].contains(others[0])


# ----- the cores ----------------------------------------------------------------------


def test_cores_fall_where_the_scenario_says(written):
    folder, _, truth = written
    rows = _read_cores(folder / "cores.csv")
    assert list(rows[0])[:6] == ["id", "x", "y", "result", "depth_mm", "notes"]
    assert all(r["result"] in ("wet", "dry") for r in rows)
    pts = {r["id"]: (Point(float(r["x"]), float(r["y"])), r["result"]) for r in rows}
    assert len(pts) == len(rows)

    wet_hits = [[i for i, (p, res) in pts.items() if poly.contains(p)] for poly in truth.wet]
    # every core inside a wet outline says wet; two wet areas are cored ...
    for ids in wet_hits:
        assert all(pts[i][1] == "wet" for i in ids)
    assert sum(1 for ids in wet_hits if ids) == 2
    # ... and the smallest one is not (it stays "unverified")
    smallest = min(range(len(truth.wet)), key=lambda k: truth.wet[k].area)
    assert wet_hits[smallest] == []
    # each refuted patch holds a dry core
    for poly in truth.refuted:
        inside = [res for p, res in pts.values() if poly.contains(p)]
        assert inside and set(inside) == {"dry"}
    # at least two dry cores in the dry field, away from every anomaly and exclusion
    anomalies = shapely.union_all([*truth.wet, *truth.refuted, *truth.exclusions])
    field = [i for i, (p, res) in pts.items() if res == "dry" and p.distance(anomalies) > 2.0]
    assert len(field) >= 2
    assert all(truth.outline.contains(p) for p, _ in pts.values())
    assert [c.id for c in truth.cores] == [r["id"] for r in rows]


# ----- variants -----------------------------------------------------------------------


@pytest.mark.parametrize(
    "dtype, units",
    [("float32", "K"), ("float32", "F"), ("uint16", "K"), ("uint16", "C"), ("uint16", "F")],
)
def test_dtype_and_units_variants_round_trip(tmp_path, dtype, units):
    from wetmap.radiometry import surface_from_apparent
    from wetmap.survey import load_survey

    scene = RoofScene(dtype=dtype, units=units, **COARSE)
    truth = write_roof_survey(tmp_path, scene)
    doc = tomllib.loads((tmp_path / "survey.toml").read_text(encoding="utf-8"))
    mosaic = doc["mosaic"][0]
    assert mosaic["units"] == units
    scale, offset = mosaic.get("scale", 1.0), mosaic.get("offset", 0.0)
    assert (scale, offset) == scene.scale_offset
    if dtype == "uint16":
        assert "scale" in mosaic and "offset" in mosaic
    survey = load_survey(tmp_path)
    assert (survey.mosaics[0].scale, survey.mosaics[0].offset) == (scale, offset)

    with rasterio.open(tmp_path / mosaic["path"]) as src:
        assert src.dtypes[0] == dtype
        assert src.nodata == scene.nodata
        data = src.read(1, masked=True)
    valid = ~data.mask
    assert np.array_equal(valid, np.isfinite(truth.surface_c))
    apparent_k = _decode_to_kelvin(data.data[valid], units=units, scale=scale, offset=offset)
    surface_k = np.asarray(surface_from_apparent(
        apparent_k, emissivity=scene.emissivity, reflected_k=scene.reflected_c + KELVIN,
        transmittance=1.0,
    ))
    # float32 keeps 1e-3 K; uint16 counts of 0.01 K (or 0.01 degR) round by half a count,
    # which the inversion enlarges by about 1/emissivity
    tol = 1e-3 if dtype == "float32" else 0.5 * scale * (5 / 9 if units == "F" else 1) * 1.2 + 1e-4
    assert np.abs(surface_k - (truth.surface_c[valid] + KELVIN)).max() < tol


def test_rotated_scene_round_trips(tmp_path):
    from wetmap.radiometry import surface_from_apparent

    angle = 30.0
    plain = RoofScene(**COARSE)
    scene = RoofScene(rotation_deg=angle, **COARSE)
    data_plain, truth_plain = render_roof(plain)
    truth = write_roof_survey(tmp_path, scene)

    with rasterio.open(tmp_path / "thermal" / "roof_pass1.tif") as src:
        t = src.transform
        assert t.almost_equals(truth.transform)
        assert not t.is_rectilinear  # a rotated transform
        assert math.isclose(math.degrees(math.atan2(t.d, t.a)), angle)
        assert math.isclose(abs(t.determinant), scene.pixel_m ** 2)
        data = src.read(1, masked=True)
    # the grid follows the roof: same pixels as the unrotated scene
    assert np.array_equal(data.filled(demo.NODATA_FLOAT), data_plain)
    # geometry turned about the origin: same areas, origin fixed
    assert truth.outline.area == pytest.approx(truth_plain.outline.area)
    for a, b in zip(truth.wet, truth_plain.wet):
        assert a.area == pytest.approx(b.area)
        assert truth.outline.contains(a)
    x0, y0 = scene.origin_xy
    assert Point(x0, y0).distance(truth.outline.exterior) < 1e-6
    # the centre of each wet outline maps (through the rotated transform) to a warm pixel
    inv = ~t
    for poly in truth.wet:
        c = poly.representative_point()
        col, row = inv @ (c.x, c.y)
        r, k = int(row), int(col)
        delta = truth.surface_c[r, k] - truth.background_c[r, k]
        assert delta > 1.5
    # cores are rotated with the roof
    rows = _read_cores(tmp_path / "cores.csv")
    wet_pts = [Point(float(r["x"]), float(r["y"])) for r in rows if r["result"] == "wet"]
    assert all(any(p.contains(pt) for p in truth.wet) for pt in wet_pts)
    # and the raster still inverts to the truth
    valid = ~data.mask
    surface_k = np.asarray(surface_from_apparent(
        data.data[valid].astype(float) + KELVIN, emissivity=scene.emissivity,
        reflected_k=scene.reflected_c + KELVIN, transmittance=1.0,
    ))
    assert np.abs(surface_k - (truth.surface_c[valid] + KELVIN)).max() < 1e-3


def test_omitted_reflected_and_local_crs(tmp_path):
    import geopandas as gpd

    scene = RoofScene(reflected_c=None, crs="local", origin_xy=(0.0, 0.0), **COARSE)
    truth = write_roof_survey(tmp_path, scene)
    doc = tomllib.loads((tmp_path / "survey.toml").read_text(encoding="utf-8"))
    assert "reflected_c" not in doc["conditions"] and doc["conditions"]["sky"] == "clear"
    assert doc["survey"]["crs"] == "local"
    with rasterio.open(tmp_path / "thermal" / "roof_pass1.tif") as src:
        assert src.crs is None
        assert src.transform.almost_equals(truth.transform)
    outline = gpd.read_file(tmp_path / "plan" / "outline.geojson")
    assert outline.crs is None or outline.crs.to_epsg() == 4326  # GeoJSON with no crs member
    assert outline.geometry[0].bounds == pytest.approx((0.0, 0.0, 60.0, 40.0))


def test_scene_is_deterministic_and_checks_its_choices():
    a, _ = render_roof(RoofScene(**COARSE))
    b, _ = render_roof(RoofScene(**COARSE))
    c, _ = render_roof(RoofScene(seed=2, **COARSE))
    assert np.array_equal(a, b) and not np.array_equal(a, c)
    with pytest.raises(ValueError, match="dtype"):
        RoofScene(dtype="int8")
    with pytest.raises(ValueError, match="units"):
        RoofScene(units="R")


def test_main_writes_a_survey(tmp_path):
    assert demo.main([str(tmp_path / "s")]) == 0
    assert (tmp_path / "s" / "survey.toml").is_file()
    assert (tmp_path / "s" / "thermal" / "roof_pass1.tif").is_file()


# ----- the bundled sample -------------------------------------------------------------


def test_bundled_sample_is_current(written):
    """sample_surveys/warehouse_roof equals what the generator writes today.

    If this fails after a change to the demo scene or to the radiometry, regenerate it:
    ``python -m wetmap.demo sample_surveys/warehouse_roof``.
    """
    folder, _, _ = written
    if not SAMPLE.is_dir():
        pytest.skip("sample_surveys/warehouse_roof not present in this checkout")
    # what is committed: results/ is written by `wetmap run` and ignored by git
    total = sum(p.stat().st_size for p in SAMPLE.rglob("*") if p.is_file() and "results" not in p.relative_to(SAMPLE).parts)
    assert total < 2_000_000
    for name in ("plan/outline.geojson", "plan/exclusions.geojson", "plan/sections.geojson", "cores.csv"):
        assert (SAMPLE / name).read_text(encoding="utf-8") == (folder / name).read_text(encoding="utf-8"), name
    ours = tomllib.loads((SAMPLE / "survey.toml").read_text(encoding="utf-8"))
    fresh = tomllib.loads((folder / "survey.toml").read_text(encoding="utf-8"))
    assert ours == fresh
    with rasterio.open(SAMPLE / "thermal" / "roof_pass1.tif") as a, \
            rasterio.open(folder / "thermal" / "roof_pass1.tif") as b:
        assert a.profile == b.profile
        assert np.allclose(a.read(1), b.read(1), atol=1e-3)
