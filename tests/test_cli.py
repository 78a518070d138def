"""The wetmap command: one clean line per problem, non-zero exit, no traceback."""

from __future__ import annotations

import subprocess
import sys

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
