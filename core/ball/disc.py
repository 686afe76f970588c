"""The ball as the disc without particle images: a quantile circle of particle-image centres.

Particle centres are spread evenly outside the ball and absent inside, so around the outline
their distance from the centre has a low quantile just outside the radius. Beside a laser
shadow the band follows the shadow's two edges behind the ball, which are tangent to the
outline. Also the record every outline cue returns (:class:`FittedCircle`) and the share of
the outline its points cover (:func:`arc_share`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage
from scipy.optimize import linprog

from core import WakelineError
from core.ball.constants import (
    HOLE_BOOTSTRAP,
    HOLE_POINTS,
    HOLE_SHARE,
    SHADOW_MARGIN_DEG,
    SHADOW_SHARE,
)


@dataclass
class FittedCircle:
    """A circle fitted to one outline cue: centre and radius (px), their covariance, the
    residual and the share of the outline its points cover."""

    center: tuple[float, float]
    radius: float
    covariance: np.ndarray  # (3, 3): x, y, r (px^2)
    residual: float
    arc_share: float


def arc_share(theta: np.ndarray, seen: float) -> float:
    """Share of the whole outline covered by points (5 deg sectors holding one), at most
    ``seen``."""
    sectors = np.unique(np.floor(np.mod(theta, 2 * math.pi) / math.radians(5.0)).astype(int))
    return float(min(seen, sectors.size / 72.0))


def _particle_centres(crop: np.ndarray, quiet: np.ndarray, glare: np.ndarray):
    """Sub-pixel centres (x, y) of particle images: local maxima standing clear above their
    surroundings on all sides but one (an edge or a rim line does not), by more than six times
    the smoothed noise inside the ball (``quiet``: pixels known to hold no particle; its median
    absolute deviation, which a seam or a shaded surface hardly moves)."""
    smooth = ndimage.gaussian_filter(crop, 0.6)
    quiet = quiet & ~glare
    sample = smooth[quiet] if np.count_nonzero(quiet) > 50 else smooth.ravel()
    noise = 1.4826 * float(np.median(np.abs(sample - np.median(sample))))
    peak = smooth == ndimage.maximum_filter(smooth, 3)
    peak[:3] = peak[-3:] = False
    peak[:, :3] = peak[:, -3:] = False
    peak &= ~glare
    ys, xs = np.nonzero(peak)
    offsets = ((3, 0), (-3, 0), (0, 3), (0, -3), (2, 2), (2, -2), (-2, 2), (-2, -2))
    ring = np.stack([smooth[ys + dy, xs + dx] for dy, dx in offsets], axis=1)
    ring.sort(axis=1)
    keep = smooth[ys, xs] - ring[:, -2] > 6.0 * max(noise, 1e-6)
    ys, xs = ys[keep], xs[keep]
    c = smooth[ys, xs]
    ox = _parabola(smooth[ys, xs - 1], c, smooth[ys, xs + 1])
    oy = _parabola(smooth[ys - 1, xs], c, smooth[ys + 1, xs])
    return xs + ox, ys + oy


def _parabola(left, centre, right):
    denom = left + right - 2.0 * centre
    offset = np.where(denom < 0, 0.5 * (left - right) / np.where(denom < 0, denom, -1.0), 0.0)
    return np.clip(offset, -0.5, 0.5)


def _quantile_fit(design, distance, tau):
    """Coefficients minimising the quantile loss of ``distance - design @ b``, or None when the
    linear programme fails.

    Solved as its dual, ``max distance' a`` subject to ``design' a = (1 - tau) design' 1`` and
    ``0 <= a <= 1``, whose equality constraints' multipliers are the coefficients: a few
    constraints on bounded variables instead of one constraint per particle image (the same
    solution, a third of the time).
    """
    res = linprog(-distance, A_eq=design.T, b_eq=(1.0 - tau) * design.sum(axis=0),
                  bounds=(0.0, 1.0), method="highs")
    return -np.asarray(res.eqlin.marginals, dtype=np.float64) if res.success else None


def _shadow_axis(dx: np.ndarray, dy: np.ndarray, outside_px: float) -> float | None:
    """Direction (rad, image axes) toward the light when the particle images (at ``dx, dy`` from
    the centre) beyond ``outside_px`` in the darkest 60 deg of directions number under
    ``SHADOW_SHARE`` of their median count over the circle: the ball's laser shadow (or the
    picture's edge, or glare) then lies the other way. None when no direction is that dark."""
    rho = np.hypot(dx, dy)
    outside = rho > outside_px
    sector = np.floor(np.degrees(np.arctan2(dy[outside], dx[outside])) % 360.0 / 10.0)
    counts = np.bincount(sector.astype(np.int64), minlength=36)[:36].astype(np.float64)
    running = np.concatenate([[0.0], np.cumsum(np.concatenate([counts, counts[:5]]))])
    window = running[6:42] - running[:36]  # from each sector 60 deg on
    darkest = int(np.argmin(window))
    if not window[darkest] < SHADOW_SHARE * 6.0 * float(np.median(counts)):
        return None
    return math.radians(10.0 * darkest + 30.0) + math.pi  # opposite the darkest 60 deg


