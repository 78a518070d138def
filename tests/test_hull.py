"""Hull surveys: the developed side of a hull (x = station, y = girth), meter readings.

The synthetic hull is invented demo data (an invented 11 m yacht, :class:`wetmap.demo.HullScene`)
with a known truth; the acceptance figures (area within 10 %, IoU >= 0.8) are the project's
own. Trade facts are named beside their checks.
"""

from __future__ import annotations

import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
import shapely

from wetmap import demo

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

SAMPLE = Path(__file__).resolve().parents[1] / "sample_surveys" / "yacht_hull"


@pytest.fixture(scope="module")
def hull(tmp_path_factory):
    """The invented hull side written and run: ``(folder, truth, result)``."""
    from wetmap.pipeline import run_survey

    folder = tmp_path_factory.mktemp("hull")
    truth = demo.write_hull_survey(folder)
    return folder, truth, run_survey(folder)


def test_hull_recovers_its_wet_core(hull):
    """Wet area within 10 % and IoU >= 0.8 against the known truth."""
    _, truth, result = hull
    found = shapely.union_all([a.geometry for a in result.anomalies if a.status != "dry"])
    true = shapely.union_all(truth.wet)
    assert abs(found.area / true.area - 1) <= 0.10
    assert found.intersection(true).area / found.union(true).area >= 0.8
    for w in truth.wet:  # each wet patch found on its own
        hit = [a for a in result.anomalies if a.geometry.intersects(w)]
        assert len(hit) == 1 and abs(hit[0].area_m2 / w.area - 1) <= 0.15


def test_readings_decide_the_statuses(hull):
    """Meter readings judged with [cores] wet_above (common practice: a meter reads on its own
    relative scale; the surveyor sets the wet level for the meter and laminate)."""
    _, truth, result = hull
    assert set(result.confirmations.basis) == {"reading"}
    by_patch = {}
    for name, geom in (("keel", truth.wet[1]), ("fitting", truth.wet[0]), ("chainplate", truth.wet[2]),
                       ("bulkhead", truth.refuted[0])):
        (a,) = [a for a in result.anomalies if a.geometry.intersects(geom)]
        by_patch[name] = a.status
    assert by_patch == {"keel": "wet", "fitting": "wet", "chainplate": "unverified", "bulkhead": "dry"}
    assert len(result.anomalies) == 4  # the cold fitting and anode are excluded, nothing else warm


def test_hull_defaults_and_wording(hull):
    """Defaults sized for a hull and hull wording in summary.json."""
    _, _, result = hull
    s = result.summary()
    assert s["kind"] == "hull" and s["side"] == "port" and s["crs"] == "local"
    assert s["area_label"] == "port hull side"
    assert s["plan_axes"] == {"x": "station (m along the hull)", "y": "girth (m up from the keel)"}
    m = s["method"]
    assert m["min_area_m2"] == 0.05            # survey.DEFAULT_MIN_AREA_M2["hull"]
    assert 1.0 <= m["background_m"] <= 4.0     # detect.BACKGROUND_LIMITS_M["hull"]
    assert m["board_m"] is None and s["boards"] == 0  # a hull is cut back to dry core, not re-boarded
    assert "sky view 0.5" in m["reflected_source"]   # a vertical hull side sees half sky
    assert m["pixel_m"] == 0.02 and "ground sampling" in m["pixel_m_source"]
    assert s["coverage"]["uncovered_pct"] < 1.0
    assert len(s["registration"]) == 4
    assert all(r["rms_px"] < 0.6 and r["suspect_point"] is None for r in s["registration"])
    assert not any(" roof" in w for w in s["warnings"])


def test_keys_of_the_format_stay(hull):
    """summary.json keeps the format's key names for hulls (roof_area_m2 = the side's area)."""
    _, truth, result = hull
    s = result.summary()
    excluded = shapely.union_all(truth.exclusions)
    assert s["roof_area_m2"] == pytest.approx(truth.outline.difference(excluded).area, rel=1e-6)


