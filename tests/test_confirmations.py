"""Tests of wetmap.confirmations.read_confirmations: cores.csv -> judged confirmations.

Rows are numbered as a spreadsheet shows them: the header is row 1 and a blank line
still counts as a row. Each error test checks the file, row and column named in the message.
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pytest

from wetmap.confirmations import Confirmations, read_confirmations
from wetmap.errors import InputFileError

REPO = Path(__file__).resolve().parents[1]


def write(tmp_path: Path, text: str, name: str = "cores.csv") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def error_of(path: Path, **thresholds) -> str:
    with pytest.raises(InputFileError) as err:
        read_confirmations(path, **thresholds)
    message = str(err.value)
    assert str(path) in message, message
    assert len(err.value.problems) == 1 and "\n" not in message
    return message


# --------------------------------------------------------------------------------------
# Judging
# --------------------------------------------------------------------------------------


def test_result_wet_dry_case_insensitive(tmp_path):
    path = write(tmp_path, "id,x,y,result\nC1,1.5,2.5,wet\nC2,3,4,DRY\nC3,5,6, Wet \nC4,7,8,Dry\n")
    conf = read_confirmations(path)
    assert isinstance(conf, Confirmations) and len(conf) == 4
    assert conf.ids == ("C1", "C2", "C3", "C4")
    np.testing.assert_array_equal(conf.wet, [True, False, True, False])
    np.testing.assert_array_equal(conf.xs, [1.5, 3, 5, 7])
    np.testing.assert_array_equal(conf.ys, [2.5, 4, 6, 8])
    assert conf.basis == ("result",) * 4
    assert np.isnan(conf.values).all()


def test_moisture_judged_with_wet_above_pct(tmp_path):
    path = write(tmp_path, "id,x,y,moisture_pct\nC1,0,0,4.9\nC2,0,1,5.0\nC3,0,2,5.1\nC4,0,3,40\n")
    conf = read_confirmations(path, wet_above_pct=5.0)
    np.testing.assert_array_equal(conf.wet, [False, False, True, True])  # wet when *above* the threshold
    np.testing.assert_array_equal(conf.values, [4.9, 5.0, 5.1, 40.0])
    assert conf.basis == ("moisture_pct",) * 4


def test_reading_judged_with_wet_above(tmp_path):
    path = write(tmp_path, "id,x,y,reading\nM1,0,0,12\nM2,0,1,30\nM3,0,2,31.5\n")
    conf = read_confirmations(path, wet_above=30)
    np.testing.assert_array_equal(conf.wet, [False, False, True])
    assert conf.basis == ("reading",) * 3


def test_result_decides_before_a_number_on_the_same_row(tmp_path):
    path = write(tmp_path, "id,x,y,result,moisture_pct,reading\nC1,0,0,dry,50,\nC2,0,1,,2.0,99\nM3,0,2,,,99\n")
    conf = read_confirmations(path, wet_above=30, wet_above_pct=5)
    assert conf.basis == ("result", "moisture_pct", "reading")
    np.testing.assert_array_equal(conf.wet, [False, False, True])


@pytest.mark.parametrize(
    "name, column, key, thresholds",
    [
        ("cores_moisture_no_threshold.csv", "moisture_pct", "wet_above_pct", {"wet_above": 30}),
        (None, "reading", "wet_above", {"wet_above_pct": 5.0}),
    ],
)
def test_missing_threshold_names_row_and_key(tmp_path, invalid, name, column, key, thresholds):
    path = invalid(name) if name else write(tmp_path, "id,x,y,reading\nM1,1.0,2.0,18\n")
    message = error_of(path, **thresholds)
    assert "row 2" in message and f"column '{column}'" in message
    assert f"[cores] {key} is not set" in message and f"add {key} = " in message and "survey.toml" in message


def test_row_without_any_judgement(tmp_path):
    message = error_of(write(tmp_path, "id,x,y,result,reading\nC1,0,0,wet,\nC2,1,1,,\n"), wet_above=3)
    assert "row 3 (id C2)" in message and "no value in result, reading" in message


def test_bad_result_word(tmp_path):
    message = error_of(write(tmp_path, "id,x,y,result\nC1,0,0,soggy\n"))
    assert "row 2, column 'result' = 'soggy'" in message and "expected wet, damp or dry" in message


@pytest.mark.parametrize("rule, damp_wet", [("wet", True), ("dry", False)])
def test_graded_core_log_damp_counts_as_chosen(tmp_path, rule, damp_wet):
    """The trade's grades wet / damp / dry (common practice); damp counts as the survey says."""
    path = write(tmp_path, "id,x,y,result,layers,thickness_mm,photo\n"
                           "C1,0,0,wet,membrane / 80 mm PIR / deck,80,photos/c1.png\n"
                           "C2,1,1,Damp,membrane / 80 mm PIR / deck,60,\n"
                           "C3,2,2,dry,,,\n")
    conf = read_confirmations(path, damp_counts_as=rule)
    assert conf.grade == ("wet", "damp", "dry")
    assert conf.wet.tolist() == [True, damp_wet, False]
    assert conf.extra["thickness_mm"] == ("80", "60", "") and conf.extra["photo"][0] == "photos/c1.png"
    assert conf.damp_counts_as == rule


