"""Dry background, delta and threshold: fast paths against slow references.

Fixtures are built in code; each docstring says what the field equals.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import ndimage

from wetmap.detect import (
    anomaly_mask,
    background_grid,
    block_statistics,
    default_background_m,
    block_noise_sigma,
    upsample_window,
)
from wetmap.tiles import detect_anomalies


def dry_background(surface, usable, **kw):
    """The evaluated background of the one engine (one window)."""
    return detect_anomalies(surface, usable, min_area_m2=0.0, **kw).background_c


def slow_block_median(values, usable, block, min_fill=0.25):
    """Obvious reference: numpy's median block by block; a block needs a quarter of its
    in-array pixels usable (edge blocks are partial)."""
    rows, cols = values.shape
    nr, nc = -(-rows // block), -(-cols // block)
    out = np.full((nr, nc), np.nan)
    for i in range(nr):
        for j in range(nc):
            v = values[i * block:(i + 1) * block, j * block:(j + 1) * block]
            u = usable[i * block:(i + 1) * block, j * block:(j + 1) * block] & np.isfinite(v)
            if u.sum() >= max(1, int(np.ceil(min_fill * v.size))):
                out[i, j] = np.median(v[u].astype(np.float64))
    return out


@settings(max_examples=40, deadline=None)
@given(
    rows=st.integers(1, 40), cols=st.integers(1, 40), block=st.integers(1, 9),
    seed=st.integers(0, 2**31 - 1), nan_frac=st.floats(0.0, 0.9),
)
def test_block_median_equals_slow_reference(rows, cols, block, seed, nan_frac):
    rng = np.random.default_rng(seed)
    values = rng.normal(5.0, 2.0, (rows, cols)).astype(np.float32)
    usable = rng.random((rows, cols)) >= nan_frac
    values[rng.random((rows, cols)) < 0.1] = np.nan
    fast = block_statistics(values, usable, block).median
    slow = slow_block_median(values, usable, block)
    np.testing.assert_array_equal(np.isnan(fast), np.isnan(slow))
    np.testing.assert_allclose(fast[~np.isnan(fast)], slow[~np.isnan(slow)], rtol=0, atol=1e-6)


@pytest.mark.parametrize("shape,block", [((50, 70), 7), ((13, 9), 4), ((1, 30), 3), ((64, 64), 16)])
def test_upsample_equals_map_coordinates(shape, block):
    """Bilinear from block centres to pixel centres equals scipy.ndimage.map_coordinates(order=1)
    sampled at ((row + 0.5) / block - 0.5, (col + 0.5) / block - 0.5), clamped to the grid."""
    rng = np.random.default_rng(1)
    nr, nc = -(-shape[0] // block), -(-shape[1] // block)
    coarse = rng.normal(size=(nr, nc))
    fast = upsample_window(coarse, block, shape=shape)
    r = np.clip((np.arange(shape[0]) + 0.5) / block - 0.5, 0, nr - 1)
    c = np.clip((np.arange(shape[1]) + 0.5) / block - 0.5, 0, nc - 1)
    rr, cc = np.meshgrid(r, c, indexing="ij")
    slow = ndimage.map_coordinates(coarse, [rr, cc], order=1, mode="nearest")
    np.testing.assert_allclose(fast, slow, atol=1e-5)


def _roof(shape=(400, 600), pixel_m=0.1, seed=0, noise=0.1):
    """A dry roof at 5 degC with a 1 degC east-west ramp and Gaussian noise of ``noise`` degC."""
    rng = np.random.default_rng(seed)
    rows, cols = shape
    ramp = 5.0 + np.linspace(0.0, 1.0, cols)[None, :] * np.ones((rows, 1))
    return (ramp + rng.normal(0, noise, shape)).astype(np.float32), ramp


def test_background_follows_a_gradient():
    surface, ramp = _roof()
    usable = np.ones(surface.shape, bool)
    bg = dry_background(surface, usable, pixel_m=0.1, background_m=18.0, threshold_c=1.0)
    inner = (slice(20, -20), slice(20, -20))
    assert np.abs(bg[inner] - ramp[inner]).max() < 0.05


def test_large_wet_area_is_not_absorbed_into_its_background():
    """A 10 x 8 m area +2.5 degC on a 60 x 40 m roof with an 18 m background scale: the iterated
    block median keeps the background dry; a Gaussian background (the naive choice) is pulled up
    and loses part of the excess (checked at the end)."""
    surface, ramp = _roof()
    surface[150:230, 250:350] += 2.5
    usable = np.ones(surface.shape, bool)
    bg = dry_background(surface, usable, pixel_m=0.1, background_m=18.0, threshold_c=1.0)
    inside = (slice(150, 230), slice(250, 350))
    assert np.abs(bg[inside] - ramp[inside]).max() < 0.15
    det = detect_anomalies(surface, usable, pixel_m=0.1, threshold_c=1.0, background_m=18.0, min_area_m2=0.5)
    found = det.mask[inside].mean()
    assert found > 0.99
    assert det.mask.sum() == pytest.approx(80 * 100, rel=0.02)
    # the naive smoothed background for contrast: it absorbs part of the excess
    naive = ndimage.gaussian_filter(surface.astype(float), sigma=180 / 2.355)
    assert (surface - naive)[inside].mean() < 2.5 - 0.3


def test_excluded_and_nodata_pixels_never_anomalous():
    surface, _ = _roof(shape=(200, 200))
    surface[50:80, 50:80] += 30.0  # a hot rooftop unit...
    usable = np.ones(surface.shape, bool)
    usable[45:85, 45:85] = False  # ...excluded
    surface[150:160, :] = np.nan  # a strip of nodata
    det = detect_anomalies(surface, usable & np.isfinite(surface), pixel_m=0.1, threshold_c=1.0,
                           background_m=10.0, min_area_m2=0.05)
    assert not det.mask[45:85, 45:85].any()
    assert not det.mask[150:160].any()
    assert np.isnan(det.delta_c[~usable]).all()


def test_hole_filling_never_takes_excluded_pixels():
    delta = np.zeros((30, 30))
    delta[5:25, 5:25] = 2.0
    delta[14:16, 14:16] = np.nan  # an excluded drain inside a wet area
    delta[13, 14] = 0.0  # with a cool pixel beside it: the hole holds an unusable pixel
    mask = anomaly_mask(delta, 1.0, min_pixels=10)
    assert not mask[14:16, 14:16].any()
    assert not mask[13, 14]  # left open as a whole
    delta[10, 10] = 0.0  # a one-pixel cool hole is filled
    assert anomaly_mask(delta, 1.0, min_pixels=10)[10, 10]


def test_threshold_and_min_area():
    delta = np.zeros((20, 20))
    delta[2:5, 2:5] = 1.5  # 9 px
    delta[10:12, 10:12] = 1.5  # 4 px
    delta[15, 15] = 1.0  # equal to the threshold: not above it
    mask = anomaly_mask(delta, 1.0, min_pixels=5)
    assert mask.sum() == 9


@pytest.mark.parametrize("shape", [(1, 1), (1, 50), (50, 1), (3, 3)])
def test_tiny_rasters_give_a_result(shape):
    surface = np.full(shape, 5.0, dtype=np.float32)
    usable = np.ones(shape, bool)
    det = detect_anomalies(surface, usable, pixel_m=0.1, threshold_c=1.0, background_m=10.0, min_area_m2=0.0)
    assert not det.mask.any()
    assert np.allclose(det.delta_c, 0.0)


def test_all_unusable_gives_nan_background():
    surface = np.full((20, 20), np.nan, dtype=np.float32)
    det = detect_anomalies(surface, np.zeros((20, 20), bool), pixel_m=0.1, threshold_c=1.0, background_m=5.0,
                           min_area_m2=0.1)
    assert np.isnan(det.background_c).all()
    assert not det.mask.any()


def test_background_grid_spans_the_scale():
    for pixel_m, scale in [(0.01, 40.0), (0.03, 30.0), (0.1, 18.0), (0.05, 2.0)]:
        g = background_grid(pixel_m, scale)
        assert g.footprint % 2 == 1 and g.footprint >= 3
        assert g.footprint_px * pixel_m == pytest.approx(scale, rel=0.1)


def test_default_background_follows_kind_and_size():
    assert default_background_m("roof", 200.0) == 40.0
    assert default_background_m("roof", 60.0) == pytest.approx(18.0)
    assert default_background_m("hull", 12.0) == pytest.approx(3.6)
    assert default_background_m("hull", 2.0) == 1.0


def test_upsample_window_is_bitwise_the_whole_grid():
    """A window of the interpolated grid equals the same pixels of the whole grid, bit for bit
    (what lets a mosaic be processed in windows)."""
    rng = np.random.default_rng(2)
    coarse = rng.normal(size=(9, 13))
    whole = upsample_window(coarse, 8, shape=(70, 100))
    part = upsample_window(coarse, 8, shape=(25, 33), row0=16, col0=40)
    np.testing.assert_array_equal(part, whole[16:41, 40:73])


def test_block_sigma_measures_pixel_noise_and_ignores_wet_blocks():
    """IQR / 1.349 is a normal distribution's standard deviation (normal quantiles +-0.6745);
    the median over blocks is not moved by a warm area covering a fifth of the blocks."""
    rng = np.random.default_rng(7)
    values = rng.normal(0.0, 0.2, (400, 400)).astype(np.float32)
    values[:80] += 3.0 * (rng.random((80, 400)) > 0.5)  # a patchy warm strip
    stats = block_statistics(values, np.ones(values.shape, bool), 20)
    assert block_noise_sigma(stats.sigma) == pytest.approx(0.2, rel=0.08)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_section_block_statistics_equal_one_section_at_a_time(seed):
    """Per-section block medians (computed on each section's bounding blocks) equal
    block_statistics of the whole array with only that section's pixels usable."""
    from wetmap.detect import section_block_statistics

    rng = np.random.default_rng(seed)
    values = rng.normal(5.0, 1.0, (61, 83)).astype(np.float32)
    usable = rng.random(values.shape) > 0.1
    rr, cc = np.mgrid[0:61, 0:83]
    labels = np.where(cc + 0.7 * rr < 50, 0, np.where(rr < 20, 1, 2)).astype(np.int16)
    labels[labels == 2] = 3  # label 2 has no pixel at all
    median, sigma = section_block_statistics(values, usable, labels, 4, 7)
    for g in range(4):
        ref = block_statistics(values, usable & (labels == g), 7)
        np.testing.assert_array_equal(median[g], ref.median)
        np.testing.assert_array_equal(sigma[g], ref.sigma)


def test_trend_ignores_a_cluster_of_cold_blocks():
    """A fifth of the blocks 30 K colder (misplaced sky pixels, a sky reflection) is no dry
    surface: the trend follows the other blocks, a 1 K gradient (the cold-outlier rule is
    common practice: a dry section varies by a few kelvin and wet only warms it)."""
    from wetmap.detect import fit_trend

    rows, cols = np.mgrid[0:20, 0:30].astype(float)
    rows, cols = rows.ravel() * 10 + 5, cols.ravel() * 10 + 5
    rng = np.random.default_rng(3)
    dry = 14.0 + cols / 300.0 + rng.normal(0, 0.02, rows.size)
    values = np.where(rows < 40, -17.0 + rng.normal(0, 0.005, rows.size), dry)
    fit = fit_trend(values, rows, cols, threshold_c=0.6)
    warm = rows >= 40
    np.testing.assert_allclose(fit.at(rows[warm], cols[warm]), 14.0 + cols[warm] / 300.0, atol=0.05)
