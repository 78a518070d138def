"""Processing in windows equals processing the whole array.

The reference is wetmap's own whole-array path (tests/test_detect.py and
tests/test_polygons.py check it against outside references); here every windowed result
must equal it: the same polygons (``shapely.equals``), areas and perimeters to 1e-6 m2 /
m, per-anomaly delta-T mean and maximum to 1e-6 degC, the same statuses and summary, and
the same rasters bit for bit. The scenes are invented synthetic mosaics whose warm
patterns are placed on the window seams on purpose (a corner where four windows meet,
long strips across many windows, a ring around a seam crossing, a small hole on a seam,
an excluded unit and a nodata patch on a seam, a pocket closed by two regions that touch
at pixel corners across seams), with windows of 64-128 pixels to force many seams.
The rasteriser is checked against shapely's point-in-polygon test (a general-purpose
reference library) at pixel centres.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import rasterio
import shapely
from affine import Affine

from wetmap import seams, tiles
from wetmap import windows as win
from wetmap.detect import anomaly_mask, upsample_window
from wetmap.pipeline import process_survey, run_survey
from wetmap.polygons import label_regions, polygonize, region_stats, smooth_pixel_polygons

PIXEL_M = 0.1
ROWS, COLS = 320, 400
WARM_C = 3.0


def _disc(rr, cc, r0, c0, radius):
    return (rr + 0.5 - r0) ** 2 + (cc + 0.5 - c0) ** 2 <= radius ** 2


def _warm_pattern() -> np.ndarray:
    """Bool (ROWS, COLS): the warm pixels, placed on the seams of 64-px windows (block 8 px)."""
    rr, cc = np.mgrid[0:ROWS, 0:COLS]
    warm = np.zeros((ROWS, COLS), dtype=bool)
    warm[28:36, 20:380] = True  # A: a long strip across six windows
    warm |= _disc(rr, cc, 128, 128, 12)  # B: a disc on the corner where four windows meet
    warm[54:64, 54:64] = True  # C: two squares touching at the pixel corner (64, 64), a window corner
    warm[64:74, 64:74] = True
    warm |= _disc(rr, cc, 192, 192, 15) & ~_disc(rr, cc, 192, 192, 9)  # D: a ring around a seam crossing
    e = _disc(rr, cc, 128, 320, 14)  # E: a disc with a 5 x 5 hole on a seam crossing (filled)
    e[126:131, 318:323] = False
    warm |= e
    warm[240:272, 100:132] = True  # F: a warm square holding an excluded unit on a seam crossing
    warm[240:272, 180:212] = True  # G: a warm square holding a nodata patch on a seam crossing
    r0, c0, size, t = 58, 250, 13, 3  # H: two L shapes touching at two corners close a 7 x 7 pocket
    warm[r0:r0 + t, c0:c0 + size - t] = True
    warm[r0:r0 + size - t, c0:c0 + t] = True
    warm[r0 + size - t:r0 + size, c0 + t:c0 + size] = True
    warm[r0 + t:r0 + size, c0 + size - t:c0 + size] = True
    warm[63:65, 191:193] = True  # I: a 2 x 2 speckle across four windows (dropped)
    warm[127:128, 60:70] = True  # a 1-px line along a seam (dropped)
    ring = _disc(rr, cc, 190, 60, 38) & ~_disc(rr, cc, 190, 60, 30)  # J: a big ring with an island
    warm |= ring | _disc(rr, cc, 190, 60, 8)
    warm[0:13, 60:76] = True  # K: a notch open to the grid's border is no hole
    warm[0:6, 66:70] = False
    warm[100:112, 0:20] = True  # L: across the outline's edge (x = 1.05 m, through pixel centres)
    warm |= ((rr - 280) / 30.0) ** 2 + ((cc - 330) / 60.0) ** 2 <= 1.0  # M: an ellipse across seams
    return warm


def _write_scene(folder, *, tile_px: int | None = None, seed: int = 7):
    """An invented flat roof, 40 x 32 m at 0.1 m pixels, local plan metres (see _warm_pattern)."""
    (folder / "plan").mkdir(parents=True)
    (folder / "thermal").mkdir()
    rng = np.random.default_rng(seed)
    rr, cc = np.mgrid[0:ROWS, 0:COLS]
    base = 10.0 + 0.3 * np.sin(cc / 70.0) + 0.2 * np.cos(rr / 50.0) + rng.normal(0.0, 0.05, (ROWS, COLS))
    values = (base + WARM_C * _warm_pattern()).astype(np.float32)
    values[254:259, 190:195] = -9999.0  # G: nodata on the seam crossing (256, 192)
    values[150:231, 383:386] = -9999.0  # nodata along the seam at column 384
    transform = Affine(PIXEL_M, 0.0, 0.0, 0.0, -PIXEL_M, ROWS * PIXEL_M)
    with rasterio.open(folder / "thermal" / "pass1.tif", "w", driver="GTiff", width=COLS, height=ROWS, count=1,
                       dtype="float32", transform=transform, nodata=-9999.0, tiled=True, blockxsize=128,
                       blockysize=128, compress="deflate") as dst:
        dst.write(values, 1)
    top = ROWS * PIXEL_M
    outline = [(0.0, 0.0), (40.0, 0.0), (40.0, 27.0), (36.0, top), (1.05, top), (1.05, 5.0), (0.0, 5.0), (0.0, 0.0)]

    def fc(polys):
        return json.dumps({"type": "FeatureCollection", "features": [
            {"type": "Feature", "properties": {}, "geometry": {"type": "Polygon", "coordinates": [p]}} for p in polys]})

    def px_box(r0, r1, c0, c1):  # pixel rows r0..r1-1, cols c0..c1-1 as a plan polygon
        x0, x1, y0, y1 = c0 * PIXEL_M, c1 * PIXEL_M, top - r1 * PIXEL_M, top - r0 * PIXEL_M
        return [(x0, y0), (x1, y0), (x1, y1), (x0, y1), (x0, y0)]

    (folder / "plan" / "outline.geojson").write_text(fc([outline]))
    # F: a 6 x 6 px unit on the seam crossing (256, 128); a larger unit elsewhere
    (folder / "plan" / "exclusions.geojson").write_text(fc([px_box(253, 259, 125, 131), px_box(290, 300, 20, 40)]))
    cores = ["id,x,y,result", f"W1,{130 * PIXEL_M:.3f},{top - 131 * PIXEL_M:.3f},wet",  # in B
             f"D1,{300 * PIXEL_M:.3f},{top - 31.5 * PIXEL_M:.3f},dry",  # in A
             f"D2,{5.0:.3f},{5.0:.3f},dry"]  # dry field
    (folder / "cores.csv").write_text("\n".join(cores) + "\n")
    tile = "" if tile_px is None else f"tile_px = {tile_px}\n"
    (folder / "survey.toml").write_text(f"""
