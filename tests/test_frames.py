"""Tests of wetmap.frames: reading single frames (TIFF, 16-bit PNG, .npy, CSV matrices).

Fixtures are built in code in pytest's ``tmp_path``; each says what it holds. Reference
readers: ``numpy.loadtxt`` (general-purpose reference library) for CSV matrices, and the
temperature scales' definitions (K = degC + 273.15, degF = degC x 9/5 + 32; SI brochure).
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest

from wetmap.errors import InputFileError, MissingFileError, WetmapError
from wetmap.frames import read_frame, read_matrix_csv

KELVIN = 273.15
#: A small frame of plausible apparent temperatures, degC (3 rows x 4 columns).
FRAME_C = np.array([[4.25, 4.5, 4.75, 5.0], [3.5, -1.25, 12.0, 6.5], [0.0, 2.5, 7.75, 9.125]])


def _write_tif(path: Path, data: np.ndarray, **profile) -> Path:
    import rasterio
    from rasterio.errors import NotGeoreferencedWarning

    bands = data[None] if data.ndim == 2 else data
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        with rasterio.open(path, "w", driver=profile.pop("driver", "GTiff"), width=bands.shape[2],
                           height=bands.shape[1], count=bands.shape[0], dtype=bands.dtype, **profile) as dst:
            dst.write(bands)
    return path


def _one_line(err: pytest.ExceptionInfo, path: Path) -> str:
    """The single problem line, which must name the file."""
    assert isinstance(err.value, WetmapError)
    assert len(err.value.problems) == 1
    line = err.value.problems[0]
    assert "\n" not in line and str(path) in line
    return line


# ----- CSV matrices -----------------------------------------------------------------------


def test_csv_comma_matches_numpy_loadtxt(tmp_path):
    """Comma-delimited: the same matrix numpy.loadtxt reads (reference library)."""
    p = tmp_path / "f.csv"
    np.savetxt(p, FRAME_C, delimiter=",", fmt="%.3f")
    assert np.array_equal(read_matrix_csv(p), np.loadtxt(p, delimiter=","))
    img = read_frame(p, units="C")
    assert img.shape == (3, 4) and img.values_k.dtype == np.float32
    assert np.allclose(img.values_k, FRAME_C + KELVIN, atol=1e-4)


@pytest.mark.parametrize("text", [
    "4,25;4,5;4,75;5\n3,5;-1,25;12;6,5\n0;2,5;7,75;9,125\n",          # semicolon, decimal comma
    "4.25;4.5;4.75;5\n3.5;-1.25;12;6.5\n0;2.5;7.75;9.125\n",          # semicolon, decimal point
    "4,25;4,5;4,75;5;\r\n3,5;-1,25;12;6,5;\r\n0;2,5;7,75;9,125;\r\n",  # trailing delimiter, CRLF
    "4.25\t4.5\t4.75\t5\n3.5\t-1.25\t12\t6.5\n0\t2.5\t7.75\t9.125\n",  # tab
    " 4.25  4.5 4.75 5\n3.5 -1.25 12 6.5\n0 2.5   7.75 9.125\n\n\n",     # blanks, trailing blank lines
    "\ufeff4.25,4.5,4.75,5\n3.5,-1.25,12,6.5\n0,2.5,7.75,9.125",       # byte-order mark, no final newline
])
def test_csv_dialects_read_the_same_matrix(tmp_path, text):
    p = tmp_path / "f.csv"
    p.write_bytes(text.encode("utf-8"))
    assert np.array_equal(read_matrix_csv(p), FRAME_C)


def test_csv_empty_cells_are_no_data(tmp_path):
    p = tmp_path / "f.csv"
    p.write_text("1,,3\nnan,5,NaN\n", encoding="utf-8")
    m = read_matrix_csv(p)
    assert np.array_equal(np.isnan(m), [[False, True, False], [True, False, True]])
    assert np.isnan(read_frame(p, units="C").values_k[0, 1])


@pytest.mark.parametrize("text, expected", [
    ("frame 1 of 3\n1,2\n3,4\n", 'line 1 (image row 0), column 1: "frame" is not a number'),
    ("Frame;1\n1;2\n", 'line 1 (image row 0), column 1: "Frame" is not a number; expected a matrix of numbers only (no header lines)'),
    ("1,2,3\n4,5\n6,7,8\n", "line 2 (image row 1): has 2 values, line 1 has 3"),
    ("1;2;3\n4;5;x7\n", 'line 2 (image row 1), column 3: "x7" is not a number'),
    ("1,2\n\n3,4\n", "line 2 (image row 1): is empty inside the matrix"),
    ("1.5,2,3\n4,5,2,5\n", "line 2 (image row 1): has 4 values, line 1 has 3"),
    ("", "is empty"),
    ("1,2\n3,4,5,6e\n", 'line 2 (image row 1), column 4: "6e" is not a number'),
])
def test_malformed_csv_gives_one_line_naming_file_and_row(tmp_path, text, expected):
    p = tmp_path / "bad.csv"
    p.write_text(text, encoding="utf-8")
    with pytest.raises(InputFileError) as err:
        read_frame(p, units="C")
    assert expected in _one_line(err, p)


def test_csv_quoted_decimal_commas_in_a_comma_file(tmp_path):
    p = tmp_path / "q.csv"
    p.write_text('"4,5","5",6\n"1,25",2,"3,0"\n', encoding="utf-8")
    assert np.array_equal(read_matrix_csv(p), [[4.5, 5, 6], [1.25, 2, 3]])


def test_csv_decimal_comma_with_comma_delimiter_is_explained(tmp_path):
    p = tmp_path / "bad.csv"
    p.write_text('"4,5,1",5\n', encoding="utf-8")
    with pytest.raises(InputFileError) as err:
        read_matrix_csv(p)
    assert "a decimal comma needs ';'" in _one_line(err, p)


def test_binary_file_named_csv_is_refused(tmp_path):
    p = tmp_path / "f.csv"
    p.write_bytes(b"\x89PNG\r\n\x1a\n\x00\xff\xfe")
    with pytest.raises(InputFileError) as err:
        read_frame(p, units="C")
    assert "not a text file" in _one_line(err, p)


# ----- TIFF -------------------------------------------------------------------------------


def test_float_tiff_without_transform(tmp_path):
    p = _write_tif(tmp_path / "f.tif", FRAME_C.astype(np.float32))
    img = read_frame(p, units="C")
    assert np.allclose(img.values_k, FRAME_C + KELVIN, atol=1e-4)
    assert img.notes == ()


def test_tiff_with_transform_is_read_and_the_transform_noted(tmp_path):
    from affine import Affine

    p = _write_tif(tmp_path / "f.tiff", FRAME_C.astype(np.float32), transform=Affine(0.1, 0, 5, 0, -0.1, 9),
                   crs="EPSG:32633", nodata=-9999.0)
    img = read_frame(p, units="C")
    assert np.allclose(img.values_k, FRAME_C + KELVIN, atol=1e-4)
    assert len(img.notes) == 1 and "ignores" in img.notes[0] and "[[mosaic]]" in img.notes[0]


def test_tiff_nodata_becomes_nan_and_integer_counts_scale(tmp_path):
    """uint16 counts of 0.01 K with nodata 0: value = raw * 0.01 - 273.15 degC."""
    raw = np.rint((FRAME_C + KELVIN) / 0.01).astype(np.uint16)
    raw[1, 1] = 0
    p = _write_tif(tmp_path / "f.tif", raw, nodata=0)
    img = read_frame(p, units="C", scale=0.01, offset=-KELVIN)
    assert np.isnan(img.values_k[1, 1])
    ok = np.ones_like(FRAME_C, dtype=bool)
    ok[1, 1] = False
    assert np.allclose(img.values_k[ok], (FRAME_C + KELVIN)[ok], atol=0.006)


def test_colour_tiff_is_refused(tmp_path):
    p = _write_tif(tmp_path / "rgb.tif", np.zeros((3, 4, 5), np.uint8), photometric="RGB")
    with pytest.raises(InputFileError) as err:
        read_frame(p, units="C")
    assert "3-band (colour) image" in _one_line(err, p)


def test_truncated_tiff_gives_one_line(tmp_path):
    good = _write_tif(tmp_path / "good.tif", np.full((64, 64), 280.0, np.float32))
    p = tmp_path / "cut.tif"
    p.write_bytes(good.read_bytes()[:600])
    with pytest.raises(InputFileError) as err:
        read_frame(p, units="K")
    assert "cannot be read as a TIFF" in _one_line(err, p)


def test_missing_file(tmp_path):
    p = tmp_path / "nope.npy"
    with pytest.raises(MissingFileError) as err:
        read_frame(p, units="C")
    assert "not found" in _one_line(err, p)


# ----- 16-bit PNG -------------------------------------------------------------------------


def test_png_16_bit_counts_with_scale_and_offset(tmp_path):
    """16-bit counts of 0.01 K: raw * 0.01 + (-273.15) degC = the frame, to the count."""
    raw = np.rint((FRAME_C + KELVIN) / 0.01).astype(np.uint16)
    p = _write_tif(tmp_path / "f.png", raw, driver="PNG")
    img = read_frame(p, units="C", scale=0.01, offset=-KELVIN)
    assert np.allclose(img.values_k, FRAME_C + KELVIN, atol=0.006)


def test_png_without_scale_is_implausible(tmp_path):
    """Raw counts read as degC (no scale/offset given): median about 27,700 degC, refused."""
    raw = np.rint((FRAME_C + KELVIN) / 0.01).astype(np.uint16)
    p = _write_tif(tmp_path / "f.png", raw, driver="PNG")
    with pytest.raises(InputFileError) as err:
        read_frame(p, units="C")
    line = _one_line(err, p)
    assert "not plausible" in line and "scale and offset" in line


@pytest.mark.parametrize("data, expected", [
    (np.full((4, 5), 120, np.uint8), "8-bit PNG is a picture"),
    (np.zeros((3, 4, 5), np.uint8), "3-band (colour) image"),
])
def test_picture_pngs_are_refused(tmp_path, data, expected):
    p = _write_tif(tmp_path / "pic.png", data, driver="PNG")
    with pytest.raises(InputFileError) as err:
        read_frame(p, units="C", scale=0.01, offset=-KELVIN)
    assert expected.replace("8-bit", "uint8") in _one_line(err, p) or expected in _one_line(err, p)


# ----- .npy -------------------------------------------------------------------------------


def test_npy_float_and_units(tmp_path):
    """The same frame stored in K and in degF reads back to the same kelvin (scale definitions)."""
    pk = tmp_path / "k.npy"
    pf = tmp_path / "f.npy"
    np.save(pk, FRAME_C + KELVIN)
    np.save(pf, (FRAME_C * 9.0 / 5.0 + 32.0).astype(np.float32)[None])  # a leading band axis is accepted
    a = read_frame(pk, units="K").values_k
    b = read_frame(pf, units="F").values_k
    assert np.allclose(a, FRAME_C + KELVIN, atol=1e-4) and np.allclose(b, a, atol=1e-3)


@pytest.mark.parametrize("data, expected", [
    (np.zeros((2, 3, 4)), "expected a 2-D array"),
    (np.ones((3, 3), bool), "expected real numbers"),
    (np.array([[1 + 2j, 3], [4, 5]]), "expected real numbers"),
    (np.full((3, 3), np.nan), "holds no valid values"),
    (np.full((1, 9), 5.0), "a frame needs at least 2 x 2"),
])
def test_bad_npy_gives_one_line(tmp_path, data, expected):
    p = tmp_path / "bad.npy"
    np.save(p, data)
    with pytest.raises(InputFileError) as err:
        read_frame(p, units="C")
    assert expected in _one_line(err, p)


def test_pickled_npy_is_not_unpickled(tmp_path):
    p = tmp_path / "obj.npy"
    np.save(p, np.array([{"a": 1}], dtype=object), allow_pickle=True)
    with pytest.raises(InputFileError) as err:
        read_frame(p, units="C")
    assert "cannot be read as a numpy array" in _one_line(err, p)


def test_truncated_npy(tmp_path):
    p = tmp_path / "cut.npy"
    np.save(p, np.full((50, 50), 5.0))
    p.write_bytes(p.read_bytes()[:300])
    with pytest.raises(InputFileError) as err:
        read_frame(p, units="C")
    _one_line(err, p)


# ----- through the survey -----------------------------------------------------------------

SURVEY = """\
[survey]
title = "Frame reader test"
kind = "roof"
crs = "local"

