"""The practitioner's deliverables: report.pdf, the [report] client block, imperial units.

The bundled sample (an invented warehouse roof) is copied with an invented client block
and run into pytest's tmp folders. The PDF is read back with ``pypdf``; report.html is
parsed with the standard library's ``html.parser``.
"""

from __future__ import annotations

import dataclasses
import io
import json
import re
import shutil
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from wetmap.errors import SurveyError
from wetmap.pipeline import run_survey
from wetmap.survey import load_survey

pypdf = pytest.importorskip("pypdf")

SAMPLE = Path(__file__).resolve().parents[1] / "sample_surveys" / "warehouse_roof"

#: Exact conversion factors (NIST SP 811, appendix B): 1 ft = 0.3048 m, 1 mph = 0.44704 m/s.
M_PER_FT = 0.3048
M2_PER_FT2 = 0.09290304
M_S_PER_MPH = 0.44704

CLIENT = """
[report]
client = "Invented Holdings Ltd (invented)"
address = "1 Invented Way, Nowhere (invented)"
job_number = "J-0042"
company = "Invented Roof Consultants (invented)"
logo = "plan/logo.png"
revision = "B"
issue_date = 2024-11-20
paper = "Letter"
units = "imperial"
"""


def _weasyprint_works() -> bool:
    try:
        import weasyprint  # noqa: F401
    except (ImportError, OSError):
        return False
    return True


needs_pdf = pytest.mark.skipif(not _weasyprint_works(), reason="WeasyPrint or the Pango library is not installed")


def copy_sample(dest: Path, extra: str = "", repair_extra: str = "") -> Path:
    """The sample's inputs copied to ``dest`` with ``extra`` appended to survey.toml."""
    dest.mkdir(parents=True, exist_ok=True)
    for name in ("plan", "thermal"):
        shutil.copytree(SAMPLE / name, dest / name)
    shutil.copy(SAMPLE / "cores.csv", dest / "cores.csv")
    if (SAMPLE / "photos").is_dir():  # the core log's photos and photos.csv (invented images)
        shutil.copytree(SAMPLE / "photos", dest / "photos")
        shutil.copy(SAMPLE / "photos.csv", dest / "photos.csv")
    text = (SAMPLE / "survey.toml").read_text(encoding="utf-8")
    if repair_extra:
        text = text.replace("[repair]\n", "[repair]\n" + repair_extra)
    (dest / "survey.toml").write_text(text + extra, encoding="utf-8")
    return dest


def _logo(path: Path) -> None:
    from PIL import Image

    Image.new("RGB", (120, 40), (0, 114, 178)).save(path)


@pytest.fixture(scope="module")
def imperial_run(tmp_path_factory):
    folder = copy_sample(tmp_path_factory.mktemp("deliver") / "survey", CLIENT)
    _logo(folder / "plan" / "logo.png")
    out = folder / "results"
    return run_survey(folder, out=out), out


@pytest.fixture
def metric_run(sample_run):
    """The sample exactly as bundled, run once for the session (conftest.py)."""
    return sample_run


def _pdf(path: Path):
    data = path.read_bytes()
    assert data.startswith(b"%PDF-")
    return pypdf.PdfReader(io.BytesIO(data))


def _text(reader) -> str:
    return "\n".join(p.extract_text() for p in reader.pages)


# --------------------------------------------------------------------------------------
# report.pdf
# --------------------------------------------------------------------------------------


@needs_pdf
def test_pdf_metric_sample_key_figures_and_pages(metric_run):
    _, out = metric_run
    reader = _pdf(out / "report.pdf")
    assert 6 <= len(reader.pages) <= 20
    box = reader.pages[0].mediabox  # A4 by default: 210 x 297 mm = 595.3 x 841.9 pt (ISO 216)
    assert float(box.width) == pytest.approx(210 / 25.4 * 72, abs=1) and float(box.height) == pytest.approx(
        297 / 25.4 * 72, abs=1)
    text = _text(reader)
    s = json.loads((out / "summary.json").read_text())
    html_text = (out / "report.html").read_text(encoding="utf-8")
    for key in ("roof_area_m2", "wet_area_m2", "confirmed_wet_area_m2", "unverified_area_m2", "repair_area_m2",
                "tearoff_area_m2"):
        shown = f"{s[key]:,.2f} m²"
        assert shown in text, key  # the same figure as report.html and summary.json
        assert f'data-key="{key}">{shown}' in html_text
    assert f"Anomalies found {s['anomaly_count']}" in text
    assert "Thermal survey report: Invented warehouse roof" in reader.pages[0].extract_text()
    # the figures are images in the PDF (three figures at least, all drawn by matplotlib)
    assert any(len(p.images) >= 3 for p in reader.pages)


