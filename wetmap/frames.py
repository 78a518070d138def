"""Reading single thermal frames (``[[frame]]`` entries) into plain arrays.

A frame is one picture of the roof or hull, placed on the plan later by its control
points (:mod:`wetmap.register`). This module only reads the pixel values and turns
them into apparent temperature in kelvin; it never places anything.

Accepted files (by suffix):

``.tif`` / ``.tiff``
    One band of temperatures or raw counts, any numeric type, read with rasterio.
    A geo-transform, if the file has one, is ignored: a frame is placed by its
    control points (give the file as a ``[[mosaic]]`` to place it by its transform).
``.png``
    One band of 16-bit raw counts, with ``scale`` / ``offset`` in the entry
    (``value = raw * scale + offset``). 8-bit and colour PNGs are refused: they are
    pictures (palette or false colour), not radiometric data.
``.npy``
    A 2-D numeric numpy array (saved with :func:`numpy.save`; never unpickled).
``.csv``
    A temperature matrix: one line per image row (the first line is the top row,
    row 0), one value per image column. The delimiter is ``;``, ``,``, a tab or
    blanks; with ``;``, a tab or blanks a decimal comma is accepted too (and in quoted
    cells of a comma-delimited file, ``"4,5"``). A delimiter
    at the end of every line is ignored. An empty cell, ``nan`` or ``NaN`` is a
    pixel without data. No header lines.

Every value becomes ``raw * scale + offset`` in the entry's ``units``, then kelvin
(float32); nodata (declared nodata, masks, empty cells, non-finite values) is NaN.
A file whose values cannot be apparent temperatures in those units (median outside
-100..200 °C) is refused: the units, scale or offset are wrong.

Examples
--------
>>> import tempfile, pathlib
>>> p = pathlib.Path(tempfile.mkdtemp()) / "f.csv"
>>> _ = p.write_text("4,5;4,6;\\n4,7;;\\n")
>>> img = read_frame(p, units="C")
>>> img.shape
(2, 2)
>>> [round(float(v) - 273.15, 2) for v in img.values_k.ravel()]
[4.5, 4.6, 4.7, nan]
"""

from __future__ import annotations

import csv
import math
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np

from .errors import InputFileError, MissingFileError
from .rasters import to_kelvin

__all__ = ["FrameImage", "read_frame", "read_matrix_csv", "FRAME_SUFFIXES", "PLAUSIBLE_C"]

Units = Literal["C", "K", "F"]

#: File suffixes a frame may have.
FRAME_SUFFIXES = (".tif", ".tiff", ".png", ".npy", ".csv")

#: Range (degC) the median apparent temperature of a frame must lie in; outside it the
#: units, scale or offset are wrong (common practice: building and hull surveys see
#: far less than this range; hot equipment may exceed it locally, the median does not).
PLAUSIBLE_C = (-100.0, 200.0)


@dataclass(frozen=True)
class FrameImage:
    """One frame's apparent temperatures.

    Attributes
    ----------
    path
        The file read.
    values_k
        Apparent temperature, K, float32, shape ``(rows, cols)``; NaN where no data.
        Pixel ``(row, col)`` is the image pixel whose centre has image coordinates
        ``(col, row)``.
    notes
        Remarks for the survey's warnings (e.g. an ignored geo-transform).
    """

    path: Path
    values_k: np.ndarray
    notes: tuple[str, ...] = ()

    @property
    def shape(self) -> tuple[int, int]:
        """``(rows, cols)`` of the image."""
        return self.values_k.shape  # type: ignore[return-value]


