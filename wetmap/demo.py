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

import warnings
import argparse
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

from .export.tables import spreadsheet_cell
from .conditions import estimate_reflected_c
from .radiometry import apparent_from_surface

__all__ = [
    "RoofScene",
    "RoofTruth",
    "DemoCore",
    "render_roof",
    "write_roof_survey",
    "CameraStation",
    "DemoFrame",
    "render_frame",
    "WalkedRoofScene",
    "render_walked_roof",
    "write_walked_roof_survey",
    "WALKED_IMAGERY_FAULTS",
    "HullScene",
    "HullTruth",
    "DemoReading",
    "render_hull",
    "write_hull_survey",
    "SKY_APPARENT_C",
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

# The core log's optional columns per core: layers found (build-up), thickness of the wet
# layer removed (mm; wet cores only) and a photo (invented demo data, drawn by _write_photos).
_CORE_LOG = {
    "C1": ("membrane / 75 mm perlite board / steel deck", "75", "photos/c1.jpg"),
    "C2": ("membrane / 80 mm wood fibreboard / concrete deck", "80", ""),
    "C3": ("membrane + 4 extra plies / 90 mm perlite board / steel deck", "", "photos/c3.jpg"),
    "C4": ("membrane / 75 mm perlite board / steel deck", "", ""),
    "C5": ("membrane / 80 mm wood fibreboard / concrete deck", "", ""),
}
# photos.csv: a site photo taken beside a core (plan metres from it), tied to the nearest
# anomaly (invented demo data).
_SITE_PHOTOS = (("photos/site1.jpg", "C2", -0.5, -1.5, "stained membrane over the wet area (invented)"),)


def _write_photos(folder: Path, cores: "list[DemoCore]") -> None:
    """Small invented photos of the demo roof (drawn here; no real photo): two core sections and
    one site view, JPEG, written under ``photos/`` with ``photos.csv``."""
    from PIL import Image, ImageDraw, ImageFilter

    rng = np.random.default_rng(17)
    out = folder / "photos"
    out.mkdir(parents=True, exist_ok=True)
    w, h = 480, 360
    for cid, wet in (("C1", True), ("C3", False)):
        im = Image.new("RGB", (w, h), (214, 206, 190))  # a cut core lying on a cloth
        d = ImageDraw.Draw(im)
        x0, x1 = 150, 330
        layers = [(40, 70, (60, 60, 64))] + ([(70, 96, (45, 45, 48))] if not wet else [])
        top = layers[-1][1]
        ins = (150, 128, 96) if wet else (226, 204, 160)  # wet perlite is darker
        layers += [(top, top + 150, ins), (top + 150, top + 175, (150, 158, 170))]
        for y0, y1, colour in layers:
            d.rectangle((x0, y0, x1, y1), fill=colour)
        if wet:  # droplets on the cut face
            for _ in range(40):
                cx, cy = rng.uniform(x0 + 8, x1 - 8), rng.uniform(top + 10, top + 140)
                d.ellipse((cx - 3, cy - 3, cx + 3, cy + 3), fill=(95, 82, 62))
        d.text((12, 12), f"core {cid} (invented demo image)", fill=(20, 20, 20))
        noise = rng.normal(0, 6, (h, w, 1))
        arr = np.clip(np.asarray(im, dtype=float) + noise, 0, 255).astype(np.uint8)
        Image.fromarray(arr).filter(ImageFilter.GaussianBlur(0.6)).save(out / f"{cid.lower()}.jpg", quality=80)
    base = np.full((h, w, 3), (150, 152, 150), dtype=float) + rng.normal(0, 9, (h, w, 1))  # grey membrane
    yy, xx = np.mgrid[0:h, 0:w]
    stain = np.exp(-(((xx - 250) / 120.0) ** 2 + ((yy - 200) / 70.0) ** 2))
    base -= stain[..., None] * np.array([55.0, 50.0, 40.0])
    im = Image.fromarray(np.clip(base, 0, 255).astype(np.uint8))
    d = ImageDraw.Draw(im)
    d.ellipse((360, 80, 400, 120), fill=(70, 70, 72), outline=(30, 30, 30))  # a drain
    d.text((12, 12), "site view (invented demo image)", fill=(20, 20, 20))
    im.filter(ImageFilter.GaussianBlur(0.8)).save(out / "site1.jpg", quality=80)
    with open(folder / "photos.csv", "w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f, lineterminator="\n")
        writer.writerow(["photo", "x", "y", "caption"])
        at = {c.id: (c.x, c.y) for c in cores}
        for name, cid, dx, dy, caption in _SITE_PHOTOS:
            if cid in at:
                writer.writerow([name, f"{at[cid][0] + dx:.3f}", f"{at[cid][1] + dy:.3f}", caption])


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
    rows, cols = scene.grid_shape
    uv = _scene_uv(scene)
    w, h = scene.size_m
    p = scene.pixel_m
    u = -MARGIN_M + (np.arange(cols) + 0.5) * p  # pixel-centre roof coordinates

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
        writer.writerow(["id", "x", "y", "result", "depth_mm", "notes", "layers", "thickness_mm", "photo"])
        for c in truth.cores:
            log = _CORE_LOG.get(c.id, ("", "", ""))
            writer.writerow([spreadsheet_cell(v) for v in (c.id, f"{c.x:.3f}", f"{c.y:.3f}", c.result, c.depth_mm,
                                                           c.notes, *log)])
    _write_photos(folder, truth.cores)

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


# --------------------------------------------------------------------------------------
# Frames placed by control points: a walked roof and a hull side (invented demo data)
# --------------------------------------------------------------------------------------
#
# A camera station is a pinhole camera above a plane: the roof plane (scene coordinates
# u, v on the roof, height above it) or the developed side of a hull (station, girth,
# stand-off from the hull). The scene plane is z = 0, the camera on the z > 0 side.
# Image coordinates are pixel-index coordinates: whole numbers are pixel centres, as in
# :mod:`wetmap.register`.

#: Apparent temperature of the night sky seen by a frame above the horizon, degC (invented).
SKY_APPARENT_C = -35.0


@dataclass(frozen=True)
class CameraStation:
    """An invented camera pose for one frame (pinhole camera, square pixels).

    Parameters
    ----------
    position
        Camera centre: scene ``u, v`` (metres on the surface plane) and its height
        above (stand-off from) that plane, metres.
    target
        Scene ``u, v`` of the surface point on the optical axis.
    size_px
        ``(cols, rows)`` of the frame.
    hfov_deg
        Horizontal field of view, degrees.
    up
        Scene direction that points up in the image: ``(0, 0, 1)`` (away from the
        plane) for a camera looking down at a roof, ``(0, 1, 0)`` (girth up) for a
        camera looking at a hull side.
    """

    position: tuple[float, float, float]
    target: tuple[float, float]
    size_px: tuple[int, int] = (160, 120)
    hfov_deg: float = 50.0
    up: tuple[float, float, float] = (0.0, 0.0, 1.0)

    @classmethod
    def aimed(cls, u: float, v: float, *, height_m: float, heading_deg: float, tilt_deg: float,
              **kwargs) -> "CameraStation":
        """A roof camera at ``(u, v)``, ``height_m`` up, looking towards ``heading_deg``
        (anticlockwise from +u) with its axis ``tilt_deg`` from straight down."""
        reach = height_m * math.tan(math.radians(tilt_deg))
        a = math.radians(heading_deg)
        return cls(position=(u, v, height_m), target=(u + reach * math.cos(a), v + reach * math.sin(a)), **kwargs)

    def scene_to_image(self) -> np.ndarray:
        """``(3, 3)`` homography: scene ``(u, v, 1)`` on the plane -> image ``(col, row)``."""
        centre = np.asarray(self.position, dtype=float)
        forward = np.array([self.target[0], self.target[1], 0.0]) - centre
        forward /= np.linalg.norm(forward)
        right = np.cross(forward, np.asarray(self.up, dtype=float))
        right /= np.linalg.norm(right)
        down = np.cross(forward, right)
        rot = np.vstack([right, down, forward])
        cols, rows = self.size_px
        focal = (cols / 2.0) / math.tan(math.radians(self.hfov_deg) / 2.0)
        k = np.array([[focal, 0.0, (cols - 1) / 2.0], [0.0, focal, (rows - 1) / 2.0], [0.0, 0.0, 1.0]])
        p = k @ np.hstack([rot, (-rot @ centre)[:, None]])
        return p[:, [0, 1, 3]]


@dataclass(frozen=True)
class DemoFrame:
    """One rendered frame (invented demo data).

    Attributes
    ----------
    name
        File name stem, e.g. ``"f01"``.
    fmt
        ``"png"`` (16-bit counts of 0.01 K), ``"tif"`` (float32 degC, no transform),
        ``"npy"`` (float32 degC) or ``"csv"`` (degC, 2 decimals).
    apparent_c
        Apparent temperature, degC, ``(rows, cols)``.
    points
        Control points ``(col, row, x, y)``: picked image pixel -> plan metres.
    plan_to_image
        The true ``(3, 3)`` homography plan ``(x, y)`` -> image ``(col, row)``.
    """

    name: str
    fmt: str
    apparent_c: np.ndarray
    points: tuple[tuple[float, float, float, float], ...]
    plan_to_image: np.ndarray


def _affine3(t: affine.Affine) -> np.ndarray:
    return np.array([[t.a, t.b, t.c], [t.d, t.e, t.f], [0.0, 0.0, 1.0]])


def render_frame(station: CameraStation, field_c: np.ndarray, field_transform: affine.Affine, *,
                 plan_from_scene: affine.Affine, emissivity: float, reflected_c: float, outside_c: float,
                 noise_c: float, rng: np.random.Generator, supersample: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """Render what a camera station sees of a surface-temperature field.

    Parameters
    ----------
    station
        The camera (scene coordinates).
    field_c
        True surface temperature, degC, ``(rows, cols)`` raster; NaN = not part of it.
    field_transform
        Pixel corner ``(col, row)`` of ``field_c`` -> plan ``(x, y)``.
    plan_from_scene
        Scene ``(u, v)`` -> plan ``(x, y)``.
    emissivity, reflected_c
        Surface emissivity and reflected apparent temperature (degC) for
        :func:`wetmap.radiometry.apparent_from_surface` (transmittance 1).
    outside_c
        Surface temperature where the field has no value (surroundings), degC.
    noise_c
        Standard deviation of the camera's pixel noise, degC.
    rng
        Noise generator.
    supersample
        Sub-samples per pixel side; each pixel is the mean apparent temperature of its
        sub-samples (its footprint on the plane).

    Returns
    -------
    apparent_c : numpy.ndarray
        ``(rows, cols)`` apparent temperature, degC; :data:`SKY_APPARENT_C` above the horizon.
    plan_to_image : numpy.ndarray
        ``(3, 3)`` plan ``(x, y)`` -> image ``(col, row)``.
    """
    from scipy import ndimage


    cols, rows = station.size_px
    g_scene = station.scene_to_image()
    plan_to_image = g_scene @ np.linalg.inv(_affine3(plan_from_scene))
    image_to_plan = np.linalg.inv(plan_to_image)
    s = supersample
    offs = (np.arange(s) + 0.5) / s - 0.5
    # sub-sample centres, shape (rows, s, cols, s)
    cc, rr = np.broadcast_arrays(np.arange(cols)[None, None, :, None] + offs[None, None, None, :],
                                 np.arange(rows)[:, None, None, None] + offs[None, :, None, None])
    w = image_to_plan[2, 0] * cc + image_to_plan[2, 1] * rr + image_to_plan[2, 2]
    w_ref = float(image_to_plan[2] @ [(cols - 1) / 2, (rows - 1) / 2, 1.0])
    front = w * w_ref > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        xs = (image_to_plan[0, 0] * cc + image_to_plan[0, 1] * rr + image_to_plan[0, 2]) / w
        ys = (image_to_plan[1, 0] * cc + image_to_plan[1, 1] * rr + image_to_plan[1, 2]) / w
    fc, fr = ~field_transform @ (np.where(front, xs, 0.0), np.where(front, ys, 0.0))
    surface = ndimage.map_coordinates(field_c, [np.asarray(fr) - 0.5, np.asarray(fc) - 0.5], order=1,
                                      mode="constant", cval=np.nan, prefilter=False)
    surface = np.where(np.isfinite(surface), surface, outside_c)
    app_k = np.asarray(apparent_from_surface(surface + _KELVIN, emissivity=emissivity,
                                             reflected_k=reflected_c + _KELVIN, transmittance=1.0), dtype=float)
    app_c = np.where(front, app_k - _KELVIN, SKY_APPARENT_C)
    out = app_c.mean(axis=(1, 3)) + rng.normal(0.0, noise_c, size=(rows, cols))
    return out, plan_to_image


def _pick_points(plan_to_image: np.ndarray, marks_xy: np.ndarray, size_px: tuple[int, int], *,
                 count: int, margin_px: float = 3.0) -> tuple[tuple[float, float, float, float], ...]:
    """Control points a surveyor would pick: marks well inside the frame, spread out.

    Image positions are rounded to whole pixels (a mark is picked at a pixel).
    """
    cols, rows = size_px
    w = marks_xy @ plan_to_image[2, :2] + plan_to_image[2, 2]
    c = (marks_xy @ plan_to_image[0, :2] + plan_to_image[0, 2]) / w
    r = (marks_xy @ plan_to_image[1, :2] + plan_to_image[1, 2]) / w
    ok = (w > 0) & (c >= margin_px) & (c <= cols - 1 - margin_px) & (r >= margin_px) & (r <= rows - 1 - margin_px)
    idx = list(np.flatnonzero(ok))
    if len(idx) < 6:
        raise ValueError(f"a demo camera station sees only {len(idx)} marks; move it (need at least 6)")
    pts = np.column_stack([c[idx], r[idx]])
    centre = np.array([(cols - 1) / 2.0, (rows - 1) / 2.0])
    chosen = [int(np.argmax(((pts - centre) ** 2).sum(1)))]
    while len(chosen) < min(count, len(idx)):  # farthest-point order: spread over the frame
        d = np.min(((pts[:, None, :] - pts[None, chosen, :]) ** 2).sum(-1), axis=1)
        chosen.append(int(np.argmax(d)))
    return tuple(
        (float(round(c[idx[k]])), float(round(r[idx[k]])), round(float(marks_xy[idx[k], 0]), 3),
         round(float(marks_xy[idx[k], 1]), 3))
        for k in chosen
    )


def _write_frame(folder: Path, frame: DemoFrame, *, decimal_comma: bool = False) -> dict:
    """Write one frame file; returns its ``[[frame]]`` items (path, units, scale, offset)."""
    import rasterio
    from rasterio.errors import NotGeoreferencedWarning

    (folder / "frames").mkdir(parents=True, exist_ok=True)
    rel = f"frames/{frame.name}.{frame.fmt}"
    path = folder / rel
    items: dict = {"path": rel, "units": "C"}
    data = frame.apparent_c
    if frame.fmt == "png":
        raw = np.clip(np.rint((data + _KELVIN) / 0.01), 1, 65535).astype(np.uint16)
        with warnings.catch_warnings():  # a frame has no geo-transform: it is placed by control points
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            with rasterio.open(path, "w", driver="PNG", width=raw.shape[1], height=raw.shape[0], count=1,
                               dtype="uint16") as dst:
                dst.write(raw, 1)
        items.update(scale=0.01, offset=-_KELVIN)
    elif frame.fmt == "tif":
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            with rasterio.open(path, "w", driver="GTiff", width=data.shape[1], height=data.shape[0], count=1,
                               dtype="float32", compress="deflate", predictor=3) as dst:
                dst.write(data.astype(np.float32), 1)
    elif frame.fmt == "npy":
        np.save(path, data.astype(np.float32))
    elif frame.fmt == "csv":
        delim, dec = (";", ",") if decimal_comma else (",", ".")
        lines = [delim.join(f"{v:.2f}".replace(".", dec) for v in row) for row in data]
        path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    else:
        raise ValueError(f"unknown demo frame format {frame.fmt!r}")
    return items


# ----- the walked roof -------------------------------------------------------------------

#: Camera stations of the walked roof, roof coordinates ``(u, v, heading_deg)`` (invented):
#: a camera on a telescopic mast carried across the roof, 6.5 m above it, tilted 40°.
_WALKED_STATIONS = (
    (21.5, 0.5, 120.0), (0.5, 12.5, 330.0), (21.5, 12.0, 180.0), (11.0, 9.5, 270.0), (11.0, 3.5, 180.0),
    (0.5, 6.5, 60.0), (14.5, 3.5, 0.0), (14.5, 12.5, 0.0), (0.5, 12.5, 0.0), (11.0, 0.5, 0.0),
    (7.5, 0.5, 150.0),
)
_WALKED_FORMATS = ("png", "tif", "png", "npy", "png", "csv", "png", "png", "tif", "png", "png")


def _default_walked_roof() -> RoofScene:
    return RoofScene(crs="EPSG:32633", origin_xy=(498_240.0, 5_402_660.0), size_m=(24.0, 16.0), pixel_m=0.025,
                     seed=7, air_c=5.0, humidity_pct=75.0, wind_m_s=1.5, reflected_c=-22.0)


@dataclass(frozen=True)
class WalkedRoofScene:
    """An invented small workshop roof surveyed with oblique frames (invented demo data).

    The roof is the warehouse scenario of :class:`RoofScene` scaled to ``roof.size_m``
    (default 24 x 16 m: wet areas 6.4, 8.48 and 0.48 m2, extra plies 1.92 m2). Frames
    are rendered from its true surface field; control points are roof corners, curb
    corners and reference marks on a 2 m grid, picked at whole pixels.

    Parameters
    ----------
    roof
        The roof (its ``pixel_m`` is the resolution of the true field the frames see).
    stations
        ``(u, v, heading_deg)`` of each camera station, roof coordinates.
    height_m, tilt_deg, hfov_deg, size_px
        Camera height above the roof, tilt from straight down, field of view, frame size.
    formats
        File format of each frame (see :class:`DemoFrame`).
    camera_noise_c
        Pixel noise of the camera, degC.
    points_per_frame
        Control points picked per frame (at most).
    min_area_m2
        ``[detect] min_area_m2`` written to survey.toml (the smallest wet area is 0.48 m2).
    seed
        Seed of the camera noise.
    blurred_frame
        Planted fault (off by default): the number (from 1) of a frame rendered out of
        focus: its image is smoothed by a Gaussian of ``blur_px`` pixels, then fresh
        camera noise (a separate generator, seed ``seed + 1``) restores its noise level.
    blur_px
        Gaussian sigma of the planted blur, image pixels.
    reflection
        Planted fault (off by default): ``(frame number, u, v)``: a warm reflection seen
        by that frame only, a disc of ``reflection_radius_m`` on the roof at roof
        coordinates ``u, v`` whose apparent temperature is ``reflection_excess_c`` higher.
    reflection_radius_m, reflection_excess_c
        Size and strength of the planted reflection.
    """

    roof: RoofScene = field(default_factory=_default_walked_roof)
    stations: tuple[tuple[float, float, float], ...] = _WALKED_STATIONS
    height_m: float = 6.5
    tilt_deg: float = 40.0
    hfov_deg: float = 50.0
    size_px: tuple[int, int] = (160, 120)
    formats: tuple[str, ...] = _WALKED_FORMATS
    camera_noise_c: float = 0.05
    points_per_frame: int = 8
    min_area_m2: float = 0.25
    seed: int = 11
    blurred_frame: int | None = None
    blur_px: float = 2.5
    reflection: tuple[int, float, float] | None = None
    reflection_radius_m: float = 0.45
    reflection_excess_c: float = 4.0

    def cameras(self) -> list[CameraStation]:
        """The camera stations (roof coordinates)."""
        return [CameraStation.aimed(u, v, height_m=self.height_m, heading_deg=h, tilt_deg=self.tilt_deg,
                                    size_px=self.size_px, hfov_deg=self.hfov_deg) for u, v, h in self.stations]


def _walked_marks(truth: RoofTruth, scene: WalkedRoofScene) -> np.ndarray:
    """Plan positions of marks a surveyor can pick: roof and curb corners, and foil-tape marks
    laid on a 2 m grid before the survey (low emissivity: they show in the thermal image)."""
    pts = [np.asarray(truth.outline.exterior.coords)[:-1]]
    for e in truth.exclusions:
        pts.append(np.asarray(e.exterior.coords)[:-1])
    w, h = scene.roof.size_m
    grid = [(u, v) for u in np.arange(2.0, w, 2.0) for v in np.arange(2.0, h, 2.0)]
    inside = [scene.roof.plan_from_roof @ g for g in grid
              if truth.outline.buffer(-0.5).contains(shapely.Point(scene.roof.plan_from_roof @ g))]
    pts.append(np.asarray(inside, dtype=float).reshape(-1, 2))
    return np.unique(np.round(np.vstack(pts), 6), axis=0)


def render_walked_roof(scene: WalkedRoofScene = WalkedRoofScene()) -> tuple[list[DemoFrame], RoofTruth]:
    """Render the invented walked roof: frames with control points, and the truth.

    Returns
    -------
    frames : list of DemoFrame
        One per camera station, in order (``f01``, ``f02``, ...).
    truth : RoofTruth
        The roof's true geometry and surface field (see :func:`render_roof`).
    """
    _, truth = render_roof(scene.roof)
    rng = np.random.default_rng(scene.seed)
    marks = _walked_marks(truth, scene)
    outside_c = scene.roof.dry_c - _GROUND_BELOW_C
    frames = []
    for k, cam in enumerate(scene.cameras()):
        app, g = render_frame(cam, truth.surface_c, truth.transform, plan_from_scene=scene.roof.plan_from_roof,
                              emissivity=scene.roof.emissivity, reflected_c=scene.roof.reflected_render_c,
                              outside_c=outside_c, noise_c=scene.camera_noise_c, rng=rng)
        pts = _pick_points(g, marks, cam.size_px, count=scene.points_per_frame)
        if scene.reflection is not None and scene.reflection[0] == k + 1:
            app = app + _planted_reflection(g, app.shape, scene)
        if scene.blurred_frame == k + 1:
            app = _planted_blur(app, scene)
        frames.append(DemoFrame(name=f"f{k + 1:02d}", fmt=scene.formats[k % len(scene.formats)], apparent_c=app,
                                points=pts, plan_to_image=g))
    return frames, truth


def _planted_reflection(plan_to_image: np.ndarray, shape: tuple[int, int], scene: WalkedRoofScene) -> np.ndarray:
    """The planted reflection of :class:`WalkedRoofScene`: apparent degC to add to one frame (invented).

    A disc on the roof (soft edge one pixel of the true field wide) seen by this frame only.
    """
    _, u0, v0 = scene.reflection
    rows, cols = shape
    cc, rr = np.meshgrid(np.arange(cols, dtype=float), np.arange(rows, dtype=float))
    h = np.linalg.inv(plan_to_image)
    w = h[2, 0] * cc + h[2, 1] * rr + h[2, 2]
    with np.errstate(divide="ignore", invalid="ignore"):
        xs = (h[0, 0] * cc + h[0, 1] * rr + h[0, 2]) / w
        ys = (h[1, 0] * cc + h[1, 1] * rr + h[1, 2]) / w
    us, vs = ~scene.roof.plan_from_roof @ (xs, ys)
    dist = np.hypot(np.asarray(us) - u0, np.asarray(vs) - v0)
    edge = scene.roof.pixel_m
    disc = np.clip((scene.reflection_radius_m - dist) / edge + 0.5, 0.0, 1.0)
    return scene.reflection_excess_c * np.where(np.isfinite(disc), disc, 0.0)


def _planted_blur(apparent_c: np.ndarray, scene: WalkedRoofScene) -> np.ndarray:
    """The planted defocus of :class:`WalkedRoofScene`: Gaussian blur, then the noise level restored.

    Blurring white noise of standard deviation ``s`` by a Gaussian of ``b`` pixels leaves
    ``s / (2 sqrt(pi) b)``; fresh noise of ``s sqrt(1 - 1 / (4 pi b^2))`` (generator seed
    ``seed + 1``, so the other frames are unchanged) brings it back to ``s``.
    """
    from scipy import ndimage

    b = scene.blur_px
    blurred = ndimage.gaussian_filter(apparent_c, b, mode="nearest")
    s = scene.camera_noise_c * math.sqrt(max(1.0 - 1.0 / (4.0 * math.pi * b * b), 0.0))
    return blurred + np.random.default_rng(scene.seed + 1).normal(0.0, s, size=apparent_c.shape)


#: The walked roof with planted imagery faults (invented): frame f05 out of focus (Gaussian blur of
#: 2.5 px) and a warm reflection (+4 °C, 0.45 m radius) at roof (18.0, 14.0) seen by frame f03 only,
#: where f08 sees the same ground (``python -m wetmap.demo --scene walked --imagery-faults FOLDER``).
WALKED_IMAGERY_FAULTS = WalkedRoofScene(blurred_frame=5, reflection=(3, 18.0, 14.0))


def _frame_entries(folder: Path, frames: list[DemoFrame], *, time: str, decimal_comma: bool = False) -> list[str]:
    out = []
    for f in frames:
        items = _write_frame(folder, f, decimal_comma=decimal_comma)
        items["time"] = time
        items["points"] = [[int(c), int(r), x, y] for c, r, x, y in f.points]
        out.append(_toml_table("frame", items, array=True))
    return out


def write_walked_roof_survey(folder: str | Path, scene: WalkedRoofScene = WalkedRoofScene(), *,
                             title: str = "Invented workshop roof, walked") -> RoofTruth:
    """Write the invented walked roof as a survey folder of frames with control points.

    Parameters
    ----------
    folder
        Created if missing; files this function writes are overwritten.
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
    (folder / "plan").mkdir(parents=True, exist_ok=True)
    frames, truth = render_walked_roof(scene)
    roof = scene.roof
    _write_geojson(folder / "plan" / "outline.geojson", roof.crs, [(truth.outline, {"name": "invented workshop roof"})])
    _write_geojson(folder / "plan" / "exclusions.geojson", roof.crs, [
        (truth.exclusions[0], {"name": "RTU-1", "kind": "rooftop unit"}),
        (truth.exclusions[1], {"name": "SK-1", "kind": "skylight"}),
    ])
    _write_geojson(folder / "plan" / "sections.geojson", roof.crs, [
        (geom, {"name": name, "assembly": "built-up roof on perlite board" if name == "A"
                else "built-up roof on wood fibreboard", "insulation": "perlite" if name == "A" else "wood fibre"})
        for name, geom in truth.sections.items()
    ])
    with open(folder / "cores.csv", "w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f, lineterminator="\n")
        writer.writerow(["id", "x", "y", "result", "depth_mm", "notes"])
        for c in truth.cores:
            writer.writerow([spreadsheet_cell(v) for v in (c.id, f"{c.x:.3f}", f"{c.y:.3f}", c.result, c.depth_mm, c.notes)])
    text = "\n".join([
        "# Invented demo survey written by wetmap.demo: an invented workshop roof, invented data.",
        "# Frames from a camera on a mast carried across the roof, placed by control points.",
        "# Written by `python -m wetmap.demo --scene walked FOLDER` (see sample_surveys/README.md).",
        "",
        _toml_table("survey", {
            "title": title, "kind": "roof", "crs": roof.crs, "site": "invented demo site",
            "date": "2024-11-19", "surveyor": "demo surveyor (invented)",
        }),
        _toml_table("conditions", {
            "air_c": roof.air_c, "humidity_pct": roof.humidity_pct, "wind_m_s": roof.wind_m_s,
            "sky": roof.sky, "reflected_c": roof.reflected_c, "sunset": "16:35", "time": "19:40",
            "hours_since_rain": 60, "surface_dry": True,
        }),
        _toml_table("camera", {"emissivity": roof.emissivity}),
        _toml_table("plan", {
            "outline": "plan/outline.geojson", "exclusions": "plan/exclusions.geojson",
            "sections": "plan/sections.geojson",
        }),
        *_frame_entries(folder, frames, time="19:40"),
        _toml_table("detect", {"delta_c": 1.0, "min_area_m2": scene.min_area_m2}),
        _toml_table("cores", {"path": "cores.csv"}),
        _toml_table("repair", {"margin_m": 0.3, "board_m": [1.2, 2.4]}),
    ])
    (folder / "survey.toml").write_text(text, encoding="utf-8")
    return truth


# ----- the hull side ---------------------------------------------------------------------

_HULL_LENGTH_M = 11.0


def _sheer_girth(s: np.ndarray | float) -> np.ndarray | float:
    """Girth of the sheer (deck edge) above the keel at station ``s``, metres (invented)."""
    return 1.2 + 0.8 * np.sin(np.pi * (np.asarray(s) + 1.0) / 13.0)


def _hull_outline() -> Polygon:
    ss = np.linspace(_HULL_LENGTH_M, 0.0, 23)
    sheer = [(float(s), round(float(_sheer_girth(s)), 4)) for s in ss]
    return shapely.normalize(Polygon([(0.6, 0.0), (_HULL_LENGTH_M, 0.0), *sheer, (0.0, 0.9)]))


_FITTING_XY = (7.2, 0.55)                      # bronze through-hull fitting (station, girth), m
_FITTING_R_M = 0.06
_FITTING_MARGIN_M = 0.04


def _hull_geometry() -> dict:
    """The invented hull side's features in plan metres (x = station, y = girth)."""
    wet1 = affinity.scale(shapely.Point(0, 0).buffer(1.0, quad_segs=32), 0.45, 0.30)
    wet1 = affinity.translate(wet1, *_FITTING_XY)
    fitting = shapely.Point(_FITTING_XY).buffer(_FITTING_R_M + _FITTING_MARGIN_M, quad_segs=16)
    wet2 = box(2.6, 0.0, 4.1, 0.30)            # along the keel joint, 0.45 m2
    wet3 = affinity.rotate(box(4.625, 1.5, 4.975, 1.8), 20.0, origin="centroid")  # by a chainplate, 0.105 m2
    bulkhead = box(5.90, 0.30, 6.05, 1.60)     # internal plywood bulkhead: warm, but dry
    anode = box(9.62, 0.32, 9.92, 0.47)        # zinc anode bolted to the hull: reads cold
    return {
        "outline": _hull_outline(),
        "wet": [shapely.normalize(wet1.difference(fitting)), shapely.normalize(wet2), shapely.normalize(wet3)],
        "wet_raw": [wet1, wet2, wet3],
        "refuted": [bulkhead],
        "fitting": shapely.Point(_FITTING_XY).buffer(_FITTING_R_M, quad_segs=16),
        "anode": anode,
        "exclusions": [shapely.normalize(fitting),
                       shapely.normalize(anode.buffer(_FITTING_MARGIN_M, join_style="mitre"))],
    }


@dataclass(frozen=True)
class DemoReading:
    """One invented moisture-meter reading on the hull (relative meter scale)."""

    id: str
    x: float
    y: float
    reading: float
    notes: str


@dataclass(frozen=True)
class HullTruth:
    """What the invented hull side really is (invented demo data), plan metres.

    Attributes
    ----------
    wet
        True wet-core outlines (the excluded through-hull fitting cut out).
    refuted
        Warm but dry (an internal bulkhead).
    exclusions
        The through-hull fitting and the anode, each with its margin.
    outline
        The developed side: x = station from the stem, y = girth from the keel.
    surface_c, transform
        True surface temperature field, degC, and its raster transform.
    readings
        The meter readings written to ``cores.csv``.
    """

    wet: list[Polygon]
    refuted: list[Polygon]
    exclusions: list[Polygon]
    outline: Polygon
    surface_c: np.ndarray
    transform: affine.Affine
    readings: list[DemoReading] = field(default_factory=list)

    @property
    def wet_area_m2(self) -> float:
        """Total true wet area, m2."""
        return float(sum(p.area for p in self.wet))


_HULL_STATIONS = (  # (station of the camera, station aimed at): 4.0 m off the hull, 1.0 m girth up
    (1.6, 1.9), (4.4, 4.0), (7.0, 7.4), (9.6, 9.2),
)


@dataclass(frozen=True)
class HullScene:
    """An invented 11 m sailing yacht's port side, hauled out (invented demo data).

    Developed side: x = station (m from the stem), y = girth (m up from the keel).
    The hull was warmed by the afternoon sun and is imaged in the evening cool-down:
    wet core keeps its heat longer. Each frame is taken as a view of a plane (the
    developed side is treated as flat within a frame).

    Parameters
    ----------
    pixel_m
        Resolution of the true surface field the frames see, metres.
    dry_c, wet_excess_c, bulkhead_excess_c, noise_c
        Dry gelcoat temperature (near the keel), the wet-core excess, the excess over the
        internal bulkhead, and the field's noise, degC.
    emissivity
        Gelcoat emissivity (from memory: measure it per ASTM E1933).
    air_c, humidity_pct, wind_m_s, sky
        Conditions; no reflected temperature is given, so the hull estimate (half sky,
        half surroundings at air temperature) is used to render and to process.
    stations, standoff_m, eye_girth_m, hfov_deg, size_px
        Camera stations ``(station, aimed station)``, distance from the hull, girth of
        the camera's eye, field of view and frame size.
    formats
        File format of each frame; CSV frames use ``;`` and a decimal comma.
    camera_noise_c, points_per_frame, seed
        Camera noise, control points per frame, noise seed.
    """

    pixel_m: float = 0.01
    dry_c: float = 14.0
    wet_excess_c: float = 1.6
    bulkhead_excess_c: float = 1.2
    noise_c: float = 0.08
    emissivity: float = 0.92
    air_c: float = 12.0
    humidity_pct: float = 70.0
    wind_m_s: float = 1.5
    sky: str = "clear"
    stations: tuple[tuple[float, float], ...] = _HULL_STATIONS
    standoff_m: float = 4.0
    eye_girth_m: float = 1.0
    hfov_deg: float = 50.0
    size_px: tuple[int, int] = (160, 120)
    formats: tuple[str, ...] = ("csv", "tif", "csv", "npy")
    camera_noise_c: float = 0.05
    points_per_frame: int = 8
    seed: int = 3

    @property
    def reflected_render_c(self) -> float:
        """Reflected temperature used to render: the hull estimate (sky view 0.5), degC."""
        return estimate_reflected_c(self.air_c, self.humidity_pct, self.sky, sky_view=0.5).reflected_c

    def cameras(self) -> list[CameraStation]:
        """The camera stations (plan coordinates: station, girth, stand-off)."""
        return [CameraStation(position=(s, self.eye_girth_m, self.standoff_m), target=(t, self.eye_girth_m),
                              size_px=self.size_px, hfov_deg=self.hfov_deg, up=(0.0, 1.0, 0.0))
                for s, t in self.stations]


def _cover(geom, transform: affine.Affine, shape: tuple[int, int], ss: int = _SUPERSAMPLE) -> np.ndarray:
    """Fraction of each pixel of a north-up raster covered by ``geom``."""
    from rasterio import features

    fine = transform @ affine.Affine.scale(1.0 / ss)
    mask = features.rasterize([(geom, 1)], out_shape=(shape[0] * ss, shape[1] * ss), transform=fine, fill=0,
                              dtype="uint8")
    return mask.reshape(shape[0], ss, shape[1], ss).mean(axis=(1, 3))


def _hull_readings(geo: dict, rng: np.random.Generator) -> list[DemoReading]:
    """A reading grid (1 m stations x 0.4 m girth) plus readings aimed at warm patches."""
    outline, wet = geo["outline"], shapely.union_all(geo["wet_raw"])
    out: list[DemoReading] = []
    n = 0
    for s in np.arange(0.5, _HULL_LENGTH_M, 1.0):
        for g in np.arange(0.2, 2.0, 0.4):
            p = shapely.Point(s, g)
            if not outline.buffer(-0.05).contains(p):
                continue
            n += 1
            is_wet = wet.contains(p)
            value = rng.uniform(45, 75) if is_wet else rng.uniform(8, 16)
            out.append(DemoReading(f"R{n:02d}", round(float(s), 3), round(float(g), 3), round(float(value)),
                                   "grid reading (invented)"))
    aimed = ((7.2, 0.8, True, "beside the through-hull (invented)"),
             (3.3, 0.15, True, "keel joint (invented)"),
             (5.975, 1.0, False, "over the bulkhead: reads dry (invented)"))
    for k, (s, g, is_wet, note) in enumerate(aimed, start=1):
        value = rng.uniform(45, 75) if is_wet else rng.uniform(8, 16)
        out.append(DemoReading(f"T{k}", s, g, round(float(value)), note))
    return out


def render_hull(scene: HullScene = HullScene()) -> tuple[list[DemoFrame], HullTruth]:
    """Render the invented hull side: frames with control points, readings and the truth."""
    from scipy import ndimage

    geo = _hull_geometry()
    p = scene.pixel_m
    x0, y0, x1, y1 = -1.0, -0.8, _HULL_LENGTH_M + 1.0, 2.8
    shape = (int(round((y1 - y0) / p)), int(round((x1 - x0) / p)))
    transform = affine.Affine(p, 0.0, x0, 0.0, -p, y1)
    xs = x0 + (np.arange(shape[1]) + 0.5) * p
    ys = y1 - (np.arange(shape[0]) + 0.5) * p
    background = scene.dry_c + 0.5 * (ys[:, None] / 2.0) - 0.3 * (xs[None, :] / _HULL_LENGTH_M)
    hull = _cover(geo["outline"], transform, shape)
    surface = np.full(shape, scene.dry_c - 2.5)        # ground and stands below, yard beyond (invented)
    surface += hull * (background - surface)

    def soft(geom) -> np.ndarray:
        return np.clip(ndimage.gaussian_filter(_cover(geom, transform, shape), 1.0, mode="nearest"), 0.0, 1.0)

    surface += scene.wet_excess_c * soft(shapely.union_all(geo["wet_raw"])) * hull
    surface += scene.bulkhead_excess_c * soft(geo["refuted"][0]) * hull
    metal = soft(shapely.union(geo["fitting"], geo["anode"]))
    surface += metal * ((scene.air_c - 4.0) - surface)  # bronze and zinc: low emissivity, read cold (invented)
    surface += np.random.default_rng(scene.seed).normal(0.0, scene.noise_c, size=shape)

    rng = np.random.default_rng(scene.seed + 1)
    marks = np.array([(s, g) for s in np.arange(0.5, _HULL_LENGTH_M, 0.5) for g in (0.25, 0.75, 1.25)
                      if geo["outline"].buffer(-0.05).contains(shapely.Point(s, g))])
    frames = []
    for k, cam in enumerate(scene.cameras()):
        app, g = render_frame(cam, surface, transform, plan_from_scene=affine.Affine.identity(),
                              emissivity=scene.emissivity, reflected_c=scene.reflected_render_c,
                              outside_c=scene.dry_c - 2.5, noise_c=scene.camera_noise_c, rng=rng)
        pts = _pick_points(g, marks, cam.size_px, count=scene.points_per_frame)
        frames.append(DemoFrame(name=f"side{k + 1:02d}", fmt=scene.formats[k % len(scene.formats)],
                                apparent_c=app, points=pts, plan_to_image=g))
    truth = HullTruth(wet=geo["wet"], refuted=geo["refuted"], exclusions=geo["exclusions"], outline=geo["outline"],
                      surface_c=surface, transform=transform,
                      readings=_hull_readings(geo, np.random.default_rng(scene.seed + 2)))
    return frames, truth


def write_hull_survey(folder: str | Path, scene: HullScene = HullScene(), *,
                      title: str = "Invented 11 m yacht, port side") -> HullTruth:
    """Write the invented hull side as a survey folder (``local`` CRS, meter readings).

    Parameters
    ----------
    folder
        Created if missing; files this function writes are overwritten.
    scene
        The scene.
    title
        ``[survey] title``.

    Returns
    -------
    HullTruth
        The truth of what was written.
    """
    folder = Path(folder)
    (folder / "plan").mkdir(parents=True, exist_ok=True)
    frames, truth = render_hull(scene)
    _write_geojson(folder / "plan" / "outline.geojson", "local",
                   [(truth.outline, {"name": "port side, developed (x = station, y = girth)"})])
    _write_geojson(folder / "plan" / "exclusions.geojson", "local",
                   [(truth.exclusions[0], {"name": "TH-1", "kind": "through-hull fitting"}),
                    (truth.exclusions[1], {"name": "AN-1", "kind": "anode"})])
    with open(folder / "cores.csv", "w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f, lineterminator="\n")
        writer.writerow(["id", "x", "y", "reading", "notes"])
        for r in truth.readings:
            writer.writerow([spreadsheet_cell(v) for v in (r.id, f"{r.x:.3f}", f"{r.y:.3f}", f"{r.reading:g}", r.notes)])
    text = "\n".join([
        "# Invented demo survey written by wetmap.demo: an invented yacht, invented data.",
        "# Plan x = station (m from the stem), y = girth (m up from the keel); frames placed by tape marks.",
        "# Tape marks: x = the mark's station, measured along the hull; y = its girth, measured ALONG THE SKIN",
        "# from the keel with a tape laid on the hull (round the turn of the bilge), never its height above",
        "# the keel: heights make areas small wherever the skin flares. Six marks or more per frame in a grid",
        "# (e.g. every 1 m of station x every 0.8 m of girth) let a curved skin be placed piecewise.",
        "# Written by `python -m wetmap.demo --scene hull FOLDER` (see sample_surveys/README.md).",
        "",
        _toml_table("survey", {
            "title": title, "kind": "hull", "crs": "local", "side": "port", "site": "invented boatyard",
            "date": "2024-06-04", "surveyor": "demo surveyor (invented)",
        }),
        _toml_table("conditions", {
            "air_c": scene.air_c, "humidity_pct": scene.humidity_pct, "wind_m_s": scene.wind_m_s,
            "sky": scene.sky, "sunset": "21:20", "time": "22:05", "hours_since_rain": 96, "surface_dry": True,
        }),
        _toml_table("camera", {"emissivity": scene.emissivity}),
        _toml_table("plan", {"outline": "plan/outline.geojson", "exclusions": "plan/exclusions.geojson"}),
        *_frame_entries(folder, frames, time="22:05", decimal_comma=True),
        _toml_table("detect", {"delta_c": 0.6}),
        _toml_table("cores", {"path": "cores.csv", "wet_above": 30}),
        _toml_table("repair", {"margin_m": 0.1}),
    ])
    (folder / "survey.toml").write_text(text, encoding="utf-8")
    return truth


def main(argv: list[str] | None = None) -> int:
    """``python -m wetmap.demo [--scene warehouse|walked|hull] FOLDER``: write an invented demo survey.

    The default scene is the invented warehouse roof (a flown mosaic); ``walked`` is the
    invented workshop roof surveyed with frames and control points; ``hull`` the invented
    yacht's port side with meter readings.
    """
    parser = argparse.ArgumentParser(
        prog="python -m wetmap.demo",
        description="Write an invented demo survey (invented demo data).",
    )
    parser.add_argument("folder", type=Path, help="survey folder to write, e.g. sample_surveys/warehouse_roof")
    parser.add_argument("--scene", choices=("warehouse", "walked", "hull"), default="warehouse",
                        help="which invented scene (default: warehouse)")
    parser.add_argument("--imagery-faults", action="store_true",
                        help="walked scene only: plant a blurred frame (f05) and a reflection seen by one frame "
                             "(f03) for the imagery checks (wetmap.image_checks)")
    args = parser.parse_args(argv)
    if args.imagery_faults and args.scene != "walked":
        parser.error("--imagery-faults applies to --scene walked only")
    if args.scene == "walked":
        write_walked_roof_survey(args.folder, WALKED_IMAGERY_FAULTS if args.imagery_faults else WalkedRoofScene(),
                                 **({"title": "Invented workshop roof, walked (planted imagery faults)"}
                                    if args.imagery_faults else {}))
    elif args.scene == "hull":
        write_hull_survey(args.folder)
    else:
        write_roof_survey(args.folder)
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