@needs_pdf
def test_pdf_cover_holds_client_block_letter_paper(imperial_run):
    _, out = imperial_run
    reader = _pdf(out / "report.pdf")
    assert 6 <= len(reader.pages) <= 20
    box = reader.pages[0].mediabox  # US Letter: 8.5 x 11 in = 612 x 792 pt (ANSI/ASME Y14.1)
    assert float(box.width) == pytest.approx(612, abs=1) and float(box.height) == pytest.approx(792, abs=1)
    cover = reader.pages[0].extract_text()
    for text in ("Invented Holdings Ltd (invented)", "1 Invented Way, Nowhere (invented)", "J-0042",
                 "Invented Roof Consultants (invented)", "2024-11-20", "Report revision"):
        assert text in cover
    assert "Key figures" not in cover  # the cover stands alone
    # the running head on later pages names the job and revision
    assert "Job J-0042 · Rev. B" in reader.pages[2].extract_text()


def test_report_html_cover_and_logo(imperial_run):
    _, out = imperial_run
    page = (out / "report.html").read_text(encoding="utf-8")
    cover = page[page.index("id='cover'"):page.index("id='s-key'")]
    assert "Invented Holdings Ltd (invented)" in cover and "J-0042" in cover
    assert 'class="logo" src="data:image/png;base64,' in cover  # embedded: the file works offline
    assert "src=\"http" not in page


# --------------------------------------------------------------------------------------
# Imperial units
# --------------------------------------------------------------------------------------


class _Converted(HTMLParser):
    """Every cell with ``data-metric``: (table id, unit header or suffix, shown text, metric value)."""

    def __init__(self) -> None:
        super().__init__()
        self.tables: list[str | None] = []
        self.cells: list[dict] = []
        self._cell: dict | None = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "table":
            self.tables.append(a.get("id"))
        if tag == "td" and "data-metric" in a:
            self._cell = {"table": self.tables[-1] if self.tables else None, "metric": float(a["data-metric"]),
                          "key": a.get("data-key"), "text": ""}

    def handle_endtag(self, tag):
        if tag == "table" and self.tables:
            self.tables.pop()
        if tag == "td" and self._cell is not None:
            self.cells.append(self._cell)
            self._cell = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell["text"] += data


def _number(text: str) -> float:
    return float(re.match(r"\s*([-+]?[\d,]*\.?\d+)", text).group(1).replace(",", ""))


def test_imperial_figures_convert_back_to_metric(imperial_run):
    result, out = imperial_run
    page = (out / "report.html").read_text(encoding="utf-8")
    parser = _Converted()
    parser.feed(page)
    s = json.loads((out / "summary.json").read_text())
    cells = parser.cells
    assert len(cells) > 20
    tables = {c["table"] for c in cells}
    assert {"key-figures", "anomalies", "quantities", "sections"} <= tables
    for c in cells:
        shown = _number(c["text"])
        if "ft²" in c["text"] or c["table"] in ("anomalies", "sections"):  # an area (sq ft, NIST SP 811)
            assert shown * M2_PER_FT2 == pytest.approx(c["metric"], abs=0.005 * M2_PER_FT2 + 1e-9), c
            m = re.search(r"\(([\d,.]+) squares\)", c["text"])
            if m:  # a roofing square is 100 ft2 (common practice)
                assert _number(m.group(1)) * 100 * M2_PER_FT2 == pytest.approx(c["metric"], abs=0.005 * 100 * M2_PER_FT2)
        else:  # a length in ft
            assert c["text"].strip().endswith("ft"), c
            assert shown * M_PER_FT == pytest.approx(c["metric"], abs=0.005 * M_PER_FT), c
        if c["key"] and c["table"] == "key-figures" and "." not in c["key"]:
            assert c["metric"] == pytest.approx(s[c["key"]])
    # no metric-only area or length left in the key figures, anomaly, quantity and section tables
    for tid in ("key-figures", "anomalies", "quantities", "sections"):
        table = page[page.index(f'id="{tid}"'):]
        table = table[:table.index("</table>")]
        assert "m²" not in table and "(m)" not in table and not re.search(r"\d m<", table), tid
    # conditions: air 6.0 °C = 42.8 °F; wind 2.0 m/s = 4.47 mph (NIST SP 811 factors)
    cond = page[page.index('id="conditions"'):]
    cond = cond[:cond.index("</table>")]
    assert f"{6.0 * 1.8 + 32:.1f} °F" in cond and f"{2.0 / M_S_PER_MPH:.1f} mph" in cond and "°C" not in cond
    # the anomaly table's delta-T is in °F degrees (1 K = 1.8 °F)
    a = result.anomalies[0]
    assert f"{a.delta_mean_c * 1.8:+.2f}" in page
    # one unit setting: the CSV follows the same imperial choice
    head = (out / "quantities.csv").read_text(encoding="utf-8").splitlines()[0]
    assert "area_ft2" in head and "area_squares" in head


