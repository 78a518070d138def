"""The ``wetmap`` command: parse, call one library function, print. Nothing else."""

from __future__ import annotations

import logging
import sys
from pathlib import Path

import click

from wetmap import __version__
from wetmap.errors import WetmapError

CAUTIONS = """\b
Cautions: a thermal survey shows apparent thermal anomalies, not measured
moisture. Every finding needs invasive verification (cores) before repair.
Roofs at night: walk the roof in daylight first, never work alone, use fall
protection near edges and guard skylights and openings. Old roofs may contain
asbestos: check before coring. Boatyards: tie ladders, never touch jack stands.
Local codes, work-safety rules and licensed roofers, engineers or accredited
marine surveyors decide; wetmap does not."""


def _fail(err: WetmapError) -> None:
    for line in err.problems:
        click.echo(f"wetmap: error: {line}", err=True)
    sys.exit(1)


class _Progress:
    """Stage lines and progress bars (windows, surveys) on stderr; nothing when quiet."""

    def __init__(self, quiet: bool):
        self.quiet = quiet
        self.bar = None
        self.done = 0

    def stage(self, message: str) -> None:
        if not self.quiet:
            self._close()
            click.echo(f"  {message}", err=True)

    def windows(self, label: str, done: int, total: int) -> None:
        if self.quiet:
            return
        if done == 0 or self.bar is None:
            self._close()
            self.bar = click.progressbar(length=total, label=f"  {label}", show_pos=True, show_eta=False,
                                         file=sys.stderr)
            self.bar.__enter__()
            self.done = 0
        if done > self.done:
            self.bar.update(done - self.done)
            self.done = done
        if done >= total:
            self._close()

    def _close(self) -> None:
        if self.bar is not None:
            self.bar.__exit__(None, None, None)
            self.bar = None


_SCHEDULER_HELP = ("Where windows of a large mosaic run: threads (default), processes, or the address of a "
                   "dask.distributed scheduler (e.g. tcp://10.0.0.5:8786; workers must see the survey folder "
                   "at the same path).")
_TILE_HELP = "Window side in pixels for processing in windows (0: the whole array at once); overrides [detect] tile_px."


class _Commands(click.Group):
    """The command group; Ctrl-C ends a command with one line and exit status 130 (128 + SIGINT)."""

    def invoke(self, ctx: click.Context):
        try:
            return super().invoke(ctx)
        except KeyboardInterrupt:
            click.echo("\nwetmap: interrupted (Ctrl-C); earlier results are kept as they were", err=True)
            raise click.exceptions.Exit(130) from None


@click.group(cls=_Commands, help=f"Map wet roof insulation and wet hull core from thermal imagery.\n\n{CAUTIONS}",
             context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="wetmap")
def main() -> None:
    logging.basicConfig(level=logging.ERROR, format="wetmap: %(message)s")
    logging.captureWarnings(True)  # library warnings (plot layout, glyphs, ...) go to logging, not raw to stderr


@main.command(help=f"Process SURVEY_DIR and write its results (default SURVEY_DIR/results).\n\n{CAUTIONS}")
@click.argument("survey_dir", type=click.Path(path_type=Path))
@click.option("--out", "out", type=click.Path(), default=None,
              help="Write the results here instead of SURVEY_DIR/results: a new or empty folder, or one wetmap "
                   "wrote (never the survey folder or a folder holding other files).")
