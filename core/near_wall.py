"""The particle images in a thin band along one side of the ball, in the ball frame.

The separation fit compares the two frames under a model of the ball-frame motion next to the
wall: frame A sampled at ``p - D/2 - u(p)/2`` must match frame B at ``p + D/2 + u(p)/2`` for
every sample ``p`` of the band (``D`` the ball displacement A->B, ``u`` the model's ball-frame
displacement). Near the wall the motion is almost along the outline, a turn about the ball
centre, so each frame is resampled once on a fine polar grid about its own ball centre
(cubic splines, 0.25 px steps in radius and along the arc); a model's residual is then a
bilinear lookup in those two polar pictures. We write this lookup ourselves (compiled with
numba) because the fit evaluates thousands of models per side: ``scipy.ndimage.map_coordinates``
on the frames costs about ten times more per evaluation, and the 0.25 px grid keeps the bilinear
error near 2 % of a particle image's peak (below the camera noise).

Coordinates: ``phi`` is the separation-convention angle (deg, 0 on the plane normal to the
flight, positive rearward) on the band's side, ``gap`` the distance outside the outline (px).
"""

from __future__ import annotations

import copy
import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from core.compiled import compiled
from core.geometry import flight_unit, side_normal
from core.resample import cubic_resampled
from core.results import VectorField

#: Polar grid step of the resampled frames (px, radially and along the arc).
POLAR_STEP_PX = 0.25
#: Gap (px) up to which the band's rows are finest; beyond it they are twice as far apart.
FINE_GAP_PX = 8.0
#: Share of a band's samples at one angle left out (glare) from which the band counts as
#: hidden there: the glare then reaches across its depth and the fit sees nothing of the layer.
#: Where it covers only the first rows, the layer further out still places the separation (on
#: the physical family, 15 of 16 sides of bright or glinting balls with the wall's first rows
#: masked (up to 7-12 px out) over long arcs were picked within 2.3 deg, the other 5.7 deg off
#: within its 9.5 deg).
HIDDEN_SHARE = 0.9


@dataclass(frozen=True)
class BallMotion:
    """The ball at mid-exposure and its motion (image coordinates, px)."""

    center_px: tuple[float, float]
    radius_px: float
    displacement_px: tuple[float, float]  # ball centre B - A
    flight_deg: float


def side_axes(flight_deg: float, side: str, phi_deg: np.ndarray):
    """Outward radial and rearward tangential unit vectors (image coordinates) at angles phi."""
    fx, fy = flight_unit(flight_deg)
    nx, ny = side_normal(flight_deg, side)
    t = np.radians(phi_deg)
    ex, ey = np.cos(t) * nx - np.sin(t) * fx, np.cos(t) * ny - np.sin(t) * fy
    tx, ty = -np.sin(t) * nx - np.cos(t) * fx, -np.sin(t) * ny - np.cos(t) * fy
    return (ex, ey), (tx, ty)


def polar_of(ball: BallMotion, side: str, x_px: np.ndarray, y_px: np.ndarray):
    """Separation-convention angle (deg) and gap outside the outline (px) of image points."""
    fx, fy = flight_unit(ball.flight_deg)
    nx, ny = side_normal(ball.flight_deg, side)
    rx, ry = x_px - ball.center_px[0], y_px - ball.center_px[1]
    phi = np.degrees(np.arctan2(-(rx * fx + ry * fy), rx * nx + ry * ny))
    return phi, np.hypot(rx, ry) - ball.radius_px