def test_wet_dry_log_without_grades_still_reads(tmp_path):
    conf = read_confirmations(write(tmp_path, "id,x,y,result\nC1,0,0,wet\nC2,1,1,dry\n"))
    assert conf.grade == ("wet", "dry") and conf.wet.tolist() == [True, False]


@pytest.mark.parametrize("value", ["thick", "0", "-5", "2500"])
def test_bad_thickness_named_with_its_fix(tmp_path, value):
    message = error_of(write(tmp_path, f"id,x,y,result,thickness_mm\nC1,0,0,wet,{value}\n"))
    assert "row 2, column 'thickness_mm'" in message and ("millimetres" in message or "expected a number" in message)


# --------------------------------------------------------------------------------------
# File layout
# --------------------------------------------------------------------------------------


def test_semicolon_and_decimal_comma(tmp_path):
    """The European spreadsheet export: ';' between fields, ',' as the decimal mark."""
    path = write(tmp_path, "id;x;y;moisture_pct;notes\nC1;512312,5;5463108,25;7,5;saturated, at the deck\n"
                           "C2;512331;5463120;2,0;dry\n")
    conf = read_confirmations(path, wet_above_pct=5.0)
    np.testing.assert_array_equal(conf.xs, [512312.5, 512331.0])
    np.testing.assert_array_equal(conf.ys, [5463108.25, 5463120.0])
    np.testing.assert_array_equal(conf.values, [7.5, 2.0])
    np.testing.assert_array_equal(conf.wet, [True, False])
    assert conf.extra == {"notes": ("saturated, at the deck", "dry")}


def test_decimal_comma_in_a_comma_separated_file(invalid):
    """``5,5`` in a comma file is two values: refused, not read as 5 with the 5 dropped."""
    path = invalid("cores_decimal_comma_in_comma_file.csv")
    message = error_of(path, wet_above_pct=5.0)
    assert "row 2 has 5 values but the header has 4 columns" in message and "decimal comma" in message


def test_trailing_empty_field_accepted(tmp_path):
    conf = read_confirmations(write(tmp_path, "id,x,y,result\nC1,0,0,wet,\n"))
    assert conf.ids == ("C1",)


@pytest.mark.parametrize("missing", ["id", "x", "y"])
def test_missing_required_column(tmp_path, missing):
    header = ",".join(c for c in ("id", "x", "y", "result") if c != missing)
    message = error_of(write(tmp_path, header + "\n" + ",".join(["1"] * 3) + "\n"))
    assert f"column '{missing}' is missing" in message and "id,x,y" in message


def test_missing_column_file(invalid):
    message = error_of(invalid("cores_missing_x.csv"))
    assert "column 'x' is missing" in message


def test_no_judgement_column(tmp_path):
    message = error_of(write(tmp_path, "id,x,y,notes\nC1,0,0,hello\n"))
    assert "no judgement column" in message and "'result'" in message and "'moisture_pct'" in message


