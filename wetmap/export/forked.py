"""Write one result file in a forked process beside the caller's work.

Writers that build their file in Python (ezdxf for ``repair.dxf``, WeasyPrint for
``report.pdf``) hold the GIL, so a thread would not help: on Linux the file is written by a
forked process, which shares the results' memory copy on write, while the caller writes the
other files. Elsewhere (no ``fork``) the file is written at once. The file is the same
either way.
"""

from __future__ import annotations

import multiprocessing
import sys
from pathlib import Path
from typing import Any, Callable

from ..errors import ProcessingError


def _child(fn: Callable[..., Any], path: Path, args: tuple, kwargs: dict, conn) -> None:
    """The forked process: write, then send ``None`` or the error."""
    try:
        fn(*args, **kwargs)
        conn.send(None)
    except BaseException as exc:  # noqa: BLE001 - every failure goes back to the parent
        try:
            conn.send(exc)
        except Exception:  # an error that does not pickle: its text
            conn.send(ProcessingError(f"{Path(path).name}: {type(exc).__name__}: {exc}"))
    finally:
        conn.close()


def write_beside(fn: Callable[..., Any], path: Path, *args: Any, name: str = "wetmap-writer",
                 **kwargs: Any) -> Callable[[], None]:
    """Start ``fn(*args, **kwargs)`` (which writes ``path``) beside the caller's work.

    Returns the function that waits for it and raises the writer's own error (a
    :class:`ProcessingError` naming ``path`` when the process died without one). Where
    ``fork`` is not available the writer runs at once and the returned function does nothing.
    """
    if not sys.platform.startswith("linux"):
        fn(*args, **kwargs)
        return lambda: None
    ctx = multiprocessing.get_context("fork")
    parent, child = ctx.Pipe(duplex=False)
    proc = ctx.Process(target=_child, args=(fn, Path(path), args, kwargs, child), name=name, daemon=True)
    proc.start()
    child.close()

    def wait() -> None:
        try:
            error = parent.recv() if parent.poll(None) else None
        except EOFError:  # the process ended without a word
            error = None
        finally:
            proc.join()
            parent.close()
        if error is not None:
            raise error
        if proc.exitcode != 0:
            raise ProcessingError(f"{Path(path).name}: the process writing it ended with code {proc.exitcode} "
                                  "(out of memory?); run again with more memory free")

    return wait
