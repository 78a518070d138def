"""Cool-down planner: when does wet insulation show best tonight?

A one-dimensional transient heat model of a roof assembly (membrane, insulation,
deck), dry and with water in the insulation, is driven through clear days of sun and
air temperature and a night of sky radiation and convection. The surface temperature
over wet and over dry insulation through the night, their difference and the best
survey window follow.

The model
---------
* **Materials.** Handbook properties (ASHRAE Handbook Fundamentals 2013 ch. 26 and
  EN 12524, as tabulated in the ``ht`` package); see :data:`MATERIALS`. Water in the
  insulation, ``psi`` its volume fraction: the volumetric heat capacity adds,
  ``rho c_wet = rho c_dry + psi rho_w c_w``, and the conductivity rises by the ISO
  10456 moisture factor, ``k_wet = k_dry exp(f psi)`` (the coefficients ``f`` are
  from memory: EPS 4, XPS 2.5, PUR 6; see each material's ``source``).
* **Solver.** Cell-centred finite volumes, fully implicit (backward Euler) in time,
  the tridiagonal system solved by :func:`scipy.linalg.solve_banded`. Cells never
  straddle a layer boundary; the conductance between two cells is the series sum of
  their half-cells. The surface is not a cell: its temperature follows from the
  surface energy balance and the half-cell below it, so the heat entering the
  assembly is exactly the heat the top cell receives (energy is conserved to
  round-off). Long-wave exchange is linearised about the previous step's surface
  temperature.
* **Top boundary.** Absorbed sun ``a G(t)``, long-wave exchange with the sky
  ``eps sigma (T_sky^4 - T_s^4)`` and convection ``h (T_air - T_s)`` with
  ``h = 4 + 4 v`` W m-2 K-1 (wind ``v`` in m/s; the ISO 6946 annex form, from memory).
  Sky temperature ``eps_sky^0.25 T_air`` with the Clark & Allen (1978) broadband sky
  emissivity for the night's dew point and cloud cover (:mod:`wetmap.conditions`).
* **Bottom boundary.** The room below at ``interior_c`` through an inside surface
  coefficient of 10 W m-2 K-1 (ISO 6946 inside surface resistance 0.10 m2 K/W for
  upward heat flow, from memory).
* **Day.** Clear-day sun ``G_peak sin(pi (t - sunrise) / (sunset - sunrise))``; air
  temperature a cosine of period 24 h peaking at 15:00 with the day's range, scaled so
  that it equals the recorded air temperature at the survey time. Three identical
  days spin the model up to its periodic state before the night that is reported.

Limits: no latent heat (dew, frost, freezing of the water in the board), no vapour
movement, a flat, uniform roof, one clear day. The result is a planning estimate of
contrast, not a measurement; it does not replace the trade's rules for the survey
(ASTM C1153) or cores.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants
from scipy.linalg import solve_banded

from .conditions import SKY_CLOUD_TENTHS, condensation_point_c, frost_point_c, sky_emissivity_clark_allen
from .errors import ProcessingError, SurveyError
from .survey import COOLDOWN_DECKS, COOLDOWN_INSULATIONS, Survey
from .conditions import dew_point_c
from .outputs import check_out_dir, write_folder
from .sun import with_sun_times
from .survey import load_survey
from .vectors import read_sections

__all__ = [
    "STEFAN_BOLTZMANN",
    "WATER_RHO_C_J_M3K",
    "Material",
    "MATERIALS",
    "INSULATION_DEFAULTS",
    "DECK_DEFAULT_M",
    "Layer",
    "RoofAssembly",
    "roof_assembly",
    "Column",
    "discretise",
    "Simulation",
    "simulate",
    "convection_w_m2k",
    "NightWeather",
    "air_temperature_c",
    "solar_w_m2",
    "sky_temperature_c",
    "WindowPlan",
    "plan_window",
    "insulation_from_sections",
    "plan_survey_window",
    "write_window",
    "run_window",
    "WINDOW_FILES",
]

#: Stefan-Boltzmann constant, W m-2 K-4 (CODATA, scipy.constants).
STEFAN_BOLTZMANN: float = constants.Stefan_Boltzmann
_K0 = 273.15
#: Volumetric heat capacity of liquid water, J m-3 K-1 (1000 kg m-3 x 4190 J kg-1 K-1,
#: EN 12524 as tabulated in ``ht.insulation``).
WATER_RHO_C_J_M3K: float = 1000.0 * 4190.0
#: Inside surface coefficient for upward heat flow, W m-2 K-1 (ISO 6946 R_si = 0.10 m2 K/W, from memory).
INSIDE_H_W_M2K: float = 10.0
#: Hour of the day's highest air temperature in the clear-day model (common practice in
#: building simulation: mid-afternoon; from memory).
AIR_PEAK_HOUR: float = 15.0
#: Wind speed assumed when none was recorded, m/s.
DEFAULT_WIND_M_S: float = 2.0

#: Files written by :func:`write_window` into the results folder.
WINDOW_FILES = ("window.json", "window.png")


@dataclass(frozen=True)
class Material:
    """A dry building material.

    Attributes
    ----------
    name
        Description.
    k_w_mk
        Thermal conductivity, W m-1 K-1.
    rho_kg_m3
        Density, kg m-3.
    c_j_kgk
        Specific heat capacity, J kg-1 K-1.
    moisture_factor
        ISO 10456 moisture conversion coefficient ``f`` for volume fraction (``f_psi``):
        ``k_wet = k exp(f psi)``. Dimensionless.
    source
        Where the values come from.
    """

    name: str
    k_w_mk: float
    rho_kg_m3: float
    c_j_kgk: float
    moisture_factor: float = 0.0
    source: str = ""

    @property
    def rho_c_j_m3k(self) -> float:
        """Volumetric heat capacity, J m-3 K-1."""
        return self.rho_kg_m3 * self.c_j_kgk


_ASHRAE = "ASHRAE Handbook Fundamentals 2013 ch. 26 (as tabulated in ht.insulation)"
_EN12524 = "EN 12524 (as tabulated in ht.insulation)"

#: Handbook properties of the presets. Keys of the insulation presets are the choices
#: of ``[cooldown] insulation``; ``"bitumen"`` is the membrane; the deck keys are the
#: choices of ``[cooldown] deck``.
MATERIALS: dict[str, Material] = {
    "perlite": Material(
        "perlite board", 0.052, 160.0, 1340.0, 4.0,
        f"{_ASHRAE}; the table gives no heat capacity for the board: that of expanded perlite aggregate "
        "(ASHRAE) is used; f = 4 from memory (as for mineral boards)"),
    "polyiso": Material(
        "polyisocyanurate board, aged, with facers", 0.019, 65.0, 1470.0, 6.0,
        f"{_ASHRAE}; f = 6 (PUR) from memory"),
    "eps": Material("expanded polystyrene, moulded beads", 0.0355, 20.0, 1470.0, 4.0,
                    f"{_ASHRAE}; f = 4 from memory"),
    "xps": Material("extruded polystyrene", 0.026, 32.5, 1470.0, 2.5, f"{_ASHRAE}; f = 2.5 from memory"),
    "wood_fibre": Material(
        "wood fibreboard, 250 kg/m3", 0.07, 250.0, 1700.0, 6.0,
        f"{_EN12524}; f = 6 from memory (a mass-based 1.5 for wood-based boards times rho_w / rho)"),
    "bitumen": Material("bitumen, felt or sheet", 0.23, 1100.0, 1000.0, 0.0, _EN12524),
    "steel": Material("steel", 50.0, 7800.0, 450.0, 0.0, _EN12524),
    "concrete": Material("concrete, medium density 2000 kg/m3", 1.35, 2000.0, 1000.0, 0.0, _EN12524),
    "timber": Material("plywood, 500 kg/m3", 0.13, 500.0, 1600.0, 0.0, _EN12524),
    "water": Material("water at 10 °C", 0.6, 1000.0, 4190.0, 0.0, _EN12524),
    "ice": Material("ice at 0 °C", 2.2, 900.0, 2000.0, 0.0, _EN12524),
}

#: Default thickness (m) and water content of wet board (% by volume) per insulation
#: preset. Assumptions from memory, to be overridden in ``[cooldown]``: absorbent boards
#: (perlite, wood fibre) soak up much water; closed-cell foams hold little.
INSULATION_DEFAULTS: dict[str, tuple[float, float]] = {
    "perlite": (0.05, 15.0),
    "wood_fibre": (0.05, 15.0),
    "polyiso": (0.08, 3.0),
    "eps": (0.10, 3.0),
    "xps": (0.08, 1.0),
}

#: Default deck thickness, m: a profiled steel deck as an equivalent flat sheet, a cast
#: concrete slab, a plywood deck (assumptions).
DECK_DEFAULT_M: dict[str, float] = {"steel": 0.001, "concrete": 0.15, "timber": 0.018}

#: Words that name each insulation preset in a section's ``insulation`` or ``assembly``.
_INSULATION_WORDS: dict[str, tuple[str, ...]] = {
    "xps": (r"xps", r"extruded polystyrene"),
    "eps": (r"eps", r"expanded polystyrene", r"polystyrene"),
    "polyiso": (r"polyiso\w*", r"pir", r"pur", r"polyurethane"),
    "perlite": (r"perlite",),
    "wood_fibre": (r"wood ?fib(re|er)\w*", r"fib(re|er) ?board"),
}

assert set(INSULATION_DEFAULTS) == set(COOLDOWN_INSULATIONS) == set(_INSULATION_WORDS)
assert set(DECK_DEFAULT_M) == set(COOLDOWN_DECKS)


# --------------------------------------------------------------------------------------
# Assemblies
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Layer:
    """One layer of a roof assembly, possibly holding water.

    Attributes
    ----------
    material
        The dry material.
    thickness_m
        Thickness, m.
    water_vol_fraction
        Volume fraction of liquid water ``psi``, in [0, 1).
    """

    material: Material
    thickness_m: float
    water_vol_fraction: float = 0.0

    def __post_init__(self) -> None:
        if not (self.thickness_m > 0 and math.isfinite(self.thickness_m)):
            raise ValueError(f"Layer thickness_m = {self.thickness_m!r}: expected a positive length")
        if not (0.0 <= self.water_vol_fraction < 1.0):
            raise ValueError(f"Layer water_vol_fraction = {self.water_vol_fraction!r}: expected 0 <= value < 1")

    @property
    def k_w_mk(self) -> float:
        """Conductivity with the water, ``k exp(f psi)`` (ISO 10456), W m-1 K-1.

        >>> round(Layer(MATERIALS["eps"], 0.1, 0.1).k_w_mk, 5)  # 0.0355 exp(4 x 0.1)
        0.05296
        """
        return self.material.k_w_mk * math.exp(self.material.moisture_factor * self.water_vol_fraction)

    @property
    def rho_c_j_m3k(self) -> float:
        """Volumetric heat capacity with the water, ``rho c + psi rho_w c_w``, J m-3 K-1.

        >>> Layer(MATERIALS["perlite"], 0.05, 0.15).rho_c_j_m3k  # 160 x 1340 + 0.15 x 4.19e6
        842900.0
        """
        return self.material.rho_c_j_m3k + self.water_vol_fraction * WATER_RHO_C_J_M3K


@dataclass(frozen=True)
class RoofAssembly:
    """A roof assembly, top (membrane) first.

    Attributes
    ----------
    layers
        The layers from the weather side down.
    insulation_index
        Index in ``layers`` of the insulation that takes up water.
    absorptance
        Solar absorptance of the surface, dimensionless.
    emissivity
        Long-wave emissivity of the surface, dimensionless.
    """

    layers: tuple[Layer, ...]
    insulation_index: int
    absorptance: float = 0.9
    emissivity: float = 0.9

    def with_water(self, water_vol_fraction: float) -> RoofAssembly:
        """The same assembly with ``water_vol_fraction`` of water in the insulation."""
        layers = list(self.layers)
        layers[self.insulation_index] = replace(layers[self.insulation_index], water_vol_fraction=water_vol_fraction)
        return replace(self, layers=tuple(layers))

    @property
    def description(self) -> str:
        """The layers in words, top first."""
        return " / ".join(f"{1000 * l.thickness_m:g} mm {l.material.name}" for l in self.layers)

    @property
    def u_value_w_m2k(self) -> float:
        """Thermal transmittance with ISO 6946 surface resistances 0.04 and 0.10 m2 K/W (from memory)."""
        return 1.0 / (0.04 + 0.10 + sum(l.thickness_m / l.k_w_mk for l in self.layers))


def roof_assembly(
    insulation: str = "perlite",
    *,
    insulation_m: float | None = None,
    membrane_m: float = 0.01,
    deck: str = "steel",
    deck_m: float | None = None,
    absorptance: float = 0.9,
    emissivity: float = 0.9,
    k_w_mk: float | None = None,
    rho_kg_m3: float | None = None,
    c_j_kgk: float | None = None,
    moisture_factor: float | None = None,
) -> RoofAssembly:
    """A bitumen membrane over one insulation preset on a deck (dry).

    Parameters
    ----------
    insulation
        One of :data:`wetmap.survey.COOLDOWN_INSULATIONS`.
    insulation_m, deck_m
        Thicknesses, m; ``None``: :data:`INSULATION_DEFAULTS` / :data:`DECK_DEFAULT_M`.
    membrane_m
        Membrane thickness, m.
    deck
        One of :data:`wetmap.survey.COOLDOWN_DECKS`.
    absorptance, emissivity
        Solar absorptance and long-wave emissivity of the surface.
    k_w_mk, rho_kg_m3, c_j_kgk, moisture_factor
        Overrides of the insulation's handbook values.

    Returns
    -------
    RoofAssembly

    Examples
    --------
    >>> a = roof_assembly("perlite")
    >>> a.description
    '10 mm bitumen, felt or sheet / 50 mm perlite board / 1 mm steel'
    >>> round(a.u_value_w_m2k, 3)
    0.873
    """
    if insulation not in INSULATION_DEFAULTS:
        raise ValueError(f"insulation = {insulation!r}: expected one of {', '.join(COOLDOWN_INSULATIONS)}")
    if deck not in DECK_DEFAULT_M:
        raise ValueError(f"deck = {deck!r}: expected one of {', '.join(COOLDOWN_DECKS)}")
    base = MATERIALS[insulation]
    overrides = {k: v for k, v in (("k_w_mk", k_w_mk), ("rho_kg_m3", rho_kg_m3), ("c_j_kgk", c_j_kgk),
                                   ("moisture_factor", moisture_factor)) if v is not None}
    if overrides:
        base = replace(base, source=base.source + "; overridden in [cooldown]: " + ", ".join(overrides), **overrides)
    layers = (
        Layer(MATERIALS["bitumen"], membrane_m),
        Layer(base, insulation_m if insulation_m is not None else INSULATION_DEFAULTS[insulation][0]),
        Layer(MATERIALS[deck], deck_m if deck_m is not None else DECK_DEFAULT_M[deck]),
    )
    return RoofAssembly(layers=layers, insulation_index=1, absorptance=absorptance, emissivity=emissivity)


# --------------------------------------------------------------------------------------
# The solver
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Column:
    """An assembly cut into finite-volume cells, top first (all arrays ``(n,)``).

    Attributes
    ----------
    dz_m
        Cell thickness, m.
    k_w_mk
        Cell conductivity, W m-1 K-1.
    rho_c_j_m3k
        Cell volumetric heat capacity, J m-3 K-1.
    """

    dz_m: np.ndarray
    k_w_mk: np.ndarray
    rho_c_j_m3k: np.ndarray

    @property
    def depth_m(self) -> np.ndarray:
        """Depth of each cell centre below the surface, m, ``(n,)``."""
        return np.cumsum(self.dz_m) - 0.5 * self.dz_m

    @property
    def heat_capacity_j_m2k(self) -> np.ndarray:
        """Heat capacity of each cell per unit area, J m-2 K-1, ``(n,)``."""
        return self.rho_c_j_m3k * self.dz_m

    @property
    def thickness_m(self) -> float:
        return float(self.dz_m.sum())


def discretise(layers: Sequence[Layer], *, max_cell_m: float = 0.002) -> Column:
    """Cut layers into equal cells of at most ``max_cell_m`` each (at least one per layer).

    Examples
    --------
    >>> col = discretise(roof_assembly("perlite").layers, max_cell_m=0.005)
    >>> len(col.dz_m), round(col.thickness_m, 4)
    (13, 0.061)
    """
    if not max_cell_m > 0:
        raise ValueError(f"max_cell_m = {max_cell_m!r}: expected a positive length")
    dz, k, rc = [], [], []
    for layer in layers:
        n = max(1, math.ceil(layer.thickness_m / max_cell_m - 1e-9))
        dz += [layer.thickness_m / n] * n
        k += [layer.k_w_mk] * n
        rc += [layer.rho_c_j_m3k] * n
    return Column(np.asarray(dz), np.asarray(k), np.asarray(rc))


@dataclass(frozen=True)
class Simulation:
    """A solved transient: temperatures at the end of each time step.

    Attributes
    ----------
    times_s
        End of each step, s, ``(m,)``.
    depth_m
        Cell-centre depths, m, ``(n,)``.
    cells_c
        Cell temperatures, °C, ``(m, n)``.
    surface_c
        Surface temperature, °C, ``(m,)``.
    top_flux_w_m2
        Heat entering the assembly through the surface during each step, W m-2, ``(m,)``.
    bottom_flux_w_m2
        Heat leaving through the bottom during each step, W m-2, ``(m,)``.
    step_s
        Length of each step, s, ``(m,)``.
    initial_c
        Cell temperatures at the start, °C, ``(n,)``.
    heat_capacity_j_m2k
        Heat capacity of each cell per unit area, J m-2 K-1, ``(n,)``.
    """

    times_s: np.ndarray
    depth_m: np.ndarray
    cells_c: np.ndarray
    surface_c: np.ndarray
    top_flux_w_m2: np.ndarray
    bottom_flux_w_m2: np.ndarray
    step_s: np.ndarray
    initial_c: np.ndarray
    heat_capacity_j_m2k: np.ndarray

    def temperature_at(self, depth_m: float) -> np.ndarray:
        """Temperature at ``depth_m`` below the surface through time, °C, ``(m,)``.

        Linear between the surface and the cell centres; below the last centre the last
        cell's value (a zero-gradient bottom is exact for an adiabatic bottom).
        """
        depths = np.concatenate([[0.0], self.depth_m])
        values = np.concatenate([self.surface_c[:, None], self.cells_c], axis=1)
        if depth_m >= depths[-1]:
            return values[:, -1].copy()
        j = int(np.searchsorted(depths, depth_m, side="right")) - 1
        w = (depth_m - depths[j]) / (depths[j + 1] - depths[j])
        return (1.0 - w) * values[:, j] + w * values[:, j + 1]


def _series(value: ArrayLike | None, m: int, name: str, default: float = 0.0) -> np.ndarray:
    if value is None:
        return np.full(m, default)
    arr = np.asarray(value, dtype=np.float64)
    if arr.ndim == 0:
        return np.full(m, float(arr))
    if arr.shape != (m,):
        raise ValueError(f"{name}: shape {arr.shape}: expected a scalar or one value per step ({m},)")
    return arr


def simulate(
    column: Column,
    initial_c: ArrayLike,
    *,
    times_s: ArrayLike,
    start_s: float = 0.0,
    air_c: ArrayLike,
    h_out_w_m2k: ArrayLike,
    sky_c: ArrayLike | None = None,
    emissivity: float = 0.0,
    solar_w_m2: ArrayLike | None = None,
    absorptance: float = 0.0,
    inside_c: ArrayLike | None = None,
    h_in_w_m2k: float = 0.0,
) -> Simulation:
    """Solve the 1-D transient conduction through ``column`` (implicit finite volumes).

    Boundary values are those at the end of each step (backward Euler). At the surface:
    ``q_in = absorptance G + emissivity sigma (T_sky^4 - T_s^4) + h_out (T_air - T_s)``,
    the long-wave term linearised about the previous surface temperature. At the bottom:
    ``q_out = h_in (T_bottom - T_inside)`` through the bottom half-cell (``h_in = 0``:
    adiabatic).

    Parameters
    ----------
    column
        The cells (:func:`discretise`).
    initial_c
        Initial cell temperatures, °C, scalar or ``(n,)``.
    times_s
        End time of each step, s, ``(m,)``, increasing, after ``start_s``.
    start_s
        Start time, s.
    air_c, h_out_w_m2k
        Outside air temperature (°C) and convective coefficient (W m-2 K-1), scalar or ``(m,)``.
    sky_c, emissivity
        Effective sky temperature (°C, scalar or ``(m,)``) and surface long-wave emissivity;
        ``emissivity = 0`` switches radiation off.
    solar_w_m2, absorptance
        Solar irradiance on the surface (W m-2) and its absorptance.
    inside_c, h_in_w_m2k
        Temperature below the assembly (°C) and the inside surface coefficient (W m-2 K-1).

    Returns
    -------
    Simulation
    """
    times = np.asarray(times_s, dtype=np.float64)
    m, n = times.size, column.dz_m.size
    if times.ndim != 1 or m == 0:
        raise ValueError("times_s: expected a 1-D array of step end times")
    step = np.diff(np.concatenate([[start_s], times]))
    if not np.all(step > 0):
        raise ValueError("times_s: expected strictly increasing times after start_s")
    air = _series(air_c, m, "air_c")
    h_out = _series(h_out_w_m2k, m, "h_out_w_m2k")
    sky_k = _series(sky_c, m, "sky_c", default=-_K0) + _K0
    solar = _series(solar_w_m2, m, "solar_w_m2")
    inside = _series(inside_c, m, "inside_c")
    temps = np.broadcast_to(np.asarray(initial_c, dtype=np.float64), (n,)).copy()
    initial = temps.copy()

    dz, k = column.dz_m, column.k_w_mk
    cap = column.heat_capacity_j_m2k
    g_int = 1.0 / (0.5 * dz[:-1] / k[:-1] + 0.5 * dz[1:] / k[1:])  # (n-1,) W m-2 K-1
    k_top = 2.0 * k[0] / dz[0]
    g_bot = 0.0 if h_in_w_m2k <= 0 else 1.0 / (1.0 / h_in_w_m2k + 0.5 * dz[-1] / k[-1])
    ab = np.zeros((3, n))
    ab[0, 1:] = -g_int
    ab[2, :-1] = -g_int
    diag_static = np.zeros(n)
    diag_static[:-1] += g_int
    diag_static[1:] += g_int
    diag_static[-1] += g_bot

    cells = np.empty((m, n))
    surface = np.empty(m)
    q_top = np.empty(m)
    q_bot = np.empty(m)
    eps_sigma = emissivity * STEFAN_BOLTZMANN
    ts_old = float(temps[0])
    for i in range(m):
        ts_old_k = ts_old + _K0
        h_rad = 4.0 * eps_sigma * ts_old_k**3
        b = h_out[i] + h_rad
        a = (absorptance * solar[i] + eps_sigma * (sky_k[i] ** 4 - ts_old_k**4) + h_rad * ts_old
             + h_out[i] * air[i])
        g_top = k_top * b / (k_top + b)
        src_top = k_top * a / (k_top + b)
        c_dt = cap / step[i]
        ab[1] = diag_static + c_dt
        ab[1, 0] += g_top
        rhs = c_dt * temps
        rhs[0] += src_top
        rhs[-1] += g_bot * inside[i]
        temps = solve_banded((1, 1), ab, rhs, check_finite=False)
        ts_old = (a + k_top * temps[0]) / (b + k_top)
        cells[i] = temps
        surface[i] = ts_old
        q_top[i] = src_top - g_top * temps[0]
        q_bot[i] = g_bot * (temps[-1] - inside[i])
    return Simulation(times_s=times, depth_m=column.depth_m, cells_c=cells, surface_c=surface,
                      top_flux_w_m2=q_top, bottom_flux_w_m2=q_bot, step_s=step, initial_c=initial,
                      heat_capacity_j_m2k=cap)


def convection_w_m2k(wind_m_s: float) -> float:
    """Outside convective coefficient ``4 + 4 v``, W m-2 K-1 (ISO 6946 annex form, from memory).

    >>> convection_w_m2k(2.0)
    12.0
    """
    if not wind_m_s >= 0:
        raise ValueError(f"wind_m_s = {wind_m_s!r}: expected >= 0")
    return 4.0 + 4.0 * wind_m_s


# --------------------------------------------------------------------------------------
# Weather of a clear day and night
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class NightWeather:
    """A clear day and the night after it (clock hours are local, 0-24).

    Attributes
    ----------
    sunset_h, sunrise_h
        Local clock hours of sunset and sunrise.
    air_c, air_at_h
        Air temperature (°C) recorded at clock hour ``air_at_h``.
    air_range_c
        Day's air temperature range (maximum minus minimum), K.
    humidity_pct
        Relative humidity at ``air_at_h``, %; fixes the dew point for the night.
    wind_m_s
        Wind speed, m/s.
    cloud_tenths
        Opaque cloud cover, tenths (0 clear .. 10 overcast).
    sun_peak_w_m2
        Peak solar irradiance on the roof at solar noon, W m-2.
    interior_c
        Temperature of the room below, °C.
    """

    sunset_h: float
    sunrise_h: float
    air_c: float
    air_at_h: float
    air_range_c: float = 8.0
    humidity_pct: float = 70.0
    wind_m_s: float = DEFAULT_WIND_M_S
    cloud_tenths: float = 0.0
    sun_peak_w_m2: float = 700.0
    interior_c: float = 20.0

    def __post_init__(self) -> None:
        if not (0.0 <= self.sunrise_h < self.sunset_h <= 24.0):
            raise ValueError(f"sunrise_h = {self.sunrise_h!r}, sunset_h = {self.sunset_h!r}: "
                             "expected 0 <= sunrise < sunset <= 24 (local clock hours)")

    @property
    def night_h(self) -> float:
        """Hours from sunset to the next sunrise."""
        return 24.0 - self.sunset_h + self.sunrise_h

    @property
    def dew_point_c(self) -> float:
        """Dew point of the night's air (saturation over water), °C."""
        return dew_point_c(self.air_c, self.humidity_pct)


