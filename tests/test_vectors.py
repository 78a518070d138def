"""Tests of wetmap.vectors: plan files (outline, exclusions, sections) -> shapely geometries.

Files are written in code (GeoJSON as text, so the presence or absence of a ``crs`` member
is exactly what the test says; GeoPackage with geopandas) or taken from
``tests/data/invalid/``. Expected positions in another CRS come from pyproj.
"""

from __future__ import annotations

import json
import logging
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import shapely
from pyproj import Transformer
from shapely.geometry import Point, Polygon, box

from wetmap.errors import InputFileError
from wetmap.vectors import PlanLayer, Section, read_layer, read_outline, read_sections

UTM33 = "EPSG:32633"
REPO = Path(__file__).resolve().parents[1]


def geojson(path: Path, polygons, *, properties=None, crs: str | None = None) -> Path:
    """Write polygons (lists of [x, y] rings) as a GeoJSON FeatureCollection; ``crs`` adds a crs member."""
    properties = properties or [{} for _ in polygons]
    doc = {
        "type": "FeatureCollection",
        "features": [
            {"type": "Feature", "properties": props, "geometry": {"type": "Polygon", "coordinates": [ring]}}
            for ring, props in zip(polygons, properties)
        ],
    }
    if crs is not None:
        doc["crs"] = {"type": "name", "properties": {"name": crs}}
    path.write_text(json.dumps(doc))
    return path


def rect(x0: float, y0: float, w: float, h: float) -> list[list[float]]:
    return [[x0, y0], [x0 + w, y0], [x0 + w, y0 + h], [x0, y0 + h], [x0, y0]]


# --------------------------------------------------------------------------------------
# Coordinates and CRS
# --------------------------------------------------------------------------------------


def test_plan_coordinates_without_crs_member(tmp_path):
    """UTM plan coordinates in a GeoJSON with no crs member: read as plan coordinates, unchanged."""
    path = geojson(tmp_path / "outline.geojson", [rect(512300, 5463100, 60, 40)])
    layer = read_layer(path, survey_crs=UTM33, what="outline")
    assert isinstance(layer, PlanLayer) and len(layer.geometries) == 1
    assert layer.geometries[0].equals(box(512300, 5463100, 512360, 5463140))
    assert layer.notes == ()


def test_declared_survey_crs_kept(tmp_path):
    path = geojson(tmp_path / "outline.geojson", [rect(512300, 5463100, 60, 40)],
                   crs="urn:ogc:def:crs:EPSG::32633")
    outline, notes = read_outline(path, survey_crs=UTM33)
    assert outline.area == pytest.approx(2400.0) and notes == ()


def test_lonlat_geojson_reprojected_into_utm(tmp_path):
    """RFC 7946 GeoJSON (lon/lat, no crs member) on a UTM 33N survey."""
    lon0, lat0 = 15.16, 49.31
    ring = [[lon0, lat0], [lon0 + 0.001, lat0], [lon0 + 0.001, lat0 + 0.0005], [lon0, lat0 + 0.0005], [lon0, lat0]]
    path = geojson(tmp_path / "outline.geojson", [ring])
    layer = read_layer(path, survey_crs=UTM33, what="outline")
    tr = Transformer.from_crs("EPSG:4326", UTM33, always_xy=True)
    expected = np.column_stack(tr.transform([p[0] for p in ring], [p[1] for p in ring]))
    got = shapely.get_coordinates(layer.geometries[0])
    np.testing.assert_allclose(got, expected, atol=1e-6)
    assert 500000 < got[:, 0].min() < 530000 and 5.4e6 < got[:, 1].min() < 5.5e6
    assert any("reprojected from EPSG:4326 to EPSG:32633" in n for n in layer.notes)


def test_geopackage_in_another_projected_crs_reprojected(tmp_path):
    """A plan drawn in UTM 34N on a UTM 33N survey: each vertex moved to where pyproj puts it."""
    corner = (240000.0, 5470000.0)  # UTM 34N, west of 18 deg E: the ground is near the 33N/34N boundary
    poly = Polygon(rect(*corner, 30.0, 20.0))
    path = tmp_path / "outline.gpkg"
    gpd.GeoDataFrame({"part": ["main"]}, geometry=[poly], crs="EPSG:32634").to_file(path)
    layer = read_layer(path, survey_crs=UTM33, what="outline")
    tr = Transformer.from_crs("EPSG:32634", UTM33, always_xy=True)
    ex, ey = tr.transform(*corner)
    got = shapely.get_coordinates(layer.geometries[0])
    assert np.min(np.hypot(got[:, 0] - ex, got[:, 1] - ey)) < 1e-6
    assert layer.geometries[0].area == pytest.approx(600.0, rel=5e-3)  # the scale factors differ a little
    assert layer.attributes["part"] == ("main",)
    assert layer.notes == ("outline.gpkg: reprojected from EPSG:32634 to EPSG:32633",)


def test_local_survey_near_origin(tmp_path):
    """A local plan's coordinates near (0, 0) also fit in lon/lat range: still plan metres."""
    path = geojson(tmp_path / "outline.geojson", [rect(0, 0, 24, 9.5)])
    outline, notes = read_outline(path, survey_crs=None)
    assert outline.equals(box(0, 0, 24, 9.5)) and outline.area == pytest.approx(228.0)
    assert notes == ()


