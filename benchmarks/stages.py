"""Where the time of one ``wetmap run`` goes: each stage's seconds and the peak memory so far.

Runs the same work as ``wetmap run`` in this one process -- imports, ``process_survey``
(detection and everything before writing), then each result writer in the order
``write_results`` calls them -- and prints one line per stage. Written files go to a
temporary folder that is removed at the end. For the ratios against the naive chain use
run_benchmarks.py; this script says which part of wetmap's own time is which.

    python benchmarks/stages.py benchmarks/out/roof_256mpx
"""

from __future__ import annotations

import resource
import shutil
import sys
import tempfile
import time
from pathlib import Path


def peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def main(folder: Path) -> int:
    start = time.perf_counter()
    rows: list[tuple[str, float, float]] = []

    def stage(name: str, fn) -> object:
        t = time.perf_counter()
        out = fn()
        rows.append((name, time.perf_counter() - t, peak_mb()))
        print(f"{name:<40} {rows[-1][1]:7.1f} s   peak {rows[-1][2]:6.0f} MB", flush=True)
        return out

    def imports() -> None:
        import ezdxf  # noqa: F401
        import folium  # noqa: F401
        import geopandas  # noqa: F401
        import matplotlib  # noqa: F401

        import wetmap.pipeline  # noqa: F401

    stage("imports", imports)
    from wetmap.export import cad, gis, report, tables, webmap
    from wetmap.pipeline import process_survey

    result = stage("process_survey (detection and all)", lambda: process_survey(folder))
    tmp = Path(tempfile.mkdtemp(prefix="wetmap-stages-"))
    try:
        stage("summary.json, quantities.csv", lambda: (tables.write_summary(result, tmp / "summary.json"),
                                                       tables.write_quantities(result, tmp / "quantities.csv")))
        stage("anomalies.gpkg, .geojson, repair.gpkg",
              lambda: (gis.write_anomalies(result, tmp / "anomalies.gpkg", tmp / "anomalies.geojson"),
                       gis.write_repair(result, tmp / "repair.gpkg")))
        stage("repair.dxf", lambda: cad.write_dxf(result, tmp / "repair.dxf"))
        if result.full_rasters is not None:
            stage("surface_c.tif, delta_c.tif (placed)", lambda: result.full_rasters.place(tmp))
        else:
            stage("surface_c.tif, delta_c.tif", lambda: (
                gis.write_raster(result.surface_c, result.grid, tmp / "surface_c.tif"),
                gis.write_raster(result.detection.delta_c, result.grid, tmp / "delta_c.tif")))
        stage("map.html", lambda: webmap.write_map(result, tmp / "map.html"))
        stage("report.html", lambda: report.write_report(result, tmp / "report.html"))
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    print(f"{'total':<40} {time.perf_counter() - start:7.1f} s   peak {peak_mb():6.0f} MB "
          f"({len(result.anomalies)} anomalies, {result.takeoff.count} boards)")
    return 0


if __name__ == "__main__":
    sys.exit(main(Path(sys.argv[1])))