def air_temperature_c(clock_h: ArrayLike, weather: NightWeather) -> np.ndarray:
    """Air temperature of the clear-day model at local clock hours (any real hours), °C.

    A cosine of period 24 h peaking at 15:00 with amplitude half the day's range,
    shifted so that it equals ``weather.air_c`` at ``weather.air_at_h``.

    >>> w = NightWeather(sunset_h=17.0, sunrise_h=7.0, air_c=10.0, air_at_h=15.0, air_range_c=8.0)
    >>> air_temperature_c([15.0, 3.0, 27.0], w).tolist()
    [10.0, 2.0, 2.0]
    """
    half = 0.5 * weather.air_range_c

    def wave(h):
        return half * np.cos(2.0 * np.pi * (np.asarray(h, dtype=np.float64) - AIR_PEAK_HOUR) / 24.0)

    return weather.air_c - wave(weather.air_at_h) + wave(clock_h)


def solar_w_m2(clock_h: ArrayLike, weather: NightWeather) -> np.ndarray:
    """Clear-day solar irradiance on the roof, W m-2: a half sine from sunrise to sunset.

    >>> w = NightWeather(sunset_h=18.0, sunrise_h=6.0, air_c=10.0, air_at_h=20.0, sun_peak_w_m2=800.0)
    >>> solar_w_m2([3.0, 12.0, 36.0], w).round(6).tolist()
    [0.0, 800.0, 800.0]
    """
    h = np.mod(np.asarray(clock_h, dtype=np.float64), 24.0)
    day = (h > weather.sunrise_h) & (h < weather.sunset_h)
    phase = np.pi * (h - weather.sunrise_h) / (weather.sunset_h - weather.sunrise_h)
    return np.where(day, weather.sun_peak_w_m2 * np.sin(np.clip(phase, 0.0, np.pi)), 0.0)


