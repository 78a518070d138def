"""Results folders written safely: checked, locked, staged, marked, then swapped in one step.

Every command that writes files (``run``, ``batch``, ``window``, ``compare``) goes through
:func:`replacing` (or :func:`write_folder`), so the same rules hold everywhere:

- **Only wetmap's own folders are replaced.** A results folder is marked by
  ``wetmap-manifest.json`` (wetmap's version, the survey folder, the time and the files),
  written last. An existing destination must hold that manifest, or only files that
  wetmap writes (results of an earlier version), or nothing; anything else is refused.
- **Never the survey.** A results folder is never a survey folder (one holding
  ``survey.toml``), never holds one and never lies inside one, except the survey's own
  ``results/``. A destination that is a file is refused.
- **One step.** Files are written into a hidden staging folder ``.NAME.tmp-*`` beside the
  destination; when complete, they take the modes the umask gives, the manifest is
  written, and the staging folder is exchanged with the destination in one step (Linux
  ``renameat2`` with ``RENAME_EXCHANGE``). Where the file system cannot, two renames go
  through ``.NAME.old-*``; a run that then finds the destination missing and a complete
  set in ``.NAME.old-*`` puts it back.
- **One run at a time.** ``flock`` on ``.wetmap-NAME.lock`` beside the destination and on
  ``.wetmap.lock`` in the survey folder (removed when the run ends); a second run
  refuses at once with one line.
- **Leftovers are cleaned.** The next run that holds the same lock removes the
  ``.NAME.tmp-*`` and ``.NAME.old-*`` folders and the survey's ``.wetmap-windows-*``
  scratch folders of runs that stopped (only a run holding the lock could own them).

Every refusal is an :class:`~wetmap.errors.OutputError` raised before anything is written.
"""

from __future__ import annotations

import contextlib
import ctypes
import errno
import glob
import json
import logging
import os
import shutil
import sys
import tempfile
from collections.abc import Callable, Iterable, Iterator
from datetime import datetime, timezone
from pathlib import Path

from . import __version__
from .errors import OutputError

__all__ = ["MANIFEST", "WETMAP_FILES", "check_out_dir", "is_wetmap_folder", "replacing", "write_folder",
           "results_name_for"]

log = logging.getLogger(__name__)

#: The file that marks a folder as wetmap's results; written last.
MANIFEST = "wetmap-manifest.json"

_SURVEY_FILE = "survey.toml"

#: Every file name wetmap writes into a results folder: a folder holding only these (and no
#: manifest) was written by an earlier version of wetmap and may be replaced.
WETMAP_FILES = frozenset({
    MANIFEST, "summary.json", "anomalies.gpkg", "anomalies.geojson", "repair.gpkg", "repair.dxf", "quantities.csv",
    "sections.csv", "wet_area_range.csv", "board_range.csv", "bill.csv", "core_log.csv", "takeoff.xlsx",
    "surface_c.tif", "delta_c.tif", "cooling_c_per_h.tif", "map.html", "report.html", "report.pdf",
    "window.json", "window.png",
    "change.gpkg", "change.json", "change_map.html", "change_report.html", "change_report.pdf",
})

_AT_FDCWD = -100
_RENAME_EXCHANGE = 2


def _checkpoint(point: str) -> None:
    """A named point of the write ("staged", "marked", "between", "swapped"); does nothing.

    Tests replace it to stop a run at each point and check that nothing is lost.
    """


def _resolve(path: Path, what: str) -> Path:
    try:
        return path.expanduser().resolve()
    except (OSError, RuntimeError, ValueError) as err:
        raise OutputError(f"{path}: the {what} cannot be resolved ({err}): give a plain folder path") from None


def _survey_folders_around(out: Path) -> list[Path]:
    """Folders holding survey.toml among ``out`` and its parents."""
    found = []
    for folder in (out, *out.parents):
        try:
            if (folder / _SURVEY_FILE).is_file():
                found.append(folder)
        except OSError:
            continue
    return found


