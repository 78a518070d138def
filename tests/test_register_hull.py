"""Registration of a curved hull side on a tape grid, tested on a scene rendered by ray casting.

Independent of wetmap: its own geometry (a hull cross-section of a flat bottom panel, a
circular bilge turn and a flat topside, extruded along the hull), its own pinhole camera
(Hartley & Zisserman, *Multiple View Geometry*, 2nd ed., section 6.1: ``x = K [R | -R C] X``)
and its own band radiance (Planck's law integrated with ``scipy.integrate.quad`` using
``scipy.constants``). All values are invented for the test.

Hull coordinates (metres): ``X`` station along the hull, ``Y`` outboard from the centre
line (this side positive), ``Z`` up from the keel. The developed plan is ``(station, girth)``
with the girth ``s`` measured along the skin from the keel.

What is checked, and against what: the wet area and outline against the patches drawn on the
developed plan (acceptance figures of the project: area within 10 %, IoU >= 0.8, each patch
found once); placement against the renderer's own projection of the skin (pinhole model,
Hartley & Zisserman); viewing angles against the renderer's vector geometry; Fresnel
emissivity against Snell's law and the angle form of the Fresnel equations (Born & Wolf,
Principles of Optics, 1.5.2); the band integration against the Stefan-Boltzmann law
(scipy.constants). Piecewise models: piecewise-affine on a Delaunay triangulation, thin-plate
spline (Bookstein 1989, IEEE PAMI 11(6)). The bundled flat samples against their figures before
this registration (1 %).
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


def fresnel_emissivity_snell(theta_rad: np.ndarray, n: float) -> np.ndarray:
    """Emissivity ``1 - (R_s + R_p) / 2`` of a smooth dielectric, from Snell's law and the Fresnel
    equations in their angle form (Born & Wolf, Principles of Optics, section 1.5.2)."""
    ti = np.clip(np.asarray(theta_rad, float), 1e-6, math.pi / 2 - 1e-9)
    tt = np.arcsin(np.sin(ti) / n)
    r_s = (np.sin(ti - tt) / np.sin(ti + tt)) ** 2
    r_p = (np.tan(ti - tt) / np.tan(ti + tt)) ** 2
    return 1 - 0.5 * (r_s + r_p)


def skin_normal(girth_m: np.ndarray) -> np.ndarray:
    """``(n, 3)`` outward unit normal of the skin at a girth."""
    s = np.asarray(girth_m, float)
    phi = np.where(s <= BOTTOM_M, _B, np.where(s <= BILGE_END_M, _B + (s - BOTTOM_M) / BILGE_R_M, math.pi / 2))
    return np.column_stack([np.zeros_like(phi), np.sin(phi), -np.cos(phi)])


def render(cam: Camera, *, emissivity: float, reflected_c: float, noise_c: float, rng: np.random.Generator,
           sub: int = 3, refractive_index: float | None = None) -> np.ndarray:
    """Apparent temperature image (degC), each pixel the mean radiance of ``sub x sub`` rays.

    ``refractive_index``: the skin's emissivity falls off with the viewing angle as a smooth
    dielectric's does, ``emissivity`` being its value square-on."""
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
            eps = emissivity
            if refractive_index is not None:
                cos_view = np.abs((skin_normal(s[hull]) * d[hull]).sum(axis=1))
                eps = emissivity * fresnel_emissivity_snell(np.arccos(np.clip(cos_view, 0, 1)), refractive_index) / (
                    1 - ((refractive_index - 1) / (refractive_index + 1)) ** 2)
            app[hull] = apparent_c(surface_c(x_hit[hull], s[hull]), emissivity=eps, reflected_c=reflected_c)
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
#: at the middle of its marks (girth 1.15 m). Two low viewpoints and a high one between them:
#: the lower bilge is seen at 40-50 degrees from the low ones and beyond 60 from the high one.
FRAMES = (
    (0, (0.9, 4.0, -0.3)),
    (1, (2.5, 4.3, 1.4)),
    (2, (4.1, 4.0, -0.2)),
)
FOCAL_PX = 170.0


@dataclass(frozen=True)
class Written:
    folder: Path
    cameras: tuple[Camera, ...]
    marks_cr: tuple[np.ndarray, ...]


