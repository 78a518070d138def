"""Tests of wetmap.export.cad: repair.dxf read back with ezdxf (a general-purpose DXF
library) and compared with the GeoPackage written in the same run.

The end-to-end checks run the bundled sample (sample_surveys/warehouse_roof: invented
data) into ``tmp_path``.
"""

from __future__ import annotations

import shutil
import sys
from collections import defaultdict
from pathlib import Path

import ezdxf
import numpy as np
import pyogrio
import pytest
import shapely
from shapely.geometry import LinearRing, Polygon, box

from wetmap.export.cad import LAYERS, STATUS_LAYER, polygon_rings
from wetmap.pipeline import run_survey

SAMPLE = Path(__file__).resolve().parents[1] / "sample_surveys" / "warehouse_roof"


@pytest.fixture(scope="module")
def sample(tmp_path_factory):
    """The sample run into a temporary folder, with ft2 and squares asked for."""
    folder = tmp_path_factory.mktemp("cad") / "survey"
    folder.mkdir()
    for name in ("plan", "thermal"):
        shutil.copytree(SAMPLE / name, folder / name)
    shutil.copy(SAMPLE / "cores.csv", folder / "cores.csv")
    text = (SAMPLE / "survey.toml").read_text(encoding="utf-8")
    (folder / "survey.toml").write_text(text.replace("[repair]\n", '[repair]\narea_units = ["ft2", "squares"]\n'),
                                        encoding="utf-8")
    result = run_survey(folder, out=folder / "results")
    return result, folder / "results", ezdxf.readfile(folder / "results" / "repair.dxf")


def ring_areas(doc, layer: str) -> list[float]:
    """Signed area of each closed LWPOLYLINE on ``layer`` (anticlockwise positive), by shapely."""
    out = []
    for e in doc.modelspace().query(f'LWPOLYLINE[layer=="{layer}"]'):
        assert e.closed, f"open polyline on {layer}"
        xy = np.asarray(e.get_points("xy"))
        ring = LinearRing(xy)
        out.append(Polygon(xy).area * (1 if ring.is_ccw else -1))
    return out


def test_rings_oriented_for_cad():
    """Exterior anticlockwise, hole clockwise: the signed areas add up to the polygon's."""
    poly = box(0, 0, 10, 6).difference(box(2, 2, 4, 4)).difference(box(6, 1, 8, 3))
    rings = polygon_rings(shapely.orient_polygons(poly, exterior_cw=True))  # orientation of the input ignored
    assert [hole for _, hole in rings] == [False, True, True]
    signed = [Polygon(xy).area * (1 if LinearRing(xy).is_ccw else -1) for xy, _ in rings]
    assert signed[0] > 0 and all(a < 0 for a in signed[1:])
    assert sum(signed) == pytest.approx(poly.area)  # 60 - 4 - 4 = 52, by hand
    assert sum(signed) == pytest.approx(52.0)
    assert polygon_rings(Polygon()) == []


def test_dxf_passes_the_audit(sample):
    _, _, doc = sample
    auditor = doc.audit()
    assert not auditor.has_errors, [e.message for e in auditor.errors]
    assert doc.dxfversion == "AC1024"  # R2010
    assert doc.header["$INSUNITS"] == 6  # metres
    names = {layer.dxf.name for layer in doc.layers}
    assert set(LAYERS) <= names
    assert set(STATUS_LAYER.values()) <= set(LAYERS)


def test_repair_polylines_equal_the_gpkg(sample):
    """The closed polylines on REPAIR (holes clockwise) have the GeoPackage's areas."""
    result, out, doc = sample
    gpkg = pyogrio.read_dataframe(out / "repair.gpkg", layer="repair")
    areas = ring_areas(doc, "REPAIR")
    assert len(areas) >= len(gpkg)
    assert sum(areas) == pytest.approx(float(shapely.area(gpkg.geometry.values).sum()), abs=1e-6)
    # part by part: rebuild polygons from the rings and compare with the GeoPackage's
    rings = [np.asarray(e.get_points("xy")) for e in doc.modelspace().query('LWPOLYLINE[layer=="REPAIR"]')]
    polys = shapely.polygons(
        [LinearRing(r) for r in rings if LinearRing(r).is_ccw]
    )
    holes = [Polygon(r) for r in rings if not LinearRing(r).is_ccw]
    rebuilt = shapely.union_all(polys).difference(shapely.union_all(holes)) if holes else shapely.union_all(polys)
    assert rebuilt.symmetric_difference(shapely.union_all(gpkg.geometry.values)).area < 1e-6
    assert len(doc.modelspace().query('HATCH[layer=="REPAIR-HATCH"]')) == len(gpkg)


