"""A hull survey's deliverable speaks hull: words, soundings, the repair bill, plan coordinates.

The hull sample (``sample_surveys/yacht_hull``, an invented yacht) is copied and run; its
report, map, quantities and summary are read back. Trade facts are named beside their
checks ("common practice" where no published source gives them).
"""

from __future__ import annotations

import csv
import html
import json
import re
import shutil
from decimal import ROUND_HALF_UP, Decimal
from pathlib import Path

import numpy as np
import pytest
import shapely
from shapely.geometry import box, shape

from wetmap.verdicts import assign_status
from wetmap.confirmations import read_confirmations
from wetmap.errors import InputFileError, SurveyError
from wetmap.pipeline import run_survey
from wetmap.quantities import QUAD_SEGS
from wetmap.wording import wording_for

ROOT = Path(__file__).resolve().parents[1]
HULL = ROOT / "sample_surveys" / "yacht_hull"
ROOF = ROOT / "sample_surveys" / "warehouse_roof"
INVALID = Path(__file__).resolve().parent / "data" / "invalid"

#: Roofing words a marine surveyor's deliverable must not use (whole words, any case). The
#: trade's roof vocabulary: membrane, insulation boards, tear-off, roofing squares (100 ft2),
#: parapets, plies, flood coats, skylights (common practice).
ROOF_WORDS = ("roof", "roofs", "roofing", "rooftop", "membrane", "membranes", "board", "boards", "tear-off",
              "tearoff", "torn-off", "insulation", "square", "squares", "parapet", "parapets", "plies",
              "flood coat", "skylight", "skylights", "asbestos")
_ROOF_RE = re.compile(r"\b(" + "|".join(re.escape(w) for w in ROOF_WORDS) + r")\b", re.IGNORECASE)
_DATA_URI = re.compile(r"data:[a-z]+/[a-z+.-]+;base64,[A-Za-z0-9+/=]+")


def _roof_words(text: str) -> list[str]:
    """Roofing words in ``text`` (embedded images left out: base64 is not words)."""
    text = html.unescape(_DATA_URI.sub("", text))
    return sorted({m.group(0).lower() for m in _ROOF_RE.finditer(text)})


def _copy(src: Path, dst: Path) -> Path:
    shutil.copytree(src, dst, ignore=shutil.ignore_patterns("results"))
    return dst


@pytest.fixture(scope="module")
def hull_run(tmp_path_factory):
    """The hull sample copied and run through the library: ``(folder, result)``."""
    folder = _copy(HULL, tmp_path_factory.mktemp("hullreport") / "yacht_hull")
    return folder, run_survey(folder)


def _outputs(folder: Path) -> dict[str, str]:
    res = folder / "results"
    return {name: (res / name).read_text(encoding="utf-8")
            for name in ("report.html", "map.html", "quantities.csv", "summary.json")}


# --------------------------------------------------------------------------------------
# Words
# --------------------------------------------------------------------------------------


def test_hull_outputs_have_no_roofing_words(hull_run):
    folder, _ = hull_run
    out = _outputs(folder)
    summary = json.loads(out["summary.json"])
    assert _roof_words(out["report.html"]) == []
    assert _roof_words(out["map.html"]) == []
    assert _roof_words(out["quantities.csv"]) == []
    assert _roof_words("\n".join(summary["warnings"])) == []
    assert _roof_words(json.dumps(summary["bill"])) == []
    # repair.dxf: its layers' names and descriptions and every text drawn (read back with ezdxf)
    import ezdxf

    doc = ezdxf.readfile(folder / "results" / "repair.dxf")
    layers = {layer.dxf.name: layer.description for layer in doc.layers}
    texts = [e.dxf.text for e in doc.modelspace().query("TEXT MTEXT") if e.dxftype() == "TEXT"]
    texts += [e.text for e in doc.modelspace().query("MTEXT")]
    assert "OUTLINE" in layers and "port hull side" in layers["OUTLINE"] and texts
    assert _roof_words(" | ".join(f"{k}: {v}" for k, v in layers.items())) == []
    assert _roof_words(" | ".join(texts)) == []


