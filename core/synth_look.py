"""How a synthetic ball and light sheet look in the picture (the first synthetic family).

The ball painted over the particle images: its surface level (dark, dim, bright), the lit rim
where the sheet meets it, a glint, the seam; and a light sheet uneven across the picture.
"""

from __future__ import annotations

import math

import numpy as np

from core.geometry import flight_unit
from core.synth import render_particles

BACKGROUND_COUNTS = 40.0  # camera background of the particle images


def sheet_gain(x_px, y_px, shape, uneven: float, light_from_deg: float) -> np.ndarray:
    """Relative particle brightness of an uneven light sheet, from 1 down to ``1 - uneven``.

    The sheet's Gaussian profile across its width (e^-2 half-width 0.8 of the picture's
    half-diagonal, centred off the middle) times a decay along the light's path, rescaled so the
    picture spans ``[1 - uneven, 1]``.
    """
    height, width = shape
    lx, ly = flight_unit(light_from_deg)
    half = 0.5 * math.hypot(height, width)

    def raw(x, y):
        rx = (np.asarray(x) - 0.5 * (width - 1)) / half
        ry = (np.asarray(y) - 0.5 * (height - 1)) / half
        across = -rx * ly + ry * lx - 0.25
        toward_source = rx * lx + ry * ly
        return np.exp(-2.0 * (across / 0.8) ** 2) * (1.0 + 0.3 * toward_source)

    corners = raw(*np.meshgrid(np.linspace(0, width - 1, 33), np.linspace(0, height - 1, 33)))
    lo, hi = float(corners.min()), float(corners.max())
    return 1.0 - uneven * (hi - np.clip(raw(x_px, y_px), lo, hi)) / (hi - lo)


def unevenly_lit(frame_a, frame_b, parts, uneven, light_from_deg):
    """Frames and particles with the particle light scaled by :func:`sheet_gain`."""
    from dataclasses import replace

    shape = frame_a.shape
    gain_a = sheet_gain(parts.x_a_px, parts.y_a_px, shape, uneven, light_from_deg)
    gain_b = sheet_gain(parts.x_b_px, parts.y_b_px, shape, uneven, light_from_deg)
    frame_a = np.clip(frame_a + render_particles(shape, parts.x_a_px, parts.y_a_px,
                                                 parts.diameter_px, parts.peak_a * (gain_a - 1)),
                      0.0, None)
    frame_b = np.clip(frame_b + render_particles(shape, parts.x_b_px, parts.y_b_px,
                                                 parts.diameter_px, parts.peak_b * (gain_b - 1)),
                      0.0, None)
    parts = replace(parts, peak_a=parts.peak_a * gain_a, peak_b=parts.peak_b * gain_b)
    return frame_a, frame_b, parts


def surface_counts(surface, frame, center_px, radius_px, shadow_from_deg, counts) -> float:
    """The ball surface's level (counts) for a named look, or the number given."""
    if not isinstance(surface, str):
        return float(surface)
    if surface == "dark":
        return 55.0 * counts
    if surface == "bright":
        return 0.45 * 4095.0 * counts
    if surface != "dim":
        raise ValueError(f"surface must be dark, dim, bright or counts, not {surface!r}")
    # the seeded air's mean level, over the lit air away from the ball
    yy, xx = np.mgrid[0 : frame.shape[0], 0 : frame.shape[1]]
    rx, ry = xx - center_px[0], yy - center_px[1]
    air = np.hypot(rx, ry) > radius_px + 3.0
    if shadow_from_deg is not None:
        lx, ly = flight_unit(shadow_from_deg)
        air &= ~((rx * lx + ry * ly < 0) & (np.abs(-rx * ly + ry * lx) < radius_px + 3.0))
    return float(frame[air].mean())