# --------------------------------------------------------------------------------------
# [report] validation
# --------------------------------------------------------------------------------------


def _survey(tmp_path: Path, extra: str, repair_extra: str = "") -> Path:
    return copy_sample(tmp_path / "s", extra, repair_extra)


def test_report_table_read(tmp_path):
    folder = _survey(tmp_path, CLIENT.replace('logo = "plan/logo.png"\n', ""))
    s = load_survey(folder)
    r = s.report
    assert (r.client, r.job_number, r.revision, r.issue_date, r.paper, r.units) == (
        "Invented Holdings Ltd (invented)", "J-0042", "B", "2024-11-20", "Letter", "imperial")
    assert s.repair.area_units == ("m2", "ft2", "squares")  # imperial adds ft2 and squares on a roof


def test_report_defaults_and_area_units_make_imperial(tmp_path):
    s = load_survey(SAMPLE)
    assert s.report.units == "metric" and s.report.paper == "A4" and s.report.client is None
    s2 = load_survey(_survey(tmp_path, "", repair_extra='area_units = ["m2", "ft2"]\n'))
    assert s2.report.units == "imperial"
    s3 = load_survey(copy_sample(tmp_path / "t", '\n[report]\nunits = "metric"\n',
                                 repair_extra='area_units = ["m2", "ft2"]\n'))
    assert s3.report.units == "metric" and s3.repair.area_units == ("m2", "ft2")


@pytest.mark.parametrize("extra, repair_extra, words", [
    ('\n[report]\nissue_date = "20 Nov 2024"\n', "", ["[report] issue_date", "20 Nov 2024", "YYYY-MM-DD"]),
    ('\n[report]\npaper = "A3"\n', "", ["[report] paper", '"A3"', '"A4"', '"Letter"']),
    ('\n[report]\nunits = "US"\n', "", ["[report] units", '"metric"', '"imperial"']),
    ('\n[report]\nlogo = "plan/nothere.png"\n', "", ["[report] logo", "nothere.png", "not found"]),
    ('\n[report]\nlogo = "cores.csv"\n', "", ["[report] logo", "cores.csv", ".png"]),
    ('\n[report]\nclient = 12\n', "", ["[report] client", "12", "text"]),
    ('\n[report]\nclinet = "x"\n', "", ["[report] clinet", 'did you mean "client"']),
    ('\n[report]\nunits = "imperial"\n', 'area_units = ["m2"]\n', ["[repair] area_units", "ft2"]),
])
def test_report_table_refusals(tmp_path, extra, repair_extra, words):
    folder = _survey(tmp_path, extra, repair_extra)
    with pytest.raises(SurveyError) as err:
        load_survey(folder)
    text = str(err.value)
    for w in words:
        assert w in text, (w, text)
    assert np.all([ln.startswith(str(folder / "survey.toml")) for ln in text.splitlines() if "[report]" in ln])


# --------------------------------------------------------------------------------------
# The take-off: one row kind per CSV, and takeoff.xlsx with formulas
# --------------------------------------------------------------------------------------


def _sum_formula(ws, formula: str) -> float:
    """The value of ``=SUM(A2:A9)`` from the sheet's own cells (openpyxl does not calculate)."""
    from openpyxl.utils.cell import range_boundaries

    m = re.fullmatch(r"=SUM\(([A-Z]+\d+:[A-Z]+\d+)\)", formula)
    assert m, formula
    c0, r0, c1, r1 = range_boundaries(m.group(1))
    return sum(float(ws.cell(row=r, column=c).value or 0) for r in range(r0, r1 + 1) for c in range(c0, c1 + 1))


