"""Registration of a curved hull side on a tape grid, tested on a scene rendered by ray casting.

Independent of wetmap: its own geometry (a hull cross-section of a flat bottom panel, a
circular bilge turn and a flat topside, extruded along the hull), its own pinhole camera
(Hartley & Zisserman, *Multiple View Geometry*, 2nd ed., section 6.1: ``x = K [R | -R C] X``)
and its own band radiance (Planck's law integrated with ``scipy.integrate.quad`` using
``scipy.constants``). All values are invented for the test.

Hull coordinates (metres): ``X`` station along the hull, ``Y`` outboard from the centre
line (this side positive), ``Z`` up from the keel. The developed plan is ``(station, girth)``
with the girth ``s`` measured along the skin from the keel.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np
import shapely
from scipy import constants, integrate

# ----- the hull cross-section ---------------------------------------------------------

DEADRISE_DEG = 15.0      # bottom panel rises this much from horizontal
BOTTOM_M = 0.40          # girth of the flat bottom panel
BILGE_R_M = 0.90         # radius of the bilge turn
SHEER_GIRTH_M = 2.70     # girth at the sheer (the skin ends there)
STATIONS_M = (-1.0, 7.0)  # the rendered hull runs between these stations
GROUND_Z_M = -0.7        # the yard under the keel

_B = math.radians(DEADRISE_DEG)
_A = np.array([math.cos(_B), math.sin(_B)])            # bottom panel direction (Y, Z)
_P1 = BOTTOM_M * _A                                    # start of the bilge turn
_C = _P1 + BILGE_R_M * np.array([-math.sin(_B), math.cos(_B)])  # centre of the turn
BILGE_END_M = BOTTOM_M + BILGE_R_M * (math.pi / 2 - _B)  # girth where the topside starts (vertical)
_P2 = _C + BILGE_R_M * np.array([1.0, 0.0])


def profile_yz(girth_m: np.ndarray) -> np.ndarray:
    """``(..., 2)`` cross-section point ``(Y, Z)`` at girth ``s`` (measured along the skin)."""
    s = np.asarray(girth_m, dtype=float)
    phi = _B + (s - BOTTOM_M) / BILGE_R_M
    bottom = s[..., None] * _A
    arc = _C + BILGE_R_M * np.stack([np.sin(phi), -np.cos(phi)], axis=-1)
    top = _P2 + np.stack([np.zeros_like(s), s - BILGE_END_M], axis=-1)
    return np.where((s <= BOTTOM_M)[..., None], bottom, np.where((s <= BILGE_END_M)[..., None], arc, top))


def hull_point(station_m, girth_m) -> np.ndarray:
    """``(..., 3)`` hull point ``(X, Y, Z)`` of a developed-plan point."""
    yz = profile_yz(np.asarray(girth_m, dtype=float))
    x = np.broadcast_to(np.asarray(station_m, dtype=float), yz.shape[:-1])
    return np.concatenate([x[..., None], yz], axis=-1)


def _cross_section_hit(o: np.ndarray, d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Nearest hit of rays with the skin: ``(t, girth)`` (``inf``/NaN where missed).

    ``o``, ``d``: ``(n, 3)`` origins and directions; the skin is a prism along X, so the
    hit is found in the (Y, Z) cross-section analytically (lines and a circle).
    """
    oy, oz, dy, dz = o[:, 1], o[:, 2], d[:, 1], d[:, 2]
    n = len(d)
    best_t = np.full(n, np.inf)
    best_s = np.full(n, np.nan)

    def take(t, s, ok):
        ok = ok & (t > 1e-9) & (t < best_t)
        best_t[ok] = t[ok]
        best_s[ok] = s[ok]

    with np.errstate(divide="ignore", invalid="ignore"):
        # bottom panel: the line through the keel along _A
        m = np.array([-_A[1], _A[0]])
        t = -(m[0] * oy + m[1] * oz) / (m[0] * dy + m[1] * dz)
        s = _A[0] * (oy + t * dy) + _A[1] * (oz + t * dz)
        take(t, s, (s >= 0) & (s <= BOTTOM_M))
        # bilge turn: |p - C| = R, angle within the turn
        py, pz = oy - _C[0], oz - _C[1]
        a = dy * dy + dz * dz
        b = 2 * (py * dy + pz * dz)
        c = py * py + pz * pz - BILGE_R_M ** 2
        disc = b * b - 4 * a * c
        root = np.sqrt(np.where(disc >= 0, disc, np.nan))
        for sign in (-1.0, 1.0):
            t = (-b + sign * root) / (2 * a)
            qy, qz = py + t * dy, pz + t * dz
            phi = np.arctan2(qy, -qz)
            s = BOTTOM_M + (phi - _B) * BILGE_R_M
            take(t, s, (disc >= 0) & (phi >= _B) & (phi <= math.pi / 2))
        # topside: the vertical plane Y = P2_y above the turn
        t = (_P2[0] - oy) / dy
        s = BILGE_END_M + (oz + t * dz - _P2[1])
        take(t, s, (s >= BILGE_END_M) & (s <= SHEER_GIRTH_M))
    return best_t, best_s