def marks_of(first_station: int, *, girths=MARK_GIRTHS_M) -> np.ndarray:
    """``(16, 2)`` developed-plan positions ``(station, girth)`` of a frame's tape marks: four
    stations 1 m apart from ``first_station``, at each of ``girths``."""
    return np.array([[first_station + i, g] for g in girths for i in range(4)], dtype=float)


def write_survey(folder: Path, *, seed: int = 7, heights: bool = False, extra_toml: str = "",
                 refractive_index: float | None = None) -> Written:
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
        img = render(cam, emissivity=EMISSIVITY, reflected_c=REFLECTED_C, noise_c=0.1, rng=rng,
                     refractive_index=refractive_index)
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


# ======================================================================================
# The tests
# ======================================================================================

import pytest  # noqa: E402

from wetmap.register import SkinMap, fit_projective, register_points  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]


def test_renderer_band_radiance_matches_stefan_boltzmann_over_the_whole_spectrum():
    """The renderer's own Planck integration, over (almost) all wavelengths, gives sigma T^4 / pi
    (Stefan-Boltzmann law; scipy.constants.Stefan_Boltzmann)."""
    h, c, k = constants.h, constants.c, constants.k
    total = integrate.quad(_planck, 0.5e-6, 1000e-6, args=(300.0,), limit=200, epsrel=1e-10)[0]
    assert total == pytest.approx(constants.Stefan_Boltzmann * 300.0 ** 4 / math.pi, rel=2e-3)
    assert h > 0 and c > 0 and k > 0


def test_the_profile_is_measured_along_the_skin():
    """Girth is arc length: equal steps of girth are equal steps along the cross-section."""
    s = np.linspace(0, SHEER_GIRTH_M, 2001)
    yz = profile_yz(s)
    steps = np.hypot(*np.diff(yz, axis=0).T)
    assert np.allclose(steps, s[1] - s[0], rtol=1e-4)


@pytest.fixture(scope="module")
def bilge(tmp_path_factory):
    """The three oblique frames written and run: ``(written, result, summary)``."""
    from wetmap.pipeline import run_survey

    folder = tmp_path_factory.mktemp("bilge")
    written = write_survey(folder)
    result = run_survey(folder)
    return written, result, json.loads((folder / "results" / "summary.json").read_text(encoding="utf-8"))


def test_curved_hull_wet_area_and_shape(bilge):
    """Acceptance figures of the project (area within 10 %, IoU >= 0.8, each patch once)."""
    _, result, summary = bilge
    true = shapely.union_all(true_patches())
    assert true.area == pytest.approx(1.50, rel=1e-3)
    found = shapely.union_all([a.geometry for a in result.anomalies])
    assert abs(summary["wet_area_m2"] / 1.50 - 1) <= 0.10
    assert found.intersection(true).area / found.union(true).area >= 0.8
    assert summary["anomaly_count"] == 2
    for patch in true_patches():  # each patch found once
        hit = [a for a in result.anomalies if a.geometry.intersects(patch)]
        assert len(hit) == 1 and abs(hit[0].area_m2 / patch.area - 1) <= 0.15


def test_no_false_strip_along_the_keel(bilge):
    """Nothing is detected on the bottom panel (girth below 0.4 m): the warm yard under the
    keel and the grazing views of the bottom are not placed on the skin."""
    _, result, _ = bilge
    keel = shapely.box(*OUTLINE[:2], OUTLINE[2], 0.4)
    assert all(a.geometry.intersection(keel).area < 0.01 for a in result.anomalies)


def test_registration_is_piecewise_and_reported(bilge):
    """Each frame of the curved skin is placed by a piecewise model; residuals in pixels and
    millimetres on the skin, per model, are in summary.json."""
    written, _, summary = bilge
    regs = summary["registration"]
    assert len(regs) == 3
    for reg in regs:
        assert reg["points"] == 16
        assert reg["model"] in ("piecewise-affine", "thin-plate spline")
        assert set(reg["models"]) == {"homography", "piecewise-affine", "thin-plate spline"}
        assert reg["loo_rms_px"] > 0 and reg["loo_rms_mm"] > 0
        assert reg["loo_rms_px"] < reg["models"]["homography"]["loo_rms_px"]
        assert reg["rms_px"] > 2.0  # a plane cannot fit the curved skin: the homography misses its marks
        assert 0 <= reg["view_angle_deg"]["median"] <= reg["view_angle_deg"]["max"] <= 75