class NearWallBand:
    """Samples of both frames on a polar grid along one side of the ball (ball frame).

    Parameters
    ----------
    frame_a, frame_b : (H, W) ndarray
        The frame pair (lab frame, as recorded).
    ball : BallMotion
    side : {"upper", "lower"}
    phi_deg : (float, float)
        Angular extent of the band (deg).
    gap_px : (float, float)
        Gaps (px) of the band's first and last sample rows outside the outline: every
        ``gap_step_px`` up to ``FINE_GAP_PX``, twice as far apart beyond.
    max_speed_px : float
        Largest ball-frame motion (px per pair) a model may ask for: sizes the polar margins.
    arc_step_px, gap_step_px : float
        Spacing of the band's samples.
    """

    def __init__(self, frame_a, frame_b, ball: BallMotion, side: str, *, phi_deg, gap_px,
                 max_speed_px: float, arc_step_px: float = 1.0, gap_step_px: float = 0.5):
        self.ball = ball
        self.side = side
        r = ball.radius_px
        step_deg = math.degrees(arc_step_px / r)
        self.phi_grid = np.arange(phi_deg[0], phi_deg[1] + step_deg / 2, step_deg)
        fine = np.arange(gap_px[0], min(gap_px[1], FINE_GAP_PX) + gap_step_px / 2, gap_step_px)
        coarse = np.arange(fine[-1] + 2 * gap_step_px, gap_px[1] + gap_step_px, 2 * gap_step_px)
        self.gap_grid = np.concatenate([fine, coarse])
        self._set_samples(self.phi_grid, self.gap_grid)
        height, width = frame_a.shape
        (ex, ey), _ = side_axes(ball.flight_deg, side, self.phi)
        x = ball.center_px[0] + self.rho * ex
        y = ball.center_px[1] + self.rho * ey
        self.inside_fraction = float(np.mean((x >= 0) & (y >= 0) & (x <= width - 1)
                                             & (y <= height - 1)))
        margin_r = 0.5 * max_speed_px + 2.0
        margin_phi = math.degrees((0.5 * max_speed_px + 2.0) / r)
        self._rho0 = r + gap_px[0] - margin_r
        rho_axis = np.arange(self._rho0, r + gap_px[1] + margin_r, POLAR_STEP_PX)
        self._dphi = math.degrees(POLAR_STEP_PX / (r + 0.5 * (gap_px[0] + gap_px[1])))
        self._phi0 = phi_deg[0] - margin_phi
        phi_axis = np.arange(self._phi0, phi_deg[1] + margin_phi, self._dphi)
        dx, dy = ball.displacement_px
        self._sample_a = functools.partial(_polar_picture, ball=ball, side=side,
                                           shift_px=(-0.5 * dx, -0.5 * dy), rho_axis=rho_axis,
                                           phi_axis=phi_axis)
        self._sample_b = functools.partial(_polar_picture, ball=ball, side=side,
                                           shift_px=(0.5 * dx, 0.5 * dy), rho_axis=rho_axis,
                                           phi_axis=phi_axis)
        self.polar_a = self._sample_a(frame_a)
        self.polar_b = self._sample_b(frame_b)
        self._steps_a = _row_steps(self.polar_a)
        self._steps_b = _row_steps(self.polar_b)
        self.scale = float(np.std(self.polar_a)) + 1e-9
        self._keep_picture = None  # (Nphi, Nr) 1 where a sample counts, 0 in glare
        self.kept_fraction = 1.0

    def leave_out(self, masks, reach_px: float) -> None:
        """Leave the samples within ``reach_px`` of a masked pixel of either frame (``(H, W)``
        bool, or None) out of every residual: they count as zero from now on."""
        grow = math.ceil(reach_px)
        keep = None
        for mask, picture_of in zip(masks, (self._sample_a, self._sample_b), strict=True):
            if mask is None or not mask.any():
                continue
            bad = ndimage.binary_dilation(mask, iterations=grow) if grow else mask
            clear = picture_of(bad.astype(np.float64)) < 0.5
            keep = clear if keep is None else keep & clear
        if keep is None:
            return
        self._keep_picture = keep.astype(np.float64)
        self._weight = self._weights()
        self.kept_fraction = float(np.mean(self._weight))

    def wall_hidden(self) -> np.ndarray:
        """``(Nphi,)`` bool: at which of the band's angles glare reaches across its depth (at
        least ``HIDDEN_SHARE`` of the samples at that angle are left out)."""
        weight = self._weight if self._weight is not None else self._weights()
        return np.mean(weight.reshape(self.shape) == 0.0, axis=1) >= HIDDEN_SHARE

    def _weights(self) -> np.ndarray:
        """1 for the samples that count, 0 for those left out (at the samples' own places)."""
        if self._keep_picture is None:
            return np.ones(self.phi.size)
        kept = _bilinear(self._keep_picture, (self.phi - self._phi0) / self._dphi,
                         (self.rho - self._rho0) / POLAR_STEP_PX) > 0.999
        return kept.astype(np.float64)

    def _set_samples(self, phi_grid: np.ndarray, gap_grid: np.ndarray) -> None:
        self.phi_grid, self.gap_grid = phi_grid, gap_grid
        grid_phi, grid_gap = np.meshgrid(phi_grid, gap_grid, indexing="ij")
        self.phi = grid_phi.ravel()
        self.gap = grid_gap.ravel()
        self.rho = self.ball.radius_px + self.gap
        self._weight = None

    def view(self, phi_deg=None, *, every: int = 1) -> NearWallBand:
        """The same band (same resampled frames) with fewer samples: the angles within
        ``phi_deg`` only, and every ``every``-th angle and gap row."""
        phi = self.phi_grid
        if phi_deg is not None:
            phi = phi[(phi >= phi_deg[0]) & (phi <= phi_deg[1])]
        other = copy.copy(self)
        other._set_samples(phi[::every], self.gap_grid[::every])
        if self._keep_picture is not None:
            other._weight = other._weights()
        return other

    def blurred(self, sigma_px: float) -> NearWallBand:
        """The same band (same samples, same ones left out) on both frames smoothed by a
        Gaussian of ``sigma_px`` (px; none when 0).

        A coarse-to-fine step, as image registration does it: on the sharp frames a model's
        cost only falls once its motion is within about a particle image of the truth
        everywhere, so with large displacements the cost against the separation angle breaks
        into narrow pits; smoothed frames keep the cost falling toward the truth from further
        away. (The polar pictures' samples are ``POLAR_STEP_PX`` apart both ways.) Samples
        left out for glare are left out three ``sigma_px`` further: the smoothing spreads the
        glare's light that far.
        """
        if not sigma_px > 0:
            return self
        steps = sigma_px / POLAR_STEP_PX
        other = copy.copy(self)
        other.polar_a = ndimage.gaussian_filter(self.polar_a, steps)
        other.polar_b = ndimage.gaussian_filter(self.polar_b, steps)
        other._steps_a = _row_steps(other.polar_a)
        other._steps_b = _row_steps(other.polar_b)
        other.scale = float(np.std(other.polar_a)) + 1e-9
        if self._keep_picture is not None:
            reach = 2 * math.ceil(3.0 * steps) + 1
            other._keep_picture = ndimage.minimum_filter(self._keep_picture, reach)
            other._weight = other._weights()
        return other

    @property
    def shape(self) -> tuple[int, int]:
        """``(angles, gaps)`` of the band's samples."""
        return self.phi_grid.size, self.gap_grid.size

    def residual(self, u_t: np.ndarray, u_r: np.ndarray) -> np.ndarray:
        """Normalised difference of the two frames under ball-frame motion ``(u_t, u_r)`` (px).

        ``u_t`` is along the outline (rearward positive), ``u_r`` outward; both ``(S,)`` for the
        band's samples, or ``(K, S)`` for ``K`` models at once (then ``(K, S)`` residuals).
        """
        u_t, u_r = np.broadcast_arrays(np.asarray(u_t, np.float64), np.asarray(u_r, np.float64))
        if u_t.shape[-1] != self.rho.size or u_t.ndim > 2:
            raise ValueError(f"motion of shape {u_t.shape} for a band of {self.rho.size} samples")
        weight = self._weight if self._weight is not None else _EVERY_SAMPLE
        out = _frames_differ(self.polar_a, self._steps_a, self.polar_b, self._steps_b,
                             self.rho, self.phi, np.atleast_2d(u_t), np.atleast_2d(u_r),
                             weight, self._rho0, self._phi0, self._dphi, POLAR_STEP_PX,
                             self.scale)
        return out if u_t.ndim == 2 else out[0]

    def residual_slopes(self, u_t: np.ndarray, u_r: np.ndarray):
        """Derivatives of :meth:`residual` by ``u_t`` and by ``u_r`` at each sample for one
        model's motion ``(S,)``: ``(S,)`` each, the bilinear lookups' slopes within their cells
        (what a finite difference small enough to stay in the cell gives; 0 where a lookup is
        clamped to the picture's edge or the sample is left out)."""
        weight = self._weight if self._weight is not None else _EVERY_SAMPLE
        return _frames_differ_slopes(
            self.polar_a, self._steps_a, self.polar_b, self._steps_b, self.rho, self.phi,
            np.asarray(u_t, np.float64), np.asarray(u_r, np.float64), weight, self._rho0,
            self._phi0, self._dphi, POLAR_STEP_PX, self.scale)