def test_takeoff_workbook_totals_equal_the_summary(metric_run):
    openpyxl = pytest.importorskip("openpyxl")
    result, out = metric_run
    s = json.loads((out / "summary.json").read_text())
    wb = openpyxl.load_workbook(out / "takeoff.xlsx")
    assert wb.sheetnames == ["anomalies", "sections", "wet area range",
                             *(["board range"] if s.get("boards_range") else []), "bill", "cores"]
    if s.get("boards_range"):
        ws = wb["board range"]
        assert [ws.cell(row=r, column=3).value for r in (2, 3)] == list(s["boards_range"])
    ws = wb["anomalies"]
    head = [c.value for c in ws[1]]
    assert head[:5] == ["row", "id", "status", "section", "area_m2"]  # units in the headers
    n = ws.max_row
    assert [ws.cell(row=r, column=1).value for r in range(2, n + 1)] == ["anomaly"] * len(result.anomalies) + ["total"]
    area = ws.cell(row=n, column=head.index("area_m2") + 1).value
    assert isinstance(area, str) and area.startswith("=SUM(")  # an auditable formula
    anomaly_area = sum(a.area_m2 for a in result.anomalies)
    assert _sum_formula(ws, area) == pytest.approx(anomaly_area, abs=0.005)
    assert anomaly_area == pytest.approx(s["wet_area_m2"] + s["confirmed_dry_area_m2"], abs=0.005)
    # numbers are numbers, yes/no is text
    assert isinstance(ws.cell(row=2, column=head.index("area_m2") + 1).value, float)
    assert ws.cell(row=2, column=head.index("counted_wet") + 1).value in ("yes", "no")
    # the sections sheet sums to the summary's totals
    ws = wb["sections"]
    head = [c.value for c in ws[1]]
    last = ws.max_row
    assert ws.cell(row=last, column=1).value == "total of the sections"
    for key, summary_key in (("roof_area_m2", "roof_area_m2"), ("wet_area_m2", "wet_area_m2"),
                             ("repair_area_m2", "repair_area_m2"), ("tearoff_area_m2", "tearoff_area_m2"),
                             ("boards", "boards")):
        formula = ws.cell(row=last, column=head.index(key) + 1).value
        assert _sum_formula(ws, formula) == pytest.approx(s[summary_key], abs=0.01), key
    ws = wb["bill"]
    items = [ws.cell(row=r, column=1).value for r in range(2, ws.max_row + 1)]
    assert items == [ln["item"] for ln in s["bill"]["lines"]] + ["bill total"]
    ws = wb["wet area range"]
    assert [ws.cell(row=r, column=2).value for r in (2, 3)] == pytest.approx(s["wet_area_range_m2"], abs=0.001)


def test_takeoff_bill_amounts_are_formulas(tmp_path):
    openpyxl = pytest.importorskip("openpyxl")
    prices = '\n[prices]\ncurrency = "EUR"\ntearoff_per_m2 = 12.50\nboard_each = 18.40\n'
    folder = copy_sample(tmp_path / "priced", prices)
    out = tmp_path / "results"
    run_survey(folder, out=out, map_html=False, report_html=False)
    s = json.loads((out / "summary.json").read_text())
    ws = openpyxl.load_workbook(out / "takeoff.xlsx")["bill"]
    head = [c.value for c in ws[1]]
    q, rate, amount = (head.index(k) + 1 for k in ("bill_quantity", "rate", "amount"))
    total = 0.0
    for r, line in enumerate(s["bill"]["lines"], start=2):
        f = ws.cell(row=r, column=amount).value
        if line["rate"] is None:
            continue
        assert re.fullmatch(r"=ROUND\([A-Z]+\d+\*[A-Z]+\d+,2\)", f), f
        # ROUND(quantity x rate, 2): positive amounts, so half away from zero = half up
        value = round(ws.cell(row=r, column=q).value * ws.cell(row=r, column=rate).value + 1e-9, 2)
        assert value == pytest.approx(line["amount"])
        total += value
    assert ws.cell(row=ws.max_row, column=amount).value.startswith("=SUM(")
    assert total == pytest.approx(s["bill"]["total"])
    # by hand: tear-off m2 x 12.50 + boards x 18.40
    assert s["bill"]["total"] == pytest.approx(round(s["tearoff_area_m2"], 2) * 12.50 + s["boards"] * 18.40, abs=0.01)


def test_workbook_text_cells_are_never_formulas():
    from wetmap.export.tables import _number

    # OWASP "CSV injection": a text starting with = + - @ is read as a formula by spreadsheets;
    # the workbook quotes it as the CSV files do, and keeps numbers as numbers
    for text in ("=1+2", "+A1", "-cmd", "@SUM(A1)"):
        assert _number(text) == "'" + text
    assert _number("-1.500") == -1.5 and _number("64") == 64 and _number("") is None


# --------------------------------------------------------------------------------------
# Plan basics: north arrow, section labels, figure axes from the plan's corner
# --------------------------------------------------------------------------------------

HULL = Path(__file__).resolve().parents[1] / "sample_surveys" / "yacht_hull"


def test_map_north_arrow_and_section_labels(metric_run):
    from wetmap.export.webmap import NORTH_ARROW_SVG

    _, out = metric_run
    page = (out / "map.html").read_text(encoding="utf-8")
    assert "wetmap-north-arrow" in page and "north arrow" in page  # drawn inline, no image file
    assert "http" not in NORTH_ARROW_SVG.replace("http://www.w3.org", "")
    # each section named on the plan by a permanent label
    assert '"label": "section A"' in page and '"label": "section B"' in page
    assert page.count("permanent: true") >= 2