def sky_temperature_c(air_c: ArrayLike, weather: NightWeather) -> np.ndarray:
    """Broadband sky temperature ``eps^0.25 T_air`` (Clark & Allen 1978, emissivity capped at 1), °C."""
    eps = min(1.0, sky_emissivity_clark_allen(weather.dew_point_c + _K0, cloud_tenths=weather.cloud_tenths))
    return eps**0.25 * (np.asarray(air_c, dtype=np.float64) + _K0) - _K0


# --------------------------------------------------------------------------------------
# The planner
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class WindowPlan:
    """The predicted night: surfaces over wet and dry insulation and the best window.

    Arrays are ``(t,)`` over ``hours_after_sunset``.

    Attributes
    ----------
    hours_after_sunset
        Output times, h after sunset, up to the next sunrise.
    surface_dry_c, surface_wet_c
        Surface temperature over dry and over wet insulation, °C.
    delta_c
        ``surface_wet_c - surface_dry_c``, K.
    air_c, sky_c
        Air and broadband sky temperature of the model, °C.
    best_start_h, best_end_h
        The best survey window, h after sunset: where the delta is at least
        ``window_fraction`` of its peak, around the peak, ending when the dry surface
        reaches the dew or frost point; ``None`` when there is none.
    peak_delta_c, peak_h
        Largest delta through the night (K) and when (h after sunset).
    condensation_c, condensation_kind
        The night's dew point (or frost point below 0 °C), °C, and which one.
    dew_from_h
        When the dry surface first reaches it, h after sunset; ``None``: not that night.
    assembly, water_vol_pct, insulation
        What was modelled.
    window_fraction
        Share of the peak delta that defines the window.
    notes
        Assumptions and cautions, one line each.
    """

    hours_after_sunset: np.ndarray
    surface_dry_c: np.ndarray
    surface_wet_c: np.ndarray
    delta_c: np.ndarray
    air_c: np.ndarray
    sky_c: np.ndarray
    best_start_h: float | None
    best_end_h: float | None
    peak_delta_c: float
    peak_h: float
    condensation_c: float
    condensation_kind: str
    dew_from_h: float | None
    assembly: str
    insulation: str
    water_vol_pct: float
    window_fraction: float
    notes: tuple[str, ...] = ()
    weather: NightWeather | None = None

    def to_json(self) -> dict[str, Any]:
        """The ``window.json`` content (lists of floats; ``null`` for no window)."""
        def r(values, nd=3):
            return [round(float(v), nd) for v in values]

        def opt(v):
            return None if v is None else round(float(v), 3)

        return {
            "hours_after_sunset": r(self.hours_after_sunset, 3),
            "delta_c": r(self.delta_c),
            "best_start_h": opt(self.best_start_h),
            "best_end_h": opt(self.best_end_h),
            "peak_delta_c": round(float(self.peak_delta_c), 3),
            "peak_h": round(float(self.peak_h), 3),
            "surface_dry_c": r(self.surface_dry_c),
            "surface_wet_c": r(self.surface_wet_c),
            "air_c": r(self.air_c),
            "sky_c": r(self.sky_c),
            "condensation_c": round(float(self.condensation_c), 3),
            "condensation_kind": self.condensation_kind,
            "dew_from_h": opt(self.dew_from_h),
            "insulation": self.insulation,
            "assembly": self.assembly,
            "water_vol_pct": self.water_vol_pct,
            "window_fraction": self.window_fraction,
            "weather": None if self.weather is None else {k: v for k, v in vars(self.weather).items()},
            "notes": list(self.notes),
            "caution": ("A model estimate of thermal contrast for planning, not a measurement: it does not show "
                        "where water is. Survey conditions follow ASTM C1153 and the trade's practice; every "
                        "anomaly needs cores."),
        }


