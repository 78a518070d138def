"""report.html: its tables agree with summary.json, its figures are real images, it prints.

The report is parsed with the standard library's ``html.parser``; figures are decoded
with Pillow. The bundled sample (an invented warehouse roof) is run into pytest's tmp
folders; the sample folder itself is never written to.
"""

from __future__ import annotations

import base64
import dataclasses
import html
import io
import json
import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from wetmap.export import report, webmap

SAMPLE = Path(__file__).resolve().parents[1] / "sample_surveys" / "warehouse_roof"


class _Cells(HTMLParser):
    """Collects every element carrying ``data-key`` with its text and the enclosing table/row."""

    def __init__(self) -> None:
        super().__init__()
        self.stack: list[tuple[str, dict]] = []
        self.cells: list[dict] = []  # {key, text, table, section, row_status}
        self.open: list[dict] = []
        self.rows: list[dict] = []  # anomaly rows: {status, area}
        self.images: list[dict] = []
        self._row: dict | None = None
        self._td_index = -1
        self._td_text: list[str] | None = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.stack.append((tag, a))
        if tag == "img":
            self.images.append(a)
        if tag == "tr":
            self._row = {"attrs": a, "cells": []}
        if tag in ("td", "th") and self._row is not None:
            self._td_text = []
        if "data-key" in a:
            table = next((x[1].get("id") for x in reversed(self.stack) if x[0] == "table"), None)
            row = next((x[1] for x in reversed(self.stack) if x[0] == "tr"), {})
            self.open.append({"key": a["data-key"], "text": [], "table": table,
                              "section": row.get("data-section"), "depth": len(self.stack)})

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._row is not None and self._td_text is not None:
            self._row["cells"].append("".join(self._td_text).strip())
            self._td_text = None
        if tag == "tr" and self._row is not None:
            if self._row["attrs"].get("class") == "anomaly":
                self.rows.append(self._row)
            self._row = None
        while self.open and self.open[-1]["depth"] >= len(self.stack):
            c = self.open.pop()
            c["text"] = "".join(c["text"]).strip()
            self.cells.append(c)
        if self.stack:
            self.stack.pop()

    def handle_data(self, data):
        for c in self.open:
            c["text"].append(data)
        if self._td_text is not None:
            self._td_text.append(data)


def _number(text: str) -> float:
    m = re.match(r"^\s*([+-]?[\d,]*\.?\d+)", text)
    assert m, f"not a number: {text!r}"
    return float(m.group(1).replace(",", ""))


def _parse(page: str) -> _Cells:
    p = _Cells()
    p.feed(page)
    return p


def _resolve(summary: dict, key: str):
    value = summary
    for part in key.split("."):
        value = value[part]
    return value


# --------------------------------------------------------------------------------------
# Tables against summary.json
# --------------------------------------------------------------------------------------


def test_report_tables_equal_summary_json(sample_run):
    _, out = sample_run
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    cells = _parse((out / "report.html").read_text(encoding="utf-8")).cells
    checked = set()
    for c in cells:
        if c["table"] == "sections":
            section = next(s for s in summary["sections"] if s["name"] == c["section"])
            expected = section[c["key"]]
        else:
            expected = _resolve(summary, c["key"])
        shown = _number(c["text"])
        if c["text"].endswith("%"):
            shown /= 100.0
            assert shown == pytest.approx(expected, abs=0.00005 + 1e-12), c
        elif isinstance(expected, int):
            assert shown == expected, c
        else:
            assert shown == pytest.approx(expected, abs=0.005 + 1e-9), c  # shown to 0.01
        checked.add((c["table"], c["key"]))
    # every total the contract names is shown in the key figures, and the anomaly totals too
    for key in ("roof_area_m2", "anomaly_count", "wet_area_m2", "confirmed_wet_area_m2", "unverified_area_m2",
                "confirmed_dry_area_m2", "wet_fraction", "repair_area_m2", "boards", "tearoff_area_m2"):
        assert ("key-figures", key) in checked, key
    for key in ("confirmed_wet_area_m2", "unverified_area_m2", "confirmed_dry_area_m2", "wet_area_m2"):
        assert ("anomalies", key) in checked, key
    assert {k for t, k in checked if t == "sections"} >= {"area_m2", "wet_area_m2", "repair_area_m2", "boards"}