def test_the_chosen_map_places_the_skin_within_a_pixel_or_two():
    """Against the renderer's own projection of the skin, between the marks (pinhole model,
    Hartley & Zisserman): the chosen piecewise map is within 1 px RMS, the homography is not."""
    for first, centre in FRAMES:
        cam = Camera(centre, tuple(float(v) for v in hull_point(first + 1.5, 1.15)), focal_px=FOCAL_PX)
        xy = marks_of(first)
        cr = cam.project(hull_point(xy[:, 0], xy[:, 1]))
        reg = register_points(cr, xy, piecewise=True)
        assert reg.model != "homography"
        xs, ys = np.meshgrid(np.linspace(first, first + 3, 31), np.linspace(0.0, 2.4, 25))
        true = cam.project(hull_point(xs.ravel(), ys.ravel()))
        c, r = reg.skin.to_image(xs.ravel(), ys.ravel())
        assert np.sqrt(np.mean((c - true[:, 0]) ** 2 + (r - true[:, 1]) ** 2)) < 1.0
        hc, hr = SkinMap("homography", reg.matrix, xy, cr).to_image(xs.ravel(), ys.ravel())
        assert np.sqrt(np.mean((hc - true[:, 0]) ** 2 + (hr - true[:, 1]) ** 2)) > 3.0


def test_view_angle_estimate_follows_the_true_angle():
    """The angle from the local map's anisotropy against the true angle between the line of
    sight and the skin's normal (vector geometry of the renderer), on the bilge and topside."""
    first, centre = FRAMES[0]
    cam = Camera(centre, tuple(float(v) for v in hull_point(first + 1.5, 1.15)), focal_px=FOCAL_PX)
    xy = marks_of(first)
    cr = cam.project(hull_point(xy[:, 0], xy[:, 1]))
    reg = register_points(cr, xy, piecewise=True)
    xs, ys = np.meshgrid(np.linspace(first + 0.5, first + 2.5, 5), np.linspace(0.6, 2.2, 9))
    large, small = reg.skin.scales(xs.ravel(), ys.ravel(), step_m=0.02)
    est = np.degrees(np.arccos(np.clip(small / large, 0, 1)))
    eps = 1e-4
    s = ys.ravel()
    tangent = (profile_yz(s + eps) - profile_yz(s - eps)) / (2 * eps)
    normal = np.column_stack([np.zeros(len(s)), tangent[:, 1], -tangent[:, 0]])
    sight = np.asarray(centre) - hull_point(xs.ravel(), s)
    sight /= np.linalg.norm(sight, axis=1, keepdims=True)
    true = np.degrees(np.arccos(np.abs((normal * sight).sum(1))))
    # the anisotropy measures the tilt relative to the image plane: within the half field of view
    half_fov = math.degrees(math.atan(math.hypot(*cam.size_px) / 2 / FOCAL_PX))
    assert np.all(np.abs(est - true) <= half_fov)
    assert np.corrcoef(est, true)[0, 1] > 0.8


def test_four_marks_on_a_flat_panel_use_the_homography():
    """A flat panel with 4 marks (and with 9 marks on a plane): the homography is kept."""
    cam = Camera((2.0, 4.0, 2.0), (1.5, 1.2, 2.2))
    flat = np.array([[1.0, 2.0], [2.5, 2.0], [2.5, 2.6], [1.0, 2.6]])  # on the topside (vertical)
    cr = cam.project(hull_point(flat[:, 0], flat[:, 1]))
    assert register_points(cr, flat, piecewise=True).model == "homography"
    grid = np.array([[x, g] for x in (1.0, 1.75, 2.5) for g in (1.9, 2.25, 2.6)])
    cr = cam.project(hull_point(grid[:, 0], grid[:, 1]))
    reg = register_points(np.round(cr, 1), grid, piecewise=True)
    assert reg.model == "homography"
    assert fit_projective(np.round(cr, 1), grid).rms_px < 0.2


def test_pixels_outside_the_marks_fill_only_what_nothing_else_covers(bilge):
    """The sheer strip (girth 2.4-2.5) lies beyond every frame's marks: it is placed
    (extrapolated), with a warning; elsewhere frames are used within their marks."""
    _, result, summary = bilge
    assert sum(r["extrapolated_m2"] for r in summary["registration"]) > 0
    assert any("placed from outside its tape marks" in w for w in summary["warnings"])
    for r in summary["registration"]:  # a small share of what each frame gives
        assert r["extrapolated_m2"] < 0.2 * r["used_m2"]


