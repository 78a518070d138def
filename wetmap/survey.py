"""survey.toml -> :class:`Survey`: every check of user values lives here.

The file format is described in ``docs/SURVEY_FORMAT.md`` of the project (units are
in the key names: ``_c`` degC, ``_m`` metres, ``_m2`` square metres, ``_pct`` percent,
``_m_s`` metres per second). :func:`load_survey` reads and validates the whole file
before any work starts and reports *every* problem it finds at once, one line each,
naming the file, the key (with its line where it can be found) and what is expected.

Examples
--------
>>> import tempfile, pathlib
>>> d = pathlib.Path(tempfile.mkdtemp())
>>> _ = (d / "survey.toml").write_text('[survey]\\nkind = "roof"\\n')
>>> try:
...     load_survey(d)
... except SurveyError as err:
...     print(err.problems[0])  # doctest: +ELLIPSIS
/.../survey.toml: [survey] title: is missing: expected a text, e.g. title = "Main roof"
"""

from __future__ import annotations

import difflib
import math
import re
import sys
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from datetime import date as date_type
from datetime import time as clock_time
from pathlib import Path
from typing import Any, Literal, get_args

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

from .errors import MissingFileError, SurveyError

__all__ = [
    "Kind",
    "Units",
    "Sky",
    "Side",
    "SurveyInfo",
    "Conditions",
    "Camera",
    "Plan",
    "Mosaic",
    "Frame",
    "Detect",
    "Cores",
    "Repair",
    "ReportInfo",
    "AreaUnit",
    "Prices",
    "Survey",
    "load_survey",
    "SURVEY_FILE",
    "DEFAULT_MIN_AREA_M2",
    "Limits",
    "Cooldown",
    "COOLDOWN_INSULATIONS",
    "COOLDOWN_DECKS",
    "is_web_mercator",
    "PIXEL_M_RANGE",
    "BOARD_M_RANGE",
    "COORD_MAX_M",
]

SURVEY_FILE = "survey.toml"

Kind = Literal["roof", "hull"]
Units = Literal["C", "K", "F"]
Sky = Literal["clear", "partly", "overcast"]
Side = Literal["port", "starboard"]
DampRule = Literal["wet", "dry"]

#: Plausible sizes (common practice): thermal pixels on roofs and hulls run from about a
#: millimetre (a frame from a metre away) to a few metres (a high flight); insulation boards and
#: core sheets from a 5 cm strip to a 10 m panel; plan coordinates of any projected CRS in metres
#: stay within 1e8 m; a unit rate above 1e9 in any currency is a typing mistake.
PIXEL_M_RANGE = (0.0005, 10.0)
BOARD_M_RANGE = (0.05, 10.0)
COORD_MAX_M = 1e8
RATE_MAX = 1e9

#: Default smallest anomaly kept, by survey kind (common practice: a roof survey
#: does not report patches smaller than about a board's corner; hull patches are smaller).
DEFAULT_MIN_AREA_M2: dict[str, float] = {"roof": 0.5, "hull": 0.05}


# --------------------------------------------------------------------------------------
# The configuration, as frozen dataclasses
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SurveyInfo:
    """The ``[survey]`` table."""

    title: str
    kind: Kind
    crs: str
    """A projected CRS in metres as the user wrote it, or ``"local"``."""
    site: str | None = None
    date: str | None = None
    surveyor: str | None = None
    side: Side | None = None
    allow_outside_paths: bool = False
    """Paths in survey.toml may name files outside the survey folder (absolute, ``..``, symbolic
    links leading out); by default they are refused."""

    @property
    def is_local(self) -> bool:
        """True when the plan is in plan metres with no geo-reference."""
        return self.crs == "local"


@dataclass(frozen=True)
class Conditions:
    """The ``[conditions]`` table: what was observed on site."""

    air_c: float
    humidity_pct: float
    sky: Sky | None = None
    wind_m_s: float | None = None
    reflected_c: float | None = None
    """Measured reflected apparent temperature; ``None`` = estimate from sky and air."""
    sunset: clock_time | None = None
    time: clock_time | None = None
    hours_since_rain: float | None = None
    surface_dry: bool | None = None
    sunset_source: str | None = None
    """``None``: typed in; else how :func:`wetmap.sun.with_sun_times` computed ``sunset``."""


@dataclass(frozen=True)
class Camera:
    """The ``[camera]`` table."""

    emissivity: float
    band_um: tuple[float, float] = (7.5, 14.0)
    distance_m: float = 0.0
    transmittance: float | None = None
    ifov_mrad: float | None = None
    """Instantaneous field of view of one detector element, milliradians; with ``distance_m``
    it gives the optics' ground sampling distance (:mod:`wetmap.image_checks`)."""
    max_view_angle_deg: float = 60.0
    """Frame pixels seen more obliquely than this (degrees from the surface normal) are not
    used where a better view covers the same plan pixel (:mod:`wetmap.register`)."""
    refractive_index: float | None = None
    """Refractive index of the surface in the camera band: frame pixels then get the
    emissivity ``emissivity * e(angle) / e(0)`` with ``e`` the Fresnel emissivity of a smooth
    dielectric at their viewing angle (:func:`wetmap.register.fresnel_emissivity`);
    ``None``: the same emissivity at every angle."""


@dataclass(frozen=True)
class Plan:
    """The ``[plan]`` table, with paths resolved against the survey folder."""

    outline: Path
    exclusions: Path | None = None
    sections: Path | None = None
    pixel_m: float | None = None
    """Plan grid pixel size, metres; ``None``: the finest mosaic's, or chosen from the frames'
    ground sampling distance (see :mod:`wetmap.register`)."""
    specular: Path | None = None
    """Optional layer of specular surfaces (metal, glazing, ...): warm patches on them seen
    from one viewpoint are reflection suspects (:mod:`wetmap.image_checks`)."""


@dataclass(frozen=True)
class Mosaic:
    """One ``[[mosaic]]`` entry: a raster of apparent temperature on the plan grid."""

    path: Path
    units: Units
    time: clock_time | None = None
    scale: float = 1.0
    offset: float = 0.0
    origin: tuple[float, float] | None = None
    """Plan x, y of the upper-left corner, for a raster with no transform of its own."""
    pixel_m: float | None = None


@dataclass(frozen=True)
class Frame:
    """One ``[[frame]]`` entry: a single frame placed by control points."""

    path: Path
    units: Units
    points: tuple[tuple[float, float, float, float], ...]
    """Control points as ``(col, row, x, y)``: image pixel -> plan metres."""
    time: clock_time | None = None
    scale: float = 1.0
    offset: float = 0.0


@dataclass(frozen=True)
class Detect:
    """The ``[detect]`` table (defaults resolved by survey kind)."""

    delta_c: float = 1.0
    background_m: float | None = None
    """``None``: chosen from the kind and the plan size at run time."""
    min_area_m2: float = 0.5
    tile_px: int | None = None
    """Window side for processing in windows, pixels (rounded to the background block);
    0: the whole array; ``None``: chosen by the plan grid's size (see :mod:`wetmap.tiles`)."""
    delta_from: Literal["value", "cores"] = "value"
    """``"cores"`` when ``delta_c = "cores"``: the threshold is the middle of the range the
    cores allow (``delta_c`` then keeps the default, used for the background's warm cut)."""
    background: Literal["auto", "trend", "local"] = "auto"
    """The dry background per section: chosen from the data, a robust trend, or the local block median."""
    edge_buffer_m: float = 0.0
    """Band along the outline left out of the survey, metres (0: none)."""
    exclusion_buffer_m: float = 0.0
    """Band around each exclusion left out of the survey, metres (0: none)."""