def read_frame(path: str | Path, *, units: Units, scale: float = 1.0, offset: float = 0.0) -> FrameImage:
    """Read a frame file into apparent temperature in kelvin.

    Parameters
    ----------
    path
        A ``.tif``, ``.tiff``, ``.png``, ``.npy`` or ``.csv`` frame (see the module text).
    units
        Units of ``raw * scale + offset``: ``"C"``, ``"K"`` or ``"F"``.
    scale, offset
        ``value = raw * scale + offset``.

    Returns
    -------
    FrameImage
        float32 kelvin, NaN where no data.

    Raises
    ------
    MissingFileError
        The file does not exist.
    InputFileError
        The file cannot be read, holds no usable values, or its values are not
        plausible apparent temperatures; one line naming the file (and the line of a
        CSV) and the fix.
    """
    path = Path(path)
    if not path.is_file():
        raise MissingFileError(f"{path}: frame file not found; check the path of its [[frame]] entry")
    suffix = path.suffix.lower()
    notes: tuple[str, ...] = ()
    if suffix in (".tif", ".tiff", ".png"):
        raw, notes = _read_raster(path, png=suffix == ".png")
    elif suffix == ".npy":
        raw = _read_npy(path)
    elif suffix == ".csv":
        raw = read_matrix_csv(path)
    else:
        raise InputFileError(f"{path}: unknown frame type {suffix!r}: expected one of {', '.join(FRAME_SUFFIXES)}")
    if raw.shape[0] < 2 or raw.shape[1] < 2:
        raise InputFileError(f"{path}: is {raw.shape[0]} x {raw.shape[1]} pixels: a frame needs at least 2 x 2")
    values = raw.astype(np.float64)
    if scale != 1.0:
        values *= scale
    if offset != 0.0:
        values += offset
    values[~np.isfinite(values)] = np.nan
    kelvin = to_kelvin(values, units)
    finite = np.isfinite(kelvin)
    if not finite.any():
        raise InputFileError(f"{path}: holds no valid values (all nodata); export the frame again")
    median_c = float(np.median(kelvin[finite])) - 273.15
    low, high = PLAUSIBLE_C
    if not low <= median_c <= high:
        raise InputFileError(
            f"{path}: the values read as apparent temperatures have a median of {median_c:.6g} °C "
            f"(units = \"{units}\", scale = {scale:g}, offset = {offset:g}): not plausible; "
            "check units, scale and offset of its [[frame]] entry"
        )
    return FrameImage(path=path, values_k=kelvin.astype(np.float32), notes=notes)


def _read_raster(path: Path, *, png: bool) -> tuple[np.ndarray, tuple[str, ...]]:
    """A TIFF or PNG frame: one band, numbers; nodata and masks -> NaN."""
    import rasterio
    from rasterio.enums import ColorInterp
    from rasterio.errors import NotGeoreferencedWarning, RasterioError

    try:  # GDAL's own errors (some reads raise them directly); a private module, hence the fallback
        from rasterio._err import CPLE_BaseError
    except ImportError:  # pragma: no cover
        CPLE_BaseError = RasterioError

    kind = "16-bit PNG" if png else "TIFF"
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            with rasterio.open(path) as src:
                count, dtype = src.count, src.dtypes[0]
                palette = count >= 1 and src.colorinterp[0] == ColorInterp.palette
                georeferenced = not src.transform.is_identity
                if palette or count != 1:
                    what = "a palette (false-colour) image" if palette else f"a {count}-band (colour) image"
                    raise InputFileError(
                        f"{path}: is {what}: its pixel values are not temperatures; "
                        f"expected a single band of radiometric {'counts' if png else 'temperatures'}"
                    )
                if png and dtype != "uint16":
                    raise InputFileError(
                        f"{path}: is an {dtype} PNG: an 8-bit PNG is a picture, not radiometric data; "
                        "expected a 16-bit single-band PNG of raw counts with scale and offset in its [[frame]] entry"
                    )
                if not np.issubdtype(np.dtype(dtype), np.number) or np.issubdtype(np.dtype(dtype), np.complexfloating):
                    raise InputFileError(f"{path}: pixel type {dtype}: expected numbers")
                data = src.read(1, masked=True)
    except InputFileError:
        raise
    except (RasterioError, CPLE_BaseError) as err:
        detail = err.__cause__ or err
        raise InputFileError(
            f"{path}: cannot be read as a {kind} ({detail}); the file may be truncated or corrupt: export it again"
        ) from None
    values = np.asarray(data.data, dtype=np.float64)
    values[np.ma.getmaskarray(data)] = np.nan
    notes = ()
    if georeferenced:
        notes = (f"{path.name}: carries a geo-transform, which a [[frame]] ignores (it is placed by its control "
                 "points); list it as a [[mosaic]] to place it by its transform",)
    return values, notes


