"""wetmap's detection chain alone: the same job as naive_chain.py, done by wetmap.

read -> correct -> roof mask -> robust dry background -> threshold -> clean-up -> smoothed
polygons -> GeoPackage, plus surface_c.tif and delta_c.tif (which the naive chain does
not write), in windows when the mosaic is large (wetmap.tiles), else as one array.
No confirmations, quantities, DXF, map or report: ``wetmap run`` adds those.

    python benchmarks/detect_only.py SURVEY_DIR OUT.gpkg [TILE_PX]
"""

from __future__ import annotations

import sys
from pathlib import Path


def main(folder: Path, out: Path, tile_px: int | None) -> int:
    import geopandas as gpd
    import numpy as np
    from shapely.geometry import Polygon

    from wetmap.detect import default_background_m
    from wetmap.export.gis import write_raster
    from wetmap.pipeline import _mask_of, _radiometry, _surface_on_grid, _union
    from wetmap.survey import load_survey
    from wetmap.tiles import detect_array, detect_in_windows
    from wetmap.vectors import read_layer, read_outline

    survey = load_survey(folder)
    crs = None if survey.survey.is_local else survey.survey.crs
    outline, _ = read_outline(survey.plan.outline, survey_crs=crs)
    exclusions = Polygon()
    if survey.plan.exclusions is not None:
        exclusions = _union(read_layer(survey.plan.exclusions, survey_crs=crs, what="exclusions").geometries)
    roof = outline.difference(exclusions)
    radiometry = _radiometry(survey, [])
    x0, y0, x1, y1 = outline.bounds
    background_m = survey.detect.background_m or default_background_m(survey.survey.kind, max(x1 - x0, y1 - y0))
    tiled = detect_in_windows(survey, outline=outline, roof=roof, radiometry=radiometry, background_m=background_m,
                              tile_px=tile_px, scratch=out.parent)
    if tiled is not None:
        polys = list(tiled.polygons)
        tiled.full_rasters.place(out.parent)
    else:
        grid, surface = _surface_on_grid(survey, outline, radiometry, [], None)
        usable = _mask_of(roof, grid) & np.isfinite(surface)
        found = detect_array(surface, usable, pixel_m=grid.pixel_m, threshold_c=survey.detect.delta_c,
                             background_m=background_m, min_area_m2=survey.detect.min_area_m2)  # one window
        polys = found.polygons(grid.transform)
        write_raster(surface, grid, out.parent / "surface_c.tif")
        write_raster(found.detection.delta_c, grid, out.parent / "delta_c.tif")
    gpd.GeoDataFrame({"area_m2": [p.area for p in polys]}, geometry=polys, crs=crs).to_file(out, driver="GPKG")
    print(len(polys))
    return 0


if __name__ == "__main__":
    sys.exit(main(Path(sys.argv[1]), Path(sys.argv[2]), int(sys.argv[3]) if len(sys.argv) > 3 else None))
