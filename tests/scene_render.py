"""An independent renderer of thermal survey scenes for the detection tests.

Nothing here calls wetmap: the band radiance is integrated here with
``scipy.integrate.quad`` over Planck's law with CODATA constants from
``scipy.constants``; the geometry (pixel centres inside shapely polygons) and the survey
folder (GeoTIFF by rasterio, GeoJSON, cores.csv, survey.toml) are written here.

A scene is a true surface temperature field (dry level, a natural gradient, wet areas
warmer by a fixed excess, seeded Gaussian noise) turned into apparent temperature by the
measurement equation with transmittance 1:
``L_app = eps L(T_surface) + (1 - eps) L(T_reflected)`` (ASTM E1862 / E1933 form).
"""

from __future__ import annotations

import functools
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import rasterio
import shapely
from affine import Affine
from scipy import constants, integrate

BAND_UM = (7.5, 14.0)


def band_radiance(t_k: float, band_um: tuple[float, float] = BAND_UM) -> float:
    """Planck's spectral radiance integrated over the band, W m-2 sr-1 (CODATA via scipy.constants)."""
    h, c, k = constants.h, constants.c, constants.k

    def planck(lam_m: float) -> float:
        return 2.0 * h * c * c / lam_m ** 5 / math.expm1(h * c / (lam_m * k * t_k))

    value, _ = integrate.quad(planck, band_um[0] * 1e-6, band_um[1] * 1e-6, epsabs=0.0, epsrel=1e-10)
    return value


@functools.lru_cache(maxsize=4)
def radiance_table(band_um: tuple[float, float] = BAND_UM) -> tuple[np.ndarray, np.ndarray]:
    """``(temperatures K, band radiance)`` every 0.1 K from 200 to 340 K (monotone, for inversion)."""
    t = np.arange(200.0, 340.0001, 0.1)
    return t, np.array([band_radiance(float(v), band_um) for v in t])


def apparent_c(surface_c: np.ndarray, *, emissivity: float, reflected_c: float) -> np.ndarray:
    """Apparent (blackbody-equivalent) temperature, degC, of a surface seen with transmittance 1."""
    t, lum = radiance_table()
    l_surface = np.interp(surface_c + 273.15, t, lum)
    l_reflected = float(np.interp(reflected_c + 273.15, t, lum))
    l_app = emissivity * l_surface + (1.0 - emissivity) * l_reflected
    return np.interp(l_app, lum, t) - 273.15


def centres_inside(geometry, transform: Affine, shape: tuple[int, int]) -> np.ndarray:
    """Bool raster: pixel centres inside ``geometry`` (shapely's point-in-polygon)."""
    rows, cols = shape
    cc, rr = np.meshgrid(np.arange(cols) + 0.5, np.arange(rows) + 0.5)
    xs, ys = transform @ (cc.ravel(), rr.ravel())
    return shapely.contains_xy(geometry, xs, ys).reshape(shape)


