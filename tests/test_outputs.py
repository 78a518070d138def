"""Results folders are written safely (wetmap.outputs): never the survey, never a user's
folder, one step, recoverable after a kill, one run at a time, modes from the umask.

Kill and concurrency tests run real processes, each bounded by a timeout; a process is
stopped at a named point of the write by replacing ``wetmap.outputs._checkpoint``
(common practice: crash-consistency tests stop the writer between its steps).
"""

from __future__ import annotations

import json
import os
import shutil
import stat
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from wetmap import outputs
from wetmap.demo import write_roof_survey
from wetmap.errors import OutputError, WetmapError
from wetmap.outputs import MANIFEST, check_out_dir, is_wetmap_folder, results_name_for, write_folder
from wetmap.pipeline import run_survey

TIMEOUT_S = 120  # bound on every child process (a hang fails the test instead of blocking the suite)


@pytest.fixture(scope="module")
def ran_survey(tmp_path_factory):
    """The invented demo roof, run once (results/ without map and report); copied per test."""
    folder = tmp_path_factory.mktemp("ran") / "roof"
    write_roof_survey(folder)
    run_survey(folder, map_html=False, report_html=False)
    return folder


@pytest.fixture
def survey(ran_survey, tmp_path):
    folder = tmp_path / "roof"
    shutil.copytree(ran_survey, folder)
    return folder


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def _leftovers(*folders: Path) -> list[str]:
    found = []
    for folder in folders:
        found += [p.name for p in folder.iterdir()
                  if p.name.startswith(".") and (".tmp-" in p.name or ".old-" in p.name or p.name.endswith(".lock")
                                                 or p.name.startswith(".wetmap-windows-"))]
    return found


# ---------------------------------------------------------------------------------------
# Which folders may be written
# ---------------------------------------------------------------------------------------


def test_survey_folder_its_parent_and_inside_are_refused(survey):
    for bad, words in ((survey, "survey folder itself"), (survey.parent, "holds the survey folder"),
                       (survey / "plan", "lies inside the survey folder"),
                       (survey / "new_folder", "lies inside the survey folder"),
                       (survey / "results" / "sub", "lies inside the survey folder")):
        with pytest.raises(OutputError) as err:
            check_out_dir(bad, surveys=[survey])
        assert len(err.value.problems) == 1 and words in err.value.problems[0], bad
        assert str(bad) in err.value.problems[0]


def test_a_survey_is_found_without_being_named(survey):
    """Any folder holding survey.toml around the destination is protected."""
    with pytest.raises(OutputError, match="inside the survey folder"):
        check_out_dir(survey / "plan")
    assert check_out_dir(survey / "results") == (survey / "results").resolve()


def test_empty_path_file_and_user_folder_are_refused(tmp_path):
    with pytest.raises(OutputError, match="empty"):
        check_out_dir("")
    note = tmp_path / "some.txt"
    note.write_text("mine")
    with pytest.raises(OutputError, match="is a file"):
        check_out_dir(note)
    user = tmp_path / "user"
    user.mkdir()
    (user / "notes.txt").write_text("mine")
    (user / "summary.json").write_text("{}")
    with pytest.raises(OutputError, match=r"holds files wetmap did not write \(notes.txt\)"):
        check_out_dir(user)
    assert (user / "notes.txt").read_text() == "mine"


def test_empty_missing_wetmap_and_earlier_version_folders_are_allowed(tmp_path):
    (tmp_path / "empty").mkdir()
    assert is_wetmap_folder(tmp_path / "empty")
    check_out_dir(tmp_path / "empty")
    check_out_dir(tmp_path / "missing" / "deeper")
    out = write_folder(tmp_path / "mine", lambda f: (f / "notes.txt").write_text("ours"))
    assert is_wetmap_folder(out)  # the manifest marks it, whatever it holds
    legacy = tmp_path / "legacy"  # an earlier wetmap wrote only its own file names, no manifest
    legacy.mkdir()
    for name in ("summary.json", "anomalies.gpkg", "window.png"):
        (legacy / name).write_bytes(b"x")
    assert is_wetmap_folder(legacy)
    (legacy / "sub").mkdir()
    assert not is_wetmap_folder(legacy)


def test_manifest_names_version_survey_time_and_files(ran_survey):
    survey = ran_survey
    doc = json.loads((survey / "results" / MANIFEST).read_text())
    assert doc["written_by"] == "wetmap" and doc["wetmap_version"]
    assert doc["survey"] == str(survey.resolve())
    assert doc["written_utc"].endswith("+00:00")
    names = {f["name"] for f in doc["files"]}
    assert {"summary.json", "anomalies.gpkg", "delta_c.tif"} <= names and MANIFEST not in names
    for f in doc["files"]:
        assert (survey / "results" / f["name"]).stat().st_size == f["bytes"]