@dataclass(frozen=True)
class Cores:
    """The ``[cores]`` table."""

    path: Path
    wet_above: float | None = None
    wet_above_pct: float | None = None
    damp_counts_as: DampRule = "wet"
    """How a core graded ``damp`` in cores.csv counts: as ``"wet"`` (the default: damp
    insulation has lost part of its insulating value and rarely dries in place) or ``"dry"``."""


@dataclass(frozen=True)
class Repair:
    """The ``[repair]`` table."""

    margin_m: float = 0.3
    board_m: tuple[float, float] | None = (1.2, 2.4)
    """Board size ``(along, across)`` the board grid's direction, metres."""
    include_unverified: bool = True
    board_angle_deg: float | None = None
    """Direction of the board grid, degrees anticlockwise from plan x; ``None``: the
    outline's dominant edge direction."""
    board_origin: tuple[float, float] | None = None
    """Plan x, y of one board corner; ``None``: the outline's lower-left corner in the grid's frame."""
    replace_above_pct: float = 25.0
    """Wet fraction above which a section is flagged for replacement rather than repair
    (default: some local codes require full replacement above 25 % wet; the local code decides)."""
    area_units: tuple[AreaUnit, ...] = ("m2",)
    """Area units reported; ``"m2"`` always comes first."""


AreaUnit = Literal["m2", "ft2", "squares"]
UnitSystem = Literal["metric", "imperial"]
Paper = Literal["A4", "Letter"]


@dataclass(frozen=True)
class ReportInfo:
    """The ``[report]`` table: the client block of the report's cover, its paper and units.

    ``units`` is the unit system of every figure in ``report.html`` / ``report.pdf``;
    it and ``[repair] area_units`` are one setting seen from two sides (see
    :func:`load_survey`): ``"imperial"`` adds ft2 (and squares on a roof) to the area
    units, and ``area_units`` naming ft2 or squares makes the report imperial unless
    ``units`` says otherwise.
    """

    client: str | None = None
    address: str | None = None
    job_number: str | None = None
    company: str | None = None
    logo: Path | None = None
    revision: str | None = None
    issue_date: str | None = None
    """ISO date ``YYYY-MM-DD``."""
    paper: Paper = "A4"
    units: UnitSystem = "metric"


@dataclass(frozen=True)
class Prices:
    """The ``[prices]`` table: optional unit rates for the bill of quantities.

    Each ``*_rate`` is in ``currency`` per unit; ``None`` leaves that line unpriced.
    """

    currency: str
    tearoff_rate: float | None = None
    tearoff_unit: AreaUnit = "m2"
    replace_rate: float | None = None
    replace_unit: AreaUnit = "m2"
    board_each: float | None = None
    cut_edge_per_m: float | None = None
    mobilisation: float | None = None
    disposal_per_m3: float | None = None
    """Rate per cubic metre of wet material removed (the removal-volume line of a roof bill)."""
    #: Hull repair rates (``kind = "hull"``): per area (``*_per_m2`` or ``*_per_ft2``) and per
    #: metre of scarfed edge.
    remove_rate: float | None = None
    remove_unit: AreaUnit = "m2"
    recore_rate: float | None = None
    recore_unit: AreaUnit = "m2"
    relaminate_rate: float | None = None
    relaminate_unit: AreaUnit = "m2"
    fair_rate: float | None = None
    fair_unit: AreaUnit = "m2"
    scarf_per_m: float | None = None


@dataclass(frozen=True)
class Limits:
    """The ``[limits]`` table: thresholds of the survey-condition checks.

    Defaults (documented in ``docs/SURVEY_FORMAT.md``): wind below about 6.7 m/s
    (15 mph) and no rain in the previous 24 h (trade sources citing ASTM C1153; common
    practice), a survey from sunset to about 4 h after it (common practice), surface at
    least 3 K above the dew or frost point (from memory), air paths over about 30 m in
    humid air treated as uncertain, emissivity within 0.02 of the documented range of
    the stated surface.
    """

    wind_max_m_s: float = 6.7
    rain_free_h: float = 24.0
    dew_margin_c: float = 3.0
    after_sunset_min_h: float = 0.0
    after_sunset_max_h: float = 4.0
    path_max_m: float = 30.0
    path_humidity_pct: float = 50.0
    emissivity_tolerance: float = 0.02
    min_pixels_across: float = 3.0
    """Pixels a feature must span across its smallest width to be measured reliably (common practice)."""
    focus_ratio: float = 0.5
    """A frame or mosaic tile is flagged as blurred below this fraction of the survey's median sharpness."""
    reflection_ratio: float = 0.5
    """An anomaly is a reflection suspect when its weakest view's delta-T is below this fraction of its strongest's."""
    exclude_blurred: bool = True
    """A blurred frame is used only where no sharper frame covers the same ground."""


#: Insulation presets of the cool-down planner (``[cooldown] insulation``).
COOLDOWN_INSULATIONS: tuple[str, ...] = ("perlite", "polyiso", "eps", "xps", "wood_fibre")
#: Deck presets of the cool-down planner (``[cooldown] deck``).
COOLDOWN_DECKS: tuple[str, ...] = ("steel", "concrete", "timber")


@dataclass(frozen=True)
class Cooldown:
    """The ``[cooldown]`` table: roof assembly and day of the cool-down planner.

    ``None`` means the documented default of :mod:`wetmap.cooldown` (the preset's
    value, or for ``insulation`` the insulation named by the plan's sections).
    """

    insulation: str | None = None
    insulation_m: float | None = None
    water_vol_pct: float | None = None
    insulation_k_w_mk: float | None = None
    insulation_rho_kg_m3: float | None = None
    insulation_c_j_kgk: float | None = None
    moisture_factor: float | None = None
    membrane_m: float = 0.01
    deck: str = "steel"
    deck_m: float | None = None
    absorptance: float = 0.9
    sun_peak_w_m2: float = 700.0
    sunrise: clock_time | None = None
    air_range_c: float = 8.0
    interior_c: float = 20.0
    window_fraction: float = 0.5


@dataclass(frozen=True)
class Survey:
    """A validated survey: every value checked, every path resolved and existing."""

    folder: Path
    file: Path
    survey: SurveyInfo
    conditions: Conditions
    camera: Camera
    plan: Plan
    mosaics: tuple[Mosaic, ...] = ()
    frames: tuple[Frame, ...] = ()
    detect: Detect = field(default_factory=Detect)
    cores: Cores | None = None
    repair: Repair = field(default_factory=Repair)
    prices: Prices | None = None
    limits: Limits = field(default_factory=Limits)
    cooldown: Cooldown = field(default_factory=Cooldown)
    report: ReportInfo = field(default_factory=ReportInfo)