@click.option("--quiet", "-q", is_flag=True, help="Print only the summary line and errors.")
@click.option("--no-map", "no_map", is_flag=True, help="Do not write map.html (the interactive map).")
@click.option("--no-report", "no_report", is_flag=True, help="Do not write report.html (the printable report).")
@click.option("--scheduler", default=None, metavar="ADDRESS", help=_SCHEDULER_HELP)
@click.option("--tile-px", "tile_px", type=click.IntRange(min=0), default=None, help=_TILE_HELP)
def run(survey_dir: Path, out: str | None, quiet: bool, no_map: bool, no_report: bool, scheduler: str | None,
        tile_px: int | None) -> None:
    from wetmap.pipeline import run_survey

    bars = _Progress(quiet)
    try:
        result = run_survey(survey_dir, out=out, progress=bars.stage, map_html=not no_map, report_html=not no_report,
                            scheduler=scheduler, tile_px=tile_px, window_progress=bars.windows)
    except WetmapError as err:
        bars._close()
        _fail(err)
        return
    s = result.summary()
    for w in s["warnings"]:
        click.echo(f"warning: {w}", err=True)
    hull = s["kind"] == "hull"
    area = s.get("area_label", "roof")
    if hull:  # plan x = station, y = girth; no boards unless [repair] board_m asks for them
        where = f"{area} {s['roof_area_m2']:.2f} m2 (x = station, y = girth)"
        repair = f"repair {s['repair_area_m2']:.2f} m2" + (f", {s['boards']} boards" if s["boards"] else "")
    else:
        where = f"{area} {s['roof_area_m2']:.1f} m2"
        repair = f"repair {s['repair_area_m2']:.2f} m2, {s['boards']} boards"
    click.echo(
        f"{s['anomaly_count']} anomalies: wet {s['confirmed_wet_area_m2']:.2f} m2 confirmed, "
        f"{s['unverified_area_m2']:.2f} m2 unverified, {s['confirmed_dry_area_m2']:.2f} m2 refuted (dry); "
        f"{where}, wet fraction {100 * s['wet_fraction']:.1f} %; {repair}"
    )
    click.echo(f"results: {Path(out).resolve() if out is not None else result.survey.folder / 'results'}")
    if hull:
        click.echo("Apparent thermal anomalies only: verify by sounding and cores before any repair decision.")
    else:
        click.echo("Apparent thermal anomalies only: verify by coring before any repair decision.")


@main.command(help=f"""Process many surveys (a portfolio of roofs), each writing its own results
atomically (SURVEY_DIR/results, or OUT_ROOT/<folder name>). A survey that fails never stops
the others; a table of outcomes is printed and the exit status is non-zero when any failed.

{CAUTIONS}""")
@click.argument("survey_dirs", nargs=-1, required=True, type=click.Path(path_type=Path))
@click.option("--out-root", "out_root", type=click.Path(), default=None,
              help="Write each survey's results to OUT_ROOT/<folder name> instead of <folder>/results "
                   "(same-named surveys: OUT_ROOT/<parent>_<folder name>).")
@click.option("--quiet", "-q", is_flag=True, help="Print only the table of outcomes and errors.")
@click.option("--no-map", "no_map", is_flag=True, help="Do not write map.html.")
@click.option("--no-report", "no_report", is_flag=True, help="Do not write report.html.")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help=_SCHEDULER_HELP + " On a cluster every survey is a task, so many run at once.")
def batch(survey_dirs: tuple[Path, ...], out_root: str | None, quiet: bool, no_map: bool, no_report: bool,
          scheduler: str | None) -> None:
    from wetmap.batch import run_batch

    bars = _Progress(quiet)

    def survey_done(outcome, done: int, total: int) -> None:
        bars._close()
        if not quiet:
            state = "ok" if outcome.ok else "FAILED"
            click.echo(f"[{done}/{total}] {outcome.folder}: {state} ({outcome.seconds:.1f} s)", err=True)

    try:
        outcomes = run_batch(survey_dirs, scheduler=scheduler, out_root=out_root, progress=bars.stage,
                             window_progress=bars.windows, survey_done=survey_done, map_html=not no_map,
                             report_html=not no_report)
    except WetmapError as err:
        bars._close()
        _fail(err)
        return
    rows = [("survey", "outcome", "anomalies", "wet m2", "seconds", "results / problem")]
    for o in outcomes:
        if o.ok:
            rows.append((str(o.folder), "ok", str(o.anomalies), f"{o.wet_area_m2:.2f}", f"{o.seconds:.1f}", str(o.results)))
        else:
            rows.append((str(o.folder), "FAILED", "-", "-", f"{o.seconds:.1f}", o.problems[0] if o.problems else ""))
    widths = [max(len(r[i]) for r in rows) for i in range(5)]
    for r in rows:
        click.echo("  ".join(v.ljust(w) for v, w in zip(r, widths)) + "  " + r[5])
    failed = [o for o in outcomes if not o.ok]
    for o in failed:
        for line in o.problems:
            click.echo(f"wetmap: error: {line}", err=True)
    click.echo(f"{len(outcomes) - len(failed)} of {len(outcomes)} surveys done. Apparent thermal anomalies only: "
               "verify by coring before any repair decision.")
    if failed:
        click.echo("wetmap: failed: " + ", ".join(str(o.folder) for o in failed), err=True)
        sys.exit(1)