def test_results_names_tell_same_named_surveys_apart():
    assert results_name_for(["/a/x/roof", "/a/y/roof", "/a/hull"]) == ["x_roof", "y_roof", "hull"]
    assert results_name_for(["/p/x/roof", "/q/x/roof"]) == ["p_x_roof", "q_x_roof"]
    assert results_name_for(["/a/roof_a", "/a/roof_b"]) == ["roof_a", "roof_b"]


# ---------------------------------------------------------------------------------------
# Writing: replaced in one step, modes from the umask, failures change nothing
# ---------------------------------------------------------------------------------------


def test_rewrite_replaces_the_set_and_keeps_nothing_else(tmp_path):
    out = tmp_path / "res"
    write_folder(out, lambda f: (f / "a.txt").write_text("1"))
    write_folder(out, lambda f: (f / "b.txt").write_text("2"))
    assert sorted(p.name for p in out.iterdir()) == ["b.txt", MANIFEST]
    write_folder(out, lambda f: (f / "c.txt").write_text("3"), keep=None)  # window/compare: add files
    assert sorted(p.name for p in out.iterdir()) == ["b.txt", "c.txt", MANIFEST]
    assert _leftovers(tmp_path) == []


def test_two_renames_where_the_file_system_cannot_exchange(tmp_path, monkeypatch):
    out = tmp_path / "res"
    write_folder(out, lambda f: (f / "a.txt").write_text("1"))
    monkeypatch.setattr(outputs, "_exchange", lambda a, b: False)
    write_folder(out, lambda f: (f / "a.txt").write_text("2"))
    assert (out / "a.txt").read_text() == "2"
    assert _leftovers(tmp_path) == []


def test_failed_write_leaves_the_earlier_set(tmp_path):
    out = tmp_path / "res"
    write_folder(out, lambda f: (f / "a.txt").write_text("1"))
    before = _snapshot(out)

    def broken(folder):
        (folder / "a.txt").write_text("half")
        raise OSError("disk full (simulated)")

    with pytest.raises(OSError):
        write_folder(out, broken)
    assert _snapshot(out) == before and _leftovers(tmp_path) == []


@pytest.mark.parametrize("umask, dir_mode, file_mode", [(0o022, 0o755, 0o644), (0o027, 0o750, 0o640)],
                         ids=["umask022", "umask027"])
def test_modes_follow_the_umask(survey, umask, dir_mode, file_mode):
    """A plain mkdir/open gives 0777/0666 minus the umask (POSIX open(2), mkdir(2))."""
    old = os.umask(umask)
    try:
        run_survey(survey, map_html=False, report_html=False)
    finally:
        os.umask(old)
    results = survey / "results"
    assert stat.S_IMODE(results.stat().st_mode) == dir_mode
    for p in results.iterdir():
        assert stat.S_IMODE(p.stat().st_mode) == file_mode, p.name


# ---------------------------------------------------------------------------------------
# Kills at each point of the write, in a real process
# ---------------------------------------------------------------------------------------

_KILLED = textwrap.dedent("""
    import os, sys
    from pathlib import Path
    from wetmap import outputs

    out, point, exchange, what = Path(sys.argv[1]), sys.argv[2], sys.argv[3] == "1", sys.argv[4]
    if not exchange:
        outputs._exchange = lambda a, b: False
    def stop(name):
        if name == point:
            os._exit(9)
    outputs._checkpoint = stop
    if what == "writer-dies":
        def write(folder):
            (folder / "a.txt").write_text("half")
            os._exit(9)
    else:
        def write(folder):
            (folder / "a.txt").write_text("new")
    outputs.write_folder(out, write)
    os._exit(0)
""")


@pytest.mark.parametrize("point, exchange", [("writing", True), ("staged", True), ("marked", True),
                                             ("swapped", True), ("staged", False), ("between", False),
                                             ("swapped", False)])
def test_a_killed_write_loses_nothing_and_the_next_run_cleans_up(tmp_path, point, exchange):
    out = tmp_path / "res"
    write_folder(out, lambda f: (f / "a.txt").write_text("earlier"))
    proc = subprocess.run([sys.executable, "-c", _KILLED, str(out), point, "1" if exchange else "0",
                           "writer-dies" if point == "writing" else "writes"],
                          capture_output=True, text=True, timeout=TIMEOUT_S)
    assert proc.returncode == 9, proc.stderr  # stopped at that point, as asked
    if point == "between":
        assert not out.exists()  # the one window in which no results folder exists...
    else:
        expected = "new" if point == "swapped" else "earlier"
        assert (out / "a.txt").read_text() == expected and (out / MANIFEST).is_file()

    # ... which the next run closes, even a run that then fails
    def fails(folder):
        raise OSError("disk full (simulated)")

    with pytest.raises(OSError):
        write_folder(out, fails)
    expected = "new" if point == "swapped" else "earlier"
    assert (out / "a.txt").read_text() == expected and (out / MANIFEST).is_file()
    assert _leftovers(tmp_path) == []