[survey]
title = "Invented seam test roof"
kind = "roof"
crs = "local"

[conditions]
air_c = 5.0
humidity_pct = 60
wind_m_s = 1.0
sky = "clear"
reflected_c = -15.0

[camera]
emissivity = 0.95

[plan]
outline = "plan/outline.geojson"
exclusions = "plan/exclusions.geojson"

[[mosaic]]
path = "thermal/pass1.tif"
units = "C"

[detect]
delta_c = 1.0
background_m = 12.0
min_area_m2 = 0.5
{tile}
[cores]
path = "cores.csv"
""", encoding="utf-8")
    return folder


@pytest.fixture(scope="module")
def scene(tmp_path_factory):
    folder = _write_scene(tmp_path_factory.mktemp("seams") / "roof")
    return folder, process_survey(folder, tile_px=0)


def _assert_same(a, b, *, summary: bool = True):
    assert b.full_rasters is not None and a.full_rasters is None
    assert len(a.anomalies) == len(b.anomalies)
    for x, y in zip(a.anomalies, b.anomalies):
        assert x.id == y.id
        assert x.geometry.equals(y.geometry), x.id
        assert abs(x.area_m2 - y.area_m2) < 1e-6
        assert abs(x.perimeter_m - y.perimeter_m) < 1e-6
        assert abs(x.delta_mean_c - y.delta_mean_c) < 1e-6
        assert abs(x.delta_max_c - y.delta_max_c) < 1e-6
        assert (x.status, x.confirmations, x.section) == (y.status, y.confirmations, y.section)
    np.testing.assert_array_equal(a.confirmation_delta_c, b.confirmation_delta_c)
    sa, sb = a.summary(), b.summary()
    ma, mb = sa.pop("method"), sb.pop("method")
    assert ma.pop("processing") == {"mode": "whole array"}
    assert mb.pop("processing")["mode"] == "windows"
    assert ma == mb
    if summary:
        assert sa == sb
    assert sa["coverage"] == sb["coverage"]
    assert sa["warnings"] == sb["warnings"]


def test_scene_exercises_every_seam_case(scene):
    """The whole-array result holds what the scene was built for (so the equality tests mean something)."""
    folder, whole = scene
    polys = [a.geometry for a in whole.anomalies]
    top = ROWS * PIXEL_M

    def at(r, c):
        p = shapely.Point((c + 0.5) * PIXEL_M, top - (r + 0.5) * PIXEL_M)
        return [g for g in polys if g.covers(p)]

    assert len(at(128, 128)) == 1  # B
    assert len(at(58, 58)) == 1 and len(at(68, 68)) == 1 and at(58, 58)[0] is not at(68, 68)[0]  # C apart
    (ring,) = at(192, 178)
    assert len(ring.interiors) == 1 and not at(192, 192)  # D keeps its hole
    (e,) = at(128, 320)  # E: the small hole on the seam crossing is filled
    assert len(e.interiors) == 0
    (f,) = at(245, 110)  # F: the excluded unit stays a hole
    assert len(f.interiors) == 1 and not at(256, 128)
    (g,) = at(245, 200)  # G: the nodata patch stays a hole
    assert len(g.interiors) == 1 and not at(256, 192)
    (h,) = at(64, 256)  # H: the pocket is filled and the two L shapes are one anomaly
    assert h.covers(shapely.Point((253 + 0.5) * PIXEL_M, top - (66 + 0.5) * PIXEL_M))
    assert len(h.interiors) == 0
    assert not at(63, 191) and not at(127, 65)  # I: speckles dropped
    (k,) = at(10, 68)  # K: the notch open to the border is not filled
    assert not k.covers(shapely.Point(68 * PIXEL_M, top - 2 * PIXEL_M))


@pytest.mark.parametrize("tile_px", [64, 72, 128])
def test_windows_equal_whole_array(scene, tile_px, tmp_path):
    """Same anomalies, statistics, statuses and summary with windows of 64, 72 and 128 px (blocks of 8)."""
    folder, whole = scene
    tiled = process_survey(folder, tile_px=tile_px, scratch=tmp_path)
    assert tiled.full_rasters.tile_px == tile_px
    assert tiled.full_rasters.windows == math.ceil(ROWS / tile_px) * math.ceil(COLS / tile_px)
    _assert_same(whole, tiled)


@pytest.mark.parametrize("name,detect", [
    ("corner", "delta_c = 1.0"),                               # trend per section, a quadric in A
    ("corner", 'delta_c = "cores"'),                           # the threshold from the cores
    ("step", 'delta_c = 1.0\nbackground = "local"'),           # the local method per section, diagonal step
    ("unit", "delta_c = 1.0\nexclusion_buffer_m = 0.5\nedge_buffer_m = 0.3"),  # bands left out
    ("emissivity", "delta_c = 1.0"),                           # a section with its own emissivity
])
def test_windows_equal_whole_array_with_sections_and_trend(name, detect, tmp_path):
    """The section-aware background (trend or local), the threshold from cores and the buffers
    give the same result in windows of 64 px as on the whole array (scenes from tests/scene_render.py)."""
    import scene_render as sr

    make = {"corner": sr.corner_scene, "step": lambda **kw: sr.step_scene("diagonal", **kw),
            "unit": sr.unit_scene, "emissivity": sr.emissivity_scene}[name]
    folder = make(detect=detect).write(tmp_path / name)
    whole = process_survey(folder, tile_px=0)
    tiled = process_survey(folder, tile_px=64, scratch=tmp_path)
    assert tiled.full_rasters.windows > 4  # 64 px rounded to a multiple of the block
    _assert_same(whole, tiled)
    assert whole.summary()["background"] == tiled.summary()["background"]
    assert whole.detection.threshold_c == tiled.detection.threshold_c


def test_rasters_equal_bit_for_bit(scene, tmp_path):
    folder, _ = scene
    run_survey(folder, out=tmp_path / "whole", tile_px=0, map_html=False, report_html=False)
    run_survey(folder, out=tmp_path / "tiled", tile_px=64, map_html=False, report_html=False)
    for name in ("surface_c.tif", "delta_c.tif"):
        with rasterio.open(tmp_path / "whole" / name) as a, rasterio.open(tmp_path / "tiled" / name) as b:
            assert a.transform == b.transform and a.shape == b.shape and a.crs == b.crs
            np.testing.assert_array_equal(a.read(1), b.read(1))
    assert not list(tmp_path.glob(".wetmap-windows-*/*.raw"))  # scratch arrays are gone


def test_preview_mode_keeps_exact_anomalies(scene, tmp_path, monkeypatch):
    """With a coarse preview (4 x 4 blocks) the anomalies stay exact; the figures use the preview."""
    folder, whole = scene
    monkeypatch.setattr(win, "PREVIEW_MAX_SIDE", 100)
    tiled = process_survey(folder, tile_px=64, scratch=tmp_path)
    assert tiled.full_rasters.preview_factor == 4
    assert tiled.grid.shape == (80, 100) and tiled.surface_c.shape == (80, 100)
    assert tiled.grid.pixel_m == pytest.approx(4 * PIXEL_M)
    _assert_same(whole, tiled, summary=False)
    assert tiled.summary()["method"]["pixel_m"] == PIXEL_M
    run_survey(folder, out=tmp_path / "out", tile_px=64)  # the map and the report draw the preview
    assert (tmp_path / "out" / "map.html").is_file() and (tmp_path / "out" / "report.html").is_file()
    with rasterio.open(tmp_path / "out" / "delta_c.tif") as src:
        assert src.shape == (ROWS, COLS)


def test_survey_key_selects_windows(tmp_path):
    folder = _write_scene(tmp_path / "keyed", tile_px=100)  # rounded to 96, a multiple of the 8 px block
    result = process_survey(folder, scratch=tmp_path)
    assert result.full_rasters is not None and result.full_rasters.tile_px == 96
    assert process_survey(folder, tile_px=0).full_rasters is None


def test_distributed_local_cluster_equals_threads(scene, tmp_path):
    """A dask.distributed LocalCluster (in-process workers) gives the threaded run's result."""
    from distributed import Client, LocalCluster

    folder, _ = scene
    threaded = process_survey(folder, tile_px=64, scratch=tmp_path)
    with LocalCluster(processes=False, n_workers=1, threads_per_worker=2, dashboard_address=None) as cluster, \
            Client(cluster) as client:
        clustered = process_survey(folder, tile_px=64, scheduler=client, scratch=tmp_path)
    assert len(threaded.anomalies) == len(clustered.anomalies)
    for x, y in zip(threaded.anomalies, clustered.anomalies):
        assert x.geometry.equals(y.geometry)
        assert (x.area_m2, x.delta_mean_c, x.delta_max_c, x.status) == (y.area_m2, y.delta_mean_c, y.delta_max_c,
                                                                           y.status)
    assert threaded.summary() == clustered.summary()