def test_hull_outputs_speak_hull(hull_run):
    folder, _ = hull_run
    out = _outputs(folder)
    report = html.unescape(_DATA_URI.sub("", out["report.html"])).lower()
    for word in ("port hull side", "laminate", "core", "readings", "soundings", "remove skin and core",
                 "re-core", "re-laminate", "fair and finish", "scarf edge"):
        assert word in report, word
    page = html.unescape(out["map.html"])
    assert "port hull side" in page and "Readings and soundings" in page and "Port hull side outline" in page
    header = next(csv.reader(out["quantities.csv"].splitlines()))
    assert "side_area_m2" in header and "roof_area_m2" not in header and "boards" not in header


def test_roof_sample_still_speaks_roof(tmp_path):
    folder = _copy(ROOF, tmp_path / "warehouse_roof")
    run_survey(folder, map_html=True, report_html=True)
    out = _outputs(folder)
    words = set(_roof_words(out["report.html"]))
    assert {"roof", "membrane", "insulation", "tear-off", "boards"} <= words
    assert "Roof area surveyed (outline less exclusions)" in out["report.html"]
    assert "Back to the roof range" in out["map.html"] and "Roof outline" in out["map.html"]
    header = next(csv.reader(out["quantities.csv"].splitlines()))
    assert {"roof_area_m2", "boards", "tearoff_area_m2"} <= set(header)
    items = [line["item"] for line in json.loads(out["summary.json"])["bill"]["lines"]]
    assert items[0] == "tear-off" and "replace" in items
    import ezdxf

    doc = ezdxf.readfile(folder / "results" / "repair.dxf")
    descriptions = " | ".join(layer.description for layer in doc.layers)
    assert {"roof", "insulation", "boards"} <= set(_roof_words(descriptions))


def test_vocabulary_is_one_table_per_kind():
    roof, hull = wording_for("roof"), wording_for("hull", side="starboard")
    assert (roof.area, roof.surface, roof.wet_material, roof.confirmations) == ("roof", "membrane", "insulation",
                                                                                "cores")
    assert (hull.area, hull.surface, hull.wet_material, hull.confirmations) == ("starboard hull side", "laminate",
                                                                                "core", "readings")
    assert roof.whole_boards and not hull.whole_boards
    for field in ("false_warm", "who_decides", "invasive", "next_sample", "other_causes", "sample_both"):
        assert _roof_words(getattr(hull, field)) == [], field
    assert all(_roof_words(head + " " + text) == [] for head, text in hull.safety)


# --------------------------------------------------------------------------------------
# Percussion soundings
# --------------------------------------------------------------------------------------


def test_sound_column_parsed_case_insensitive(tmp_path):
    path = tmp_path / "cores.csv"
    path.write_text("id,x,y,reading,sound\nR1,1,1,12,\nS1,2,2,,Dull\nS2,3,3,,SOLID\nRS,4,4,50,solid\n",
                    encoding="utf-8")
    c = read_confirmations(path, wet_above=30)
    assert c.basis == ("reading", "sound", "sound", "reading")  # a reading on the same row decides
    assert c.wet.tolist() == [False, True, False, True]
    assert c.decisive.tolist() == [True, True, False, True]


def test_bad_sound_refused_with_one_line():
    path = INVALID / "cores_bad_sound.csv"
    with pytest.raises(InputFileError) as err:
        read_confirmations(path, wet_above=30)
    msg = str(err.value)
    assert "cores_bad_sound.csv" in msg and "row 3, column 'sound' = 'hollow': expected dull or solid" in msg
    assert "\n" not in msg


def test_sound_status_rule(tmp_path):
    """Dull says wet like a wet reading; solid alone never refutes (a bonded skin over wet core
    sounds solid: common practice), but a dry reading does."""
    path = tmp_path / "cores.csv"
    path.write_text("id,x,y,reading,sound\n"
                    "D1,1,1,,dull\n"           # anomaly 1: dull only -> wet
                    "S1,5,1,,solid\n"          # anomaly 2: solid only -> unverified
                    "S2,9,1,,solid\nR2,9.5,1,10,\n"   # anomaly 3: solid + dry reading -> dry
                    "D2,13,1,,dull\nR3,13.5,1,10,\n",  # anomaly 4: dull + dry reading -> wet
                    encoding="utf-8")
    c = read_confirmations(path, wet_above=30)
    boxes = [box(0, 0, 2, 2), box(4, 0, 6, 2), box(8, 0, 10, 2), box(12, 0, 14, 2)]
    v = assign_status(boxes, c)
    assert v.status == ("wet", "unverified", "dry", "wet")
    assert v.confirmation_ids == (("D1",), (), ("R2",), ("D2", "R3"))
    assert v.anomaly_of.tolist() == [0, 1, 2, 2, 3, 3]  # the solid sounding is still located


