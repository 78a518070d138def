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


@main.command(help="Validate SURVEY_DIR (survey.toml, plan, rasters, cores) without running it.")
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


if __name__ == "__main__":  # pragma: no cover
    main()
