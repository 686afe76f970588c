"""What the camera records: the light sheet, the ball's appearance and the sensor.

Image coordinates: x = column to the right, y = row downward, origin at the centre of the top-left
pixel. Intensities are in counts of a camera of ``bit_depth`` bits before the sensor's noise and
quantisation are applied by :func:`expose`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import erf

#: Electrons at full scale (a typical scientific CMOS/CCD well; common practice).
FULL_WELL_E = 16000.0
SURFACES = ("dark", "dim", "bright")


@dataclass(frozen=True)
class LightSheet:
    """A laser light sheet entering the picture from one side.

    Attributes
    ----------
    from_deg : float
        Direction the light comes from (flight convention: 0 = from the right, 90 = from the top).
    width_px : float
        e^-2 half-width of the sheet's Gaussian profile across its spread.
    offset_px : float
        Offset of the profile's centre from the picture centre, across the beam.
    falloff : float
        Fraction of the light lost from the near to the far edge of the picture along the beam
        (the fan spreads, the seeding scatters light away).
    streaks : tuple of (float, float, float)
        ``(amplitude, wavenumber per px, phase)`` of intensity streaks along the beam (optics).
    thickness_px : float
        e^-2 thickness of the sheet (out of plane).
    shadow : bool
        The ball blocks the sheet: the strip 2R wide behind it (away from the light) is unlit
        but for ``shadow_level`` (scattered light). Without a shadow the strip is lit from the
        other side (a mirror sends the sheet back) at ``shadow_level``.
    shadow_level : float
        Light left in the strip, as a fraction of the direct sheet.
    """

    from_deg: float = 90.0
    width_px: float = 900.0
    offset_px: float = 0.0
    falloff: float = 0.2
    streaks: tuple[tuple[float, float, float], ...] = ()
    thickness_px: float = 24.0
    shadow: bool = False
    shadow_level: float = 0.9

    def direction(self) -> tuple[float, float]:
        """Unit vector along which the light travels (image coordinates)."""
        a = math.radians(self.from_deg)
        return -math.cos(a), math.sin(a)

    def intensity(self, x, y, shape, ball_center_px, radius_px) -> np.ndarray:
        """Relative sheet intensity at ``(x, y)`` (1 at the sheet's centre), with the shadow."""
        ex, ey = self.direction()
        height, width = shape
        ox, oy = 0.5 * (width - 1), 0.5 * (height - 1)
        along = (x - ox) * ex + (y - oy) * ey
        across = -(x - ox) * ey + (y - oy) * ex
        half_extent = 0.5 * (abs(ex) * width + abs(ey) * height)
        level = np.exp(-2.0 * ((across - self.offset_px) / self.width_px) ** 2)
        level = level * (1.0 - self.falloff * (along + half_extent) / (2.0 * half_extent))
        for amplitude, k, phase in self.streaks:
            level = level * (1.0 + amplitude * np.sin(k * across + phase))
        bx, by = ball_center_px
        b_along = (x - bx) * ex + (y - by) * ey
        b_across = np.abs(-(x - bx) * ey + (y - by) * ex)
        # penumbra of a few px: the sheet is not perfectly collimated
        edge = 2.0
        behind = (
            0.5 * (1.0 + erf(b_along / edge)) * 0.5 * (1.0 + erf((radius_px - b_across) / edge))
        )
        return level * (1.0 - (1.0 - self.shadow_level) * behind)


@dataclass(frozen=True)
class BallLook:
    """The ball's appearance (sphere seen along the sheet normal).

    ``seam_normal`` and ``spin_axis`` are unit 3-vectors (x right, y down, z toward the camera);
    the seam is the great circle normal to ``seam_normal`` at mid-exposure and turns about
    ``spin_axis`` by ``spin_rad_per_frame`` per frame interval. ``texture`` rows are
    ``(kx, ky, kz, phase)`` of the surface's mild grain (fixed to the ball). ``level_factor``
    scales the surface level of its kind; ``rim_fraction`` and ``glare_fraction`` are the lit
    rim's and the glare's peaks as fractions of full scale (at full sheet intensity); the glint is
    centred ``glint_angle_deg`` (flight convention) from the ball centre, on the outline.
    """

    surface: str = "dark"
    lit_rim: bool = True
    glint: bool = False
    seam_normal: tuple[float, float, float] = (0.0, 0.6, 0.8)
    spin_axis: tuple[float, float, float] = (0.0, 0.0, 1.0)
    spin_rad_per_frame: float = 0.0
    seam_half_width_rad: float = 0.035
    seam_contrast: float = -0.35
    stitches: int = 80
    texture: tuple[tuple[float, float, float, float], ...] = ()
    texture_amplitude: float = 0.04
    level_factor: float = 1.0
    rim_fraction: float = 0.5
    glint_angle_deg: float = 0.0
    glint_length_px: float = 10.0
    glint_width_px: float = 2.0
    glare_fraction: float = 0.0
    glare_length_px: float = 5.0


def _rotate(v: np.ndarray, axis, angle: float) -> np.ndarray:
    """Rotate 3-vectors ``v`` (N, 3) about a unit ``axis`` by ``angle`` (Rodrigues' formula)."""
    k = np.asarray(axis, dtype=np.float64)
    c, s = math.cos(angle), math.sin(angle)
    return v * c + np.cross(k, v) * s + np.outer(v @ k, k).reshape(v.shape) * (1.0 - c)


def surface_level(
    air: np.ndarray, background: np.ndarray, center_px, radius_px: float, look: BallLook
) -> float:
    """Mean surface counts of the ball, set against the seeded air's mean brightness near it.

    ``dark``: a few percent of the air's light above the background; ``dim``: about the air's
    mean; ``bright``: several times it (a white ball). The air is sampled in the ring from
    ``R + 2`` to ``1.6 R``.
    """
    cx, cy = center_px
    height, width = air.shape
    reach = 1.6 * radius_px
    x0, x1 = max(int(cx - reach), 0), min(int(cx + reach) + 2, width)
    y0, y1 = max(int(cy - reach), 0), min(int(cy + reach) + 2, height)
    yy, xx = np.mgrid[y0:y1, x0:x1]
    r = np.hypot(xx - cx, yy - cy)
    ring = (r > radius_px + 2.0) & (r < reach)
    lit = air[y0:y1, x0:x1] + background[y0:y1, x0:x1]
    air_mean = float(np.mean(lit[ring])) if np.any(ring) else float(np.mean(air + background))
    bg_mean = float(np.mean(background[y0:y1, x0:x1]))
    level = {"dark": 0.06, "dim": 1.0, "bright": 3.0}[look.surface] * look.level_factor
    return bg_mean + max(air_mean - bg_mean, 1.0) * level


def paint_ball(
    air: np.ndarray,
    background: np.ndarray,
    center_px,
    radius_px: float,
    tau: float,
    look: BallLook,
    sheet: LightSheet,
    surface_counts: float,
    full_scale: float,
) -> np.ndarray:
    """Lay the ball over one frame's air image.

    ``air`` holds the particle images (counts above the background), ``background`` the camera's
    background; the result is the light reaching the sensor. Inside the outline (pixel coverage
    by area) the air is replaced by the surface (mean ``surface_counts``, see
    :func:`surface_level`), so no particle image appears inside the ball; a bright ball adds
    glare around its lit side. ``tau`` is the time from mid-exposure in frame intervals (the
    seam and grain turn with the spin).
    """
    height, width = air.shape
    cx, cy = center_px
    big_r = radius_px
    reach = big_r + 4.0 * look.glare_length_px + 6.0
    x0, x1 = max(int(cx - reach), 0), min(int(cx + reach) + 2, width)
    y0, y1 = max(int(cy - reach), 0), min(int(cy + reach) + 2, height)
    out = air + background
    if x0 >= x1 or y0 >= y1:
        return out
    yy, xx = np.mgrid[y0:y1, x0:x1].astype(np.float64)
    u, v = xx - cx, yy - cy
    r = np.hypot(u, v)
    cover = np.clip(big_r + 0.5 - r, 0.0, 1.0)
    ex, ey = sheet.direction()
    nx, ny = u / np.maximum(r, 1e-9), v / np.maximum(r, 1e-9)
    facing = np.clip(-(nx * ex + ny * ey), 0.0, None)  # the outline's side facing the light
    sheet_at = sheet.intensity(cx - ex * big_r, cy - ey * big_r, air.shape, (cx, cy), big_r)

    zz = np.sqrt(np.clip(1.0 - (r / big_r) ** 2, 0.0, None))
    seam = np.zeros_like(r)
    grain = np.zeros_like(r)
    face = np.nonzero(r < big_r + 4.0)  # the rim's band reaches just outside the outline
    seam[face], grain[face] = _face_pattern(u[face] / big_r, v[face] / big_r, zz[face], look, tau)

    shade = (0.8 + 0.2 * zz) * (1.0 + 0.15 * (-(u * ex + v * ey) / big_r))
    surface = (
        surface_counts
        * shade
        * (1.0 + look.texture_amplitude * grain)
        * (1.0 + look.seam_contrast * seam)
    )

    patch = out[y0:y1, x0:x1]
    painted = (1.0 - cover) * patch + cover * surface
    if look.lit_rim:
        # the sheet lights a band on the outline a fraction of a px wide, blurred by the optics;
        # brighter where the raised seam crosses the sheet
        lit = facing + (sheet.shadow_level if not sheet.shadow else 0.0) * np.clip(
            nx * ex + ny * ey, 0.0, None
        )
        band = np.exp(-0.5 * ((r - (big_r - 0.8)) / 0.8) ** 2)
        painted += look.rim_fraction * full_scale * sheet_at * lit**0.7 * band * (1.0 + 2.0 * seam)
    if look.glare_fraction > 0:
        outside = np.clip(r - big_r, 0.0, None)
        glare = look.glare_fraction * full_scale * sheet_at * facing
        painted += (1.0 - cover) * glare * np.exp(-outside / look.glare_length_px)
    if look.glint:
        painted += 2.0 * full_scale * _glint(u, v, big_r, look)
    out[y0:y1, x0:x1] = painted
    return out


def _glint(u, v, big_r: float, look: BallLook) -> np.ndarray:
    """A specular patch on the outline, elongated along it (twice full scale: it saturates)."""
    a = math.radians(look.glint_angle_deg)
    gx, gy = math.cos(a), -math.sin(a)
    du, dv = u - (big_r - 1.5) * gx, v - (big_r - 1.5) * gy
    along = -du * gy + dv * gx
    across = du * gx + dv * gy
    return np.exp(
        -0.5 * ((along / look.glint_length_px) ** 2 + (across / look.glint_width_px) ** 2)
    )


def _face_pattern(u, v, z, look: BallLook, tau: float):
    """Seam (with stitches) and grain at points ``(u, v, z)`` of the unit sphere facing the camera.

    The ball turns by ``spin_rad_per_frame * tau`` about its spin axis: the seam's plane turns
    with it, and the grain is read in body-fixed coordinates.
    """
    point = np.stack((np.clip(u, -1, 1), np.clip(v, -1, 1), z), axis=-1)
    turn = look.spin_rad_per_frame * tau
    seam_n = _rotate(np.array([look.seam_normal], dtype=np.float64), look.spin_axis, turn)[0]
    body = _rotate(point, look.spin_axis, -turn)
    seam = np.exp(-0.5 * (point @ seam_n / look.seam_half_width_rad) ** 2)
    seam *= 0.75 + 0.25 * np.cos(look.stitches * np.arctan2(body[:, 1], body[:, 0]))
    grain = np.zeros(z.shape)
    for kx, ky, kz, phase in look.texture:
        grain += np.cos(body[:, 0] * kx + body[:, 1] * ky + body[:, 2] * kz + phase)
    if look.texture:
        grain /= math.sqrt(len(look.texture))
    return seam, grain


def camera_background(shape, full_scale: float, rng: np.random.Generator) -> np.ndarray:
    """Black level with a gradient and a faint broad glow (stray light), counts."""
    height, width = shape
    yy, xx = np.mgrid[0:height, 0:width].astype(np.float64)
    level = rng.uniform(0.02, 0.05) * full_scale
    a = rng.uniform(0.0, 2.0 * math.pi)
    ramp = (xx / width - 0.5) * math.cos(a) + (yy / height - 0.5) * math.sin(a)
    gx, gy = rng.uniform(0.0, width), rng.uniform(0.0, height)
    glow = np.exp(-((xx - gx) ** 2 + (yy - gy) ** 2) / (2.0 * (0.3 * width) ** 2))
    return level * (1.0 + rng.uniform(0.2, 0.5) * ramp) + rng.uniform(0.0, 0.02) * full_scale * glow


def expose(
    light: np.ndarray,
    background: np.ndarray,
    bit_depth: int,
    rng: np.random.Generator,
    read_noise_counts: float,
) -> np.ndarray:
    """Sensor: shot noise on the collected light, read noise, rounding and clipping (saturation).

    Shot noise is Poisson in electrons (normal approximation) with ``FULL_WELL_E`` electrons at
    full scale; the background is the black level and carries only read noise.

    Returns
    -------
    (H, W) ndarray of float32
        Integer counts in ``0 .. 2**bit_depth - 1``, as :func:`core.images.read_frame_pair`
        returns a camera's frame.
    """
    full_scale = float(2**bit_depth - 1)
    electrons_per_count = FULL_WELL_E / full_scale
    signal = np.clip(light - background, 0.0, None)
    noisy = light + rng.standard_normal(light.shape) * np.sqrt(signal / electrons_per_count)
    noisy += rng.standard_normal(light.shape) * read_noise_counts
    return np.clip(np.rint(noisy), 0.0, full_scale).astype(np.float32)
