"""Site photos tied to cores and anomalies: reading, checking and embedding them.

A survey may hold a ``photos/`` folder. A photo is tied

- to a core by the ``photo`` column of ``cores.csv`` (a path relative to the survey
  folder, e.g. ``photos/c1.jpg``);
- to the nearest anomaly by a row of ``photos.csv`` in the survey folder: columns
  ``photo,x,y`` (plan coordinates where it was taken, in the survey's CRS) and an
  optional ``caption``.

Each photo must be an image Pillow reads (JPEG, PNG, ...). A missing or unreadable photo
is one warning line naming the file, the row, the column and the fix (:func:`find_photos`,
run before any work); the photo is then left out, and the rest of the run goes on. Each photo
is tied to its nearest anomaly once a run (``SurveyResult.photos``). The report and the map embed each photo
downscaled (:data:`THUMB_PX` on its long side) as a base64 JPEG ``data:`` URI, so both
files still work offline and stay small.
"""

from __future__ import annotations

import base64
import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Sequence

import numpy as np
import shapely

if TYPE_CHECKING:
    from shapely.geometry.base import BaseGeometry

    from .confirmations import Confirmations

__all__ = ["Photo", "PHOTOS_TABLE", "THUMB_PX", "find_photos", "thumbnail_uri", "nearest_anomalies"]

#: The table of located photos, in the survey folder.
PHOTOS_TABLE = "photos.csv"
#: Long side of an embedded photo, pixels.
THUMB_PX = 640


@dataclass(frozen=True)
class Photo:
    """One photo and what it is tied to.

    Attributes
    ----------
    path
        The image file (resolved).
    written
        The path as written in the table.
    source
        ``"cores.csv"`` or ``"photos.csv"``.
    row
        The row of that table as a spreadsheet shows it (the header is row 1).
    core
        The core id (cores.csv photos), else ``None``.
    x, y
        Plan coordinates, metres: the core's, or where the photo was taken.
    caption
        Free text (photos.csv ``caption``), may be empty.
    """

    path: Path
    written: str
    source: str
    row: int
    core: str | None
    x: float
    y: float
    caption: str = ""


def _image_problem(path: Path) -> str | None:
    """Why ``path`` is not a usable image, or ``None``."""
    if not path.is_file():
        return "file not found"
    try:
        from PIL import Image

        with Image.open(path) as im:
            im.verify()
    except Exception as err:  # noqa: BLE001 - any decoder failure means the same to the user
        return f"not a readable image ({type(err).__name__}: {str(err).splitlines()[0][:60] if str(err) else ''})"
    return None


def _resolve(folder: Path, written: str) -> Path | None:
    """``written`` inside the survey folder, or ``None`` when it leaves it."""
    if not written or Path(written).is_absolute() or "\0" in written:
        return None
    path = (folder / written).resolve()
    return path if path.is_relative_to(folder.resolve()) else None


def _usable_photo(folder: Path, written: str, where: str, example: str, problems: list[str]) -> Path | None:
    """The photo ``written`` resolved inside ``folder`` and readable, or ``None`` with one problem line
    (``where`` names the file, row and column; ``example`` the path form to suggest)."""
    path = _resolve(folder, written)
    if path is None:
        problems.append(f"{where}: not a path inside the survey folder; copy the photo into photos/ and give "
                        f"its relative path, e.g. {example}")
        return None
    why = _image_problem(path)
    if why:
        problems.append(f"{where}: {why}; put a JPEG or PNG in the survey's photos/ folder or correct the path")
        return None
    return path


def _core_photos(folder: Path, cores_file: Path | None, confirmations: "Confirmations | None",
                 problems: list[str]) -> list[Photo]:
    if confirmations is None or "photo" not in confirmations.extra:
        return []
    out = []
    rows = _row_numbers(cores_file, confirmations.ids) if cores_file is not None else {}
    for i, written in enumerate(confirmations.extra["photo"]):
        if not written:
            continue
        cid = confirmations.ids[i]
        where = f"{cores_file}: row {rows.get(cid, '?')} (id {cid}), column 'photo' = {written!r}"
        path = _usable_photo(folder, written, where, "photos/c1.jpg", problems)
        if path is None:
            continue
        out.append(Photo(path, written, "cores.csv", rows.get(cid, 0), cid, float(confirmations.xs[i]),
                         float(confirmations.ys[i])))
    return out


