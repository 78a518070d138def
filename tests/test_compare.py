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


#: Exact conversion factor (NIST SP 811, appendix B): 1 ft² = 0.09290304 m² (1 ft = 0.3048 m).
M2_PER_FT2 = 0.09290304


def test_change_outputs_follow_the_later_surveys_imperial_units(tmp_path):
    """Year 2 (invented demo roof) is surveyed with ``[report] units = "imperial"`` and its wet
    area grows 1 m east: the change report and map show ft², and every figure converts back to
    the metric one of change.json and of a metric change report (NIST SP 811 factor)."""
    import re

    old, new = tmp_path / "y1", tmp_path / "y2"
    truth = write_roof_survey(old)
    write_roof_survey(new)
    toml = new / "survey.toml"
    assert "[report]" not in toml.read_text(encoding="utf-8")
    toml.write_text(toml.read_text(encoding="utf-8") + '\n[report]\nunits = "imperial"\n', encoding="utf-8")
    x0, y0, x1, y1 = truth.wet[0].bounds
    with rasterio.open(new / "thermal" / "roof_pass1.tif", "r+") as dst:
        data = dst.read(1)
        win = rasterio.windows.from_bounds(x1, y0, x1 + 1.0, y1, transform=dst.transform).round_offsets().round_lengths()
        r0, c0 = int(win.row_off), int(win.col_off)
        data[r0:r0 + int(win.height), c0:c0 + int(win.width)] += 2.5
        dst.write(data, 1)
    run_survey(old)
    run_survey(new)
    assert json.loads((new / "results" / "summary.json").read_text())["method"]["units"] == "imperial"
    assert json.loads((old / "results" / "summary.json").read_text())["method"]["units"] == "metric"
    res = CliRunner().invoke(main, ["compare", str(old), str(new)])
    assert res.exit_code == 0, res.output
    # the same comparison shown metric (the earlier survey as the later one: its units)
    metric_out = tmp_path / "metric"
    res = CliRunner().invoke(main, ["compare", str(new), str(old), "--out", str(metric_out)])
    assert res.exit_code == 0, res.output

    change = json.loads((new / "results" / "change.json").read_text())  # always metric
    report = (new / "results" / "change_report.html").read_text(encoding="utf-8")
    cells = {k: (float(m), v) for k, m, v in re.findall(r"data-key='(\w+)' data-metric='([^']+)'>([^<]+)<", report)}
    assert set(cells) == {"old_wet_area_m2", "new_wet_area_m2", "growth_m2", "new_m2", "grown_m2", "shrunk_m2",
                          "gone_m2"}
    assert change["grown_m2"] > 4.0  # the 1 x 5 m growth (by construction)
    for key, (metric, shown) in cells.items():
        assert metric == pytest.approx(change[key], abs=1e-9), key
        ft2 = float(re.match(r"[-+]?[\d,]+\.\d+", shown).group().replace(",", ""))
        assert " ft²" in shown and "m²" not in shown, shown
        assert ft2 * M2_PER_FT2 == pytest.approx(change[key], abs=0.005 * M2_PER_FT2 + 1e-9), key
    # the parts table: areas in ft², each converting back to its metric value
    assert "<th>Area (ft²)</th>" in report
    parts = re.findall(r"<tr data-kind='(\w+)'><td class='num'>\d+</td><td>\w+</td><td class='num' "
                       r"data-metric='([^']+)'>([\d,.]+)</td>", report)
    assert parts and sum(float(m) for k, m, _ in parts if k == "grown") == pytest.approx(change["grown_m2"], abs=1e-3)
    for _, m, v in parts:
        assert float(v.replace(",", "")) * M2_PER_FT2 == pytest.approx(float(m), abs=0.005 * M2_PER_FT2 + 1e-9)
    # the metric report of the reversed comparison: its "grown" is this one's "shrunk", in m²
    metric_report = (metric_out / "change_report.html").read_text(encoding="utf-8")
    metric_cells = dict(re.findall(r"data-key='(\w+)'>([^<]+)<", metric_report))
    shrunk_m2 = float(re.match(r"[\d,.]+", metric_cells["shrunk_m2"]).group().replace(",", ""))
    grown_ft2 = float(re.match(r"[\d,.]+", cells["grown_m2"][1]).group().replace(",", ""))
    assert metric_cells["shrunk_m2"].split(" in ")[0].endswith(" m²")
    assert grown_ft2 * M2_PER_FT2 == pytest.approx(shrunk_m2, abs=0.005 + 0.005 * M2_PER_FT2)
    page = (new / "results" / "change_map.html").read_text(encoding="utf-8")
    assert "ft²" in page or "ft\\u00b2" in page
    assert not re.search(r"\d (?:m\\u00b2|m²)", page)


def test_units_read_from_the_survey_toml_when_the_summary_does_not_say(tmp_path):
    """Results written before summary.json recorded ``method.units``: the survey folder's
    survey.toml says; with neither, metric."""
    from wetmap.compare import read_units

    folder = tmp_path / "s"
    write_roof_survey(folder)
    toml = folder / "survey.toml"
    toml.write_text(toml.read_text(encoding="utf-8") + '\n[report]\nunits = "imperial"\n', encoding="utf-8")
    run_survey(folder)
    assert read_units(folder) == read_units(folder / "results") == "imperial"
    summary = folder / "results" / "summary.json"
    s = json.loads(summary.read_text())
    del s["method"]["units"]
    summary.write_text(json.dumps(s))
    assert read_units(folder) == read_units(folder / "results") == "imperial"  # from survey.toml
    toml.unlink()
    assert read_units(folder / "results") == "metric"
