"""The graded core log and the site photos (wetmap.photos, the core log's outputs).

The bundled warehouse sample (invented) logs layers, wet thickness and photos for its
cores and has a photos.csv with one site photo; its photos are invented images drawn by
``wetmap.demo``. Runs go to pytest's tmp folders.
"""

from __future__ import annotations

import base64
import csv
import io
import re
import shutil
from pathlib import Path

import pytest

from wetmap.errors import SurveyError
from wetmap.pipeline import check_survey, run_survey
from wetmap.survey import load_survey

SAMPLE = Path(__file__).resolve().parents[1] / "sample_surveys" / "warehouse_roof"


def _copy(dest: Path, edit=None) -> Path:
    shutil.copytree(SAMPLE, dest, ignore=shutil.ignore_patterns("results"))
    if edit is not None:
        path = dest / "survey.toml"
        path.write_text(edit(path.read_text(encoding="utf-8")), encoding="utf-8")
    return dest


@pytest.fixture(scope="module")
def sample_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("photos") / "results"
    return run_survey(SAMPLE, out=out), out


# --------------------------------------------------------------------------------------
# The core log
# --------------------------------------------------------------------------------------


def test_core_log_csv_and_workbook_sheet(sample_run):
    openpyxl = pytest.importorskip("openpyxl")
    result, out = sample_run
    rows = list(csv.DictReader((out / "core_log.csv").open(encoding="utf-8")))
    assert [r["id"] for r in rows] == list(result.confirmations.ids)
    assert {r["grade"] for r in rows} <= {"wet", "damp", "dry"}
    c1 = next(r for r in rows if r["id"] == "C1")
    assert c1["grade"] == "wet" and c1["counted_as"] == "wet" and c1["thickness_mm"] == "75"
    assert c1["layers"].startswith("membrane") and c1["photo"] == "photos/c1.jpg"
    assert c1["anomaly"] and float(c1["delta_c"]) > 0
    ws = openpyxl.load_workbook(out / "takeoff.xlsx")["cores"]
    head = [c.value for c in ws[1]]
    assert head[:5] == ["id", "x", "y", "grade", "counted_as"] and "thickness_mm" in head
    values = {ws.cell(row=i, column=1).value: ws.cell(row=i, column=head.index("thickness_mm") + 1).value
              for i in range(2, ws.max_row + 1)}
    assert values["C1"] == 75 and values["C2"] == 80  # numbers, not texts


def test_core_log_in_the_geopackage_and_the_map(sample_run):
    import geopandas as gpd

    _, out = sample_run
    cores = gpd.read_file(out / "repair.gpkg", layer="cores")
    assert set(cores["grade"]) <= {"wet", "damp", "dry"} and "thickness_mm" in cores.columns
    page = (out / "map.html").read_text(encoding="utf-8")
    assert "Graded" in page and "Layers (build-up)" in page and "Wet thickness" in page and "75 mm" in page


def _damp(rule: str | None):
    """The sample with core C2 (inside a wet area) graded damp, and the rule if given."""
    def edit(text: str) -> str:
        return text.replace('[cores]\npath = "cores.csv"',
                            '[cores]\npath = "cores.csv"' + (f'\ndamp_counts_as = "{rule}"' if rule else ""))
    return edit


@pytest.mark.parametrize("rule, status", [(None, "wet"), ("wet", "wet"), ("dry", "dry")])
def test_damp_core_counts_as_the_survey_says(tmp_path, rule, status):
    folder = _copy(tmp_path / "s", _damp(rule))
    cores = (folder / "cores.csv").read_text(encoding="utf-8")
    (folder / "cores.csv").write_text(cores.replace("C2,512331.500,5463120.000,wet,", "C2,512331.500,5463120.000,damp,"),
                                      encoding="utf-8")
    assert load_survey(folder).cores.damp_counts_as == (rule or "wet")
    result = run_survey(folder)
    (a,) = [a for a in result.anomalies if "C2" in a.confirmations]
    assert a.status == status
    page = (folder / "results" / "report.html").read_text(encoding="utf-8")
    assert f"counts as <b>{rule or 'wet'}</b>" in page and "1 of the 5 cores here is damp" in page
    assert "<tr data-grade='damp'>" in page


def test_damp_rule_refused_with_the_choices(tmp_path):
    folder = _copy(tmp_path / "s", lambda t: t.replace('[cores]\npath = "cores.csv"',
                                                       '[cores]\npath = "cores.csv"\ndamp_counts_as = "half"'))
    with pytest.raises(SurveyError) as err:
        load_survey(folder)
    (line,) = [ln for ln in str(err.value).splitlines() if "damp_counts_as" in ln]
    assert '"wet"' in line and '"dry"' in line and line.startswith(str(folder / "survey.toml"))


# --------------------------------------------------------------------------------------
# Photos
# --------------------------------------------------------------------------------------


def _uris(page: str) -> list[str]:
    return re.findall(r"data:image/jpeg;base64,[A-Za-z0-9+/=]+", page)


def test_photos_beside_the_thermal_view_in_the_report(sample_run):
    from PIL import Image

    result, out = sample_run
    page = (out / "report.html").read_text(encoding="utf-8")
    pairs = re.findall(r"<figure class='photo-pair' data-photo='([^']+)'>", page)
    assert pairs == ["photos/c1.jpg", "photos/c3.jpg", "photos/site1.jpg"]
    uris = _uris(page)
    assert len(uris) == 3
    for uri in uris:  # downscaled JPEGs, readable
        im = Image.open(io.BytesIO(base64.b64decode(uri.split(",", 1)[1])))
        assert im.format == "JPEG" and max(im.size) <= 640
    # the site photo is tied to the nearest anomaly: the one holding core C2, 1.5 m south of it
    (a,) = [a for a in result.anomalies if "C2" in a.confirmations]
    assert f"Photo near anomaly #{a.id} (wet, 0.0 m from its outline)" in page


def test_photos_in_the_map_popups(sample_run):
    _, out = sample_run
    page = (out / "map.html").read_text(encoding="utf-8")
    assert len(_uris(page)) == 3 and page.count("wetmap-photo") >= 3


def test_missing_and_unreadable_photos_are_one_line_each(tmp_path):
    folder = _copy(tmp_path / "s")
    (folder / "photos" / "c3.jpg").unlink()
    (folder / "photos" / "site1.jpg").write_bytes(b"not an image at all")
    _, warnings = check_survey(folder)
    lines = [w for w in warnings if "photo" in w]
    assert len(lines) == 2, lines
    missing = next(w for w in lines if "c3.jpg" in w)
    assert str(folder / "cores.csv") in missing and "row 4 (id C3), column 'photo'" in missing
    assert "file not found" in missing and "photos/ folder" in missing
    bad = next(w for w in lines if "site1.jpg" in w)
    assert str(folder / "photos.csv") in bad and "row 2, column 'photo'" in bad and "not a readable image" in bad
    assert all("\n" not in w for w in lines)
    result = run_survey(folder)  # the run goes on, the photos left out
    page = (folder / "results" / "report.html").read_text(encoding="utf-8")
    assert len(_uris(page)) == 1 and any("c3.jpg" in w for w in result.warnings)
