"""Tests of wetmap.rasters: inspecting thermal rasters and reading them onto the plan grid.

Rasters are built in code with rasterio (the ``write_tif`` fixture of conftest.py) with
values chosen so the expected result is known exactly: a window read must return the
raw values bit for bit; a resampled raster holding a field that is *linear* in plan x, y
must return that same linear field at the grid's pixel centres (bilinear interpolation
reproduces linear functions exactly), which checks placement for south-up, rotated and
other-CRS rasters. The pixel-centre rule: pixel ``(row, col)`` is at
``transform * (col + 0.5, row + 0.5)``.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st
from pyproj import Transformer

from wetmap.errors import InputFileError, WetmapError
from wetmap.rasters import PlanGrid, inspect_raster, plan_grid_for, read_onto_grid, to_kelvin

UTM33 = "EPSG:32633"
X0, Y0 = 512300.0, 5463140.0  # an arbitrary upper-left corner in UTM zone 33N


def ramp(xs: np.ndarray, ys: np.ndarray) -> np.ndarray:
    """A field linear in plan coordinates (kelvin-like values): 280 K + 0.1 K/m east + 0.03 K/m north."""
    return 280.0 + 0.1 * (xs - X0) + 0.03 * (ys - Y0)


def centres(transform: Affine, rows: int, cols: int) -> tuple[np.ndarray, np.ndarray]:
    """Plan x, y of every pixel centre of a ``rows x cols`` raster, each ``(rows, cols)``."""
    c, r = np.meshgrid(np.arange(cols) + 0.5, np.arange(rows) + 0.5)
    xs = transform.a * c + transform.b * r + transform.c
    ys = transform.d * c + transform.e * r + transform.f
    return xs, ys


def apply(t: Affine, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``t`` applied to arrays of points."""
    return t.a * x + t.b * y + t.c, t.d * x + t.e * y + t.f


def north_up(rows: int, cols: int, *, pixel_m: float = 0.5, x0: float = X0, y0: float = Y0) -> Affine:
    return Affine(pixel_m, 0.0, x0, 0.0, -pixel_m, y0)


# --------------------------------------------------------------------------------------
# to_kelvin
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "units, values, kelvin",
    [
        ("C", [-40.0, 0.0, 100.0], [233.15, 273.15, 373.15]),
        ("K", [0.0, 273.15, 300.0], [0.0, 273.15, 300.0]),
        ("F", [-40.0, 32.0, 212.0], [233.15, 273.15, 373.15]),  # -40 F = -40 C (definition of the scales)
    ],
)
def test_to_kelvin(units, values, kelvin):
    np.testing.assert_allclose(to_kelvin(np.array(values), units), kelvin, rtol=0, atol=1e-9)
    out32 = to_kelvin(np.array(values, dtype=np.float32), units)
    assert out32.dtype == np.float32
    np.testing.assert_allclose(out32, kelvin, rtol=0, atol=1e-4)


def test_to_kelvin_integer_input_gives_floats():
    out = to_kelvin(np.array([0, 10], dtype=np.int64), "C")
    assert np.issubdtype(out.dtype, np.floating)
    np.testing.assert_allclose(out, [273.15, 283.15])


def test_to_kelvin_unknown_units():
    with pytest.raises(ValueError, match="units = 'R'.*'C', 'K', 'F'"):
        to_kelvin(np.array([1.0]), "R")  # type: ignore[arg-type]


# --------------------------------------------------------------------------------------
# inspect_raster: what can and cannot be placed on a metric plan
# --------------------------------------------------------------------------------------


def test_inspect_georeferenced(tmp_path, write_tif):
    path = write_tif(tmp_path / "a.tif", np.zeros((4, 6), np.float32), transform=north_up(4, 6), crs=UTM33,
                     nodata=-9999.0)
    info = inspect_raster(path, survey_crs=UTM33)
    assert (info.rows, info.cols, info.count, info.dtype, info.nodata) == (4, 6, 1, "float32", -9999.0)
    assert info.transform == north_up(4, 6) and info.crs == UTM33


def test_not_a_raster(invalid):
    path = invalid("not_a_raster.tif")
    with pytest.raises(InputFileError) as err:
        inspect_raster(path, survey_crs=UTM33)
    assert str(path) in str(err.value) and "cannot be opened as a raster" in str(err.value)


