"""Synthetic particle image pairs with a known displacement field (tests, demo, benchmarks).

A particle image is the Gaussian ``I(x, y) = I0 exp(-8 r^2 / d^2)`` with ``d`` the e^-2
diameter; each pixel records the mean of ``I`` over its whole area (100 % fill factor), which
for a Gaussian is a product of two differences of error functions. Particle brightness follows
the light sheet, ``I0(z) = q exp(-8 z^2 / dz0^2)`` with ``dz0`` the e^-2 sheet thickness, so
particles vary in brightness and moving out of the sheet loses pairs.

Conventions: image coordinates, x = column to the right, y = row downward, origin at the centre
of the top-left pixel. Displacements are in pixels from frame A to frame B.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy.special import erf

Displacement = Callable[[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]

#: Default peak intensity of an in-sheet particle, as a fraction of the full scale.
PEAK_FRACTION = 0.6


@dataclass
class ParticleSet:
    """Particles of one synthetic pair (all arrays ``(P,)``, px or counts).

    ``x_a_px, y_a_px`` and ``x_b_px, y_b_px`` are the positions in frames A and B,
    ``diameter_px`` the e^-2 image diameters, ``peak_a``/``peak_b`` the peak intensities
    ``I0`` in counts in each frame (they differ when particles move through the sheet).
    """

    x_a_px: np.ndarray
    y_a_px: np.ndarray
    x_b_px: np.ndarray
    y_b_px: np.ndarray
    diameter_px: np.ndarray
    peak_a: np.ndarray
    peak_b: np.ndarray
    z_px: np.ndarray  # mid-exposure position across the sheet, 0 at the sheet centre


def render_particles(
    shape: tuple[int, int],
    x_px: np.ndarray,
    y_px: np.ndarray,
    diameter_px: np.ndarray,
    peak: np.ndarray,
) -> np.ndarray:
    """Render Gaussian particle images, pixel-integrated (100 % fill factor).

    Each pixel gets the mean of ``peak * exp(-8 r^2 / d^2)`` over its unit area. With
    ``sigma = d / 4`` the profile is separable and the mean over ``[i - 1/2, i + 1/2]`` along
    one axis is ``sigma sqrt(pi/2) [erf((i + 1/2 - x0)/(sqrt(2) sigma)) -
    erf((i - 1/2 - x0)/(sqrt(2) sigma))]`` (derived), so a pixel is the product of two such
    terms. Particles are drawn on patches reaching ``3 sigma + 1`` px and summed with
    ``np.bincount``; parts falling outside the image are dropped.

    Parameters
    ----------
    shape : (int, int)
        Image shape ``(H, W)``.
    x_px, y_px : (P,) ndarray
        Particle centres, image coordinates.
    diameter_px : (P,) ndarray or float
        e^-2 particle image diameters.
    peak : (P,) ndarray or float
        Peak intensity ``I0`` of each particle, counts.

    Returns
    -------
    (H, W) ndarray of float64
        Summed intensity, counts (not quantised, no noise).
    """
    height, width = shape
    x = np.asarray(x_px, dtype=np.float64).ravel()
    y = np.asarray(y_px, dtype=np.float64).ravel()
    d = np.broadcast_to(np.asarray(diameter_px, dtype=np.float64), x.shape)
    i0 = np.broadcast_to(np.asarray(peak, dtype=np.float64), x.shape)
    if x.size == 0:
        return np.zeros(shape)
    sigma = d / 4.0
    half = math.ceil(3.0 * float(sigma.max()) + 1.0)
    cx = np.rint(x).astype(np.int64)
    cy = np.rint(y).astype(np.int64)
    near = (cx >= -half) & (cx < width + half) & (cy >= -half) & (cy < height + half)
    x, y, sigma, i0, cx, cy = x[near], y[near], sigma[near], i0[near], cx[near], cy[near]
    offsets = np.arange(-half, half + 1)
    cols = cx[:, None] + offsets  # (P, K)
    rows = cy[:, None] + offsets
    prof_x = _pixel_profile(cols, x, sigma)
    prof_y = i0[:, None] * _pixel_profile(rows, y, sigma)
    patch = prof_y[:, :, None] * prof_x[:, None, :]  # (P, K, K)
    # accumulate on an image padded by twice the patch reach, so no index falls outside
    pad = 2 * half
    padded_w = width + 2 * pad
    flat = ((rows + pad) * padded_w)[:, :, None] + (cols + pad)[:, None, :]
    image = np.bincount(
        flat.ravel(), weights=patch.ravel(), minlength=(height + 2 * pad) * padded_w
    ).reshape(height + 2 * pad, padded_w)
    return image[pad : pad + height, pad : pad + width]


def _pixel_profile(pixels: np.ndarray, centre: np.ndarray, sigma: np.ndarray) -> np.ndarray:
    """Mean of ``exp(-(t - centre)^2 / (2 sigma^2))`` over each pixel ``[p - 1/2, p + 1/2]``."""
    s = (math.sqrt(2.0) * sigma)[:, None]
    lo = (pixels - 0.5 - centre[:, None]) / s
    hi = (pixels + 0.5 - centre[:, None]) / s
    return (sigma[:, None] * math.sqrt(math.pi / 2.0)) * (erf(hi) - erf(lo))


def make_particles(
    shape: tuple[int, int],
    displacement: Displacement,
    *,
    density_ppp: float = 0.05,
    diameter_px: tuple[float, float] = (2.0, 3.5),
    out_of_plane_px: float = 0.0,
    sheet_thickness_px: float | None = None,
    peak_counts: float = 1000.0,
    rng: np.random.Generator,
) -> ParticleSet:
    """Seed particles and move them by ``displacement`` (see :func:`particle_pair`).

    Particles are seeded uniformly over the image extended by a margin wide enough for any
    particle that appears in either frame, and uniformly across the sheet in
    ``|z| <= dz0/2 + |out_of_plane_px|/2``; ``density_ppp`` counts particles per pixel inside
    the e^-2 sheet thickness ``|z| <= dz0/2``.
    """
    height, width = shape
    d_lo, d_hi = float(diameter_px[0]), float(diameter_px[1])
    margin = _seed_margin(shape, displacement, d_hi)
    thickness = _sheet_thickness(sheet_thickness_px, d_hi)
    z_half = 0.5 * thickness + 0.5 * abs(out_of_plane_px)
    area = (width + 2 * margin) * (height + 2 * margin)
    count = round(density_ppp * area * (2.0 * z_half / thickness))
    px = rng.uniform(-margin - 0.5, width - 0.5 + margin, count)
    py = rng.uniform(-margin - 0.5, height - 0.5 + margin, count)
    pz = rng.uniform(-z_half, z_half, count)
    diam = rng.uniform(d_lo, d_hi, count)
    ddx, ddy = (np.asarray(v, dtype=np.float64) for v in displacement(px, py))
    ddx, ddy = np.broadcast_to(ddx, px.shape), np.broadcast_to(ddy, px.shape)
    z_a = pz - 0.5 * out_of_plane_px
    z_b = pz + 0.5 * out_of_plane_px
    return ParticleSet(
        x_a_px=px - 0.5 * ddx,
        y_a_px=py - 0.5 * ddy,
        x_b_px=px + 0.5 * ddx,
        y_b_px=py + 0.5 * ddy,
        diameter_px=diam,
        peak_a=peak_counts * np.exp(-8.0 * z_a**2 / thickness**2),
        peak_b=peak_counts * np.exp(-8.0 * z_b**2 / thickness**2),
        z_px=pz,
    )


def _sheet_thickness(sheet_thickness_px: float | None, d_max_px: float) -> float:
    """e^-2 sheet thickness in px; by default 8 largest particle diameters."""
    if sheet_thickness_px is None:
        return 8.0 * d_max_px
    if sheet_thickness_px <= 0:
        raise ValueError("sheet_thickness_px must be positive")
    return float(sheet_thickness_px)


def _seed_margin(shape: tuple[int, int], displacement: Displacement, d_max_px: float) -> int:
    """Margin (px) around the image that holds every particle visible in either frame."""
    height, width = shape
    gy, gx = np.mgrid[-8 : height + 8 : 8, -8 : width + 8 : 8].astype(np.float64)
    dx, dy = displacement(gx, gy)
    reach = float(np.nanmax(np.hypot(np.asarray(dx), np.asarray(dy)), initial=0.0))
    return math.ceil(0.5 * reach + 0.75 * d_max_px + 2.0)


def particle_pair(
    shape: tuple[int, int],
    displacement: Displacement,
    *,
    density_ppp: float = 0.05,
    diameter_px: tuple[float, float] = (2.0, 3.5),
    noise: float = 0.02,
    bits: int = 12,
    out_of_plane_px: float = 0.0,
    sheet_thickness_px: float | None = None,
    seed: int = 0,
    background: float = 0.0,
    peak_fraction: float = PEAK_FRACTION,
    return_particles: bool = False,
):
    """Synthetic double-frame particle images of a known displacement field.

    A particle seeded at ``p`` is drawn at ``p - d(p)/2`` in frame A and ``p + d(p)/2`` in
    frame B, with ``d = displacement(p)``: the displacement is the central difference at the
    midpoint, so the true displacement of a vector at position ``q`` is ``displacement(q)``
    (exact for uniform fields, second order in the field's curvature otherwise).

    Parameters
    ----------
    shape : (int, int)
        Frame shape ``(H, W)``.
    displacement : callable
        ``(x_px, y_px) -> (dx_px, dy_px)`` on arrays, image coordinates, px A->B.
    density_ppp : float
        Particles per pixel inside the e^-2 sheet thickness.
    diameter_px : (float, float)
        Range of the e^-2 particle image diameter (uniform).
    noise : float
        Standard deviation of additive Gaussian noise as a fraction of the peak intensity.
    bits : int
        Bit depth: frames are rounded and clipped to ``0 .. 2**bits - 1`` (saturation).
    out_of_plane_px : float
        Motion across the sheet between frames (loss of pairs).
    sheet_thickness_px : float or None
        e^-2 sheet thickness ``dz0``; None means 8 times the largest particle diameter.
    seed : int
        Seed of the random generator; equal seeds give equal frames.
    background : float
        Constant background, counts.
    peak_fraction : float
        Peak intensity of a particle at the sheet centre, as a fraction of full scale.
    return_particles : bool
        Also return the :class:`ParticleSet` (truth for tests).

    Returns
    -------
    frame_a, frame_b : (H, W) ndarray of float32
        Counts in ``0 .. 2**bits - 1``; with ``return_particles`` a third item, the particles.
    """
    rng = np.random.default_rng(seed)
    full_scale = float(2**bits - 1)
    peak_counts = peak_fraction * full_scale
    parts = make_particles(
        shape,
        displacement,
        density_ppp=density_ppp,
        diameter_px=diameter_px,
        out_of_plane_px=out_of_plane_px,
        sheet_thickness_px=sheet_thickness_px,
        peak_counts=peak_counts,
        rng=rng,
    )
    frames = []
    for x, y, peak in (
        (parts.x_a_px, parts.y_a_px, parts.peak_a),
        (parts.x_b_px, parts.y_b_px, parts.peak_b),
    ):
        image = render_particles(shape, x, y, parts.diameter_px, peak) + background
        if noise > 0:
            image += rng.normal(0.0, noise * peak_counts, image.shape)
        frames.append(np.clip(np.rint(image), 0.0, full_scale).astype(np.float32))
    if return_particles:
        return frames[0], frames[1], parts
    return frames[0], frames[1]


# --- analytic displacement fields -----------------------------------------------------------
# Vorticity convention: counter-clockwise positive as seen on screen. With image y downward this
# is omega = d(dx)/dy - d(dy)/dx (derived from omega = dV/dX - dU/dY with Y = -y, V = -dy), in
# 1/frame when displacements are px per frame and positions px.


@dataclass(frozen=True)
class uniform:
    """Uniform displacement ``(dx_px, dy_px)`` everywhere; zero vorticity."""

    dx_px: float
    dy_px: float

    def __call__(self, x_px, y_px):
        x = np.asarray(x_px, dtype=np.float64)
        return np.full(x.shape, self.dx_px), np.full(x.shape, self.dy_px)

    def vorticity(self, x_px, y_px):
        return np.zeros(np.shape(x_px))


@dataclass(frozen=True)
class uniform_shear:
    """Simple shear ``dx = dx0 + S (y - y_ref)``, ``dy = 0`` (image coordinates).

    Vorticity (counter-clockwise on screen) ``omega = d(dx)/dy - d(dy)/dx = S`` (derived): with
    y downward, faster flow lower in the picture turns counter-clockwise on screen.
    """

    rate_per_px: float
    y_ref_px: float = 0.0
    dx0_px: float = 0.0

    def __call__(self, x_px, y_px):
        y = np.asarray(y_px, dtype=np.float64)
        return self.dx0_px + self.rate_per_px * (y - self.y_ref_px), np.zeros(y.shape)

    def vorticity(self, x_px, y_px):
        return np.full(np.shape(x_px), float(self.rate_per_px))


@dataclass(frozen=True)
class lamb_oseen:
    """Lamb-Oseen vortex, counter-clockwise on screen for positive circulation.

    ``v_theta(r) = G / (2 pi r) (1 - exp(-r^2 / rc^2))`` and ``omega(r) = G / (pi rc^2)
    exp(-r^2 / rc^2)``; the swirl peaks at ``r = 1.1209 rc`` with ``0.63817 G / (2 pi rc)``.
    In image coordinates with ``(rx, ry)`` from the centre, the screen-counter-clockwise unit
    tangent is ``(ry, -rx) / r`` (derived: ``(-Y, X)/r`` in y-up coordinates with ``Y = -ry``).
    """

    center_px: tuple[float, float]
    circulation_px2: float
    core_radius_px: float

    def __call__(self, x_px, y_px):
        rx = np.asarray(x_px, dtype=np.float64) - self.center_px[0]
        ry = np.asarray(y_px, dtype=np.float64) - self.center_px[1]
        r2 = rx**2 + ry**2
        # v_theta / r, with its finite limit G / (2 pi rc^2) at the centre
        rc2 = self.core_radius_px**2
        safe = np.where(r2 > 1e-12 * rc2, r2, 1.0)
        ratio = np.where(
            r2 > 1e-12 * rc2,
            -np.expm1(-r2 / rc2) / safe,
            1.0 / rc2,
        ) * (self.circulation_px2 / (2.0 * math.pi))
        return ratio * ry, -ratio * rx

    def vorticity(self, x_px, y_px):
        rx = np.asarray(x_px, dtype=np.float64) - self.center_px[0]
        ry = np.asarray(y_px, dtype=np.float64) - self.center_px[1]
        rc2 = self.core_radius_px**2
        return self.circulation_px2 / (math.pi * rc2) * np.exp(-(rx**2 + ry**2) / rc2)

    def peak_displacement_px(self) -> float:
        """Largest swirl displacement ``G / (2 pi rc s) (1 - exp(-s^2))`` at ``r = s rc``.

        Setting ``d v_theta / dr = 0`` gives ``1 + 2 s^2 = exp(s^2)`` (derived), solved here by
        Newton's method: ``s = 1.1209``, peak ``0.63817 G / (2 pi rc)``.
        """
        q = 1.25  # q = s^2
        for _ in range(30):
            q -= (math.exp(q) - 1.0 - 2.0 * q) / (math.exp(q) - 2.0)
        s = math.sqrt(q)
        return abs(self.circulation_px2) / (2 * math.pi * self.core_radius_px * s) * -math.expm1(-q)


@dataclass(frozen=True)
class potential_sphere:
    """Potential flow past a sphere, in a plane through its centre (ball frame).

    With ``a`` the angle from the free-stream direction and ``R`` the radius
    (Batchelor 1967, memory): ``u_r = U cos a (1 - R^3/r^3)``, ``u_a = -U sin a (1 + R^3/(2 r^3))``;
    zero inside the sphere. Far away the displacement is ``U`` along ``direction_deg``
    (0 = toward +x, 90 = toward the top of the picture); on the surface the speed is
    ``1.5 U sin a``. The flow is irrotational: vorticity 0 everywhere.
    """

    center_px: tuple[float, float]
    radius_px: float
    U_px: float
    direction_deg: float = 0.0

    def __call__(self, x_px, y_px):
        rx = np.asarray(x_px, dtype=np.float64) - self.center_px[0]
        ry = np.asarray(y_px, dtype=np.float64) - self.center_px[1]
        th = math.radians(self.direction_deg)
        ex, ey = math.cos(th), -math.sin(th)  # stream direction, image coordinates
        nx, ny = -ey, ex  # a perpendicular completing the (stream, normal) pair
        p = rx * ex + ry * ey
        q = rx * nx + ry * ny
        r = np.hypot(p, q)
        outside = r > self.radius_px
        r_safe = np.where(outside, r, 1.0)
        k = (self.radius_px / r_safe) ** 3
        cos_a, sin_a = p / r_safe, q / r_safe
        u_r = self.U_px * cos_a * (1.0 - k)
        u_a = -self.U_px * sin_a * (1.0 + 0.5 * k)
        up = u_r * cos_a - u_a * sin_a
        uq = u_r * sin_a + u_a * cos_a
        dx = np.where(outside, up * ex + uq * nx, 0.0)
        dy = np.where(outside, up * ey + uq * ny, 0.0)
        return dx, dy

    def vorticity(self, x_px, y_px):
        return np.zeros(np.shape(x_px))

    def inside(self, x_px, y_px) -> np.ndarray:
        """True where ``(x, y)`` lies inside the sphere's outline."""
        rx = np.asarray(x_px, dtype=np.float64) - self.center_px[0]
        ry = np.asarray(y_px, dtype=np.float64) - self.center_px[1]
        return np.hypot(rx, ry) <= self.radius_px