@pytest.mark.parametrize(
    "text, where",
    [
        ("id,x,y,result\nC1,0,0,wet\nC2,3.0,four,dry\n", "row 3, column 'y' = 'four'"),
        ("id,x,y,result\nC1,1e3x,0,wet\n", "row 2, column 'x' = '1e3x'"),
        ("id,x,y,result\nC1,,0,wet\n", "row 2, column 'x' = ''"),
        ("id,x,y,result\nC1,nan,0,wet\n", "row 2, column 'x' = 'nan'"),
        ("id,x,y,moisture_pct\nC1,0,0,12%\n", "row 2, column 'moisture_pct' = '12%'"),
    ],
)
def test_bad_number_names_row_and_column(tmp_path, text, where):
    message = error_of(write(tmp_path, text), wet_above_pct=5)
    assert where in message and "expected a" in message and "number" in message


def test_bad_number_file(invalid):
    message = error_of(invalid("cores_bad_number.csv"))
    assert "row 3, column 'y' = 'four': expected a number" in message


def test_duplicate_id(invalid):
    message = error_of(invalid("cores_duplicate_id.csv"))
    assert "row 4, column 'id' = 'C1' repeats" in message and "unique" in message


def test_empty_id(tmp_path):
    message = error_of(write(tmp_path, "id,x,y,result\n,0,0,wet\n"))
    assert "row 2, column 'id' is empty" in message


def test_repeated_header_column(tmp_path):
    message = error_of(write(tmp_path, "id,x,y,result,result\nC1,0,0,wet,dry\n"))
    assert "column 'result' appears twice" in message


def test_blank_lines_skipped_and_rows_counted_as_lines(tmp_path, invalid):
    conf = read_confirmations(write(tmp_path, "id,x,y,result\n\nC1,0,0,wet\n   \n,,,\n\nC2,1,1,dry\n\n"))
    assert conf.ids == ("C1", "C2")
    # the bad word is on line 4 of the file (a spreadsheet's row 4), after a blank line 3
    message = error_of(invalid("cores_bad_result_after_blank.csv"))
    assert "row 4, column 'result' = 'moist'" in message


def test_extra_columns_kept_as_text(tmp_path):
    path = write(tmp_path, "id,x,y,result,depth_mm,material,notes\nC1,0,0,wet,75,perlite,\"wet, at deck\"\n"
                           "C2,1,1,dry,90,,\n")
    conf = read_confirmations(path)
    assert conf.extra == {"depth_mm": ("75", "90"), "material": ("perlite", ""), "notes": ("wet, at deck", "")}


def test_header_only_gives_no_confirmations(tmp_path):
    conf = read_confirmations(write(tmp_path, "id,x,y,result\n"))
    assert len(conf) == 0 and conf.xs.shape == (0,) and conf.wet.dtype == bool


def test_empty_file(tmp_path):
    message = error_of(write(tmp_path, ""))
    assert "is empty" in message and "id,x,y" in message


def test_byte_order_mark_and_spaces_in_header(tmp_path):
    path = tmp_path / "cores.csv"
    path.write_text("id, x , y,result\nC1,1,2,wet\n", encoding="utf-8-sig")
    assert read_confirmations(path).xs.tolist() == [1.0]


def test_not_utf8(tmp_path):
    path = tmp_path / "cores.csv"
    path.write_bytes("id,x,y,result,notes\nC1,1,2,wet,Dämmung nass\n".encode("cp1252"))
    message = error_of(path)
    assert "not UTF-8" in message


def test_bundled_sample_cores():
    """The sample's cores (written by wetmap.demo) read as the plain csv module reads them."""
    path = REPO / "sample_surveys/warehouse_roof/cores.csv"
    with path.open(newline="") as f:
        rows = list(csv.DictReader(f))
    conf = read_confirmations(path)
    assert conf.ids == tuple(r["id"] for r in rows)
    np.testing.assert_array_equal(conf.wet, [r["result"] == "wet" for r in rows])
    np.testing.assert_array_equal(conf.xs, [float(r["x"]) for r in rows])
    assert set(conf.extra) == set(rows[0]) - {"id", "x", "y", "result"}
