"""Fuzzing the two text parsers a user writes by hand: survey.toml and cores.csv.

For arbitrary text and arbitrary values in the right places, the parser either returns a
valid result or raises a WetmapError whose problems are single lines; never another
exception (a traceback is a bug). Examples are bounded so the file runs in seconds.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from wetmap.confirmations import read_confirmations
from wetmap.errors import WetmapError
from wetmap.survey import _KEYS, load_survey

FUZZ = settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])

BASE = {
    "survey": {"title": "Fuzzed roof", "kind": "roof", "crs": "local"},
    "conditions": {"air_c": 6.0, "humidity_pct": 65, "sky": "clear"},
    "camera": {"emissivity": 0.94},
    "plan": {"outline": "plan/outline.geojson"},
    "mosaic": [{"path": "thermal/pass1.tif", "units": "C"}],
}


def toml_value(value) -> str:
    """A TOML literal for a value of the strategies below."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)  # JSON string escapes are TOML basic-string escapes (bad ones: a TOML error)
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    raise TypeError(value)  # pragma: no cover


def toml_text(doc: dict) -> str:
    out = []
    for table, body in doc.items():
        entries = body if isinstance(body, list) else [body]
        for entry in entries:
            out.append(f"[[{table}]]" if isinstance(body, list) else f"[{table}]")
            out.extend(f"{json.dumps(key)} = {toml_value(v)}" for key, v in entry.items())  # quoted keys
            out.append("")
    return "\n".join(out)


scalars = st.one_of(
    st.booleans(),
    st.integers(min_value=-(10 ** 420), max_value=10 ** 420),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=30),
    st.sampled_from(["../../etc/passwd", "/etc/passwd", "a\x00b", "results/x.tif", "plan/outline.geojson",
                     "thermal/pass1.tif", "EPSG:3857", "EPSG:32633", "C", "K", "21:30", "=1+1", "",
                     "line one\nline two", "plan/\r\noutline.geojson"]),
)
values = st.one_of(scalars, st.lists(scalars, max_size=5), st.lists(st.lists(scalars, max_size=4), max_size=5))
table_names = st.sampled_from(sorted(_KEYS))


def prepare(folder: Path, text: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    for name in ("plan/outline.geojson", "thermal/pass1.tif"):
        (folder / name).parent.mkdir(parents=True, exist_ok=True)
        (folder / name).touch()
    (folder / "survey.toml").write_text(text, encoding="utf-8", errors="surrogatepass")
    return folder


def assert_clean(fn, *args, **kwargs):
    try:
        return fn(*args, **kwargs)
    except WetmapError as err:
        assert err.problems
        for p in err.problems:
            assert isinstance(p, str) and p and "\n" not in p and "\r" not in p, repr(p)
        return None


@FUZZ
@given(edits=st.lists(st.tuples(table_names, st.data()), max_size=4), data=st.data())
def test_survey_toml_with_arbitrary_values(tmp_path_factory, edits, data):
    doc = json.loads(json.dumps(BASE))
    for table, draw in edits:
        key = draw.draw(st.one_of(st.sampled_from(_KEYS[table] + ("bogus_key",)), st.text(min_size=1, max_size=8)))
        value = draw.draw(values)
        body = doc.setdefault(table, [{}] if table in ("mosaic", "frame") else {})
        (body[0] if isinstance(body, list) else body)[key] = value
    folder = prepare(tmp_path_factory.mktemp("fuzz"), toml_text(doc))
    assert_clean(load_survey, folder)


@FUZZ
@given(text=st.text(max_size=400))
def test_survey_toml_arbitrary_text(tmp_path_factory, text):
    folder = prepare(tmp_path_factory.mktemp("fuzz"), text)
    assert_clean(load_survey, folder)


cells = st.one_of(
    st.text(max_size=12),
    st.sampled_from(["wet", "dry", "WET", "damp", "1,5", "nan", "inf", "-1e400", "1e400", "=SUM(A1)", "\x00",
                     '"', '""', "5.5", "12", "C1"]),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
)


@FUZZ
@given(header=st.lists(st.sampled_from(["id", "x", "y", "result", "moisture_pct", "reading", "notes", ""]),
                       min_size=0, max_size=7),
       rows=st.lists(st.lists(cells, max_size=8), max_size=6),
       delimiter=st.sampled_from([",", ";"]),
       wet_above=st.one_of(st.none(), st.floats(allow_nan=False, allow_infinity=False)),
       wet_above_pct=st.one_of(st.none(), st.floats(min_value=0, max_value=100)))
def test_cores_csv_fuzz(tmp_path_factory, header, rows, delimiter, wet_above, wet_above_pct):
    path = tmp_path_factory.mktemp("cores") / "cores.csv"
    lines = [delimiter.join(header)] + [delimiter.join(r) for r in rows]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8", errors="surrogatepass")
    got = assert_clean(read_confirmations, path, wet_above=wet_above, wet_above_pct=wet_above_pct)
    if got is not None:
        assert len(got.ids) == len(got.xs) == len(got.ys) == len(got.wet)
        assert all(math.isfinite(v) for v in (*got.xs, *got.ys))


@FUZZ
@given(raw=st.binary(max_size=300))
def test_cores_csv_arbitrary_bytes(tmp_path_factory, raw):
    path = tmp_path_factory.mktemp("cores") / "cores.csv"
    path.write_bytes(raw)
    assert_clean(read_confirmations, path, wet_above=30.0, wet_above_pct=5.0)


@pytest.mark.parametrize("name", ["cores_many_problems.csv"])
def test_known_bad_cores_file_lists_every_problem(invalid, name):
    with pytest.raises(WetmapError) as err:
        read_confirmations(invalid(name), wet_above=None, wet_above_pct=None)
    problems = err.value.problems
    assert len(problems) == 4, problems
    assert any("row 2, column 'x' = 'east'" in p for p in problems)
    assert any("row 3, column 'id' is empty" in p for p in problems)
    assert any("row 4, column 'result' = 'moist'" in p for p in problems)
    assert any("row 5 is judged by column 'moisture_pct'" in p for p in problems)