def test_local_survey_with_lonlat_file_gets_a_note(tmp_path):
    """Documented: a local survey reads every file as plan metres; degrees are then worth a note."""
    path = tmp_path / "outline.gpkg"
    gpd.GeoDataFrame(geometry=[box(15.16, 49.31, 15.161, 49.3105)], crs="EPSG:4326").to_file(path)
    layer = read_layer(path, survey_crs=None, what="outline")
    assert layer.geometries[0].bounds == pytest.approx((15.16, 49.31, 15.161, 49.3105))
    assert len(layer.notes) == 1 and "outline.gpkg" in layer.notes[0] and "degrees" in layer.notes[0]


def test_z_coordinates_dropped(tmp_path):
    path = tmp_path / "outline.geojson"
    ring = [[0, 0, 5], [10, 0, 5], [10, 10, 5], [0, 10, 5], [0, 0, 5]]
    path.write_text(json.dumps({"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {}, "geometry": {"type": "Polygon", "coordinates": [ring]}}]}))
    layer = read_layer(path, survey_crs=None, what="outline")
    assert not layer.geometries[0].has_z


# --------------------------------------------------------------------------------------
# Bad files
# --------------------------------------------------------------------------------------


def test_linestring_outline_rejected_naming_the_feature(invalid):
    path = invalid("outline_linestring.geojson")
    with pytest.raises(InputFileError) as err:
        read_outline(path, survey_crs=None)
    message = str(err.value)
    assert str(path) in message and "feature 1 is a LineString" in message and "expected polygons for the outline" in message


def test_empty_feature_collection(invalid):
    path = invalid("outline_empty.geojson")
    with pytest.raises(InputFileError) as err:
        read_layer(path, survey_crs=UTM33, what="exclusions")
    assert str(path) in str(err.value) and "holds no features" in str(err.value) and "exclusions" in str(err.value)


def test_empty_file(tmp_path):
    path = tmp_path / "outline.geojson"
    path.write_text("")
    with pytest.raises(InputFileError) as err:
        read_outline(path, survey_crs=UTM33)
    assert str(path) in str(err.value) and "cannot be read as a vector file" in str(err.value)


def test_feature_without_geometry(tmp_path):
    path = tmp_path / "outline.geojson"
    path.write_text(json.dumps({"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {}, "geometry": {"type": "Polygon", "coordinates": [rect(0, 0, 5, 5)]}},
        {"type": "Feature", "properties": {}, "geometry": None}]}))
    with pytest.raises(InputFileError) as err:
        read_outline(path, survey_crs=None)
    assert str(path) in str(err.value) and "feature 1 has no geometry" in str(err.value)


def test_bowtie_repaired_with_a_note(invalid, caplog):
    path = invalid("outline_bowtie.geojson")
    with caplog.at_level(logging.WARNING, logger="wetmap.vectors"):
        outline, notes = read_outline(path, survey_crs=None)
    assert outline.is_valid
    # the bow-tie (0,0)-(10,10)-(10,0)-(0,10) is two triangles meeting at (5, 5), 25 m2 each
    assert outline.area == pytest.approx(50.0)
    assert outline.contains(Point(1, 5)) and outline.contains(Point(9, 5)) and not outline.contains(Point(5, 1))
    assert len(notes) == 1
    assert "outline_bowtie.geojson" in notes[0] and "feature 0" in notes[0]
    assert "Self-intersection" in notes[0] and "repaired" in notes[0]
    assert notes[0] in caplog.text


def test_zero_area_outline_rejected(tmp_path):
    path = geojson(tmp_path / "outline.geojson", [[[0, 0], [10, 0], [20, 0], [0, 0]]])
    with pytest.raises(InputFileError) as err:
        read_outline(path, survey_crs=None)
    assert str(path) in str(err.value) and "no area" in str(err.value)


# --------------------------------------------------------------------------------------
# Sections
# --------------------------------------------------------------------------------------


def test_sections_read_with_their_construction(tmp_path):
    path = geojson(tmp_path / "sections.geojson", [rect(0, 0, 10, 10), rect(10, 0, 10, 10)],
                   properties=[{"name": "A", "assembly": "BUR on perlite", "insulation": "perlite"},
                               {"name": "B", "assembly": None}])
    sections, notes = read_sections(path, survey_crs=None)
    assert sections == [
        Section(name="A", geometry=sections[0].geometry, assembly="BUR on perlite", insulation="perlite"),
        Section(name="B", geometry=sections[1].geometry, assembly=None, insulation=None),
    ]
    assert sections[1].geometry.equals(box(10, 0, 20, 10)) and notes == ()


def test_bundled_sample_sections():
    sections, _ = read_sections(REPO / "sample_surveys/warehouse_roof/plan/sections.geojson", survey_crs=UTM33)
    assert [s.name for s in sections] == ["A", "B"]


def test_sections_without_name_column(invalid):
    path = invalid("sections_no_name.geojson")
    with pytest.raises(InputFileError) as err:
        read_sections(path, survey_crs=None)
    assert str(path) in str(err.value) and "no 'name' column" in str(err.value)


def test_section_with_a_missing_name(invalid):
    """One feature of two has no ``name`` property: the data frame gives NaN or None there, never a name."""
    path = invalid("sections_blank_name.geojson")
    with pytest.raises(InputFileError) as err:
        read_sections(path, survey_crs=None)
    assert str(path) in str(err.value) and "feature 1 has no name" in str(err.value)


def test_duplicate_section_names(invalid):
    path = invalid("sections_duplicate.geojson")
    with pytest.raises(InputFileError) as err:
        read_sections(path, survey_crs=None)
    message = str(err.value)
    assert str(path) in message and "section names repeat (A)" in message and "unique" in message