class JointBand:
    """Several shots' bands on the same samples (their frames in one ball frame), as one band:
    a model's residuals are those of every shot, one after the other."""

    def __init__(self, bands: list[NearWallBand]):
        self.bands = bands
        first = bands[0]
        self.ball, self.side = first.ball, first.side
        self.phi_grid, self.gap_grid = first.phi_grid, first.gap_grid
        self.phi, self.gap, self.rho = first.phi, first.gap, first.rho
        self.inside_fraction = min(b.inside_fraction for b in bands)
        self.kept_fraction = min(b.kept_fraction for b in bands)

    def view(self, phi_deg=None, *, every: int = 1) -> JointBand:
        return JointBand([b.view(phi_deg, every=every) for b in self.bands])

    def blurred(self, sigma_px: float) -> JointBand:
        return JointBand([b.blurred(sigma_px) for b in self.bands])

    def wall_hidden(self) -> np.ndarray:
        """Hidden in every shot: one shot's glare does not hide what the others show. (The
        ensemble's bands leave no glare out today, so none is hidden.)"""
        return np.logical_and.reduce([b.wall_hidden() for b in self.bands])

    def residual(self, u_t: np.ndarray, u_r: np.ndarray) -> np.ndarray:
        return np.concatenate([b.residual(u_t, u_r) for b in self.bands], axis=-1)

    def residual_slopes(self, u_t: np.ndarray, u_r: np.ndarray):
        found = [b.residual_slopes(u_t, u_r) for b in self.bands]
        return tuple(np.concatenate(part) for part in zip(*found, strict=True))


