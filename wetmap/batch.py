"""Many surveys on one engine: ``wetmap batch``.

Each survey is run by :func:`wetmap.pipeline.run_survey` with its windows on one shared
:class:`wetmap.tiles.Engine` (dask's local schedulers or a ``dask.distributed`` cluster);
one survey failing does not stop the others.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import OutputError, WetmapError
from .outputs import check_out_dir, results_name_for
from .pipeline import run_survey
from .tiles import Engine, Progress, WindowProgress

__all__ = ["BatchOutcome", "run_batch"]

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class BatchOutcome:
    """How one survey of a batch went.

    Attributes
    ----------
    folder
        The survey folder.
    ok
        True when its results were written.
    seconds
        Wall time of the survey.
    anomalies, wet_area_m2
        From its summary (``None`` when it failed).
    results
        The results folder (``None`` when it failed).
    problems
        The error lines when it failed (empty when ok).
    """

    folder: Path
    ok: bool
    seconds: float
    anomalies: int | None = None
    wet_area_m2: float | None = None
    results: Path | None = None
    problems: tuple[str, ...] = field(default_factory=tuple)
    warnings: int = 0


def _run_one(folder: Path, out: Path | None, options: dict[str, Any], scheduler: Any,
             progress: Progress | None, window_progress: WindowProgress | None) -> BatchOutcome:
    start = time.perf_counter()
    try:
        if scheduler is None:  # on a cluster worker: the survey's windows go to the same cluster
            try:
                from distributed import get_worker, worker_client

                get_worker()
            except (ImportError, ValueError):
                result = run_survey(folder, out=out, scheduler="sync", **options)
            else:
                with worker_client() as client:
                    result = run_survey(folder, out=out, scheduler=client, **options)
        else:
            result = run_survey(folder, out=out, scheduler=scheduler, progress=progress,
                                window_progress=window_progress, **options)
    except WetmapError as err:
        return BatchOutcome(folder=Path(folder), ok=False, seconds=time.perf_counter() - start, problems=err.problems)
    except Exception as err:  # noqa: BLE001 -- one survey's fault must not stop the others
        log.exception("%s: unexpected failure", folder)
        return BatchOutcome(folder=Path(folder), ok=False, seconds=time.perf_counter() - start,
                            problems=(f"{folder}: unexpected failure ({type(err).__name__}: {err}): a wetmap "
                                      "fault, please report it",))
    s = result.summary()
    return BatchOutcome(folder=Path(folder), ok=True, seconds=time.perf_counter() - start,
                        anomalies=s["anomaly_count"], wet_area_m2=s["wet_area_m2"],
                        results=Path(out) if out is not None else result.survey.folder / "results",
                        warnings=len(s["warnings"]))


def _batch_out_folders(folders: list[Path], out_root: Path) -> list[Path | None]:
    """``out_root/<name>`` for each survey, distinct for same-named surveys; refused (every
    problem at once, before any work) when one would be, hold or lie in any survey of the
    batch, or when a survey is given twice."""
    problems: list[str] = []
    seen: dict[Path, Path] = {}
    for f in folders:
        key = f.resolve()
        if key in seen:
            problems.append(f"{f}: given twice in the batch (also as {seen[key]}); give each survey once")
        seen.setdefault(key, f)
    outs = [out_root / name for name in results_name_for([f.resolve() for f in folders])]
    for out in outs:
        try:
            check_out_dir(out, surveys=folders)
        except OutputError as err:
            problems.extend(err.problems)
    if problems:
        raise OutputError(problems)
    return list(outs)


def run_batch(folders: Iterable[str | Path], *, scheduler: Any = None, out_root: str | Path | None = None,
              progress: Progress | None = None, window_progress: WindowProgress | None = None,
              survey_done: Callable[[BatchOutcome, int, int], None] | None = None,
              map_html: bool = True, report_html: bool = True) -> tuple[BatchOutcome, ...]:
    """Run many surveys, each writing its own results atomically; a failure stops only its survey.

    On the local schedulers the surveys run one after another, each with its windows in
    parallel; on a ``dask.distributed`` cluster every survey is a task (its windows are
    sent to the same cluster from the worker), so many surveys run at once.

    Parameters
    ----------
    folders
        Survey folders.
    scheduler
        See :class:`Engine`.
    out_root
        Write each survey's results to ``out_root/<folder name>`` instead of
        ``<folder>/results``; same-named surveys get as many trailing path parts as tell
        them apart (``x/roof``, ``y/roof`` -> ``x_roof``, ``y_roof``). Refused before any
        work when a results folder would be, hold or lie in a survey of the batch.
    progress, window_progress
        Passed to each survey (local schedulers only).
    survey_done
        ``survey_done(outcome, done, total)`` after each survey.

    Returns
    -------
    tuple of BatchOutcome
        In the order of ``folders``.
    """
    folders = [Path(f) for f in folders]
    options: dict[str, Any] = dict(map_html=map_html, report_html=report_html)
    outs: list[Path | None] = [None] * len(folders)
    if out_root is not None:
        outs = _batch_out_folders(folders, Path(out_root))
        options["surveys"] = tuple(str(f) for f in folders)

    outcomes: list[BatchOutcome | None] = [None] * len(folders)
    with (scheduler if isinstance(scheduler, Engine) else Engine(scheduler)) as engine:
        if engine.kind == "distributed":
            from distributed import as_completed

            futures = {engine.client.submit(_run_one, f, outs[i], options, None, None, None, pure=False): i
                       for i, f in enumerate(folders)}
            done = 0
            for fut in as_completed(list(futures)):
                i = futures[fut]
                try:
                    outcomes[i] = fut.result()
                except Exception as err:  # noqa: BLE001 -- a lost worker fails one survey, not the batch
                    outcomes[i] = BatchOutcome(folder=folders[i], ok=False, seconds=0.0,
                                               problems=(f"{folders[i]}: the cluster lost the task ({err})",))
                done += 1
                if survey_done is not None:
                    survey_done(outcomes[i], done, len(folders))
        else:
            for i, f in enumerate(folders):
                if progress is not None:
                    progress(f"survey {i + 1} of {len(folders)}: {f}")
                outcomes[i] = _run_one(f, outs[i], options, engine, progress, window_progress)
                if survey_done is not None:
                    survey_done(outcomes[i], i + 1, len(folders))
    return tuple(o for o in outcomes if o is not None)
