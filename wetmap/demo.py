"""Invented demo surveys with a known truth.

Everything in this module is **invented demo data**: an invented warehouse on an
arbitrary spot of a projected grid, invented conditions, invented cores. It serves two
purposes:

* to build the bundled sample survey ``sample_surveys/warehouse_roof`` (run
  ``python -m wetmap.demo sample_surveys/warehouse_roof`` to regenerate it), and
* to give tests a synthetic survey whose true wet outlines are known exactly.

The scene is laid out in *roof coordinates* ``u, v`` (metres from the lower-left
corner of the roof outline, ``u`` along the long side, ``v`` along the short side) and
then placed on the plan: ``(x, y) = origin_xy + R(rotation_deg) @ (u, v)``. The raster
grid follows the roof, so a non-zero ``rotation_deg`` gives a rotated raster transform.
Pixel values refer to pixel centres: pixel ``(row, col)`` covers the roof coordinates
``u = -margin + (col + 0.5) * pixel_m``, ``v = size_v + margin - (row + 0.5) * pixel_m``
at its centre.

The scenario (roof coordinates, metres; all values invented):

* roof outline 60 x 40 m with a 12 x 8 m notch at the upper-right corner (a loading bay);
* section "A" (u < 24) over the heated office block, section "B" over the warehouse;
* a dry-membrane background that falls 1 degC over the 60 m length (warmer over the
  heated offices), which a good background estimate must follow;
* three wet areas: an 8 x 5 m rectangle (cored wet), an L-shape (cored wet), and a small
  2 x 1.5 m patch rotated by 25 degrees (not cored: stays "unverified");
* a warm but dry patch of extra membrane plies (cored dry: "refuted");
* a hot rooftop unit (about 40 degC) and a cold skylight, both listed as exclusions;
* outside the outline a warm parapet strip and colder ground; a 1.5 m strip of nodata
  along the east edge of the raster.

Examples
--------
>>> scene = RoofScene(pixel_m=0.5)
>>> apparent, truth = render_roof(scene)
>>> apparent.shape == truth.surface_c.shape
True
>>> round(sum(p.area for p in truth.wet), 1)  # m2, invented demo data
96.0
"""

from __future__ import annotations

import csv
import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import affine
import numpy as np
import shapely
from shapely import affinity
from shapely.geometry import Polygon, box

__all__ = [
    "RoofScene",
    "RoofTruth",
    "DemoCore",
    "render_roof",
    "write_roof_survey",
    "main",
    "MARGIN_M",
    "NODATA_FLOAT",
    "NODATA_UINT16",
]

#: Raster margin beyond the roof outline on every side, metres (invented demo value).
MARGIN_M = 3.0
#: Nodata value of float32 demo rasters.
NODATA_FLOAT = -9999.0
#: Nodata value of uint16 demo rasters (raw count 0 never occurs in valid pixels).
NODATA_UINT16 = 0
#: Width of the nodata strip along the east edge of the raster, metres.
NODATA_STRIP_M = 1.5

_KELVIN = 273.15

# ----- the invented scenario, in roof coordinates (metres); invented demo data -----
_NOTCH_UV = (48.0, 32.0)                       # notch = u >= 48, v >= 32 (of a 60 x 40 roof)
_SECTION_SPLIT_U = 24.0                        # section A: u < 24 (over heated offices)
_GRADIENT_C = 1.0                              # dry background falls 1 degC over the roof length
_PLIES_FRACTION = 0.7                          # extra plies: 0.7 x wet_excess_c above dry
_UNIT_C = 40.0                                 # rooftop unit casing, degC
_SKYLIGHT_BELOW_C = 5.0                        # skylight: this much below dry_c
_PARAPET_ABOVE_C = 2.0                         # parapet cap: above dry_c
_GROUND_BELOW_C = 3.0                          # ground around the building: below dry_c
_PARAPET_M = 0.4                               # parapet strip width outside the outline
_BLUR_PX = 1.0                                 # Gaussian sigma softening plateau edges, pixels
_SUPERSAMPLE = 4                               # sub-pixels per pixel side for area coverage


