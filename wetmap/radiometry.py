"""Band radiance (Planck's law) and apparent <-> surface temperature.

A thermal camera measures radiance in a spectral band (7.5-14 um for most
uncooled microbolometers). With the camera set to emissivity 1 and transmittance
1 it reports the *apparent* temperature: the blackbody temperature whose band
radiance equals the measured radiance. The measurement equation (ASTM E1862,
ASTM E1933; Vollmer & Möllmann, Infrared Thermal Imaging) is

``L_meas = tau eps L(T_s) + tau (1 - eps) L(T_refl) + (1 - tau) L(T_atm)``

where ``L(T)`` is the band radiance of a blackbody at ``T``, ``eps`` the
emissivity of the surface, ``T_refl`` the reflected temperature, ``tau`` the
transmittance of the air path and ``T_atm`` the air temperature on the path.

The band integral is used throughout: a power law (``T^4`` or ``T^n``) in its
place errs by many kelvin on hot, shiny surfaces.

Images are converted through a :class:`BandTable` (a fine table of ``L(T)``,
read with :func:`numpy.interp`) in flat blocks written into a preallocated
output, so arrays of hundreds of megapixels need little memory beyond input and
output.
"""

from __future__ import annotations

import functools
import logging
import math
from collections.abc import Callable, Iterator
from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants

from .moist_air import absolute_humidity_g_m3

__all__ = [
    "Radiometry",
    "to_surface_k",
    "section_emissivity_correction",
    "DEFAULT_BAND_UM",
    "TABLE_MIN_K",
    "TABLE_MAX_K",
    "TABLE_STEP_K",
    "CHUNK_ELEMENTS",
    "WATER_VAPOUR_EXTINCTION_PER_MM",
    "spectral_radiance",
    "band_radiance",
    "BandTable",
    "band_table",
    "surface_from_apparent",
    "apparent_from_surface",
    "precipitable_water_mm",
    "atmospheric_transmittance",
]

logger = logging.getLogger(__name__)

#: Spectral band of a typical uncooled long-wave camera, um (lower, upper).
DEFAULT_BAND_UM: tuple[float, float] = (7.5, 14.0)

#: Temperature range and step of :func:`band_table`, K.
TABLE_MIN_K: float = 100.0
TABLE_MAX_K: float = 700.0
TABLE_STEP_K: float = 0.01

#: Elements processed per block by the image conversions.
CHUNK_ELEMENTS: int = 2**20

#: Approximate band-average extinction of the 8-14 um window by water vapour, per mm
#: of precipitable water on the path (from memory; not a published constant).
WATER_VAPOUR_EXTINCTION_PER_MM: float = 0.1

# Planck's law constants, CODATA (scipy.constants).
_C1L = 2.0 * constants.h * constants.c**2  # W m2 sr-1 (radiance form)
_C2 = constants.h * constants.c / constants.k  # m K

# Composite Gauss-Legendre rule in ln(wavelength): panels no wider than a factor
# _PANEL_RATIO in wavelength, _GL_ORDER nodes per panel.
_GL_ORDER = 24
_PANEL_RATIO = 1.5
_GL_NODES, _GL_WEIGHTS = np.polynomial.legendre.leggauss(_GL_ORDER)
_BAND_RADIANCE_BLOCK = 2**14


def _check_band(band_um: tuple[float, float]) -> tuple[float, float]:
    try:
        lo, hi = (float(v) for v in band_um)
    except (TypeError, ValueError):
        raise ValueError(f"band_um = {band_um!r}: expected (lower_um, upper_um)") from None
    if not (0.0 < lo < hi and math.isfinite(hi)):
        raise ValueError(f"band_um = {band_um!r}: expected 0 < lower_um < upper_um")
    return lo, hi


def spectral_radiance(wavelength_m: ArrayLike, temp_k: ArrayLike) -> np.ndarray:
    """Planck's law: spectral radiance of a blackbody.

    ``B = 2 h c^2 / lambda^5 / (exp(h c / (lambda k T)) - 1)``, CODATA constants.

    Parameters
    ----------
    wavelength_m
        Wavelength, m. Any shape broadcastable against ``temp_k``.
    temp_k
        Temperature, K. Values <= 0 give NaN.

    Returns
    -------
    numpy.ndarray
        Spectral radiance, W m-2 sr-1 m-1, of the broadcast shape (0-d for
        scalars).

    Examples
    --------
    >>> f"{float(spectral_radiance(4e-6, 800.0)):.6e}"
    '1.311694e+09'
    """
    lam = np.asarray(wavelength_m, dtype=np.float64)
    t = np.asarray(temp_k, dtype=np.float64)
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        x = _C2 / (lam * t)
        b = _C1L / lam**5 / np.expm1(x)
    return np.where(t > 0.0, b, np.nan)


