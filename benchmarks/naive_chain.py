"""The naive whole-array chain a user would script with the same libraries (the baseline).

read all -> correct (the same physics, via wetmap.radiometry.surface_from_apparent) ->
roof mask -> 16 x 16 block median background, 41 x 41 median on the coarse grid,
ndimage.zoom back up -> threshold -> rasterio sieve -> rasterio shapes -> GeoPackage.

    python benchmarks/naive_chain.py SURVEY_DIR OUT.gpkg
"""

from __future__ import annotations

import json
import sys
import tomllib
from pathlib import Path

import numpy as np


def main(folder: Path, out: Path) -> int:
    import geopandas as gpd
    import rasterio
    import shapely
    from rasterio.features import geometry_mask, shapes, sieve
    from scipy import ndimage

    from wetmap.radiometry import surface_from_apparent

    cfg = tomllib.loads((folder / "survey.toml").read_text())
    with rasterio.open(folder / cfg["mosaic"][0]["path"]) as src:  # read all
        apparent = src.read(1, masked=True).filled(np.nan).astype(np.float32)
        transform, crs = src.transform, src.crs
    apparent += np.float32(273.15)
    surface = surface_from_apparent(apparent, emissivity=cfg["camera"]["emissivity"],  # correct
                                    reflected_k=cfg["conditions"]["reflected_c"] + 273.15)
    del apparent
    surface -= np.float32(273.15)
    outline = shapely.geometry.shape(json.loads((folder / cfg["plan"]["outline"]).read_text())["features"][0]["geometry"])
    units = [shapely.geometry.shape(f["geometry"])
             for f in json.loads((folder / cfg["plan"]["exclusions"]).read_text())["features"]]
    roof = geometry_mask([outline.difference(shapely.union_all(units))], out_shape=surface.shape,
                         transform=transform, invert=True)
    surface[~roof] = np.nan
    # background: 16 x 16 block medians (gaps filled with the roof's median), 41 x 41 median, zoom up
    rows, cols = surface.shape
    b = 16
    filled = np.where(np.isfinite(surface), surface, np.float32(np.nanmedian(surface)))
    blocks = filled[: rows // b * b, : cols // b * b].reshape(rows // b, b, cols // b, b)
    coarse = np.median(blocks.transpose(0, 2, 1, 3).reshape(rows // b, cols // b, b * b), axis=-1)
    del filled, blocks
    coarse = ndimage.median_filter(coarse.astype(np.float32), size=41, mode="nearest")
    background = ndimage.zoom(coarse, b, order=1)
    background = np.pad(background, ((0, rows - background.shape[0]), (0, cols - background.shape[1])), mode="edge")
    delta = surface - background  # threshold
    del background, surface
    mask = (delta > cfg["detect"]["delta_c"]).astype(np.uint8)
    del delta
    min_pixels = int(np.ceil(cfg["detect"].get("min_area_m2", 0.5) / abs(transform.a * transform.e)))
    sieved = sieve(mask, size=min_pixels, connectivity=4)  # sieve
    del mask
    geoms = [shapely.geometry.shape(g) for g, _ in shapes(sieved, mask=sieved > 0, transform=transform,
                                                          connectivity=4)]  # shapes
    frame = gpd.GeoDataFrame({"area_m2": [g.area for g in geoms]}, geometry=geoms, crs=crs)
    frame.to_file(out, driver="GPKG")  # GPKG
    print(len(geoms))
    return 0


if __name__ == "__main__":
    sys.exit(main(Path(sys.argv[1]), Path(sys.argv[2])))
