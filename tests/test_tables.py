"""End-to-end checks of summary.json, quantities.csv and the vector outputs on the bundled
sample (sample_surveys/warehouse_roof: an invented warehouse, invented data).

The sample is copied or run into ``tmp_path``; nothing is written into the sample folder.
"""

from __future__ import annotations

import csv
import json
import re
import shutil
from decimal import ROUND_HALF_UP, Decimal
from pathlib import Path

import numpy as np
import pyogrio
import pytest
import shapely
from pyproj import Transformer

from wetmap.export.tables import QUANTITY_COLUMNS, quantity_columns
from wetmap.pipeline import RESULT_FILES, run_survey
from wetmap.quantities import M2_PER_FT2, M2_PER_SQUARE, OUTSIDE_SECTIONS

SAMPLE = Path(__file__).resolve().parents[1] / "sample_surveys" / "warehouse_roof"

PRICES = """
[prices]
currency = "EUR"
tearoff_per_m2 = 12.50
replace_per_square = 290.00
board_each = 18.40
cut_edge_per_m = 4.20
mobilisation = 350.00
disposal_per_m3 = 60.00
"""


def copy_sample(dest: Path, *, crs: str | None = None, repair_extra: str = "", extra: str = "") -> Path:
    """The sample's inputs (not its results) copied to ``dest``, survey.toml edited."""
    dest.mkdir(parents=True, exist_ok=True)
    for name in ("plan", "thermal"):
        shutil.copytree(SAMPLE / name, dest / name)
    shutil.copy(SAMPLE / "cores.csv", dest / "cores.csv")
    text = (SAMPLE / "survey.toml").read_text(encoding="utf-8")
    if crs is not None:
        text = text.replace('crs = "EPSG:32633"', f'crs = "{crs}"')
    if repair_extra:
        assert "[repair]\n" in text
        text = text.replace("[repair]\n", "[repair]\n" + repair_extra)
    (dest / "survey.toml").write_text(text + extra, encoding="utf-8")
    return dest


@pytest.fixture
def plain(sample_run):
    """The sample exactly as bundled, run once for the session (conftest.py)."""
    return sample_run


@pytest.fixture(scope="module")
def priced(tmp_path_factory):
    """A copy of the sample with [prices] and every area unit, run; the board grid starts at
    the outline's corner (a given joint: the count is exact, as checked by hand below)."""
    folder = copy_sample(tmp_path_factory.mktemp("priced") / "survey",
                         repair_extra='area_units = ["m2", "ft2", "squares"]\n'
                                      'board_origin = [512300.0, 5463100.0]\n', extra=PRICES)
    return run_survey(folder, out=folder / "results"), folder / "results"


