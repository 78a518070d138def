"""map.html: self-contained, drawn by a real browser with no network, aligned with the plan.

The browser checks run Debian's ``chromium`` headless (``.ci/run`` installs it) with every
background service off and all traffic sent to a closed local port, and talk to it over
the DevTools protocol (a websocket on 127.0.0.1, through tornado, which wetmap already
depends on via ``distributed``). They are skipped only when chromium is not installed.

The bundled sample (an invented warehouse roof) is run into pytest's tmp folders; the
sample folder itself is never written to.
"""

from __future__ import annotations

import asyncio
import json
import os
import re
import shutil
import signal
import subprocess
import time
import urllib.request
from pathlib import Path

import numpy as np
import pytest
import shapely

from wetmap.export import webmap
from wetmap.pipeline import run_survey

SAMPLE = Path(__file__).resolve().parents[1] / "sample_surveys" / "warehouse_roof"

CHROMIUM_FLAGS = (
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
    "--disable-default-apps", "--disable-extensions", "--hide-scrollbars", "--window-size=1400,900",
    # networking disabled: every request would go to a closed port and no name resolves
    "--proxy-server=http://127.0.0.1:9", "--host-resolver-rules=MAP * ~NOTFOUND",
)


# --------------------------------------------------------------------------------------
# Fixtures
# --------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def local_run(tmp_path_factory):
    """A copy of the sample as a ``local`` plan with a 6 x 5 m hole in its thermal data.

    Equals the sample except ``crs = "local"`` (plan metres, no geo-reference) and the
    mosaic set to nodata over x 512318-512324, y 5463125-5463130 (inside section A, away
    from every anomaly): that part of the roof must be drawn as not surveyed.
    """
    import rasterio

    folder = tmp_path_factory.mktemp("webmap_local") / "survey"
    shutil.copytree(SAMPLE, folder, ignore=shutil.ignore_patterns("results"))
    toml = folder / "survey.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace('crs = "EPSG:32633"', 'crs = "local"'),
                    encoding="utf-8")
    tif = folder / "thermal" / "roof_pass1.tif"
    with rasterio.open(tif, "r+") as ds:
        data = ds.read(1)
        rows, cols = rasterio.transform.rowcol(ds.transform, [512318.0, 512324.0], [5463130.0, 5463125.0])
        data[rows[0]:rows[1], cols[0]:cols[1]] = ds.nodata
        ds.write(data, 1)
    result = run_survey(folder, out=folder.parent / "r")
    return result, folder.parent / "r"


# --------------------------------------------------------------------------------------
# A small DevTools-protocol client
# --------------------------------------------------------------------------------------


def _chromium() -> str:
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path:
            return path
    pytest.skip("chromium is not installed (.ci/run installs Debian's chromium package)")


_PROBE = """
(async () => {
  const imgs = [...document.querySelectorAll('img.wetmap-overlay')];
  await Promise.all(imgs.map(i => i.decode().catch(() => null)));
  const count = sel => document.querySelectorAll(sel).length;
  const out = {
    overlays: imgs.map(i => ({cls: i.className, complete: i.complete, w: i.naturalWidth, h: i.naturalHeight,
                              shownW: i.getBoundingClientRect().width})),
    anomalies: count('path.wetmap-anomaly'),
    wet: count('path.wetmap-wet'), dry: count('path.wetmap-dry'), unverified: count('path.wetmap-unverified'),
    cores: count('path.wetmap-core'), coresWet: count('path.wetmap-core-wet'),
    uncovered: count('path.wetmap-uncovered'), exclusions: count('path.wetmap-exclusion'),
    repair: count('path.wetmap-repair'), boards: count('path.wetmap-board'),
    labels: [...document.querySelectorAll('.wetmap-label:not(.wetmap-section-label)')].map(e => e.textContent.trim()),
    sectionLabels: [...document.querySelectorAll('.wetmap-section-label')].map(e => e.textContent.trim()),
    layers: [...document.querySelectorAll('.leaflet-control-layers-overlays label')].map(e => e.textContent.trim()),
    scale: (document.querySelector('.leaflet-control-scale-line') || {}).textContent || null,
    title: (document.querySelector('.wetmap-header h1') || {}).textContent || null,
    header: (document.querySelector('.wetmap-header') || {}).textContent || '',
    legendBars: count('.wetmap-legend img'),
    resources: performance.getEntriesByType('resource').map(e => e.name),
  };
  const first = document.querySelector('path.wetmap-anomaly');
  if (first) {
    const r = first.getBoundingClientRect();
    first.dispatchEvent(new MouseEvent('click', {bubbles: true, cancelable: true, view: window,
                                                 clientX: r.x + r.width / 2, clientY: r.y + r.height / 2}));
    await new Promise(res => setTimeout(res, 50));
    out.popup = (document.querySelector('.leaflet-popup-content') || {}).textContent || null;
  }
  return JSON.stringify(out);
})()
"""


