"""Measure ``wetmap run`` against the naive whole-array chain, in one run of this script.

Every measurement is a fresh subprocess: wall time from start to exit (interpreter start
and imports included, as a user sees it) and the peak resident memory of that process
(``ru_maxrss`` from ``os.wait4``). The two chains alternate, ``--repeat`` times each, and
the medians are reported with their ratios (wetmap / naive). The machines are noisy
(10-40 % between identical runs): compare ratios from one run.

    python benchmarks/run_benchmarks.py                 # 16, 32, 64, 256 Mpx; writes RESULTS.md
    python benchmarks/run_benchmarks.py --sizes 16 --repeat 3 --no-write

Columns: the naive chain (naive_chain.py) writes one GeoPackage of polygons; *wetmap
detection* (detect_only.py) is the same job done by wetmap (robust background, exact
clean-up, smoothed polygons to a GeoPackage, plus surface_c.tif and delta_c.tif), in
windows when the mosaic is large; ``wetmap run`` does the whole job (confirmations,
quantities, GeoPackages, GeoJSON, DXF, CSV, JSON, both GeoTIFFs, map.html, report.html);
``--no-map --no-report`` leaves out the two HTML pages; *whole-array detection* is
detect_only.py with ``tile_px = 0`` (the small-mosaic path).
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
OUT = HERE / "out"
sys.path.insert(0, str(HERE))

from make_mosaics import make  # noqa: E402


#: Wait (up to QUIET_WAIT_S) for the 1-minute load average to fall below this before a run:
#: other work on the machine would slow one chain and not the other.
QUIET_LOAD = 0.6
QUIET_WAIT_S = 900
LOADS: list[float] = []
LOG: list[str] = []  # one line a measurement, as printed
STARTED = time.time()


def wait_quiet() -> float:
    """Wait for a quiet machine; returns the load average when the run starts."""
    start = time.monotonic()
    while os.getloadavg()[0] >= QUIET_LOAD and time.monotonic() - start < QUIET_WAIT_S:
        time.sleep(5)
    return os.getloadavg()[0]


def run(cmd: list[str]) -> tuple[float, float, str]:
    """``(seconds, peak MB, stdout)`` of one fresh process, its own peak from ``os.wait4``."""
    import tempfile

    LOADS.append(wait_quiet())

    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        start = time.perf_counter()
        proc = subprocess.Popen(cmd, stdout=out, stderr=err)
        _, status, usage = os.wait4(proc.pid, 0)  # reaps the child: its own rusage
        seconds = time.perf_counter() - start
        proc.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0)
        err.seek(0)
        text, errors = out.read().decode(), err.read().decode()
    if proc.returncode:
        raise RuntimeError(f"{' '.join(cmd)} failed ({proc.returncode}):\n{errors[-3000:]}")
    return seconds, usage.ru_maxrss / 1024.0, text


def commands(size: int, folder: Path) -> dict[str, list[str]]:
    py = sys.executable
    res = OUT / f"results_{size}mpx"
    for sub in ("detect", "detect_whole"):
        (OUT / f"{sub}_{size}mpx").mkdir(parents=True, exist_ok=True)
    return {
        "naive": [py, str(HERE / "naive_chain.py"), str(folder), str(OUT / f"naive_{size}mpx.gpkg")],
        "detect": [py, str(HERE / "detect_only.py"), str(folder), str(OUT / f"detect_{size}mpx" / "anomalies.gpkg")],
        "wetmap": [py, "-m", "wetmap_cli.main", "run", str(folder), "--out", str(res), "--quiet"],
        "wetmap_core": [py, "-m", "wetmap_cli.main", "run", str(folder), "--out", str(res) + "_core", "--quiet",
                        "--no-map", "--no-report"],
        "detect_whole": [py, str(HERE / "detect_only.py"), str(folder),
                         str(OUT / f"detect_whole_{size}mpx" / "anomalies.gpkg"), "0"],
    }


def bench(sizes: list[int], repeat: int, whole_up_to: int) -> list[dict]:
    rows = []
    for size in sizes:
        folder = make(size)
        cmds = commands(size, folder)
        kinds = ["naive", "detect", "wetmap", "wetmap_core"] + (["detect_whole"] if size <= whole_up_to else [])
        got: dict[str, list[tuple[float, float]]] = {k: [] for k in kinds}
        counts: dict[str, str] = {}
        for _ in range(repeat):
            for k in kinds:
                seconds, peak, out = run(cmds[k])
                got[k].append((seconds, peak))
                counts[k] = out.strip().splitlines()[0].split()[0] if out.strip() else "?"
                LOG.append(f"{size:>4} Mpx  {k:<13} {seconds:7.1f} s  {peak:8.0f} MB  ({counts[k]} polygons; "
                           f"load {LOADS[-1]:.2f} at start)")
                print(LOG[-1], flush=True)
        row = {"mpx": size, "counts": counts}
        for k in kinds:
            row[k] = (statistics.median(s for s, _ in got[k]), statistics.median(m for _, m in got[k]))
        rows.append(row)
    return rows


def table(rows: list[dict]) -> str:
    out = ["| Mpx | naive chain s / MB | wetmap detection s / MB | ratio time / memory | wetmap run s / MB "
           "| ratio time / memory | run without map, report s / MB | whole-array detection s / MB |",
           "|---:|---:|---:|---:|---:|---:|---:|---:|"]
    for r in rows:
        ns, nm = r["naive"]
        ds, dm = r["detect"]
        ws, wm = r["wetmap"]
        cs, cm = r["wetmap_core"]
        whole = r.get("detect_whole")
        whole_text = f"{whole[0]:.1f} / {whole[1]:.0f}" if whole else "-"
        out.append(f"| {r['mpx']} | {ns:.1f} / {nm:.0f} | {ds:.1f} / {dm:.0f} | {ds / ns:.2f} / {dm / nm:.2f} "
                   f"| {ws:.1f} / {wm:.0f} | {ws / ns:.2f} / {wm / nm:.2f} | {cs:.1f} / {cm:.0f} | {whole_text} |")
    return "\n".join(out) + "\n"


def _same_results(a: Path, b: Path) -> list[str]:
    """Names of the figures that differ between two results folders (summary.json, anomalies)."""
    import json

    import geopandas as gpd

    differ = []
    sa = json.loads((a / "summary.json").read_text(encoding="utf-8"))
    sb = json.loads((b / "summary.json").read_text(encoding="utf-8"))
    volatile = {"processing", "created", "version", "run"}  # run facts, not results
    differ += [f"summary.json {k}" for k in sorted(set(sa) | set(sb)) if k not in volatile and sa.get(k) != sb.get(k)]
    ga, gb = gpd.read_file(a / "anomalies.gpkg"), gpd.read_file(b / "anomalies.gpkg")
    if len(ga) != len(gb):
        differ.append(f"anomalies.gpkg: {len(ga)} against {len(gb)} rows")
    else:
        for col in ga.columns:
            if col != "geometry" and not ga[col].equals(gb[col]):
                differ.append(f"anomalies.gpkg {col}")
        if not all(x.equals(y) for x, y in zip(ga.geometry, gb.geometry)):
            differ.append("anomalies.gpkg geometry")
    return differ


def cluster_run(size: int) -> str:
    """``wetmap run --scheduler`` on a LocalCluster of 2 single-threaded workers, against the threaded run."""
    from dask.distributed import LocalCluster

    folder = make(size)
    threaded = OUT / f"results_{size}mpx"
    if not (threaded / "summary.json").is_file():
        run(commands(size, folder)["wetmap"])
    res = OUT / f"results_{size}mpx_cluster"
    start = time.perf_counter()
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        up = time.perf_counter() - start
        seconds, peak, _ = run([sys.executable, "-m", "wetmap_cli.main", "run", str(folder), "--out", str(res),
                                "--quiet", "--scheduler", cluster.scheduler_address])
    differ = _same_results(threaded, res)
    same = "equal to the threaded run (summary.json and anomalies.gpkg)" if not differ else \
        "DIFFERENT from the threaded run: " + ", ".join(differ)
    line = (f"LocalCluster (2 workers, 1 thread each) at {size} Mpx: `wetmap run --scheduler` {seconds:.1f} s "
            f"(client process peak {peak:.0f} MB; the cluster took {up:.1f} s to start, not counted); {same}.\n")
    print(line, flush=True)
    return line


def machine() -> str:
    import numpy
    import rasterio
    import shapely

    mem_gb = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / 2**30
    return (f"{os.cpu_count()} cores, {mem_gb:.0f} GB, {platform.system()} {platform.machine()}, Python "
            f"{platform.python_version()}, numpy {numpy.__version__}, rasterio {rasterio.__version__} (GDAL "
            f"{rasterio.__gdal_version__}), shapely {shapely.__version__}")


def main() -> int:
    global QUIET_LOAD
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--sizes", type=int, nargs="+", default=[16, 32, 64, 256])
    ap.add_argument("--repeat", type=int, default=1)
    ap.add_argument("--whole-up-to", type=int, default=32, help="also time --tile-px 0 up to this size (Mpx)")
    ap.add_argument("--no-write", action="store_true", help="print the table only (do not write RESULTS.md)")
    ap.add_argument("--quiet-load", type=float, default=QUIET_LOAD,
                    help=f"wait for a 1-minute load average below this before each run (default {QUIET_LOAD}; "
                         "on a shared machine set it high and compare the ratios only)")
    ap.add_argument("--cluster", type=int, default=0, metavar="MPX",
                    help="also run `wetmap run --scheduler` on a LocalCluster of 2 workers at this size and "
                         "compare its results with the threaded run's")
    args = ap.parse_args()
    QUIET_LOAD = args.quiet_load
    OUT.mkdir(exist_ok=True)
    rows = bench(args.sizes, args.repeat, args.whole_up_to)
    text = table(rows)
    if args.cluster:
        text += "\n" + cluster_run(args.cluster)
    print(text)
    if not args.no_write:  # this run's section above the earlier runs' (they stay: the log of the work)
        path = HERE / "RESULTS.md"
        earlier = path.read_text(encoding="utf-8") if path.is_file() else ""
        earlier = earlier.split("\n## ", 1)[1] if "\n## " in earlier else ""
        section = (
            f"## {time.strftime('%Y-%m-%d %H:%M', time.gmtime(STARTED))}-{time.strftime('%H:%M UTC', time.gmtime())}, "
            f"commit {commit()}\n\nWritten by `python benchmarks/run_benchmarks.py {' '.join(sys.argv[1:])}`. "
            f"Machine: {machine()}.\n\n{text}\n"
            "Seconds: wall time of a fresh process (start-up and imports included), median of the repeats; MB: "
            "its peak resident memory. Ratios: wetmap / naive chain. Each run waited for a 1-minute load average "
            f"below {QUIET_LOAD} (highest at a start: {max(LOADS):.2f}).\n\n```\n" + "\n".join(LOG) + "\n```\n")
        path.write_text("# Benchmark results\n\n" + section + ("\n## " + earlier if earlier else ""), encoding="utf-8")
    return 0


def commit() -> str:
    """The checked-out commit (``+changes`` when the tree differs from it), or ``?`` outside git."""
    try:
        head = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=HERE, capture_output=True, text=True,
                              check=True).stdout.strip()
        dirty = subprocess.run(["git", "status", "--porcelain", "--untracked-files=no"], cwd=HERE,
                               capture_output=True, text=True, check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return "?"
    return head + (" +changes" if dirty else "")


if __name__ == "__main__":
    sys.exit(main())