def _polar_picture(frame, *, ball: BallMotion, side: str, shift_px, rho_axis, phi_axis):
    """``frame`` resampled (cubic spline) at ``centre + shift + rho e(phi)``: ``(Nphi, Nr)``
    (along the arc, then outward: a band's samples read it row by row)."""
    (ex, ey), _ = side_axes(ball.flight_deg, side, phi_axis)
    cx = ball.center_px[0] + shift_px[0]
    cy = ball.center_px[1] + shift_px[1]
    xs = cx + ex[:, None] * rho_axis[None, :]
    ys = cy + ey[:, None] * rho_axis[None, :]
    height, width = frame.shape
    x0 = int(np.clip(np.floor(xs.min()) - 4, 0, width - 1))
    x1 = int(np.clip(np.ceil(xs.max()) + 5, x0 + 1, width))
    y0 = int(np.clip(np.floor(ys.min()) - 4, 0, height - 1))
    y1 = int(np.clip(np.ceil(ys.max()) + 5, y0 + 1, height))
    crop = np.asarray(frame[y0:y1, x0:x1], dtype=np.float64)
    return cubic_resampled(crop, ys - y0, xs - x0)


def _row_steps(picture: np.ndarray) -> np.ndarray:
    """Each sample's step to the next row (0 in the last), for :func:`_lookup`."""
    steps = np.zeros_like(picture)
    steps[:-1] = np.diff(picture, axis=0)
    return steps


def _bilinear(picture: np.ndarray, row: np.ndarray, col: np.ndarray) -> np.ndarray:
    """Bilinear samples of ``picture`` at fractional ``(row, col)``, clamped to its edge."""
    row, col = np.broadcast_arrays(np.asarray(row, np.float64), np.asarray(col, np.float64))
    picture = np.ascontiguousarray(picture, np.float64)
    values = np.empty(row.size)
    _lookup_many(picture, _row_steps(picture), np.ascontiguousarray(row.ravel()),
                 np.ascontiguousarray(col.ravel()), values)
    return values.reshape(row.shape)