def test_window_progress_reports_every_window(scene, tmp_path):
    folder, _ = scene
    seen: list[tuple[str, int, int]] = []
    stages: list[str] = []
    process_survey(folder, tile_px=128, scratch=tmp_path, progress=stages.append,
                   window_progress=lambda label, done, total: seen.append((label, done, total)))
    windows = math.ceil(ROWS / 128) * math.ceil(COLS / 128)
    labels = list(dict.fromkeys(label for label, _, _ in seen))
    assert labels[:4] == ["surface temperature", "background estimate 2", "background estimate 3", "anomaly outlines"]
    for label in labels:
        counts = [d for l, d, t in seen if l == label]
        totals = {t for l, d, t in seen if l == label}
        assert len(totals) == 1 and counts[0] == 0 and counts[-1] == totals.pop() and sorted(counts) == counts
        if not label.startswith("writing"):  # the GeoTIFFs are written in bands of whole blocks
            assert counts[-1] == windows
    assert "writing delta_c.tif" in labels  # surface_c.tif is written in the background meanwhile
    assert any("windows of 128 px" in s for s in stages)


# ------------------------------------------------------------------------------ pieces


def _blobby(rng, shape, *, fill=0.45, nan=0.03):
    """A random field with blobs, holes, pockets and corner contacts; NaN pixels scattered in blocks."""
    from scipy import ndimage

    noise = ndimage.uniform_filter(rng.random(shape), size=3)
    delta = (noise - np.quantile(noise, 1 - fill)) * 10.0 + 1.0
    holes = ndimage.binary_dilation(rng.random(shape) < nan / 4)
    delta[holes] = np.nan
    return delta.astype(np.float32)