def _with_soundings(folder: Path, rows: list[str]) -> None:
    path = folder / "cores.csv"
    lines = path.read_text(encoding="utf-8").splitlines()
    out = [lines[0] + ",sound"] + [line + "," for line in lines[1:]] + rows
    path.write_text("\n".join(out) + "\n", encoding="utf-8")


@pytest.mark.parametrize("note, status", [("dull", "wet"), ("solid", "unverified")])
def test_soundings_judged_and_shown(tmp_path, note, status):
    """A sounding in the chainplate patch (no reading there, invented): dull makes it wet,
    solid leaves it unverified; both are warned, mapped and listed in the report."""
    folder = _copy(HULL, tmp_path / "yacht_hull")
    _with_soundings(folder, [f"S1,4.800,1.650,,by the chainplate (invented),{note}"])
    result = run_survey(folder)
    (a,) = [a for a in result.anomalies if a.geometry.contains(shapely.Point(4.8, 1.65))]
    assert a.status == status
    assert a.confirmations == (("S1",) if note == "dull" else ())
    warned = [w for w in result.warnings if f"anomaly {a.id} " in w and "sounding" in w]
    assert len(warned) == 1
    out = _outputs(folder)
    assert f"sounding: {note}" in out["report.html"]
    assert f"percussion sounding: {note}" in html.unescape(out["map.html"])
    assert _roof_words(out["report.html"]) == [] and _roof_words("\n".join(result.warnings)) == []


# --------------------------------------------------------------------------------------
# The hull repair bill
# --------------------------------------------------------------------------------------


def _features(path: Path) -> list[dict]:
    return json.loads(path.read_text(encoding="utf-8"))["features"]


def test_hull_bill_equals_buffered_anomalies(hull_run):
    """Area lines = the counted anomalies grown by the margin, merged and clipped to the hull
    side; the edge line = that outline's perimeter (shapely as the reference)."""
    folder, result = hull_run
    margin = result.survey.repair.margin_m
    counted = [shape(f["geometry"]) for f in _features(folder / "results" / "anomalies.geojson")
               if f["properties"]["status"] in ("wet", "unverified")]
    outline = shapely.union_all([shape(f["geometry"]) for f in _features(folder / "plan" / "outline.geojson")])
    excl = shapely.union_all([shape(f["geometry"]) for f in _features(folder / "plan" / "exclusions.geojson")])
    ref = shapely.union_all([g.buffer(margin, quad_segs=QUAD_SEGS) for g in counted]).intersection(outline).difference(excl)
    summary = json.loads((folder / "results" / "summary.json").read_text(encoding="utf-8"))
    lines = {ln["item"]: ln for ln in summary["bill"]["lines"]}
    assert list(lines) == ["remove skin and core", "scarf edge", "re-core", "re-laminate", "fair and finish"]
    for item in ("remove skin and core", "re-core", "re-laminate", "fair and finish"):
        assert lines[item]["unit"] == "m2"
        assert lines[item]["quantity"] == pytest.approx(ref.area, abs=0.006)
    assert lines["scarf edge"]["unit"] == "m"
    assert lines["scarf edge"]["quantity"] == pytest.approx(ref.length, abs=0.006)
    assert summary["repair_area_m2"] == pytest.approx(ref.area, rel=1e-4)
    assert summary["boards"] == 0 and summary["tearoff_area_m2"] == 0
    rows = [r for r in csv.DictReader((folder / "results" / "bill.csv").open(encoding="utf-8"))
            if r["bill_item"] != "bill total"]
    assert [r["bill_item"] for r in rows] == list(lines)
    assert float(rows[0]["repair_area_m2"]) == pytest.approx(ref.area, abs=0.006)