def test_anomaly_rows_add_up_to_the_totals(sample_run):
    result, out = sample_run
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    rows = _parse((out / "report.html").read_text(encoding="utf-8")).rows
    assert len(rows) == summary["anomaly_count"] == len(result.anomalies)
    by = {"wet": 0.0, "unverified": 0.0, "dry": 0.0}
    for r in rows:
        by[r["attrs"]["data-status"]] += _number(r["cells"][3])
    n = len(rows)
    assert by["wet"] == pytest.approx(summary["confirmed_wet_area_m2"], abs=0.005 * n + 1e-9)
    assert by["unverified"] == pytest.approx(summary["unverified_area_m2"], abs=0.005 * n + 1e-9)
    assert by["dry"] == pytest.approx(summary["confirmed_dry_area_m2"], abs=0.005 * n + 1e-9)


def test_every_summary_key_is_in_the_report(sample_run):
    """Keys later stages add to summary.json appear in the report too (nothing left out)."""
    _, out = sample_run
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    page = (out / "report.html").read_text(encoding="utf-8")
    for key in summary:
        if key in report._SHOWN_KEYS:
            continue
        if key == "bill":
            assert 'id="bill"' in page or "data-summary-key='bill'" in page
        else:
            assert f"data-summary-key='{key}'" in page, key


# --------------------------------------------------------------------------------------
# Figures
# --------------------------------------------------------------------------------------


def test_figures_are_png_images_of_the_stated_size(sample_run):
    from PIL import Image

    _, out = sample_run
    images = [i for i in _parse((out / "report.html").read_text(encoding="utf-8")).images
              if (i.get("alt") or "").startswith("Figure")]  # photo pairs follow the cores table
    assert len(images) == 3
    expected = [tuple(round(v * report.FIGURE_DPI) for v in size)
                for size in (report._THERMAL_IN, report._HISTOGRAM_IN, report._PLAN_IN)]
    for img, size in zip(images, expected):
        src = img["src"]
        assert src.startswith("data:image/png;base64,")
        im = Image.open(io.BytesIO(base64.b64decode(src.split(",", 1)[1])))
        im.load()
        assert im.format == "PNG"
        assert im.size == (int(img["width"]), int(img["height"])) == size
        colours = im.convert("RGB").getcolors(maxcolors=1 << 20)
        assert colours is None or len(colours) > 50  # a drawing, not a blank page


# --------------------------------------------------------------------------------------
# Content, cautions, print rules
# --------------------------------------------------------------------------------------


def test_report_carries_method_warnings_cautions_and_signature(sample_run):
    result, out = sample_run
    page = (out / "report.html").read_text(encoding="utf-8")
    text = html.unescape(re.sub(r"<[^>]+>", " ", page))
    text = re.sub(r"\s+", " ", text)
    assert webmap.remote_references(page) == [] and "http://" not in page and "https://" not in page
    for w in result.warnings:
        assert re.sub(r"\s+", " ", w) in text
    r = result.radiometry
    for words in ("Camera band", "Emissivity", "Reflected apparent temperature", r.reflected_source,
                  "Atmospheric transmittance", "Threshold", "Dry background scale",
                  "apparent thermal anomalies, not measured moisture", "invasive verification", "asbestos",
                  "Boatyards", "licensed", "fall protection", "Signature", "Surveyor (name)",
                  result.survey.survey.site, result.survey.survey.date):
        assert words in text, words
    assert "@page" in page and "break-inside: avoid" in page and "display: table-header-group" in page


def test_report_without_cores(sample_run):
    """A run with no confirmations: every anomaly unverified, the report says so."""
    from wetmap.verdicts import Verdicts
    from wetmap.confirmations import Confirmations

    result, _ = sample_run
    bare = dataclasses.replace(
        result,
        anomalies=tuple(dataclasses.replace(a, status="unverified", confirmations=()) for a in result.anomalies),
        confirmations=Confirmations.empty(), confirmation_delta_c=np.empty(0),
        verdicts=Verdicts(status=("unverified",) * len(result.anomalies),
                          confirmation_ids=((),) * len(result.anomalies), anomaly_of=np.empty(0, dtype=np.intp)),
        suggested_cores=(),
        photos=tuple(ph for ph in result.photos if ph[0].core is None),  # no cores: no core photos
    )
    page = report.build_report(bare, dpi=60)
    assert "No cores or readings were given" in page
    assert len(re.findall(r'class="anomaly" data-status="unverified"', page)) == len(result.anomalies)
    assert webmap.remote_references(webmap.build_map(bare)) == []


