"""wetmap.export.forked: a result file written by a forked process beside the caller's work."""

from __future__ import annotations

import os

import pytest

from wetmap.errors import ProcessingError
from wetmap.export import forked


def _write(path, text, *, suffix=""):
    path.write_text(text + suffix, encoding="utf-8")


def test_the_file_is_written_with_its_arguments(tmp_path):
    path = tmp_path / "a.txt"
    wait = forked.write_beside(_write, path, path, "made in the writer", suffix="!")
    wait()
    assert path.read_text(encoding="utf-8") == "made in the writer!"


def _fails(path):
    raise ProcessingError(f"{path.name}: a layout error for the test")


def test_the_writers_own_error_reaches_the_caller(tmp_path):
    with pytest.raises(ProcessingError, match="b.pdf: a layout error for the test"):
        forked.write_beside(_fails, tmp_path / "b.pdf", tmp_path / "b.pdf")()
    assert not (tmp_path / "b.pdf").exists()


@pytest.mark.skipif(not forked.sys.platform.startswith("linux"), reason="written at once where fork is not used")
def test_a_writer_that_dies_without_a_word_is_named(tmp_path):
    with pytest.raises(ProcessingError, match="c.pdf: the process writing it ended with code 3"):
        forked.write_beside(lambda: os._exit(3), tmp_path / "c.pdf")()