def _wet_areas_uv() -> list[Polygon]:
    rect = box(8.0, 6.0, 16.0, 11.0)                                    # 8 x 5 m = 40 m2
    ell = shapely.union(box(30.0, 18.0, 38.0, 22.0), box(30.0, 22.0, 33.5, 28.0))  # 53 m2
    ell = shapely.normalize(shapely.simplify(ell, 0.0))  # drop the collinear vertex at the seam
    small = affinity.rotate(box(51.0, 8.25, 53.0, 9.75), 25.0, origin="centroid")  # 2 x 1.5 m
    return [rect, Polygon(ell.exterior.coords), small]


def _plies_uv() -> list[Polygon]:
    return [box(42.0, 24.0, 46.0, 27.0)]                                # 4 x 3 m, warm but dry


_UNIT_UV = box(40.0, 8.0, 43.0, 10.5)          # rooftop unit casing
_UNIT_CURB_M = 0.5                             # exclusion = casing + curb
_SKYLIGHT_UV = box(12.0, 28.0, 14.0, 30.0)
_SKYLIGHT_CURB_M = 0.3

# id, u, v, result, depth_mm, notes   (invented demo data)
_CORES_UV = (
    ("C1", 12.0, 8.5, "wet", 75, "perlite board saturated (invented)"),
    ("C2", 31.5, 20.0, "wet", 80, "wood fibreboard wet at the deck (invented)"),
    ("C3", 44.0, 25.5, "dry", 90, "four extra plies over dry board (invented)"),
    ("C4", 4.0, 34.0, "dry", 75, "dry field in section A (invented)"),
    ("C5", 54.0, 22.0, "dry", 80, "dry field in section B (invented)"),
)


@dataclass(frozen=True)
class RoofScene:
    """An invented warehouse roof; every length in plan metres in the survey CRS.

    All defaults are invented demo values.

    Parameters
    ----------
    crs
        Survey CRS (a projected CRS in metres), or ``"local"``.
    origin_xy
        Plan x, y of the lower-left corner of the roof outline (an arbitrary spot).
    size_m
        Roof outline size (u along x, v along y before rotation), metres.
    pixel_m
        Raster pixel size, metres.
    rotation_deg
        Counter-clockwise rotation of the roof and of its raster grid about
        ``origin_xy``; non-zero gives a rotated raster transform.
    dry_c, wet_excess_c, noise_c
        Mean dry-membrane surface temperature, the wet plateau above it, and the
        standard deviation of the Gaussian noise added to the surface field, degC.
    seed
        Seed of the noise.
    emissivity, reflected_c
        Surface emissivity; reflected apparent temperature written as
        ``[conditions] reflected_c`` (``None``: omitted, and the rendering uses the
        estimate from sky and air; see :attr:`reflected_render_c`).
    air_c, humidity_pct, wind_m_s, sky
        Conditions written to ``survey.toml``.
    dtype, units
        Pixel type and apparent-temperature units of the mosaic. ``uint16`` stores raw
        counts of 0.01 K (units ``"K"`` or ``"C"``) or 0.01 degR (units ``"F"``) with
        ``value = raw * scale + offset``; see :attr:`scale_offset`.
    notch
        Cut a 12 x 8 m notch (a loading bay) out of the upper-right corner of the
        outline (scaled with ``size_m``).
    """

    crs: str = "EPSG:32633"
    origin_xy: tuple[float, float] = (512_300.0, 5_463_100.0)
    size_m: tuple[float, float] = (60.0, 40.0)
    pixel_m: float = 0.10
    rotation_deg: float = 0.0
    dry_c: float = 4.0
    wet_excess_c: float = 2.5
    noise_c: float = 0.15
    seed: int = 1
    emissivity: float = 0.94
    reflected_c: float | None = -20.0
    air_c: float = 6.0
    humidity_pct: float = 70.0
    wind_m_s: float = 2.0
    sky: str = "clear"
    dtype: Literal["float32", "uint16"] = "float32"
    units: Literal["C", "K", "F"] = "C"
    notch: bool = True

    def __post_init__(self) -> None:
        if self.dtype not in ("float32", "uint16"):
            raise ValueError(f"RoofScene dtype = {self.dtype!r}: expected 'float32' or 'uint16'")
        if self.units not in ("C", "K", "F"):
            raise ValueError(f"RoofScene units = {self.units!r}: expected 'C', 'K' or 'F'")
        if not self.pixel_m > 0:
            raise ValueError(f"RoofScene pixel_m = {self.pixel_m}: expected > 0")
        if not (self.size_m[0] > 0 and self.size_m[1] > 0):
            raise ValueError(f"RoofScene size_m = {self.size_m}: expected two positive lengths")

    @property
    def scale_offset(self) -> tuple[float, float]:
        """``(scale, offset)`` with ``value = raw * scale + offset`` in :attr:`units`.

        ``(1.0, 0.0)`` for float32. For uint16 the raw count is the absolute temperature
        in hundredths of a kelvin (units C or K) or of a degree Rankine (units F).
        """
        if self.dtype == "float32":
            return 1.0, 0.0
        return 0.01, {"K": 0.0, "C": -_KELVIN, "F": -459.67}[self.units]

    @property
    def nodata(self) -> float:
        """The raster's nodata value (in raw pixel values)."""
        return float(NODATA_UINT16) if self.dtype == "uint16" else NODATA_FLOAT

    @property
    def reflected_render_c(self) -> float:
        """Reflected apparent temperature used to render the raster, degC.

        ``reflected_c`` when given; otherwise the estimate from air, humidity and sky
        of :func:`wetmap.conditions.estimate_reflected_c` (open roof, sky view 1).
        """
        if self.reflected_c is not None:
            return self.reflected_c
        from .conditions import estimate_reflected_c

        return estimate_reflected_c(self.air_c, self.humidity_pct, self.sky).reflected_c

    @property
    def grid_shape(self) -> tuple[int, int]:
        """``(rows, cols)`` of the raster: the outline plus :data:`MARGIN_M` each side."""
        w, h = self.size_m
        cols = math.ceil((w + 2 * MARGIN_M) / self.pixel_m - 1e-9)
        rows = math.ceil((h + 2 * MARGIN_M) / self.pixel_m - 1e-9)
        return rows, cols

    @property
    def plan_from_roof(self) -> affine.Affine:
        """Affine map from roof coordinates ``(u, v)`` to plan ``(x, y)``."""
        return affine.Affine.translation(*self.origin_xy) @ affine.Affine.rotation(self.rotation_deg)

    @property
    def transform(self) -> affine.Affine:
        """Raster transform: ``(col, row)`` of a pixel corner -> plan ``(x, y)``."""
        return (
            self.plan_from_roof
            @ affine.Affine.translation(-MARGIN_M, self.size_m[1] + MARGIN_M)
            @ affine.Affine.scale(self.pixel_m, -self.pixel_m)
        )