@dataclass
class _Outline:
    """Particle images near the particle-free region's outline, each with the outward normal of
    the piece of outline it lies beside: the ball's circle, or an edge of its laser shadow."""

    px: np.ndarray
    py: np.ndarray
    normal_x: np.ndarray
    normal_y: np.ndarray
    along: np.ndarray  # (N, 2): distance behind the ball along each shadow edge (0 elsewhere)
    axis: float | None = None  # direction toward the light (rad, image axes) beside a shadow

    def design(self, cx, cy):
        """The distances from ``(cx, cy)`` along the normals, and the quantile fit's design:
        a shift of the centre, the offset, and (beside a shadow) each edge's turn."""
        distance = (self.px - cx) * self.normal_x + (self.py - cy) * self.normal_y
        columns = [self.normal_x, self.normal_y, np.ones(self.px.size)]
        columns += [self.along[:, k] for k in range(2) if np.count_nonzero(self.along[:, k]) >= 5]
        return distance, np.column_stack(columns)

    def subset(self, pick):
        return _Outline(self.px[pick], self.py[pick], self.normal_x[pick], self.normal_y[pick],
                        self.along[pick], self.axis)


def _around_outline(px, py, cx, cy, r, inner_px, reach, axis=None) -> _Outline:
    """The particle images within ``inner_px`` inside and ``reach`` from the centre of the
    particle-free region's outline: the ball's circle, and beside a laser shadow the shadow's
    two edges.

    A sheet the ball blocks leaves a strip without lit particles behind it, bounded by the rays
    that graze the ball: straight lines tangent to its outline, a ball's width apart. Along the
    lit half the particle images outline the circle; behind it they outline those two tangents
    (along a direction from the centre into that half the first lit particle images lie beyond
    the strip's edge, not beyond the circle: a dark ball without a lit rim, fitted to all of
    them as to a circle, came out up to 4 px toward its shadow). The tangents hold the circle's
    width across the shadow: the lit half alone fixes the radius and the centre's distance from
    the light only together (a shift toward the light with a smaller radius keeps the lit arc
    nearly in place), and sparse seeding left both up to 2 px out. Each edge may turn a little
    (a sheet diverging from its lens; the shadow's direction known to a 10 deg sector); the
    edges are used for a ball's radius behind the centre, where they stay close to the
    tangents, and only where the strip between them is as dark as a shadow: a dark sector
    without such a strip (the picture's edge, glare) leaves the lit half alone, from
    ``SHADOW_MARGIN_DEG`` into it.
    """
    dx, dy = px - cx, py - cy
    rho = np.maximum(np.hypot(dx, dy), 1e-9)
    if axis is None:
        axis = _shadow_axis(dx, dy, r + inner_px)
    if axis is None:
        near = (rho > r - inner_px) & (rho < reach)
        return _Outline(px[near], py[near], (dx / rho)[near], (dy / rho)[near],
                        np.zeros((np.count_nonzero(near), 2)))
    lx, ly = math.cos(axis), math.sin(axis)
    toward = dx * lx + dy * ly
    across = -dx * ly + dy * lx
    disc = (toward >= 0) & (rho > r - inner_px) & (rho < reach)
    behind = (toward < 0) & (toward > -r)
    edge = behind & (np.abs(across) > r - inner_px) & (np.abs(across) < reach)
    if not _strip_is_dark(dx, dy, toward, across, r, inner_px, reach, axis):
        # no shadow strip behind the ball: the lit half only
        keep = (toward / rho > math.sin(math.radians(SHADOW_MARGIN_DEG))) & disc
        return _Outline(px[keep], py[keep], (dx / rho)[keep], (dy / rho)[keep],
                        np.zeros((np.count_nonzero(keep), 2)))
    side = np.sign(across)
    nx = np.where(disc, dx / rho, -side * ly)
    ny = np.where(disc, dy / rho, side * lx)
    along = np.zeros((px.size, 2))
    along[:, 0] = np.where(edge & (side > 0), -toward, 0.0)
    along[:, 1] = np.where(edge & (side < 0), -toward, 0.0)
    keep = disc | edge
    return _Outline(px[keep], py[keep], nx[keep], ny[keep], along[keep], axis)