@functools.lru_cache(maxsize=32)
def _band_nodes(lo_um: float, hi_um: float) -> tuple[np.ndarray, np.ndarray]:
    """Wavelengths (m) and weights (m, including d lambda = lambda d ln lambda)."""
    u0, u1 = math.log(lo_um * 1e-6), math.log(hi_um * 1e-6)
    n_panels = max(1, math.ceil((u1 - u0) / math.log(_PANEL_RATIO)))
    edges = np.linspace(u0, u1, n_panels + 1)
    half = 0.5 * np.diff(edges)[:, None]
    mid = 0.5 * (edges[:-1] + edges[1:])[:, None]
    u = (mid + half * _GL_NODES).ravel()
    w = (half * _GL_WEIGHTS).ravel()
    lam = np.exp(u)
    return lam, w * lam


def band_radiance(temp_k: ArrayLike, *, band_um: tuple[float, float] = DEFAULT_BAND_UM) -> np.ndarray:
    """Blackbody radiance integrated over a spectral band.

    Planck's law integrated over wavelength by a fixed composite Gauss-Legendre rule
    in ``ln(wavelength)`` (24 nodes per panel, panels at most a factor 1.5 wide),
    vectorised over temperatures. Agrees with adaptive quadrature to about 1e-12
    relative.

    Parameters
    ----------
    temp_k
        Temperature, K, any shape. NaN and values <= 0 give NaN.
    band_um
        Band limits (lower, upper), um.

    Returns
    -------
    numpy.ndarray
        Band radiance, W m-2 sr-1, float64, same shape as ``temp_k`` (0-d for a
        scalar).

    Examples
    --------
    >>> round(float(band_radiance(300.0)), 4)
    59.3117
    >>> round(float(band_radiance(300.0, band_um=(8.0, 14.0))), 4)
    54.9335
    """
    lo, hi = _check_band(band_um)
    lam, w = _band_nodes(lo, hi)
    t = np.asarray(temp_k, dtype=np.float64)
    flat = t.reshape(-1)
    out = np.empty(flat.shape, dtype=np.float64)
    for start in range(0, flat.size, _BAND_RADIANCE_BLOCK):
        block = flat[start : start + _BAND_RADIANCE_BLOCK]
        out[start : start + block.size] = spectral_radiance(lam, block[:, None]) @ w
    return out.reshape(t.shape)


@dataclass(frozen=True, eq=False)
class BandTable:
    """A fine, monotone table of band radiance against temperature.

    Attributes
    ----------
    band_um
        Band limits (lower, upper), um.
    temps_k
        Temperatures, K, shape (n,), strictly increasing.
    radiance
        Band radiance at ``temps_k``, W m-2 sr-1, shape (n,), strictly increasing.

    Notes
    -----
    Both look-ups interpolate linearly; values outside the table give NaN.
    """

    band_um: tuple[float, float]
    temps_k: np.ndarray
    radiance: np.ndarray

    def __post_init__(self) -> None:
        if self.temps_k.ndim != 1 or self.temps_k.shape != self.radiance.shape:
            raise ValueError("temps_k and radiance must be 1-D arrays of the same length")
        if not (np.all(np.diff(self.temps_k) > 0) and np.all(np.diff(self.radiance) > 0)):
            raise ValueError("temps_k and radiance must be strictly increasing")

    def radiance_of(self, temp_k: ArrayLike) -> np.ndarray:
        """Band radiance of a blackbody, by table look-up.

        Parameters
        ----------
        temp_k
            Temperature, K, any shape.

        Returns
        -------
        numpy.ndarray
            Band radiance, W m-2 sr-1, float64, same shape. NaN outside the table.

        Examples
        --------
        >>> round(float(band_table().radiance_of(300.0)), 4)
        59.3117
        """
        return np.interp(temp_k, self.temps_k, self.radiance, left=np.nan, right=np.nan)

    def temperature_of(self, radiance: ArrayLike) -> np.ndarray:
        """Blackbody temperature of a band radiance, by inverse table look-up.

        Parameters
        ----------
        radiance
            Band radiance, W m-2 sr-1, any shape.

        Returns
        -------
        numpy.ndarray
            Temperature, K, float64, same shape. NaN outside the table.

        Examples
        --------
        >>> round(float(band_table().temperature_of(59.3117)), 3)
        300.0
        """
        return np.interp(radiance, self.radiance, self.temps_k, left=np.nan, right=np.nan)


