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


@click.group(help=f"Map wet roof insulation and wet hull core from thermal imagery.\n\n{CAUTIONS}",
             context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="wetmap")
def main() -> None:
    logging.basicConfig(level=logging.ERROR, format="wetmap: %(message)s")


@main.command(help=f"Process SURVEY_DIR and write its results (default SURVEY_DIR/results).\n\n{CAUTIONS}")
@click.argument("survey_dir", type=click.Path(path_type=Path))
@click.option("--out", "out", type=click.Path(path_type=Path), default=None,
              help="Write the results here instead of SURVEY_DIR/results.")
@click.option("--quiet", "-q", is_flag=True, help="Print only the summary line and errors.")
def run(survey_dir: Path, out: Path | None, quiet: bool) -> None:
    from wetmap.pipeline import run_survey

    def progress(message: str) -> None:
        if not quiet:
            click.echo(f"  {message}", err=True)

    try:
        result = run_survey(survey_dir, out=out, progress=progress)
    except WetmapError as err:
        _fail(err)
        return
    s = result.summary()
    for w in s["warnings"]:
        click.echo(f"warning: {w}", err=True)
    click.echo(
        f"{s['anomaly_count']} anomalies: wet {s['confirmed_wet_area_m2']:.2f} m2 confirmed, "
        f"{s['unverified_area_m2']:.2f} m2 unverified, {s['confirmed_dry_area_m2']:.2f} m2 refuted (dry); "
        f"roof {s['roof_area_m2']:.1f} m2, wet fraction {100 * s['wet_fraction']:.1f} %; "
        f"repair {s['repair_area_m2']:.2f} m2, {s['boards']} boards"
    )
    click.echo(f"results: {(out or result.survey.folder / 'results')}")
    click.echo("Apparent thermal anomalies only: verify by coring before any repair decision.")


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
@click.option("--out", "out", type=click.Path(path_type=Path), default=None,
              help="Write window.json and window.png here instead of SURVEY_DIR/results.")
def window(survey_dir: Path, out: Path | None) -> None:
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
wet areas) and change.json (wet-area growth) into OUT (default NEW_DIR/results).
OLD_DIR and NEW_DIR are survey folders that have been run, or their results folders.""")
@click.argument("old_dir", type=click.Path(path_type=Path))
@click.argument("new_dir", type=click.Path(path_type=Path))
@click.option("--out", "out", type=click.Path(path_type=Path), default=None, help="Folder for change.gpkg and change.json.")
@click.option("--confirmed-only", is_flag=True, help="Compare only anomalies confirmed wet (leave out unverified).")
def compare(old_dir: Path, new_dir: Path, out: Path | None, confirmed_only: bool) -> None:
    from wetmap.compare import compare_results, write_change

    try:
        comparison = compare_results(old_dir, new_dir, counted=("wet",) if confirmed_only else ("wet", "unverified"))
        target = out or (new_dir / "results" if (new_dir / "results").is_dir() else new_dir)
        gpkg, _ = write_change(comparison, target)
    except WetmapError as err:
        _fail(err)
        return
    s = comparison.summary()
    pct = f" ({s['growth_pct']:+.1f} %)" if s["growth_pct"] is not None else ""
    click.echo(
        f"wet area {s['old_wet_area_m2']:.2f} -> {s['new_wet_area_m2']:.2f} m2, growth {s['growth_m2']:+.2f} m2{pct}: "
        f"new {s['new_m2']:.2f}, grown {s['grown_m2']:.2f}, shrunk {s['shrunk_m2']:.2f}, gone {s['gone_m2']:.2f} m2"
    )
    click.echo(f"change: {gpkg}")


if __name__ == "__main__":  # pragma: no cover
    main()
