"""The pictures and readings of a shot's fields on the canvas: vorticity colours, display
upsampling, vector scale, picture levels and the values under the cursor (numpy only).
"""

from __future__ import annotations

import math

import numpy as np

from app.review import colours


def vorticity_image(vorticity_1_s: np.ndarray, limit_1_s: float, see_through: bool) -> np.ndarray:
    """RGBA picture of the vorticity on our diverging map, symmetric about zero.

    With ``see_through`` (drawn over the frame) the opacity grows with ``|w| / limit`` so the
    particles stay visible where the air is not turning, and the vortical regions stand out.

    Returns
    -------
    (M, N, 4) ndarray of uint8
    """
    rgba = colours.vorticity_rgb(vorticity_1_s, limit_1_s)
    if see_through:
        w = np.abs(np.asarray(vorticity_1_s, dtype=float))
        strength = np.clip(np.nan_to_num(w / max(limit_1_s, 1e-12)) * 1.4, 0.0, 1.0)
        alpha = np.rint(235 * np.sqrt(strength)).astype(np.uint8)
        rgba[..., 3] = np.where(np.isfinite(vorticity_1_s), alpha, 0)
    return rgba


def smooth_upsample(values: np.ndarray, factor: int) -> np.ndarray:
    """Bilinear upsampling of a grid with holes (NaN), for display only.

    The output covers the same extent as the input cells (each cell becomes ``factor`` x
    ``factor`` pixels, the edge cells' outer halves hold their value); holes stay holes where
    less than half the neighbouring weight is real. numpy only: the window needs no scipy.

    Parameters
    ----------
    values : (M, N) ndarray
    factor : int

    Returns
    -------
    (M * factor, N * factor) ndarray of float32
    """
    if factor <= 1:
        return np.asarray(values, dtype=np.float32)
    finite = np.isfinite(values)
    weight = _bilinear(finite.astype(np.float32), factor)
    total = _bilinear(np.where(finite, values, 0.0).astype(np.float32), factor)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = total / weight
    out[weight < 0.5] = np.nan
    return out.astype(np.float32)


def _bilinear(values: np.ndarray, factor: int) -> np.ndarray:
    """Linear interpolation between cell centres along both axes, edges held."""
    for axis in (0, 1):
        n = values.shape[axis]
        at = np.clip((np.arange(n * factor) + 0.5) / factor - 0.5, 0, n - 1)
        low = np.floor(at).astype(int)
        high = np.minimum(low + 1, n - 1)
        shape = [1, 1]
        shape[axis] = -1
        w = (at - low).astype(np.float32).reshape(shape)
        values = np.take(values, low, axis=axis) * (1 - w) + np.take(values, high, axis=axis) * w
    return values


def vector_scale(dx_px: np.ndarray, dy_px: np.ndarray, cell_px: float) -> float:
    """Display factor so that a large (95th percentile) vector spans ~0.9 of one drawn cell."""
    mag = np.hypot(dx_px, dy_px)
    mag = mag[np.isfinite(mag)]
    if mag.size == 0:
        return 1.0
    big = float(np.percentile(mag, 95))
    return 0.9 * cell_px / big if big > 0 else 1.0



def field_values(result, x_px: float, y_px: float) -> list[str]:
    vf = getattr(result, "field", None)
    if vf is None:
        return []
    sp = float(vf.spacing_px)
    col = round((x_px - float(vf.x_px[0, 0])) / sp)
    row = round((y_px - float(vf.y_px[0, 0])) / sp)
    rows, cols = vf.x_px.shape
    if not (0 <= row < rows and 0 <= col < cols):
        return []
    if vf.masked[row, col]:
        return ["masked (no vector)"]
    out = []
    u, v = _velocity_at(result, vf, row, col)
    out.append(f"u {u:+8.3f}  v {v:+8.3f}  |V| {math.hypot(u, v):7.3f} {_velocity_unit(result)}")
    if vf.replaced[row, col]:
        out.append("(replaced)")
    w = getattr(result, "vorticity_1_s", None)
    if w is not None and np.isfinite(w[row, col]):
        out.append(f"ω {w[row, col]:+9.4g} {vorticity_unit(result)}")
    return out


def vorticity_unit(result) -> str:
    """1/s with dt and a scale; without them the pipeline gives vorticity per frame pair."""
    return "1/s" if getattr(result, "u_m_s", None) is not None else "per frame pair"


def _velocity_at(result, vf, row: int, col: int) -> tuple[float, float]:
    u = getattr(result, "u_m_s", None)
    v = getattr(result, "v_m_s", None)
    if u is not None and v is not None:
        # stored v is image-y (downward); show it upward like the flight angle convention
        return float(u[row, col]), -float(v[row, col])
    return float(vf.dx_px[row, col]), -float(vf.dy_px[row, col])


def _velocity_unit(result) -> str:
    has_speed = getattr(result, "u_m_s", None) is not None
    return "m/s (v up)" if has_speed else "px (v up)"


def picture_levels(shot) -> tuple[float, float]:
    frames = [] if shot is None else [f for f in (shot.frame_a, shot.frame_b) if f is not None]
    if not frames:
        return 0.0, 1.0
    step = max(1, int(math.sqrt(frames[0].size / 40_000)))  # ~40 000 samples per frame
    sample = np.concatenate([np.asarray(f)[::step, ::step].ravel() for f in frames])
    low, high = np.percentile(sample, [0.5, 99.7])
    if high <= low:
        high = low + 1.0
    return float(low), float(high)