def _browse(page: Path, profile: Path, *, timeout_s: float = 90.0) -> tuple[dict, list[str]]:
    """Open ``page`` in headless chromium; return the probe's answer and every error logged.

    Errors are console ``error``/``warning``/``assert`` calls, uncaught exceptions and the
    browser's own log entries at warning level or above (failed loads among them).
    """
    exe = _chromium()
    from tornado.websocket import websocket_connect

    profile.mkdir(parents=True, exist_ok=True)
    proc = subprocess.Popen([exe, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", "--remote-debugging-port=0",
                             "about:blank"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)
    try:
        port_file = profile / "DevToolsActivePort"
        deadline = time.monotonic() + 30
        while not (port_file.is_file() and port_file.read_text().strip()):
            if time.monotonic() > deadline or proc.poll() is not None:
                raise RuntimeError(f"chromium did not open its DevTools port (exit code {proc.poll()})")
            time.sleep(0.1)
        port = int(port_file.read_text().split()[0])
        opener = urllib.request.build_opener(urllib.request.ProxyHandler({}))  # loopback, never a proxy
        deadline = time.monotonic() + 30
        while True:
            targets = json.loads(opener.open(f"http://127.0.0.1:{port}/json/list", timeout=10).read())
            pages = [t for t in targets if t.get("type") == "page"]
            if pages or time.monotonic() > deadline:
                break
            time.sleep(0.1)
        ws_url = pages[0]["webSocketDebuggerUrl"]

        async def session() -> tuple[dict, list[str]]:
            ws = await websocket_connect(ws_url, max_message_size=1 << 26)
            events: list[dict] = []
            counter = [0]

            async def read() -> dict:
                msg = await ws.read_message()
                if msg is None:
                    raise RuntimeError("the DevTools connection closed")
                return json.loads(msg)

            async def call(method: str, **params) -> dict:
                counter[0] += 1
                ws.write_message(json.dumps({"id": counter[0], "method": method, "params": params}))
                while True:
                    msg = await read()
                    if msg.get("id") == counter[0]:
                        if "error" in msg:
                            raise RuntimeError(f"{method}: {msg['error']}")
                        return msg.get("result", {})
                    events.append(msg)

            for domain in ("Runtime", "Log", "Page"):
                await call(f"{domain}.enable")
            await call("Page.navigate", url=page.resolve().as_uri())
            while not any(e.get("method") == "Page.loadEventFired" for e in events):
                events.append(await read())
            res = await call("Runtime.evaluate", expression=_PROBE, awaitPromise=True, returnByValue=True)
            if "exceptionDetails" in res:
                raise RuntimeError(f"probe failed: {res['exceptionDetails']}")
            await asyncio.sleep(0.3)
            ws.close()
            errors = []
            for e in events:
                p = e.get("params", {})
                if e.get("method") == "Runtime.consoleAPICalled" and p.get("type") in ("error", "warning", "assert"):
                    errors.append(f"console.{p['type']}: {[a.get('value') for a in p.get('args', [])]}")
                elif e.get("method") == "Runtime.exceptionThrown":
                    errors.append(f"exception: {p.get('exceptionDetails', {}).get('text')}")
                elif e.get("method") == "Log.entryAdded" and p.get("entry", {}).get("level") in ("error", "warning"):
                    errors.append(f"log: {p['entry'].get('text')} {p['entry'].get('url', '')}")
            return json.loads(res["result"]["value"]), errors

        return asyncio.run(asyncio.wait_for(session(), timeout_s))
    finally:
        try:
            os.killpg(proc.pid, signal.SIGTERM)  # the browser we started and its children
            proc.wait(timeout=15)
        except (ProcessLookupError, subprocess.TimeoutExpired):
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(timeout=15)


# --------------------------------------------------------------------------------------
# The file itself
# --------------------------------------------------------------------------------------


def test_map_is_written_and_loads_nothing_from_a_network(sample_run):
    _, out = sample_run
    page = (out / "map.html").read_text(encoding="utf-8")
    assert webmap.remote_references(page) == []
    # no script, stylesheet or image is fetched from anywhere: every tag's src/href is inline data
    assert not re.search(r"""<(?:script|link|img|iframe)\b[^>]*\b(?:src|href)\s*=""", page.replace(
        'src="data:image/png;base64,', "")), "a tag loads an external resource"
    assert 't.version="1.9.4"' in page  # Leaflet inlined
    assert "BSD 2-Clause" in page  # and its licence notice kept
    assert "not measured moisture" in page


def test_map_page_is_the_one_folium_renders(sample_run, monkeypatch):
    """build_map keeps each element's rendered text as it is instead of letting branca
    compile it as a template once more: the page is the one folium's own render gives
    (element ids, random in folium, numbered here), and branca's Element is itself again after."""
    import contextlib
    import itertools

    import branca.element

    result, _ = sample_run

    def numbered_ids():
        counter = itertools.count()
        monkeypatch.setattr(branca.element.Element, "_generate_id", classmethod(lambda cls: f"{next(counter):032x}"))

    numbered_ids()
    kept = webmap.build_map(result)
    assert branca.element.Element.__name__ == "Element"  # the swap is undone
    numbered_ids()
    monkeypatch.setattr(webmap, "_rendered_text_kept", contextlib.nullcontext)
    assert kept == webmap.build_map(result)


def test_assets_are_installed_with_their_licence():
    from importlib import resources

    base = resources.files("wetmap.export").joinpath("assets/leaflet")
    assert "Redistribution and use in source and binary forms" in base.joinpath("LICENSE").read_text()
    for name in ("leaflet.js", "leaflet.css", "images/layers.png"):
        assert base.joinpath(name).is_file()


def test_no_map_and_no_report_skip_the_files(tmp_path):
    run_survey(SAMPLE, out=tmp_path / "r", map_html=False, report_html=False)
    assert (tmp_path / "r" / "summary.json").is_file()
    assert not (tmp_path / "r" / "map.html").exists()
    assert not (tmp_path / "r" / "report.html").exists()


def test_cli_no_map_flag(tmp_path):
    from click.testing import CliRunner

    from wetmap_cli.main import main

    res = CliRunner().invoke(main, ["run", str(SAMPLE), "--out", str(tmp_path / "r"), "--quiet", "--no-map"])
    assert res.exit_code == 0, res.output
    assert not (tmp_path / "r" / "map.html").exists()
    assert (tmp_path / "r" / "report.html").is_file()


def test_tiles_need_an_attribution(sample_run):
    from wetmap.errors import ProcessingError

    with pytest.raises(ProcessingError, match="tiles_attribution"):
        webmap.build_map(sample_run[0], tiles="https://tiles.example/{z}/{x}/{y}.png")


# --------------------------------------------------------------------------------------
# Helpers against slow, obviously-correct references
# --------------------------------------------------------------------------------------


def test_decimate_matches_a_loop():
    rng = np.random.default_rng(3)
    a = rng.normal(size=(37, 53)).astype(np.float32)
    a[rng.random(a.shape) < 0.3] = np.nan
    a[:5, :5] = np.nan  # an all-NaN block
    for k in (1, 2, 5, 8):
        fast = webmap.decimate(a, k)
        slow = np.full(fast.shape, np.nan)
        for i in range(fast.shape[0]):
            for j in range(fast.shape[1]):
                block = a[i * k:(i + 1) * k, j * k:(j + 1) * k]
                if np.isfinite(block).any():
                    slow[i, j] = np.nanmean(block)
        np.testing.assert_allclose(fast, slow, rtol=1e-5, atol=1e-6, equal_nan=True)  # float32 means


def test_colourise_uses_the_cividis_map_and_clears_nan():
    import matplotlib

    values = np.array([[0.0, 0.5, 1.0, np.nan]])
    rgba = webmap.colourise(values, vmin=0.0, vmax=1.0)
    expected = matplotlib.colormaps["cividis"]([0.0, 0.5, 1.0], bytes=True)  # reference: matplotlib itself
    np.testing.assert_array_equal(rgba[0, :3, :3], expected[:, :3])
    assert rgba[0, 3, 3] == 0 and (rgba[0, :3, 3] == 255).all()


def test_overlay_lines_up_with_the_reprojected_anomalies(sample_run):
    """The warped delta-T image and the anomaly outlines agree on real coordinates.

    Reference: pyproj (``Transformer`` for the outlines, ``Geod`` for the distance). The
    centre of the above-threshold pixels of the Web-Mercator image, taken back to
    longitude/latitude, lies within 0.2 m (two plan pixels) of the centre of the anomaly
    polygons transformed from the plan CRS.
    """
    from pyproj import Geod, Transformer

    result, _ = sample_run
    proj = webmap.Projection(result.grid.crs)
    placed, ((south, west), (north, east)) = webmap._overlay(result.detection.delta_c, result, 1, proj)
    rows, cols = np.nonzero(placed > result.detection.threshold_c)
    to_merc = Transformer.from_crs("EPSG:4326", "EPSG:3857", always_xy=True)
    (mx0, mx1), (my0, my1) = to_merc.transform([west, east], [south, north])
    mx = mx0 + (cols.mean() + 0.5) * (mx1 - mx0) / placed.shape[1]
    my = my1 - (rows.mean() + 0.5) * (my1 - my0) / placed.shape[0]
    lon_img, lat_img = Transformer.from_crs("EPSG:3857", "EPSG:4326", always_xy=True).transform(mx, my)
    # the same pixels' centre on the plan grid, then through pyproj
    r, c = np.nonzero(result.detection.delta_c > result.detection.threshold_c)
    x, y = result.grid.transform @ (c.mean() + 0.5, r.mean() + 0.5)
    lon_ref, lat_ref = Transformer.from_crs(result.grid.crs, "EPSG:4326", always_xy=True).transform(x, y)
    _, _, dist_m = Geod(ellps="WGS84").inv(lon_img, lat_img, lon_ref, lat_ref)
    assert dist_m < 0.2
    # and the outlines drawn on the map are the anomaly polygons through pyproj
    a = result.anomalies[0]
    drawn = proj.geometry(a.geometry)
    ref = shapely.transform(a.geometry, lambda xy: np.column_stack(
        Transformer.from_crs(result.grid.crs, "EPSG:4326", always_xy=True).transform(xy[:, 0], xy[:, 1])))
    assert shapely.hausdorff_distance(drawn, ref) < 1e-7  # degrees: about 1 cm


# --------------------------------------------------------------------------------------
# In a real browser, offline
# --------------------------------------------------------------------------------------


def test_browser_draws_the_georeferenced_map_offline(sample_run, tmp_path):
    result, out = sample_run
    probe, errors = _browse(out / "map.html", tmp_path / "profile")
    assert errors == []
    assert all(u.startswith(("data:", "file:")) for u in probe["resources"]), probe["resources"]
    # the thermal overlay: one image, decoded by the browser at the size embedded, on screen
    surface = [o for o in probe["overlays"] if "wetmap-surface" in o["cls"]]
    assert len(surface) == 1 and surface[0]["complete"] and surface[0]["w"] > 100 and surface[0]["shownW"] > 100
    # one shape per anomaly (per status) and one per core
    statuses = [a.status for a in result.anomalies]
    assert probe["anomalies"] == len(result.anomalies) > 0
    for st in ("wet", "dry", "unverified"):
        assert probe[st] == statuses.count(st)
    assert probe["cores"] == len(result.confirmations) > 0
    assert probe["coresWet"] == int(result.confirmations.wet.sum())
    assert sorted(probe["labels"]) == sorted(result.confirmations.ids)
    # each roof section named on the plan, apart from the core labels
    assert sorted(probe["sectionLabels"]) == sorted(f"section {s.name}" for s in result.sections)
    assert probe["repair"] >= 1 and probe["exclusions"] >= 1
    assert probe["boards"] == 0  # the boards layer is off until asked for
    assert any(name.startswith("Whole boards") for name in probe["layers"])
    assert any(name.startswith("Cores and readings") for name in probe["layers"])
    assert probe["scale"] and probe["scale"].strip().endswith("m")
    assert probe["title"] == result.survey.survey.title
    assert "2024-11-12" in probe["header"] and "air 6 °C" in probe["header"]
    assert probe["legendBars"] == 2
    # a click on an anomaly opens its popup with its figures
    first = [a for a in result.anomalies if a.status == "wet"][0]
    assert "Anomaly" in probe["popup"] and f"{first.area_m2:,.2f} m²" in probe["popup"]


def test_browser_draws_a_local_plan_with_its_uncovered_area(local_run, tmp_path):
    result, out = local_run
    assert result.coverage.uncovered_m2 == pytest.approx(30.0, abs=1.0)  # the 6 x 5 m hole
    probe, errors = _browse(out / "map.html", tmp_path / "profile")
    assert errors == []
    assert probe["anomalies"] == len(result.anomalies) > 0
    assert probe["cores"] == len(result.confirmations)
    assert probe["uncovered"] >= 1
    assert probe["scale"] and probe["scale"].strip().endswith("m")
    page = (out / "map.html").read_text(encoding="utf-8")
    assert "L.CRS.Simple" in page


def test_uncovered_area_is_the_hole(local_run):
    result, _ = local_run
    hole = webmap.uncovered_area(result)
    # the nodata block, 6 x 5 m = 30 m2, exactly on pixel edges (common practice: a pixel is its footprint)
    assert hole.area == pytest.approx(30.0, abs=0.01)
    assert shapely.box(512318, 5463125, 512324, 5463130).symmetric_difference(hole).area < 0.01


@pytest.mark.parametrize("cmap", ["cividis", "viridis", "inferno", "gray"])
@pytest.mark.parametrize("vmin, vmax", [(0.0, 10.0), (2.5, 7.25), (3.0, 3.0)])
def test_colourise_equals_matplotlib_colour_map(cmap, vmin, vmax):
    """Reference: calling the matplotlib colour map itself (bytes=True) on the clipped values."""
    import matplotlib

    from wetmap.export.webmap import colourise

    rng = np.random.default_rng(0)
    v = rng.normal(5, 3, (50, 70)).astype(np.float32)
    v[rng.random(v.shape) < 0.05] = np.nan
    v[0, :6] = [0.0, 10.0, -1.0, 11.0, np.inf, -np.inf]
    cm = matplotlib.colormaps[cmap]
    norm = np.clip((v - vmin) / (vmax - vmin if vmax > vmin else 1.0), 0.0, 1.0)
    expected = cm(np.nan_to_num(norm, nan=0.0), bytes=True)
    expected[..., 3] = np.where(np.isfinite(v), 255, 0)
    np.testing.assert_array_equal(colourise(v, vmin=vmin, vmax=vmax, cmap=cmap), expected)