def foreign_entries(folder: Path) -> list[str]:
    """Names in ``folder`` that wetmap did not write (empty when the folder is wetmap's or empty)."""
    entries = sorted(folder.iterdir())
    manifest = folder / MANIFEST
    if manifest.is_file():
        try:
            doc = json.loads(manifest.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            doc = None
        if isinstance(doc, dict) and doc.get("written_by") == "wetmap":
            return []
    return [p.name for p in entries if not (p.is_file() and p.name in WETMAP_FILES)]


def is_wetmap_folder(folder: str | Path) -> bool:
    """True when ``folder`` is empty, holds wetmap's manifest, or only files wetmap writes."""
    return not foreign_entries(Path(folder))


def check_out_dir(out_dir: str | Path, *, surveys: Iterable[str | Path] = ()) -> Path:
    """The resolved results folder, or an :class:`OutputError` when writing there could destroy files.

    Parameters
    ----------
    out_dir
        The results folder asked for.
    surveys
        Survey folders that must stay untouched (besides any folder holding ``survey.toml``
        around ``out_dir``); their own ``results/`` is allowed.
    """
    if str(out_dir).strip() == "":
        raise OutputError("'': the results folder path is empty: choose a folder path, or give none for the "
                          "default SURVEY_DIR/results")
    out = _resolve(Path(out_dir), "results folder")
    protected: list[Path] = []
    for s in (*(_resolve(Path(s), "survey folder") for s in surveys), *_survey_folders_around(out)):
        if s not in protected:
            protected.append(s)
    for survey in protected:
        own = survey / "results"
        if out == own:
            continue
        if out == survey:
            raise OutputError(f"{out}: the results folder is the survey folder itself and would replace it: "
                              f"choose a new folder outside the survey (default: {own})")
        if survey.is_relative_to(out):
            raise OutputError(f"{out}: the results folder holds the survey folder {survey} and would replace it: "
                              f"choose a new folder outside the survey (default: {own})")
        if out.is_relative_to(survey):
            raise OutputError(f"{out}: the results folder lies inside the survey folder {survey}: choose a folder "
                              f"outside the survey, or its own {own}")
    if out.exists():
        if not out.is_dir():
            raise OutputError(f"{out}: is a file, not a folder; wetmap does not replace files: choose a new or "
                              "empty folder for the results")
        try:
            foreign = foreign_entries(out)
        except OSError as err:
            raise OutputError(f"{out}: the results folder cannot be read ({err.strerror}): choose another "
                              "folder") from None
        if foreign:
            shown = ", ".join(foreign[:3]) + (f" and {len(foreign) - 3} more" if len(foreign) > 3 else "")
            raise OutputError(f"{out}: holds files wetmap did not write ({shown}); wetmap replaces only its own "
                              "results folders: choose a new or empty folder, or move those files out")
    return out


@contextlib.contextmanager
def _lock(path: Path, what: str, *, required: bool) -> Iterator[None]:
    """Hold an exclusive ``flock`` on ``path``; refuse at once when another run holds it.

    The lock file is removed on release; a run that locked a file another run had just
    removed sees that the path no longer names its file and locks afresh.
    """
    try:
        import fcntl
    except ImportError:  # pragma: no cover -- not a POSIX system: no lock
        yield
        return
    for _ in range(100):
        try:
            fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o666)
        except OSError as err:
            if required:
                raise OutputError(f"{path.parent}: cannot create files here ({err.strerror}): choose a folder you "
                                  "can write for the results") from None
            log.info("%s: no lock (%s); the folder is read-only", path, err.strerror)
            yield
            return
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as err:
            os.close(fd)
            if err.errno not in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                raise
            raise OutputError(f"{path}: another wetmap run is {what} and holds this lock: wait until it ends, "
                              "then run again (the lock frees itself when that run stops)") from None
        try:
            same = os.path.samestat(os.fstat(fd), os.stat(path))
        except OSError:
            same = False
        if same:
            break
        os.close(fd)  # the file was removed by the run that just ended: lock the new one
    else:  # pragma: no cover
        raise OutputError(f"{path}: the lock file keeps changing: run again")
    try:
        yield
    finally:
        with contextlib.suppress(OSError):
            os.unlink(path)
        os.close(fd)