def test_report_shows_threshold_check_range_and_suggested_cores(sample_run):
    """Issue: the report shows the wet-area range, the threshold check and the suggestions,
    with the same figures as summary.json."""
    out = sample_run[1]
    page = (out / "report.html").read_text(encoding="utf-8")
    summary = json.loads((out / "summary.json").read_text())
    assert "id='threshold-check'" in page
    lo, hi = summary["threshold_check"]["range_c"]
    assert f"{lo:+.2f} to {hi:+.2f} °C" in page
    r = summary["wet_area_range"]
    assert f"{r['low_m2']:,.2f} to {r['high_m2']:,.2f} m²" in page
    rows = re.findall(r"<tr><td class='num'>\d+</td>", page.split("id='suggested-cores'")[1].split("</table>")[0])
    assert len(rows) == len(summary["suggested_cores"]) > 0


def test_table_anomalies_keeps_cored_then_largest_in_id_order():
    from types import SimpleNamespace as A

    anomalies = [A(id=1, area_m2=5.0, status="unverified", confirmations=()),
                 A(id=2, area_m2=1.0, status="wet", confirmations=("C1",)),
                 A(id=3, area_m2=9.0, status="unverified", confirmations=()),
                 A(id=4, area_m2=0.5, status="dry", confirmations=("C2",)),
                 A(id=5, area_m2=7.0, status="unverified", confirmations=()),
                 A(id=6, area_m2=0.7, status="unverified", confirmations=("M1",))]
    assert [a.id for a in report.table_anomalies(anomalies, 6)] == [1, 2, 3, 4, 5, 6]
    assert [a.id for a in report.table_anomalies(anomalies, 4)] == [2, 3, 4, 6]  # cored, then the largest
    assert [a.id for a in report.table_anomalies(anomalies, 5)] == [2, 3, 4, 5, 6]
    assert [a.id for a in report.table_anomalies(anomalies, 2)] == [2, 4, 6]  # cored ones are never left out


def test_long_anomaly_table_points_to_the_full_list(sample_run, monkeypatch):
    """Above MAX_TABLE_ANOMALIES rows the table says where every anomaly is listed; the
    footer still counts them all."""
    result, _ = sample_run
    anomalies = result.anomalies
    cored = [a.id for a in anomalies if a.confirmations or a.status != "unverified"]
    assert 0 < len(cored) < len(anomalies)  # the sample has cored and uncored anomalies
    monkeypatch.setattr(report, "MAX_TABLE_ANOMALIES", len(cored))
    page = report.build_report(result, dpi=60)
    rows = re.findall(r'<tr class="anomaly" data-status="\w+"><td class="num">(\d+)</td>', page)
    assert [int(r) for r in rows] == cored
    more = len(anomalies) - len(cored)
    assert f"{more:,} more anomalies" in page and "quantities.csv" in page
    assert f'<span data-key="anomaly_count">{len(anomalies)}</span>' in page


def test_long_suggestion_table_keeps_the_most_useful_and_says_where_all_are(sample_run, monkeypatch):
    result, _ = sample_run
    assert len(result.suggested_cores) == 1  # the sample's one suggestion, and two more made up from it
    more = dataclasses.replace(result, suggested_cores=tuple(
        dataclasses.replace(result.suggested_cores[0], reason=f"reason {k}") for k in range(3)))
    monkeypatch.setattr(report, "MAX_TABLE_SUGGESTIONS", 2)
    page = report.build_report(more, dpi=60)
    table = page.split("id='suggested-cores'")[1].split("</table>")[0]
    assert len(re.findall(r"<tr><td class='num'>\d+</td>", table)) == 2
    assert "reason 0" in table and "reason 1" in table and "reason 2" not in table  # the first, most useful
    assert "The 2 most useful of 3 suggestions" in page