def read_csv(path: Path) -> list[dict[str, str]]:
    with path.open(newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def test_every_result_file_is_written(plain):
    _, out = plain
    assert "repair.dxf" in RESULT_FILES
    for name in RESULT_FILES:
        assert (out / name).is_file(), name


def test_summary_has_the_quantities(plain):
    result, out = plain
    s = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    q = result.quantities
    assert s["repair_area_m2"] == pytest.approx(q.repair.area, abs=1e-4)
    assert s["boards"] == q.takeoff.count > 0
    assert s["tearoff_area_m2"] == pytest.approx(q.takeoff.tearoff_area_m2, abs=1e-4)
    assert s["repair_perimeter_m"] == pytest.approx(q.repair.length, abs=1e-4)
    assert [t["name"] for t in s["sections"]] == ["A", "B"]
    assert s["bill"]["currency"] is None and s["bill"]["total"] is None
    # the sample's wet cores log their wet thickness: a removal-volume line follows the tear-off
    assert [line["item"] for line in s["bill"]["lines"]] == ["tear-off", "removal volume", "replace", "boards",
                                                             "cut edge"]
    assert s["method"]["replace_above_pct"] == 25.0
    assert s["method"]["area_units"] == ["m2"]
    # the sample's roof is axis-aligned: the grid runs along x; with no board_origin given its
    # corner is one of the 7 x 7 offsets across one board from the outline's corner (the one
    # with the median count, wetmap.quantities.board_takeoff_over_origins)
    assert s["method"]["board_angle_deg"] == 0.0
    w, h = result.survey.repair.board_m
    steps = [(v - c) / (size / 7) for v, c, size in zip(s["method"]["board_origin"], result.outline.bounds[:2], (w, h))]
    assert all(abs(k - round(k)) < 1e-3 and 0 <= round(k) < 7 for k in steps)
    assert s["boards_range"][0] <= s["boards"] <= s["boards_range"][1]


def test_sections_add_up_to_the_survey_totals(plain):
    _, out = plain
    s = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    parts = [*s["sections"], s["outside_sections"]]
    for key in ("area_m2", "confirmed_wet_area_m2", "unverified_area_m2", "confirmed_dry_area_m2", "wet_area_m2",
                "repair_area_m2", "tearoff_area_m2", "board_area_m2"):
        total = s["roof_area_m2"] if key == "area_m2" else s[key]
        # each entry is rounded to 1e-4 in the file
        assert sum(p[key] for p in parts) == pytest.approx(total, abs=1e-4 * len(parts)), key
    assert sum(p["boards"] for p in parts) == s["boards"]


def test_quantities_csv_rows_and_columns(plain):
    result, out = plain
    rows = read_csv(out / "quantities.csv")
    assert tuple(rows[0].keys()) == quantity_columns(("m2",))
    assert tuple(rows[0].keys())[: len(QUANTITY_COLUMNS)] == QUANTITY_COLUMNS
    kinds = [r["row"] for r in rows]
    assert kinds.count("anomaly") == len(result.anomalies)
    assert kinds == ["anomaly"] * len(result.anomalies) + ["total"]  # one row kind, then the total
    assert {r["counted_wet"] for r in rows if r["row"] == "anomaly"} <= {"yes", "no"}
    # a plain SUM of area_m2 over the anomaly rows is the total (not three times it)
    assert sum(float(r["area_m2"]) for r in rows[:-1]) == pytest.approx(float(rows[-1]["area_m2"]), abs=2e-3)
    sections = read_csv(out / "sections.csv")
    assert [r["section"] for r in sections] == ["A", "B"]  # nothing outside the sample's sections
    total = next(r for r in rows if r["row"] == "total")
    for key in ("area_m2", "roof_area_m2", "wet_area_m2", "repair_area_m2", "tearoff_area_m2",
                "counted_wet_area_m2"):
        assert sum(float(r[key]) for r in sections) == pytest.approx(float(total[key]), abs=2e-3), key
    assert sum(int(r["boards"]) for r in sections) == int(total["boards"]) == result.takeoff.count
    # anomaly rows hold the anomalies' own figures (mm-level rounding in the file)
    for a, r in zip(result.anomalies, (r for r in rows if r["row"] == "anomaly")):
        assert int(r["id"]) == a.id and r["status"] == a.status
        assert float(r["area_m2"]) == pytest.approx(a.area_m2, abs=5e-4)


def test_priced_bill_arithmetic(priced):
    result, out = priced
    bill = json.loads((out / "summary.json").read_text(encoding="utf-8"))["bill"]
    assert bill["currency"] == "EUR"
    lines = {line["item"]: line for line in bill["lines"]}
    assert list(lines) == ["tear-off", "removal volume", "replace", "boards", "cut edge", "mobilisation"]
    tear = result.quantities.takeoff.tearoff_area_m2
    # quantities rounded to 0.01 first (half up), then amount = quantity x rate, half up
    cent = Decimal("0.01")

    def r2(x) -> float:
        return float(Decimal(repr(float(x))).quantize(cent, rounding=ROUND_HALF_UP))

    assert lines["tear-off"]["unit"] == "m2" and lines["tear-off"]["quantity"] == r2(tear)
    assert lines["replace"]["unit"] == "squares" and lines["replace"]["quantity"] == r2(tear / 9.290304)
    assert lines["tear-off"]["quantity_ft2"] == r2(tear / 0.09290304)
    assert lines["boards"]["quantity"] == result.takeoff.count
    assert lines["cut edge"]["quantity"] == r2(result.quantities.repair.length)
    for line in bill["lines"]:
        assert line["amount"] == r2(Decimal(repr(float(line["quantity"]))) * Decimal(repr(line["rate"])))
    assert bill["total"] == pytest.approx(sum(line["amount"] for line in bill["lines"]), abs=1e-9)
    # the sample's take-off by hand: 64 boards of 1.2 x 2.4 m all inside the roof
    # = 184.32 m2; 184.32 x 12.50 = 2304.00; 64 x 18.40 = 1177.60
    assert lines["tear-off"]["quantity"] == 184.32 and lines["tear-off"]["amount"] == 2304.00
    assert lines["boards"]["amount"] == 1177.60
    # removal volume: 184.32 m2 x 77.5 mm (median of the wet cores' 75 and 80 mm) = 14.2848 -> 14.28 m3;
    # 14.28 x 60.00 = 856.80 (by hand)
    assert lines["removal volume"]["unit"] == "m3" and lines["removal volume"]["quantity"] == 14.28
    assert lines["removal volume"]["amount"] == 856.80


def test_priced_csv_matches_the_summary(priced):
    _, out = priced
    s = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    rows = read_csv(out / "quantities.csv")
    assert tuple(rows[0].keys()) == quantity_columns(("m2", "ft2", "squares"))
    bill_rows = read_csv(out / "bill.csv")
    assert [r["bill_item"] for r in bill_rows] == [line["item"] for line in s["bill"]["lines"]] + ["bill total"]
    for r, line in zip(bill_rows, s["bill"]["lines"]):
        assert float(r["bill_quantity"]) == pytest.approx(line["quantity"])
        assert float(r["amount"]) == pytest.approx(line["amount"]) and r["currency"] == "EUR"
    assert float(bill_rows[-1]["amount"]) == pytest.approx(s["bill"]["total"])
    # ft2 and squares columns: 1 ft = 0.3048 m exactly (NIST SP 811), a square is 100 ft2
    for r in rows + read_csv(out / "sections.csv"):  # anomaly, total and section rows
        m2 = float(r["area_m2"])
        assert float(r["area_ft2"]) == pytest.approx(m2 / M2_PER_FT2, abs=5e-3 / M2_PER_FT2)
        assert float(r["area_squares"]) == pytest.approx(m2 / M2_PER_SQUARE, abs=1e-3)
    total = next(r for r in rows if r["row"] == "total")
    assert float(total["tearoff_area_ft2"]) == pytest.approx(184.32 / 0.09290304, abs=1e-3)


def test_replace_flag_in_the_summary(tmp_path):
    """A threshold under the sample's wet fractions (4.2 %) flags both sections."""
    folder = copy_sample(tmp_path / "survey", repair_extra="replace_above_pct = 4\n")
    result = run_survey(folder, out=tmp_path / "results")
    s = json.loads((tmp_path / "results" / "summary.json").read_text(encoding="utf-8"))
    assert [t["replace_flag"] for t in s["sections"]] == [True, True]
    assert s["replace_flag"] is True
    flagged = [w for w in s["warnings"] if "replace_above_pct" in w]
    assert len(flagged) == 2 and all("local code decides" in w for w in flagged)
    assert result.summary()["warnings"] == s["warnings"]


# --------------------------------------------------------------------------------------
# Vector outputs read back with pyogrio (written by wetmap.export.gis)
# --------------------------------------------------------------------------------------


def test_gpkg_read_back_equals_the_result(plain):
    result, out = plain
    anomalies = pyogrio.read_dataframe(out / "anomalies.gpkg", layer="anomalies")
    assert shapely.equals(anomalies.geometry.values, [a.geometry for a in result.anomalies]).all()
    q = result.quantities
    repair = pyogrio.read_dataframe(out / "repair.gpkg", layer="repair")
    assert shapely.equals(shapely.union_all(repair.geometry.values), q.repair)
    assert repair["area_m2"].sum() == pytest.approx(q.repair.area, abs=1e-3)
    boards = pyogrio.read_dataframe(out / "repair.gpkg", layer="boards")
    assert len(boards) == q.takeoff.count
    assert shapely.equals(boards.geometry.values, list(q.takeoff.boards)).all()
    again = pyogrio.read_dataframe(out / "repair.gpkg", layer="anomalies")
    assert shapely.equals(again.geometry.values, anomalies.geometry.values).all()


def test_geojson_read_back_equals_the_gpkg(plain):
    """RFC 7946 GeoJSON (WGS84) projected back to the plan matches the GeoPackage to 1 mm
    (the file keeps 1e-9 degree, about 0.1 mm; pyproj does the projection)."""
    _, out = plain
    gj = pyogrio.read_dataframe(out / "anomalies.geojson")
    gp = pyogrio.read_dataframe(out / "anomalies.gpkg", layer="anomalies")
    to_plan = Transformer.from_crs("EPSG:4326", gp.crs, always_xy=True)
    back = [shapely.transform(g, lambda xy: np.column_stack(to_plan.transform(xy[:, 0], xy[:, 1])))
            for g in gj.geometry.values]
    assert shapely.equals_exact(back, gp.geometry.values, tolerance=1e-3).all()
    assert list(gj["id"]) == list(gp["id"]) and list(gj["status"]) == list(gp["status"])


def test_local_geojson_and_gpkg_are_equal(tmp_path):
    """A survey in plan metres ("local"): GeoJSON and GeoPackage hold the same polygons."""
    folder = copy_sample(tmp_path / "survey", crs="local")
    result = run_survey(folder, out=tmp_path / "results")
    gj = pyogrio.read_dataframe(tmp_path / "results" / "anomalies.geojson")
    gp = pyogrio.read_dataframe(tmp_path / "results" / "anomalies.gpkg", layer="anomalies")
    assert shapely.equals(gj.geometry.values, gp.geometry.values).all()
    assert shapely.equals(gp.geometry.values, [a.geometry for a in result.anomalies]).all()
    # same quantities whatever the CRS label
    assert result.summary()["boards"] == 67  # median over the board-grid origins (64 from the outline corner)
    s = json.loads((tmp_path / "results" / "summary.json").read_text(encoding="utf-8"))
    assert s["outside_sections"]["name"] == OUTSIDE_SECTIONS


def test_quantities_carry_the_wet_area_range(plain):
    """The range rows of quantities.csv equal summary.json's wet_area_range_m2 and bracket the
    likely (counted) wet area."""
    _, out = plain
    rows = read_csv(out / "wet_area_range.csv")
    summary = json.loads((out / "summary.json").read_text())
    rng = {r["end"]: float(r["wet_area_m2"]) for r in rows}
    low, high = summary["wet_area_range_m2"]
    assert rng["low end"] == pytest.approx(low, abs=0.001)
    assert rng["high end"] == pytest.approx(high, abs=0.001)
    assert low <= summary["wet_area_m2"] <= high


def test_the_part_outside_every_section_has_one_name_in_every_output(tmp_path):
    """Section B dropped from the sample's sections: its part of the roof lies in no section.
    Its sections.csv row, summary.json ``outside_sections`` and ``background`` entries and the
    report all name it with the one constant (quantities and results share it)."""
    from wetmap import results

    assert results.OUTSIDE_SECTIONS is OUTSIDE_SECTIONS
    folder = copy_sample(tmp_path / "survey")
    path = folder / "plan" / "sections.geojson"
    layer = json.loads(path.read_text(encoding="utf-8"))
    layer["features"] = [f for f in layer["features"] if f["properties"]["name"] == "A"]
    path.write_text(json.dumps(layer), encoding="utf-8")
    out = tmp_path / "results"
    run_survey(folder, out=out)
    s = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert s["outside_sections"]["name"] == OUTSIDE_SECTIONS and s["outside_sections"]["area_m2"] > 100.0
    background = s["background"]
    names = [b["section"] for b in background] if isinstance(background, list) else list(background)
    assert OUTSIDE_SECTIONS in names  # the rest of the roof has thermal data: a background group of its own
    rows = list(csv.DictReader((out / "sections.csv").open(encoding="utf-8")))
    assert rows[-1]["section"] == OUTSIDE_SECTIONS
    report = (out / "report.html").read_text(encoding="utf-8")
    assert OUTSIDE_SECTIONS in report
    every = "".join(p.read_text(encoding="utf-8", errors="ignore") for p in out.iterdir()
                    if p.suffix in (".csv", ".json", ".html", ".geojson"))
    assert set(re.findall(r"\(outside[^)]*\)", every)) == {OUTSIDE_SECTIONS}