def test_hull_bill_priced(tmp_path):
    folder = _copy(HULL, tmp_path / "yacht_hull")
    toml = folder / "survey.toml"
    toml.write_text(toml.read_text(encoding="utf-8") + '\n[prices]\ncurrency = "EUR"\nremove_per_m2 = 80.0\n'
                    "recore_per_m2 = 120.0\nrelaminate_per_m2 = 150.0\nfair_per_m2 = 60.0\nscarf_per_m = 12.5\n"
                    "mobilisation = 200.0\n", encoding="utf-8")
    result = run_survey(folder)
    bill = result.quantities.bill
    by = {ln.item: ln for ln in bill.lines}

    def money(quantity: float, rate: float) -> float:  # quantity to 0.01, amount rounded half up (common practice)
        q = Decimal(str(quantity)).quantize(Decimal("0.01"), rounding=ROUND_HALF_UP)
        return float((q * Decimal(str(rate))).quantize(Decimal("0.01"), rounding=ROUND_HALF_UP))

    for item, rate in (("remove skin and core", 80.0), ("re-core", 120.0), ("re-laminate", 150.0),
                       ("fair and finish", 60.0)):
        assert by[item].amount == money(result.repair.area, rate)
    assert by["scarf edge"].amount == money(result.repair.length, 12.5)
    assert bill.total == pytest.approx(sum(ln.amount for ln in bill.lines))
    assert by["mobilisation"].amount == 200.0


@pytest.mark.parametrize("kind, key", [("hull", "tearoff_per_m2"), ("hull", "board_each"),
                                       ("roof", "recore_per_m2"), ("roof", "scarf_per_m")])
def test_other_kinds_rates_refused(tmp_path, kind, key):
    folder = _copy(HULL, tmp_path / "yacht_hull")
    toml = folder / "survey.toml"
    text = toml.read_text(encoding="utf-8")
    if kind == "roof":
        text = text.replace('kind = "hull"', 'kind = "roof"').replace('side = "port"\n', "")
    toml.write_text(text + f'\n[prices]\ncurrency = "EUR"\n{key} = 10.0\n', encoding="utf-8")
    from wetmap.survey import load_survey

    with pytest.raises(SurveyError) as err:
        load_survey(folder)
    assert f"[prices] {key}" in str(err.value) and "bill" in str(err.value)


def test_hull_board_size_is_noted_not_used(tmp_path):
    folder = _copy(HULL, tmp_path / "yacht_hull")
    toml = folder / "survey.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace("margin_m = 0.1", "margin_m = 0.1\nboard_m = [0.6, 1.2]"),
                    encoding="utf-8")
    result = run_survey(folder)
    assert result.takeoff.count == 0
    assert any("board_m" in w and "not used on a hull side" in w for w in result.warnings)


# --------------------------------------------------------------------------------------
# GeoJSON and GeoPackage in plan coordinates
# --------------------------------------------------------------------------------------


def test_hull_geojson_is_plan_metres(hull_run):
    """RFC 7946 section 4: GeoJSON coordinates are WGS84 longitude/latitude unless otherwise
    agreed. A hull's plan is the developed skin, so the file says so (a top-level foreign
    member, RFC 7946 section 6.1) and holds the anomaly polygons' own plan coordinates."""
    folder, result = hull_run
    data = json.loads((folder / "results" / "anomalies.geojson").read_text(encoding="utf-8"))
    assert "station" in data["crs_note"] and "girth" in data["crs_note"] and "not longitude/latitude" in data["crs_note"]
    assert len(data["features"]) == len(result.anomalies)
    for f, a in zip(data["features"], result.anomalies):
        got = np.asarray(shape(f["geometry"]).exterior.coords)
        want = np.asarray(shapely.get_exterior_ring(a.geometry).coords)
        assert got.shape == want.shape
        np.testing.assert_allclose(got, want, atol=1e-8)  # written with 9 decimals
    import pyogrio

    for name in ("anomalies.gpkg", "repair.gpkg"):
        assert pyogrio.read_info(folder / "results" / name, layer="anomalies")["crs"] is None


def test_roof_geojson_still_lon_lat(tmp_path):
    """A georeferenced roof keeps RFC 7946 longitude/latitude and no crs_note."""
    folder = _copy(ROOF, tmp_path / "warehouse_roof")
    result = run_survey(folder, map_html=False, report_html=False)
    data = json.loads((folder / "results" / "anomalies.geojson").read_text(encoding="utf-8"))
    assert "crs_note" not in data
    lon, lat = np.asarray(shape(data["features"][0]["geometry"]).exterior.coords).mean(axis=0)
    from pyproj import Transformer  # the reference for the projection (PyPI pyproj)

    c = result.anomalies[0].geometry.exterior.coords
    x, y = np.asarray(c).mean(axis=0)
    want = Transformer.from_crs(result.survey.survey.crs, "EPSG:4326", always_xy=True).transform(x, y)
    assert (lon, lat) == pytest.approx(want, abs=1e-6)