@functools.lru_cache(maxsize=8)
def _band_table_cached(lo_um: float, hi_um: float) -> BandTable:
    n = int(round((TABLE_MAX_K - TABLE_MIN_K) / TABLE_STEP_K)) + 1
    temps = np.linspace(TABLE_MIN_K, TABLE_MAX_K, n)
    rad = band_radiance(temps, band_um=(lo_um, hi_um))
    temps.setflags(write=False)
    rad.setflags(write=False)
    return BandTable(band_um=(lo_um, hi_um), temps_k=temps, radiance=rad)


def band_table(band_um: tuple[float, float] = DEFAULT_BAND_UM) -> BandTable:
    """The band radiance table for a band (built once per band, then cached).

    From :data:`TABLE_MIN_K` (100 K) to :data:`TABLE_MAX_K` (700 K) every
    :data:`TABLE_STEP_K` (0.01 K); linear interpolation then reproduces
    :func:`band_radiance` to better than 1e-5 K. The arrays are read-only.

    Parameters
    ----------
    band_um
        Band limits (lower, upper), um.

    Returns
    -------
    BandTable

    Examples
    --------
    >>> band_table() is band_table((7.5, 14.0))
    True
    """
    return _band_table_cached(*_check_band(band_um))


# --------------------------------------------------------------------------- images


