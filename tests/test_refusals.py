"""Inputs that cannot give a right answer are refused before work, with one line each.

Each test builds its bad input in ``tmp_path`` (the demo roof from :mod:`wetmap.demo` is only
the valid starting point; what is checked here is the refusal, not detection) or uses a
file of tests/data/invalid/. Every refusal must be a WetmapError whose problems are single
lines; `wetmap check` must refuse what `wetmap run` refuses.
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np
import pytest
import rasterio
import shapely
from affine import Affine
from click.testing import CliRunner

from wetmap.demo import write_roof_survey
from wetmap.errors import InputFileError, WetmapError
from wetmap.pipeline import check_survey, process_survey, run_survey
from wetmap.rasters import inspect_raster, plan_grid_for, read_onto_grid, sample_in_outline
from wetmap.survey import load_survey
from wetmap.windows import preview_factor
from wetmap_cli.main import main

MOSAIC = Path("thermal") / "roof_pass1.tif"


@pytest.fixture
def demo(tmp_path):
    """A complete, valid survey folder (the invented demo roof): its path."""
    folder = tmp_path / "s"
    write_roof_survey(folder)
    return folder


def edit_toml(folder: Path, old: str, new: str) -> None:
    path = folder / "survey.toml"
    text = path.read_text(encoding="utf-8")
    assert old in text, old
    path.write_text(text.replace(old, new, 1), encoding="utf-8")


def problems_of(fn, *args, **kwargs) -> tuple[str, ...]:
    """The problems of the WetmapError ``fn`` raises; each must be one line."""
    with pytest.raises(WetmapError) as err:
        fn(*args, **kwargs)
    problems = err.value.problems
    assert problems
    for p in problems:
        assert "\n" not in p and "\r" not in p, f"a problem must be one line: {p!r}"
    return problems


def rewrite_mosaic(folder: Path, fn) -> None:
    """Apply ``fn`` to the valid pixels of the demo mosaic (nodata kept)."""
    with rasterio.open(folder / MOSAIC, "r+") as dst:
        data = dst.read(1)
        valid = np.isfinite(data) & (data != dst.nodata)
        data[valid] = fn(data[valid])
        dst.write(data, 1)


# --------------------------------------------------------------------------------------
# Paths: never from results/, never outside the survey folder unless allowed
# --------------------------------------------------------------------------------------


def test_input_under_results_is_refused(demo):
    (demo / "results").mkdir()
    (demo / "results" / "pass1.tif").write_bytes((demo / MOSAIC).read_bytes())
    edit_toml(demo, 'path = "thermal/roof_pass1.tif"', 'path = "results/pass1.tif"')
    (problem,) = problems_of(load_survey, demo)
    assert "[[mosaic]] #1 path" in problem and "results folder" in problem and "move the file" in problem


@pytest.mark.parametrize("how", ["dotdot", "absolute", "symlink"])
def test_paths_leaving_the_folder_are_refused_unless_allowed(demo, tmp_path, how):
    outside = tmp_path / "elsewhere.geojson"
    outside.write_bytes((demo / "plan" / "outline.geojson").read_bytes())
    if how == "dotdot":
        value = "../elsewhere.geojson"
    elif how == "absolute":
        value = str(outside)
    else:
        (demo / "plan" / "link.geojson").symlink_to(outside)
        value = "plan/link.geojson"
    edit_toml(demo, 'outline = "plan/outline.geojson"', f"outline = {json.dumps(value)}")
    (problem,) = problems_of(load_survey, demo)
    assert "[plan] outline" in problem and "allow_outside_paths = true" in problem
    assert ("absolute path" if how == "absolute" else "outside the survey folder") in problem
    # the documented option allows it
    edit_toml(demo, 'kind = "roof"', 'kind = "roof"\nallow_outside_paths = true')
    assert load_survey(demo).plan.outline == outside.resolve()


def test_symlink_loop_and_nul_are_one_line_each(demo):
    (demo / "thermal" / "loop.tif").symlink_to(demo / "thermal" / "loop.tif")
    edit_toml(demo, 'path = "thermal/roof_pass1.tif"', 'path = "thermal/loop.tif"')
    edit_toml(demo, 'outline = "plan/outline.geojson"', 'outline = "plan/out\\u0000line.geojson"')
    problems = problems_of(load_survey, demo)
    assert any("[[mosaic]] #1 path" in p and "symbolic link loop" in p for p in problems), problems
    assert any("[plan] outline" in p and "NUL" in p for p in problems), problems


# --------------------------------------------------------------------------------------
# Hostile numbers
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("old, new, key", [
    ("air_c = 6.0", "air_c = " + "9" * 400, "[conditions] air_c"),  # OverflowError before
    ("margin_m = 0.3", "margin_m = 0.3\nboard_origin = [1e300, 5463100.0]", "[repair] board_origin"),  # TypeError
    ("board_m = [1.2, 2.4]", "board_m = [0.15, 7640517.96]", "[repair] board_m"),  # 160 million m2 of boards
    ("board_m = [1.2, 2.4]", "board_m = [0.001, 0.001]", "[repair] board_m"),  # out of memory
    ("board_m = [1.2, 2.4]", "board_m = [1.2, 2.4]\n\n[prices]\ncurrency = \"EUR\"\nboard_each = 1e308",
     "[prices] board_each"),  # decimal.InvalidOperation
    ('units = "C"', 'units = "C"\norigin = [1e300, 0]\npixel_m = 0.05', "[[mosaic]] #1 origin"),
])
def test_hostile_numbers_are_one_line(demo, old, new, key):
    edit_toml(demo, old, new)
    problems = problems_of(load_survey, demo)
    assert any(key in p for p in problems), problems
    assert all(len(p) < 400 for p in problems)  # a 400-digit value is cut, not echoed whole


@pytest.mark.parametrize("old, new, key", [
    ('outline = "plan/outline.geojson"', 'outline = "plan/outline.geojson"\npixel_m = 50', "[plan] pixel_m"),
    ("delta_c = 1.0", "delta_c = 0.0000001", "[detect] delta_c"),  # 308 noise anomalies before
    ("delta_c = 1.0", "delta_c = 1.0\nbackground_m = 0.000001", "[detect] background_m"),
    ("emissivity = 0.94", "emissivity = 0.000001", "[camera] emissivity"),
    ("emissivity = 0.94", "emissivity = 0.94\ntransmittance = 0.0000001", "[camera] transmittance"),
])
def test_implausible_sizes_are_refused(demo, old, new, key):
    edit_toml(demo, old, new)
    (problem,) = problems_of(load_survey, demo)
    assert key in problem and "not a plausible value" in problem


def test_board_take_off_beyond_a_sane_count_is_refused_by_check_and_run(demo):
    # 2283 m2 of roof / (0.05 x 0.05 m) = about 913 000 boards: refused before any work
    edit_toml(demo, "board_m = [1.2, 2.4]", "board_m = [0.05, 0.05]")
    from_check = problems_of(check_survey, demo)
    from_run = problems_of(process_survey, demo)
    assert from_check == from_run
    assert any("[repair] board_m" in p and "boards" in p for p in from_check)


# --------------------------------------------------------------------------------------
# CRS: Web Mercator and other area-distorting projections, area of use
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("crs", ["EPSG:3857", "EPSG:900913", "EPSG:3785", "ESRI:102100", "ESRI:102113"])
def test_web_mercator_and_aliases_are_refused(demo, crs):
    edit_toml(demo, 'crs = "EPSG:32633"', f'crs = "{crs}"')
    (problem,) = problems_of(load_survey, demo)
    assert "[survey] crs" in problem and "Web Mercator" in problem and "1/cos" in problem


def test_mercator_area_scale_is_refused_at_the_site(demo):
    """World Mercator at the site: areas scale by 1/cos^2(latitude) (Snyder, Map Projections: A Working
    Manual, USGS PP 1395, Mercator scale factor k = h = sec(latitude) on the sphere; on the ellipsoid
    within 0.5 % at 49 degrees)."""
    from pyproj import Transformer

    edit_toml(demo, 'crs = "EPSG:32633"', 'crs = "EPSG:3395"')
    problems = problems_of(check_survey, demo)
    (line,) = [p for p in problems if "scales areas by" in p]
    scale = float(line.split("scales areas by ")[1].split(",")[0])
    lon, lat = Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True).transform(512330.0, 5463120.0)
    assert scale == pytest.approx(1.0 / math.cos(math.radians(lat)) ** 2, rel=0.01)


def test_plan_outside_the_crs_area_of_use_is_warned(demo):
    edit_toml(demo, 'crs = "EPSG:32633"', 'crs = "EPSG:32631"')  # UTM 31N: 0..6 E; the site is near 15 E
    edit_toml(demo, '[cores]\npath = "cores.csv"\n', "")  # cores.csv is in UTM 33N: refused as far off
    _, warnings = check_survey(demo)
    assert any("area of use" in w and "EPSG:32631" in w for w in warnings), warnings


def test_plan_inside_its_crs_area_of_use_is_not_warned(demo):
    _, warnings = check_survey(demo)
    assert not any("area of use" in w or "not a place on Earth" in w for w in warnings), warnings


# --------------------------------------------------------------------------------------
# Mosaics: placement, coverage, units
# --------------------------------------------------------------------------------------


def test_origin_and_pixel_size_over_a_raster_transform_are_refused(demo):
    edit_toml(demo, 'units = "C"', 'units = "C"\norigin = [512305.0, 5463140.0]\npixel_m = 0.1')
    problems = problems_of(check_survey, demo)
    assert any("its own geo-transform" in p and "remove origin and pixel_m" in p for p in problems), problems


def test_zero_transform_is_refused(tmp_path, write_tif):
    path = write_tif(tmp_path / "zero.tif", np.full((4, 4), 5.0, np.float32),
                     transform=Affine(0.0, 0.0, 512300.0, 0.0, 0.0, 5463140.0))
    with pytest.raises(InputFileError) as err:
        inspect_raster(path, survey_crs="EPSG:32633")
    assert "degenerate geo-transform" in str(err.value)


@pytest.mark.parametrize("change, toml, expected", [
    (lambda v: v + 273.15, None, ("look like kelvin", 'set units = "K"')),  # Kelvin labelled C
    (None, ('units = "C"', 'units = "K"'), ("look like degrees Celsius", 'set units = "C"')),  # degC labelled K
    (lambda v: np.round((v + 273.15) * 100.0), None, ("raw camera counts", "scale = 0.01")),  # counts, no scale
    (None, ("air_c = 6.0", "air_c = 55.0"), ("from the air temperature 55", "check [conditions] air_c")),  # off the air
])
def test_mosaic_units_are_checked(demo, change, toml, expected):
    if change is not None:
        rewrite_mosaic(demo, change)
    if toml is not None:
        edit_toml(demo, *toml)
    from_check = problems_of(check_survey, demo)
    assert any(all(e in p for e in expected) and "[[mosaic]] #1" in p for p in from_check), from_check
    assert problems_of(process_survey, demo) == from_check


def test_units_refusal_keeps_earlier_results(demo):
    run_survey(demo)
    before = {p.name: p.read_bytes() for p in (demo / "results").iterdir() if p.is_file()}
    rewrite_mosaic(demo, lambda v: v + 273.15)
    problems_of(run_survey, demo)
    assert {p.name: p.read_bytes() for p in (demo / "results").iterdir() if p.is_file()} == before


def test_units_sample_is_small_on_a_large_mosaic(tmp_path, write_tif):
    data = np.full((1000, 800), 7.0, np.float32)
    path = write_tif(tmp_path / "big.tif", data, transform=Affine(0.1, 0, 0.0, 0, -0.1, 100.0),
                     tiled=True, blockxsize=64, blockysize=64)
    info = inspect_raster(path, survey_crs=None)
    outline = shapely.box(0, 0, 80, 100)
    values = sample_in_outline(path, info, outline, plan_crs=None, units="C", max_side=64)
    assert 0 < values.size <= 8 * 8 * 32 * 32 < data.size and np.all(values == 7.0)  # patches, no overview
    with rasterio.open(path, "r+") as dst:
        dst.build_overviews([2, 4, 8, 16])
    values = sample_in_outline(path, info, outline, plan_crs=None, units="C", max_side=64)
    assert 0 < values.size <= 64 * 64 and np.all(values == 7.0)  # decimated: GDAL reads an overview


def test_outline_far_from_the_mosaic_is_refused_not_a_traceback(demo):
    # the outline 100 km east of the mosaic: refused before any window is laid out
    path = demo / "plan" / "outline.geojson"
    doc = json.loads(path.read_text())
    for f in doc["features"]:
        f["geometry"]["coordinates"] = [[[x + 100_000.0, y] for x, y in ring] for ring in f["geometry"]["coordinates"]]
    path.write_text(json.dumps(doc))
    edit_toml(demo, 'exclusions = "plan/exclusions.geojson"\nsections = "plan/sections.geojson"\n', "")
    edit_toml(demo, '[cores]\npath = "cores.csv"\n', "")
    problems = problems_of(process_survey, demo, tile_px=64)
    assert any("misses the outline" in p for p in problems), problems
    assert preview_factor(64, 100) == 64  # a window smaller than the preview cell needs: no StopIteration


# --------------------------------------------------------------------------------------
# Resampling never pulls a warm parapet into the roof's edge
# --------------------------------------------------------------------------------------


def test_resampling_keeps_a_warm_parapet_out_of_the_roof(tmp_path, write_tif):
    """A roof at 10 degC inside a 0.3 m parapet band at 40 degC, on a 0.0999 m raster read onto a 0.1 m grid.

    Scene built here (no wetmap rendering): roof = box(0, 0, 20, 10); the raster extends 0.5 m
    beyond it; pixels whose centres lie in the band 0 < distance <= 0.3 m outside the roof are warm.
    """
    pixel = 0.0999
    x0, y1 = -0.5, 10.5
    cols, rows = int(math.ceil(21.0 / pixel)), int(math.ceil(11.0 / pixel))
    jj, ii = np.meshgrid(np.arange(cols), np.arange(rows))
    xs, ys = x0 + (jj + 0.5) * pixel, y1 - (ii + 0.5) * pixel
    roof = shapely.box(0.0, 0.0, 20.0, 10.0)
    inside = shapely.contains_xy(roof, xs, ys)
    data = np.where(inside, 10.0, 40.0).astype(np.float32)
    path = write_tif(tmp_path / "parapet.tif", data, transform=Affine(pixel, 0, x0, 0, -pixel, y1))
    info = inspect_raster(path, survey_crs=None)
    grid = plan_grid_for([info], roof.bounds, crs=None, pixel_m=0.1)
    from wetmap.windows import roof_mask

    in_roof = roof_mask(roof, grid.transform, grid.shape)
    plain = read_onto_grid(path, grid, info=info, units="C") - 273.15
    clean = read_onto_grid(path, grid, info=info, units="C", inside=roof) - 273.15
    assert np.nanmax(plain[in_roof]) > 11.0  # without the rule the parapet bleeds into the edge row
    assert np.nanmax(clean[in_roof]) == pytest.approx(10.0, abs=1e-4)
    assert np.isfinite(clean[in_roof]).all()
    np.testing.assert_array_equal(clean[~in_roof], plain[~in_roof])  # outside the outline: unchanged


# --------------------------------------------------------------------------------------
# `check` does every pre-work check of `run`; every cores.csv problem at once
# --------------------------------------------------------------------------------------


def test_check_refuses_exclusions_covering_the_outline(demo):
    path = demo / "plan" / "exclusions.geojson"
    doc = json.loads(path.read_text())
    doc["features"][0]["geometry"] = json.loads(shapely.to_geojson(shapely.box(512290, 5463090, 512370, 5463150)))
    path.write_text(json.dumps(doc))
    problems = problems_of(check_survey, demo)
    assert any("exclusions cover the whole outline" in p for p in problems), problems
    assert problems_of(process_survey, demo) == problems


def test_check_refuses_a_grid_too_large(demo):
    edit_toml(demo, 'outline = "plan/outline.geojson"', 'outline = "plan/outline.geojson"\npixel_m = 0.0005')
    problems = problems_of(check_survey, demo)
    assert any("the plan grid would be" in p for p in problems), problems


def test_check_refuses_a_core_far_off_the_roof_and_lists_every_cores_problem(demo):
    path = demo / "cores.csv"
    rows = list(csv.reader(path.read_text().splitlines()))
    rows[1][1] = str(float(rows[1][1]) + 100_000.0)  # 100 km east
    path.write_text("\n".join(",".join(r) for r in rows) + "\n")
    problems = problems_of(check_survey, demo)
    assert any("'C1'" in p and "m from the outline" in p for p in problems), problems
    # three bad rows: all three reported at once
    rows[2][2] = "four"
    rows[3][3] = "moist"
    rows[4][0] = "C1"
    path.write_text("\n".join(",".join(r) for r in rows) + "\n")
    problems = problems_of(check_survey, demo)
    assert any("row 3, column 'y' = 'four'" in p for p in problems), problems
    assert any("row 4, column 'result' = 'moist'" in p for p in problems), problems
    assert any("row 5, column 'id' = 'C1' repeats" in p for p in problems), problems


def test_non_finite_outline_coordinate_is_one_line(tmp_path):
    path = tmp_path / "outline.geojson"
    ring = [[0.0, 0.0], [10.0, 0.0], [float("nan"), 10.0], [0.0, 10.0], [0.0, 0.0]]
    path.write_text(json.dumps({"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {}, "geometry": {"type": "Polygon", "coordinates": [ring]}}]}))
    from wetmap.vectors import read_outline

    (problem,) = problems_of(read_outline, path, survey_crs=None)
    assert str(path) in problem


# --------------------------------------------------------------------------------------
# CSV formula injection
# --------------------------------------------------------------------------------------


def test_spreadsheet_cells_are_neutralised_numbers_kept():
    """OWASP "CSV Injection": cells starting with = + - @ tab or CR are prefixed with a quote."""
    from wetmap.export.tables import spreadsheet_cell

    for bad in ("=HYPERLINK(\"http://x\")", "=cmd|' /C calc'!A0", "@SUM(A1)", "+A1", "-A1", "\tx", "\rx"):
        assert spreadsheet_cell(bad) == "'" + bad
    for keep in ("-1.250", "+3", "12", "1e-3", "-.5", "roof A", "", 3, -2.5, None):
        assert spreadsheet_cell(keep) == keep


def test_quantities_csv_has_no_formula_cells(demo):
    sections = demo / "plan" / "sections.geojson"
    doc = json.loads(sections.read_text())
    names = ["=cmd|' /C calc'!A0", "@SUM(1+1)", "+HYPERLINK(\"http://x\")", "-A1"]
    for f, name in zip(doc["features"], names):
        f["properties"]["name"] = name
    sections.write_text(json.dumps(doc))
    cores = demo / "cores.csv"
    cores.write_text(cores.read_text().replace("\nC1,", "\n=C1,", 1))
    edit_toml(demo, "board_m = [1.2, 2.4]", 'board_m = [1.2, 2.4]\n\n[prices]\ncurrency = "=X"\nboard_each = 18')
    run_survey(demo)
    cells = []
    for name in ("quantities.csv", "sections.csv", "bill.csv"):  # the take-off is split by row kind
        with open(demo / "results" / name, newline="", encoding="utf-8") as fh:
            cells += [c for row in csv.reader(fh) for c in row]
    bad = [c for c in cells if c[:1] in ("=", "+", "@", "\t", "\r")
           or (c.startswith("-") and not _is_number(c))]
    assert not bad, bad
    assert "'=cmd|' /C calc'!A0" in cells and "'=X" in cells
    assert "'=C1" in " ".join(cells)  # the core id inside the confirmations column


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


# --------------------------------------------------------------------------------------
# CLI: non-zero exit, one line per problem, no traceback
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("command", ["check", "run"])
def test_cli_refuses_with_one_line_per_problem(demo, command):
    rewrite_mosaic(demo, lambda v: v + 273.15)  # kelvin labelled C
    edit_toml(demo, "board_m = [1.2, 2.4]", "board_m = [0.05, 0.05]")  # and a take-off beyond a sane count
    result = CliRunner().invoke(main, [command, str(demo)])
    assert result.exit_code != 0
    assert result.exception is None or isinstance(result.exception, SystemExit)
    assert "Traceback" not in result.output
    errors = [line for line in result.output.splitlines() if line.startswith("wetmap: error:")]
    assert len(errors) == 2, result.output
    assert any("look like kelvin" in e for e in errors) and any("boards" in e for e in errors)
    assert not (demo / "results").exists()


def test_parapet_gives_no_false_slivers_in_a_run(tmp_path, write_tif, monkeypatch):
    """End to end: a uniform roof (8 degC, small noise) inside a warm parapet band (20 degC, 0.3 m),
    imaged at 0.0999 m and processed on a 0.1 m grid. Scene built here, not by wetmap."""
    import wetmap.pipeline as pipeline

    folder = tmp_path / "parapet"
    (folder / "plan").mkdir(parents=True)
    (folder / "thermal").mkdir()
    roof = shapely.box(0.0, 0.0, 20.0, 10.0)
    (folder / "plan" / "outline.geojson").write_text(json.dumps({"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {}, "geometry": json.loads(shapely.to_geojson(roof))}]}))
    pixel, x0, y1 = 0.0999, -0.5, 10.5
    cols, rows = int(math.ceil(21.0 / pixel)), int(math.ceil(11.0 / pixel))
    jj, ii = np.meshgrid(np.arange(cols), np.arange(rows))
    xs, ys = x0 + (jj + 0.5) * pixel, y1 - (ii + 0.5) * pixel
    noise = np.random.default_rng(7).normal(0.0, 0.05, xs.shape)
    band = shapely.contains_xy(roof.buffer(0.3, join_style="mitre"), xs, ys) & ~shapely.contains_xy(roof, xs, ys)
    data = np.where(band, 20.0, 8.0 + noise).astype(np.float32)
    write_tif(folder / "thermal" / "pass1.tif", data, transform=Affine(pixel, 0, x0, 0, -pixel, y1))
    (folder / "survey.toml").write_text(
        '[survey]\ntitle = "Parapet"\nkind = "roof"\ncrs = "local"\n\n'
        '[conditions]\nair_c = 6.0\nhumidity_pct = 65\nreflected_c = -20.0\n\n'
        '[camera]\nemissivity = 0.95\n\n[plan]\noutline = "plan/outline.geojson"\npixel_m = 0.1\n\n'
        '[[mosaic]]\npath = "thermal/pass1.tif"\nunits = "C"\n\n[detect]\ndelta_c = 1.0\nbackground_m = 8\n'
        'min_area_m2 = 0.5\n')
    assert process_survey(folder).anomalies == ()
    # the same run with the outline rule switched off shows what the rule prevents
    plain = pipeline.read_onto_grid

    def without_rule(*args, inside=None, **kwargs):
        return plain(*args, **kwargs)

    monkeypatch.setattr(pipeline, "read_onto_grid", without_rule)
    assert len(process_survey(folder).anomalies) > 0


def test_frame_units_are_checked_against_the_air(tmp_path):
    """Frames read 5-10 degC; an air temperature of 55 degC cannot be the same night: refused by check
    and run, naming the key to check (values outside -100..200 degC are refused by the frame reader)."""
    import shutil

    folder = tmp_path / "walked"
    shutil.copytree(Path(__file__).resolve().parents[1] / "sample_surveys" / "walked_roof", folder)
    results = folder / "results"
    if results.exists():
        shutil.rmtree(results)
    edit_toml(folder, "air_c = 5.0", "air_c = 55.0")
    problems = problems_of(check_survey, folder)
    assert any("[[frame]] #2 (f02.tif)" in p and "from the air temperature 55" in p and "check [conditions] air_c" in p
               for p in problems), problems
    assert problems_of(process_survey, folder) == problems


def test_control_characters_never_break_a_problem_line(demo):
    edit_toml(demo, 'kind = "roof"', 'kind = "roof"\n"bad\\nkey" = 1')
    edit_toml(demo, 'outline = "plan/outline.geojson"', 'outline = "plan/\\r\\noutline.geojson"')
    problems = problems_of(load_survey, demo)  # every problem one line (checked by problems_of)
    assert any("bad\\nkey" in p and "unknown key" in p for p in problems), problems
    assert any("[plan] outline" in p and "\\r\\n" in p for p in problems), problems