def _sample_figures(folder: Path) -> dict:
    s = json.loads((folder / "results" / "summary.json").read_text(encoding="utf-8"))
    return {"wet_area_m2": s["wet_area_m2"], "anomaly_count": s["anomaly_count"]}


# wet area and anomaly count of the bundled samples before piecewise registration and the
# viewing-angle rule (from their runs at that time)
SAMPLES_BEFORE = {
    "yacht_hull": {"wet_area_m2": 0.9344, "anomaly_count": 4},
    "walked_roof": {"wet_area_m2": 15.7716, "anomaly_count": 4},
}


@pytest.mark.parametrize("name", sorted(SAMPLES_BEFORE))
def test_flat_samples_are_unchanged(name, tmp_path):
    """The flat hull sample and the walked roof: wet area within 1 % and the same anomaly count."""
    from wetmap.pipeline import run_survey

    src = ROOT / "sample_surveys" / name
    if not src.is_dir():
        pytest.skip(f"sample_surveys/{name} not present in this checkout")
    result = run_survey(src, out=tmp_path / "results")
    s = result.summary()
    before = SAMPLES_BEFORE[name]
    assert s["anomaly_count"] == before["anomaly_count"]
    assert abs(s["wet_area_m2"] / before["wet_area_m2"] - 1) <= 0.01
    assert all(r["model"] == "homography" for r in s["registration"])
    # their oblique views are judged too: each frame's viewing angles are estimated
    assert all(0 < r["view_angle_deg"]["median"] <= r["view_angle_deg"]["max"] < 71 for r in s["registration"])


def test_heights_instead_of_girths_are_warned(tmp_path):
    """The same frames with each mark's height above the keel given as y: warned (the two low
    views see the bottom and bilge stretched along y); the girths of the fixture are not."""
    from wetmap.pipeline import check_survey

    write_survey(tmp_path / "heights", heights=True)
    _, found = check_survey(tmp_path / "heights")
    stretched = [w for w in found if "look like heights, not girths" in w]
    assert len(stretched) == 2 and all("bilge1" in w or "bilge3" in w for w in stretched)
    write_survey(tmp_path / "girths")
    _, found = check_survey(tmp_path / "girths")
    assert not [w for w in found if "look like heights" in w]


def test_heights_give_a_small_area_girths_do_not(bilge, tmp_path):
    """Why the warning matters: taped by height, the wet area on the bilge comes out small."""
    from wetmap.pipeline import process_survey

    write_survey(tmp_path / "heights", heights=True)
    small = sum(a.area_m2 for a in process_survey(tmp_path / "heights").anomalies)
    _, result, _ = bilge
    right = sum(a.area_m2 for a in result.anomalies)
    assert small < 0.85 * right


def test_the_better_view_wins_where_frames_overlap():
    """Two frames of one plan pixel row: one square-on, one at 65 degrees. Only the square-on
    one is used where both cover; the oblique one fills where it is alone. With both beyond
    the limit and within the tolerance of each other, both are averaged."""
    from wetmap.register import ResampledFrame, blend_frames, placement_ranks

    one = np.ones((1, 3), np.float32)
    good = ResampledFrame((0, 1, 0, 3), one * 10, one, one, view_angle_deg=np.array([[10, 10, 10]], np.float32))
    oblique = ResampledFrame((0, 1, 1, 4), one * 20, one * 5, one, view_angle_deg=np.array([[65, 65, 65]], np.float32))
    out = blend_frames([good, oblique], (1, 4))
    assert out.tolist() == [[10.0, 10.0, 10.0, 20.0]]
    ranks = placement_ranks([good, oblique], (1, 4))
    assert ranks[1].tolist() == [[1, 1, 0]]
    a = ResampledFrame((0, 1, 0, 3), one * 10, one, one, view_angle_deg=np.array([[64, 64, 64]], np.float32))
    b = ResampledFrame((0, 1, 0, 3), one * 20, one, one, view_angle_deg=np.array([[66, 66, 66]], np.float32))
    assert blend_frames([a, b], (1, 3)).tolist() == [[15.0, 15.0, 15.0]]
    assert blend_frames([a, b], (1, 3), max_view_angle_deg=70).tolist() == [[15.0, 15.0, 15.0]]
    c = ResampledFrame((0, 1, 0, 3), one * 20, one, one, view_angle_deg=np.array([[80, 80, 80]], np.float32))
    assert blend_frames([a, c], (1, 3)).tolist() == [[10.0, 10.0, 10.0]]