_RAD_PER_DEG = math.radians(1.0)
_EVERY_SAMPLE = np.ones(0)  # no weights: every sample counts


# The lookups are compiled (numba): written with numpy they made a dozen (K, S) temporaries per
# evaluation of K models, and the fit evaluates thousands of models per side.
@compiled
def _frames_differ(polar_a, steps_a, polar_b, steps_b, rho, phi, u_t, u_r, weight, rho0, phi0,
                   dphi, drho, scale):
    """:meth:`NearWallBand.residual` of ``K`` models, ``(K, S)``; ``weight`` empty when every
    sample counts."""
    models, samples = u_t.shape
    out = np.empty((models, samples))
    for k in range(models):
        for s in range(samples):
            turn_deg = 0.5 * u_t[k, s] / rho[s] / _RAD_PER_DEG
            half_r = 0.5 * u_r[k, s]
            a = _lookup(polar_a, steps_a, (phi[s] - turn_deg - phi0) / dphi,
                        (rho[s] - half_r - rho0) / drho)
            b = _lookup(polar_b, steps_b, (phi[s] + turn_deg - phi0) / dphi,
                        (rho[s] + half_r - rho0) / drho)
            value = a - b
            if weight.size:
                value *= weight[s]
            out[k, s] = value / scale
    return out


@compiled
def _frames_differ_slopes(polar_a, steps_a, polar_b, steps_b, rho, phi, u_t, u_r, weight, rho0,
                          phi0, dphi, drho, scale):
    """Derivatives of :func:`_frames_differ` of one model by ``u_t`` and ``u_r``, ``(S,)``
    each."""
    samples = u_t.size
    by_t = np.empty(samples)
    by_r = np.empty(samples)
    for s in range(samples):
        turn_deg = 0.5 * u_t[s] / rho[s] / _RAD_PER_DEG
        half_r = 0.5 * u_r[s]
        a_row, a_col = _lookup_slopes(polar_a, steps_a, (phi[s] - turn_deg - phi0) / dphi,
                                      (rho[s] - half_r - rho0) / drho)
        b_row, b_col = _lookup_slopes(polar_b, steps_b, (phi[s] + turn_deg - phi0) / dphi,
                                      (rho[s] + half_r - rho0) / drho)
        factor = (weight[s] if weight.size else 1.0) / scale
        # d row / d u_t = -+ 0.5 / (rho rad dphi); d col / d u_r = -+ 0.5 / drho
        row_step = 0.5 / rho[s] / _RAD_PER_DEG / dphi
        by_t[s] = -(a_row + b_row) * row_step * factor
        by_r[s] = -(a_col + b_col) * (0.5 / drho) * factor
    return by_t, by_r


@compiled
def _lookup_slopes(picture, steps, row, col):
    """Derivatives of :func:`_lookup` by ``row`` and ``col`` (0 where clamped)."""
    if math.isnan(row) or math.isnan(col):
        return np.nan, np.nan
    rows, cols = picture.shape
    row_in = 0.0 <= row <= rows - 1.000001
    col_in = 0.0 <= col <= cols - 1.000001
    row = min(max(0.0, row), rows - 1.000001)
    col = min(max(0.0, col), cols - 1.000001)
    r0, c0 = int(row), int(col)
    fr, fc = row - r0, col - c0
    by_row = steps[r0, c0] + fc * (steps[r0, c0 + 1] - steps[r0, c0]) if row_in else 0.0
    # the step from the left to the right column, at the row's fraction
    by_col = picture[r0, c0 + 1] - picture[r0, c0] + fr * (steps[r0, c0 + 1] - steps[r0, c0])
    return by_row, (by_col if col_in else 0.0)


@compiled
def _lookup_many(picture, steps, row, col, out):
    """:func:`_lookup` at each ``(row[i], col[i])`` into ``out[i]``."""
    for i in range(row.size):
        out[i] = _lookup(picture, steps, row[i], col[i])