@pytest.mark.parametrize("seed", range(12))
def test_merged_pieces_equal_the_raster_clean_up(seed):
    """Vector clean-up over windows == anomaly_mask + label_regions + polygonize, on random fields."""
    rng = np.random.default_rng(seed)
    shape = (int(rng.integers(20, 90)), int(rng.integers(20, 90)))
    delta = _blobby(rng, shape)
    min_pixels = int(rng.integers(1, 12))
    tile_px = int(rng.integers(3, 25))
    mask = anomaly_mask(delta, 1.0, min_pixels=min_pixels)
    labels, count = label_regions(mask)
    expected = polygonize(labels, count, Affine.identity(), outline="pixel")
    stats = region_stats(labels, count, delta)
    windows = win.windows_of(shape, tile_px)
    pieces = [seams.tile_pieces(delta[r:r + h, c:c + w], row0=r, col0=c, grid_shape=shape, threshold_c=1.0,
                                min_pixels=min_pixels) for r, c, h, w in windows]

    merged = seams.merge_pieces(pieces, windows, grid_shape=shape, tile_px=tile_px, min_pixels=min_pixels,
                                read_delta=lambda rows, cols: delta[rows, cols])
    assert len(merged.polygons) == count
    for i in range(count):
        assert merged.polygons[i].equals(expected[i]), (seed, i)
    np.testing.assert_array_equal(merged.pixels, stats.pixel_count)
    np.testing.assert_allclose(merged.delta_mean, stats.mean, rtol=0, atol=1e-9)
    np.testing.assert_array_equal(merged.delta_max, stats.max)
    transform = Affine(0.05, 0.0, 500.0, 0.0, -0.05, 900.0)
    smooth = smooth_pixel_polygons(merged.polygons, transform)
    reference = polygonize(labels, count, transform)
    for a, b in zip(smooth, reference):
        assert a.equals(b) and abs(a.area - b.area) < 1e-9 and abs(a.length - b.length) < 1e-9