def test_hull_map_and_figures_have_no_north(tmp_path):
    from wetmap.export import report

    out = tmp_path / "results"
    result = run_survey(HULL, out=out, report_html=False)
    assert "wetmap-north-arrow" not in (out / "map.html").read_text(encoding="utf-8")
    assert report.grid_convergence_deg(result) is None
    assert report._axis_labels(result) == ("station along the hull (m)", "girth from the keel (m)")


def test_figure_axes_in_metres_from_the_corner(metric_run):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from wetmap.export import report

    result, _ = metric_run
    fig = Figure(figsize=(6, 4))
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    report._plan_axes(ax, result)
    fig.canvas.draw()
    x0, y0, x1, y1 = result.outline.bounds  # the sample: 60 x 40 m from (512300, 5463100)
    for labels, ticks, corner in ((ax.get_xticklabels(), ax.get_xticks(), 512300.0),
                                  (ax.get_yticklabels(), ax.get_yticks(), 5463100.0)):
        shown = [float(t.get_text().replace("\u2212", "-")) for t in labels]
        assert shown == pytest.approx([v - corner for v in ticks])  # each tick: metres from the corner
        assert 0.0 in shown
    assert (x0, y0) == (512300.0, 5463100.0)
    assert "512,300.0" in ax.get_xlabel() and "EPSG:32633" in ax.get_xlabel()


def test_grid_convergence_matches_a_meridian_traced_with_pyproj(metric_run):
    """The north arrow's angle equals the bearing of a meridian drawn in the plan's CRS
    (two points 0.01° of latitude apart projected with pyproj.Transformer)."""
    import math

    from pyproj import Transformer

    from wetmap.export import report

    result, _ = metric_run
    conv = report.grid_convergence_deg(result)
    pt = result.outline.centroid
    back = Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True)
    fwd = Transformer.from_crs("EPSG:4326", "EPSG:32633", always_xy=True)
    lon, lat = back.transform(pt.x, pt.y)
    xa, ya = fwd.transform(lon, lat)
    xb, yb = fwd.transform(lon, lat + 0.01)
    bearing = math.degrees(math.atan2(xb - xa, yb - ya))  # clockwise from grid north
    assert conv == pytest.approx(-bearing, abs=1e-3)
    assert conv > 0  # the sample lies east of zone 33's central meridian (15° E): true north is west of grid north


# --------------------------------------------------------------------------------------
# GIS and CAD: GeoPackage styles, colour-blind-safe DXF layers, hatches with islands
# --------------------------------------------------------------------------------------

#: Okabe-Ito palette (Okabe & Ito 2008, "Color Universal Design"): vermillion, reddish purple, blue.
OKABE_ITO = {"wet": (213, 94, 0), "unverified": (204, 121, 167), "dry": (0, 114, 178)}


def test_geopackages_carry_qgis_styles(metric_run):
    import sqlite3
    import xml.etree.ElementTree as ET

    import pyogrio

    _, out = metric_run
    for name, layers in (("anomalies.gpkg", {"anomalies", "suggested_cores"}),
                         ("repair.gpkg", {"repair", "boards", "anomalies", "cores"})):
        with sqlite3.connect(out / name) as db:
            rows = db.execute("SELECT f_table_name, f_geometry_column, styleQML, styleSLD, useAsDefault "
                              "FROM layer_styles").fetchall()
            geom_cols = dict(db.execute("SELECT table_name, column_name FROM gpkg_geometry_columns").fetchall())
        assert {r[0] for r in rows} == layers
        for table, column, qml, sld, default in rows:
            assert column == geom_cols[table] and default == 1
            ET.fromstring(qml)
            ET.fromstring(sld)  # both parse as XML
        qml = next(r[2] for r in rows if r[0] == "anomalies")
        root = ET.fromstring(qml)
        renderer = root.find("renderer-v2")
        assert renderer.get("type") == "categorizedSymbol" and renderer.get("attr") == "status"
        cats = {c.get("value"): c.get("symbol") for c in renderer.iter("category")}
        assert set(cats) == {"wet", "unverified", "dry"}
        colours = {}
        for sym in renderer.iter("symbol"):
            opts = {o.get("name"): o.get("value") for o in sym.iter("Option") if o.get("name")}
            colours[sym.get("name")] = tuple(int(v) for v in opts["outline_color"].split(",")[:3])
        for status, rgb in OKABE_ITO.items():
            assert colours[cats[status]] == rgb, status
        assert len(set(colours.values())) == 3  # distinct colours
        # the layers still read as before
        assert layers <= {n for n, _ in pyogrio.list_layers(out / name)}