def test_colour_image_rejected(tmp_path, write_tif):
    rgb = np.zeros((3, 8, 8), np.uint8)
    path = write_tif(tmp_path / "rgb.tif", rgb, transform=north_up(8, 8), crs=UTM33, photometric="RGB")
    with pytest.raises(InputFileError) as err:
        inspect_raster(path, survey_crs=UTM33)
    message = str(err.value)
    assert str(path) in message and "3 bands" in message and "colour" in message
    assert "single band of radiometric temperatures" in message


def test_palette_image_rejected(tmp_path, write_tif):
    """A single band with a colour table is a false-colour picture: its values are colour indices."""
    import rasterio
    from rasterio.enums import ColorInterp

    path = write_tif(tmp_path / "palette.tif", np.arange(64, dtype=np.uint8).reshape(8, 8),
                     transform=north_up(8, 8), crs=UTM33, photometric="PALETTE")
    with rasterio.open(path, "r+") as dst:
        dst.write_colormap(1, {i: (i, 255 - i, 0, 255) for i in range(256)})
    with rasterio.open(path) as src:
        assert src.colorinterp[0] == ColorInterp.palette  # the fixture is what the test says
    with pytest.raises(InputFileError) as err:
        inspect_raster(path, survey_crs=UTM33)
    assert str(path) in str(err.value) and "palette" in str(err.value) and "not temperatures" in str(err.value)


def test_no_transform_rejected_without_origin(tmp_path, write_tif):
    path = write_tif(tmp_path / "bare.tif", np.zeros((4, 6), np.float32))  # no CRS, identity transform
    with pytest.raises(InputFileError) as err:
        inspect_raster(path, survey_crs=UTM33)
    message = str(err.value)
    assert str(path) in message and "no geo-transform" in message and "pixels" in message
    assert "origin = [x, y]" in message and "pixel_m" in message


def test_no_transform_placed_by_origin_and_pixel_size(tmp_path, write_tif):
    data = np.arange(12, dtype=np.float32).reshape(3, 4) + 270.0
    path = write_tif(tmp_path / "bare.tif", data)
    info = inspect_raster(path, origin=(100.0, 50.0), pixel_m=0.25, survey_crs=None)
    assert info.transform == Affine(0.25, 0, 100.0, 0, -0.25, 50.0) and info.crs is None
    # a grid one pixel wider on every side: the raster lands at rows 1..3, cols 1..4
    grid = plan_grid_for([info], (99.75, 49.0, 101.25, 50.25), crs=None)
    assert grid.transform == Affine(0.25, 0, 99.75, 0, -0.25, 50.25) and grid.shape == (5, 6)
    out = read_onto_grid(path, grid, info=info, units="K")
    np.testing.assert_array_equal(out[1:4, 1:5], data)
    assert np.isnan(out[0]).all() and np.isnan(out[4]).all() and np.isnan(out[:, 0]).all() and np.isnan(out[:, 5]).all()


def test_geographic_raster_rejected(tmp_path, write_tif):
    path = write_tif(tmp_path / "ll.tif", np.zeros((4, 4), np.float32),
                     transform=Affine(1e-5, 0, 15.0, 0, -1e-5, 49.3), crs="EPSG:4326")
    with pytest.raises(InputFileError) as err:
        inspect_raster(path, survey_crs=UTM33)
    message = str(err.value)
    assert str(path) in message and "EPSG:4326" in message and "degrees" in message and "reproject" in message


# --------------------------------------------------------------------------------------
# Truncated files: they open, then fail on read
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "profile, keep",
    [
        ({}, 0.5),  # striped, uncompressed, cut in the middle of the pixel data
        ({}, 0.95),  # only the last strips missing
        ({"tiled": True, "blockxsize": 64, "blockysize": 64, "compress": "deflate"}, 0.6),
    ],
)
def test_truncated_tiff_raises_input_file_error_naming_it(tmp_path, write_tif, profile, keep):
    rng = np.random.default_rng(1)
    data = (rng.random((256, 256)) * 10 + 270).astype(np.float32)  # noise: deflate cannot shrink it much
    full = write_tif(tmp_path / "full.tif", data, transform=north_up(256, 256), crs=UTM33, **profile)
    blob = full.read_bytes()
    cut = tmp_path / "cut.tif"
    cut.write_bytes(blob[: int(len(blob) * keep)])
    with pytest.raises(InputFileError) as err:
        info = inspect_raster(cut, survey_crs=UTM33)  # may succeed: the header is intact
        grid = plan_grid_for([info], (X0, Y0 - 128, X0 + 128, Y0), crs=UTM33)
        read_onto_grid(cut, grid, info=info, units="K")
    message = str(err.value)
    assert str(cut) in message and ("truncated or corrupt" in message or "cannot be opened" in message)