# ----- the surface temperature on the developed plan ----------------------------------

DRY_C = 14.0
WET_RISE_C = 1.5
#: Two wet patches on the bilge turn: ellipses (station centre, girth centre, semi-axes).
PATCHES = ((1.6, 1.00, 0.60, 1.0 / (math.pi * 0.60)),      # 1.00 m2
           (3.6, 0.95, 0.50, 0.5 / (math.pi * 0.50)))      # 0.50 m2
STARBOARD_C = 14.0       # the other side's bottom, seen under the keel
GROUND_C = 15.5          # the yard, warm after a sunny day
SKY_APPARENT_C = -15.0   # apparent temperature of the sky above the sheer


def true_patches() -> list:
    """The wet patches as polygons on the developed plan (station, girth)."""
    out = []
    for x, y, a, b in PATCHES:
        t = np.linspace(0, 2 * np.pi, 721)[:-1]
        out.append(shapely.Polygon(np.column_stack([x + a * np.cos(t), y + b * np.sin(t)])))
    return out


def surface_c(station_m: np.ndarray, girth_m: np.ndarray) -> np.ndarray:
    """True surface temperature on the skin, degC: dry with a small gradient, plus the patches
    (edges softened over about 2 cm)."""
    x, s = np.asarray(station_m, float), np.asarray(girth_m, float)
    t = DRY_C + 0.30 * s / SHEER_GIRTH_M - 0.20 * x / 5.0
    for cx, cy, a, b in PATCHES:
        r = np.sqrt(((x - cx) / a) ** 2 + ((s - cy) / b) ** 2)  # 1 on the edge
        edge_m = (r - 1.0) * min(a, b)
        t = t + WET_RISE_C * 0.5 * (1 - np.tanh(edge_m / 0.01))
    return t


# ----- band radiance (own Planck integration) -----------------------------------------

BAND_UM = (7.5, 14.0)


def _planck(lam_m: float, t_k: float) -> float:
    h, c, k = constants.h, constants.c, constants.k
    return 2 * h * c ** 2 / lam_m ** 5 / math.expm1(h * c / (lam_m * k * t_k))


@lru_cache(maxsize=None)
def _radiance_table() -> tuple[np.ndarray, np.ndarray]:
    t_k = np.arange(230.0, 330.0, 0.05)
    lo, hi = BAND_UM[0] * 1e-6, BAND_UM[1] * 1e-6
    rad = np.array([integrate.quad(_planck, lo, hi, args=(t,), epsabs=0, epsrel=1e-10)[0] for t in t_k])
    return t_k, rad


def band_radiance(t_k: np.ndarray) -> np.ndarray:
    """In-band radiance W m-2 sr-1 (tabulated every 0.05 K, interpolated)."""
    t_tab, r_tab = _radiance_table()
    return np.interp(t_k, t_tab, r_tab)


def band_temperature(radiance: np.ndarray) -> np.ndarray:
    """Inverse of :func:`band_radiance`, K."""
    t_tab, r_tab = _radiance_table()
    return np.interp(radiance, r_tab, t_tab)