# --------------------------------------------------------------------------------------
# Checking machinery
# --------------------------------------------------------------------------------------

_TIME_RE = re.compile(r"^([01]?\d|2[0-3]):([0-5]\d)$")


class _Problems:
    """Collects problem lines for one survey file."""

    def __init__(self, file: Path, text: str):
        self.file = file
        self.lines = text.splitlines()
        self.items: list[str] = []
        self.allow_outside_paths = False
        """``[survey] allow_outside_paths``: paths may leave the survey folder."""

    def line_of(self, table: str, key: str | None, index: int | None) -> int | None:
        """1-based line of ``key`` inside ``[table]`` (or its ``index``-th ``[[table]]``)."""
        current, count = None, -1
        header = re.compile(r"^\s*(\[\[?)\s*([A-Za-z0-9_.-]+)\s*\]\]?\s*(#.*)?$")
        for n, line in enumerate(self.lines, start=1):
            m = header.match(line)
            if m:
                current = m.group(2)
                if current == table:
                    count += 1
                    if key is None and (index is None or count == index):
                        return n
                continue
            if current != table or key is None or (index is not None and count != index):
                continue
            if re.match(rf"^\s*{re.escape(key)}\s*=", line):
                return n
        return None

    def add(self, table: str, key: str | None, message: str, *, index: int | None = None) -> None:
        where = f"[{table}]" if index is None else f"[[{table}]] #{index + 1}"
        if key is not None:
            where += f" {key}"
        line = self.line_of(table, key, index)
        at = f" (line {line})" if line else ""
        self.items.append(f"{self.file}: {where}{at}: {message}")


_CONTROL = re.compile(r"[\x00-\x1f\x7f]")


def _one_line(text: str) -> str:
    """``text`` with control characters (a newline in a quoted key or value, NUL, ...) escaped:
    a problem is always a single printable line."""
    return _CONTROL.sub(lambda m: repr(m.group())[1:-1], text)


def _fmt(value: Any) -> str:
    if isinstance(value, str):
        return f'"{_one_line(value)}"'
    if isinstance(value, (clock_time, date_type)):  # TOML dates and times, as written in the file
        return value.isoformat()
    return repr(value)