@dataclass
class Scene:
    """One invented flat roof in local plan metres (origin at the lower-left corner)."""

    width_m: float
    height_m: float
    outline: shapely.Polygon | None = None
    wet: list = field(default_factory=list)
    """Polygons warmer by ``wet_excess_c`` (the truth)."""
    warm_other: list = field(default_factory=list)
    """Polygons warmer by ``other_excess_c`` that are not wet (a parapet band, a curb halo)."""
    sections: list = field(default_factory=list)
    """``(name, polygon, offset degC)`` or ``(name, polygon, offset degC, emissivity)``: each
    section's dry level offset and, optionally, its own emissivity (written to sections.geojson)."""
    exclusions: list = field(default_factory=list)
    cores: list = field(default_factory=list)
    """``(id, x, y, "wet"|"dry")``."""
    dry_c: float = 4.0
    gradient_c: tuple[float, float, float] = (2.0, 0.6, 0.5)
    """Plane along x over the whole width, plane along y over the height, curvature (x^2)."""
    wave_c: float = 0.0
    """Amplitude of a dry surface that is not smooth (crossed sinusoids of ``wave_m``), degC."""
    wave_m: float = 10.0
    wet_excess_c: float = 2.0
    other_excess_c: float = 1.5
    noise_c: float = 0.12
    pixel_m: float = 0.1
    emissivity: float = 0.93
    reflected_c: float = -25.0
    seed: int = 1
    detect: str = "delta_c = 1.0"

    def __post_init__(self) -> None:
        if self.outline is None:
            self.outline = shapely.box(0.0, 0.0, self.width_m, self.height_m)

    @property
    def shape(self) -> tuple[int, int]:
        return int(round(self.height_m / self.pixel_m)), int(round(self.width_m / self.pixel_m))

    @property
    def transform(self) -> Affine:
        return Affine(self.pixel_m, 0.0, 0.0, 0.0, -self.pixel_m, self.height_m)

    def truth(self) -> shapely.Geometry:
        return shapely.union_all(self.wet) if self.wet else shapely.Polygon()

    def surface(self) -> np.ndarray:
        """True surface temperature, degC."""
        rows, cols = self.shape
        xs = (np.arange(cols) + 0.5) * self.pixel_m / self.width_m
        ys = 1.0 - (np.arange(rows) + 0.5) * self.pixel_m / self.height_m
        gx, gy, curve = self.gradient_c
        field_c = (self.dry_c + gx * xs[None, :] + gy * ys[:, None] + curve * (xs[None, :] - 0.5) ** 2)
        field_c = np.broadcast_to(field_c, (rows, cols)).copy()
        if self.wave_c:
            x_m = (np.arange(cols) + 0.5) * self.pixel_m
            y_m = (np.arange(rows) + 0.5) * self.pixel_m
            k = 2.0 * np.pi / self.wave_m
            field_c += self.wave_c * np.sin(k * x_m)[None, :] * np.cos(k * y_m)[:, None]
        for _, poly, offset, *_ in self.sections:
            field_c[centres_inside(poly, self.transform, self.shape)] += offset
        for poly in self.warm_other:
            field_c[centres_inside(poly, self.transform, self.shape)] += self.other_excess_c
        for poly in self.wet:
            field_c[centres_inside(poly, self.transform, self.shape)] += self.wet_excess_c
        rng = np.random.default_rng(self.seed)
        return field_c + rng.normal(0.0, self.noise_c, (rows, cols))

    def write(self, folder: Path) -> Path:
        """The survey folder: survey.toml, plan/*.geojson, thermal/pass1.tif, cores.csv."""
        folder = Path(folder)
        (folder / "plan").mkdir(parents=True, exist_ok=True)
        (folder / "thermal").mkdir(exist_ok=True)
        eps = np.full(self.shape, self.emissivity)
        for _, poly, _, *own in reversed(self.sections):
            if own:
                eps[centres_inside(poly, self.transform, self.shape)] = own[0]
        app = apparent_c(self.surface(), emissivity=eps, reflected_c=self.reflected_c).astype(np.float32)
        rows, cols = self.shape
        with rasterio.open(folder / "thermal" / "pass1.tif", "w", driver="GTiff", width=cols, height=rows, count=1,
                           dtype="float32", transform=self.transform, nodata=-9999.0) as dst:
            dst.write(app, 1)

        def fc(items):
            return json.dumps({"type": "FeatureCollection", "features": [
                {"type": "Feature", "properties": props, "geometry": shapely.geometry.mapping(g)}
                for props, g in items]})

        (folder / "plan" / "outline.geojson").write_text(fc([({}, self.outline)]))
        plan = 'outline = "plan/outline.geojson"\n'
        if self.sections:
            (folder / "plan" / "sections.geojson").write_text(
                fc([({"name": sec[0], "assembly": "invented", **({"emissivity": sec[3]} if len(sec) > 3 else {})},
                     sec[1]) for sec in self.sections]))
            plan += 'sections = "plan/sections.geojson"\n'
        if self.exclusions:
            (folder / "plan" / "exclusions.geojson").write_text(fc([({}, g) for g in self.exclusions]))
            plan += 'exclusions = "plan/exclusions.geojson"\n'
        cores = ""
        if self.cores:
            lines = ["id,x,y,result"] + [f"{i},{x:.3f},{y:.3f},{r}" for i, x, y, r in self.cores]
            (folder / "cores.csv").write_text("\n".join(lines) + "\n")
            cores = '[cores]\npath = "cores.csv"\n'
        (folder / "survey.toml").write_text(f"""[survey]
title = "Invented test roof"
kind = "roof"
crs = "local"

[conditions]
air_c = 3.0
humidity_pct = 60
wind_m_s = 1.0
reflected_c = {self.reflected_c}

[camera]
emissivity = {self.emissivity}

[plan]
{plan}
[[mosaic]]
path = "thermal/pass1.tif"
units = "C"

[detect]
{self.detect}

{cores}""", encoding="utf-8")
        return folder