@dataclass(frozen=True)
class DemoCore:
    """One invented confirmation core, in plan coordinates."""

    id: str
    x: float
    y: float
    result: Literal["wet", "dry"]
    depth_mm: int
    notes: str


@dataclass(frozen=True)
class RoofTruth:
    """What the demo roof really is (invented demo data), in plan coordinates.

    Attributes
    ----------
    wet
        True wet-insulation outlines.
    refuted
        Warm but dry patches (extra membrane plies); each holds a dry core.
    exclusions
        Rooftop unit and skylight (with curb), as written to ``plan/exclusions.geojson``.
    outline
        The roof outline.
    surface_c
        True surface temperature, degC, shape ``(rows, cols)`` of the raster, NaN where
        the raster holds nodata. It includes the rendered noise: inverting the apparent
        raster returns exactly this field.
    transform
        The raster transform (pixel corner ``(col, row)`` -> plan ``(x, y)``).
    sections
        Roof sections by name, covering the outline.
    cores
        The confirmations written to ``cores.csv``.
    background_c
        Noise-free dry-membrane background (the gradient), degC, same shape, NaN off
        the roof.
    """

    wet: list[Polygon]
    refuted: list[Polygon]
    exclusions: list[Polygon]
    outline: Polygon
    surface_c: np.ndarray
    transform: affine.Affine
    sections: dict[str, Polygon] = field(default_factory=dict)
    cores: list[DemoCore] = field(default_factory=list)
    background_c: np.ndarray | None = None

    @property
    def wet_area_m2(self) -> float:
        """Total true wet area, m2."""
        return float(sum(p.area for p in self.wet))


# --------------------------------------------------------------------------------------
# Rendering
# --------------------------------------------------------------------------------------