def test_boards_and_anomalies_equal_the_gpkg(sample):
    result, out, doc = sample
    boards = pyogrio.read_dataframe(out / "repair.gpkg", layer="boards")
    board_areas = ring_areas(doc, "BOARDS")
    assert len(board_areas) == len(boards) == result.takeoff.count
    assert board_areas == pytest.approx(list(shapely.area(boards.geometry.values)), abs=1e-6)
    assert board_areas == pytest.approx([1.2 * 2.4] * len(boards), abs=1e-6)  # the sample's board_m
    anomalies = pyogrio.read_dataframe(out / "repair.gpkg", layer="anomalies")
    by_status: dict[str, float] = defaultdict(float)
    for status, geom in zip(anomalies["status"], anomalies.geometry.values):
        by_status[status] += geom.area
    for status, layer in STATUS_LAYER.items():
        assert sum(ring_areas(doc, layer)) == pytest.approx(by_status.get(status, 0.0), abs=1e-6), status
    assert sum(ring_areas(doc, "OUTLINE")) == pytest.approx(result.outline.area, abs=1e-6)
    assert sum(ring_areas(doc, "EXCLUSIONS")) == pytest.approx(result.exclusions.area, abs=1e-6)


def test_cores_and_labels(sample):
    result, _, doc = sample
    msp = doc.modelspace()
    assert len(msp.query('CIRCLE[layer=="CORES"]')) == len(result.confirmations)
    core_texts = [t.dxf.text for t in msp.query('TEXT[layer=="CORES"]')]
    assert sorted(core_texts) == sorted(f"{i} {'wet' if w else 'dry'}"
                                        for i, w in zip(result.confirmations.ids, result.confirmations.wet))
    labels = [t.dxf.text for t in msp.query('TEXT[layer=="LABELS"]')]
    for a in result.anomalies:
        assert any(text.startswith(f"A{a.id} {a.status} {a.area_m2:.2f} m2") for text in labels)
    parts = list(shapely.get_parts(result.quantities.repair))
    for k, part in enumerate(parts, start=1):
        ft2 = part.area / 0.09290304  # 1 ft = 0.3048 m exactly (NIST SP 811)
        assert f"R{k} repair {part.area:.2f} m2 / {ft2:.1f} ft2" in " | ".join(labels)
    assert any("verify by coring" in text for text in labels)
    # every label lies inside the drawing's extents set by the writer
    lo, hi = doc.header["$EXTMIN"], doc.header["$EXTMAX"]
    x0, y0, x1, y1 = result.outline.bounds
    assert lo[0] <= x0 and lo[1] < y0 and hi[0] >= x1 and hi[1] >= y1


def _entities(doc) -> list[tuple]:
    """Every model-space entity as comparable values: type, layer and its points or text."""
    out = []
    for e in doc.modelspace():
        kind = e.dxftype()
        if kind == "LWPOLYLINE":
            data = tuple(map(tuple, e.get_points("xy")))
        elif kind == "HATCH":
            data = tuple(tuple(map(tuple, p.vertices)) for p in e.paths)
        elif kind == "TEXT":
            data = (e.dxf.text, tuple(e.dxf.insert))
        elif kind == "CIRCLE":
            data = (tuple(e.dxf.center), e.dxf.radius)
        else:
            data = tuple(e.dxf.location)
        out.append((kind, e.dxf.layer, data))
    return out


def test_dxf_written_beside_equals_the_direct_writer(sample, tmp_path):
    """`wetmap run` writes repair.dxf in a forked process: the same drawing as write_dxf here."""
    from wetmap.export import cad

    result, _, doc = sample
    cad.write_dxf(result, tmp_path / "direct.dxf")
    direct = ezdxf.readfile(tmp_path / "direct.dxf")
    assert _entities(doc) == _entities(direct)
    assert len(_entities(doc)) > 10


def test_dxf_beside_raises_the_writers_error(sample, tmp_path, monkeypatch):
    """A failure in the writing process comes back as the writer's own error, or one naming the file."""
    from wetmap.errors import ProcessingError
    from wetmap.export import cad

    result, _, _ = sample

    def fails(result, path):
        raise ProcessingError(f"{path.name}: an audit error for the test")

    monkeypatch.setattr(cad, "write_dxf", fails)
    with pytest.raises(ProcessingError, match="an audit error for the test"):
        cad.write_dxf_beside(result, tmp_path / "a.dxf")()

    if sys.platform.startswith("linux"):  # a process that dies without a word
        import os

        monkeypatch.setattr(cad, "write_dxf", lambda result, path: os._exit(3))
        with pytest.raises(ProcessingError, match="b.dxf: the process writing it ended with code 3"):
            cad.write_dxf_beside(result, tmp_path / "b.dxf")()