[conditions]
air_c = 5.0
humidity_pct = 70
reflected_c = -20.0

[camera]
emissivity = 0.94

[plan]
outline = "outline.geojson"

[[frame]]
path = "frames/f.csv"
units = "C"
points = {points}
"""

OUTLINE = ('{"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {}, "geometry": '
           '{"type": "Polygon", "coordinates": [[[0, 0], [4, 0], [4, 3], [0, 3], [0, 0]]]}}]}')


def _survey(tmp_path: Path, csv_text: str, points: str = "[[0, 0, 0.5, 2.5], [3, 0, 3.5, 2.5], "
            "[3, 2, 3.5, 0.5], [0, 2, 0.5, 0.5]]") -> Path:
    folder = tmp_path / "s"
    (folder / "frames").mkdir(parents=True)
    (folder / "outline.geojson").write_text(OUTLINE, encoding="utf-8")
    (folder / "survey.toml").write_text(SURVEY.format(points=points), encoding="utf-8")
    (folder / "frames" / "f.csv").write_text(csv_text, encoding="utf-8")
    return folder


def test_bad_frame_in_a_survey_is_one_clear_line(tmp_path):
    """`wetmap check` and `wetmap run` stop on the bad file with one line naming it and its row."""
    from wetmap.pipeline import check_survey, run_survey

    folder = _survey(tmp_path, "4;5;6;7\n4;5;x;7\n4;5;6;7\n")
    for call in (check_survey, run_survey):
        with pytest.raises(InputFileError) as err:
            call(folder)
        line = _one_line(err, folder / "frames" / "f.csv")
        assert "line 2 (image row 1), column 3" in line
    assert not (folder / "results").exists()


def test_control_point_outside_the_frame_names_the_entry(tmp_path):
    from wetmap.errors import SurveyError
    from wetmap.pipeline import check_survey

    folder = _survey(tmp_path, "4;5;6;7\n4;5;6;7\n4;5;6;7\n",
                     points="[[0, 0, 0.5, 2.5], [3, 0, 3.5, 2.5], [3, 2, 3.5, 0.5], [0, 20, 0.5, 0.5]]")
    with pytest.raises(SurveyError) as err:
        check_survey(folder)
    line = _one_line(err, folder / "survey.toml")
    assert "[[frame]] #1 points: point 4 has [col, row] = [0, 20], outside frames/f.csv (4 x 3 pixels)" in line


def test_degenerate_points_in_a_survey_name_the_entry(tmp_path):
    from wetmap.errors import SurveyError
    from wetmap.pipeline import run_survey

    folder = _survey(tmp_path, "4;5;6;7\n4;5;6;7\n4;5;6;7\n",
                     points="[[0, 0, 0.5, 2.5], [1, 0, 1.5, 2.5], [2, 0, 2.5, 2.5], [3, 0, 3.5, 2.5]]")
    with pytest.raises(SurveyError) as err:
        run_survey(folder)
    line = _one_line(err, folder / "survey.toml")
    assert "[[frame]] #1 points: all 4 points lie on one line in the image" in line