def _row_numbers(path: Path, ids: Sequence[str]) -> dict[str, int]:
    """The spreadsheet row of each core id in ``path`` (for messages)."""
    try:
        lines = path.read_text(encoding="utf-8-sig").splitlines()
    except (OSError, UnicodeDecodeError):
        return {}
    delimiter = ";" if lines and lines[0].count(";") > lines[0].count(",") else ","
    reader = csv.DictReader(lines, delimiter=delimiter)
    out: dict[str, int] = {}
    wanted = set(ids)
    for row in reader:
        ident = (row.get("id") or row.get(" id") or "").strip()
        if ident in wanted and ident not in out:
            out[ident] = reader.line_num
    return out


def _table_photos(folder: Path, problems: list[str]) -> list[Photo]:
    table = folder / PHOTOS_TABLE
    if not table.is_file():
        return []
    try:
        lines = table.read_text(encoding="utf-8-sig").splitlines()
    except (OSError, UnicodeDecodeError) as err:
        problems.append(f"{table}: cannot be read as UTF-8 text ({type(err).__name__}); save it as CSV (UTF-8)")
        return []
    if not lines:
        return []
    reader = csv.DictReader(lines)
    header = [h.strip() for h in reader.fieldnames or []]
    reader.fieldnames = header
    missing = [c for c in ("photo", "x", "y") if c not in header]
    if missing:
        problems.append(f"{table}: column {', '.join(repr(c) for c in missing)} missing; expected columns "
                        "photo,x,y (plan coordinates where the photo was taken) and optionally caption")
        return []
    out = []
    for row in reader:
        n = reader.line_num
        written = (row.get("photo") or "").strip()
        if not any((v or "").strip() for v in row.values() if isinstance(v, str)):
            continue
        xy = []
        for col in ("x", "y"):
            raw = (row.get(col) or "").strip()
            try:
                v = float(raw)
                if not math.isfinite(v):
                    raise ValueError
                xy.append(v)
            except ValueError:
                problems.append(f"{table}: row {n}, column '{col}' = {raw!r}: expected a number (plan coordinate, "
                                "metres)")
        where = f"{table}: row {n}, column 'photo' = {written!r}"
        if not written:
            problems.append(f"{table}: row {n}, column 'photo' is empty; give the photo's path, e.g. photos/p1.jpg")
            continue
        path = _usable_photo(folder, written, where, "photos/p1.jpg", problems)
        if path is None:
            continue
        if len(xy) == 2:
            out.append(Photo(path, written, PHOTOS_TABLE, n, None, xy[0], xy[1], (row.get("caption") or "").strip()))
    return out


def find_photos(folder: Path, cores_file: Path | None,
                confirmations: "Confirmations | None") -> tuple[list[Photo], list[str]]:
    """The survey's usable photos, cores' first then photos.csv's, and a problem line for every
    missing or unreadable one (cores.csv ``photo``, photos.csv); each file is opened once."""
    problems: list[str] = []
    found = _core_photos(Path(folder), cores_file, confirmations, problems) + _table_photos(Path(folder), problems)
    return found, problems


def nearest_anomalies(photos: Sequence[Photo], geometries: Sequence["BaseGeometry"]) -> list[tuple[int, float]]:
    """Per photo, the index of the nearest anomaly and the distance to it (m); ``(-1, nan)`` without anomalies.

    >>> from shapely.geometry import box
    >>> p = Photo(Path("a.jpg"), "a.jpg", "photos.csv", 2, None, 5.0, 0.5)
    >>> nearest_anomalies([p], [box(0, 0, 1, 1), box(6, 0, 7, 1)])
    [(1, 1.0)]
    """
    if not len(geometries):
        return [(-1, math.nan) for _ in photos]
    geoms = np.asarray(list(geometries), dtype=object)
    out = []
    for p in photos:
        d = shapely.distance(geoms, shapely.Point(p.x, p.y))
        i = int(np.argmin(d))
        out.append((i, float(d[i])))
    return out


def thumbnail_uri(path: Path, *, max_px: int = THUMB_PX) -> str:
    """The photo downscaled to ``max_px`` on its long side, as a base64 JPEG ``data:`` URI."""
    from PIL import Image, ImageOps

    with Image.open(path) as im:
        im = ImageOps.exif_transpose(im).convert("RGB")
        im.thumbnail((max_px, max_px))
        buf = io.BytesIO()
        im.save(buf, format="JPEG", quality=82, optimize=True)
    return "data:image/jpeg;base64," + base64.b64encode(buf.getvalue()).decode("ascii")