def _signed_area(xy) -> float:
    x, y = np.asarray(xy, dtype=float).T
    return 0.5 * float(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1)))


def test_dxf_colours_and_hatch_with_islands(tmp_path, metric_run):
    """A patch with a hole is one hatch whose area (outer path less inner paths, shoelace
    formula) equals the anomaly's; wet and dry layers carry the Okabe-Ito orange/blue pair."""
    import types

    import ezdxf
    from shapely.geometry import Polygon

    from wetmap.export import cad

    result, _ = metric_run
    ring = Polygon([(512310, 5463110), (512320, 5463110), (512320, 5463120), (512310, 5463120)],
                   [[(512313, 5463113), (512313, 5463116), (512316, 5463116), (512316, 5463113)]])
    a0 = result.anomalies[0]
    holed = dataclasses.replace(a0, geometry=ring)
    fake = types.SimpleNamespace(**{k: getattr(result, k) for k in dir(result) if not k.startswith("_")})
    fake.anomalies = [holed, *result.anomalies[1:]]
    path = tmp_path / "repair.dxf"
    cad.write_dxf(fake, path)
    doc = ezdxf.readfile(path)
    layers = {layer.dxf.name: layer for layer in doc.layers}
    assert layers["ANOMALY-WET"].rgb == OKABE_ITO["wet"] and layers["ANOMALY-DRY"].rgb == OKABE_ITO["dry"]
    assert layers["ANOMALY-UNVERIFIED"].rgb == OKABE_ITO["unverified"]
    hatches = list(doc.modelspace().query('HATCH[layer=="ANOMALY-HATCH"]'))
    assert len(hatches) == len(fake.anomalies)
    first = hatches[0]
    assert len(first.paths) == 2  # the exterior and its island, in one hatch
    area = 0.0
    for p in first.paths:
        xy = [(v[0], v[1]) for v in p.vertices]
        sign = 1.0 if p.path_type_flags & ezdxf.const.BOUNDARY_PATH_EXTERNAL else -1.0
        area += sign * abs(_signed_area(xy))
    assert area == pytest.approx(ring.area, abs=1e-6) and ring.area == pytest.approx(100 - 9)
    assert first.rgb == OKABE_ITO[a0.status]



# --------------------------------------------------------------------------------------
# Imperial everywhere: no metric-only figure left in the report
# --------------------------------------------------------------------------------------

#: A figure with a metric-only unit in running text: a number then m, m², m2, mm, cm, km, °C,
#: m/s; or a unit header such as "(m)", "(m²)", "(°C)", "(mm)".
METRIC_ONLY = re.compile(r"\d\s?(?:m²|m2|m³|m3|mm|cm|km|°C|m/s|m)(?![\w²³/])|\((?:m|m²|m³|°C|mm|m/s)\)")


def _visible_text(page: str) -> str:
    """The text a reader sees in report.html: style sheet, tags and attribute values left out."""
    page = re.sub(r"<style>.*?</style>", " ", page, flags=re.S)
    import html as html_lib

    return html_lib.unescape(re.sub(r"<[^>]+>", " ", page))


def test_imperial_report_text_holds_no_metric_only_figure(imperial_run):
    _, out = imperial_run
    text = _visible_text((out / "report.html").read_text(encoding="utf-8"))
    assert "ft²" in text and "°F" in text and " ft" in text
    left = [text[max(0, m.start() - 40):m.end() + 10] for m in METRIC_ONLY.finditer(text)]
    assert not left, left


@needs_pdf
def test_imperial_pdf_text_holds_no_metric_only_figure(imperial_run):
    _, out = imperial_run
    text = _text(_pdf(out / "report.pdf"))
    left = [text[max(0, m.start() - 40):m.end() + 10] for m in METRIC_ONLY.finditer(text)]
    assert not left, left
    assert "squares" in text and "mph" in text


def test_metric_report_keeps_metric_figures(metric_run):
    _, out = metric_run
    page = (out / "report.html").read_text(encoding="utf-8")
    assert 'class="conv"' not in page and "°F" not in page and "ft²" not in page
    assert "0.3 m beyond the anomaly outline" in _visible_text(page)


#: data-from unit -> (shown value -> metric value), NIST SP 811 appendix B factors:
#: 1 ft = 0.3048 m, 1 ft2 = 0.09290304 m2, 1 mph = 0.44704 m/s, 1 in = 25.4 mm,
#: t/°C = (t/°F - 32) / 1.8, a difference of 1 °F = 1/1.8 K.
BACK = {
    "m": lambda v: v * M_PER_FT,
    "m²": lambda v: v * M2_PER_FT2,
    "m/s": lambda v: v * M_S_PER_MPH,
    "mm": lambda v: v * 25.4,
    "m³": lambda v: v * M_PER_FT ** 3,  # 1 ft3 = 0.028316846592 m3
    "°C": lambda v: (v - 32.0) / 1.8,
    "K": lambda v: v / 1.8,
}


