"""Where the time of one ``wetmap run`` goes: each stage's seconds and the peak memory so far.

Runs ``run_survey`` (what ``wetmap run`` calls) in this one process, with the processing
steps and each result writer wrapped in a timer (so the stages are the ones ``wetmap run``
does, in its order), and prints one line per stage. The results go to a temporary folder
that is removed at the end. For the ratios against the naive chain use
run_benchmarks.py; this script says which part of wetmap's own time is which.

    python benchmarks/stages.py benchmarks/out/roof_256mpx
"""

from __future__ import annotations

import functools
import resource
import shutil
import sys
import tempfile
import time
from pathlib import Path


def peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def report(name: str, seconds: float) -> None:
    print(f"{name:<40} {seconds:7.1f} s   peak {peak_mb():6.0f} MB", flush=True)


def timed(name: str, fn):
    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        t = time.perf_counter()
        try:
            return fn(*args, **kwargs)
        finally:
            report(name, time.perf_counter() - t)

    return wrapper


def main(folder: Path) -> int:
    start = time.perf_counter()
    import ezdxf  # noqa: F401
    import folium  # noqa: F401
    import geopandas  # noqa: F401
    import matplotlib  # noqa: F401

    import wetmap.image_checks
    import wetmap.pipeline as pipeline
    from wetmap.export import cad, gis, report as report_html, tables, webmap
    from wetmap.pipeline import process_survey
    from wetmap.tiles import FullRasters

    report("imports", time.perf_counter() - start)
    # steps inside process_survey (each reported when it ends, before process_survey's total)
    for module, name, label in [(pipeline, "detect_in_windows", "  windowed detection"),
                                (pipeline, "detect_array", "  whole-array detection (one window)"),
                                (pipeline, "polygonize", "  outlines (whole array)"),
                                (pipeline, "simplify_outlines", "  simplified outlines"),
                                (wetmap.image_checks, "assess_imagery", "  imagery checks (focus...)"),
                                (pipeline, "compute_quantities", "  quantities (repair margin, boards)")]:
        if hasattr(module, name):
            setattr(module, name, timed(label, getattr(module, name)))
    for module, name in [(tables, "write_summary"), (tables, "write_quantities"), (tables, "write_takeoff"),
                         (gis, "write_anomalies"), (gis, "write_repair"), (cad, "write_dxf"), (gis, "write_raster"),
                         (webmap, "write_map"), (report_html, "build_report"), (report_html, "write_pdf"),
                         (FullRasters, "place")]:
        if hasattr(module, name):
            setattr(module, name, timed(name, getattr(module, name)))

    # the forked writers report from their own processes; these time the parent's wait for each
    dxf_beside, beside = cad.write_dxf_beside, pipeline.write_beside
    cad.write_dxf_beside = lambda result, path: timed("wait for repair.dxf (forked)", dxf_beside(result, path))
    pipeline.write_beside = lambda fn, path, *a, **k: timed(f"wait for {Path(path).name} (forked)",
                                                           beside(fn, path, *a, **k))
    pipeline.process_survey = timed("process_survey (detection and all)", process_survey)
    tmp = Path(tempfile.mkdtemp(prefix="wetmap-stages-"))
    try:  # as `wetmap run` does: the window rasters live in the staging folder until written
        result = pipeline.run_survey(folder, out=tmp / "results")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    print(f"{'total':<40} {time.perf_counter() - start:7.1f} s   peak {peak_mb():6.0f} MB "
          f"({len(result.anomalies)} anomalies, {result.takeoff.count} boards)")
    return 0


if __name__ == "__main__":
    sys.exit(main(Path(sys.argv[1])))