def _scene_uv(scene: RoofScene) -> dict:
    """The scenario's geometries in roof coordinates, scaled to ``scene.size_m``."""
    w, h = scene.size_m
    sx, sy = w / 60.0, h / 40.0

    def fit(g):
        return g if (sx, sy) == (1.0, 1.0) else affinity.scale(g, sx, sy, origin=(0, 0))

    outline = box(0.0, 0.0, w, h)
    if scene.notch:
        outline = Polygon(shapely.difference(outline, fit(box(*_NOTCH_UV, 60.0, 40.0))).exterior.coords)
        outline = shapely.normalize(outline)
    split = _SECTION_SPLIT_U * sx
    sections = {
        "A": shapely.normalize(shapely.intersection(outline, box(0.0, 0.0, split, h))),
        "B": shapely.normalize(shapely.intersection(outline, box(split, 0.0, w, h))),
    }
    unit = fit(_UNIT_UV)
    skylight = fit(_SKYLIGHT_UV)
    return {
        "outline": outline,
        "sections": sections,
        "wet": [fit(p) for p in _wet_areas_uv()],
        "refuted": [fit(p) for p in _plies_uv()],
        "unit": unit,
        "skylight": skylight,
        "exclusions": [
            shapely.normalize(unit.buffer(_UNIT_CURB_M, join_style="mitre")),
            shapely.normalize(skylight.buffer(_SKYLIGHT_CURB_M, join_style="mitre")),
        ],
        "cores": [(cid, u * sx, v * sy, res, d, n) for cid, u, v, res, d, n in _CORES_UV],
    }


def _coverage(geom, scene: RoofScene) -> np.ndarray:
    """Fraction of each pixel covered by ``geom`` (roof coordinates), shape ``grid_shape``."""
    from rasterio import features

    rows, cols = scene.grid_shape
    ss = _SUPERSAMPLE
    fine = affine.Affine.translation(-MARGIN_M, scene.size_m[1] + MARGIN_M) @ affine.Affine.scale(
        scene.pixel_m / ss, -scene.pixel_m / ss
    )
    mask = features.rasterize(
        [(geom, 1)], out_shape=(rows * ss, cols * ss), transform=fine, fill=0, dtype="uint8"
    )
    return mask.reshape(rows, ss, cols, ss).mean(axis=(1, 3))


def _soft(geoms, scene: RoofScene) -> np.ndarray:
    """Coverage of ``geoms`` with edges softened by a Gaussian of ``_BLUR_PX`` pixels."""
    from scipy import ndimage

    cover = _coverage(shapely.union_all(geoms), scene)
    return np.clip(ndimage.gaussian_filter(cover, _BLUR_PX, mode="nearest"), 0.0, 1.0)


def _to_plan(geom, scene: RoofScene):
    t = scene.plan_from_roof
    return shapely.normalize(affinity.affine_transform(geom, [t.a, t.b, t.d, t.e, t.c, t.f]))


