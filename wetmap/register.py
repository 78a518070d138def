"""Control points -> projective transform; frames -> one mosaic on the plan grid.

Coordinates
-----------
Image points are ``(col, row)`` in pixel-index units: whole numbers are pixel
*centres*, so ``(0, 0)`` is the centre of the top-left pixel and ``(-0.5, -0.5)`` its
outer corner (numpy's and scikit-image's convention, and what an image viewer that
shows pixel indices reports). Plan points ``(x, y)`` are plan metres. A roof or a
flat panel of a hull side is a plane, so one projective transform (a homography)
maps a frame onto the plan. A curved hull skin is not: with a dense tape grid (6 marks or
more) a frame may be placed by a piecewise map, plan -> image (:class:`SkinMap`,
:func:`choose_model`): piecewise-affine over the marks' Delaunay triangles, or a thin-plate
spline (Bookstein 1989, IEEE PAMI 11(6)), whichever predicts left-out marks best, and only
when clearly better than the homography.

Fitting (:func:`fit_projective`)
--------------------------------
1. The point set is checked first (:func:`check_point_set`): no point given twice, and
   at least 4 points of which no 3 lie on one line, in the image and on the plan;
   otherwise the transform is undetermined and a :class:`~wetmap.errors.SurveyError`
   names the survey.toml entry.
2. A first estimate by the direct linear transform of
   :class:`skimage.transform.ProjectiveTransform` on centred, scaled coordinates.
3. Refined by least squares (:func:`scipy.optimize.least_squares`) on the image
   residuals in pixels: picking a mark in a frame is where the error lies; plan
   positions of marks are surveyed. With noiseless points both steps are exact.
4. Residuals: in pixels, between each image point and where the transform puts its
   plan point in the image; in plan metres, between each plan point and where the
   transform puts its image point on the plan.

Leave-one-out (:func:`leave_one_out`, 5 or more points): each point is predicted from a
fit to the others. From 6 points on, the point whose removal lets the others fit best is
the *suspect*; it is named when it lies at least :data:`SUSPECT_MIN_PX` pixels and
:data:`SUSPECT_SIGMAS` standard deviations from where they put it (allowing for their scatter,
at least :data:`PICK_SIGMA_PX`, and for how well they determine the prediction there: a point
outside the others' spread is predicted less well), and when leaving it out fits the others
clearly better (:data:`DISTINCT_RATIO`) than leaving out any other point; otherwise the note
names the candidates. With exactly
5 points any 4 fit exactly, so a misplaced point shows as a large residual but cannot be
told from the others (this is geometry, not a limitation of the method): the note says so
and asks for a sixth point.

Mosaicking (:func:`resample_frame`, :func:`blend_frames`)
--------------------------------------------------------
Each frame (already corrected to surface temperature) is resampled onto the plan grid
by inverse mapping: every plan pixel centre is taken into the image by the inverse
transform and the image is sampled bilinearly (:func:`scipy.ndimage.map_coordinates`).
A plan pixel is covered by a frame when its centre falls on the image (within the outer
pixel edges), in front of the camera (the same side of the horizon as the control points),
and the view there is not too oblique: the footprint of an image pixel on the plan is at
most :data:`MAX_FORESHORTENING` times longer than it is wide (about 70° from square-on at
the image centre; at grazing views emissivity falls and one pixel smears a long strip).
Image pixels without data give no data; bilinear sampling next to them gives none either.

Each covered plan pixel also gets an estimated viewing angle: ``cos(angle) = small / large``
singular value of the local plan -> image Jacobian (a square-on skin element images
undistorted; tilted by ``a`` it is shortened by ``cos a`` across its tilt).
:func:`placement_ranks` ranks every frame's pixels (outside a piecewise frame's marks, a
blurred frame, a view beyond ``[camera] max_view_angle_deg`` where another is at least
:data:`VIEW_ANGLE_TOLERANCE_DEG` better) and only the best-ranked frames of a plan pixel
are blended.

Overlaps are blended as a weighted mean with weight ``taper / g**2``: ``g`` is the coarser
ground sampling distance of the pixel's footprint (metres per image pixel, from the local
Jacobian of the transform, whose determinant is the footprint's area): small for a sharp,
near, square-on view, large for a far or oblique one. ``taper`` rises from 0 at the frame's
edge (or the edge of its nodata) to 1 at :data:`EDGE_TAPER_FRACTION` of the frame's smaller
side, so seams do not show. Plan pixels no frame covers stay NaN: uncovered, never dry.

Plan pixel size (:func:`choose_pixel_m`): the median over frames of each frame's median
ground sampling distance (the square root of the Jacobian determinant, over the part of
the frame that lands within the plan's bounds), rounded down to 1, 1.5, 2, 2.5, 3, 4, 5,
6 or 8 times a power of ten. ``[plan] pixel_m`` overrides it.

Examples
--------
>>> import numpy as np
>>> cr = np.array([[0, 0], [99, 0], [99, 79], [0, 79], [50, 40]], dtype=float)
>>> xy = np.column_stack([10 + 0.05 * cr[:, 0], 20 - 0.05 * cr[:, 1]])  # 5 cm pixels, north up
>>> fit = fit_projective(cr, xy)
>>> round(fit.rms_px, 9), round(fit.rms_m, 9)
(0.0, 0.0)
>>> [round(float(v[0]), 3) for v in project(fit.matrix, np.array([10.0]), np.array([10.0]))]
[10.5, 19.5]
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import shapely

from .errors import SurveyError

__all__ = [
    "ProjectiveFit",
    "LeaveOneOut",
    "Registration",
    "ResampledFrame",
    "FrameReport",
    "check_point_set",
    "fit_projective",
    "leave_one_out",
    "register_points",
    "project",
    "ground_sampling_m",
    "frame_gsd_m",
    "choose_pixel_m",
    "resample_frame",
    "blend_frames",
    "placement_ranks",
    "fresnel_emissivity",
    "girth_stretch",
    "GirthStretch",
    "GIRTH_STRETCH_MAX",
    "SkinMap",
    "choose_model",
    "SKIN_MODELS",
    "MIN_PIECEWISE_POINTS",
    "MAX_VIEW_ANGLE_DEG",
    "MAX_FORESHORTENING",
    "EDGE_TAPER_FRACTION",
    "SUSPECT_MIN_PX",
    "SUSPECT_SIGMAS",
    "PICK_SIGMA_PX",
    "DISTINCT_RATIO",
]

#: Largest ratio of the long to the short side of a pixel's footprint on the plan that is
#: used: 1 / cos(70°) = 2.9 (common practice: keep views within about 60-70° of the
#: surface normal; the emissivity of water falls from 0.99 square-on to 0.90 at 70°,
#: Fresnel with the Hale & Querry constants).
MAX_FORESHORTENING = 3.0
#: The blending weight rises from the frame edge over this fraction of its smaller side.
EDGE_TAPER_FRACTION = 0.1
#: A leave-one-out suspect is named only when it is at least this far (image pixels)
#: from where the other points put it (common practice: a mark picked within a pixel or
#: two is as good as picking gets).
SUSPECT_MIN_PX = 2.0
#: ... and this many standard deviations from it (2-D Mahalanobis distance, allowing for the
#: scatter of the other points and for how well they determine the prediction there;
#: chi-squared with 2 degrees of freedom exceeds 4**2 with probability exp(-8) = 3e-4).
SUSPECT_SIGMAS = 4.0
#: Smallest picking scatter assumed, image pixels per axis: a mark picked at a whole pixel
#: is off by up to half a pixel, 1 / sqrt(12) = 0.29 px RMS (uniform rounding).
PICK_SIGMA_PX = 0.3
#: The suspect is named only when leaving it out fits the others at least this many times
#: better (RMS) than leaving out any other point; otherwise the candidates are listed.
DISTINCT_RATIO = 1.5
#: Relative tolerance for "the same point" and "on one line": a fraction of the spread
#: of the points (and at least half a pixel in the image).
_REL_TOL = 1e-3
#: The models that can place a frame (:func:`choose_model`).
SKIN_MODELS = ("homography", "piecewise-affine", "thin-plate spline")
#: A frame is registered piecewise only from this many control points on (a dense tape grid:
#: fewer leave too few triangles, and 4 or 5 points cannot check a piecewise model at all).
MIN_PIECEWISE_POINTS = 6
#: Beyond this angle from the skin's normal a frame's pixels are not used where a better
#: view covers the same skin (``[camera] max_view_angle_deg``; common practice: keep views
#: within about 60 degrees of square-on, beyond which emissivity falls and pixels smear).
MAX_VIEW_ANGLE_DEG = 60.0
#: Views beyond the limit but within this many degrees of the best view of a plan pixel are
#: still used there (several equally oblique views are blended, not one picked at random).
VIEW_ANGLE_TOLERANCE_DEG = 5.0
#: A piecewise-registered frame is extrapolated at most this fraction of its marks' spacing
#: beyond their hull (a piecewise model is unfounded far from its marks).
EXTRAPOLATE_SPACING = 0.25
_NICE = (1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0)


# --------------------------------------------------------------------------------------
# Homogeneous helpers
# --------------------------------------------------------------------------------------


def project(matrix: np.ndarray, us: np.ndarray, vs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Apply a 3 x 3 projective ``matrix`` to points ``(us, vs)``.

    Parameters
    ----------
    matrix
        ``(3, 3)``; maps homogeneous ``(u, v, 1)`` to ``(x w, y w, w)``.
    us, vs
        Coordinates of the same shape.

    Returns
    -------
    xs, ys
        Same shape; ``inf`` or ``nan`` where ``w == 0`` (the horizon).

    >>> m = np.array([[2.0, 0, 1], [0, 2, 1], [0, 0, 1]])
    >>> project(m, np.array([1.0]), np.array([2.0]))
    (array([3.]), array([5.]))
    """
    us, vs = np.asarray(us, dtype=np.float64), np.asarray(vs, dtype=np.float64)
    w = matrix[2, 0] * us + matrix[2, 1] * vs + matrix[2, 2]
    with np.errstate(divide="ignore", invalid="ignore"):
        xs = (matrix[0, 0] * us + matrix[0, 1] * vs + matrix[0, 2]) / w
        ys = (matrix[1, 0] * us + matrix[1, 1] * vs + matrix[1, 2]) / w
    return xs, ys