def apparent_c(surface_c_: np.ndarray, *, emissivity: float, reflected_c: float) -> np.ndarray:
    """Apparent temperature of a grey surface with a reflected apparent temperature, no atmosphere."""
    rad = emissivity * band_radiance(surface_c_ + 273.15) + (1 - emissivity) * band_radiance(reflected_c + 273.15)
    return band_temperature(rad) - 273.15


# ----- the pinhole camera -------------------------------------------------------------


@dataclass(frozen=True)
class Camera:
    """A pinhole camera at ``centre`` looking at ``target`` (world up = +Z, no roll)."""

    centre: tuple[float, float, float]
    target: tuple[float, float, float]
    focal_px: float = 210.0
    size_px: tuple[int, int] = (240, 180)  # cols, rows

    def axes(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``right, down, forward`` unit vectors (image col, image row, optical axis)."""
        f = np.subtract(self.target, self.centre).astype(float)
        f /= np.linalg.norm(f)
        r = np.cross(f, [0.0, 0.0, 1.0])
        r /= np.linalg.norm(r)
        return r, np.cross(f, r), f

    def project(self, pts: np.ndarray) -> np.ndarray:
        """``(n, 3)`` world points -> ``(n, 2)`` image ``(col, row)``; whole numbers are pixel centres."""
        r, dn, f = self.axes()
        q = np.asarray(pts, float) - np.asarray(self.centre, float)
        z = q @ f
        cx, cy = (self.size_px[0] - 1) / 2, (self.size_px[1] - 1) / 2
        return np.column_stack([cx + self.focal_px * (q @ r) / z, cy + self.focal_px * (q @ dn) / z])

    def rays(self, cols: np.ndarray, rows: np.ndarray) -> np.ndarray:
        r, dn, f = self.axes()
        cx, cy = (self.size_px[0] - 1) / 2, (self.size_px[1] - 1) / 2
        d = f + ((cols - cx) / self.focal_px)[:, None] * r + ((rows - cy) / self.focal_px)[:, None] * dn
        return d / np.linalg.norm(d, axis=1, keepdims=True)


def render(cam: Camera, *, emissivity: float, reflected_c: float, noise_c: float, rng: np.random.Generator,
           sub: int = 3) -> np.ndarray:
    """Apparent temperature image (degC), each pixel the mean radiance of ``sub x sub`` rays."""
    w, h = cam.size_px
    off = (np.arange(sub) + 0.5) / sub - 0.5
    cc, rr = np.meshgrid(np.arange(w, dtype=float), np.arange(h, dtype=float))
    total = np.zeros(h * w)
    o = np.asarray(cam.centre, float)
    for du in off:
        for dv in off:
            d = cam.rays(cc.ravel() + du, rr.ravel() + dv)
            oo = np.broadcast_to(o, d.shape)
            t_hull, s = _cross_section_hit(oo, d)
            x_hit = o[0] + t_hull * d[:, 0]
            hull = np.isfinite(t_hull) & (x_hit >= STATIONS_M[0]) & (x_hit <= STATIONS_M[1])
            # the other side's bottom panel (mirror image) under the keel
            o_m, d_m = oo * [1, -1, 1], d * [1, -1, 1]
            t_stbd, s_stbd = _cross_section_hit(o_m, d_m)
            stbd = np.isfinite(t_stbd) & (s_stbd <= BOTTOM_M) & (t_stbd < np.where(hull, t_hull, np.inf))
            with np.errstate(divide="ignore", invalid="ignore"):
                t_ground = (GROUND_Z_M - o[2]) / d[:, 2]
            ground = (t_ground > 0) & ~hull & ~stbd
            app = np.full(len(d), SKY_APPARENT_C)
            app[hull] = apparent_c(surface_c(x_hit[hull], s[hull]), emissivity=emissivity, reflected_c=reflected_c)
            app[stbd] = apparent_c(np.full(int(stbd.sum()), STARBOARD_C), emissivity=emissivity,
                                   reflected_c=reflected_c)
            app[ground] = apparent_c(np.full(int(ground.sum()), GROUND_C), emissivity=emissivity,
                                     reflected_c=reflected_c)
            total += band_radiance(app + 273.15)
    img = band_temperature(total / sub ** 2) - 273.15
    return (img + rng.normal(0.0, noise_c, img.shape)).reshape(h, w)


# ----- the survey ---------------------------------------------------------------------

EMISSIVITY = 0.92
REFLECTED_C = 6.0
MARK_GIRTHS_M = (0.0, 0.8, 1.6, 2.4)
OUTLINE = (0.0, 0.0, 5.0, 2.5)   # stations 0-5, girth 0-2.5 (the sheer strip above the top marks)

#: Three overlapping oblique frames: (marks' first station, camera centre); each camera aims
#: at the middle of its marks (girth 1.15 m). A low, a middle and a high viewpoint: the lower
#: bilge is seen at 40-50 degrees from the first and at 70 degrees from the third.
FRAMES = (
    (0, (0.9, 4.0, -0.3)),
    (1, (2.5, 4.3, 0.6)),
    (2, (4.1, 4.0, 1.5)),
)
FOCAL_PX = 170.0


@dataclass(frozen=True)
class Written:
    folder: Path
    cameras: tuple[Camera, ...]
    marks_cr: tuple[np.ndarray, ...]
    marks_xy: np.ndarray | None = None


def marks_of(first_station: int, *, girths=MARK_GIRTHS_M, as_heights: bool = False) -> np.ndarray:
    """``(16, 2)`` developed-plan positions of a frame's tape marks and ``(16, 3)`` hull points.

    ``as_heights``: the plan y given is the mark's height above the keel instead of its girth
    (the mistake the survey format warns about)."""
    xy = np.array([[first_station + i, g] for g in girths for i in range(4)], dtype=float)
    return xy


def write_survey(folder: Path, *, seed: int = 7, heights: bool = False, extra_toml: str = "") -> Written:
    """Render the three frames and write a survey folder (``kind = "hull"``)."""
    rng = np.random.default_rng(seed)
    (folder / "frames").mkdir(parents=True, exist_ok=True)
    (folder / "plan").mkdir(parents=True, exist_ok=True)
    x0, y0, x1, y1 = OUTLINE
    ring = [[x0, y0], [x1, y0], [x1, y1], [x0, y1], [x0, y0]]
    doc = {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {}, "geometry": {"type": "Polygon", "coordinates": [ring]}}]}
    (folder / "plan" / "outline.geojson").write_text(json.dumps(doc), encoding="utf-8")
    blocks, cams, marks = [], [], []
    for k, (first, centre) in enumerate(FRAMES):
        cam = Camera(centre, tuple(float(v) for v in hull_point(first + 1.5, 1.15)), focal_px=FOCAL_PX)
        img = render(cam, emissivity=EMISSIVITY, reflected_c=REFLECTED_C, noise_c=0.1, rng=rng)
        name = f"frames/bilge{k + 1}.npy"
        np.save(folder / name, img.astype(np.float32))
        xy = marks_of(first)
        cr = cam.project(hull_point(xy[:, 0], xy[:, 1]))
        if not ((cr > 2).all() and (cr[:, 0] < cam.size_px[0] - 3).all() and (cr[:, 1] < cam.size_px[1] - 3).all()):
            raise ValueError(f"frame {k + 1}: a tape mark falls outside the image: {cr.round(1).tolist()}")
        plan_y = profile_yz(xy[:, 1])[:, 1] if heights else xy[:, 1]
        pts = [[round(float(c), 2), round(float(r), 2), float(x), round(float(y), 4)]
               for (c, r), x, y in zip(cr, xy[:, 0], plan_y)]
        blocks.append(f'[[frame]]\npath = "{name}"\nunits = "C"\npoints = {json.dumps(pts)}\n')
        cams.append(cam)
        marks.append(cr)
    toml = f"""# A curved hull side rendered by ray casting (test scene, invented).
[survey]
title = "Test hull, bilge turn"
kind = "hull"
crs = "local"
side = "port"

[conditions]
air_c = 12.0
humidity_pct = 70.0
wind_m_s = 1.0
reflected_c = {REFLECTED_C}

[camera]
emissivity = {EMISSIVITY}

[plan]
outline = "plan/outline.geojson"

{chr(10).join(blocks)}
[detect]
delta_c = 0.7
{extra_toml}"""
    (folder / "survey.toml").write_text(toml, encoding="utf-8")
    return Written(folder, tuple(cams), tuple(marks))
