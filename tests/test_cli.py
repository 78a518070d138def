"""The wetmap command: one clean line per problem, non-zero exit, no traceback."""

from __future__ import annotations

import shutil
import subprocess
import sys

import pytest
from click.testing import CliRunner

from wetmap.demo import write_roof_survey
from wetmap_cli.main import main


def test_run_prints_summary_and_cautions(tmp_path):
    write_roof_survey(tmp_path / "s")
    res = CliRunner().invoke(main, ["run", str(tmp_path / "s"), "--out", str(tmp_path / "out"), "--quiet"])
    assert res.exit_code == 0, res.output
    assert "anomalies" in res.output and "m2" in res.output
    assert "verify by coring" in res.output
    assert (tmp_path / "out" / "summary.json").is_file()


def test_help_shows_cautions():
    res = CliRunner().invoke(main, ["--help"])
    assert res.exit_code == 0
    assert "not measured" in res.output and "fall" in res.output and "asbestos" in res.output
    res = CliRunner().invoke(main, ["run", "--help"])
    assert "licensed" in res.output


def test_bad_survey_is_one_line_per_problem_and_nonzero(tmp_path):
    folder = tmp_path / "s"
    write_roof_survey(folder)
    toml = folder / "survey.toml"
    text = toml.read_text().replace("emissivity = 0.94", "emisivity = 0.94").replace('units = "C"', 'units = "celsius"')
    toml.write_text(text)
    res = CliRunner().invoke(main, ["run", str(folder)])
    assert res.exit_code == 1
    lines = [l for l in res.output.splitlines() if l.startswith("wetmap: error:")]
    assert any('did you mean "emissivity"' in l for l in lines)
    assert any("units" in l and '"C", "K", "F"' in l for l in lines)
    assert "Traceback" not in res.output
    assert not (folder / "results").exists()


def test_check_validates_without_running(tmp_path):
    folder = tmp_path / "s"
    write_roof_survey(folder)
    res = CliRunner().invoke(main, ["check", str(folder)])
    assert res.exit_code == 0, res.output
    assert "ok" in res.output
    assert not (folder / "results").exists()


def test_missing_folder_is_a_clean_error(tmp_path):
    res = CliRunner().invoke(main, ["check", str(tmp_path / "nowhere")])
    assert res.exit_code == 1
    assert "survey folder not found" in res.output


def test_console_script_entry_point(tmp_path):
    """The installed module runs as a program (the console script calls the same main)."""
    proc = subprocess.run([sys.executable, "-m", "wetmap_cli.main", "--version"], capture_output=True, text=True)
    assert proc.returncode == 0
    assert "wetmap" in proc.stdout


# --out never destroys a user's files: every refusal is one line, exit 1, nothing touched


@pytest.fixture(scope="module")
def ran_roof(tmp_path_factory):
    """The invented roof, run once (results/ without map and report); tests copy it."""
    folder = tmp_path_factory.mktemp("cli_ran") / "roof"
    write_roof_survey(folder)
    assert CliRunner().invoke(main, ["run", str(folder), "-q", "--no-map", "--no-report"]).exit_code == 0
    return folder


def _tree(folder):
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def _refused(args, *, cwd=None, monkeypatch=None):
    if cwd is not None:
        monkeypatch.chdir(cwd)
    res = CliRunner().invoke(main, args)
    assert res.exit_code == 1, res.output
    assert "Traceback" not in res.output
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("wetmap: error:"), res.stderr
    return lines[0]


@pytest.mark.parametrize("where", ["survey", "dot", "empty", "parent", "user_file", "user_folder", "inside"])
def test_run_out_that_would_destroy_files_is_refused(ran_roof, tmp_path, monkeypatch, where):
    survey = tmp_path / "work" / "roof"
    shutil.copytree(ran_roof, survey)
    user_file = tmp_path / "work" / "some.txt"
    user_file.write_text("a user's file")
    user_folder = tmp_path / "work" / "deliverables"
    user_folder.mkdir()
    (user_folder / "notes.txt").write_text("a user's notes")
    before = _tree(tmp_path / "work")
    args, cwd = {
        "survey": (["run", str(survey), "--out", str(survey)], None),
        "dot": (["run", ".", "--out", "."], survey),
        "empty": (["run", str(survey), "--out", ""], survey),
        "parent": (["run", str(survey), "--out", str(survey.parent)], None),
        "user_file": (["run", str(survey), "--out", str(user_file)], None),
        "user_folder": (["run", str(survey), "--out", str(user_folder)], None),
        "inside": (["run", str(survey), "--out", str(survey / "thermal")], None),
    }[where]
    line = _refused([*args, "-q", "--no-map", "--no-report"], cwd=cwd, monkeypatch=monkeypatch)
    assert "choose" in line  # the fix
    assert _tree(tmp_path / "work") == before  # survey, user file and notes untouched
    assert sorted(p.name for p in (tmp_path / "work").iterdir()) == ["deliverables", "roof", "some.txt"]


def test_run_replaces_its_own_results_and_an_earlier_results_folder(ran_roof, tmp_path):
    survey = tmp_path / "roof"
    shutil.copytree(ran_roof, survey)
    (survey / "results" / "quantities.csv").write_text("stale")
    res = CliRunner().invoke(main, ["run", str(survey), "-q", "--no-map", "--no-report"])
    assert res.exit_code == 0, res.output
    assert (survey / "results" / "quantities.csv").read_text() != "stale"  # replaced
    elsewhere = tmp_path / "deliverables" / "roof_results"
    for _ in range(2):  # the second run replaces the folder the first one wrote
        res = CliRunner().invoke(main, ["run", str(survey), "--out", str(elsewhere), "-q", "--no-map", "--no-report"])
        assert res.exit_code == 0, res.output
        assert (elsewhere / "wetmap-manifest.json").is_file()
    assert sorted(p.name for p in elsewhere.parent.iterdir()) == ["roof_results"]  # no lock or staging left


def test_window_and_compare_refuse_a_user_folder(ran_roof, tmp_path):
    user_folder = tmp_path / "deliverables"
    user_folder.mkdir()
    (user_folder / "notes.txt").write_text("a user's notes")
    for args in (["window", str(ran_roof), "--out", str(user_folder)],
                 ["compare", str(ran_roof), str(ran_roof), "--out", str(user_folder)],
                 ["compare", str(ran_roof), str(ran_roof), "--out", str(ran_roof)]):
        line = _refused(args)
        assert "choose" in line
    assert sorted(p.name for p in user_folder.iterdir()) == ["notes.txt"]


def test_ctrl_c_is_exit_130_and_one_line(tmp_path, monkeypatch):
    """128 + SIGINT (2): the shell's convention for a program stopped by Ctrl-C."""
    from wetmap import pipeline

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(pipeline, "run_survey", interrupted)
    res = CliRunner().invoke(main, ["run", str(tmp_path)])
    assert res.exit_code == 130
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and "interrupted" in lines[0] and "Aborted" not in res.output