def render_roof(scene: RoofScene) -> tuple[np.ndarray, RoofTruth]:
    """Render the invented roof as an apparent-temperature raster with its truth.

    Parameters
    ----------
    scene
        The scene description.

    Returns
    -------
    apparent : numpy.ndarray
        Shape ``(rows, cols)`` = ``scene.grid_shape``; apparent temperature in
        ``scene.units`` (float32), or raw counts (uint16, ``value = raw * scale +
        offset``, see :attr:`RoofScene.scale_offset`). Pixels in the east nodata strip
        hold ``scene.nodata``.
    truth : RoofTruth
        The true geometry (plan coordinates) and surface temperature field.

    Notes
    -----
    The surface field is converted to apparent temperature with
    :func:`wetmap.radiometry.apparent_from_surface` (transmittance 1, reflected
    apparent temperature :attr:`RoofScene.reflected_render_c`).
    """
    from .radiometry import apparent_from_surface

    rows, cols = scene.grid_shape
    uv = _scene_uv(scene)
    w, h = scene.size_m
    p = scene.pixel_m
    u = -MARGIN_M + (np.arange(cols) + 0.5) * p  # pixel-centre roof coordinates
    v = h + MARGIN_M - (np.arange(rows) + 0.5) * p

    # Layers, back to front: ground, parapet, roof membrane (with gradient), anomalies.
    background = scene.dry_c + _GRADIENT_C * (0.5 - u / w)  # degC along u, warm over offices
    background = np.broadcast_to(background, (rows, cols))
    roof = _coverage(uv["outline"], scene)
    parapet = _coverage(
        shapely.difference(uv["outline"].buffer(_PARAPET_M, join_style="mitre"), uv["outline"]), scene
    )
    surface = np.full((rows, cols), scene.dry_c - _GROUND_BELOW_C)
    surface += parapet * ((scene.dry_c + _PARAPET_ABOVE_C) - surface)
    surface += roof * (background - surface)
    surface += scene.wet_excess_c * _soft(uv["wet"], scene) * roof
    surface += _PLIES_FRACTION * scene.wet_excess_c * _soft(uv["refuted"], scene) * roof
    unit = _soft([uv["unit"]], scene)
    surface += unit * (_UNIT_C - surface)
    sky = _soft([uv["skylight"]], scene)
    surface += sky * ((scene.dry_c - _SKYLIGHT_BELOW_C) - surface)
    surface += np.random.default_rng(scene.seed).normal(0.0, scene.noise_c, size=(rows, cols))

    valid = np.broadcast_to(u < w + MARGIN_M - NODATA_STRIP_M, (rows, cols))
    surface = np.where(valid, surface, np.nan)

    apparent_k = np.asarray(
        apparent_from_surface(
            surface + _KELVIN,
            emissivity=scene.emissivity,
            reflected_k=scene.reflected_render_c + _KELVIN,
            transmittance=1.0,
        ),
        dtype=float,
    )
    if scene.units == "K":
        value = apparent_k
    elif scene.units == "C":
        value = apparent_k - _KELVIN
    else:
        value = (apparent_k - _KELVIN) * 9.0 / 5.0 + 32.0
    if scene.dtype == "float32":
        out = np.where(valid, value, NODATA_FLOAT).astype(np.float32)
    else:
        scale, offset = scene.scale_offset
        raw = np.rint((np.where(valid, value, offset) - offset) / scale)
        out = np.where(valid, np.clip(raw, 1, 65535), NODATA_UINT16).astype(np.uint16)

    background_c = np.where((roof > 0.999) & valid, background, np.nan)
    cores = [
        DemoCore(cid, *(scene.plan_from_roof @ (cu, cv)), res, d, n)
        for cid, cu, cv, res, d, n in uv["cores"]
    ]
    truth = RoofTruth(
        wet=[_to_plan(g, scene) for g in uv["wet"]],
        refuted=[_to_plan(g, scene) for g in uv["refuted"]],
        exclusions=[_to_plan(g, scene) for g in uv["exclusions"]],
        outline=_to_plan(uv["outline"], scene),
        surface_c=surface,
        transform=scene.transform,
        sections={k: _to_plan(g, scene) for k, g in uv["sections"].items()},
        cores=cores,
        background_c=background_c,
    )
    return out, truth


# --------------------------------------------------------------------------------------
# Writing the survey folder
# --------------------------------------------------------------------------------------


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)  # JSON string escapes are valid TOML
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {value!r} as TOML")


def _toml_table(name: str, items: dict, *, array: bool = False) -> str:
    head = f"[[{name}]]" if array else f"[{name}]"
    lines = [head] + [f"{k} = {_toml_value(v)}" for k, v in items.items() if v is not None]
    return "\n".join(lines) + "\n"


def _write_geojson(path: Path, crs: str, features: list[tuple[Polygon, dict]]) -> None:
    doc: dict = {"type": "FeatureCollection", "name": path.stem}
    if crs != "local":
        code = crs.split(":", 1)
        # the "crs" member (GeoJSON 2008 form) tells GDAL the plan coordinates' CRS
        doc["crs"] = {"type": "name", "properties": {"name": f"urn:ogc:def:crs:{code[0]}::{code[1]}"}}
    doc["features"] = [
        {"type": "Feature", "properties": props, "geometry": shapely.geometry.mapping(geom)}
        for geom, props in features
    ]
    text = json.dumps(doc)
    path.write_text(text + "\n", encoding="utf-8")


def _write_raster(path: Path, data: np.ndarray, scene: RoofScene) -> None:
    import rasterio

    profile = dict(
        driver="GTiff",
        width=data.shape[1],
        height=data.shape[0],
        count=1,
        dtype=data.dtype.name,
        crs=None if scene.crs == "local" else scene.crs,
        transform=scene.transform,
        nodata=scene.nodata,
        tiled=True,
        blockxsize=256,
        blockysize=256,
        compress="deflate",
        predictor=3 if data.dtype == np.float32 else 2,
    )
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(data, 1)
        dst.update_tags(wetmap_demo="invented demo data", units=scene.units)


