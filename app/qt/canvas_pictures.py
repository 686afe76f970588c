"""The pictures and readings of a shot's fields on the canvas: vorticity colours, display
upsampling, vector scale, frames of reference, picture levels and the cursor's reading (numpy
only).
"""

from __future__ import annotations

import math

import numpy as np

from app.review import colours
from app.review.scales import ARROW_CELL_SHARE
from core.geometry import ball_coordinates, mid_circle


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


def typical_length(dx_px: np.ndarray, dy_px: np.ndarray) -> float:
    """A large (95th percentile) vector's length, px (0 without vectors)."""
    mag = np.hypot(dx_px, dy_px)
    mag = mag[np.isfinite(mag)]
    return float(np.percentile(mag, 95)) if mag.size else 0.0


def vector_scale(big_px: float, cell_px: float) -> float:
    """Display factor so that a large vector (``typical_length``) spans ``ARROW_CELL_SHARE``
    of one drawn cell, leaving a gap between neighbouring arrows."""
    return ARROW_CELL_SHARE * cell_px / big_px if big_px > 0 else 1.0



def speed_factor(result) -> float | None:
    """m/s per px of displacement between the frames (None without dt or a scale)."""
    dt = getattr(getattr(result, "settings", None), "dt_s", None)
    scale = getattr(result, "scale_mm_per_px", None)
    return scale * 1e-3 / dt if dt and scale else None


def frame_displacement(result, vf, ball_frame: bool, measured_in_ball_frame: bool = False):
    """The field's displacements (px per frame pair) in the lab or the ball frame.

    ``vf`` is the result's main field (lab frame) or its fine field (``measured_in_ball_frame``:
    the ball's displacement already subtracted); the ball frame is the lab frame minus the
    ball's displacement between the frames (``result.flight``).

    Returns
    -------
    dx, dy : (M, N) ndarray
    """
    flight = getattr(result, "flight", None)
    shift = (0.0, 0.0) if flight is None else flight.displacement_px
    sign = (-1.0 if ball_frame else 0.0) + (1.0 if measured_in_ball_frame else 0.0)
    return vf.dx_px + sign * shift[0], vf.dy_px + sign * shift[1]


def point_text(result, x_px: float, y_px: float, ball_frame: bool = False,
               fine: bool = False) -> str:
    """The cursor's reading: image position (px, and mm with a scale), where it lies about the
    ball (x/D downstream and y/D toward the upper side from the centre, and its separation
    angle), and the flow there (``field_values``)."""
    parts = [f"x {x_px:7.1f} y {y_px:7.1f} px"]
    scale = getattr(result, "scale_mm_per_px", None) if result is not None else None
    if scale:
        parts.append(f"({x_px * scale:6.2f}, {y_px * scale:6.2f} mm)")
    parts.extend(ball_position(result, x_px, y_px))
    return reading_text(parts, field_values(result, x_px, y_px, ball_frame, fine))


def reading_text(where: list[str], flow: list[str]) -> str:
    """The cursor's readings: where on one line, the flow on the next; a narrow label wraps
    between readings, never inside one (their own spaces do not break)."""
    def unbroken(part: str) -> str:  # no break at its spaces, nor after its slashes ("x/D")
        return part.replace(" ", "\u00a0").replace("/", "/\u2060")

    return "\n".join("  ".join(unbroken(part) for part in line) for line in (where, flow) if line)


def plain_reading(text: str) -> str:
    """:func:`reading_text` with plain spaces and without its joiners (to read or compare)."""
    return text.replace("\u00a0", " ").replace("\u2060", "")


def ball_position(result, x_px: float, y_px: float) -> list[str]:
    """``x/D +1.23 y/D -0.40 lower +12.3°`` about the ball at mid-exposure ([] without one)."""
    circle = mid_circle(getattr(result, "ball_a", None), getattr(result, "ball_b", None))
    flight = getattr(result, "flight", None)
    if circle is None or flight is None:
        return []
    along, across, side, angle = ball_coordinates(circle[0], circle[1], flight.direction_deg,
                                                  (x_px, y_px))
    return [f"x/D {along:+5.2f} y/D {across:+5.2f}  {side} {angle:+6.1f}°"]


def field_values(result, x_px: float, y_px: float, ball_frame: bool = False,
                 fine: bool = False) -> list[str]:
    """The flow at image position (x, y): velocity (lab or ball frame, v upward), speed and
    vorticity at the nearest vector of the fine field (``fine``: where it reaches) or of the
    main field; "masked" where the window held no vector."""
    found = _node_at(result, x_px, y_px, fine)
    if found is None:
        return []
    vf, row, col, is_fine = found
    if vf.masked[row, col]:
        return ["masked (no vector)"]
    dx, dy = frame_displacement(result, vf, ball_frame, is_fine)
    factor = speed_factor(result)
    u, v = float(dx[row, col]), -float(dy[row, col])  # shown upward, like the flight angle
    unit = "px"
    if factor is not None:
        u, v, unit = u * factor, v * factor, "m/s"
    frame = "ball frame" if ball_frame else "lab frame"
    out = [f"u {u:+8.3f}  v {v:+8.3f}  |V| {math.hypot(u, v):7.3f} {unit} ({frame}, v up)"]
    if vf.replaced[row, col]:
        out.append("(replaced)")
    w = result.fine_vorticity() if is_fine else getattr(result, "vorticity_1_s", None)
    if w is not None and np.isfinite(w[row, col]):
        out.append(f"ω {w[row, col]:+9.4g} {vorticity_unit(result)}")
    if is_fine:
        out.append("(fine field)")
    return out


def _node_at(result, x_px: float, y_px: float, fine: bool):
    """(field, row, col, is_fine) of the grid node nearest (x, y), or None outside the grid."""
    fields = [(getattr(result, "fine_field", None), True)] if fine else []
    fields.append((getattr(result, "field", None), False))
    for vf, is_fine in fields:
        if vf is None:
            continue
        sp = float(vf.spacing_px)
        col = round((x_px - float(vf.x_px[0, 0])) / sp)
        row = round((y_px - float(vf.y_px[0, 0])) / sp)
        rows, cols = vf.x_px.shape
        if 0 <= row < rows and 0 <= col < cols:
            return vf, row, col, is_fine
    return None


def vorticity_unit(result) -> str:
    """1/s with dt and a scale; without them the pipeline gives vorticity per frame pair."""
    return "1/s" if getattr(result, "u_m_s", None) is not None else "per frame pair"


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