def _run_day(assembly: RoofAssembly, weather: NightWeather, *, step_s: float, spin_up_days: int,
             max_cell_m: float) -> tuple[np.ndarray, Simulation, np.ndarray, np.ndarray]:
    """Simulate ``spin_up_days`` days and the following night; clock hours of each step."""
    end_h = 24.0 * (spin_up_days + 1) + weather.sunrise_h
    times = np.arange(step_s, end_h * 3600.0 + 0.5 * step_s, step_s)
    hours = times / 3600.0
    air = air_temperature_c(hours, weather)
    sky = sky_temperature_c(air, weather)
    column = discretise(assembly.layers, max_cell_m=max_cell_m)
    mean_air = float(air_temperature_c(np.arange(0.0, 24.0, 0.5), weather).mean())
    depth_frac = column.depth_m / column.thickness_m
    initial = mean_air + depth_frac * (weather.interior_c - mean_air)
    sim = simulate(column, initial, times_s=times, air_c=air, h_out_w_m2k=convection_w_m2k(weather.wind_m_s),
                   sky_c=sky, emissivity=assembly.emissivity, solar_w_m2=solar_w_m2(hours, weather),
                   absorptance=assembly.absorptance, inside_c=weather.interior_c, h_in_w_m2k=INSIDE_H_W_M2K)
    return hours, sim, air, sky