def found_geometry(result) -> shapely.Geometry:
    """Union of the anomaly polygons of a wetmap result."""
    polys = [a.geometry for a in result.anomalies]
    return shapely.union_all(polys) if polys else shapely.Polygon()


def iou(a, b) -> float:
    union = shapely.union(a, b).area
    return shapely.intersection(a, b).area / union if union > 0 else 1.0


# ------------------------------------------------------------------------------
# The scenes (invented roofs)
# ------------------------------------------------------------------------------


def corner_scene(**kw) -> Scene:
    """Two sections of an 80 x 30 m roof; in section A (54 x 30 m) a wet region of about
    620 m2 (38 % of A) reaches the NW corner, plus two small wet areas."""
    big = shapely.Polygon([(0, 30), (30, 30), (30, 19), (24, 11), (13, 7), (0, 7)])
    small1 = shapely.box(40.0, 4.0, 43.0, 7.0)
    small2 = shapely.box(62.0, 20.0, 65.5, 23.0)
    a = shapely.box(0, 0, 54, 30)
    b = shapely.box(54, 0, 80, 30)
    return Scene(80.0, 30.0, wet=[big, small1, small2], sections=[("A", a, 0.0), ("B", b, 0.0)],
                 cores=[("W1", 8.0, 22.0, "wet"), ("W2", 41.5, 5.5, "wet"), ("D1", 45.0, 20.0, "dry"),
                        ("D2", 72.0, 8.0, "dry")], **kw)


def bay_scene(**kw) -> Scene:
    """A 50 x 30 m roof, 45 % wet in one bay (the west 22.5 m)."""
    return Scene(50.0, 30.0, wet=[shapely.box(0.0, 0.0, 22.5, 30.0)],
                 cores=[("W1", 10.0, 15.0, "wet"), ("D1", 40.0, 15.0, "dry")], **kw)


def square_scene(**kw) -> Scene:
    """A 60 x 40 m roof with a 20 m wet square inside."""
    return Scene(60.0, 40.0, wet=[shapely.box(22.0, 11.0, 42.0, 31.0)],
                 cores=[("W1", 30.0, 20.0, "wet"), ("D1", 8.0, 8.0, "dry")], **kw)


def step_scene(kind: str, **kw) -> Scene:
    """A 60 x 40 m roof of two sections whose dry levels differ by 2.5 K, no wet area:
    the boundary off the block grid (x = 41.37 m) or diagonal."""
    if kind == "diagonal":
        line = [(23.37, 0.0), (36.91, 40.0)]
    else:
        line = [(41.37, 0.0), (41.37, 40.0)]
    west = shapely.Polygon([(0, 0), line[0], line[1], (0, 40)])
    east = shapely.Polygon([line[0], (60, 0), (60, 40), line[1]])
    return Scene(60.0, 40.0, sections=[("West", west, 0.0), ("East", east, 2.5)],
                 cores=[("D1", 10.0, 20.0, "dry"), ("D2", 50.0, 20.0, "dry")], **kw)


def parapet_scene(**kw) -> Scene:
    """A 50.35 x 30.45 m roof with a warm band 1 m wide along the south and east parapets (not wet)."""
    band = shapely.box(0.0, 0.0, 50.35, 30.45).difference(shapely.box(0.0, 1.0, 49.35, 30.45))
    return Scene(50.35, 30.45, warm_other=[band], cores=[("D1", 25.0, 15.0, "dry")], **kw)


def unit_scene(**kw) -> Scene:
    """A 50 x 30 m roof with a 3 x 3 m rooftop unit (excluded) ringed by a warm halo 0.8 m wide."""
    unit = shapely.box(20.0, 12.0, 23.0, 15.0)
    halo = unit.buffer(0.8, join_style="mitre").difference(unit)
    return Scene(50.0, 30.0, warm_other=[halo], exclusions=[unit], cores=[("D1", 40.0, 8.0, "dry")], **kw)


def emissivity_scene(**kw) -> Scene:
    """Two sections of a 60 x 40 m roof at one true temperature; East is a membrane of
    emissivity 0.85 (written to sections.geojson), West takes the camera's 0.93."""
    west = shapely.box(0, 0, 30.37, 40)
    east = shapely.box(30.37, 0, 60, 40)
    return Scene(60.0, 40.0, sections=[("West", west, 0.0), ("East", east, 0.0, 0.85)],
                 cores=[("D1", 10.0, 20.0, "dry")], **kw)