@main.command(help="Validate SURVEY_DIR (survey.toml, plan, rasters, cores) without running it, and check "
                   "the recorded survey conditions against the [limits] table.")
@click.argument("survey_dir", type=click.Path(path_type=Path))
def check(survey_dir: Path) -> None:
    from wetmap.pipeline import check_survey

    try:
        survey, warnings = check_survey(survey_dir)
    except WetmapError as err:
        _fail(err)
        return
    for w in warnings:
        click.echo(f"warning: {w}", err=True)
    click.echo(f"{survey.file}: ok ({len(survey.mosaics)} mosaics, {len(survey.frames)} frames)")


@main.command(help=f"""Plan the survey night of SURVEY_DIR: a 1-D heat model of the roof assembly
([cooldown] table, or the insulation named by the plan's sections) predicts the surface
over wet and over dry insulation after sunset and the best window. Writes window.json
and window.png into SURVEY_DIR/results (other results there are kept).

\b
A model estimate for planning, not a measurement.
{CAUTIONS}""")
@click.argument("survey_dir", type=click.Path(path_type=Path))
@click.option("--out", "out", type=click.Path(), default=None,
              help="Write window.json and window.png here instead of SURVEY_DIR/results (other files of "
                   "wetmap's there are kept).")
def window(survey_dir: Path, out: str | None) -> None:
    from wetmap.cooldown import run_window

    try:
        plan, json_path, png_path = run_window(survey_dir, out=out)
    except WetmapError as err:
        _fail(err)
        return
    for note in plan.notes:
        click.echo(f"note: {note}", err=True)
    if plan.best_start_h is None:
        click.echo(f"no survey window predicted (peak wet-minus-dry {plan.peak_delta_c:+.2f} K "
                   f"at {plan.peak_h:.2f} h after sunset)")
    else:
        click.echo(f"best window {plan.best_start_h:.2f}-{plan.best_end_h:.2f} h after sunset; peak wet-minus-dry "
                   f"{plan.peak_delta_c:+.2f} K at {plan.peak_h:.2f} h ({plan.insulation}, "
                   f"{plan.water_vol_pct:g} % water by volume)")
    click.echo(f"results: {json_path}, {png_path}")
    click.echo("A model estimate for planning: surveys still need the right weather and cores.")


@main.command(help="""Compare two surveys of the same roof: write change.gpkg (new, grown, shrunk and gone
wet areas), change.json (wet-area growth), an offline change map (change_map.html) and a
change report (change_report.html, and .pdf) into OUT (default NEW_DIR/results).
OLD_DIR and NEW_DIR are survey folders that have been run, or their results folders.""")
@click.argument("old_dir", type=click.Path(path_type=Path))
@click.argument("new_dir", type=click.Path(path_type=Path))
@click.option("--out", "out", type=click.Path(), default=None,
              help="Folder for change.gpkg, change.json, change_map.html and change_report.html/.pdf "
                   "(new, empty, or a results folder wetmap wrote).")
@click.option("--confirmed-only", is_flag=True, help="Compare only anomalies confirmed wet (leave out unverified).")
def compare(old_dir: Path, new_dir: Path, out: str | None, confirmed_only: bool) -> None:
    from wetmap.compare import compare_results
    from wetmap.export.change import write_change
    from wetmap.outputs import check_out_dir

    try:
        if out is not None:
            check_out_dir(out)  # refused before the comparison is made
        target = out if out is not None else (new_dir / "results" if (new_dir / "results").is_dir() else new_dir)
        comparison = compare_results(old_dir, new_dir, counted=("wet",) if confirmed_only else ("wet", "unverified"))
        gpkg, _ = write_change(comparison, target, old_name=Path(old_dir).resolve().name,
                               new_name=Path(new_dir).resolve().name)
    except WetmapError as err:
        _fail(err)
        return
    s = comparison.summary()
    pct = f" ({s['growth_pct']:+.1f} %)" if s["growth_pct"] is not None else ""
    click.echo(
        f"wet area {s['old_wet_area_m2']:.2f} -> {s['new_wet_area_m2']:.2f} m2, growth {s['growth_m2']:+.2f} m2{pct}: "
        f"new {s['new_m2']:.2f}, grown {s['grown_m2']:.2f}, shrunk {s['shrunk_m2']:.2f}, gone {s['gone_m2']:.2f} m2"
    )
    click.echo(f"change: {gpkg}, change_map.html and change_report.html beside it")


if __name__ == "__main__":  # pragma: no cover
    main()