def _blocks(shape: tuple[int, ...], chunk: int) -> Iterator[tuple]:
    """Index tuples that split ``shape`` into blocks of about ``chunk`` elements.

    Blocks are runs of whole slices along the leading axis (contiguous in C order);
    a leading slice larger than ``chunk`` is split further along the next axis.
    """
    if len(shape) == 0:
        yield ()
        return
    rest = math.prod(shape[1:])
    if rest <= chunk:
        step = max(1, chunk // max(rest, 1))
        for r0 in range(0, shape[0], step):
            yield (slice(r0, r0 + step),)
    else:
        for i in range(shape[0]):
            for sub in _blocks(shape[1:], chunk):
                yield (i, *sub)


def _as_param(name: str, value: ArrayLike, shape: tuple[int, ...]) -> float | np.ndarray:
    """A scalar parameter as a float; an array one broadcast (as a view) to ``shape``."""
    arr = np.asarray(value, dtype=np.float64)
    if arr.size == 1:
        return float(arr.reshape(()))
    try:
        if np.broadcast_shapes(arr.shape, shape) != shape:
            raise ValueError
    except ValueError:
        raise ValueError(
            f"{name} has shape {arr.shape}, which does not broadcast to the data shape {shape}"
        ) from None
    return np.broadcast_to(arr, shape)


def _check_fraction(name: str, value: float | np.ndarray) -> None:
    v = np.asarray(value)
    bad = (v <= 0.0) | (v > 1.0)  # NaN compares False: NaN entries pass and give NaN
    if np.any(bad):
        raise ValueError(f"{name} = {float(v[bad].flat[0])!r}: expected 0 < value <= 1")


def _prepare(
    data_k: ArrayLike,
    emissivity: ArrayLike,
    reflected_k: ArrayLike,
    transmittance: ArrayLike,
    atmosphere_k: ArrayLike | None,
) -> tuple[np.ndarray, np.ndarray, dict[str, float | np.ndarray]]:
    data = np.asarray(data_k)
    if not (np.issubdtype(data.dtype, np.floating) or np.issubdtype(data.dtype, np.integer)):
        raise ValueError(f"temperatures must be a real numeric array, got dtype {data.dtype}")
    out_dtype = np.float32 if data.dtype == np.float32 else np.float64
    shape = data.shape
    # validate the parameters as given, before broadcasting them to the data shape
    _check_fraction("emissivity", np.asarray(emissivity, dtype=np.float64))
    _check_fraction("transmittance", np.asarray(transmittance, dtype=np.float64))
    params = {
        "emissivity": _as_param("emissivity", emissivity, shape),
        "reflected_k": _as_param("reflected_k", reflected_k, shape),
        "transmittance": _as_param("transmittance", transmittance, shape),
    }
    if atmosphere_k is None:
        if np.any(np.asarray(transmittance, dtype=np.float64) != 1.0):
            raise ValueError("atmosphere_k is required when transmittance is not 1")
        params["transmittance"] = 1.0  # all ones: skip the path term
        params["atmosphere_k"] = 0.0  # never used
    else:
        params["atmosphere_k"] = _as_param("atmosphere_k", atmosphere_k, shape)
    return data, np.empty(shape, dtype=out_dtype), params


def _run_blocks(
    func: Callable[..., np.ndarray],
    data: np.ndarray,
    out: np.ndarray,
    params: dict[str, float | np.ndarray],
) -> np.ndarray:
    for idx in _blocks(data.shape, CHUNK_ELEMENTS):
        block = {k: (v if isinstance(v, float) else v[idx]) for k, v in params.items()}
        out[idx] = func(data[idx], **block)
    return out[()] if out.ndim == 0 else out


@functools.lru_cache(maxsize=16)
def _surface_lookup(*, band_um: tuple[float, float], emissivity: float, reflected_k: float,
                    transmittance: float, atmosphere_k: float) -> np.ndarray:
    """Surface temperature at every apparent temperature of the band table's grid.

    The grid is uniform (:data:`TABLE_MIN_K` to :data:`TABLE_MAX_K` every
    :data:`TABLE_STEP_K`), so a look-up is an index computation, not a search.
    Linear interpolation on it adds less than 1e-6 K to the table's own error.
    """
    table = band_table(band_um)
    values = _invert_equation(table, table.temps_k, emissivity=emissivity, reflected_k=reflected_k,
                              transmittance=transmittance, atmosphere_k=atmosphere_k)
    values.setflags(write=False)
    return values


def _invert_equation(table: BandTable, app: np.ndarray, *, emissivity: float | np.ndarray,
                     reflected_k: float | np.ndarray, transmittance: float | np.ndarray,
                     atmosphere_k: float | np.ndarray) -> np.ndarray:
    """Surface temperature (K) from apparent temperature ``app`` (K): the measurement equation
    solved for ``L(T_s)``, then the table's inverse; NaN where the radiance left is <= 0."""
    lm = np.asarray(table.radiance_of(app))
    lm -= transmittance * (1.0 - emissivity) * table.radiance_of(reflected_k)
    if not (isinstance(transmittance, float) and transmittance == 1.0):
        lm -= (1.0 - transmittance) * table.radiance_of(atmosphere_k)
    lm /= transmittance * emissivity
    return table.temperature_of(np.where(lm > 0.0, lm, np.nan))


def _read_uniform(x: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Linear interpolation of ``values`` (on the uniform table grid) at ``x`` (K); NaN outside."""
    u = np.asarray(x, dtype=np.float64) - TABLE_MIN_K
    u *= 1.0 / TABLE_STEP_K
    n = values.size
    inside = (u >= 0.0) & (u <= n - 1)  # False for NaN
    u[~inside] = 0.0
    np.clip(u, 0.0, n - 1.000001, out=u)
    i = u.astype(np.intp)
    u -= i
    y = values[i]
    y += u * (values[i + 1] - y)
    y[~inside] = np.nan
    return y


def surface_from_apparent(
    apparent_k: ArrayLike,
    *,
    emissivity: ArrayLike,
    reflected_k: ArrayLike,
    transmittance: ArrayLike = 1.0,
    atmosphere_k: ArrayLike | None = None,
    band_um: tuple[float, float] = DEFAULT_BAND_UM,
) -> np.ndarray:
    """Surface temperature from apparent (blackbody-equivalent) temperature.

    Inverts the measurement equation
    ``L_meas = tau eps L(T_s) + tau (1 - eps) L(T_refl) + (1 - tau) L(T_atm)``
    for ``T_s``, with ``L`` the band radiance, read from :func:`band_table`.

    Parameters
    ----------
    apparent_k
        Apparent temperature (camera set to emissivity 1, transmittance 1), K,
        any shape. NaN stays NaN.
    emissivity
        Emissivity of the surface in the band, in (0, 1]. Scalar or an array
        broadcastable to ``apparent_k``.
    reflected_k
        Reflected (apparent) temperature, K (ASTM E1862). Scalar or array.
    transmittance
        Transmittance of the air path in the band, in (0, 1]. Scalar or array.
    atmosphere_k
        Air temperature on the path, K. Required unless ``transmittance`` is 1.
    band_um
        Camera band (lower, upper), um.

    Returns
    -------
    numpy.ndarray
        Surface temperature, K, same shape as ``apparent_k``; float32 for float32
        input, else float64. NaN where the input is NaN or the result is
        physically impossible (corrected radiance <= 0, or outside the table
        100-700 K). A 0-d input gives a numpy scalar.

    Raises
    ------
    ValueError
        ``emissivity`` or ``transmittance`` outside (0, 1], a parameter that does
        not broadcast, or ``atmosphere_k`` missing when ``transmittance`` < 1.

    Examples
    --------
    Shiny metal at 150 °C with emissivity 0.054 and 21 °C surroundings reads
    about 32 °C:

    >>> t = surface_from_apparent(305.15, emissivity=0.054, reflected_k=294.15)
    >>> round(float(t) - 273.15, 1)
    150.0
    """
    data, out, params = _prepare(apparent_k, emissivity, reflected_k, transmittance, atmosphere_k)
    table = band_table(band_um)
    if data.ndim and all(isinstance(v, float) for v in params.values()):
        # one set of parameters for the whole image: apparent -> surface is one monotone
        # function of one variable, tabulated once on a uniform grid and read by index
        lookup = _surface_lookup(band_um=table.band_um, **params)
        for idx in _blocks(data.shape, CHUNK_ELEMENTS):
            out[idx] = _read_uniform(data[idx], lookup)
        return out

    return _run_blocks(functools.partial(_invert_equation, table), data, out, params)


def apparent_from_surface(
    surface_k: ArrayLike,
    *,
    emissivity: ArrayLike,
    reflected_k: ArrayLike,
    transmittance: ArrayLike = 1.0,
    atmosphere_k: ArrayLike | None = None,
    band_um: tuple[float, float] = DEFAULT_BAND_UM,
) -> np.ndarray:
    """Apparent (blackbody-equivalent) temperature a camera reads for a surface.

    Evaluates the measurement equation
    ``L_meas = tau eps L(T_s) + tau (1 - eps) L(T_refl) + (1 - tau) L(T_atm)``
    and returns the blackbody temperature with band radiance ``L_meas`` (the
    reading of a camera set to emissivity 1 and transmittance 1).

    Parameters
    ----------
    surface_k
        True surface temperature, K, any shape. NaN stays NaN.
    emissivity
        Emissivity of the surface in the band, in (0, 1]. Scalar or an array
        broadcastable to ``surface_k``.
    reflected_k
        Reflected temperature, K. Scalar or array.
    transmittance
        Transmittance of the air path in the band, in (0, 1]. Scalar or array.
    atmosphere_k
        Air temperature on the path, K. Required unless ``transmittance`` is 1.
    band_um
        Camera band (lower, upper), um.

    Returns
    -------
    numpy.ndarray
        Apparent temperature, K, same shape as ``surface_k``; float32 for float32
        input, else float64. NaN outside the table (100-700 K). A 0-d input gives
        a numpy scalar.

    Raises
    ------
    ValueError
        As for :func:`surface_from_apparent`.

    Examples
    --------
    >>> t = apparent_from_surface(423.15, emissivity=0.054, reflected_k=294.15)
    >>> round(float(t) - 273.15, 1)
    32.0
    """
    data, out, params = _prepare(surface_k, emissivity, reflected_k, transmittance, atmosphere_k)
    table = band_table(band_um)

    def convert(
        surf: np.ndarray,
        emissivity: float | np.ndarray,
        reflected_k: float | np.ndarray,
        transmittance: float | np.ndarray,
        atmosphere_k: float | np.ndarray,
    ) -> np.ndarray:
        lm = np.asarray(table.radiance_of(surf))
        lm *= transmittance * emissivity
        lm += transmittance * (1.0 - emissivity) * table.radiance_of(reflected_k)
        if not (isinstance(transmittance, float) and transmittance == 1.0):
            lm += (1.0 - transmittance) * table.radiance_of(atmosphere_k)
        return table.temperature_of(lm)

    return _run_blocks(convert, data, out, params)


# ----------------------------------------------------------------------- atmosphere


def precipitable_water_mm(distance_m: float, *, air_c: float, humidity_pct: float) -> float:
    """Precipitable water along a horizontal air path.

    Absolute humidity (Magnus vapour pressure, :mod:`wetmap.conditions`) times the
    path length: 1 g m-3 over 1 m is 1 g m-2, i.e. 0.001 mm of liquid water.

    Parameters
    ----------
    distance_m
        Path length from camera to surface, m, >= 0.
    air_c
        Air temperature, °C.
    humidity_pct
        Relative humidity, %, in (0, 100].

    Returns
    -------
    float
        Precipitable water, mm.

    Examples
    --------
    >>> round(precipitable_water_mm(30.0, air_c=20.0, humidity_pct=50.0), 3)
    0.259
    """
    if not (distance_m >= 0.0 and math.isfinite(distance_m)):
        raise ValueError(f"distance_m = {distance_m!r}: expected a finite value >= 0")
    return absolute_humidity_g_m3(air_c, humidity_pct) * distance_m / 1000.0


def atmospheric_transmittance(distance_m: float, *, air_c: float, humidity_pct: float) -> float:
    """Approximate band transmittance of the air path (water-vapour absorption only).

    ``tau = exp(-K w)`` with ``w`` the precipitable water on the path in mm
    (:func:`precipitable_water_mm`) and ``K`` =
    :data:`WATER_VAPOUR_EXTINCTION_PER_MM` = 0.1 per mm, an approximate
    band-average coefficient for the 8-14 um window (from memory; no published
    value was confirmed). It ignores aerosols, CO2 and the band shape; a
    radiative-transfer code (LOWTRAN/MODTRAN) is the real answer. Prefer a
    measured or user-supplied transmittance; at roof and hull distances (a few to
    about 30 m) it is close to 1 anyway. Paths over 30 m are logged as a warning.

    Parameters
    ----------
    distance_m
        Path length from camera to surface, m, >= 0.
    air_c
        Air temperature, °C.
    humidity_pct
        Relative humidity, %, in (0, 100].

    Returns
    -------
    float
        Transmittance in (0, 1]; exactly 1.0 at distance 0.

    Examples
    --------
    >>> round(atmospheric_transmittance(30.0, air_c=20.0, humidity_pct=50.0), 3)
    0.974
    >>> atmospheric_transmittance(0.0, air_c=20.0, humidity_pct=50.0)
    1.0
    """
    w_mm = precipitable_water_mm(distance_m, air_c=air_c, humidity_pct=humidity_pct)
    if distance_m > 30.0:
        logger.warning(
            "air path of %.0f m: the approximate water-vapour transmittance (%.3f) is "
            "uncertain on long, humid paths; supply a measured transmittance if you can",
            distance_m,
            math.exp(-WATER_VAPOUR_EXTINCTION_PER_MM * w_mm),
        )
    return math.exp(-WATER_VAPOUR_EXTINCTION_PER_MM * w_mm)


@dataclass(frozen=True)
class Radiometry:
    """How apparent temperature was turned into surface temperature (the measurement's terms)."""

    band_um: tuple[float, float]
    emissivity: float
    reflected_c: float
    reflected_source: str
    transmittance: float
    transmittance_source: str
    atmosphere_c: float


def to_surface_k(apparent_k: np.ndarray, radiometry: Radiometry) -> np.ndarray:
    """Apparent -> surface temperature, K: the measurement equation inverted (NaN stays NaN).

    The same call for mosaics (on the plan grid, whole or in windows) and frames (per
    frame, before resampling).
    """
    return surface_from_apparent(
        apparent_k,
        emissivity=radiometry.emissivity,
        reflected_k=radiometry.reflected_c + 273.15,
        transmittance=radiometry.transmittance,
        atmosphere_k=radiometry.atmosphere_c + 273.15,
        band_um=radiometry.band_um,
    )


def section_emissivity_correction(surface_k: np.ndarray, apparent_k: np.ndarray, labels: np.ndarray | None,
                                  sections, radiometry: Radiometry) -> np.ndarray:
    """Surface temperature (K) of each section with its own ``emissivity`` (sections.geojson),
    from the apparent temperature (K); other pixels keep ``surface_k``. ``labels`` as
    :func:`wetmap.windows.section_labels` (label ``k`` = ``sections[k]``)."""
    if labels is None:
        return surface_k
    for k, sec in enumerate(sections):
        if sec.emissivity is None or sec.emissivity == radiometry.emissivity:
            continue
        sel = labels == k
        if sel.any():
            surface_k[sel] = to_surface_k(apparent_k[sel], replace(radiometry, emissivity=sec.emissivity))
    return surface_k