def _read_npy(path: Path) -> np.ndarray:
    try:
        data = np.load(path, allow_pickle=False)
    except ValueError as err:  # pickled objects, or not a .npy file at all
        raise InputFileError(f"{path}: cannot be read as a numpy array ({err}); "
                             "expected a 2-D numeric array saved with numpy.save") from None
    except (OSError, EOFError) as err:
        raise InputFileError(f"{path}: cannot be read ({err}); the file may be truncated: save it again") from None
    if not isinstance(data, np.ndarray):  # an .npz archive saved under a .npy name
        raise InputFileError(f"{path}: holds several arrays (an .npz archive); expected one 2-D array")
    squeezed = np.squeeze(data) if data.ndim > 2 else data
    if squeezed.ndim != 2:
        raise InputFileError(f"{path}: array of shape {data.shape}: expected a 2-D array (rows, cols) of one band")
    if data.dtype == bool or not np.issubdtype(data.dtype, np.number) or np.issubdtype(data.dtype, np.complexfloating):
        raise InputFileError(f"{path}: array of type {data.dtype}: expected real numbers (temperatures or counts)")
    return np.asarray(squeezed, dtype=np.float64)


def _delimiter(line: str) -> str | None:
    """The delimiter of a matrix line: ``;``, tab, ``,`` or ``None`` (blanks)."""
    for d in (";", "\t", ","):
        if d in line:
            return d
    return None


def read_matrix_csv(path: str | Path) -> np.ndarray:
    """Read a CSV temperature matrix: one line per image row, one value per column.

    Parameters
    ----------
    path
        The file (UTF-8, an optional byte-order mark).

    Returns
    -------
    numpy.ndarray
        float64 ``(rows, cols)``; NaN for empty cells and ``nan``.

    Raises
    ------
    InputFileError
        One line naming the file, the line (= image row + 1) and column, and what was
        expected: a cell that is not a number, lines of different lengths, an empty
        line inside the matrix, an empty or binary file.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "m.csv"
    >>> _ = p.write_text("1.5,2\\n3,x\\n")
    >>> try:
    ...     read_matrix_csv(p)
    ... except InputFileError as err:
    ...     print(err.problems[0].split(": ", 1)[1])
    line 2 (image row 1), column 2: "x" is not a number; expected a matrix of numbers only (no header lines)
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise InputFileError(f"{path}: is not a text file (binary data); expected a CSV matrix of temperatures") from None
    lines = text.splitlines()
    while lines and not lines[-1].strip():
        lines.pop()  # trailing blank lines
    if not lines:
        raise InputFileError(f"{path}: is empty; expected a CSV matrix of temperatures (one line per image row)")
    delim = _delimiter(lines[0])
    decimal_comma = delim != ","
    rows: list[list[float]] = []
    width: int | None = None
    for n, line in enumerate(lines, start=1):
        where = f"{path}: line {n} (image row {n - 1})"
        stripped = line.strip()
        if not stripped:
            raise InputFileError(f"{where}: is empty inside the matrix; expected one line of values per image row")
        if delim is None:
            cells = stripped.split()
        else:
            body = stripped[:-1] if stripped.endswith(delim) else stripped
            cells = next(csv.reader([body], delimiter=delim))  # quoted cells ("4,5") allowed
        values = []
        for k, cell in enumerate(cells, start=1):
            cell = cell.strip()
            if cell == "" or cell.lower() == "nan":
                values.append(math.nan)
                continue
            # a decimal comma: with ';', a tab or blanks as delimiter, or inside a quoted cell
            text_value = cell.replace(",", ".") if (decimal_comma or cell.count(",") == 1 and "." not in cell) \
                else cell
            try:
                values.append(float(text_value))
            except ValueError:
                hint = ("; a decimal comma needs ';' (or a tab) as delimiter" if delim == "," and "," in cell
                        else "")
                raise InputFileError(
                    f"{where}, column {k}: {_quote(cell)} is not a number; expected a matrix of numbers only "
                    f"(no header lines){hint}"
                ) from None
        if width is None:
            width = len(values)
        elif len(values) != width:
            raise InputFileError(
                f"{where}: has {len(values)} values, line 1 has {width}; "
                "expected the same number of values on every line (one per image column)"
            )
        rows.append(values)
    return np.array(rows, dtype=np.float64)


def _quote(cell: str, limit: int = 30) -> str:
    return '"' + (cell if len(cell) <= limit else cell[: limit - 3] + "...") + '"'
