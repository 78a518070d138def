"""Shared fixtures: the input-side tests (survey, rasters, vectors, confirmations) and one
run of the bundled sample for the session (:func:`sample_run`).

Kept minimal: each fixture builds small files in pytest's ``tmp_path`` and says what
they hold. Known-bad files that read better as files live in ``tests/data/invalid/``
(listed in its README.md); :func:`invalid` gives their paths.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

INVALID = Path(__file__).resolve().parent / "data" / "invalid"
SAMPLE = Path(__file__).resolve().parents[1] / "sample_surveys" / "warehouse_roof"


@pytest.fixture(scope="session")
def sample_run(tmp_path_factory):
    """sample_surveys/warehouse_roof (an invented warehouse) exactly as bundled, run once for the
    session into a temporary results folder: ``(result, results folder)``. Tests read it and
    never write into it."""
    from wetmap.pipeline import run_survey

    out = tmp_path_factory.mktemp("sample") / "results"
    return run_survey(SAMPLE, out=out), out


@pytest.fixture
def invalid():
    """``invalid(name)`` -> path of a known-bad file in tests/data/invalid/ (which must exist)."""

    def path(name: str) -> Path:
        p = INVALID / name
        assert p.is_file(), f"missing test file {p}"
        return p

    return path


@pytest.fixture
def make_survey(tmp_path):
    """``make_survey(toml, files)`` -> a survey folder.

    Writes the text ``toml`` as ``survey.toml`` in a fresh folder under ``tmp_path`` and
    creates each path of ``files`` (relative to the folder) as an empty file (load_survey
    only checks that the files it names exist). Returns the folder.
    """
    count = [0]

    def make(toml: str, files: tuple[str, ...] = ()) -> Path:
        count[0] += 1
        folder = tmp_path / f"survey{count[0]}"
        folder.mkdir()
        (folder / "survey.toml").write_text(toml, encoding="utf-8")
        for name in files:
            (folder / name).parent.mkdir(parents=True, exist_ok=True)
            (folder / name).touch()
        return folder

    return make


@pytest.fixture
def write_tif():
    """``write_tif(path, data, *, transform=None, crs=None, nodata=None, **profile)`` -> path.

    Writes ``data`` (2-D: one band; 3-D: bands first) as a GeoTIFF with exactly the given
    transform (``None``: no geo-transform at all), CRS and nodata; extra keywords go to the
    rasterio profile (``tiled``, ``compress``, ``photometric``, ...).
    """
    import warnings

    import rasterio
    from rasterio.errors import NotGeoreferencedWarning

    def write(path: Path, data: np.ndarray, *, transform=None, crs=None, nodata=None, **profile) -> Path:
        data = np.asarray(data)
        bands = data[None] if data.ndim == 2 else data
        kwargs = dict(driver="GTiff", width=bands.shape[2], height=bands.shape[1], count=bands.shape[0],
                      dtype=bands.dtype, crs=crs, nodata=nodata, **profile)
        if transform is not None:
            kwargs["transform"] = transform
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            with rasterio.open(path, "w", **kwargs) as dst:
                dst.write(bands)
        return path

    return write