class _Spans(HTMLParser):
    """Every ``<span class="conv">``: (metric value, metric unit, shown text)."""

    def __init__(self) -> None:
        super().__init__()
        self.spans: list[list] = []
        self._open = False

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "span" and a.get("class") == "conv":
            self.spans.append([float(a["data-metric"]), a["data-from"], ""])
            self._open = True

    def handle_endtag(self, tag):
        if tag == "span":
            self._open = False

    def handle_data(self, data):
        if self._open:
            self.spans[-1][2] += data


def test_every_converted_figure_converts_back_with_nist_factors(imperial_run):
    _, out = imperial_run
    parser = _Spans()
    parser.feed((out / "report.html").read_text(encoding="utf-8"))
    spans = parser.spans
    kinds = {unit for _, unit, _ in spans}
    assert {"m", "m²", "°C", "K", "mm"} <= kinds, kinds  # lengths, areas, temperatures, differences, thickness
    for metric, unit, shown in spans:
        value = float(shown.replace(",", ""))
        decimals = len(shown.split(".")[1]) if "." in shown else 0
        half_step = 0.5 * 10.0 ** -decimals  # the rounding of the shown figure
        tolerance = abs(BACK[unit](half_step) - BACK[unit](0.0)) + 1e-9
        assert BACK[unit](value) == pytest.approx(metric, abs=tolerance), (metric, unit, shown)
    # a known pair: the sample's repair margin 0.3 m is 0.98 ft (0.3 / 0.3048 = 0.984)
    assert [0.3, "m", "0.98"] in spans
    # the air temperature 6 °C is 42.8 °F (NIST SP 811: t/°F = 1.8 t/°C + 32)
    assert "42.8 °F" in _visible_text((out / "report.html").read_text(encoding="utf-8"))