# -------------------------------------------------------------------------- rasterising


@pytest.mark.parametrize("seed", range(6))
def test_rasterize_window_pixel_centre_rule(seed):
    """Pixel centres inside (shapely.contains_xy) == rasterised, and windows == whole grid."""
    rng = np.random.default_rng(seed)
    transform = Affine(0.25, 0.0, 100.0, 0.0, -0.25, 200.0)
    shape = (60, 80)
    blobs = [shapely.Point(100 + rng.uniform(2, 18), 200 - rng.uniform(2, 13)).buffer(rng.uniform(1, 5), 7)
             for _ in range(6)]
    holes = [shapely.Point(100 + rng.uniform(2, 18), 200 - rng.uniform(2, 13)).buffer(rng.uniform(0.5, 2), 5)
             for _ in range(4)]
    geom = shapely.union_all(blobs).difference(shapely.union_all(holes))
    edges = win.pixel_edges(geom, transform)
    whole = win.rasterize_window(edges, row0=0, col0=0, shape=shape)
    rr, cc = np.mgrid[0:shape[0], 0:shape[1]]
    xs, ys = transform @ (cc + 0.5, rr + 0.5)
    inside = shapely.contains_xy(geom, xs, ys)
    near_edge = shapely.distance(geom.boundary, shapely.points(xs, ys)) < 1e-9
    np.testing.assert_array_equal(whole[~near_edge], inside[~near_edge])
    for r0, c0, h, w in win.windows_of(shape, int(rng.integers(5, 30))):
        np.testing.assert_array_equal(win.rasterize_window(edges, row0=r0, col0=c0, shape=(h, w)),
                                      whole[r0:r0 + h, c0:c0 + w])


def test_rasterize_matches_gdal_off_the_edges():
    """rasterio.features.geometry_mask (GDAL) gives the same pixels where no centre lies on an edge."""
    from rasterio.features import geometry_mask

    transform = Affine(0.1, 0.0, 0.0, 0.0, -0.1, 10.0)
    geom = shapely.Polygon([(0.33, 0.27), (9.61, 1.13), (8.77, 9.42), (4.04, 6.66), (0.52, 9.71)],
                           [[(3.03, 3.07), (5.11, 3.29), (4.47, 5.02)]])
    ours = win.roof_mask(geom, transform, (100, 100))
    gdal = geometry_mask([geom], out_shape=(100, 100), transform=transform, invert=True)
    np.testing.assert_array_equal(ours, gdal)