def _umask() -> int:
    """The process umask, read without changing it where the system allows."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("Umask:"):
                return int(line.split()[1], 8)
    except (OSError, ValueError, IndexError):
        pass
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def _apply_umask(folder: Path) -> None:
    """Give ``folder`` and everything in it the modes a plain mkdir/open would (mkdtemp makes 0700)."""
    mask = _umask()
    os.chmod(folder, 0o777 & ~mask)
    for root, dirs, files in os.walk(folder):
        for d in dirs:
            os.chmod(os.path.join(root, d), 0o777 & ~mask)
        for f in files:
            os.chmod(os.path.join(root, f), 0o666 & ~mask)


def _write_manifest(folder: Path, survey: Path | None) -> None:
    files = [{"name": p.name, "bytes": p.stat().st_size} for p in sorted(folder.iterdir()) if p.is_file()]
    doc = {
        "written_by": "wetmap",
        "wetmap_version": __version__,
        "survey": None if survey is None else str(survey),
        "written_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "files": files,
    }
    with open(folder / MANIFEST, "x", encoding="utf-8") as fh:
        fh.write(json.dumps(doc, indent=2) + "\n")
        fh.flush()
        os.fsync(fh.fileno())


def _exchange(a: Path, b: Path) -> bool:
    """Swap two paths in one step (Linux ``renameat2(RENAME_EXCHANGE)``); False where not supported."""
    if not sys.platform.startswith("linux"):
        return False
    try:
        fn = ctypes.CDLL(None, use_errno=True).renameat2
    except (OSError, AttributeError):
        return False
    fn.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    fn.restype = ctypes.c_int
    if fn(_AT_FDCWD, os.fsencode(a), _AT_FDCWD, os.fsencode(b), _RENAME_EXCHANGE) == 0:
        return True
    code = ctypes.get_errno()
    if code in (errno.EINVAL, errno.ENOSYS, errno.EOPNOTSUPP, errno.EPERM):
        return False  # the file system cannot exchange: two renames instead
    raise OSError(code, os.strerror(code), str(b))


def _swap(staging: Path, out: Path) -> None:
    """Put ``staging`` at ``out``; the earlier ``out`` is removed only once the new one is in place."""
    if not os.path.lexists(out):
        os.rename(staging, out)
        _checkpoint("swapped")
        return
    if _exchange(staging, out):
        _checkpoint("swapped")
        shutil.rmtree(staging, ignore_errors=True)  # it now holds the earlier set
        return
    old = Path(tempfile.mkdtemp(prefix=f".{out.name}.old-", dir=out.parent))
    os.rename(out, old / out.name)
    _checkpoint("between")
    try:
        os.rename(staging, out)
    except BaseException:
        os.rename(old / out.name, out)  # put the earlier results back
        raise
    _checkpoint("swapped")
    shutil.rmtree(old, ignore_errors=True)


def _hidden(parent: Path, pattern: str) -> list[Path]:
    return [Path(p) for p in glob.glob(os.path.join(glob.escape(str(parent)), pattern))]


def _recover_and_clean(out: Path, survey: Path | None) -> None:
    """Under the locks: put back an earlier set a stopped run left aside, then remove leftovers."""
    name = glob.escape(out.name)
    olds = sorted(_hidden(out.parent, f".{name}.old-*"), key=lambda p: p.stat().st_mtime, reverse=True)
    if not os.path.lexists(out):
        for old in olds:
            earlier = old / out.name
            try:
                complete = earlier.is_dir() and any(earlier.iterdir()) and is_wetmap_folder(earlier)
            except OSError:
                complete = False
            if complete:
                os.rename(earlier, out)
                log.warning("%s: put back the earlier results that a stopped run left in %s", out, old.name)
                break
    leftovers = [*_hidden(out.parent, f".{name}.tmp-*"), *olds]
    if survey is not None:
        leftovers += _hidden(survey, ".wetmap-windows-*")
    for p in leftovers:
        log.info("%s: removing the leftover of a stopped run", p)
        shutil.rmtree(p, ignore_errors=True)


def _link_or_copy(src: Path, dst: Path) -> None:
    try:
        os.link(src, dst)
    except OSError:
        shutil.copy2(src, dst)


def _commit(staging: Path, out: Path, survey: Path | None, keep: Iterable[str] | None) -> None:
    for scratch in _hidden(staging, ".wetmap-windows-*"):  # window scratch: its rasters were linked out
        shutil.rmtree(scratch, ignore_errors=True)
    if out.is_dir():
        keep_names = None if keep is None else set(keep)
        for p in out.iterdir():
            if p.name == MANIFEST or not p.is_file() or (staging / p.name).exists():
                continue
            if keep_names is None or p.name in keep_names:
                _link_or_copy(p, staging / p.name)
    _checkpoint("staged")
    _apply_umask(staging)
    _write_manifest(staging, survey)
    _checkpoint("marked")
    _swap(staging, out)


@contextlib.contextmanager
def replacing(out_dir: str | Path, *, survey: str | Path | None = None, surveys: Iterable[str | Path] = (),
              keep: Iterable[str] | None = ()) -> Iterator[Path]:
    """Check and lock ``out_dir``, yield an empty staging folder, then put it at ``out_dir`` in one step.

    Write every file into the yielded folder. When the ``with`` block ends without an
    error, the files of the earlier folder named in ``keep`` (``None``: all of them) are
    carried over, the manifest is written and the folder takes ``out_dir``'s place. On
    any error (or Ctrl-C) the staging folder is removed and ``out_dir`` is untouched.

    Parameters
    ----------
    out_dir
        The results folder.
    survey
        The survey being written for: locked too, and named in the manifest.
    surveys
        Further survey folders the results folder must not be, hold or lie in.
    keep
        Names of earlier files to carry over (``None``: every file; the new files win).

    Raises
    ------
    OutputError
        Before anything is written: see :func:`check_out_dir`, or another run holds a lock.
    """
    survey_dir = None if survey is None else _resolve(Path(survey), "survey folder")
    out = check_out_dir(out_dir, surveys=(*([survey_dir] if survey_dir is not None else []), *surveys))
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise OutputError(f"{out.parent}: cannot create the folder ({err.strerror}): choose a folder you can "
                          "write for the results") from None
    with contextlib.ExitStack() as locks:
        locks.enter_context(_lock(out.parent / f".wetmap-{out.name}.lock", f"writing {out}", required=True))
        if survey_dir is not None and survey_dir.is_dir():
            locks.enter_context(_lock(survey_dir / ".wetmap.lock", f"working on the survey {survey_dir}",
                                      required=False))
        _recover_and_clean(out, survey_dir)
        staging = Path(tempfile.mkdtemp(prefix=f".{out.name}.tmp-", dir=out.parent))
        try:
            yield staging
            _commit(staging, out, survey_dir, keep)
        except BaseException:
            shutil.rmtree(staging, ignore_errors=True)
            raise


def write_folder(out_dir: str | Path, write: Callable[[Path], None], *, survey: str | Path | None = None,
                 surveys: Iterable[str | Path] = (), keep: Iterable[str] | None = ()) -> Path:
    """``write(folder)`` into a staging folder, then put it at ``out_dir`` (see :func:`replacing`).

    Returns the resolved ``out_dir``.
    """
    with replacing(out_dir, survey=survey, surveys=surveys, keep=keep) as staging:
        write(staging)
    return _resolve(Path(out_dir), "results folder")


def results_name_for(folders: Iterable[str | Path]) -> list[str]:
    """Distinct results folder names for survey folders: the folder name, or as many of the
    trailing path parts (joined by ``_``) as tell same-named surveys apart.

    Examples
    --------
    >>> results_name_for(["x/roof", "y/roof", "z/hull"])
    ['x_roof', 'y_roof', 'hull']
    """
    parts = [Path(os.path.abspath(f)).parts[1:] or ("survey",) for f in folders]
    depth = [1] * len(parts)
    for _ in range(64):
        names = ["_".join(p[-d:]) for p, d in zip(parts, depth)]
        clashes = {n for n in names if names.count(n) > 1}
        if not clashes:
            return names
        for i, n in enumerate(names):
            if n in clashes and depth[i] < len(parts[i]):
                depth[i] += 1
        if all(depth[i] >= len(parts[i]) for i, n in enumerate(names) if n in clashes):
            break
    names = ["_".join(p[-d:]) for p, d in zip(parts, depth)]
    seen: dict[str, int] = {}
    out = []
    for n in names:  # the same folder twice: number the repeats
        seen[n] = seen.get(n, 0) + 1
        out.append(n if seen[n] == 1 else f"{n}_{seen[n]}")
    return out
