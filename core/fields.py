"""Derived fields: velocity in m/s (lab and ball frame), vorticity, vector counts near the ball.

Vorticity convention: counter-clockwise positive *as seen on screen*. Image y runs downward, so
with ``Y = -y`` and ``V = -v`` the screen vorticity ``omega = dV/dX - dU/dY`` becomes
``omega = du/dy - dv/dx`` in image coordinates (derived). A flow that is faster lower in the
picture (``du/dy > 0``) turns counter-clockwise on screen.

Frames of reference: the *lab frame* is what the camera sees (air at rest far from a launched
ball); the *ball frame* subtracts the ball's displacement between the frames, so the ball is at
rest and the air streams past it (as in a wind tunnel).
"""

from __future__ import annotations

import numpy as np

from core.results import BallFit, VectorField

#: Offsets of the least-squares derivative stencil, in grid spacings.
STENCIL = (-2, -1, 0, 1, 2)


def least_squares_derivative(
    values: np.ndarray, spacing_px: float, axis: int, usable: np.ndarray | None = None
) -> np.ndarray:
    """First derivative along one grid axis by a least-squares line over 5 points.

    With all five points usable this is ``(2 f[+2] + f[+1] - f[-1] - 2 f[-2]) / (10 h)``, whose
    noise gain is ``sqrt(10) / 10 = 0.32 e/h`` for uncorrelated noise ``e`` (docs/references.md,
    derived; central differences: 0.71 e/h). Near holes and edges the line is fitted to the
    usable points among the five (at least 3, both sides of the centre not required).

    Parameters
    ----------
    values : (M, N) ndarray
        Samples on a regular grid; NaN counts as unusable.
    spacing_px : float
        Grid spacing ``h`` (px, or any length unit: the result is per that unit).
    axis : int
        0 = along rows (image y), 1 = along columns (image x).
    usable : (M, N) bool ndarray, optional
        Extra mask of usable samples.

    Returns
    -------
    (M, N) ndarray
        d(values)/d(axis) per unit length; NaN where fewer than 3 usable points.
    """
    v = np.asarray(values, dtype=np.float64)
    ok = np.isfinite(v) if usable is None else (np.asarray(usable, bool) & np.isfinite(v))
    sums = {name: np.zeros(v.shape) for name in ("n", "k", "kk", "f", "kf")}
    for k in STENCIL:
        f_k, ok_k = _shifted(v, k, axis), _shifted(ok, k, axis)
        f_k = np.where(ok_k, f_k, 0.0)
        w = ok_k.astype(np.float64)
        sums["n"] += w
        sums["k"] += w * k
        sums["kk"] += w * k * k
        sums["f"] += f_k
        sums["kf"] += k * f_k
    det = sums["n"] * sums["kk"] - sums["k"] ** 2
    enough = (sums["n"] >= 3) & (det > 0) & ok
    slope = (sums["n"] * sums["kf"] - sums["k"] * sums["f"]) / np.where(enough, det, 1.0)
    return np.where(enough, slope / spacing_px, np.nan)


def _shifted(a: np.ndarray, k: int, axis: int) -> np.ndarray:
    """``out[i] = a[i + k]`` along ``axis``, padded with zeros/False beyond the edge."""
    out = np.zeros_like(a)
    n = a.shape[axis]
    if abs(k) >= n:
        return out
    src = [slice(None)] * a.ndim
    dst = [slice(None)] * a.ndim
    src[axis] = slice(max(k, 0), n + min(k, 0))
    dst[axis] = slice(max(-k, 0), n - max(k, 0))
    out[tuple(dst)] = a[tuple(src)]
    return out


def vorticity(
    dx: np.ndarray, dy: np.ndarray, spacing_px: float, usable: np.ndarray | None = None
) -> np.ndarray:
    """Vorticity, counter-clockwise positive on screen: ``omega = d(dx)/dy - d(dy)/dx``.

    Each derivative is the 5-point least-squares line of :func:`least_squares_derivative`;
    the noise gain on vorticity is ``0.45 e/h`` (docs/references.md, derived: sqrt(2) x 0.32;
    central differences 1.00, 8-point circulation 0.61).

    Parameters
    ----------
    dx, dy : (M, N) ndarray
        Displacement (px per frame pair) or velocity components in image coordinates.
    spacing_px : float
        Grid spacing.
    usable : (M, N) bool ndarray, optional

    Returns
    -------
    (M, N) ndarray
        In the units of ``dx`` per unit of ``spacing_px`` (e.g. 1/frame-pair for px and px);
        NaN where a derivative is missing.
    """
    du_dy = least_squares_derivative(dx, spacing_px, axis=0, usable=usable)
    dv_dx = least_squares_derivative(dy, spacing_px, axis=1, usable=usable)
    return du_dy - dv_dx


def velocity_m_s(
    dx_px: np.ndarray, dy_px: np.ndarray, dt_s: float, scale_mm_per_px: float
) -> tuple[np.ndarray, np.ndarray]:
    """Velocity (m/s) from a displacement (px) over ``dt_s``: ``u = dx * scale * 1e-3 / dt``.

    Returns ``(u, v)`` in image directions (v positive downward), each ``(M, N)``.
    """
    factor = scale_mm_per_px * 1e-3 / dt_s
    return np.asarray(dx_px) * factor, np.asarray(dy_px) * factor


def ball_frame(
    dx_px: np.ndarray, dy_px: np.ndarray, ball_displacement_px: tuple[float, float]
) -> tuple[np.ndarray, np.ndarray]:
    """Displacement relative to the ball: the lab displacement minus the ball's (px)."""
    return (
        np.asarray(dx_px) - ball_displacement_px[0],
        np.asarray(dy_px) - ball_displacement_px[1],
    )


def vorticity_1_s(
    vf: VectorField, dt_s: float | None = None, usable: np.ndarray | None = None
) -> np.ndarray:
    """Vorticity of a vector field: 1/s with ``dt_s``, else 1/frame-pair (px/px per pair).

    The ratio of displacement to position is scale-free, so no mm/px is needed.
    """
    omega = vorticity(vf.dx_px, vf.dy_px, vf.spacing_px, usable=usable)
    return omega / dt_s if dt_s else omega


def valid_near_ball(vf: VectorField, ball: BallFit, reach_px: float) -> int:
    """Number of valid vectors within ``reach_px`` of the ball's outline (outside it)."""
    r = np.hypot(vf.x_px - ball.center_px[0], vf.y_px - ball.center_px[1])
    near = (r > ball.radius_px) & (r <= ball.radius_px + reach_px)
    return int(np.count_nonzero(near & vf.valid))