#: Largest correction (rad) of the shadow's direction from its edges' turns: it is known to a
#: 10 deg sector (:func:`_shadow_axis`), so it is off by 5 deg at most; twice that allowed.
SECTOR_TURN_RAD = math.radians(10.0)


def _strip_is_dark(dx, dy, toward, across, r, inner_px, reach, axis) -> bool:
    """Whether the strip as wide as the ball just behind it (from ``inner_px`` past the outline
    to ``reach`` from the centre along the shadow's direction) holds under ``SHADOW_SHARE`` of
    the particle images per pixel that the air beside the ball's rear half holds (from
    ``inner_px`` outside the strip's edges to ``reach``): a laser shadow. Both regions are
    measured within the extent of the particle images given (the picture around the ball): a
    dark sector that is the picture's edge or glare has no dark strip in the picture."""
    inner, outer = r + inner_px, reach

    def regions(t, a):  # (strip behind the ball, air beside its rear half)
        return ((t < -inner) & (t > -outer) & (np.abs(a) < r - inner_px),
                (t < 0) & (t > -r) & (np.abs(a) > inner) & (np.abs(a) < outer))

    dark, lit = (np.count_nonzero(m) for m in regions(toward, across))
    # the two regions' areas inside the particle images' extent, on a 2 px grid
    gx, gy = np.meshgrid(np.arange(dx.min(), dx.max(), 2.0), np.arange(dy.min(), dy.max(), 2.0))
    lx, ly = math.cos(axis), math.sin(axis)
    dark_area, lit_area = (np.count_nonzero(m)
                           for m in regions(gx * lx + gy * ly, -gx * ly + gy * lx))
    if dark_area < (outer - inner) * (r - inner_px) / 4.0 or lit_area == 0:
        return False  # under half the strip (its grid points 4 px^2 each) lies in the picture
    return dark / dark_area < SHADOW_SHARE * lit / lit_area


def _outline_fit(px, py, cx, cy, r, inner_px, reach, axis, name):
    """The particle images around the outline (:func:`_around_outline`), evenly thinned to
    ``2 HOLE_POINTS`` (which leaves the quantile where it is), their distances along the
    outline's normals, the design, and the quantile fit."""
    points = _around_outline(px, py, cx, cy, r, inner_px, reach, axis)
    if points.px.size < 20:
        raise WakelineError(f"{name}: no ball found (too few particle images around the ball)")
    if points.px.size > 2 * HOLE_POINTS:
        pick = np.random.default_rng(12345).choice(points.px.size, 2 * HOLE_POINTS,
                                                   replace=False)
        points = points.subset(pick)
    distance, design = points.design(cx, cy)
    fit = _quantile_fit(design, distance, HOLE_SHARE)
    if fit is None:
        raise WakelineError(f"{name}: no ball found (the particle-free disc could not be fitted)")
    return points, distance, design, fit


