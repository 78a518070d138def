"""Change between surveys: areas checked against shapely's exact polygon arithmetic."""

from __future__ import annotations

import json

import pytest
import rasterio
import shapely
from click.testing import CliRunner
from shapely.geometry import box

from wetmap.compare import compare_areas, compare_results
from wetmap.demo import write_roof_survey
from wetmap.errors import WetmapError
from wetmap.pipeline import run_survey
from wetmap_cli.main import main


def test_kinds_by_hand():
    old = [box(0, 0, 4, 4), box(10, 0, 12, 2), box(20, 0, 24, 4)]
    new = [box(0, 0, 5, 4), box(30, 0, 31, 1), box(20, 0, 24, 3)]
    c = compare_areas(old, new)
    t = c.totals()
    assert t == {"new": 1.0, "grown": 4.0, "shrunk": 4.0, "gone": 4.0}
    assert c.summary()["growth_m2"] == pytest.approx((20 + 1 + 12) - (16 + 4 + 16))


def test_a_survey_compared_with_itself_shows_no_change(tmp_path):
    folder = tmp_path / "a"
    write_roof_survey(folder)
    run_survey(folder)
    c = compare_results(folder, folder)
    assert c.changes == ()
    assert c.summary()["growth_m2"] == 0.0


def test_grown_area_is_found_within_a_pixel_per_metre_of_boundary(tmp_path):
    """Year 2: the 8 x 5 m wet area of the scenario grows 1 m to the east (an extra
    1 x 5 m at the same excess). Growth found = 5 m2 within pixel_m x (boundary length)."""
    old, new = tmp_path / "y1", tmp_path / "y2"
    truth = write_roof_survey(old)
    write_roof_survey(new)
    rect = truth.wet[0]  # axis-aligned 8 x 5 m (scenario)
    x0, y0, x1, y1 = rect.bounds
    path = new / "thermal" / "roof_pass1.tif"
    with rasterio.open(path, "r+") as dst:
        data = dst.read(1)
        win = rasterio.windows.from_bounds(x1, y0, x1 + 1.0, y1, transform=dst.transform).round_offsets().round_lengths()
        r0, c0 = int(win.row_off), int(win.col_off)
        data[r0:r0 + int(win.height), c0:c0 + int(win.width)] += 2.5
        dst.write(data, 1)
        pixel_m = dst.transform.a
    run_survey(old)
    run_survey(new)
    c = compare_results(old, new)
    t = c.totals()
    boundary_m = 2 * (1.0 + 5.0)
    assert t["grown"] == pytest.approx(5.0, abs=pixel_m * boundary_m)
    assert t["new"] == 0.0 and t["gone"] == 0.0
    grown = shapely.union_all([ch.geometry for ch in c.changes if ch.kind == "grown"])
    assert grown.intersection(box(x1, y0, x1 + 1.0, y1)).area > 0.9 * 5.0


def test_cli_writes_change_files_and_refuses_another_plan(tmp_path):
    a, b = tmp_path / "a", tmp_path / "b"
    write_roof_survey(a)
    write_roof_survey(b)
    run_survey(a)
    run_survey(b)
    res = CliRunner().invoke(main, ["compare", str(a), str(b)])
    assert res.exit_code == 0, res.output
    summary = json.loads((b / "results" / "change.json").read_text())
    assert summary["growth_m2"] == 0.0
    assert (b / "results" / "change.gpkg").is_file()
    assert (b / "results" / "change_map.html").is_file() and (b / "results" / "change_report.html").is_file()
    assert "change_map.html" in res.output
    # another plan: edit b's summary roof area as if the outline had changed
    s = json.loads((b / "results" / "summary.json").read_text())
    s["roof_area_m2"] *= 1.2
    (b / "results" / "summary.json").write_text(json.dumps(s))
    with pytest.raises(WetmapError, match="same plan"):
        compare_results(a, b)
    res = CliRunner().invoke(main, ["compare", str(a), str(tmp_path / "nothing")])
    assert res.exit_code == 1 and "run `wetmap run`" in res.output


def test_change_map_and_report_written_offline(tmp_path):
    """The worked example of test_kinds_by_hand: new 1, grown 4, shrunk 4, gone 4 m2 (by hand)."""
    import re

    from wetmap.export.change import write_change
    from wetmap.export.webmap import remote_references

    old = [box(0, 0, 4, 4), box(10, 0, 12, 2), box(20, 0, 24, 4)]
    new = [box(0, 0, 5, 4), box(30, 0, 31, 1), box(20, 0, 24, 3)]
    c = compare_areas(old, new)
    write_change(c, tmp_path / "out", old_name="2023", new_name="2024")
    page = (tmp_path / "out" / "change_map.html").read_text(encoding="utf-8")
    assert remote_references(page) == [] and "L.map" in page  # Leaflet inlined, nothing loaded
    for kind in ("new", "grown", "shrunk", "gone"):
        assert f"wetmap-change-{kind}" in page
    report = (tmp_path / "out" / "change_report.html").read_text(encoding="utf-8")
    assert remote_references(report) == []
    cells = dict(re.findall(r"data-key='(\w+)'>([^<]+)<", report))
    assert cells["old_wet_area_m2"] == "36.00 m²" and cells["new_wet_area_m2"] == "33.00 m²"  # 16+4+16, 20+1+12
    assert cells["grown_m2"].startswith("4.00 m²") and cells["gone_m2"].startswith("4.00 m²")
    assert len(re.findall(r"<tr data-kind=", report)) == len(c.changes) == 4
    pdf = tmp_path / "out" / "change_report.pdf"
    if pdf.exists():  # WeasyPrint installed
        pypdf = pytest.importorskip("pypdf")
        text = "\n".join(p.extract_text() for p in pypdf.PdfReader(str(pdf)).pages)
        assert "36.00 m²" in text and "33.00 m²" in text