def plan_window(
    assembly: RoofAssembly,
    weather: NightWeather,
    *,
    water_vol_fraction: float,
    insulation: str = "",
    window_fraction: float = 0.5,
    step_s: float = 60.0,
    spin_up_days: int = 3,
    output_step_h: float = 0.25,
    max_cell_m: float = 0.002,
    notes: Sequence[str] = (),
) -> WindowPlan:
    """Predict the night's surface temperatures over dry and wet insulation, and the window.

    Parameters
    ----------
    assembly
        The dry assembly (:func:`roof_assembly`).
    weather
        The day and night (:class:`NightWeather`).
    water_vol_fraction
        Water in the wet insulation, volume fraction in (0, 1).
    insulation
        Preset name, for the record.
    window_fraction
        The window is where the delta is at least this share of its peak.
    step_s, spin_up_days, output_step_h, max_cell_m
        Time step (s), identical days run before the reported night, output spacing (h),
        largest cell (m).
    notes
        Notes to carry into the plan (assumptions made by the caller).

    Returns
    -------
    WindowPlan
    """
    if not (0.0 < water_vol_fraction < 1.0):
        raise ValueError(f"water_vol_fraction = {water_vol_fraction!r}: expected 0 < value < 1")
    if not (0.0 < window_fraction < 1.0):
        raise ValueError(f"window_fraction = {window_fraction!r}: expected 0 < value < 1")
    hours, dry, air, sky = _run_day(assembly, weather, step_s=step_s, spin_up_days=spin_up_days,
                                    max_cell_m=max_cell_m)
    _, wet, _, _ = _run_day(assembly.with_water(water_vol_fraction), weather, step_s=step_s,
                            spin_up_days=spin_up_days, max_cell_m=max_cell_m)
    sunset_abs = 24.0 * spin_up_days + weather.sunset_h
    out_h = np.arange(0.0, weather.night_h + 1e-9, output_step_h)
    at = sunset_abs + out_h
    dry_c = np.interp(at, hours, dry.surface_c)
    wet_c = np.interp(at, hours, wet.surface_c)
    air_c = np.interp(at, hours, air)
    sky_c = np.interp(at, hours, sky)
    delta = wet_c - dry_c

    frost = frost_point_c(weather.air_c, weather.humidity_pct)
    condensation = condensation_point_c(weather.air_c, weather.humidity_pct)
    kind = "frost point" if frost < 0.0 else "dew point"
    below = np.flatnonzero(dry_c <= condensation)
    dew_from = float(out_h[below[0]]) if below.size else None

    notes = list(notes)
    ipeak = int(np.argmax(delta))
    peak = float(delta[ipeak])
    start = end = None
    if peak > 0.0:
        ok = delta >= window_fraction * peak
        lo = hi = ipeak
        while lo > 0 and ok[lo - 1]:
            lo -= 1
        while hi < len(ok) - 1 and ok[hi + 1]:
            hi += 1
        start, end = float(out_h[lo]), float(out_h[hi])
        if dew_from is not None and dew_from < end:
            if dew_from <= start:
                notes.append(f"the dry surface reaches the {kind} ({condensation:.1f} °C) {dew_from:.2f} h after "
                             "sunset, before the contrast builds up: no dew-free window this night")
                start = end = None
            else:
                notes.append(f"the window is cut short when the dry surface reaches the {kind} "
                             f"({condensation:.1f} °C) {dew_from:.2f} h after sunset")
                end = dew_from
    else:
        notes.append("wet insulation is not predicted warmer than dry at any time of this night: no window")
    return WindowPlan(
        hours_after_sunset=out_h, surface_dry_c=dry_c, surface_wet_c=wet_c, delta_c=delta, air_c=air_c,
        sky_c=sky_c, best_start_h=start, best_end_h=end, peak_delta_c=peak, peak_h=float(out_h[ipeak]),
        condensation_c=condensation, condensation_kind=kind, dew_from_h=dew_from,
        assembly=assembly.description, insulation=insulation, water_vol_pct=100.0 * water_vol_fraction,
        window_fraction=window_fraction, notes=tuple(notes), weather=weather,
    )