def test_a_run_killed_in_the_swap_is_put_back_by_the_next_wetmap_command(survey):
    """End to end: `wetmap run` stopped between the two renames; the next command (here
    `wetmap window`, which adds its two files to the results) finds the earlier set again."""
    before = _snapshot(survey / "results")
    (survey / ".wetmap-windows-deadbeef").mkdir()  # the scratch of a run that died long ago
    (survey / ".wetmap-windows-deadbeef" / "delta.raw").write_bytes(b"0" * 64)
    script = textwrap.dedent("""
        import os, sys
        from wetmap import outputs
        from wetmap_cli.main import main
        outputs._exchange = lambda a, b: False
        outputs._checkpoint = lambda name: os._exit(9) if name == "between" else None
        main(["run", sys.argv[1], "--quiet", "--no-map", "--no-report"])
    """)
    proc = subprocess.run([sys.executable, "-c", script, str(survey)], capture_output=True, text=True,
                          timeout=TIMEOUT_S)
    assert proc.returncode == 9, proc.stderr
    assert not (survey / "results").exists()
    proc = subprocess.run([sys.executable, "-m", "wetmap_cli.main", "window", str(survey)], capture_output=True,
                          text=True, timeout=TIMEOUT_S)
    assert proc.returncode == 0, proc.stderr
    after = _snapshot(survey / "results")
    assert set(after) == set(before) | {"window.json", "window.png"}
    assert all(after[name] == before[name] for name in before if name != MANIFEST)  # the earlier set, intact
    assert _leftovers(survey) == []


# ---------------------------------------------------------------------------------------
# One run at a time
# ---------------------------------------------------------------------------------------

_HOLDER = textwrap.dedent("""
    import sys, time
    from pathlib import Path
    from wetmap.outputs import write_folder

    survey, ready, go = Path(sys.argv[1]), Path(sys.argv[2]), Path(sys.argv[3])
    def write(folder):
        (folder / "summary.json").write_text("{}")
        ready.write_text("holding")
        for _ in range(1200):  # at most 60 s
            if go.exists():
                return
            time.sleep(0.05)
        raise SystemExit("never told to go")
    write_folder(survey / "results", write, survey=survey)
""")


def _wait_for(path: Path, proc: subprocess.Popen) -> None:
    for _ in range(1200):  # at most 60 s
        if path.exists() or proc.poll() is not None:
            break
        time.sleep(0.05)
    assert path.exists(), proc.communicate(timeout=TIMEOUT_S)