@compiled
def _lookup(picture, steps, row, col):
    """Bilinear sample of ``picture`` at fractional ``(row, col)``, clamped to its edge (NaN
    where either is NaN); ``steps`` is :func:`_row_steps` of the picture (it saves two lookups
    and two differences per sample of a picture sampled again and again)."""
    if math.isnan(row) or math.isnan(col):
        return np.nan
    rows, cols = picture.shape
    row = min(max(0.0, row), rows - 1.000001)
    col = min(max(0.0, col), cols - 1.000001)
    r0, c0 = int(row), int(col)
    fr, fc = row - r0, col - c0
    left = picture[r0, c0] + fr * steps[r0, c0]
    right = picture[r0, c0 + 1] + fr * steps[r0, c0 + 1]
    return left + fc * (right - left)


def particle_image_density(frame: np.ndarray, mask: np.ndarray | None = None,
                           *, noise_sigmas: float = 5.0) -> np.ndarray:
    """Particle images per pixel around each pixel, ``(H, W)`` (local peaks above the noise).

    A particle image is a local maximum of the band-passed frame (a difference of Gaussians at
    the particle-image scale) that stands ``noise_sigmas`` camera-noise deviations above its
    surroundings; the noise is estimated robustly from the band-passed frame itself. The count
    is smoothed over about 16 px.
    """
    # single precision and the noise from every third row and column: a large shot's map cost
    # a sixth of its separation stage in double precision over every pixel, for a count
    image = np.asarray(frame, dtype=np.float32)
    band = ndimage.gaussian_filter(image, 0.7) - ndimage.gaussian_filter(image, 3.0)
    sample = band[::3, ::3]
    noise = 1.4826 * float(np.median(np.abs(sample - np.median(sample)))) + 1e-9
    peaks = (band == ndimage.maximum_filter(band, size=3)) & (band > noise_sigmas * noise)
    if mask is not None:
        peaks &= ~mask
    return ndimage.uniform_filter(peaks.astype(np.float32), 16)


# --- seeding beside the ball ---------------------------------------------------------------


@dataclass
class SeedingMap:
    """Particle images per pixel around the ball (frame A), ``density[y - y0, x - x0]``."""

    density: np.ndarray
    origin_px: tuple[int, int]  # (y0, x0)

    def at(self, x_px: np.ndarray, y_px: np.ndarray) -> np.ndarray:
        rows = np.clip(np.rint(y_px - self.origin_px[0]).astype(int), 0, self.density.shape[0] - 1)
        cols = np.clip(np.rint(x_px - self.origin_px[1]).astype(int), 0, self.density.shape[1] - 1)
        return self.density[rows, cols]


#: The ring of air :func:`seeding_ratio` compares the band with: radii from the ball's centre
#: over its radius.
SEEDING_RING = (1.3, 1.8)


def seeding_ratio(seeding: SeedingMap, ball, side: str) -> float:
    """Particle images in the band beside ``side`` over those in the air around the ball.

    The band: 2-14 px outside the outline, -40..+40 deg; the air: the median over a ring
    0.3-0.8 radii outside the whole outline (a laser shadow darkens one side only).
    """
    cx, cy = ball.center_px
    r = ball.radius_px
    phi = np.linspace(-40.0, 40.0, 81)
    (ex, ey), _ = side_axes(ball.flight_deg, side, phi)
    near = np.mean([seeding.at(cx + (r + g) * ex, cy + (r + g) * ey)
                    for g in np.linspace(2.0, 14.0, 7)])
    theta = np.linspace(0.0, 2.0 * np.pi, 240, endpoint=False)
    ring = [seeding.at(cx + (r * k) * np.cos(theta), cy + (r * k) * np.sin(theta))
            for k in np.linspace(*SEEDING_RING, 6)]
    far = float(np.median(np.concatenate(ring)))
    return float(near) / far if far > 0 else 0.0


# --- the stream outside the layer, from the fine PIV ------------------------------------------