# --------------------------------------------------------------------------------------
# From a survey folder
# --------------------------------------------------------------------------------------


def insulation_from_sections(sections: Sequence[Any]) -> str | None:
    """The insulation preset named by the largest section whose text names one.

    ``sections`` have ``geometry``, ``insulation`` and ``assembly`` (e.g.
    :class:`wetmap.vectors.Section`); the ``insulation`` text is searched first.

    >>> from types import SimpleNamespace as S
    >>> from shapely.geometry import box
    >>> insulation_from_sections([S(geometry=box(0, 0, 1, 1), insulation="PIR board", assembly=None),
    ...                           S(geometry=box(0, 0, 9, 9), insulation=None, assembly="BUR on perlite")])
    'perlite'
    """
    best: tuple[float, str] | None = None
    for s in sections:
        for text in (getattr(s, "insulation", None), getattr(s, "assembly", None)):
            if not text:
                continue
            found = next((name for name, words in _INSULATION_WORDS.items()
                          if any(re.search(rf"(?<![a-z0-9]){w}(?![a-z0-9])", text, re.IGNORECASE) for w in words)),
                         None)
            if found is not None:
                area = float(getattr(s, "geometry").area)
                if best is None or area > best[0]:
                    best = (area, found)
                break
    return None if best is None else best[1]


