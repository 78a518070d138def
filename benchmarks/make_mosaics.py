"""Write large synthetic survey folders for the benchmarks (invented roofs, invented data).

Each size gets ``benchmarks/out/roof_<N>mpx/``: a float32 GeoTIFF of apparent temperature
(0.03 m pixels, tiled 512, deflate, nodata -9999) of a flat roof with a smooth gradient,
pixel noise, warm wet patches and rooftop units, plus survey.toml, the outline, the
exclusions and a few cores. Written strip by strip, so even 256 Mpx needs little memory;
a folder that already exists is kept (delete it to regenerate).

    python benchmarks/make_mosaics.py 16 32 64 256
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import numpy as np

OUT = Path(__file__).resolve().parent / "out"
PIXEL_M = 0.03
X0, Y0 = 500000.0, 5500000.0  # upper-left corner, UTM zone 33N (an invented site)
STRIP = 512


def _patches(rng: np.random.Generator, width_m: float, height_m: float) -> np.ndarray:
    """Wet patches ``(x, y, rx, ry, angle, warm_c)`` in plan metres, one per ~150 m2."""
    n = max(4, int(width_m * height_m / 150.0))
    x = rng.uniform(3.0, width_m - 3.0, n)
    y = rng.uniform(3.0, height_m - 3.0, n)
    rx = rng.uniform(0.6, 4.0, n)
    ry = rx * rng.uniform(0.4, 1.0, n)
    return np.column_stack([x, y, rx, ry, rng.uniform(0, math.pi, n), rng.uniform(1.5, 3.0, n)])


def make(mpx: int, *, seed: int = 1) -> Path:
    """Write the survey folder of about ``mpx`` megapixels; returns it."""
    import rasterio
    from rasterio.windows import Window

    side = int(round(math.sqrt(mpx * 1e6)))
    folder = OUT / f"roof_{mpx}mpx"
    tif = folder / "thermal" / "mosaic.tif"
    if (folder / "survey.toml").is_file() and tif.is_file():
        return folder
    (folder / "thermal").mkdir(parents=True, exist_ok=True)
    (folder / "plan").mkdir(exist_ok=True)
    rng = np.random.default_rng(seed)
    size_m = side * PIXEL_M
    patches = _patches(rng, size_m, size_m)
    transform = rasterio.Affine(PIXEL_M, 0.0, X0, 0.0, -PIXEL_M, Y0)
    profile = dict(driver="GTiff", width=side, height=side, count=1, dtype="float32", crs="EPSG:32633",
                   transform=transform, nodata=-9999.0, tiled=True, blockxsize=512, blockysize=512,
                   compress="deflate", BIGTIFF="IF_SAFER", num_threads="ALL_CPUS")
    cols_m = (np.arange(side) + 0.5) * PIXEL_M
    with rasterio.open(tif, "w", **profile) as dst:
        for r0 in range(0, side, STRIP):
            n = min(STRIP, side - r0)
            rows_m = (np.arange(r0, r0 + n) + 0.5) * PIXEL_M  # metres down from the top edge
            strip = rng.normal(0.0, 0.12, (n, side)).astype(np.float32)
            strip += (4.0 + 0.8 * np.sin(cols_m / 37.0))[None, :].astype(np.float32)
            strip += (0.6 * np.cos(rows_m / 53.0))[:, None].astype(np.float32)
            near = np.flatnonzero(np.abs(patches[:, 1] - (rows_m[0] + rows_m[-1]) / 2)
                                  <= patches[:, 2] + 0.3 + n * PIXEL_M / 2)
            for x, y, rx, ry, angle, warm in patches[near]:
                c0, c1 = max(0, int((x - rx - 0.3) / PIXEL_M)), min(side, int((x + rx + 0.3) / PIXEL_M) + 1)
                rr = rows_m[:, None]
                cc = cols_m[None, c0:c1]
                u = ((cc - x) * math.cos(angle) + (rr - y) * math.sin(angle)) / rx
                v = (-(cc - x) * math.sin(angle) + (rr - y) * math.cos(angle)) / ry
                d = np.sqrt(u * u + v * v)  # 1 at the patch's edge
                edge = np.clip((1.15 - d) / 0.3, 0.0, 1.0)  # a soft edge
                strip[:, c0:c1] += (warm * edge).astype(np.float32)
            if r0 == 0:  # a nodata corner, as drone mosaics have
                strip[:40, :60] = -9999.0
            dst.write(strip, 1, window=Window(0, r0, side, n))
    e = size_m
    outline = [[X0 + 0.5, Y0 - 0.5], [X0 + e - 0.5, Y0 - 0.5], [X0 + e - 0.5, Y0 - e + 0.5],
               [X0 + 0.4 * e, Y0 - e + 0.5], [X0 + 0.4 * e, Y0 - 0.7 * e], [X0 + 0.5, Y0 - 0.7 * e], [X0 + 0.5, Y0 - 0.5]]
    units = []
    for ux in np.arange(12.0, e - 12.0, 25.0):
        for uy in np.arange(12.0, e - 12.0, 25.0):
            x, y = X0 + ux, Y0 - uy
            units.append([[x, y], [x + 3.0, y], [x + 3.0, y - 2.0], [x, y - 2.0], [x, y]])

    def fc(polys):
        return json.dumps({"type": "FeatureCollection",
                           "crs": {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}},
                           "features": [{"type": "Feature", "properties": {},
                                         "geometry": {"type": "Polygon", "coordinates": [p]}} for p in polys]})

    (folder / "plan" / "outline.geojson").write_text(fc([outline]))
    (folder / "plan" / "exclusions.geojson").write_text(fc(units))
    lines = ["id,x,y,result"]
    for i, (x, y, *_rest) in enumerate(patches[:4]):
        lines.append(f"W{i + 1},{X0 + x:.3f},{Y0 - y:.3f},wet")
    for i, (x, y) in enumerate([(0.55 * e, 0.2 * e), (0.8 * e, 0.85 * e)]):
        lines.append(f"D{i + 1},{X0 + x:.3f},{Y0 - y:.3f},dry")
    (folder / "cores.csv").write_text("\n".join(lines) + "\n")
    # 1.2 x 2.4 m boards up to 512 Mpx; beyond, 2.4 x 2.4 m: wetmap refuses a take-off that could
    # need more than 250 000 boards (about 540 Mpx of roof at 3 cm with the smaller board)
    board = "[1.2, 2.4]" if mpx <= 512 else "[2.4, 2.4]"
    (folder / "survey.toml").write_text(f"""# Invented benchmark roof ({side} x {side} px at {PIXEL_M} m): synthetic data.
[survey]
title = "Invented benchmark roof {mpx} Mpx"
kind = "roof"
crs = "EPSG:32633"

[conditions]
air_c = 3.0
humidity_pct = 65
wind_m_s = 2.0
sky = "clear"
reflected_c = -20.0

[camera]
emissivity = 0.94

[plan]
outline = "plan/outline.geojson"
exclusions = "plan/exclusions.geojson"

[[mosaic]]
path = "thermal/mosaic.tif"
units = "C"

[detect]
delta_c = 1.0

[cores]
path = "cores.csv"

[repair]
margin_m = 0.3
board_m = {board}
""", encoding="utf-8")
    return folder


if __name__ == "__main__":
    for arg in sys.argv[1:] or ["16", "32", "64", "256"]:
        print(make(int(arg)))