def test_cli_summary_line_uses_hull_words(hull):
    from click.testing import CliRunner

    from wetmap_cli.main import main

    folder, _, _ = hull
    res = CliRunner().invoke(main, ["run", str(folder), "--out", str(folder.parent / "hull_cli_results"), "-q"])
    assert res.exit_code == 0, res.output
    line = [l for l in res.output.splitlines() if "anomalies:" in l][0]
    assert "port hull side" in line and "(x = station, y = girth)" in line
    assert "roof" not in line and "boards" not in line
    assert "sounding and cores" in res.output


def test_loader_hull_defaults(make_survey):
    """A hull survey without [detect] or [repair]: hull minimum area, no board take-off; an
    explicit board_m is kept."""
    from wetmap.survey import load_survey

    toml = ('[survey]\ntitle = "h"\nkind = "hull"\ncrs = "local"\nside = "starboard"\n'
            '[conditions]\nair_c = 12.0\nhumidity_pct = 70\nsky = "clear"\n[camera]\nemissivity = 0.92\n'
            '[plan]\noutline = "plan/outline.geojson"\n[[mosaic]]\npath = "thermal/pass1.tif"\nunits = "C"\n')
    files = ("plan/outline.geojson", "thermal/pass1.tif")
    s = load_survey(make_survey(toml, files))
    assert s.detect.min_area_m2 == 0.05 and s.repair.board_m is None
    s = load_survey(make_survey(toml + "[repair]\nboard_m = [0.6, 1.2]\n", files))
    assert s.repair.board_m == (0.6, 1.2)
    roof = load_survey(make_survey(toml.replace('"hull"', '"roof"').replace('side = "starboard"\n', ""), files))
    assert roof.repair.board_m == (1.2, 2.4)


def test_starboard_frames_are_not_mirror_warnings(tmp_path):
    """Seen from outside, a starboard side runs the other way in the image (a mirror view of the
    developed plan): normal for a hull, so no warning; the same on a roof is warned."""
    from wetmap.pipeline import _register_frames, _radiometry
    from wetmap.survey import load_survey

    folder = tmp_path / "stbd"
    demo.write_hull_survey(folder)
    text = (folder / "survey.toml").read_text(encoding="utf-8")
    # mirror the plan x of every control point: station -> 11 - station
    doc = tomllib.loads(text)
    for f in doc["frame"]:
        new = [[c, r, round(11.0 - x, 3), y] for c, r, x, y in f["points"]]
        text = text.replace(str(f["points"]), str(new))
    (folder / "survey.toml").write_text(text.replace('side = "port"', 'side = "starboard"'), encoding="utf-8")
    survey = load_survey(folder)
    found: list[str] = []
    frames = _register_frames(survey, _radiometry(survey, []), found, None)
    assert all(f.registration.fit.mirrored for f in frames)
    assert not any("mirror" in w for w in found)


def test_bundled_hull_sample_is_current(tmp_path):
    """sample_surveys/yacht_hull equals what the generator writes (regenerate with
    ``python -m wetmap.demo --scene hull sample_surveys/yacht_hull``)."""
    if not SAMPLE.is_dir():
        pytest.skip("sample_surveys/yacht_hull not present in this checkout")
    demo.write_hull_survey(tmp_path)
    assert tomllib.loads((SAMPLE / "survey.toml").read_text("utf-8")) == \
        tomllib.loads((tmp_path / "survey.toml").read_text("utf-8"))
    for name in ("plan/outline.geojson", "plan/exclusions.geojson", "cores.csv"):
        assert (SAMPLE / name).read_text("utf-8") == (tmp_path / name).read_text("utf-8"), name
    from wetmap.frames import read_frame

    for f in sorted((tmp_path / "frames").iterdir()):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            a = read_frame(SAMPLE / "frames" / f.name, units="C").values_k
            b = read_frame(f, units="C").values_k
        assert np.allclose(a, b, atol=0.006), f.name
    total = sum(p.stat().st_size for p in SAMPLE.rglob("*") if p.is_file() and "results" not in p.parts)
    assert total < 1_000_000