def _clock_h(t) -> float:
    return t.hour + t.minute / 60.0


def plan_survey_window(survey: Survey, *, sections: Sequence[Any] = (), step_s: float = 60.0) -> WindowPlan:
    """The cool-down plan for a survey: ``[conditions]``, ``[camera]``, ``[cooldown]`` and sections.

    Parameters
    ----------
    survey
        A loaded survey (a roof).
    sections
        The plan's sections (used when ``[cooldown] insulation`` is not set).
    step_s
        Time step, s.

    Raises
    ------
    SurveyError
        No sunset time, or no insulation to model.
    ProcessingError
        A hull survey (the planner models a roof).
    """
    file = survey.file
    if survey.survey.kind != "roof":
        raise ProcessingError(f"{file}: [survey] kind = \"{survey.survey.kind}\": the cool-down planner models a roof "
                              "assembly; it does not apply to hulls")
    cond, cool = survey.conditions, survey.cooldown
    if cond.sunset is None:
        raise SurveyError(f"{file}: [conditions] sunset: is missing: the cool-down planner needs the local sunset "
                          'time, e.g. sunset = "16:40" (computed when a georeferenced roof has [survey] date '
                          '= "YYYY-MM-DD")')
    notes: list[str] = []
    insulation = cool.insulation
    if insulation is None:
        insulation = insulation_from_sections(sections)
        if insulation is None:
            raise SurveyError(
                f"{file}: [cooldown] insulation: is missing and no section names a known insulation: "
                f"add insulation = \"perlite\" (one of {', '.join(COOLDOWN_INSULATIONS)}) under [cooldown]")
        notes.append(f"insulation \"{insulation}\" taken from the plan's sections (the largest naming one)")
    thickness, water_pct = INSULATION_DEFAULTS[insulation]
    if cool.water_vol_pct is None:
        notes.append(f"water content {water_pct:g} % by volume assumed for wet {insulation} board (a preset "
                     "assumption, from memory; set [cooldown] water_vol_pct)")
    else:
        water_pct = cool.water_vol_pct
    if water_pct <= 0:
        raise SurveyError(f"{file}: [cooldown] water_vol_pct = {water_pct:g}: expected more than 0 "
                          "(the wet board's water content, % by volume)")
    sunset_h = _clock_h(cond.sunset)
    if getattr(cond, "sunset_source", None):
        notes.append(f"sunset {cond.sunset.strftime('%H:%M')} {cond.sunset_source}; type [conditions] sunset "
                     "to override")
    if cool.sunrise is not None:
        sunrise_h = _clock_h(cool.sunrise)
    else:
        sunrise_h = 24.0 - sunset_h  # symmetric about 12:00 local time
        notes.append(f"sunrise assumed at {int(sunrise_h):02d}:{int(round(60 * (sunrise_h % 1))) % 60:02d} "
                     "(symmetric to sunset about noon; set [cooldown] sunrise)")
    if not (0.0 <= sunrise_h < sunset_h):
        raise SurveyError(f"{file}: [cooldown] sunrise / [conditions] sunset: sunrise {sunrise_h:.2f} h is not before "
                          f"sunset {sunset_h:.2f} h; expected local clock times with sunrise < sunset")
    if cond.time is not None:
        air_at = _clock_h(cond.time)
    else:
        air_at = sunset_h + 2.0
        notes.append("no [conditions] time: the recorded air temperature is taken as 2 h after sunset")
    if cond.wind_m_s is None:
        notes.append(f"no wind recorded: {DEFAULT_WIND_M_S:g} m/s assumed")
    if cond.sky is None:
        notes.append("no sky recorded: a clear sky assumed")
    weather = NightWeather(
        sunset_h=sunset_h, sunrise_h=sunrise_h, air_c=cond.air_c, air_at_h=air_at,
        air_range_c=cool.air_range_c, humidity_pct=cond.humidity_pct,
        wind_m_s=DEFAULT_WIND_M_S if cond.wind_m_s is None else cond.wind_m_s,
        cloud_tenths=SKY_CLOUD_TENTHS[cond.sky or "clear"], sun_peak_w_m2=cool.sun_peak_w_m2,
        interior_c=cool.interior_c,
    )
    assembly = roof_assembly(
        insulation, insulation_m=cool.insulation_m if cool.insulation_m is not None else thickness,
        membrane_m=cool.membrane_m, deck=cool.deck, deck_m=cool.deck_m, absorptance=cool.absorptance,
        emissivity=survey.camera.emissivity, k_w_mk=cool.insulation_k_w_mk, rho_kg_m3=cool.insulation_rho_kg_m3,
        c_j_kgk=cool.insulation_c_j_kgk, moisture_factor=cool.moisture_factor,
    )
    plan = plan_window(assembly, weather, water_vol_fraction=water_pct / 100.0, insulation=insulation,
                       window_fraction=cool.window_fraction, step_s=step_s, notes=notes)
    if 0.0 < plan.peak_delta_c < survey.detect.delta_c:
        plan = replace(plan, notes=plan.notes + (
            f"the predicted peak contrast {plan.peak_delta_c:.2f} K is below the detection threshold "
            f"[detect] delta_c = {survey.detect.delta_c:g} °C: wet areas may not be detected",))
    return plan