def test_a_second_run_refuses_at_once_while_the_first_holds_the_lock(survey, tmp_path):
    before = _snapshot(survey / "results")
    ready, go = tmp_path / "ready", tmp_path / "go"
    holder = subprocess.Popen([sys.executable, "-c", _HOLDER, str(survey), str(ready), str(go)],
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        _wait_for(ready, holder)
        for args in (["run", str(survey), "--quiet"], ["run", str(survey), "--out", str(tmp_path / "elsewhere")],
                     ["window", str(survey)]):
            proc = subprocess.run([sys.executable, "-m", "wetmap_cli.main", *args], capture_output=True, text=True,
                                  timeout=TIMEOUT_S)
            assert proc.returncode == 1, (args, proc.stderr)
            lines = proc.stderr.strip().splitlines()
            assert len(lines) == 1 and "Traceback" not in proc.stderr, (args, proc.stderr)
            assert ".lock" in lines[0] and "another wetmap run" in lines[0] and "wait" in lines[0], lines[0]
            assert not (tmp_path / "elsewhere").exists()
            assert _snapshot(survey / "results") == before  # the refused run touched nothing
    finally:
        go.write_text("go")
        out, err = holder.communicate(timeout=TIMEOUT_S)
    assert holder.returncode == 0, err
    assert json.loads((survey / "results" / "summary.json").read_text()) == {}  # the first run finished
    assert _leftovers(survey, tmp_path) == []


# ---------------------------------------------------------------------------------------
# Ctrl-C
# ---------------------------------------------------------------------------------------


def test_ctrl_c_exits_130_with_one_line_and_keeps_the_results(survey):
    """SIGINT while the results are written: exit status 128 + 2 (shell convention), one line."""
    before = _snapshot(survey / "results")
    script = textwrap.dedent("""
        import os, signal, sys
        from wetmap import outputs
        from wetmap_cli.main import main
        outputs._checkpoint = lambda name: os.kill(os.getpid(), signal.SIGINT) if name == "staged" else None
        main(["run", sys.argv[1], "--quiet", "--no-map", "--no-report"])
    """)
    proc = subprocess.run([sys.executable, "-c", script, str(survey)], capture_output=True, text=True,
                          timeout=TIMEOUT_S)
    assert proc.returncode == 130, proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "interrupted" in lines[0] and "Traceback" not in proc.stderr
    assert _snapshot(survey / "results") == before
    assert _leftovers(survey) == []


def test_library_warnings_do_not_reach_stderr(tmp_path):
    """A title with glyphs the plot font lacks makes matplotlib warn; the CLI logs it instead."""
    folder = tmp_path / "roof"
    write_roof_survey(folder, title="Invented roof \U0001F3E0 \u0a85")
    with open(folder / "survey.toml", "a", encoding="utf-8") as fh:
        fh.write('\n[cooldown]\ninsulation = "perlite"\nsunrise = "07:15"\n')
    proc = subprocess.run([sys.executable, "-m", "wetmap_cli.main", "window", str(folder)], capture_output=True,
                          text=True, timeout=TIMEOUT_S)
    assert proc.returncode == 0, proc.stderr
    assert (folder / "results" / "window.png").is_file()
    assert "Warning" not in proc.stderr and "Glyph" not in proc.stderr, proc.stderr
    assert all(line.startswith("note: ") for line in proc.stderr.splitlines()), proc.stderr


def test_refusals_are_wetmap_errors_before_any_work(survey, monkeypatch):
    from wetmap import pipeline

    def never(*args, **kwargs):
        raise AssertionError("processing started before the refusal")

    monkeypatch.setattr(pipeline, "process_survey", never)
    with pytest.raises(WetmapError, match="survey folder itself"):
        run_survey(survey, out=survey)


def test_a_run_killed_while_processing_in_windows_leaves_nothing_after_the_next_run(survey):
    """The window scratch folder lives in the run's staging folder: one leftover, removed next time."""
    before = _snapshot(survey / "results")
    script = textwrap.dedent("""
        import os, sys
        from wetmap import pipeline
        from wetmap_cli.main import main
        pipeline._write_files = lambda *args, **kwargs: os._exit(9)  # killed once detection is done
        main(["run", sys.argv[1], "--quiet", "--no-map", "--no-report", "--tile-px", "64", "--scheduler", "sync"])
    """)
    proc = subprocess.run([sys.executable, "-c", script, str(survey)], capture_output=True, text=True,
                          timeout=TIMEOUT_S)
    assert proc.returncode == 9, proc.stderr
    staged = [p for p in survey.iterdir() if p.name.startswith(".results.tmp-")]
    assert len(staged) == 1 and list(staged[0].glob(".wetmap-windows-*"))  # what the kill left
    assert _snapshot(survey / "results") == before
    proc = subprocess.run([sys.executable, "-m", "wetmap_cli.main", "window", str(survey)], capture_output=True,
                          text=True, timeout=TIMEOUT_S)  # any later command that writes the results cleans up
    assert proc.returncode == 0, proc.stderr
    after = _snapshot(survey / "results")
    assert all(after[name] == before[name] for name in before if name != MANIFEST)
    assert _leftovers(survey) == []


def test_every_file_a_run_writes_is_known_as_wetmap_s(sample_run):
    """A results folder whose manifest was lost must still read as wetmap's: every file of a
    full run (map, report, PDF, workbook, CSVs) is in WETMAP_FILES."""
    _, out = sample_run
    written = {p.name for p in out.iterdir() if p.is_file()}
    assert {"summary.json", "map.html", "report.html", "takeoff.xlsx", "core_log.csv", "bill.csv"} <= written
    assert written - outputs.WETMAP_FILES == set()
    (out.parent / "copy").mkdir()
    for name in written - {MANIFEST}:
        shutil.copy2(out / name, out.parent / "copy" / name)
    assert is_wetmap_folder(out.parent / "copy")


def test_every_file_compare_writes_is_known_as_wetmap_s(sample_run, tmp_path):
    """The files `wetmap compare` writes (here: the sample against itself) are wetmap's too."""
    from wetmap.compare import compare_results
    from wetmap.export.change import write_change

    _, out = sample_run
    write_change(compare_results(out, out), tmp_path / "change")
    written = {p.name for p in (tmp_path / "change").iterdir() if p.is_file()}
    assert {"change.gpkg", "change.json", "change_map.html", "change_report.html"} <= written
    assert written - outputs.WETMAP_FILES == set()