def test_imperial_figures_are_drawn_in_feet_and_fahrenheit(imperial_run):
    """The figures' axes read feet and °F (the PNGs' matplotlib text is checked on the artists)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg  # noqa: F401 - the report draws with Agg

    from wetmap.export import report

    result, _ = imperial_run
    labels: list[str] = []
    real = report._png

    def capture(fig):
        for ax in fig.axes:
            labels.extend([ax.get_xlabel(), ax.get_ylabel()])
            labels.extend(ax.get_legend_handles_labels()[1])
        labels.extend(t.get_text() for leg in fig.legends for t in leg.get_texts())
        return real(fig)

    try:
        report._png = capture
        report.thermal_figure(result, dpi=40)
        report.delta_histogram_figure(result, dpi=40)
        report.repair_plan_figure(result, dpi=40)
    finally:
        report._png = real
    text = " | ".join(labels)
    assert "ft east of the lower-left corner" in text and "(°F)" in text and "(ft²)" in text
    assert "threshold +1.80 °F" in text  # 1 K threshold = 1.8 °F (NIST SP 811)
    assert not METRIC_ONLY.search(text.replace(" m, EPSG", "").replace(" m)", ")")), text


def test_imperial_map_popups_and_scale(imperial_run):
    _, out = imperial_run
    page = (out / "map.html").read_text(encoding="utf-8")
    assert '"imperial": true' in page.replace("imperial: true", '"imperial": true')
    assert "ft\\u00b2" in page or "ft²" in page
    assert not re.search(r"\d (?:m\\u00b2|m²) ", page)
    # the thermal layer, its colour bar and the in-browser display control in °F
    assert "Surface temperature, \\u00b0F" in page or "Surface temperature, °F" in page
    config = json.loads(re.search(r"var cfg = (\{.*?\});\n", page).group(1))
    surface, delta = config["layers"]
    assert surface["label"] == "Surface temperature, °F" and surface["unit"] == "°F"
    assert delta["label"] == "ΔT above the dry background, °F"
    assert "°C" not in config["basis"] and "°F" in config["basis"]


_DISPLAY_PROBE = """
(async () => {
  const img = () => document.querySelector('img.wetmap-surface');
  const pix = async () => {
    const i = img(); await i.decode();
    const c = document.createElement('canvas'); c.width = i.naturalWidth; c.height = i.naturalHeight;
    const x = c.getContext('2d'); x.drawImage(i, 0, 0);
    const d = x.getImageData(0, 0, c.width, c.height).data;  // one read-back
    return [[0.5, 0.5], [0.3, 0.4], [0.6, 0.7], [0.45, 0.25]].map(([fx, fy]) => {
      const j = 4 * (Math.floor(c.height * fy) * c.width + Math.floor(c.width * fx));
      return Array.from(d.slice(j, j + 4));
    });
  };
  const [lo, hi] = [...document.querySelectorAll('.wetmap-display input')].slice(0, 2);
  const opening = [lo.value, hi.value];
  const line = lo.parentElement.textContent;
  const bar = document.querySelector('.wetmap-legend img[alt^="Surface temperature"]');
  const barBefore = bar.src;
  await window.wetmapDisplay.set(0, +opening[0], +opening[1], 'gray');  // the palette alone changes
  // typed into the panel, as a user would: LOW and HIGH in the unit shown
  lo.value = String(LOW); hi.value = String(HIGH);
  lo.dispatchEvent(new Event('change')); hi.dispatchEvent(new Event('change'));
  await new Promise(r => setTimeout(r, 500));
  const typed = await pix();
  return JSON.stringify({opening, line, typed, barChanged: bar.src !== barBefore,
                         inputs: [lo.value, hi.value]});
})()
"""


def test_browser_display_control_works_in_fahrenheit(imperial_run, metric_run, tmp_path, monkeypatch):
    """Headless chromium (skipped when not installed), via the map tests' DevTools client.

    The imperial map's display control shows its opening range in °F and takes °F: a range
    typed in °F paints the overlay as the metric map does for the same range typed in °C
    (°F = 1.8 °C + 32, NIST SP 811, appendix B), and the legend's bar is redrawn."""
    import sys

    sys.path.insert(0, str(Path(__file__).parent))
    import test_webmap as tw

    result, imperial_out = imperial_run
    r = result.imagery.surface_range
    low_c, high_c = round(r.low_c + 0.25 * (r.high_c - r.low_c), 1), round(r.low_c + 0.75 * (r.high_c - r.low_c), 1)
    got = {}
    for name, out, low, high in (("metric", metric_run[1], low_c, high_c),
                                 ("imperial", imperial_out, low_c * 1.8 + 32.0, high_c * 1.8 + 32.0)):
        monkeypatch.setattr(tw, "_PROBE", _DISPLAY_PROBE.replace("LOW", repr(low)).replace("HIGH", repr(high)))
        got[name], errors = tw._browse(out / "map.html", tmp_path / f"profile_{name}")
        assert errors == []
    metric, imperial = got["metric"], got["imperial"]
    # the opening range: the roof range in °C, and the same range in °F (to the 0.01 the inputs show)
    assert [float(v) for v in metric["opening"]] == pytest.approx([r.low_c, r.high_c], abs=0.01)
    assert [float(v) for v in imperial["opening"]] == pytest.approx([r.low_c * 1.8 + 32, r.high_c * 1.8 + 32],
                                                                     abs=0.02)
    assert metric["line"].strip().endswith("°C") and imperial["line"].strip().endswith("°F")
    # the same colours for the same range in either unit (one 8-bit grey level apart at most)
    assert len(imperial["typed"]) == 4
    for a, b in zip(metric["typed"], imperial["typed"]):
        assert a[3] == b[3] == 255 and all(abs(x - y) <= 1 for x, y in zip(a[:3], b[:3])), (a, b)
    assert len({tuple(p) for p in imperial["typed"]}) > 1  # the probe sees more than one colour
    assert metric["barChanged"] and imperial["barChanged"]  # the bar in the legend follows the control


def test_removal_volume_from_the_logged_wet_thickness(metric_run, tmp_path):
    """The sample's wet cores log 75 and 80 mm: median 77.5 mm; volume = tear-off area x 0.0775 m."""
    import csv

    _, out = metric_run
    s = json.loads((out / "summary.json").read_text())
    rows = {r["bill_item"]: r for r in csv.DictReader((out / "bill.csv").open(encoding="utf-8"))}
    line = rows["removal volume"]
    assert line["bill_unit"] == "m3" and "77.5 mm" in line["description"]
    assert float(line["bill_quantity"]) == pytest.approx(round(s["tearoff_area_m2"] * 0.0775, 2), abs=0.005)
    priced = copy_sample(tmp_path / "p", '\n[prices]\ncurrency = "EUR"\ndisposal_per_m3 = 60.0\n')
    result = run_survey(priced)
    rows = {r["bill_item"]: r for r in csv.DictReader((priced / "results" / "bill.csv").open(encoding="utf-8"))}
    qty = float(rows["removal volume"]["bill_quantity"])
    assert float(rows["removal volume"]["amount"]) == pytest.approx(round(qty * 60.0, 2))  # quantity x rate
    assert result.survey.prices.disposal_per_m3 == 60.0