@pytest.mark.parametrize("row0,col0,shape", [(0, 0, (50, 70)), (16, 24, (20, 30)), (37, 3, (13, 61)),
                                             (48, 64, (2, 6))])
def test_fast_upsampling_is_bit_identical(row0, col0, shape):
    """upsample_window fills runs of columns by broadcasting; the reference gathers the two
    block nodes of every pixel (numpy fancy indexing): the same float32 operations in the
    same order, so the same bits."""
    from wetmap.detect import interp_axis

    rng = np.random.default_rng(3)
    grid = rng.normal(10.0, 2.0, (7, 9))
    fast = upsample_window(grid, 8, shape=shape, row0=row0, col0=col0)
    r0, r1, wr = interp_axis(row0, shape[0], grid.shape[0], 8)
    c0, c1, wc = interp_axis(col0, shape[1], grid.shape[1], 8)
    g = grid.astype(np.float32)
    by_row = g[r0] * (1 - wr)[:, None] + g[r1] * wr[:, None]
    ref = np.multiply(by_row[:, c0], 1 - wc)
    ref += by_row[:, c1] * wc
    assert fast.dtype == ref.dtype == np.float32
    assert np.array_equal(fast.view(np.uint32), ref.view(np.uint32))


def test_tile_size_rounding_and_switch():
    assert win.choose_tile_px(8, 64, (10, 10)) == 64
    assert win.choose_tile_px(8, 3, (10, 10)) == 8  # at least one block
    assert win.choose_tile_px(89, None, (100, 100)) == 0  # small: whole array
    big = win.choose_tile_px(89, None, (20000, 20000))
    assert big % 89 == 0 and 0.75 * win.TILE_TARGET_PX - 89 <= big <= 1.33 * win.TILE_TARGET_PX + 89
    need = math.ceil(20000 / win.PREVIEW_MAX_SIDE)
    assert win.preview_factor(big, need) == need  # preview cells never straddle windows


def test_unknown_scheduler_is_a_clean_error():
    from wetmap.errors import WetmapError

    with pytest.raises(WetmapError, match="scheduler"):
        tiles.Engine(42)


@pytest.mark.parametrize("blocks", [2, 3, 5])
def test_one_window_equals_many_windows_in_memory(blocks):
    """The one engine on an array in memory: the whole array as one window and the same array
    cut into windows of 2, 3 and 5 background blocks give the same regions and statistics, and
    the same background and delta-T bit for bit (a ramp, two sections, a wet patch with a cool
    pixel inside, a wet strip across seams, an excluded square and a nodata patch)."""
    from wetmap.detect import background_grid
    from wetmap.tiles import detect_array

    rng = np.random.default_rng(3)
    shape = (150, 190)
    surface = (5.0 + np.linspace(0.0, 1.0, shape[1])[None, :] + rng.normal(0.0, 0.1, shape)).astype(np.float32)
    surface[20:60, 30:90] += 2.5
    surface[40, 50] -= 3.0
    surface[100:104, 20:180] += 2.0
    surface[120:130, 10:20] = np.nan
    usable = np.ones(shape, bool)
    usable[70:80, 70:80] = False
    labels = np.zeros(shape, np.int16)
    labels[:, 95:] = 1
    kw = dict(pixel_m=0.1, threshold_c=1.0, background_m=4.0, min_area_m2=0.1, labels=labels, names=("A", "B"))
    one = detect_array(surface, usable, **kw)
    tile_px = blocks * background_grid(0.1, 4.0).block_px
    many = detect_array(surface, usable, tile_px=tile_px, **kw)
    assert len(win.windows_of(shape, tile_px)) > 4
    assert len(one.pixel_polygons) >= 2 and len(one.pixel_polygons) == len(many.pixel_polygons)
    assert all(a.equals(b) for a, b in zip(one.pixel_polygons, many.pixel_polygons))
    np.testing.assert_array_equal(one.pixels, many.pixels)
    np.testing.assert_allclose(one.delta_mean, many.delta_mean, rtol=0, atol=1e-9)
    np.testing.assert_array_equal(one.delta_max, many.delta_max)
    for name in ("background_c", "delta_c", "mask"):
        np.testing.assert_array_equal(getattr(one.detection, name), getattr(many.detection, name))
    # and the raster clean-up (the slow reference) agrees with the regions merged across seams
    assert np.array_equal(one.detection.mask, anomaly_mask(one.detection.delta_c, 1.0,
                                                           min_pixels=one.detection.min_pixels))