def test_max_view_angle_key(tmp_path):
    """``[camera] max_view_angle_deg``: read, defaulted to 60 and range-checked."""
    from wetmap.errors import SurveyError
    from wetmap.survey import load_survey

    folder = tmp_path / "angle"
    write_survey(folder)
    assert load_survey(folder).camera.max_view_angle_deg == 60.0
    text = (folder / "survey.toml").read_text(encoding="utf-8")
    (folder / "survey.toml").write_text(text.replace("[camera]\n", "[camera]\nmax_view_angle_deg = 45\n"),
                                        encoding="utf-8")
    assert load_survey(folder).camera.max_view_angle_deg == 45.0
    (folder / "survey.toml").write_text(text.replace("[camera]\n", "[camera]\nmax_view_angle_deg = 95\n"),
                                        encoding="utf-8")
    with pytest.raises(SurveyError, match="max_view_angle_deg"):
        load_survey(folder)


def test_fresnel_emissivity_matches_the_angle_form_of_the_equations():
    """wetmap's Fresnel emissivity against the renderer's own (Snell's law and the angle form of
    the Fresnel equations, Born & Wolf 1.5.2): normal incidence ((n-1)/(n+1))**2 reflectance,
    Brewster's angle (R_p = 0) and grazing (emissivity -> 0)."""
    from wetmap.register import fresnel_emissivity

    angles = np.linspace(1.0, 89.0, 89)
    for n in (1.3, 1.5, 2.4):
        assert np.allclose(fresnel_emissivity(angles, n), fresnel_emissivity_snell(np.radians(angles), n), atol=1e-9)
        assert float(fresnel_emissivity(np.array(0.0), n)) == pytest.approx(1 - ((n - 1) / (n + 1)) ** 2)
    assert float(fresnel_emissivity(np.array(90.0), 1.5)) == pytest.approx(0.0, abs=1e-9)


def test_emissivity_by_angle_recovers_the_skin_temperature(tmp_path):
    """Frames rendered with an emissivity that falls with the viewing angle (a dielectric of
    index 1.5): with ``[camera] refractive_index = 1.5`` the dry skin's surface temperature is
    recovered more closely than without."""
    from wetmap.pipeline import process_survey

    errors = {}
    for key in ("", "refractive_index = 1.5\n"):
        folder = tmp_path / ("fresnel" if key else "plain")
        write_survey(folder, refractive_index=1.5)
        text = (folder / "survey.toml").read_text(encoding="utf-8")
        (folder / "survey.toml").write_text(text.replace("[camera]\n", "[camera]\n" + key), encoding="utf-8")
        result = process_survey(folder)
        rows, cols = np.indices(result.surface_c.shape)
        xs, ys = result.grid.transform * (cols + 0.5, rows + 0.5)
        truth = surface_c(xs, ys)
        dry = np.isfinite(result.surface_c) & ~shapely.contains_xy(
            shapely.union_all(true_patches()).buffer(0.1), xs, ys)
        err = result.surface_c - truth
        bottom = dry & (ys < BOTTOM_M)  # seen at 70 degrees and more
        errors[bool(key)] = (float(np.percentile(np.abs(err[dry]), 90)), float(abs(np.median(err[bottom]))))
    assert errors[False][0] > 0.5  # without: the oblique skin reads cold (p90 of |error| about 1 K)
    assert errors[True][0] < 0.5 * errors[False][0]
    assert errors[True][1] < 0.5 * errors[False][1]


def test_outside_the_marks_only_where_nothing_else_covers():
    """A piecewise frame's pixels outside its marks' hull fill only plan pixels no frame covers
    from within its marks, even when their view is better."""
    from wetmap.register import ResampledFrame, blend_frames

    one = np.ones((1, 3), np.float32)
    inside = ResampledFrame((0, 1, 0, 3), one * 10, one, one, view_angle_deg=one * 50,
                            outside_marks=np.zeros((1, 3), bool))
    beyond = ResampledFrame((0, 1, 1, 4), one * 20, one * 9, one, view_angle_deg=one * 5,
                            outside_marks=np.ones((1, 3), bool))
    assert blend_frames([inside, beyond], (1, 4)).tolist() == [[10.0, 10.0, 10.0, 20.0]]