def test_truncated_tiff_opens_then_fails_on_read(tmp_path, write_tif):
    """The failure seen in the field: metadata is fine, pixels are missing (also on the resampling path)."""
    data = np.full((200, 200), 275.0, np.float32)
    full = write_tif(tmp_path / "full.tif", data, transform=north_up(200, 200), crs=UTM33)
    cut = tmp_path / "cut.tif"
    cut.write_bytes(full.read_bytes()[: full.stat().st_size // 2])
    info = inspect_raster(cut, survey_crs=UTM33)
    assert (info.rows, info.cols) == (200, 200)
    aligned = plan_grid_for([info], (X0, Y0 - 100, X0 + 100, Y0), crs=UTM33)
    other = plan_grid_for([info], (X0, Y0 - 100, X0 + 100, Y0), crs=UTM33, pixel_m=0.7)  # resampled
    for grid in (aligned, other):
        with pytest.raises(InputFileError, match="truncated or corrupt") as err:
            read_onto_grid(cut, grid, info=info, units="K")
        assert str(cut) in str(err.value) and isinstance(err.value, WetmapError)


# --------------------------------------------------------------------------------------
# read_onto_grid: values
# --------------------------------------------------------------------------------------


def test_aligned_window_read_is_exact(tmp_path, write_tif):
    rng = np.random.default_rng(7)
    data = (rng.random((40, 50)) * 30 + 260).astype(np.float32)
    t = north_up(40, 50, pixel_m=0.1)
    path = write_tif(tmp_path / "m.tif", data, transform=t, crs=UTM33)
    info = inspect_raster(path, survey_crs=UTM33)
    # a window inside the raster: rows 10..24, cols 5..34 (bounds on pixel edges, snapped outward)
    bounds = (X0 + 0.5 + 1e-4, Y0 - 2.5 + 1e-4, X0 + 3.5 - 1e-4, Y0 - 1.0 - 1e-4)
    grid = plan_grid_for([info], bounds, crs=UTM33)
    assert grid.transform.c == pytest.approx(X0 + 0.5) and grid.transform.f == pytest.approx(Y0 - 1.0)
    assert grid.shape == (15, 30)
    out = read_onto_grid(path, grid, info=info, units="K")
    assert out.dtype == np.float32
    np.testing.assert_array_equal(out, data[10:25, 5:35])


def test_nodata_and_internal_nan_become_nan(tmp_path, write_tif):
    data = np.full((5, 5), 10.0, np.float32)
    data[0, 0] = -9999.0  # declared nodata
    data[2, 3] = np.nan  # an undeclared NaN inside the raster
    data[4, :] = -9999.0  # a nodata collar
    path = write_tif(tmp_path / "n.tif", data, transform=north_up(5, 5), crs=UTM33, nodata=-9999.0)
    info = inspect_raster(path, survey_crs=UTM33)
    out = read_onto_grid(path, plan_grid_for([info], (X0, Y0 - 2.5, X0 + 2.5, Y0), crs=UTM33), info=info,
                         units="C")
    expected_nan = np.zeros((5, 5), bool)
    expected_nan[0, 0] = expected_nan[2, 3] = True
    expected_nan[4, :] = True
    np.testing.assert_array_equal(np.isnan(out), expected_nan)
    np.testing.assert_allclose(out[~expected_nan], 283.15, atol=1e-4)


def test_nan_nodata_stays_nan(tmp_path, write_tif):
    data = np.array([[1.0, np.nan], [3.0, 4.0]], np.float32)
    path = write_tif(tmp_path / "n.tif", data, transform=north_up(2, 2), crs=UTM33, nodata=np.nan)
    info = inspect_raster(path, survey_crs=UTM33)
    out = read_onto_grid(path, plan_grid_for([info], (X0, Y0 - 1, X0 + 1, Y0), crs=UTM33), info=info, units="K")
    np.testing.assert_array_equal(np.isnan(out), [[False, True], [False, False]])


@pytest.mark.parametrize("units, raw, kelvin", [("C", 20.0, 293.15), ("K", 293.15, 293.15), ("F", 68.0, 293.15)])
def test_units(tmp_path, write_tif, units, raw, kelvin):
    path = write_tif(tmp_path / "u.tif", np.full((3, 3), raw, np.float32), transform=north_up(3, 3), crs=UTM33)
    info = inspect_raster(path, survey_crs=UTM33)
    out = read_onto_grid(path, plan_grid_for([info], (X0, Y0 - 1.5, X0 + 1.5, Y0), crs=UTM33), info=info,
                         units=units)
    np.testing.assert_allclose(out, kelvin, atol=1e-4)


def test_scale_offset_on_uint16_with_nodata(tmp_path, write_tif):
    """value = raw * 0.01 - 273.15 in degC, i.e. raw is centikelvin (a common radiometric export)."""
    raw = np.array([[29315, 30000], [0, 27315]], dtype=np.uint16)  # 0 is the declared nodata
    path = write_tif(tmp_path / "ck.tif", raw, transform=north_up(2, 2), crs=UTM33, nodata=0)
    info = inspect_raster(path, survey_crs=UTM33)
    assert info.dtype == "uint16" and info.nodata == 0
    grid = plan_grid_for([info], (X0, Y0 - 1, X0 + 1, Y0), crs=UTM33)
    out = read_onto_grid(path, grid, info=info, units="C", scale=0.01, offset=-273.15)
    np.testing.assert_allclose(out, [[293.15, 300.0], [np.nan, 273.15]], atol=2e-3)  # float32 arithmetic
    assert np.isnan(out[1, 0])
    # the same raster as degF: raw * 0.018 - 459.67 (degF from centikelvin: 1.8 K -> F, 459.67 = 273.15 * 1.8)
    out_f = read_onto_grid(path, grid, info=info, units="F", scale=0.018, offset=-459.67)
    np.testing.assert_allclose(out_f, [[293.15, 300.0], [np.nan, 273.15]], atol=2e-3)


def test_grid_beyond_the_raster_is_nan(tmp_path, write_tif):
    data = np.full((4, 4), 300.0, np.float32)
    path = write_tif(tmp_path / "s.tif", data, transform=north_up(4, 4), crs=UTM33)
    info = inspect_raster(path, survey_crs=UTM33)
    grid = plan_grid_for([info], (X0 - 1.0, Y0 - 3.0, X0 + 3.0, Y0 + 1.0), crs=UTM33)
    out = read_onto_grid(path, grid, info=info, units="K")
    assert grid.shape == (8, 8)
    np.testing.assert_array_equal(out[2:6, 2:6], data)
    assert np.isnan(out).sum() == 64 - 16


def test_south_up_raster_lands_in_place(tmp_path, write_tif):
    """Row 0 is the *southern* row (e > 0): a check that nothing takes transform.a/e as north-up."""
    rows, cols, px = 20, 30, 0.5
    t = Affine(px, 0.0, X0, 0.0, px, Y0 - rows * px)  # lower-left corner at (X0, Y0 - 10)
    xs, ys = centres(t, rows, cols)
    path = write_tif(tmp_path / "south.tif", ramp(xs, ys).astype(np.float32), transform=t, crs=UTM33)
    info = inspect_raster(path, survey_crs=UTM33)
    grid = plan_grid_for([info], (X0, Y0 - rows * px, X0 + cols * px, Y0), crs=UTM33)
    assert grid.transform == north_up(rows, cols, pixel_m=px) and grid.shape == (rows, cols)
    out = read_onto_grid(path, grid, info=info, units="K")
    gx, gy = centres(grid.transform, *grid.shape)
    inner = (slice(1, -1), slice(1, -1))  # bilinear needs a neighbour on each side
    np.testing.assert_allclose(out[inner], ramp(gx, gy)[inner], atol=2e-3)
    # the north-west pixel of the grid is the *last* row of the file
    np.testing.assert_allclose(out[1, 1], ramp(xs, ys)[rows - 2, 1], atol=2e-3)


@pytest.mark.parametrize("angle", [30.0, 90.0])
def test_rotated_raster_lands_in_place(tmp_path, write_tif, angle):
    """A raster rotated by ``angle`` degrees about its corner, holding the linear ``ramp`` field."""
    rows, cols, px = 40, 40, 0.5
    t = Affine.translation(X0, Y0) @ Affine.rotation(angle) @ Affine.scale(px, -px)
    assert t.b != 0 and t.d != 0
    xs, ys = centres(t, rows, cols)
    path = write_tif(tmp_path / "rot.tif", ramp(xs, ys).astype(np.float32), transform=t, crs=UTM33)
    info = inspect_raster(path, survey_crs=UTM33)
    assert info.transform.almost_equals(t)
    grid = plan_grid_for([info], (xs.min(), ys.min(), xs.max(), ys.max()), crs=UTM33)
    assert grid.pixel_m == pytest.approx(px)  # the size of the pixel, not transform.a of the raster
    out = read_onto_grid(path, grid, info=info, units="K")
    gx, gy = centres(grid.transform, *grid.shape)
    # grid centres at least a pixel and a half inside the rotated footprint: bilinear is exact there
    col_f, row_f = apply(~t, gx, gy)
    inside = (col_f > 1.5) & (col_f < cols - 1.5) & (row_f > 1.5) & (row_f < rows - 1.5)
    assert inside.sum() > 0.4 * rows * cols
    np.testing.assert_allclose(out[inside], ramp(gx, gy)[inside], atol=2e-3)
    outside = (col_f < -1) | (col_f > cols + 1) | (row_f < -1) | (row_f > rows + 1)
    assert np.isnan(out[outside]).all()
    if angle == 30.0:  # the grid's corners lie outside the tilted footprint
        assert outside[0, 0] and outside[-1, -1]


def test_raster_in_another_crs_is_reprojected(tmp_path, write_tif):
    """A mosaic in UTM 34N on a UTM 33N survey: resampled, not read as if its coordinates were 33N.

    The raster holds a field linear in its own (34N) coordinates; each grid pixel must hold that
    field at the 34N position pyproj gives for the grid pixel's centre.
    """
    to34 = Transformer.from_crs(UTM33, "EPSG:32634", always_xy=True)
    ex, ny = to34.transform(X0, Y0)  # the same ground point in 34N
    rows, cols, px = 60, 60, 0.5
    t34 = Affine(px, 0.0, round(ex), 0.0, -px, round(ny))
    xs, ys = centres(t34, rows, cols)
    field = 280.0 + 0.1 * (xs - t34.c) + 0.03 * (ys - t34.f)
    path = write_tif(tmp_path / "z34.tif", field.astype(np.float32), transform=t34, crs="EPSG:32634")
    info = inspect_raster(path, survey_crs=UTM33)
    to33 = Transformer.from_crs("EPSG:32634", UTM33, always_xy=True)
    bx, by = to33.transform([xs.min(), xs.max()], [ys.min(), ys.max()])
    grid = plan_grid_for([info], (min(bx), min(by), max(bx), max(by)), crs=UTM33)
    # the pixel size is measured on the ground in the survey CRS (scale factors of both zones differ)
    (ax, bx_), (ay, by_) = to33.transform([t34.c, t34.c + px], [t34.f, t34.f])
    assert grid.pixel_m == pytest.approx(math.hypot(bx_ - ax, by_ - ay), rel=1e-4)
    assert grid.pixel_m != pytest.approx(px, rel=1e-3)  # the two zones' scale factors differ here
    out = read_onto_grid(path, grid, info=info, units="K")
    gx, gy = centres(grid.transform, *grid.shape)
    sx, sy = to34.transform(gx, gy)
    expected = 280.0 + 0.1 * (sx - t34.c) + 0.03 * (sy - t34.f)
    col_f, row_f = apply(~t34, np.asarray(sx), np.asarray(sy))
    inside = (col_f > 1.5) & (col_f < cols - 1.5) & (row_f > 1.5) & (row_f < rows - 1.5)
    assert inside.sum() > 0.3 * rows * cols
    np.testing.assert_allclose(out[inside], expected[inside], atol=5e-3)


def test_local_plan_reads_raster_coordinates_as_plan_metres(tmp_path, write_tif):
    data = np.arange(6, dtype=np.float32).reshape(2, 3)
    path = write_tif(tmp_path / "l.tif", data, transform=Affine(1.0, 0, 10.0, 0, -1.0, 20.0), crs=UTM33)
    info = inspect_raster(path, survey_crs=None)
    grid = plan_grid_for([info], (10.0, 18.0, 13.0, 20.0), crs=None)
    np.testing.assert_array_equal(read_onto_grid(path, grid, info=info, units="K"), data)


# --------------------------------------------------------------------------------------
# Tiny rasters
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("shape", [(1, 1), (1, 7), (7, 1)])
def test_tiny_rasters(tmp_path, write_tif, shape):
    data = (np.arange(math.prod(shape), dtype=np.float32) + 270.0).reshape(shape)
    path = write_tif(tmp_path / "tiny.tif", data, transform=north_up(*shape), crs=UTM33)
    info = inspect_raster(path, survey_crs=UTM33)
    assert (info.rows, info.cols) == shape
    rows, cols = shape
    grid = plan_grid_for([info], (X0, Y0 - rows * 0.5, X0 + cols * 0.5, Y0), crs=UTM33)
    assert grid.shape == shape
    np.testing.assert_array_equal(read_onto_grid(path, grid, info=info, units="K"), data)
    # resampled to a grid twice as fine: the whole footprint is covered, with values from the raster's range
    fine = plan_grid_for([info], grid.bounds, crs=UTM33, pixel_m=0.25)
    out = read_onto_grid(path, fine, info=info, units="K")
    assert out.shape == (2 * rows, 2 * cols)
    assert np.isfinite(out).all()
    assert data.min() - 1e-4 <= out.min() and out.max() <= data.max() + 1e-4
    if shape == (1, 1):
        np.testing.assert_array_equal(out, 270.0)


# --------------------------------------------------------------------------------------
# plan_grid_for
# --------------------------------------------------------------------------------------


def test_plan_grid_snaps_to_the_raster_lattice():
    t = Affine(0.5, 0.0, 1000.25, 0.0, -0.5, 2000.75)
    info = _info(t, rows=100, cols=100)
    grid = plan_grid_for([info], (1001.1, 1990.2, 1010.3, 2000.0), crs=UTM33)
    assert isinstance(grid, PlanGrid) and grid.crs == UTM33
    assert grid.transform == Affine(0.5, 0.0, 1000.75, 0.0, -0.5, 2000.25)
    assert grid.shape == (21, 20)  # y 1989.75 .. 2000.25, x 1000.75 .. 1010.75
    assert grid.bounds == (1000.75, 1989.75, 1010.75, 2000.25)
    assert grid.pixel_m == 0.5 and grid.pixel_area_m2 == 0.25


def test_plan_grid_uses_the_finest_raster_and_aligns_to_it():
    coarse = _info(Affine(1.0, 0, 0.3, 0, -1.0, 100.3), rows=10, cols=10)
    fine = _info(Affine(0.2, 0, 0.05, 0, -0.2, 100.05), rows=50, cols=50)
    grid = plan_grid_for([coarse, fine], (1.0, 91.0, 9.0, 99.0), crs=None)
    assert grid.pixel_m == pytest.approx(0.2)
    assert ((grid.transform.c - 0.05) / 0.2) == pytest.approx(round((grid.transform.c - 0.05) / 0.2), abs=1e-9)
    assert ((100.05 - grid.transform.f) / 0.2) == pytest.approx(round((100.05 - grid.transform.f) / 0.2), abs=1e-9)


@settings(max_examples=200, deadline=None)
@given(
    ox=st.floats(-1e6, 1e6), oy=st.floats(-1e6, 1e6), px=st.sampled_from([0.01, 0.05, 0.1, 0.25, 0.5, 1.0]),
    bx=st.floats(0, 500), by=st.floats(0, 500), w=st.floats(0.001, 300), h=st.floats(0.001, 300),
)
def test_plan_grid_covers_bounds_on_the_lattice(ox, oy, px, bx, by, w, h):
    """Property: the grid covers the bounds, lies on the raster lattice and is at most one pixel too big per side."""
    info = _info(Affine(px, 0, ox, 0, -px, oy), rows=10, cols=10)
    xmin, ymax = ox + bx, oy - by
    bounds = (xmin, ymax - h, xmin + w, ymax)
    grid = plan_grid_for([info], bounds, crs=None)
    gx0, gy0, gx1, gy1 = grid.bounds
    assert gx0 <= bounds[0] + px * 1e-6 and gx1 >= bounds[2] - px * 1e-6
    assert gy0 <= bounds[1] + px * 1e-6 and gy1 >= bounds[3] - px * 1e-6
    assert gx0 > bounds[0] - px * (1 + 1e-6) and gx1 < bounds[2] + px * (1 + 1e-6)
    assert gy0 > bounds[1] - px * (1 + 1e-6) and gy1 < bounds[3] + px * (1 + 1e-6)
    k = (grid.transform.c - ox) / px
    assert abs(k - round(k)) < 1e-6
    k = (oy - grid.transform.f) / px
    assert abs(k - round(k)) < 1e-6


def _info(transform: Affine, *, rows: int, cols: int, crs: str | None = None):
    from wetmap.rasters import RasterInfo

    return RasterInfo(transform=transform, crs=crs, rows=rows, cols=cols, count=1, dtype="float32", nodata=None)