def paint_ball(
    frame: np.ndarray,
    center_px: tuple[float, float],
    radius_px: float,
    light_from_deg: float,
    rng: np.random.Generator,
    *,
    rim_counts: float = 2600.0,
    dark_counts: float = 55.0,
    noise_counts: float = 20.0,
    surface_counts: float | None = None,
    shading: float = 0.0,
    rim: bool = True,
    glint: bool = False,
    seam_deg: float | None = None,
    full_scale: float = 4095.0,
    background: float = BACKGROUND_COUNTS,
) -> np.ndarray:
    """Paint the ball over a frame: its surface, lit rim, anti-aliased edge, no particles inside.

    Parameters
    ----------
    frame : (H, W) ndarray
        Particle image (counts).
    center_px, radius_px : the ball's circle (px).
    light_from_deg : float
        Direction toward the light source (deg, flight convention); the rim fades to a faint
        glint on the far side.
    rng : numpy Generator
        For the noise on the ball's surface.
    rim_counts, dark_counts, noise_counts : float
        Peak of the lit rim, the dark surface's level and its noise (counts).
    surface_counts : float, optional
        The surface's level (counts) instead of ``dark_counts``.
    shading : float
        The surface is ``1 + shading`` times brighter on the side facing the light than in the
        middle (and ``1 - shading`` on the far side).
    rim : bool
        Paint the lit rim.
    glint : bool
        A saturated glint on the rim facing the light, its glare spilling over the outline.
    seam_deg : float, optional
        A seam: the picture of a great circle tilted 60 deg from the image plane, whose long
        axis runs along this direction, with two rows of stitches.
    full_scale : float
        The camera's saturation level (counts); ``background`` its background.

    Returns
    -------
    (H, W) ndarray of float32
        Same counts range as ``frame``.
    """
    height, width = frame.shape
    yy, xx = np.mgrid[0:height, 0:width].astype(np.float64)
    rx, ry = xx - center_px[0], yy - center_px[1]
    r = np.hypot(rx, ry)
    cover = np.clip(radius_px - r + 0.5, 0.0, 1.0)  # pixel fraction inside the outline
    lx, ly = flight_unit(light_from_deg)
    facing = (rx * lx + ry * ly) / np.maximum(r, 1e-9)
    rim_gain = 0.12 + 0.88 * np.clip(facing, 0.0, 1.0) ** 0.7
    depth = np.clip(radius_px - r, 0.0, None)
    level = dark_counts if surface_counts is None else surface_counts
    if rim:
        # a lit rim on a bright surface stays below saturation (glare is the glint's job)
        peak = min(rim_counts, 0.95 * full_scale - level)
        rim_light = peak * rim_gain * np.exp(-((depth / 1.6) ** 2))
    else:
        rim_light = 0.0
    if shading:
        level = level * (1.0 + shading * np.clip((rx * lx + ry * ly) / radius_px, -1.0, 1.0))
    if seam_deg is not None:
        level = level + _seam_light(rx, ry, radius_px, seam_deg, level, full_scale, background)
    # the ball's surface replaces the background inside the outline; particle images just
    # outside it are optical blur and overlap the outline (they are not cut by it)
    surface = level - background + rim_light + rng.normal(0.0, noise_counts, frame.shape)
    painted = frame + cover * surface
    if glint:
        # where the sheet hits the ball it glints: a saturated spot on the rim facing the light,
        # and glare around it that spills a few px over the outline onto the air
        size = max(3.0, 0.1 * radius_px)
        gx = rx - lx * (radius_px - 0.6 * size)
        gy = ry - ly * (radius_px - 0.6 * size)
        d2 = (gx * gx + gy * gy) / (size * size)
        painted = painted + full_scale * (1.6 * np.exp(-d2 * d2) + 0.5 * np.exp(-0.2 * d2))
    return np.clip(np.rint(painted), 0.0, full_scale).astype(np.float32)


def _seam_light(rx, ry, radius_px, seam_deg, level, full_scale, background) -> np.ndarray:
    """Change of the surface level (counts) from a seam and its stitches, ``(H, W)``.

    On the visible hemisphere ``p = (x, y, z) / R``, the seam is the great circle ``p . n = 0``
    with ``n`` tilted 60 deg from the line of sight; the seam line is darker than a lit surface
    (lighter thread on a dark one), the stitches are bright dashes in a row each side of it.
    """
    a = math.radians(seam_deg)
    tilt = math.radians(60.0)
    # the circle's picture runs along (cos a, -sin a): its normal's in-plane part is across it
    n = np.array([math.sin(a) * math.sin(tilt), math.cos(a) * math.sin(tilt), math.cos(tilt)])
    u, v = rx / radius_px, ry / radius_px
    z = np.sqrt(np.clip(1.0 - u * u - v * v, 0.0, None))
    height = u * n[0] + v * n[1] + z * n[2]  # sine of the angular distance from the seam
    e1 = np.array([math.cos(a), -math.sin(a), 0.0])
    e2 = np.cross(n, e1)
    around = np.arctan2(u * e2[0] + v * e2[1] + z * e2[2], u * e1[0] + v * e1[1])
    lit = np.asarray(level) - background
    line = np.where(lit > 0.05 * full_scale, -0.5 * lit, 0.05 * full_scale)
    seam = line * np.exp(-((height / 0.025) ** 2))
    dashes = np.clip(np.cos(40.0 * around), 0.0, None) ** 4
    rows = np.exp(-(((np.abs(height) - 0.06) / 0.012) ** 2))
    return seam + 0.12 * full_scale * dashes * rows