def _as_number(value: Any) -> float | None:
    """``value`` as a finite float, or ``None`` for a bool, a text, NaN, infinity or an integer too
    large for a float (a 400-digit integer must not raise ``OverflowError``)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    try:
        out = float(value)
    except OverflowError:
        return None
    return out if math.isfinite(out) else None


def _short(value: Any, limit: int = 60) -> str:
    """``_fmt(value)`` cut to ``limit`` characters, for long lists."""
    text = _fmt(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


class _Table:
    """Typed access to one TOML table that records every problem it meets."""

    def __init__(
        self,
        problems: _Problems,
        name: str,
        data: Mapping[str, Any],
        allowed: tuple[str, ...],
        *,
        index: int | None = None,
    ):
        self.p = problems
        self.name = name
        self.data = data
        self.index = index
        for key in data:
            if key not in allowed:
                near = difflib.get_close_matches(key, allowed, n=1, cutoff=0.6)
                hint = f'; did you mean "{near[0]}"?' if near else f"; valid keys: {', '.join(allowed)}"
                self.problem(key, f"unknown key{hint}")

    def problem(self, key: str | None, message: str) -> None:
        self.p.add(self.name, key, message, index=self.index)

    def _get(self, key: str, required: bool, example: str, expected: str) -> Any:
        if key not in self.data:
            if required:
                self.problem(key, f"is missing: expected {expected}, e.g. {key} = {example}")
            return None
        return self.data[key]

    def text(self, key: str, *, required: bool = False, example: str = '"..."') -> str | None:
        value = self._get(key, required, example, "a text")
        if value is None:
            return None
        if not isinstance(value, str) or not value.strip():
            self.problem(key, f"= {_fmt(value)}: expected a non-empty text in quotes, e.g. {key} = {example}")
            return None
        return value

    def number(
        self,
        key: str,
        *,
        required: bool = False,
        low: float | None = None,
        high: float | None = None,
        low_open: bool = False,
        high_open: bool = False,
        example: str = "1.0",
        plausible: tuple[float, float] | None = None,
    ) -> float | None:
        """A finite number within the range; ``plausible`` (low, high) is a further range of sizes
        that can be right (common practice), reported as implausible rather than invalid."""
        expected = _range_text(low, high, low_open, high_open)
        value = self._get(key, required, example, f"a number{expected}")
        if value is None:
            return None
        number = _as_number(value)
        if number is None:
            self.problem(key, f"= {_short(value)}: expected a number{expected}, e.g. {key} = {example}")
            return None
        value = number
        bad = (
            (low is not None and (value <= low if low_open else value < low))
            or (high is not None and (value >= high if high_open else value > high))
        )
        if bad:
            self.problem(key, f"= {value:g}: expected a number{expected}")
            return None
        if plausible is not None and not plausible[0] <= value <= plausible[1]:
            self.problem(key, f"= {value:g}: not a plausible value; expected {plausible[0]:g} <= value <= "
                         f"{plausible[1]:g} (check the number and its unit), e.g. {key} = {example}")
            return None
        return value

    def choice(self, key: str, options: tuple[str, ...], *, required: bool = False) -> str | None:
        expected = "one of " + ", ".join(f'"{o}"' for o in options)
        value = self._get(key, required, f'"{options[0]}"', expected)
        if value is None:
            return None
        if value not in options:
            near = difflib.get_close_matches(str(value), options, n=1, cutoff=0.5)
            hint = f' (did you mean "{near[0]}"?)' if near else ""
            self.problem(key, f"= {_fmt(value)}: expected {expected}{hint}")
            return None
        return value

    def boolean(self, key: str) -> bool | None:
        value = self._get(key, False, "true", "true or false")
        if value is None:
            return None
        if not isinstance(value, bool):
            self.problem(key, f"= {_fmt(value)}: expected true or false (no quotes)")
            return None
        return value

    def clock(self, key: str) -> clock_time | None:
        value = self._get(key, False, '"21:30"', "a local time")
        if value is None:
            return None
        if isinstance(value, clock_time):
            return value
        m = _TIME_RE.match(value) if isinstance(value, str) else None
        if not m:
            self.problem(key, f'= {_fmt(value)}: expected a local time "HH:MM", e.g. {key} = "21:30"')
            return None
        return clock_time(int(m.group(1)), int(m.group(2)))

    def numbers(self, key: str, count: int, *, example: str, positive: bool = False,
                low: float | None = None, high: float | None = None) -> tuple[float, ...] | None:
        """A list of ``count`` finite numbers, each within ``low <= v <= high`` when given."""
        value = self._get(key, False, example, f"a list of {count} numbers")
        if value is None:
            return None
        parsed = [_as_number(v) for v in value] if isinstance(value, list) else []
        ok = isinstance(value, list) and len(value) == count and all(v is not None for v in parsed)
        if ok and positive:
            ok = all(v > 0 for v in parsed)  # type: ignore[operator]
        if not ok:
            what = "positive numbers" if positive else "numbers"
            self.problem(key, f"= {_short(value)}: expected a list of {count} {what}, e.g. {key} = {example}")
            return None
        if any((low is not None and v < low) or (high is not None and v > high) for v in parsed):  # type: ignore[operator]
            self.problem(key, f"= {_short(value)}: expected each number{_range_text(low, high, False, False)}, "
                         f"e.g. {key} = {example}")
            return None
        return tuple(float(v) for v in parsed)  # type: ignore[arg-type]

    def path(self, key: str, folder: Path, *, required: bool = False, example: str = '"file"') -> Path | None:
        """A file inside the survey folder (``folder`` is resolved), existing, not under ``results/``.

        Paths leaving the folder (absolute, ``..``, a symbolic link leading out) are refused
        unless ``[survey] allow_outside_paths = true``.
        """
        value = self.text(key, required=required, example=example)
        if value is None:
            return None
        shown = _short(value)
        if "\0" in value:
            self.problem(key, f"= {shown}: holds a NUL character, which no file name can; retype the path")
            return None
        outside_ok = self.p.allow_outside_paths
        allow_hint = "or set [survey] allow_outside_paths = true to allow it"
        if Path(value).is_absolute() and not outside_ok:
            self.problem(key, f"= {shown}: an absolute path; paths are relative to the survey folder: copy the "
                         f"file into the folder and give its relative path, {allow_hint}")
            return None
        try:
            path = (folder / value).resolve()
        except (OSError, RuntimeError, ValueError) as err:  # a symbolic link loop raises RuntimeError
            self.problem(key, f"= {shown}: cannot be followed ({err}); a symbolic link loop? point it at the file itself")
            return None
        if not outside_ok and not path.is_relative_to(folder):
            self.problem(key, f"= {shown}: resolves to {path}, outside the survey folder {folder}; copy the file "
                         f"into the folder and give its relative path, {allow_hint}")
            return None
        if path.is_relative_to(folder / "results"):
            self.problem(key, f"= {shown}: lies in the survey's results folder, which every run replaces; move "
                         "the file out of results/ (e.g. to thermal/ or plan/) and give its new path")
            return None
        try:
            found = path.is_file()
        except (OSError, ValueError):
            found = False
        if not found:
            self.problem(key, f'= {shown}: file not found at {path}; check the path (relative to the survey folder)')
            return None
        return path


def _range_text(low, high, low_open, high_open) -> str:
    if low is None and high is None:
        return ""
    if low is not None and high is not None:
        return f" with {low:g} {'<' if low_open else '<='} value {'<' if high_open else '<='} {high:g}"
    if low is not None:
        return f" {'>' if low_open else '>='} {low:g}"
    return f" {'<' if high_open else '<='} {high:g}"


def _check_crs(table: _Table, value: str | None) -> str | None:
    """Accept ``local`` or a projected CRS whose axes are in metres."""
    if value is None or value == "local":
        return value
    from pyproj import CRS
    from pyproj.exceptions import CRSError

    try:
        crs = CRS.from_user_input(value)
    except CRSError:
        table.problem("crs", f'= "{value}": not a CRS pyproj knows; expected e.g. "EPSG:32633" or "local"')
        return None
    if crs.is_geographic:
        table.problem(
            "crs",
            f'= "{value}" is geographic (degrees): areas would be in square degrees; '
            'expected a projected CRS in metres (e.g. the site\'s UTM zone) or "local"',
        )
        return None
    if not crs.is_projected:
        table.problem("crs", f'= "{value}" is not a projected CRS ({crs.type_name}); '
                      'expected a projected CRS in metres (e.g. the site\'s UTM zone) or "local"')
        return None
    units = {(ax.unit_name or "").lower() for ax in crs.axis_info[:2]}
    if not units <= {"metre", "meter", "m"}:
        table.problem("crs", f'= "{value}": axes in {", ".join(sorted(units)) or "unknown units"}; expected a projected CRS in metres or "local"')
        return None
    if is_web_mercator(crs):
        table.problem("crs", f'= "{value}" is Web Mercator ({crs.name}): its lengths grow as 1/cos(latitude) on '
                      "each axis, so areas are wrong by 1/cos^2 (x2.3 at 49 degrees); expected the site's UTM "
                      'zone or national grid, or "local"')
        return None
    return value


def is_web_mercator(crs) -> bool:
    """True for Web Mercator (EPSG:3857 and its aliases: EPSG:900913 and 3785, ESRI:102100 and 102113, ...).

    Recognised by the projection method PROJ names for it, so every alias is caught.
    """
    op = getattr(crs, "coordinate_operation", None)
    method = (getattr(op, "method_name", "") or "").lower()
    name = (crs.name or "").lower()
    return "pseudo mercator" in method or any(
        word in name for word in ("pseudo-mercator", "web mercator", "web_mercator", "popular visualisation"))


# --------------------------------------------------------------------------------------
# Sections of survey.toml
# --------------------------------------------------------------------------------------

_TOP = ("survey", "conditions", "camera", "plan", "mosaic", "frame", "detect", "cores", "repair", "prices",
        "limits", "cooldown", "report")


def _iso_date(t: _Table, key: str, *, example: str) -> str | None:
    """An ISO calendar date ``YYYY-MM-DD`` (quoted, or an unquoted TOML date) as its ISO text.

    Free text ("mid November", "12/11/2024") is refused: day and month order differ by
    country, and the sun times are computed from this date.
    """
    raw = t.data.get(key)
    if raw is None:
        return None
    if isinstance(raw, date_type) and not hasattr(raw, "hour"):  # date = 2024-11-12, unquoted
        return raw.isoformat()
    if isinstance(raw, str):
        text = raw.strip()
        if re.fullmatch(r"\d{4}-\d{2}-\d{2}", text):
            try:
                return date_type.fromisoformat(text).isoformat()
            except ValueError:
                pass
    t.problem(key, f'= {_short(raw)}: expected an ISO date "YYYY-MM-DD", e.g. {example}')
    return None


def _read_survey_info(t: _Table) -> SurveyInfo | None:
    title = t.text("title", required=True, example='"Main roof"')
    kind = t.choice("kind", get_args(Kind), required=True)
    crs = _check_crs(t, t.text("crs", required=True, example='"EPSG:32633"'))
    site, surveyor = t.text("site"), t.text("surveyor")
    date = _iso_date(t, "date", example='date = "2024-11-12"')
    side = t.choice("side", get_args(Side))
    if side is not None and kind == "roof":
        t.problem("side", f'= "{side}": applies to hull surveys only; remove it or set kind = "hull"')
    outside = t.boolean("allow_outside_paths")
    if None in (title, kind, crs):
        return None
    return SurveyInfo(title=title, kind=kind, crs=crs, site=site, date=date, surveyor=surveyor, side=side,
                      allow_outside_paths=bool(outside))


def _read_conditions(t: _Table) -> Conditions | None:
    air = t.number("air_c", required=True, low=-60, high=60, example="6.0")
    rh = t.number("humidity_pct", required=True, low=0, high=100, low_open=True, example="65")
    wind = t.number("wind_m_s", low=0, high=60, example="2.0")
    reflected = t.number("reflected_c", low=-100, high=100, example="-18.0")
    sky = t.choice("sky", get_args(Sky), required=reflected is None and "reflected_c" not in t.data)
    sunset, at = t.clock("sunset"), t.clock("time")
    rain = t.number("hours_since_rain", low=0, example="48", plausible=(0, 100_000))
    dry = t.boolean("surface_dry")
    if air is None or rh is None:
        return None
    return Conditions(
        air_c=air, humidity_pct=rh, sky=sky, wind_m_s=wind, reflected_c=reflected,
        sunset=sunset, time=at, hours_since_rain=rain, surface_dry=dry,
    )


def _read_camera(t: _Table) -> Camera | None:
    eps = t.number("emissivity", required=True, low=0, high=1, low_open=True, example="0.94", plausible=(0.01, 1.0))
    band = t.numbers("band_um", 2, example="[7.5, 14.0]", positive=True)
    if band is not None and not (1.0 <= band[0] < band[1] <= 20.0):
        t.problem("band_um", f"= {list(band)}: expected [short, long] in micrometres with 1 <= short < long <= 20")
        band = None
    distance = t.number("distance_m", low=0, high=10_000, example="35.0")
    tau = t.number("transmittance", low=0, high=1, low_open=True, example="0.97", plausible=(0.05, 1.0))
    ifov = t.number("ifov_mrad", low=0, low_open=True, high=100, example="1.1")
    max_angle = t.number("max_view_angle_deg", low=0, low_open=True, high=89, example="60")
    index = t.number("refractive_index", low=1, high=5, example="1.5")
    if eps is None:
        return None
    return Camera(
        emissivity=eps,
        band_um=band or (7.5, 14.0),
        distance_m=distance or 0.0,
        transmittance=tau,
        ifov_mrad=ifov,
        max_view_angle_deg=60.0 if max_angle is None else max_angle,
        refractive_index=index,
    )


def _read_plan(t: _Table, folder: Path) -> Plan | None:
    outline = t.path("outline", folder, required=True, example='"plan/outline.geojson"')
    exclusions = t.path("exclusions", folder, example='"plan/exclusions.geojson"')
    sections = t.path("sections", folder, example='"plan/sections.geojson"')
    pixel = t.number("pixel_m", low=0, low_open=True, high=100, example="0.05", plausible=PIXEL_M_RANGE)
    specular = t.path("specular", folder, example='"plan/specular.geojson"')
    if outline is None:
        return None
    return Plan(outline=outline, exclusions=exclusions, sections=sections, pixel_m=pixel, specular=specular)


def _scale_offset(t: _Table) -> tuple[float | None, float | None]:
    scale = t.number("scale", example="0.01")
    if scale is not None and scale == 0:
        t.problem("scale", "= 0: expected a non-zero number (value = raw * scale + offset)")
        scale = None
    return scale, t.number("offset", example="-273.15")


def _read_mosaic(t: _Table, folder: Path) -> Mosaic | None:
    path = t.path("path", folder, required=True, example='"thermal/pass1.tif"')
    units = t.choice("units", get_args(Units), required=True)
    at = t.clock("time")
    scale, offset = _scale_offset(t)
    origin = t.numbers("origin", 2, example="[512300.0, 5463140.0]", low=-COORD_MAX_M, high=COORD_MAX_M)
    pixel = t.number("pixel_m", low=0, low_open=True, high=100, example="0.05", plausible=PIXEL_M_RANGE)
    if ("origin" in t.data) != ("pixel_m" in t.data):
        missing = "origin" if "origin" not in t.data else "pixel_m"
        t.problem(missing, "is missing: origin and pixel_m go together (upper-left corner and pixel size)")
    if path is None or units is None:
        return None
    return Mosaic(
        path=path, units=units, time=at,
        scale=1.0 if scale is None else scale, offset=offset or 0.0,
        origin=origin, pixel_m=pixel,
    )


def _read_frame(t: _Table, folder: Path) -> Frame | None:
    path = t.path("path", folder, required=True, example='"frames/f01.csv"')
    if path is not None and path.suffix.lower() not in (".tif", ".tiff", ".png", ".npy", ".csv"):
        t.problem("path", f'= "{path.name}": expected a .tif, .tiff, .png, .npy or .csv frame')
        path = None
    units = t.choice("units", get_args(Units), required=True)
    at = t.clock("time")
    scale, offset = _scale_offset(t)
    raw = t._get("points", True, "[[col, row, x, y], ...]", "at least 4 control points")
    points: tuple[tuple[float, float, float, float], ...] | None = None
    if raw is not None:
        ok = isinstance(raw, list) and all(
            isinstance(p, list) and len(p) == 4 and all(_as_number(v) is not None for v in p)
            for p in raw
        )
        far = ok and any(abs(float(p[0])) > 1e6 or abs(float(p[1])) > 1e6 or abs(float(p[2])) > COORD_MAX_M
                         or abs(float(p[3])) > COORD_MAX_M for p in raw)
        if not ok:
            t.problem("points", f"= {_short(raw)}: expected a list of [col, row, x, y] lists of 4 numbers each")
        elif far:
            t.problem("points", f"= {_short(raw)}: expected pixel col, row within +-1e6 and plan x, y within "
                      f"+-{COORD_MAX_M:g} m")
        elif len(raw) < 4:
            t.problem("points", f"has {len(raw)} control points: expected at least 4 [col, row, x, y]")
        else:
            points = tuple(tuple(float(v) for v in p) for p in raw)  # type: ignore[misc]
    if path is None or units is None or points is None:
        return None
    return Frame(path=path, units=units, points=points, time=at,
                 scale=1.0 if scale is None else scale, offset=offset or 0.0)


def _read_detect(t: _Table, kind: str | None) -> Detect:
    delta_from = "value"
    if isinstance(t.data.get("delta_c"), str):
        if t.data["delta_c"] != "cores":
            t.problem("delta_c", f'= "{t.data["delta_c"]}": expected a number of degC (e.g. delta_c = 1.0) '
                                 'or "cores" (the middle of the range the cores allow)')
        delta_from = "cores"
        delta = None
    else:
        delta = t.number("delta_c", low=0, high=50, low_open=True, example="1.0", plausible=(0.05, 50))
    background_choice = t.choice("background", ("auto", "trend", "local"))
    edge = t.number("edge_buffer_m", low=0, high=50, example="1.0")
    exclusion = t.number("exclusion_buffer_m", low=0, high=50, example="0.5")
    background = t.number("background_m", low=0, low_open=True, high=1000, example="20.0", plausible=(0.1, 1000))
    min_area = t.number("min_area_m2", low=0, example="0.5", plausible=(0, 10_000))
    tile = t.number("tile_px", low=0, high=65536, example="2048")
    if tile is not None and tile != int(tile):
        t.problem("tile_px", f"= {tile:g}: expected a whole number of pixels (0 = process the whole array at once)")
        tile = None
    return Detect(
        delta_c=1.0 if delta is None else delta,
        background_m=background,
        min_area_m2=min_area if min_area is not None else DEFAULT_MIN_AREA_M2.get(kind or "roof", 0.5),
        tile_px=None if tile is None else int(tile),
        delta_from=delta_from,  # type: ignore[arg-type]
        background=background_choice or "auto",  # type: ignore[arg-type]
        edge_buffer_m=edge or 0.0,
        exclusion_buffer_m=exclusion or 0.0,
    )


def _read_cores(t: _Table, folder: Path) -> Cores | None:
    path = t.path("path", folder, required=True, example='"cores.csv"')
    wet_above = t.number("wet_above", example="30", plausible=(-1e6, 1e6))
    wet_above_pct = t.number("wet_above_pct", low=0, example="5.0", plausible=(0, 10_000))
    damp = t.choice("damp_counts_as", get_args(DampRule))
    if path is None:
        return None
    return Cores(path=path, wet_above=wet_above, wet_above_pct=wet_above_pct, damp_counts_as=damp or "wet")


def _read_repair(t: _Table) -> Repair:
    margin = t.number("margin_m", low=0, high=10, example="0.3")
    board = t.numbers("board_m", 2, example="[1.2, 2.4]", positive=True, low=BOARD_M_RANGE[0], high=BOARD_M_RANGE[1])
    include = t.boolean("include_unverified")
    angle = t.number("board_angle_deg", low=-360, high=360, example="0.0")
    origin = t.numbers("board_origin", 2, example="[512300.0, 5463100.0]", low=-COORD_MAX_M, high=COORD_MAX_M)
    replace = t.number("replace_above_pct", low=0, high=100, low_open=True, example="25")
    units: tuple[AreaUnit, ...] = ("m2",)
    raw = t.data.get("area_units")
    if raw is not None:
        valid = get_args(AreaUnit)
        if not isinstance(raw, list) or not all(isinstance(u, str) for u in raw):
            t.problem("area_units", f'= {_short(raw)}: expected a list of unit names from {", ".join(valid)}, '
                      'e.g. area_units = ["m2", "ft2", "squares"]')
        else:
            bad = [u for u in raw if u not in valid]
            for u in bad:
                near = difflib.get_close_matches(u, valid, n=1, cutoff=0.5)
                hint = f' (did you mean "{near[0]}"?)' if near else ""
                t.problem("area_units", f'= {_short(raw)}: "{u}" is not a unit wetmap reports{hint}; '
                          f'expected names from {", ".join(valid)}')
            if not bad:  # m2 always, first; the others in the order of `valid`, once each
                units = tuple(u for u in valid if u == "m2" or u in raw)  # type: ignore[misc]
    return Repair(
        margin_m=0.3 if margin is None else margin,
        board_m=board if board is not None else (1.2, 2.4),
        include_unverified=True if include is None else include,
        board_angle_deg=angle,
        board_origin=origin,  # type: ignore[arg-type]
        replace_above_pct=25.0 if replace is None else replace,
        area_units=units,
    )


#: ``[prices]`` rates given per area: the key's suffix names the unit of the rate.
_RATE_SUFFIX: dict[str, AreaUnit] = {"_per_m2": "m2", "_per_ft2": "ft2", "_per_square": "squares"}


#: ``[prices]`` keys of each kind's bill (``currency`` and ``mobilisation`` serve both).
_ROOF_PRICE_ITEMS = ("tearoff", "replace")
_ROOF_PRICE_KEYS = ("board_each", "cut_edge_per_m")
_HULL_PRICE_ITEMS = ("remove", "recore", "relaminate", "fair")
_HULL_PRICE_KEYS = ("scarf_per_m",)


def _read_prices(t: _Table, kind: str | None = None) -> Prices | None:
    currency = t.text("currency", required=True, example='"EUR"')
    hull = kind == "hull"
    other_items, other_keys = (_ROOF_PRICE_ITEMS, _ROOF_PRICE_KEYS) if hull else (_HULL_PRICE_ITEMS, _HULL_PRICE_KEYS)
    own = (", ".join(f"{i}_per_m2" for i in _HULL_PRICE_ITEMS) + ", scarf_per_m" if hull else
           "tearoff_per_m2, replace_per_m2, board_each, cut_edge_per_m")
    for key in t.data:
        if key in other_keys or any(key.startswith(f"{i}_per_") for i in other_items):
            t.problem(key, f"is a rate of the {'roof' if hull else 'hull'} bill; a {kind or 'roof'} survey's bill "
                      f"is priced with {own} (and mobilisation)")
    rates: dict[str, tuple[float | None, AreaUnit]] = {}
    for item in (*_ROOF_PRICE_ITEMS, *_HULL_PRICE_ITEMS):
        given = [f"{item}{suffix}" for suffix in _RATE_SUFFIX if f"{item}{suffix}" in t.data]
        if item in _HULL_PRICE_ITEMS and f"{item}_per_square" in given:
            t.problem(f"{item}_per_square", "roofing squares are not a hull unit; give the rate per m2 or per ft2")
            given.remove(f"{item}_per_square")
        if len(given) > 1:
            t.problem(given[1], f"and {given[0]} are both given: give the {item} rate once, "
                      f"per m2, per ft2 or per square")
        rate, unit = None, "m2"
        if given:
            rate = t.number(given[0], low=0, example="12.50", plausible=(0, RATE_MAX))
            unit = _RATE_SUFFIX[given[0][len(item):]]
        rates[item] = (rate, unit)  # type: ignore[assignment]
    board = t.number("board_each", low=0, example="18.00", plausible=(0, RATE_MAX))
    edge = t.number("cut_edge_per_m", low=0, example="4.00", plausible=(0, RATE_MAX))
    scarf = t.number("scarf_per_m", low=0, example="15.00", plausible=(0, RATE_MAX))
    mobilisation = t.number("mobilisation", low=0, example="350.00", plausible=(0, RATE_MAX * 1000))
    disposal = t.number("disposal_per_m3", low=0, example="60.00", plausible=(0, RATE_MAX))
    if disposal is not None and hull:
        t.problem("disposal_per_m3", "is a rate of the roof bill (the wet layer's volume); a hull survey's bill is "
                  f"priced with {own} (and mobilisation)")
        disposal = None
    if currency is None:
        return None
    return Prices(
        currency=currency.strip(),
        tearoff_rate=rates["tearoff"][0], tearoff_unit=rates["tearoff"][1],
        replace_rate=rates["replace"][0], replace_unit=rates["replace"][1],
        board_each=board, cut_edge_per_m=edge, mobilisation=mobilisation,
        remove_rate=rates["remove"][0], remove_unit=rates["remove"][1],
        recore_rate=rates["recore"][0], recore_unit=rates["recore"][1],
        relaminate_rate=rates["relaminate"][0], relaminate_unit=rates["relaminate"][1],
        fair_rate=rates["fair"][0], fair_unit=rates["fair"][1], scarf_per_m=scarf, disposal_per_m3=disposal,
    )


def _read_limits(t: _Table) -> Limits:
    d = Limits()
    values = {
        "wind_max_m_s": t.number("wind_max_m_s", low=0, low_open=True, high=60, example="6.7"),
        "rain_free_h": t.number("rain_free_h", low=0, high=720, example="24"),
        "dew_margin_c": t.number("dew_margin_c", low=0, high=30, example="3.0"),
        "after_sunset_min_h": t.number("after_sunset_min_h", low=-12, high=12, example="0.0"),
        "after_sunset_max_h": t.number("after_sunset_max_h", low=-12, high=12, example="4.0"),
        "path_max_m": t.number("path_max_m", low=0, high=10_000, example="30"),
        "path_humidity_pct": t.number("path_humidity_pct", low=0, high=100, example="50"),
        "emissivity_tolerance": t.number("emissivity_tolerance", low=0, high=1, example="0.02"),
        "min_pixels_across": t.number("min_pixels_across", low=1, high=100, example="3"),
        "focus_ratio": t.number("focus_ratio", low=0, high=1, example="0.5"),
        "reflection_ratio": t.number("reflection_ratio", low=0, high=1, example="0.5"),
    }
    values = {k: (getattr(d, k) if v is None else v) for k, v in values.items()}
    if values["after_sunset_min_h"] >= values["after_sunset_max_h"]:
        t.problem("after_sunset_max_h", f"= {values['after_sunset_max_h']:g}: expected more than "
                  f"after_sunset_min_h = {values['after_sunset_min_h']:g} (hours after sunset)")
    exclude = t.boolean("exclude_blurred")
    return Limits(**values, exclude_blurred=d.exclude_blurred if exclude is None else exclude)


def _read_cooldown(t: _Table) -> Cooldown:
    d = Cooldown()
    insulation = t.choice("insulation", COOLDOWN_INSULATIONS)
    deck = t.choice("deck", COOLDOWN_DECKS)
    numbers = {
        "insulation_m": t.number("insulation_m", low=0.005, high=1.0, example="0.05"),
        "water_vol_pct": t.number("water_vol_pct", low=0, high=90, example="15"),
        "insulation_k_w_mk": t.number("insulation_k_w_mk", low=0, low_open=True, high=5, example="0.052"),
        "insulation_rho_kg_m3": t.number("insulation_rho_kg_m3", low=0, low_open=True, high=3000, example="160"),
        "insulation_c_j_kgk": t.number("insulation_c_j_kgk", low=0, low_open=True, high=5000, example="1340"),
        "moisture_factor": t.number("moisture_factor", low=0, high=50, example="4"),
        "membrane_m": t.number("membrane_m", low=0.0005, high=0.1, example="0.01"),
        "deck_m": t.number("deck_m", low=0.0002, high=1.0, example="0.001"),
        "absorptance": t.number("absorptance", low=0, high=1, example="0.9"),
        "sun_peak_w_m2": t.number("sun_peak_w_m2", low=0, high=1400, example="700"),
        "air_range_c": t.number("air_range_c", low=0, high=40, example="8"),
        "interior_c": t.number("interior_c", low=-40, high=60, example="20"),
        "window_fraction": t.number("window_fraction", low=0, high=1, low_open=True, high_open=True,
                                    example="0.5"),
    }
    keep = {k: (getattr(d, k) if v is None else v) for k, v in numbers.items()}
    return Cooldown(insulation=insulation, deck=deck or d.deck, sunrise=t.clock("sunrise"), **keep)


_LOGO_SUFFIXES = (".png", ".jpg", ".jpeg", ".svg")


def _read_report(t: _Table, folder: Path) -> tuple[ReportInfo, bool]:
    """The ``[report]`` table and whether ``units`` was written in it."""
    texts = {k: t.text(k) for k in ("client", "address", "job_number", "company", "revision")}
    logo = t.path("logo", folder, example='"plan/logo.png"')
    if logo is not None and logo.suffix.lower() not in _LOGO_SUFFIXES:
        t.problem("logo", f'= "{logo.name}": expected a {", ".join(_LOGO_SUFFIXES)} image')
        logo = None
    issue = _iso_date(t, "issue_date", example='issue_date = "2024-11-20"')
    paper = t.choice("paper", get_args(Paper))
    units = t.choice("units", get_args(UnitSystem))
    info = ReportInfo(**texts, logo=logo, issue_date=issue, paper=paper or "A4", units=units or "metric")
    return info, units is not None


_KEYS: dict[str, tuple[str, ...]] = {
    "report": ("client", "address", "job_number", "company", "logo", "revision", "issue_date", "paper", "units"),
    "limits": ("wind_max_m_s", "rain_free_h", "dew_margin_c", "after_sunset_min_h", "after_sunset_max_h",
               "path_max_m", "path_humidity_pct", "emissivity_tolerance", "min_pixels_across", "focus_ratio",
               "reflection_ratio", "exclude_blurred"),
    "cooldown": ("insulation", "insulation_m", "water_vol_pct", "insulation_k_w_mk", "insulation_rho_kg_m3",
                 "insulation_c_j_kgk", "moisture_factor", "membrane_m", "deck", "deck_m", "absorptance",
                 "sun_peak_w_m2", "sunrise", "air_range_c", "interior_c", "window_fraction"),
    "survey": ("title", "kind", "crs", "site", "date", "surveyor", "side", "allow_outside_paths"),
    "conditions": ("air_c", "humidity_pct", "wind_m_s", "sky", "reflected_c", "sunset", "time",
                   "hours_since_rain", "surface_dry"),
    "camera": ("emissivity", "band_um", "distance_m", "transmittance", "ifov_mrad", "max_view_angle_deg",
               "refractive_index"),
    "plan": ("outline", "exclusions", "sections", "pixel_m", "specular"),
    "mosaic": ("path", "units", "time", "scale", "offset", "origin", "pixel_m"),
    "frame": ("path", "units", "points", "time", "scale", "offset"),
    "detect": ("delta_c", "background_m", "min_area_m2", "tile_px", "background", "edge_buffer_m",
               "exclusion_buffer_m"),
    "cores": ("path", "wet_above", "wet_above_pct", "damp_counts_as"),
    "repair": ("margin_m", "board_m", "include_unverified", "board_angle_deg", "board_origin",
               "replace_above_pct", "area_units"),
    "prices": ("currency", "tearoff_per_m2", "tearoff_per_ft2", "tearoff_per_square", "replace_per_m2",
               "replace_per_ft2", "replace_per_square", "board_each", "cut_edge_per_m", "mobilisation",
               "remove_per_m2", "remove_per_ft2", "remove_per_square", "recore_per_m2", "recore_per_ft2",
               "recore_per_square", "relaminate_per_m2", "relaminate_per_ft2", "relaminate_per_square",
               "fair_per_m2", "fair_per_ft2", "fair_per_square", "scarf_per_m", "disposal_per_m3"),
}


def _table(problems: _Problems, doc: Mapping[str, Any], name: str, *, required: bool) -> _Table | None:
    data = doc.get(name)
    if data is None:
        if required:
            problems.add(name, None, f"table is missing: add a [{name}] table (see the survey format)")
        return None
    if not isinstance(data, dict):
        problems.add(name, None, f"expected a [{name}] table, not [[{name}]] or a value")
        return None
    return _Table(problems, name, data, _KEYS[name])


def _array(problems: _Problems, doc: Mapping[str, Any], name: str) -> list[_Table]:
    data = doc.get(name, [])
    if isinstance(data, dict):
        data = [data]  # a single [mosaic] written as a plain table is accepted as one entry
    if not isinstance(data, list) or not all(isinstance(d, dict) for d in data):
        problems.add(name, None, f"expected one or more [[{name}]] tables")
        return []
    return [_Table(problems, name, d, _KEYS[name], index=i) for i, d in enumerate(data)]


def _top_level_line(text: str, key: str) -> int | None:
    """1-based line of ``key = ...`` written before the first table header."""
    for n, line in enumerate(text.splitlines(), start=1):
        if re.match(r"^\s*\[", line):
            return None
        if re.match(rf"^\s*{re.escape(key)}\s*=", line):
            return n
    return None


def load_survey(folder: str | Path) -> Survey:
    """Read and validate ``folder/survey.toml``.

    Parameters
    ----------
    folder
        The survey folder (or the path of its ``survey.toml``).

    Returns
    -------
    Survey
        Frozen, with every path resolved to an existing file.

    Raises
    ------
    MissingFileError
        The folder or its survey.toml does not exist.
    SurveyError
        Any value is missing, malformed or out of range; ``problems`` lists them all.
    """
    folder = Path(folder)
    if folder.is_file() and folder.name.endswith(".toml"):
        file, folder = folder, folder.parent
    else:
        file = folder / SURVEY_FILE
    if not folder.is_dir():
        raise MissingFileError(f"{folder}: survey folder not found; expected a folder holding {SURVEY_FILE}")
    if not file.is_file():
        raise MissingFileError(f"{file}: not found; expected the survey description {SURVEY_FILE} in {folder}")
    folder = folder.resolve()
    try:
        text = file.read_text(encoding="utf-8", errors="replace")
    except OSError as err:
        raise MissingFileError(f"{file}: cannot be read ({err.strerror or err}); check its permissions") from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise SurveyError(f"{file}: not valid TOML: {err}; fix the syntax at that line") from None
    except RecursionError:
        raise SurveyError(f"{file}: not valid TOML: arrays or tables nested too deeply; fix the file") from None

    problems = _Problems(file, text)
    survey_doc = doc.get("survey")
    problems.allow_outside_paths = isinstance(survey_doc, dict) and survey_doc.get("allow_outside_paths") is True
    for key, value in doc.items():
        if key in _TOP:
            continue
        if isinstance(value, (dict, list)) and (isinstance(value, dict) or all(isinstance(v, dict) for v in value)):
            near = difflib.get_close_matches(key, _TOP, n=1, cutoff=0.6)
            hint = f'; did you mean "[{near[0]}]"?' if near else f"; valid tables: {', '.join(_TOP)}"
            line = problems.line_of(key, None, None)
            at = f" (line {line})" if line else ""
            problems.items.append(f"{file}: [{key}]{at}: unknown table{hint}")
        else:  # a key = value written before the first table header
            owners = [name for name, keys in _KEYS.items() if key in keys]
            hint = (f"; move it under [{owners[0]}]" if len(owners) == 1
                    else f"; it belongs in one of {', '.join(f'[{o}]' for o in owners)}" if owners
                    else f"; valid tables: {', '.join(_TOP)}")
            line = _top_level_line(text, key)
            at = f" (line {line})" if line else ""
            problems.items.append(f"{file}: {key}{at} = {_short(value)}: a key outside any table{hint}")

    t_survey = _table(problems, doc, "survey", required=True)
    info = _read_survey_info(t_survey) if t_survey else None
    t_cond = _table(problems, doc, "conditions", required=True)
    conditions = _read_conditions(t_cond) if t_cond else None
    t_cam = _table(problems, doc, "camera", required=True)
    camera = _read_camera(t_cam) if t_cam else None
    t_plan = _table(problems, doc, "plan", required=True)
    plan = _read_plan(t_plan, folder) if t_plan else None
    mosaics = [_read_mosaic(t, folder) for t in _array(problems, doc, "mosaic")]
    frames = [_read_frame(t, folder) for t in _array(problems, doc, "frame")]
    if not mosaics and not frames:  # also `mosaic = []`, which holds no imagery either
        problems.items.append(
            f"{file}: no imagery: add at least one [[mosaic]] (a raster on the plan grid) "
            "or [[frame]] (a frame placed by control points)"
        )
    kind = info.kind if info else None
    t_det = _table(problems, doc, "detect", required=False)
    detect = _read_detect(t_det, kind) if t_det else Detect(min_area_m2=DEFAULT_MIN_AREA_M2.get(kind or "roof", 0.5))
    t_cores = _table(problems, doc, "cores", required=False)
    cores = _read_cores(t_cores, folder) if t_cores else None
    if t_det and detect.delta_from == "cores" and t_cores is None:
        t_det.problem("delta_c", '= "cores": needs cores; add a [cores] table with path = "cores.csv", '
                                 "or give delta_c a number")
    t_rep = _table(problems, doc, "repair", required=False)
    repair = _read_repair(t_rep) if t_rep else Repair()
    if kind == "hull" and (t_rep is None or "board_m" not in t_rep.data):
        repair = replace(repair, board_m=None)  # a hull is cut back to dry core: no board take-off unless asked
    if kind == "hull" and t_rep is not None and "squares" in repair.area_units:
        t_rep.problem("area_units", '= ... "squares": roofing squares are not a hull unit; use "m2" and "ft2"')
    t_lim = _table(problems, doc, "limits", required=False)
    limits = _read_limits(t_lim) if t_lim else Limits()
    t_cool = _table(problems, doc, "cooldown", required=False)
    cooldown = _read_cooldown(t_cool) if t_cool else Cooldown()
    t_prices = _table(problems, doc, "prices", required=False)
    prices = _read_prices(t_prices, kind) if t_prices else None

    t_report = _table(problems, doc, "report", required=False)
    report, units_given = _read_report(t_report, folder) if t_report else (ReportInfo(), False)
    # one unit setting: an imperial report lists ft2 (and squares on a roof) wherever areas are listed,
    # and area units beyond m2 make the report imperial unless [report] units says otherwise
    if report.units == "imperial" and (t_rep is None or "area_units" not in t_rep.data):
        repair = replace(repair, area_units=("m2", "ft2") if kind == "hull" else ("m2", "ft2", "squares"))
    elif not units_given and len(repair.area_units) > 1:
        report = replace(report, units="imperial")
    elif report.units == "imperial" and "ft2" not in repair.area_units and t_rep is not None:
        t_rep.problem("area_units", f'= {_short(list(repair.area_units))}: [report] units = "imperial" reports '
                      'areas in ft2; add "ft2" to area_units or remove area_units')

    if problems.items:
        raise SurveyError([_one_line(p) for p in problems.items])
    assert info and conditions and camera and plan  # guaranteed when no problem was recorded
    return Survey(
        folder=folder,
        file=file.resolve(),
        survey=info,
        conditions=conditions,
        camera=camera,
        plan=plan,
        mosaics=tuple(m for m in mosaics if m is not None),
        frames=tuple(f for f in frames if f is not None),
        detect=detect,
        cores=cores,
        repair=repair,
        limits=limits,
        cooldown=cooldown,
        prices=prices,
        report=report,
    )

