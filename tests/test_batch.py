"""Batches of surveys (``wetmap batch``), and the CLI's progress output.

The surveys are wetmap's invented demo roof (:mod:`wetmap.demo`); a broken survey is one
with an out-of-range value or a truncated mosaic (common practice: a batch runner must
isolate each job's failure and say which failed).
"""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner

from wetmap.demo import write_roof_survey
from wetmap.errors import WetmapError
from wetmap.batch import BatchOutcome, run_batch
from wetmap_cli.main import main


@pytest.fixture(scope="module")
def portfolio(tmp_path_factory):
    """Two good surveys, one with a bad survey.toml value, one with a truncated mosaic."""
    root = tmp_path_factory.mktemp("portfolio")
    good_a, good_b, bad_toml, bad_tif = (root / n for n in ("roof_a", "roof_b", "roof_bad_toml", "roof_bad_tif"))
    for folder in (good_a, good_b, bad_toml, bad_tif):
        write_roof_survey(folder)
    toml = bad_toml / "survey.toml"
    toml.write_text(toml.read_text().replace("emissivity = 0.94", "emissivity = 1.7"))
    tif = next((bad_tif / "thermal").glob("*.tif"))
    tif.write_bytes(tif.read_bytes()[: tif.stat().st_size // 3])
    return root, (good_a, good_b), (bad_toml, bad_tif)


def test_cli_batch_completes_the_good_surveys_and_names_the_broken(portfolio, tmp_path):
    root, good, bad = portfolio
    out = tmp_path / "out"
    args = ["batch", str(good[0]), str(bad[0]), str(bad[1]), str(good[1]), "--out-root", str(out),
            "--no-map", "--no-report"]
    res = CliRunner().invoke(main, args)
    assert res.exit_code == 1, res.output
    assert "Traceback" not in res.output
    for folder in good:
        summary = json.loads((out / folder.name / "summary.json").read_text())
        assert summary["anomaly_count"] > 0
    for folder in bad:
        assert not (out / folder.name).exists()  # nothing written for a failed survey
    table = [line for line in res.stdout.splitlines() if line.startswith(str(root))]
    assert len(table) == 4
    assert [("FAILED" in line) for line in table] == [False, True, True, False]
    failed = [line for line in res.stderr.splitlines() if line.startswith("wetmap: failed:")]
    assert len(failed) == 1 and str(bad[0]) in failed[0] and str(bad[1]) in failed[0]
    assert str(good[0]) not in failed[0]
    errors = [line for line in res.stderr.splitlines() if line.startswith("wetmap: error:")]
    assert any("emissivity" in line for line in errors)
    assert any(bad[1].name in line and "read" in line for line in errors)
    assert "2 of 4 surveys done" in res.stdout


def test_cli_batch_all_good_exits_zero(portfolio, tmp_path):
    _, good, _ = portfolio
    res = CliRunner().invoke(main, ["batch", *map(str, good), "--out-root", str(tmp_path), "--quiet",
                                    "--no-map", "--no-report"])
    assert res.exit_code == 0, res.output
    assert "2 of 2 surveys done" in res.stdout
    assert "[1/2]" not in res.stderr  # --quiet: no per-survey lines


def test_run_batch_library_outcomes_in_order(portfolio, tmp_path):
    _, good, bad = portfolio
    seen: list[tuple[int, int]] = []
    outcomes = run_batch([bad[0], good[0]], out_root=tmp_path, map_html=False, report_html=False,
                         survey_done=lambda outcome, done, total: seen.append((done, total)))
    assert [o.ok for o in outcomes] == [False, True]
    assert isinstance(outcomes[0], BatchOutcome) and outcomes[0].problems and outcomes[0].results is None
    assert outcomes[1].results == tmp_path / good[0].name and outcomes[1].anomalies > 0
    assert seen == [(1, 2), (2, 2)]


def test_run_batch_on_a_local_cluster(portfolio, tmp_path):
    """On a dask.distributed cluster every survey is a task; one failure stops only its survey."""
    from distributed import Client, LocalCluster

    _, good, bad = portfolio
    with LocalCluster(processes=False, n_workers=2, threads_per_worker=1, dashboard_address=None) as cluster, \
            Client(cluster) as client:
        outcomes = run_batch([good[0], bad[0], good[1]], scheduler=client, out_root=tmp_path, map_html=False,
                             report_html=False)
    assert [o.ok for o in outcomes] == [True, False, True]
    for folder in good:
        assert (tmp_path / folder.name / "summary.json").is_file()


def test_run_shows_stage_lines_and_window_bars_unless_quiet(portfolio, tmp_path):
    """Windowed run: stage lines and one progress bar per pass on stderr; --quiet leaves the summary only."""
    _, good, _ = portfolio
    base = ["run", str(good[0]), "--tile-px", "64", "--no-map", "--no-report"]
    loud = CliRunner().invoke(main, [*base, "--out", str(tmp_path / "loud")])
    assert loud.exit_code == 0, loud.output
    for label in ("surface temperature", "background estimate 2", "background estimate 3", "anomaly outlines",
                  "writing delta_c.tif"):
        assert label in loud.stderr
    assert "windows of" in loud.stderr and "reading the plan" in loud.stderr
    quiet = CliRunner().invoke(main, [*base, "--out", str(tmp_path / "quiet"), "--quiet"])
    assert quiet.exit_code == 0, quiet.output
    assert "surface temperature" not in quiet.stderr and "reading the plan" not in quiet.stderr
    assert "anomalies:" in quiet.stdout
    assert json.loads((tmp_path / "quiet" / "summary.json").read_text())["method"]["processing"]["mode"] == "windows"


def test_bad_scheduler_address_is_one_clean_line(portfolio, tmp_path, monkeypatch):
    from wetmap import tiles

    monkeypatch.setattr(tiles, "CONNECT_TIMEOUT_S", 2)
    _, good, _ = portfolio
    res = CliRunner().invoke(main, ["run", str(good[0]), "--tile-px", "64", "--scheduler", "tcp://127.0.0.1:9",
                                    "--out", str(tmp_path / "x")])
    assert res.exit_code == 1
    assert "Traceback" not in res.output
    assert any(line.startswith("wetmap: error:") and "--scheduler" in line for line in res.stderr.splitlines())
    assert not (tmp_path / "x").exists()


def test_truncated_mosaic_in_windows_is_a_clean_error(portfolio, tmp_path):
    """A mosaic that opens but fails on read fails inside a window task: still one clean line."""
    _, _, bad = portfolio
    res = CliRunner().invoke(main, ["run", str(bad[1]), "--tile-px", "64", "--out", str(tmp_path / "x")])
    assert res.exit_code == 1
    assert "Traceback" not in res.output
    errors = [line for line in res.stderr.splitlines() if line.startswith("wetmap: error:")]
    assert errors and ("cannot be read" in errors[0] or "cannot be opened" in errors[0])  # GDAL builds fail at open or at read
    assert not (tmp_path / "x").exists()
    assert not list(tmp_path.glob(".wetmap-windows-*"))  # the scratch folder is removed


def test_same_named_surveys_get_distinct_results_folders(tmp_path):
    x, y = tmp_path / "site_x" / "roof", tmp_path / "site_y" / "roof"
    write_roof_survey(x)
    write_roof_survey(y, title="Invented second roof")
    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["batch", str(x), str(y), "--out-root", str(out), "--quiet", "--no-map",
                                    "--no-report"])
    assert res.exit_code == 0, res.output
    assert sorted(p.name for p in out.iterdir()) == ["site_x_roof", "site_y_roof"]
    titles = {json.loads((out / n / "summary.json").read_text())["title"] for n in ("site_x_roof", "site_y_roof")}
    assert titles == {"Invented warehouse roof", "Invented second roof"}  # neither lost


def test_out_root_that_would_replace_surveys_is_refused_before_any_work(portfolio, tmp_path):
    root, good, _ = portfolio
    before = {p: p.read_bytes() for f in good for p in sorted(f.rglob("*")) if p.is_file()}
    for out_root in (root, good[0]):  # the surveys' parent (results would be the surveys), inside a survey
        res = CliRunner().invoke(main, ["batch", *map(str, good), "--out-root", str(out_root), "--quiet"])
        assert res.exit_code == 1, res.output
        assert "Traceback" not in res.output
        errors = res.stderr.strip().splitlines()
        assert errors and all(line.startswith("wetmap: error:") for line in errors)
        assert any("survey folder" in line for line in errors)
        assert "surveys done" not in res.stdout  # refused as a whole, nothing run
    assert {p: p.read_bytes() for f in good for p in sorted(f.rglob("*")) if p.is_file()} == before


def test_a_survey_given_twice_is_refused(portfolio, tmp_path):
    _, good, _ = portfolio
    with pytest.raises(WetmapError, match="given twice"):
        run_batch([good[0], good[0]], out_root=tmp_path / "out")
    assert not (tmp_path / "out").exists()