def particle_free_disc(crop, glare, cx, cy, r, inner_px, name, bootstrap=False) -> FittedCircle:
    """The circle holding ``HOLE_SHARE`` of the particle images near it (quantile regression).

    Particle centres are spread evenly outside the ball and absent inside, so around the true
    circle their distance from the centre has its ``HOLE_SHARE`` quantile ``q`` at
    ``R + HOLE_SHARE (R_out - R)`` over a band reaching ``R_out`` (derived): the fit solves for
    that quantile (a linear programme) and steps back by the offset. Beside a laser shadow the
    band follows the shadow's edges behind the ball (:func:`_around_outline`).
    """
    yy, xx = np.ogrid[0 : crop.shape[0], 0 : crop.shape[1]]
    quiet = (xx - cx) ** 2 + (yy - cy) ** 2 < max(r - inner_px - 3.0, 0.3 * r) ** 2
    px, py = _particle_centres(crop, quiet, glare)
    rho = np.hypot(px - cx, py - cy)
    # the band outside holds about HOLE_POINTS particle images (wider on sparse seeding)
    probe = (rho > r + inner_px) & (rho < r + inner_px + 12.0)
    density = probe.sum() / (2.0 * math.pi * (r + inner_px + 6.0) * 12.0)
    outer = float(np.clip(HOLE_POINTS / max(density * 2.0 * math.pi * r, 1e-9), 6.0, 40.0))
    reach = r + inner_px + outer
    tau = HOLE_SHARE
    points, distance, design, fit = _outline_fit(px, py, cx, cy, r, inner_px, reach, None, name)
    if design.shape[1] == 5:  # the offset, the centre's shift and both edges' turns
        # the shadow's direction was known to a 10 deg sector: where it is off, the lit half and
        # the edges split at the wrong place (a point 10 deg past the split lies 1 px off the
        # outline it is given, on a ball of 64 px). The edges' turns say by how much: a shadow
        # turned by d turns the edge on the light's left by +d and the other by -d
        turn = float(np.clip(0.5 * (fit[4] - fit[3]), -SECTOR_TURN_RAD, SECTOR_TURN_RAD))
        axis = points.axis + turn
        points, distance, design, fit = _outline_fit(px, py, cx, cy, r, inner_px, reach, axis,
                                                     name)
    dx, dy, q = fit[:3]
    radius = (q - tau * reach) / (1.0 - tau)
    # covariance of a quantile regression: tau (1 - tau) / f^2 (X'X)^-1, f = 1 / (band beyond
    # the circle) the density of the even spread at the quantile (asymptotic; doubled for the
    # extreme quantile's skew); the intercept q carries to r scaled by 1 / (1 - tau)
    f = 1.0 / max(reach - radius, 1.0)
    try:
        cov = 2.0 * tau * (1.0 - tau) / (f * f) * np.linalg.inv(design.T @ design)[:3, :3]
    except np.linalg.LinAlgError:
        cov = np.full((3, 3), np.inf)
    cov[2, :] /= 1.0 - tau
    cov[:, 2] /= 1.0 - tau
    if bootstrap:
        # a few particle images decide an extreme quantile, and with part of the outline
        # unseen (a shadow) the solution can jump: the spread of refits on random halves of
        # the particle images (halved, as the variance of a fit to half the data is about
        # twice the whole's) says how far, where the asymptotic formula does not
        rng = np.random.default_rng(12345)
        refits = []
        for _ in range(HOLE_BOOTSTRAP):
            pick = rng.choice(distance.size, distance.size // 2, replace=False)
            again = _quantile_fit(design[pick], distance[pick], tau)
            if again is not None:
                refits.append((again[0], again[1], (again[2] - tau * reach) / (1.0 - tau)))
        if len(refits) >= HOLE_BOOTSTRAP // 2:
            spread = 0.5 * np.cov(np.array(refits).T)
            if np.trace(spread) > np.trace(cov):
                cov = spread
    residual = distance - design @ fit
    near = (np.abs(residual) < 3.0) & ~points.along.any(axis=1)  # on the circle, not an edge
    theta = np.arctan2(points.py - cy, points.px - cx)
    return FittedCircle((cx + dx, cy + dy), float(radius), cov, float("nan"),
                   arc_share(theta[near], 1.0))