@dataclass
class OuterStream:
    """Smooth fit of the ball-frame stream next to one side: ``u_t``, ``u_r`` (px per pair)."""

    coef_t: np.ndarray
    coef_r: np.ndarray
    radius_px: float
    phi_range: tuple[float, float] = (-90.0, 180.0)  # angles covered by vectors near the wall

    @staticmethod
    def _basis(phi_deg, gap_px, radius_px, with_constant):
        t = np.radians(np.asarray(phi_deg, dtype=np.float64))
        g = np.asarray(gap_px, dtype=np.float64) / radius_px
        powers = [t**k for k in range(4)]
        cols = ([*powers] if with_constant else []) + [p * g for p in powers] + [
            p * g * g for p in powers[:2]
        ]
        return np.stack(cols, axis=-1)

    def tangential(self, phi_deg, gap_px) -> np.ndarray:
        """Tangential component; beyond the angles the vectors cover near the wall it is held at
        its last value (behind separation the stream outside the layer hardly changes, and a
        polynomial carried on into the wake would run wild)."""
        phi = np.clip(phi_deg, *self.phi_range)
        return self._basis(phi, gap_px, self.radius_px, True) @ self.coef_t

    def radial(self, phi_deg, gap_px) -> np.ndarray:
        """Radial component, zero at the wall (no flow through it)."""
        phi = np.clip(phi_deg, *self.phi_range)
        return self._basis(phi, gap_px, self.radius_px, False) @ self.coef_r


#: Vectors from this far outside the outline (px) set the stream beside the ball. From 14 px
#: (to 48), clear of a thick layer's outer part, the kinematic family's thick layers were picked
#: closer to the truth, but with sparse seeding or small particle images a few sides fell 30-35
#: deg off with a 3-9 deg uncertainty: not used (docs/separation_accuracy.md, "The tables, and
#: what was tried against their errors").
OUTER_STREAM_GAP_PX = (6.0, 40.0)


def outer_stream(
    fine: VectorField, origin_px, ball, side: str, phi_deg, *, gap_px=OUTER_STREAM_GAP_PX
) -> OuterStream | None:
    """Fit the stream beside the ball from fine PIV vectors clear of the wall and of the wake.

    ``ball`` is the separation's ``BallFrame`` (its ``motion``, ``stream`` and circle);
    ``phi_deg`` the band's angles. Vectors count when valid, ``gap_px`` outside the outline, and moving rearward faster than
    0.6 of the ball's speed relative to the air (the wake and the layer are left out). The fit is
    a low-order polar polynomial (cubic in angle, quadratic in gap), robust (Cauchy weights).
    """
    phi, gap = polar_of(ball.motion, side, fine.x_px + origin_px[0], fine.y_px + origin_px[1])
    (ex, ey), (tx, ty) = side_axes(ball.flight_deg, side, phi)
    u_t = fine.dx_px * tx + fine.dy_px * ty
    u_r = fine.dx_px * ex + fine.dy_px * ey
    speed = ball.stream
    ok = (
        (fine.valid | fine.replaced) & np.isfinite(u_t) & (gap >= gap_px[0]) & (gap <= gap_px[1])
        & (phi > phi_deg[0] - 10.0) & (phi < phi_deg[1] + 15.0) & (u_t > 0.6 * speed)
    )
    if ok.sum() < 30:
        return None
    r = ball.radius_px
    coef_t = _robust_lstsq(OuterStream._basis(phi[ok], gap[ok], r, True), u_t[ok])
    coef_r = _robust_lstsq(OuterStream._basis(phi[ok], gap[ok], r, False), u_r[ok])
    near = ok & (gap <= NEAR_WALL_STREAM_PX)
    covered = tuple(np.percentile(phi[near], [2.0, 98.0])) if near.sum() >= 10 else (
        float(phi[ok].min()), float(phi[ok].max()))
    return OuterStream(coef_t, coef_r, r, covered)


#: Vectors within this gap (px) of the outline set the angles the stream fit is trusted over.
NEAR_WALL_STREAM_PX = 25.0


def _robust_lstsq(design: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Least squares with iterated Cauchy weights (scale from the median absolute residual)."""
    weight = np.ones_like(values)
    coef = np.zeros(design.shape[1])
    for _ in range(6):
        coef, *_ = np.linalg.lstsq(design * weight[:, None], values * weight, rcond=None)
        resid = values - design @ coef
        scale = 1.4826 * np.median(np.abs(resid)) + 1e-6
        weight = 1.0 / np.sqrt(1.0 + (resid / (2.0 * scale)) ** 2)
    return coef