def _plot(plan: WindowPlan, path: Path, *, title: str) -> None:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(8.0, 6.4), dpi=110)
    FigureCanvasAgg(fig)
    top, bottom = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [3, 2]})
    h = plan.hours_after_sunset
    top.plot(h, plan.air_c, color="0.55", lw=1.2, label="air")
    top.plot(h, plan.sky_c, color="0.55", lw=1.0, ls=":", label="sky (broadband)")
    top.plot(h, plan.surface_dry_c, color="tab:blue", lw=2.0, label="surface over dry insulation")
    top.plot(h, plan.surface_wet_c, color="tab:red", lw=2.0,
             label=f"surface over wet insulation ({plan.water_vol_pct:g} % water by volume)")
    top.axhline(plan.condensation_c, color="tab:cyan", lw=1.0, ls="--", label=plan.condensation_kind)
    top.set_ylabel("temperature, °C")
    top.legend(fontsize=7, loc="upper right")
    top.grid(alpha=0.3)
    bottom.plot(h, plan.delta_c, color="k", lw=2.0, label="wet minus dry")
    bottom.axhline(0.0, color="0.6", lw=0.8)
    if plan.best_start_h is not None and plan.best_end_h is not None:
        for ax in (top, bottom):
            ax.axvspan(plan.best_start_h, plan.best_end_h, color="tab:green", alpha=0.15)
        bottom.text(plan.best_start_h + 0.1, 0.06, f"best window {plan.best_start_h:.2f}-{plan.best_end_h:.2f} h",
                    transform=bottom.get_xaxis_transform(), fontsize=8, color="tab:green")
    if plan.dew_from_h is not None:
        for ax in (top, bottom):
            ax.axvline(plan.dew_from_h, color="tab:cyan", lw=1.0, ls="--")
    bottom.set_ylabel("delta, K")
    bottom.set_xlabel("hours after sunset")
    bottom.grid(alpha=0.3)
    bottom.legend(fontsize=7, loc="lower right")
    fig.suptitle(f"{title}\n{plan.assembly}", fontsize=9)
    fig.text(0.01, 0.005, "Model estimate for planning, not a measurement; anomalies need cores.", fontsize=7,
             color="0.4")
    fig.tight_layout(rect=(0, 0.02, 1, 1))
    fig.savefig(path, format="png")


def write_window(plan: WindowPlan, out_dir: str | Path, *, title: str = "Cool-down plan",
                 survey: str | Path | None = None) -> tuple[Path, Path]:
    """Write ``window.json`` and ``window.png`` into ``out_dir`` atomically (:func:`wetmap.outputs.replacing`).

    Other files in ``out_dir`` are carried over; a failure leaves ``out_dir`` as it was.
    ``out_dir`` must be missing, empty or wetmap's own results folder, and not be, hold or
    lie in ``survey`` (other than its ``results/``).

    Returns
    -------
    (Path, Path)
        The JSON and PNG paths.
    """
    def write(folder: Path) -> None:
        (folder / WINDOW_FILES[0]).write_text(json.dumps(plan.to_json(), indent=2, ensure_ascii=False) + "\n",
                                              encoding="utf-8")
        _plot(plan, folder / WINDOW_FILES[1], title=title)

    out = write_folder(out_dir, write, survey=survey, keep=None)
    return out / WINDOW_FILES[0], out / WINDOW_FILES[1]


def run_window(folder: str | Path, *, out: str | Path | None = None) -> tuple[WindowPlan, Path, Path]:
    """Plan the cool-down of the survey in ``folder`` and write ``window.json`` and ``window.png``.

    Parameters
    ----------
    folder
        The survey folder.
    out
        Folder for the two files; default ``folder/results`` (other files there are kept).

    Returns
    -------
    (WindowPlan, Path, Path)
    """
    survey = with_sun_times(load_survey(folder))  # sunset and sunrise from place and date when not typed in
    out_dir = Path(out) if out is not None else survey.folder / "results"
    check_out_dir(out_dir, surveys=[survey.folder])  # refused before the model runs
    sections: list = []
    if survey.cooldown.insulation is None and survey.plan.sections is not None:
        crs = None if survey.survey.is_local else survey.survey.crs
        sections, _ = read_sections(survey.plan.sections, survey_crs=crs)
    plan = plan_survey_window(survey, sections=sections)
    json_path, png_path = write_window(plan, out_dir, title=f"{survey.survey.title}: cool-down plan",
                                       survey=survey.folder)
    return plan, json_path, png_path