def write_roof_survey(
    folder: str | Path, scene: RoofScene = RoofScene(), *, title: str = "Invented warehouse roof"
) -> RoofTruth:
    """Write the invented roof as a complete survey folder (see the survey format).

    Parameters
    ----------
    folder
        Created if missing. Files this function writes are overwritten; anything
        else in the folder (e.g. ``results/``) is left alone.
    scene
        The scene.
    title
        ``[survey] title``.

    Returns
    -------
    RoofTruth
        The truth of what was written.
    """
    folder = Path(folder)
    for sub in ("plan", "thermal"):
        (folder / sub).mkdir(parents=True, exist_ok=True)
    data, truth = render_roof(scene)

    # --- plan ---
    _write_geojson(folder / "plan" / "outline.geojson", scene.crs,
                   [(truth.outline, {"name": "invented warehouse roof"})])
    _write_geojson(folder / "plan" / "exclusions.geojson", scene.crs, [
        (truth.exclusions[0], {"name": "RTU-1", "kind": "rooftop unit"}),
        (truth.exclusions[1], {"name": "SK-1", "kind": "skylight"}),
    ])
    assemblies = {
        "A": ("built-up roof on perlite board", "perlite"),
        "B": ("built-up roof on wood fibreboard", "wood fibre"),
    }
    _write_geojson(folder / "plan" / "sections.geojson", scene.crs, [
        (geom, {"name": name, "assembly": assemblies[name][0], "insulation": assemblies[name][1]})
        for name, geom in truth.sections.items()
    ])

    # --- thermal ---
    mosaic = folder / "thermal" / "roof_pass1.tif"
    _write_raster(mosaic, data, scene)

    # --- cores ---
    with open(folder / "cores.csv", "w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f, lineterminator="\n")
        writer.writerow(["id", "x", "y", "result", "depth_mm", "notes"])
        for c in truth.cores:
            writer.writerow([c.id, f"{c.x:.3f}", f"{c.y:.3f}", c.result, c.depth_mm, c.notes])

    # --- survey.toml ---
    scale, offset = scene.scale_offset
    mosaic_items: dict = {"path": "thermal/roof_pass1.tif", "units": scene.units, "time": "19:55"}
    if scene.dtype == "uint16":
        mosaic_items.update(scale=scale, offset=offset)
    text = "\n".join([
        "# Invented demo survey written by wetmap.demo: an invented warehouse, invented data.",
        "# Written by `python -m wetmap.demo FOLDER` (see sample_surveys/README.md).",
        "",
        _toml_table("survey", {
            "title": title, "kind": "roof", "crs": scene.crs, "site": "invented demo site",
            "date": "2024-11-12", "surveyor": "demo surveyor (invented)",
        }),
        _toml_table("conditions", {
            "air_c": scene.air_c, "humidity_pct": scene.humidity_pct, "wind_m_s": scene.wind_m_s,
            "sky": scene.sky, "reflected_c": scene.reflected_c, "sunset": "16:40", "time": "19:55",
            "hours_since_rain": 72, "surface_dry": True,
        }),
        _toml_table("camera", {"emissivity": scene.emissivity}),
        _toml_table("plan", {
            "outline": "plan/outline.geojson", "exclusions": "plan/exclusions.geojson",
            "sections": "plan/sections.geojson",
        }),
        _toml_table("mosaic", mosaic_items, array=True),
        _toml_table("detect", {"delta_c": 1.0}),
        _toml_table("cores", {"path": "cores.csv"}),
        _toml_table("repair", {"margin_m": 0.3, "board_m": [1.2, 2.4]}),
    ])
    (folder / "survey.toml").write_text(text, encoding="utf-8")
    return truth


def main(argv: list[str] | None = None) -> int:
    """``python -m wetmap.demo FOLDER``: write the invented warehouse roof survey."""
    import argparse

    parser = argparse.ArgumentParser(
        prog="python -m wetmap.demo",
        description="Write the invented warehouse roof demo survey (invented demo data).",
    )
    parser.add_argument("folder", type=Path, help="survey folder to write, e.g. sample_surveys/warehouse_roof")
    args = parser.parse_args(argv)
    write_roof_survey(args.folder)
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