def _w(matrix: np.ndarray, us: np.ndarray, vs: np.ndarray) -> np.ndarray:
    return matrix[2, 0] * us + matrix[2, 1] * vs + matrix[2, 2]


def _singular_values(matrix: np.ndarray, us: np.ndarray, vs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Singular values ``(large, small)`` of the local Jacobian of ``matrix`` at ``(us, vs)``.

    Units: output length per input length. Closed form for 2 x 2 matrices.
    """
    w = _w(matrix, us, vs)
    xs, ys = project(matrix, us, vs)
    with np.errstate(divide="ignore", invalid="ignore"):
        a = (matrix[0, 0] - xs * matrix[2, 0]) / w
        b = (matrix[0, 1] - xs * matrix[2, 1]) / w
        c = (matrix[1, 0] - ys * matrix[2, 0]) / w
        d = (matrix[1, 1] - ys * matrix[2, 1]) / w
    s = a * a + b * b + c * c + d * d
    det = np.abs(a * d - b * c)
    root = np.sqrt(np.maximum(s * s - 4.0 * det * det, 0.0))
    large = np.sqrt(0.5 * (s + root))
    small = np.sqrt(np.maximum(0.5 * (s - root), 0.0))
    return large, small


def ground_sampling_m(matrix: np.ndarray, cols: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Ground sampling distance of image pixels: ``(fine, coarse)`` metres per pixel.

    Parameters
    ----------
    matrix
        Image ``(col, row)`` -> plan ``(x, y)``.
    cols, rows
        Image points.

    Returns
    -------
    fine, coarse
        The short and long side of a pixel's footprint on the plan (singular values of
        the local Jacobian), m per pixel. ``sqrt(fine * coarse)`` is the square root of
        the Jacobian determinant (the footprint's area); ``coarse / fine`` is the
        foreshortening.

    >>> m = np.array([[0.05, 0, 0], [0, -0.02, 0], [0, 0, 1.0]])
    >>> [round(float(v[0]), 3) for v in ground_sampling_m(m, np.array([3.0]), np.array([4.0]))]
    [0.02, 0.05]
    """
    large, small = _singular_values(matrix, cols, rows)
    return small, large


# --------------------------------------------------------------------------------------
# Checking the point set
# --------------------------------------------------------------------------------------


def _spread(pts: np.ndarray) -> float:
    return float(np.max(np.ptp(pts, axis=0))) if len(pts) else 0.0


def _collinear3(pts: np.ndarray, tol: float) -> np.ndarray:
    """``(n, n, n)`` bool: True where points i, j, k lie on one line (within ``tol``)."""
    p = pts[:, None, :] - pts[None, :, :]  # p[i, j] = pts[i] - pts[j]
    n = len(pts)
    # twice the triangle area |(pj - pi) x (pk - pi)|, divided by the longest side
    vi = -p  # vi[i, j] = pts[j] - pts[i]
    cross = vi[:, :, None, 0] * vi[:, None, :, 1] - vi[:, :, None, 1] * vi[:, None, :, 0]
    d = np.sqrt((p ** 2).sum(-1))
    longest = np.maximum(np.maximum(d[:, :, None], d[:, None, :]), d[None, :, :])
    with np.errstate(divide="ignore", invalid="ignore"):
        height = np.abs(cross) / longest
    out = np.asarray(height <= tol)
    out |= longest <= tol
    idx = np.arange(n)
    out[idx, idx, :] = out[idx, :, idx] = out[:, idx, idx] = True
    return out


def _largest_collinear(pts: np.ndarray, tol: float) -> list[int]:
    """Indices of the largest set of points on one line (within ``tol``)."""
    n = len(pts)
    best: list[int] = []
    col = _collinear3(pts, tol)
    for i in range(n):
        for j in range(i + 1, n):
            members = [k for k in range(n) if col[i, j, k]]
            if len(members) > len(best):
                best = members
    return best


def _has_general_four(pts: np.ndarray, tol: float) -> bool:
    """True when 4 of the points have no 3 on one line (within ``tol``)."""
    n = len(pts)
    if n < 4:
        return False
    if n > 12:  # exhaustive search is costly; with 2 points off the largest line, 4 good ones exist
        return n - len(_largest_collinear(pts, tol)) >= 2
    col = _collinear3(pts, tol)
    for a, b, c, d in itertools.combinations(range(n), 4):
        if not (col[a, b, c] or col[a, b, d] or col[a, c, d] or col[b, c, d]):
            return True
    return False


def _numbers(idx: Sequence[int]) -> str:
    return ", ".join(str(i + 1) for i in idx)


def check_point_set(image_cr: np.ndarray, plan_xy: np.ndarray, *, where: str = "control points") -> None:
    """Refuse a control-point set that does not determine a projective transform.

    Parameters
    ----------
    image_cr
        ``(n, 2)`` image ``(col, row)``, pixels.
    plan_xy
        ``(n, 2)`` plan ``(x, y)``, metres.
    where
        Names the entry in messages, e.g. ``"survey.toml: [[frame]] #2 points"``.

    Raises
    ------
    SurveyError
        Fewer than 4 points, a point given twice (the same image pixel or the same plan
        mark), all points on one line, or no 4 points with no 3 of them on one line;
        the message names the points (numbered from 1 as listed) and the fix.

    >>> cr = np.array([[0, 0], [10, 0], [20, 0], [30, 1e-6], [5, 5]], dtype=float)
    >>> try:
    ...     check_point_set(cr, cr, where="f")
    ... except SurveyError as err:
    ...     print(err.problems[0])  # doctest: +ELLIPSIS
    f: points 1, 2, 3, 4 lie on one line in the image and only 1 point(s) off it: ...
    """
    image_cr = np.asarray(image_cr, dtype=np.float64).reshape(-1, 2)
    plan_xy = np.asarray(plan_xy, dtype=np.float64).reshape(-1, 2)
    n = len(image_cr)
    if n != len(plan_xy):
        raise ValueError("image_cr and plan_xy hold different numbers of points")
    if n < 4:
        raise SurveyError(f"{where}: {n} control points: a projective transform needs at least 4 "
                          "[col, row, x, y], no 3 of them on one line")
    if not (np.isfinite(image_cr).all() and np.isfinite(plan_xy).all()):
        raise SurveyError(f"{where}: a control point is not a finite number")
    need = ("a projective transform needs 4 points, no 3 of them on one line: add control points off "
            "that line (e.g. corners and marks spread over the frame)")
    for space, pts, floor in (("image", image_cr, 0.5), ("plan", plan_xy, 0.0)):
        tol = max(_REL_TOL * _spread(pts), floor)
        d = np.sqrt(((pts[:, None, :] - pts[None, :, :]) ** 2).sum(-1))
        i, j = np.nonzero(np.triu(d <= tol, k=1))
        if len(i):
            a, b = int(i[0]), int(j[0])
            what = "image point" if space == "image" else "plan point"
            raise SurveyError(
                f"{where}: points {a + 1} and {b + 1} are the same {what} "
                f"({_fmt_pt(pts[a])} and {_fmt_pt(pts[b])}): each control point must be a different mark; "
                "remove the duplicate or correct it"
            )
        line = _largest_collinear(pts, tol)
        if len(line) == n:
            raise SurveyError(f"{where}: all {n} points lie on one line in the {space}: {need}")
        if not _has_general_four(pts, tol):
            raise SurveyError(f"{where}: points {_numbers(line)} lie on one line in the {space} and "
                              f"only {n - len(line)} point(s) off it: {need}")


def _fmt_pt(p: np.ndarray) -> str:
    return f"[{p[0]:.6g}, {p[1]:.6g}]"


# --------------------------------------------------------------------------------------
# Fitting
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ProjectiveFit:
    """A projective transform fitted to control points, with its residuals.

    Attributes
    ----------
    matrix
        ``(3, 3)``: image ``(col, row, 1)`` -> plan ``(x w, y w, w)``.
    residuals_px
        ``(n,)`` distance in the image between each image point and where the transform
        puts its plan point, pixels.
    residuals_m
        ``(n,)`` distance on the plan between each plan point and where the transform
        puts its image point, metres.
    """

    matrix: np.ndarray
    residuals_px: np.ndarray
    residuals_m: np.ndarray

    @property
    def inverse(self) -> np.ndarray:
        """``(3, 3)``: plan ``(x, y, 1)`` -> image ``(col w, row w, w)``."""
        return np.linalg.inv(self.matrix)

    @property
    def rms_px(self) -> float:
        """Root mean square of the image residuals, pixels."""
        return float(np.sqrt(np.mean(self.residuals_px ** 2)))

    @property
    def rms_m(self) -> float:
        """Root mean square of the plan residuals, metres."""
        return float(np.sqrt(np.mean(self.residuals_m ** 2)))

    @property
    def mirrored(self) -> bool:
        """True when the image is a mirror view of the plan (plan y up, image rows down).

        A camera looking down on a roof never gives one: x and y swapped in the points,
        or a flipped image, do. (On a hull side it depends on the side and the station
        direction.)
        """
        # the local Jacobian determinant is det(matrix) / w**3, and w > 0 over the frame
        return bool(np.linalg.det(self.matrix) > 0)


def _normaliser(pts: np.ndarray) -> np.ndarray:
    """Similarity taking ``pts`` to centroid 0 and mean distance sqrt(2)."""
    centre = pts.mean(axis=0)
    mean_d = float(np.mean(np.sqrt(((pts - centre) ** 2).sum(-1))))
    s = math.sqrt(2.0) / mean_d if mean_d > 0 else 1.0
    return np.array([[s, 0.0, -s * centre[0]], [0.0, s, -s * centre[1]], [0.0, 0.0, 1.0]])


def _dlt(src: np.ndarray, dst: np.ndarray) -> np.ndarray | None:
    """scikit-image's direct linear transform ``src -> dst``; None when it fails."""
    from skimage.transform import ProjectiveTransform

    if hasattr(ProjectiveTransform, "from_estimate"):  # scikit-image >= 0.26
        tf = ProjectiveTransform.from_estimate(src, dst)
        return np.asarray(tf.params, dtype=np.float64) if tf else None
    tf = ProjectiveTransform()  # pragma: no cover - older scikit-image
    return np.asarray(tf.params, dtype=np.float64) if tf.estimate(src, dst) else None  # pragma: no cover


def _fit_plan_to_image(image_cr: np.ndarray, plan_xy: np.ndarray) -> np.ndarray | None:
    """Plan -> image matrix minimising image residuals (pixels); None when undetermined."""
    from scipy.optimize import least_squares

    tp, ti = _normaliser(plan_xy), _normaliser(image_cr)
    q = plan_xy @ tp[:2, :2].T + tp[:2, 2]
    p = image_cr @ ti[:2, :2].T + ti[:2, 2]
    g0 = _dlt(q, p)
    if g0 is None or not np.isfinite(g0).all():
        return None
    if abs(g0[2, 2]) < 1e-12:  # the points' centroid would map to the horizon: undetermined
        return None
    g0 = g0 / g0[2, 2]

    def residuals(h: np.ndarray) -> np.ndarray:
        g = np.append(h, 1.0).reshape(3, 3)
        u, v = project(g, q[:, 0], q[:, 1])
        return np.concatenate([u - p[:, 0], v - p[:, 1]])

    if len(q) > 4:
        sol = least_squares(residuals, g0.ravel()[:8], method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15)
        if sol.success and np.isfinite(sol.x).all():
            g0 = np.append(sol.x, 1.0).reshape(3, 3)
    g = np.linalg.inv(ti) @ g0 @ tp
    return g / np.linalg.norm(g)


def _prediction_spread(image_cr: np.ndarray, plan_xy: np.ndarray, g: np.ndarray, point_xy: np.ndarray) -> np.ndarray:
    """2 x 2 covariance of the image position a fit ``g`` predicts at ``point_xy``, per unit picking variance.

    Linearised least squares: ``J_s (J^T J)^-1 J_s^T`` with the Jacobians of the image
    positions (pixels) with respect to the transform's 8 parameters, taken numerically in
    the normalised coordinates of the fit.
    """
    tp, ti = _normaliser(plan_xy), _normaliser(image_cr)
    gn = ti @ g @ np.linalg.inv(tp)
    gn = gn / gn[2, 2]
    q = plan_xy @ tp[:2, :2].T + tp[:2, 2]
    qs = np.atleast_2d(point_xy) @ tp[:2, :2].T + tp[:2, 2]
    scale = ti[0, 0]  # normalised image units per pixel

    def pred(h: np.ndarray, pts: np.ndarray) -> np.ndarray:
        u, v = project(np.append(h, 1.0).reshape(3, 3), pts[:, 0], pts[:, 1])
        return np.concatenate([u, v]) / scale

    h0 = gn.ravel()[:8]
    eps = 1e-6
    j = np.empty((2 * len(q), 8))
    js = np.empty((2, 8))
    for k in range(8):
        d = np.zeros(8)
        d[k] = eps
        j[:, k] = (pred(h0 + d, q) - pred(h0 - d, q)) / (2 * eps)
        js[:, k] = (pred(h0 + d, qs) - pred(h0 - d, qs)) / (2 * eps)
    return js @ np.linalg.pinv(j.T @ j) @ js.T


def fit_projective(image_cr: np.ndarray, plan_xy: np.ndarray, *, where: str = "control points") -> ProjectiveFit:
    """Fit the projective transform image ``(col, row)`` -> plan ``(x, y)`` to control points.

    Parameters
    ----------
    image_cr
        ``(n, 2)`` image points, pixels (whole numbers are pixel centres), n >= 4.
    plan_xy
        ``(n, 2)`` plan points, metres.
    where
        Names the entry in messages (e.g. ``"survey.toml: [[frame]] #2 points"``).

    Returns
    -------
    ProjectiveFit
        The matrix and the residuals of every point in pixels and metres.

    Raises
    ------
    SurveyError
        A degenerate point set (see :func:`check_point_set`), or points that are
        inconsistent with any view of a plane (some fold across the horizon).
    """
    image_cr = np.asarray(image_cr, dtype=np.float64).reshape(-1, 2)
    plan_xy = np.asarray(plan_xy, dtype=np.float64).reshape(-1, 2)
    check_point_set(image_cr, plan_xy, where=where)
    g = _fit_plan_to_image(image_cr, plan_xy)
    if g is None:
        raise SurveyError(f"{where}: the control points do not determine a projective transform; "
                          "spread them over the frame (4 or more, no 3 on one line)")
    h = np.linalg.inv(g)
    h /= np.linalg.norm(h)
    w_img = _w(h, image_cr[:, 0], image_cr[:, 1])
    w_plan = _w(g, plan_xy[:, 0], plan_xy[:, 1])
    if not ((w_img > 0).all() or (w_img < 0).all()) or not ((w_plan > 0).all() or (w_plan < 0).all()):
        raise SurveyError(f"{where}: the control points are inconsistent with a view of a plane (the fit folds "
                          "some of them across the horizon); check that each is [col, row, x, y] and that "
                          "image and plan positions belong to the same mark")
    if (w_img < 0).all():
        h = -h
    u, v = project(g, plan_xy[:, 0], plan_xy[:, 1])
    res_px = np.hypot(u - image_cr[:, 0], v - image_cr[:, 1])
    x, y = project(h, image_cr[:, 0], image_cr[:, 1])
    res_m = np.hypot(x - plan_xy[:, 0], y - plan_xy[:, 1])
    return ProjectiveFit(matrix=h, residuals_px=res_px, residuals_m=res_m)


@dataclass(frozen=True)
class LeaveOneOut:
    """Each point predicted from a fit to the others.

    Attributes
    ----------
    error_px
        ``(n,)`` distance in the image between each point and where the fit to the
        other points puts it, pixels (NaN where the others do not determine a fit).
    error_m
        ``(n,)`` the same on the plan, metres.
    rest_rms_px
        ``(n,)`` residual RMS of the other points under that fit, pixels.
    suspect
        Index (from 0) of the point that does not fit, or ``None``.
    note
        One line saying what was found, or ``None`` when the points agree.
    """

    error_px: np.ndarray
    error_m: np.ndarray
    rest_rms_px: np.ndarray
    suspect: int | None
    note: str | None


def leave_one_out(image_cr: np.ndarray, plan_xy: np.ndarray, *, min_px: float = SUSPECT_MIN_PX,
                  sigmas: float = SUSPECT_SIGMAS) -> LeaveOneOut:
    """Find a control point that does not fit the others (5 or more points).

    Parameters
    ----------
    image_cr, plan_xy
        ``(n, 2)`` image points (pixels) and plan points (metres), n >= 5, already
        checked by :func:`check_point_set`.
    min_px
        A suspect is named only when the others put it at least this far away, pixels.
    sigmas
        ... and at least this many standard deviations (see :data:`SUSPECT_SIGMAS`).

    Returns
    -------
    LeaveOneOut

    Notes
    -----
    From 6 points on, the suspect is the point whose removal leaves the smallest
    residual RMS among the others. With 5 points any 4 fit exactly, so which point is
    wrong cannot be decided; the note then reports the disagreement only.

    >>> cr = np.array([[0, 0], [100, 0], [100, 80], [0, 80], [50, 40], [20, 60]], dtype=float)
    >>> xy = np.column_stack([0.05 * cr[:, 0], -0.05 * cr[:, 1]])
    >>> xy[4] += [0.5, 0.0]       # a mark 0.5 m (10 px) off
    >>> loo = leave_one_out(cr, xy)
    >>> loo.suspect, round(float(loo.error_px[4]), 3)
    (4, 10.0)
    """
    image_cr = np.asarray(image_cr, dtype=np.float64).reshape(-1, 2)
    plan_xy = np.asarray(plan_xy, dtype=np.float64).reshape(-1, 2)
    n = len(image_cr)
    err_px = np.full(n, np.nan)
    err_m = np.full(n, np.nan)
    rest = np.full(n, np.nan)
    if n < 5:
        return LeaveOneOut(err_px, err_m, rest, None, None)
    fits: dict[int, np.ndarray] = {}
    offsets = np.full((n, 2), np.nan)
    for i in range(n):
        keep = np.arange(n) != i
        try:
            check_point_set(image_cr[keep], plan_xy[keep])
        except SurveyError:
            continue
        g = _fit_plan_to_image(image_cr[keep], plan_xy[keep])
        if g is None:
            continue
        fits[i] = g
        h = np.linalg.inv(g)
        u, v = project(g, plan_xy[:, 0], plan_xy[:, 1])
        offsets[i] = (image_cr[i, 0] - u[i], image_cr[i, 1] - v[i])
        r = np.hypot(u - image_cr[:, 0], v - image_cr[:, 1])
        x, y = project(h, image_cr[i:i + 1, 0], image_cr[i:i + 1, 1])
        err_px[i] = r[i]
        err_m[i] = float(np.hypot(x[0] - plan_xy[i, 0], y[0] - plan_xy[i, 1]))
        rest[i] = float(np.sqrt(np.mean(r[keep] ** 2)))
    if not np.isfinite(rest).any():
        return LeaveOneOut(err_px, err_m, rest, None, None)
    if n == 5:
        worst = int(np.nanargmax(err_px))
        if err_px[worst] < min_px:
            return LeaveOneOut(err_px, err_m, rest, None, None)
        note = (f"the 5 control points disagree (one is off by up to {np.nanmax(err_px):.1f} px) but with 5 points "
                "the one that does not fit cannot be told (any 4 fit exactly): add a sixth control point")
        return LeaveOneOut(err_px, err_m, rest, None, note)
    s = int(np.nanargmin(rest))
    dof = 2 * (n - 1) - 8
    sigma = max(rest[s] * math.sqrt(2 * (n - 1) / dof) if dof > 0 else 0.0, PICK_SIGMA_PX)
    keep = np.arange(n) != s
    spread = np.eye(2) + _prediction_spread(image_cr[keep], plan_xy[keep], fits[s], plan_xy[s])
    e = offsets[s]
    distance = float(np.sqrt(e @ np.linalg.solve(spread, e))) / sigma
    if err_px[s] >= min_px and distance >= sigmas:
        order = np.argsort(np.where(np.isfinite(rest), rest, np.inf))
        t = int(order[1])
        if rest[t] < DISTINCT_RATIO * max(rest[s], PICK_SIGMA_PX):  # another removal fits almost as well
            note = (f"the control points disagree: point {s + 1} or point {t + 1} does not fit (up to "
                    f"{max(err_px[s], err_px[t]):.1f} px), and with {n} points it cannot be told which; "
                    "check both or add control points")
            return LeaveOneOut(err_px, err_m, rest, None, note)
        note = (f"point {s + 1} does not fit: the other {n - 1} put it {err_px[s]:.1f} px ({err_m[s]:.3g} m) away "
                f"(they fit each other to {rest[s]:.2f} px RMS); check its [col, row, x, y] or remove it")
        return LeaveOneOut(err_px, err_m, rest, s, note)
    return LeaveOneOut(err_px, err_m, rest, None, None)


@dataclass(frozen=True)
class Registration:
    """A frame's fit and its leave-one-out check, and the map that places it on the plan.

    Attributes
    ----------
    fit
        The homography fitted to all control points (always computed: its residuals say how
        far the frame is from a view of a plane, and the image checks use it).
    loo
        The homography's leave-one-out check (a misplaced point).
    skin
        The map used to place the frame (:class:`SkinMap`); the homography unless a dense tape
        grid chose a piecewise model (:func:`choose_model`).
    models
        Leave-one-out figures of each model tried: ``{model: (rms_px, rms_m)}``.
    """

    fit: ProjectiveFit
    loo: LeaveOneOut
    skin: "SkinMap | None" = None
    models: dict = field(default_factory=dict)

    @property
    def matrix(self) -> np.ndarray:
        """Image ``(col, row)`` -> plan ``(x, y)``, ``(3, 3)`` (the homography)."""
        return self.fit.matrix

    @property
    def model(self) -> str:
        """The model that places the frame."""
        return "homography" if self.skin is None else self.skin.model

    @property
    def mapping(self) -> "SkinMap | np.ndarray":
        """What :func:`resample_frame` takes: the skin map, or the homography."""
        return self.matrix if self.skin is None else self.skin


def register_points(image_cr: np.ndarray, plan_xy: np.ndarray, *, where: str = "control points",
                    piecewise: bool = False) -> Registration:
    """:func:`fit_projective` and, with 5 or more points, :func:`leave_one_out`.

    ``piecewise``: with :data:`MIN_PIECEWISE_POINTS` or more points, also try the piecewise
    models and keep the one :func:`choose_model` picks.
    """
    image_cr = np.asarray(image_cr, dtype=np.float64).reshape(-1, 2)
    plan_xy = np.asarray(plan_xy, dtype=np.float64).reshape(-1, 2)
    fit = fit_projective(image_cr, plan_xy, where=where)
    loo = leave_one_out(image_cr, plan_xy)
    if not piecewise or len(image_cr) < MIN_PIECEWISE_POINTS:
        return Registration(fit=fit, loo=loo)
    model, models = choose_model(image_cr, plan_xy, fit=fit, loo=loo)
    return Registration(fit=fit, loo=loo, skin=SkinMap(model, fit.matrix, plan_xy, image_cr), models=models)


# --------------------------------------------------------------------------------------
# Piecewise maps on a tape grid
# --------------------------------------------------------------------------------------


class _PiecewiseAffine:
    """Plan -> image, affine on each triangle of the marks' Delaunay triangulation
    (:class:`scipy.spatial.Delaunay`); outside the marks' hull, the affine map of the triangle
    whose least barycentric coordinate is the largest (the nearest triangle's plane extended)."""

    def __init__(self, plan_xy: np.ndarray, image_cr: np.ndarray):
        from scipy.spatial import Delaunay

        self.tri = Delaunay(plan_xy)
        self.image_cr = image_cr

    def __call__(self, pts: np.ndarray) -> np.ndarray:
        tri = self.tri
        t = tri.transform  # (k, 3, 2)
        simplex = tri.find_simplex(pts)
        out_idx = np.flatnonzero(simplex < 0)
        if len(out_idx):
            d = pts[out_idx, None, :] - t[None, :, 2, :]
            b = np.einsum("kij,nkj->nki", t[:, :2, :], d)
            bary = np.concatenate([b, 1 - b.sum(-1, keepdims=True)], axis=-1)
            simplex[out_idx] = np.argmax(bary.min(-1), axis=1)
        tt = t[simplex]
        b = np.einsum("nij,nj->ni", tt[:, :2, :], pts - tt[:, 2, :])
        bary = np.concatenate([b, 1 - b.sum(-1, keepdims=True)], axis=-1)
        verts = self.image_cr[tri.simplices[simplex]]  # (n, 3, 2)
        return np.einsum("ni,nij->nj", bary, verts)


def _interpolator(model: str, plan_xy: np.ndarray, image_cr: np.ndarray):
    """A callable ``(n, 2)`` plan points -> ``(n, 2)`` image points for a piecewise model."""
    if model == "piecewise-affine":
        return _PiecewiseAffine(plan_xy, image_cr)
    if model == "thin-plate spline":
        from scipy.interpolate import RBFInterpolator

        return RBFInterpolator(plan_xy, image_cr, kernel="thin_plate_spline", degree=1)
    raise ValueError(f"unknown model {model!r}")


@dataclass(frozen=True)
class SkinMap:
    """Plan ``(x, y)`` -> image ``(col, row)`` of one frame, by one of :data:`SKIN_MODELS`.

    Attributes
    ----------
    model
        ``"homography"``, ``"piecewise-affine"`` (Delaunay triangles of the marks) or
        ``"thin-plate spline"`` (Bookstein 1989).
    matrix
        The frame's homography, image -> plan (``(3, 3)``): it tells in front of the camera
        from behind, and gives the frame's figures for the image checks.
    plan_xy, image_cr
        ``(n, 2)`` the marks.
    """

    model: str
    matrix: np.ndarray
    plan_xy: np.ndarray
    image_cr: np.ndarray

    def __post_init__(self) -> None:
        interp = None if self.model == "homography" else _interpolator(self.model, self.plan_xy, self.image_cr)
        object.__setattr__(self, "_interp", interp)
        object.__setattr__(self, "_inverse", np.linalg.inv(self.matrix))

    @property
    def piecewise(self) -> bool:
        """True for the piecewise models (they are trusted inside the marks' hull only)."""
        return self.model != "homography"

    def to_image(self, xs: np.ndarray, ys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Image ``(cols, rows)`` of plan points (any shape)."""
        xs, ys = np.asarray(xs, dtype=np.float64), np.asarray(ys, dtype=np.float64)
        if self._interp is None:
            return project(self._inverse, xs, ys)
        cr = self._interp(np.column_stack([xs.ravel(), ys.ravel()]))
        return cr[:, 0].reshape(xs.shape), cr[:, 1].reshape(xs.shape)

    def scales(self, xs: np.ndarray, ys: np.ndarray, *, step_m: float) -> tuple[np.ndarray, np.ndarray]:
        """Singular values ``(large, small)`` of the local Jacobian of plan -> image, pixels per metre
        (central differences over ``step_m``)."""
        xs, ys = np.asarray(xs, dtype=np.float64), np.asarray(ys, dtype=np.float64)
        h = 0.5 * step_m
        c1, r1 = self.to_image(xs + h, ys)
        c0, r0 = self.to_image(xs - h, ys)
        a, c = (c1 - c0) / step_m, (r1 - r0) / step_m
        c1, r1 = self.to_image(xs, ys + h)
        c0, r0 = self.to_image(xs, ys - h)
        b, d = (c1 - c0) / step_m, (r1 - r0) / step_m
        s = a * a + b * b + c * c + d * d
        det = np.abs(a * d - b * c)
        root = np.sqrt(np.maximum(s * s - 4.0 * det * det, 0.0))
        return np.sqrt(0.5 * (s + root)), np.sqrt(np.maximum(0.5 * (s - root), 0.0))

    def inside_marks(self, xs: np.ndarray, ys: np.ndarray) -> np.ndarray:
        """True where a plan point lies in the marks' convex hull."""
        hull = shapely.MultiPoint(self.plan_xy).convex_hull.buffer(1e-9)
        xs, ys = np.asarray(xs, dtype=np.float64), np.asarray(ys, dtype=np.float64)
        shapely.prepare(hull)
        return shapely.contains_xy(hull, xs, ys)

    @property
    def spacing_m(self) -> float:
        """Median distance from each mark to its nearest neighbour, plan metres."""
        d = np.sqrt(((self.plan_xy[:, None, :] - self.plan_xy[None, :, :]) ** 2).sum(-1))
        np.fill_diagonal(d, np.inf)
        return float(np.median(d.min(axis=1)))

    def beyond_marks_m(self, xs: np.ndarray, ys: np.ndarray) -> np.ndarray:
        """Distance of plan points from the marks' convex hull, metres (0 inside)."""
        hull = shapely.MultiPoint(self.plan_xy).convex_hull
        xs, ys = np.asarray(xs, dtype=np.float64), np.asarray(ys, dtype=np.float64)
        return shapely.distance(hull, shapely.points(xs, ys)).reshape(xs.shape)

    def hull_in_image(self, *, step_m: float) -> np.ndarray:
        """``(m, 2)`` image ``(col, row)`` of the marks' convex hull boundary, densified every ``step_m``."""
        ring = shapely.MultiPoint(self.plan_xy).convex_hull.exterior
        ring = shapely.segmentize(ring, max(step_m, 1e-6))
        xy = np.asarray(ring.coords)
        c, r = self.to_image(xy[:, 0], xy[:, 1])
        return np.column_stack([c, r])


def _loo_piecewise(model: str, image_cr: np.ndarray, plan_xy: np.ndarray) -> np.ndarray:
    """``(n, 2)`` image offset of each mark from where a fit of ``model`` to the others puts it."""
    n = len(image_cr)
    out = np.full((n, 2), np.nan)
    for i in range(n):
        keep = np.arange(n) != i
        try:
            f = _interpolator(model, plan_xy[keep], image_cr[keep])
            out[i] = image_cr[i] - f(plan_xy[i:i + 1])[0]
        except (ValueError, RuntimeError, np.linalg.LinAlgError):  # a degenerate subset: no prediction
            continue
    return out


def _interior_marks(plan_xy: np.ndarray) -> np.ndarray:
    """True for each mark lying in the convex hull of the other marks (on its edge included).

    Leaving out a corner of the grid asks a model to extrapolate, which no frame pixel in
    use needs (pixels outside the marks' hull are used only as a last resort): the models
    are compared on the marks they must interpolate. All marks when fewer than 3 qualify.
    """
    n = len(plan_xy)
    tol = _REL_TOL * max(_spread(plan_xy), 1e-12)
    out = np.zeros(n, dtype=bool)
    for i in range(n):
        others = shapely.MultiPoint(np.delete(plan_xy, i, axis=0)).convex_hull
        out[i] = others.distance(shapely.Point(plan_xy[i])) <= tol
    return out if out.sum() >= 3 else np.ones(n, dtype=bool)


def choose_model(image_cr: np.ndarray, plan_xy: np.ndarray, *, fit: ProjectiveFit,
                 loo: LeaveOneOut) -> tuple[str, dict]:
    """Pick the model that places a frame: homography, piecewise-affine or thin-plate spline.

    Each model predicts every mark from the others (leave-one-out); its RMS error over the
    marks that lie within the others' hull (:func:`_interior_marks`) says how well it places
    skin between marks. The homography (the right model for a plane,
    and the one that extrapolates safely) is kept unless a piecewise model predicts the
    marks at least :data:`DISTINCT_RATIO` times better *and* the homography misses them by
    more than :data:`SUSPECT_MIN_PX` RMS (beyond what picking explains), or when the
    homography's leave-one-out names one misplaced point (a typo is the likelier cause).

    Returns
    -------
    model, figures
        The chosen model; ``{model: (rms_px, rms_m)}`` for each model tried (errors in
        metres on the skin: pixel errors divided by the local scale at each mark).
    """
    figures: dict[str, tuple[float, float]] = {}
    judged = _interior_marks(plan_xy)
    e = loo.error_px[judged & np.isfinite(loo.error_px)]
    em = loo.error_m[judged & np.isfinite(loo.error_m)]
    figures["homography"] = (float(np.sqrt(np.mean(e ** 2))) if len(e) else math.nan,
                             float(np.sqrt(np.mean(em ** 2))) if len(em) else math.nan)
    for model in SKIN_MODELS[1:]:
        off = _loo_piecewise(model, image_cr, plan_xy)
        err = np.hypot(off[:, 0], off[:, 1])
        ok = np.isfinite(err) & judged
        if not ok.any():
            continue
        full = SkinMap(model, fit.matrix, plan_xy, image_cr)
        step = 0.01 * max(_spread(plan_xy), 1e-6)
        large, small = full.scales(plan_xy[ok, 0], plan_xy[ok, 1], step_m=step)
        err_m = err[ok] / np.sqrt(large * small)
        figures[model] = (float(np.sqrt(np.mean(err[ok] ** 2))), float(np.sqrt(np.mean(err_m ** 2))))
    h_px = figures["homography"][0]
    best = min(SKIN_MODELS[1:], key=lambda m: figures.get(m, (math.inf,))[0])
    b_px = figures.get(best, (math.inf,))[0]
    if (loo.suspect is None and math.isfinite(h_px) and h_px > SUSPECT_MIN_PX
            and b_px * DISTINCT_RATIO <= h_px):
        return best, figures
    return "homography", figures


# --------------------------------------------------------------------------------------
# Pixel size
# --------------------------------------------------------------------------------------


def lattice(shape: tuple[int, int], step: int) -> tuple[np.ndarray, np.ndarray]:
    """Image points on a lattice every ``step`` pixels including the outer pixel edges."""
    rows, cols = shape
    cs = np.unique(np.concatenate([np.arange(-0.5, cols - 0.5, step), [cols - 0.5]]))
    rs = np.unique(np.concatenate([np.arange(-0.5, rows - 0.5, step), [rows - 0.5]]))
    c, r = np.meshgrid(cs, rs)
    return c.ravel(), r.ravel()


def usable_view(matrix: np.ndarray, cols: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """In front of the camera and not too oblique (image points)."""
    w = _w(matrix, cols, rows)
    fine, coarse = ground_sampling_m(matrix, cols, rows)
    with np.errstate(invalid="ignore", divide="ignore"):
        return (w > 0) & np.isfinite(coarse) & (coarse <= MAX_FORESHORTENING * fine)


def frame_gsd_m(matrix: np.ndarray, shape: tuple[int, int], bounds: tuple[float, float, float, float]) -> float:
    """Median ground sampling distance of a frame over the part that lands in ``bounds``.

    Parameters
    ----------
    matrix
        Image ``(col, row)`` -> plan ``(x, y)``.
    shape
        ``(rows, cols)`` of the image.
    bounds
        ``(xmin, ymin, xmax, ymax)`` of the plan, metres.

    Returns
    -------
    float
        Median of ``sqrt(fine * coarse)`` (the square root of the Jacobian determinant),
        m per pixel; NaN when no usable part of the frame lands in ``bounds``.
    """
    cols, rows = lattice(shape, max(1, min(shape) // 40))
    ok = usable_view(matrix, cols, rows)
    xs, ys = project(matrix, cols, rows)
    x0, y0, x1, y1 = bounds
    with np.errstate(invalid="ignore"):
        ok &= (xs >= x0) & (xs <= x1) & (ys >= y0) & (ys <= y1)
    if not ok.any():
        return math.nan
    fine, coarse = ground_sampling_m(matrix, cols[ok], rows[ok])
    return float(np.median(np.sqrt(fine * coarse)))


def choose_pixel_m(gsds_m: Sequence[float]) -> float:
    """Plan pixel size from the frames' median ground sampling distances.

    The median over frames, rounded down to 1, 1.5, 2, 2.5, 3, 4, 5, 6 or 8 times a
    power of ten.

    >>> choose_pixel_m([0.043, 0.051, 0.038])
    0.04
    >>> choose_pixel_m([0.0262])
    0.025
    """
    values = [g for g in gsds_m if math.isfinite(g) and g > 0]
    if not values:
        raise ValueError("no frame has a usable ground sampling distance")
    g = float(np.median(values))
    power = 10.0 ** math.floor(math.log10(g))
    nice = max(m for m in _NICE if m * power <= g * (1 + 1e-9))
    return float(f"{nice * power:.12g}")


# --------------------------------------------------------------------------------------
# Resampling and blending
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ResampledFrame:
    """One frame resampled onto a window of the plan grid.

    Attributes
    ----------
    window
        ``(row0, row1, col0, col1)`` of the plan grid (half-open).
    values
        ``(row1 - row0, col1 - col0)`` float32 values; NaN where the frame gives none.
    weights
        Same shape, float32 blending weights; 0 where ``values`` is NaN.
    gsd_m
        Coarser ground sampling distance at each pixel, m per image pixel (NaN where
        not covered).
    view_angle_deg
        Estimated angle between the line of sight and the skin's normal, degrees (NaN where
        not covered; ``None``: not estimated, taken as square-on). From the anisotropy of the
        local map: ``cos(angle) = small / large`` singular value of its Jacobian.
    outside_marks
        Bool, True where the pixel lies outside the marks' convex hull of a piecewise-registered
        frame (extrapolated; used only where no frame covers it from within its marks);
        ``None``: nowhere.
    """

    window: tuple[int, int, int, int]
    values: np.ndarray
    weights: np.ndarray
    gsd_m: np.ndarray
    view_angle_deg: np.ndarray | None = None
    outside_marks: np.ndarray | None = None

    @property
    def covered(self) -> int:
        """Number of plan pixels this frame gives a value."""
        return int(np.count_nonzero(self.weights > 0))


def _image_mask_inside(polygon_cr: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    """Image pixels lying wholly inside a polygon given in image ``(col, row)``: the pixel centres
    inside it, eroded by one pixel (a pixel straddling the edge sees skin beyond the marks)."""
    from scipy import ndimage
    from skimage.draw import polygon as fill_polygon

    rows, cols = shape
    mask = np.zeros(shape, dtype=bool)
    finite = np.isfinite(polygon_cr).all(axis=1)
    if finite.sum() < 3:
        return mask
    rr, cc = fill_polygon(polygon_cr[finite, 1], polygon_cr[finite, 0], shape=(rows, cols))
    mask[rr, cc] = True
    return ndimage.binary_erosion(mask, structure=np.ones((3, 3), bool), border_value=1)


def resample_frame(values: np.ndarray, mapping, *, grid_transform, grid_shape: tuple[int, int],
                   max_foreshortening: float = MAX_FORESHORTENING,
                   taper_fraction: float = EDGE_TAPER_FRACTION) -> ResampledFrame | None:
    """Resample a frame onto the plan grid by its registration.

    Parameters
    ----------
    values
        ``(rows, cols)`` frame values (any units), NaN where no data.
    mapping
        The homography image ``(col, row)`` -> plan ``(x, y)`` (``(3, 3)``), or a
        :class:`SkinMap` (:attr:`Registration.mapping`). With a piecewise skin map, plan
        pixels inside the marks' hull are sampled only from image pixels wholly inside the
        hull's image; those outside are sampled as they come and flagged ``outside_marks``.
    grid_transform
        Affine of the north-up plan grid (pixel corner ``(col, row)`` -> plan ``(x, y)``).
    grid_shape
        ``(rows, cols)`` of the plan grid.
    max_foreshortening
        Largest ratio of a pixel footprint's long to short side that is used.
    taper_fraction
        The weight rises from the frame (or nodata) edge over this fraction of the
        frame's smaller side.

    Returns
    -------
    ResampledFrame or None
        ``None`` when the frame gives no value on the grid.
    """
    from scipy import ndimage

    skin = mapping if isinstance(mapping, SkinMap) else None
    matrix = np.asarray(mapping.matrix if skin is not None else mapping, dtype=np.float64)
    values = np.asarray(values, dtype=np.float32)
    rows, cols = values.shape
    g_rows, g_cols = grid_shape
    ga = grid_transform
    # footprint: usable lattice points of the image, on the plan
    step = max(1, min(rows, cols) // 40)
    lc, lr = lattice((rows, cols), step)
    ok = usable_view(matrix, lc, lr)
    if not ok.any():
        return None
    xs, ys = project(matrix, lc[ok], lr[ok])
    _, coarse = ground_sampling_m(matrix, lc[ok], lr[ok])
    pad = 2.0 * step * float(np.max(coarse))
    x_lo, x_hi, y_lo, y_hi = xs.min() - pad, xs.max() + pad, ys.min() - pad, ys.max() + pad
    if skin is not None and skin.piecewise:
        x_lo, x_hi = min(x_lo, skin.plan_xy[:, 0].min()), max(x_hi, skin.plan_xy[:, 0].max())
        y_lo, y_hi = min(y_lo, skin.plan_xy[:, 1].min()), max(y_hi, skin.plan_xy[:, 1].max())
    inv = ~ga
    cs, rs = inv @ (np.array([x_lo, x_hi, x_lo, x_hi]), np.array([y_lo, y_lo, y_hi, y_hi]))
    c0, c1 = max(int(math.floor(np.min(cs))), 0), min(int(math.ceil(np.max(cs))), g_cols)
    r0, r1 = max(int(math.floor(np.min(rs))), 0), min(int(math.ceil(np.max(rs))), g_rows)
    if c1 <= c0 or r1 <= r0:
        return None
    # plan pixel centres of the window, into the image
    cc, rr = np.meshgrid(np.arange(c0, c1) + 0.5, np.arange(r0, r1) + 0.5)
    px, py = ga @ (cc, rr)
    g = np.linalg.inv(matrix)
    u_h, v_h = project(g, px, py)
    in_front = _w(matrix, u_h, v_h) > 0
    outside = None
    if skin is not None and skin.piecewise:
        pixel_m = math.sqrt(abs(ga.a * ga.e - ga.b * ga.d))
        u, v = skin.to_image(px, py)
        large, small = skin.scales(px, py, step_m=pixel_m)
        with np.errstate(divide="ignore", invalid="ignore"):
            fine, coarse_px = 1.0 / large, 1.0 / small
        outside = ~skin.inside_marks(px, py)
        far = skin.beyond_marks_m(px, py) > EXTRAPOLATE_SPACING * skin.spacing_m
        in_front &= ~far  # extrapolated only next to the marks
    else:
        u, v = u_h, v_h
        fine, coarse_px = ground_sampling_m(matrix, np.where(in_front, u, 0.0), np.where(in_front, v, 0.0))
    with np.errstate(invalid="ignore"):
        inside = (u >= -0.5) & (u <= cols - 0.5) & (v >= -0.5) & (v <= rows - 0.5) & in_front
        inside &= np.isfinite(coarse_px) & (coarse_px <= max_foreshortening * fine)
    if not inside.any():
        return None
    uu, vv = np.clip(np.where(inside, u, 0.0), 0, cols - 1), np.clip(np.where(inside, v, 0.0), 0, rows - 1)
    sampled = ndimage.map_coordinates(values, [vv, uu], order=1, mode="nearest", prefilter=False)
    if outside is not None:  # inside the marks' hull: only image pixels wholly within its image
        pixel_m = math.sqrt(abs(ga.a * ga.e - ga.b * ga.d))
        within = _image_mask_inside(skin.hull_in_image(step_m=pixel_m), (rows, cols)) & np.isfinite(values)
        kept = ndimage.map_coordinates(np.where(within, values, np.nan).astype(np.float32), [vv, uu], order=1,
                                       mode="nearest", prefilter=False)
        sampled = np.where(outside, sampled, kept)
    # distance (image pixels) from the frame edge or nodata, for the taper
    dist = ndimage.distance_transform_edt(np.pad(np.isfinite(values), 1, constant_values=False))[1:-1, 1:-1]
    d = ndimage.map_coordinates(dist.astype(np.float32), [vv, uu], order=1, mode="nearest", prefilter=False)
    taper_px = max(taper_fraction * min(rows, cols), 1.0)
    taper = np.clip((d - 0.5) / taper_px, 1e-3, 1.0)
    good = inside & np.isfinite(sampled)
    with np.errstate(invalid="ignore", divide="ignore"):
        weights = np.where(good, taper / np.where(good, coarse_px, 1.0) ** 2, 0.0).astype(np.float32)
        cos_view = np.clip(np.where(good, fine / np.where(good, coarse_px, 1.0), np.nan), 0.0, 1.0)
    out = np.where(good, sampled, np.nan).astype(np.float32)
    gsd = np.where(good, coarse_px, np.nan).astype(np.float32)
    if not good.any():
        return None
    angle = np.degrees(np.arccos(cos_view)).astype(np.float32)
    return ResampledFrame(window=(r0, r1, c0, c1), values=out, weights=weights, gsd_m=gsd, view_angle_deg=angle,
                          outside_marks=None if outside is None else (outside & good))


def placement_ranks(frames: Sequence[ResampledFrame], grid_shape: tuple[int, int], *,
                    fallback: Sequence[bool] | None = None, max_view_angle_deg: float = MAX_VIEW_ANGLE_DEG,
                    tolerance_deg: float = VIEW_ANGLE_TOLERANCE_DEG) -> list[np.ndarray]:
    """Rank of each frame's pixels in the blend: only the lowest rank at a plan pixel is used.

    A frame's pixel gets ``4`` when outside its marks' hull (extrapolated), ``+ 2`` when the
    frame is flagged (``fallback``, e.g. blurred), ``+ 1`` when seen more than
    ``max_view_angle_deg`` from square-on and more than ``tolerance_deg`` worse than the best
    view of that plan pixel. So a better view, a sharp frame and the marks' interior win
    where they cover; the rest fills only what nothing better covers.

    Returns
    -------
    list of numpy.ndarray
        One int8 array per frame, on its window (``-1`` where it gives no value).
    """
    flags = [False] * len(frames) if fallback is None else [bool(b) for b in fallback]
    if len(flags) != len(frames):
        raise ValueError("fallback needs one flag per frame")
    best = np.full(grid_shape, np.inf)
    for f in frames:
        if f.view_angle_deg is None:
            continue
        r0, r1, c0, c1 = f.window
        a = np.where(f.weights > 0, f.view_angle_deg, np.inf)
        np.minimum(best[r0:r1, c0:c1], np.nan_to_num(a, nan=np.inf), out=best[r0:r1, c0:c1])
    ranks = []
    for f, flag in zip(frames, flags):
        r0, r1, c0, c1 = f.window
        rank = np.zeros(f.weights.shape, dtype=np.int8)
        if f.outside_marks is not None:
            rank += 4 * f.outside_marks.astype(np.int8)
        if flag:
            rank += 2
        if f.view_angle_deg is not None:
            with np.errstate(invalid="ignore"):
                oblique = (f.view_angle_deg > max_view_angle_deg) & (
                    f.view_angle_deg > best[r0:r1, c0:c1] + tolerance_deg)
            rank += oblique.astype(np.int8)
        ranks.append(np.where(f.weights > 0, rank, -1).astype(np.int8))
    return ranks


def blend_frames(frames: Sequence[ResampledFrame], grid_shape: tuple[int, int], *,
                 fallback: Sequence[bool] | None = None, max_view_angle_deg: float = MAX_VIEW_ANGLE_DEG,
                 ranks: Sequence[np.ndarray] | None = None) -> np.ndarray:
    """Weighted mean of resampled frames on the plan grid, best-ranked views only.

    Parameters
    ----------
    frames
        From :func:`resample_frame`.
    grid_shape
        ``(rows, cols)`` of the plan grid.
    fallback
        One flag per frame: a flagged frame (e.g. one found blurred by
        :mod:`wetmap.image_checks`) gives values only where no unflagged frame does.
    max_view_angle_deg
        Views more oblique than this are used only where no better view covers
        (:func:`placement_ranks`).
    ranks
        Precomputed :func:`placement_ranks` (then ``fallback`` and the angle are not used).

    Returns
    -------
    numpy.ndarray
        float32 ``grid_shape``; NaN where no frame gives a value.

    >>> a = ResampledFrame((0, 1, 0, 2), np.array([[1.0, 2.0]], np.float32), np.array([[1.0, 1.0]], np.float32),
    ...                    np.ones((1, 2), np.float32))
    >>> b = ResampledFrame((0, 1, 1, 3), np.array([[4.0, 5.0]], np.float32), np.array([[3.0, 1.0]], np.float32),
    ...                    np.ones((1, 2), np.float32))
    >>> blend_frames([a, b], (1, 4))
    array([[1. , 3.5, 5. , nan]], dtype=float32)
    >>> blend_frames([a, b], (1, 4), fallback=[False, True])  # b only where a gives nothing
    array([[ 1.,  2.,  5., nan]], dtype=float32)
    """
    if ranks is None:
        ranks = placement_ranks(frames, grid_shape, fallback=fallback, max_view_angle_deg=max_view_angle_deg)
    low = np.full(grid_shape, np.iinfo(np.int8).max, dtype=np.int8)
    for f, rank in zip(frames, ranks):
        r0, r1, c0, c1 = f.window
        np.minimum(low[r0:r1, c0:c1], np.where(rank >= 0, rank, np.iinfo(np.int8).max).astype(np.int8),
                   out=low[r0:r1, c0:c1])
    total = np.zeros(grid_shape, dtype=np.float64)
    weight = np.zeros(grid_shape, dtype=np.float64)
    for f, rank in zip(frames, ranks):
        r0, r1, c0, c1 = f.window
        w = np.where((rank >= 0) & (rank == low[r0:r1, c0:c1]), f.weights.astype(np.float64), 0.0)
        total[r0:r1, c0:c1] += np.where(w > 0, f.values, 0.0) * w
        weight[r0:r1, c0:c1] += w
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(weight > 0, total / weight, np.nan)
    return out.astype(np.float32)


# --------------------------------------------------------------------------------------
# What a run reports per frame
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class FrameReport:
    """Registration figures of one frame, as ``summary.json`` reports them.

    Attributes
    ----------
    path
        The frame file as named in survey.toml.
    points
        Number of control points.
    rms_px, rms_m, max_px
        Residual RMS in image pixels and in plan metres; largest residual, pixels.
    suspect
        Number (from 1, as listed in the entry) of the control point that does not fit
        the others, or ``None``.
    suspect_px, suspect_m
        How far the other points put the suspect from where it was given.
    note
        The leave-one-out finding in words, or ``None``.
    gsd_m
        Median ground sampling distance over its part of the plan, m per image pixel.
    covered_m2
        Plan area (on the plan grid) it gives values for.
    model
        The model that placed it (:data:`SKIN_MODELS`).
    loo_rms_px, loo_rms_m
        Leave-one-out RMS of the chosen model: how far each mark lies from where a fit to the
        other marks puts it, image pixels and metres on the skin (NaN with 4 points).
    models
        ``{model: (loo_rms_px, loo_rms_m)}`` of each model tried.
    view_angle_deg
        ``(median, max)`` estimated viewing angle from the skin's normal over the pixels the
        blend used from this frame, degrees (NaN when none).
    used_m2, extrapolated_m2
        Plan area the blend took from this frame, and the part of it outside its marks' hull.
    """

    path: str
    points: int
    rms_px: float
    rms_m: float
    max_px: float
    suspect: int | None
    suspect_px: float | None
    suspect_m: float | None
    note: str | None
    gsd_m: float
    covered_m2: float
    model: str = "homography"
    loo_rms_px: float = math.nan
    loo_rms_m: float = math.nan
    models: tuple[tuple[str, float, float], ...] = ()
    view_angle_deg: tuple[float, float] = (math.nan, math.nan)
    used_m2: float = math.nan
    extrapolated_m2: float = 0.0

    @classmethod
    def build(cls, path: str, registration: Registration, *, gsd_m: float, covered_m2: float,
              view_angle_deg: tuple[float, float] = (math.nan, math.nan), used_m2: float = math.nan,
              extrapolated_m2: float = 0.0) -> "FrameReport":
        """From a :class:`Registration` and the frame's resampling figures."""
        fit, loo = registration.fit, registration.loo
        s = loo.suspect
        figures = dict(registration.models)
        if "homography" not in figures:
            e, em = loo.error_px[np.isfinite(loo.error_px)], loo.error_m[np.isfinite(loo.error_m)]
            figures["homography"] = (float(np.sqrt(np.mean(e ** 2))) if len(e) else math.nan,
                                     float(np.sqrt(np.mean(em ** 2))) if len(em) else math.nan)
        chosen = figures.get(registration.model, (math.nan, math.nan))
        return cls(path=path, points=len(fit.residuals_px), rms_px=fit.rms_px, rms_m=fit.rms_m,
                   max_px=float(np.max(fit.residuals_px)), suspect=None if s is None else s + 1,
                   suspect_px=None if s is None else float(loo.error_px[s]),
                   suspect_m=None if s is None else float(loo.error_m[s]), note=loo.note, gsd_m=gsd_m,
                   covered_m2=covered_m2, model=registration.model, loo_rms_px=chosen[0], loo_rms_m=chosen[1],
                   models=tuple((m, *figures[m]) for m in SKIN_MODELS if m in figures),
                   view_angle_deg=view_angle_deg, used_m2=used_m2, extrapolated_m2=extrapolated_m2)

    def as_dict(self) -> dict:
        """JSON-ready, rounded (pixels to 0.001, metres to 0.1 mm)."""

        def r(v: float | None, nd: int) -> float | None:
            return None if v is None or not math.isfinite(v) else round(float(v), nd)

        return {
            "path": self.path, "points": self.points, "rms_px": r(self.rms_px, 3), "rms_m": r(self.rms_m, 4),
            "max_px": r(self.max_px, 3), "suspect_point": self.suspect, "suspect_px": r(self.suspect_px, 3),
            "suspect_m": r(self.suspect_m, 4), "note": self.note, "gsd_m": r(self.gsd_m, 4),
            "covered_m2": r(self.covered_m2, 4),
            "model": self.model, "loo_rms_px": r(self.loo_rms_px, 3),
            "loo_rms_mm": r(1000 * self.loo_rms_m, 1) if math.isfinite(self.loo_rms_m) else None,
            "models": {m: {"loo_rms_px": r(px, 3), "loo_rms_mm": r(1000 * m_ if math.isfinite(m_) else m_, 1)}
                       for m, px, m_ in self.models},
            "view_angle_deg": {"median": r(self.view_angle_deg[0], 1), "max": r(self.view_angle_deg[1], 1)},
            "used_m2": r(self.used_m2, 4), "extrapolated_m2": r(self.extrapolated_m2, 4),
        }


# --------------------------------------------------------------------------------------
# Girth or height?
# --------------------------------------------------------------------------------------

#: A cell of tape marks whose image is this many times longer per plan metre along y than
#: along x looks taped by height, not girth (1 / cos 40 degrees: see :func:`girth_stretch`).
GIRTH_STRETCH_MAX = 1.3


@dataclass(frozen=True)
class GirthStretch:
    """The most stretched cell of a hull frame's tape grid (:func:`girth_stretch`).

    Attributes
    ----------
    ratio
        Image length per plan metre along y over image length per plan metre along x.
    xs, ys
        ``(x0, x1)`` stations and ``(y0, y1)`` plan y of the cell, metres.
    """

    ratio: float
    xs: tuple[float, float]
    ys: tuple[float, float]


def girth_stretch(image_cr: np.ndarray, plan_xy: np.ndarray) -> GirthStretch | None:
    """How much a hull frame's tape grid looks stretched along plan y, per cell of 4 marks.

    For each cell of marks at two stations ``x0, x1`` and two plan ``y0, y1`` (all four
    given), the mean image length of its two y-sides per metre of ``y1 - y0`` over the mean
    image length of its two x-sides per metre of ``x1 - x0``.

    Why it tells girths from heights: the developed plan is the skin unrolled, lengths kept.
    A camera shortens a skin cell along the direction in which the skin turns away from it and
    keeps its length across that direction; facing a hull side, the skin turns away across the
    hull (around the bilge), not along it, so per metre of girth a cell never looks longer than
    per metre of station, except by ``1 / cos`` of the angle at which the camera looks along the
    hull (1.3 at 40 degrees, :data:`GIRTH_STRETCH_MAX`). A height is shorter than the girth it
    spans by ``cos`` of the skin's angle from vertical, so at the bilge and bottom seen from
    level or from below, height steps look stretched in the image by up to ``1 / cos`` of that
    angle. A view from above the bilge shortens both alike: the test cannot then tell, and a
    stretch below the limit proves nothing.

    Returns
    -------
    GirthStretch or None
        The cell with the largest ratio; ``None`` when the marks form no complete cell.

    >>> xy = np.array([[0, 0], [1, 0], [0, 1], [1, 1]], dtype=float)
    >>> cr = np.array([[0, 0], [50, 0], [0, 80], [50, 80]], dtype=float)  # 80 px per metre of y, 50 of x
    >>> girth_stretch(cr, xy).ratio
    1.6
    """
    image_cr = np.asarray(image_cr, dtype=np.float64).reshape(-1, 2)
    plan_xy = np.asarray(plan_xy, dtype=np.float64).reshape(-1, 2)
    tol = _REL_TOL * max(_spread(plan_xy), 1e-12)
    keys = {(round(x / tol), round(y / tol)): i for i, (x, y) in enumerate(plan_xy)}
    xs = np.unique(np.round(plan_xy[:, 0] / tol))
    ys = np.unique(np.round(plan_xy[:, 1] / tol))
    best: GirthStretch | None = None
    for a, b in zip(xs[:-1], xs[1:]):
        for c, d in zip(ys[:-1], ys[1:]):
            k = [keys.get(key) for key in ((a, c), (a, d), (b, c), (b, d))]
            if None in k:
                continue
            p = image_cr[k]
            x0, y0 = plan_xy[k[0]]
            x1, y1 = plan_xy[k[3]]
            along_y = 0.5 * (np.hypot(*(p[1] - p[0])) + np.hypot(*(p[3] - p[2]))) / (y1 - y0)
            along_x = 0.5 * (np.hypot(*(p[2] - p[0])) + np.hypot(*(p[3] - p[1]))) / (x1 - x0)
            if along_x <= 0:
                continue
            ratio = float(along_y / along_x)
            if best is None or ratio > best.ratio:
                best = GirthStretch(ratio=round(ratio, 6), xs=(float(x0), float(x1)), ys=(float(y0), float(y1)))
    return best


# --------------------------------------------------------------------------------------
# Emissivity by viewing angle
# --------------------------------------------------------------------------------------


def fresnel_emissivity(angle_deg: np.ndarray, refractive_index: float) -> np.ndarray:
    """Directional emissivity of a smooth, non-absorbing dielectric: ``1 - (R_s + R_p) / 2``.

    Fresnel reflectances for unpolarised light leaving a medium of real refractive index
    ``n`` into air (Born & Wolf, *Principles of Optics*, section 1.5.2), at the angle
    from the surface normal.

    >>> round(float(fresnel_emissivity(np.array(0.0), 1.5)), 6)   # 1 - ((n - 1) / (n + 1))**2
    0.96
    """
    theta = np.radians(np.clip(np.asarray(angle_deg, dtype=np.float64), 0.0, 90.0))
    n2 = float(refractive_index) ** 2
    c = np.cos(theta)
    root = np.sqrt(n2 - np.sin(theta) ** 2)
    r_s = ((c - root) / (c + root)) ** 2
    r_p = ((n2 * c - root) / (n2 * c + root)) ** 2
    return 1.0 - 0.5 * (r_s + r_p)
