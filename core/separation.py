"""Proposed separation angles: fit each separated shear layer where it leaves the ball.

PIV cannot resolve the boundary layer (sub-mm), so separation is located the way the trade does
it (common practice): find the separated shear layer and carry it back to the ball's outline.
Near separation the layer runs within a few pixels of the outline, where correlation windows
that touch the mask smear it away, and a ridge traced further out and extrapolated is biased by
several degrees. So the layer is fitted to the particle images themselves, in the ball frame, in
a thin band along the outline (gaps ``BAND_GAP_PX`` outside it):

- the stream outside the layer comes from the fine PIV vectors clear of the wall (a smooth
  polar fit, tangential and radial components, the radial one vanishing at the wall);
- the layer leaves the outline at ``phi_s`` at the angle ``atan a`` from the tangent, and its
  heading then turns toward the wake's direction (measured first, from the field behind the
  ball), relaxing exponentially over an arc length ``L`` (``layer_gap_px``). A quadratic
  ``g(t) = R (a t + b t^2)`` is only the start of that curve: it cannot follow a shallow layer
  that turns back toward the axis, and made such layers come out several degrees late;
- across the layer the ball-frame motion changes from the stream to the near-still wake with a
  ``tanh`` profile of width ``w`` (the mixing-layer shape); upstream of ``phi_s`` the layer's
  tangent continues into the wall, so the flow next to the wall slows smoothly ahead of
  separation instead of switching off at ``phi_s``;
- frame A sampled at ``p - D/2 - u(p)/2`` must match frame B at ``p + D/2 + u(p)/2`` (``D`` the
  ball displacement, ``u`` the model's ball-frame displacement): a coarse search over
  ``(phi_s, a, L)`` and a least-squares refinement of all parameters.

Separated layers leave the wall at a shallow angle (about 5-15 deg, common practice) and are thin
near separation (a few px), and the data alone can hardly tell a steeper departure from a later
one, nor a wider layer from a later one. So ``a``, ``L`` and ``w`` carry priors: any departure
angle within 5-15 deg alike (no pull toward the middle of the range, which made shallow layers
come out late), ``ln(L / R) = 0 +- 0.7`` (a weak one) and ``ln(w / 1.5 px) = 0 +- 0.3``.

Angles follow the shot convention: from the plane through the ball centre normal to the flight,
positive rearward; *upper* is the side toward the top of the picture (core.geometry).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage
from scipy.optimize import least_squares

from core.geometry import flight_unit, side_normal
from core.results import SeparationResult, SideProposal, VectorField

#: Band along the outline where the layer is fitted: gaps (px) outside the outline.
BAND_GAP_PX = (1.0, 12.0)
#: Angles (deg, separation convention) searched for the separation point.
SEARCH_DEG = (-40.0, 62.0)
#: Band extent beyond the search range (deg): some attached flow ahead, some wake behind.
BAND_DEG = (-50.0, 80.0)
#: Prior on the layer's departure angle from the tangent (deg): any angle in this range is
#: equally likely (separated layers leave at about 5-15 deg: common practice); outside it the
#: penalty grows as (distance of ``a = tan angle`` from the range) / ``PRIOR_SLOPE_WALL``. A
#: prior peaked inside the range (e.g. ``tan 10 deg +- 0.05``) pulls shallow layers steeper, and
#: a steeper layer is fitted by a later separation point: 5-7 deg layers came out up to 2.8 deg
#: late on synthetic sweeps.
PRIOR_LEAVE_DEG = (5.0, 15.0)
PRIOR_SLOPE_WALL = 0.02
#: Prior on the layer's turning length over the radius, ``L / R``: median and standard deviation
#: of ``ln(L / R)`` (a weak one).
PRIOR_RELAX = (1.0, 0.7)
#: Prior on the half-width ``w`` of the layer's tanh profile: median (px) and standard deviation
#: of ``ln w``. Near separation the layer is thin, a few px (common practice). Left free, the
#: fitted width grows (the particle images' own size widens the apparent profile), and in the fit
#: a wider layer trades against a later separation point: on synthetic sweeps (1.5 px layers) the
#: free width averaged 1.7-1.8 px and the angles came out ~0.25 deg later than with the width
#: held at the truth. A wider true layer still gains: with 3 px layers (6 shots) the mean error
#: was +0.43 deg with this prior and +0.60 deg without it, and a 14-shot sweep of 2.5 px layers
#: gave median 0.49 deg, max 1.14 deg. Layers thinner than the particle images are beyond the
#: method with or without this prior: 1 px layers gave median 0.9 deg, max 3.8 deg on a sweep.
#: The median is in px and equals the synthetic sweeps' layer; a prior in mm from the shot's
#: scale would be the physical form.
PRIOR_WIDTH = (1.5, 0.3)
#: Refinements run from this many starting points of the coarse search (the best wins): the
#: image-matching cost has several shallow minima along the outline.
REFINE_STARTS = 2
#: Neighbouring image samples are correlated (particle images span several samples): the
#: residual variance is scaled by this many samples per independent one.
SAMPLES_PER_INDEPENDENT = 10.0
#: Uncertainty floor, as an arc length along the outline (px): the scatter of the fitted
#: separation point about the truth on synthetic shots (core.synth_shot sweeps) that the fit's own
#: standard error does not capture (particle noise next to the wall, the layer's shape beyond the
#: model, the fitted circle's own error). The fit resolves the separation point to a distance
#: along the outline, so the floor in degrees shrinks as the ball grows in the picture.
#: Calibrated on four 14-shot sweeps at radius 200 px (112 sides, seeds 7, 11, 13 and 17 of the
#: test's recipe): 7 px (2.0 deg) covers 98 %, at least 96 % of each sweep.
MODEL_FLOOR_ARC_PX = 7.0
#: A proposal needs the layered model to beat the attached-flow model by this fraction of the
#: residual, and a separation point at least this far ahead of the band's rear end (deg).
MIN_IMPROVEMENT = 0.02
REAR_MARGIN_DEG = 18.0
#: Share of the band that must lie inside the image for a proposal.
MIN_INSIDE_FRACTION = 0.9
#: Wake state threshold (deg): sides differ when |upper - lower| exceeds the larger of this and
#: the combined uncertainty.
STATE_THRESHOLD_DEG = 5.0


@dataclass
class BallFrame:
    """The ball at mid-exposure and its motion (image coordinates, px)."""

    center_px: tuple[float, float]
    radius_px: float
    displacement_px: tuple[float, float]  # ball centre B - A
    flight_deg: float
    stream_px: float | None = None  # air speed past the ball, px per pair (None: |displacement|)

    @property
    def stream(self) -> float:
        """Speed of the air relative to the ball far from it (px per frame pair)."""
        if self.stream_px is not None:
            return float(self.stream_px)
        return math.hypot(*self.displacement_px)


def propose_separation(
    frame_a: np.ndarray,
    frame_b: np.ndarray,
    ball: BallFrame,
    fine: VectorField,
    fine_origin_px: tuple[float, float],
    lab_field: VectorField,
) -> SeparationResult:
    """Separation proposal on both sides, wake deflection and wake state of one shot.

    Parameters
    ----------
    frame_a, frame_b : (H, W) ndarray
        The frame pair (lab frame, as recorded).
    ball : BallFrame
        Ball circle at mid-exposure, its displacement and the flight direction.
    fine : VectorField
        Fine correlation around the ball *in the ball frame* (the ball at rest), positions
        relative to ``fine_origin_px``.
    fine_origin_px : (float, float)
        Image position (x, y) of the fine field's origin.
    lab_field : VectorField, optional
        The whole-frame field (lab frame, image coordinates): it reaches further behind the ball
        for the wake's direction; without it the fine field is used.

    Returns
    -------
    SeparationResult
    """
    # a held ball (tunnel): the lab frame is the ball frame
    moving = math.hypot(*ball.displacement_px) >= 0.5 * ball.stream
    deflection = wake_deflection(lab_field, (0.0, 0.0), ball, lab_frame=moving)
    # each layer turns toward the wake's direction (on the lower side it points away from it)
    toward = 0.0 if deflection is None else deflection
    sides = {side: fit_side(frame_a, frame_b, ball, fine, fine_origin_px, side,
                            final_deg=toward if side == "upper" else -toward)
             for side in ("upper", "lower")}
    if sides["upper"].angle_deg is None and sides["lower"].angle_deg is None:
        deflection = None
    state = wake_state(sides["upper"], sides["lower"])
    return SeparationResult(sides["upper"], sides["lower"], deflection, state)


# --- geometry of one side ------------------------------------------------------------------------


def _side_axes(ball: BallFrame, side: str, phi_deg: np.ndarray):
    """Outward radial and rearward tangential unit vectors (image coordinates) at angles phi."""
    fx, fy = flight_unit(ball.flight_deg)
    nx, ny = side_normal(ball.flight_deg, side)
    t = np.radians(phi_deg)
    ex, ey = np.cos(t) * nx - np.sin(t) * fx, np.cos(t) * ny - np.sin(t) * fy
    tx, ty = -np.sin(t) * nx - np.cos(t) * fx, -np.sin(t) * ny - np.cos(t) * fy
    return (ex, ey), (tx, ty)


def _polar(ball: BallFrame, side: str, x_px: np.ndarray, y_px: np.ndarray):
    """Separation-convention angle (deg) and gap outside the outline (px) of image points."""
    fx, fy = flight_unit(ball.flight_deg)
    nx, ny = side_normal(ball.flight_deg, side)
    rx, ry = x_px - ball.center_px[0], y_px - ball.center_px[1]
    phi = np.degrees(np.arctan2(-(rx * fx + ry * fy), rx * nx + ry * ny))
    return phi, np.hypot(rx, ry) - ball.radius_px


# --- the stream outside the layer, from the fine PIV ------------------------------------------


@dataclass
class OuterStream:
    """Smooth fit of the ball-frame stream next to one side: ``u_t``, ``u_r`` (px per pair)."""

    coef_t: np.ndarray
    coef_r: np.ndarray
    radius_px: float

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
        return self._basis(phi_deg, gap_px, self.radius_px, True) @ self.coef_t

    def radial(self, phi_deg, gap_px) -> np.ndarray:
        """Radial component, zero at the wall (no flow through it)."""
        return self._basis(phi_deg, gap_px, self.radius_px, False) @ self.coef_r


def outer_stream(
    fine: VectorField, origin_px, ball: BallFrame, side: str, *, gap_px=(6.0, 40.0)
) -> OuterStream | None:
    """Fit the stream beside the ball from fine PIV vectors clear of the wall and of the wake.

    Vectors count when valid, ``gap_px`` outside the outline, and moving rearward faster than
    0.6 of the ball's speed relative to the air (the wake and the layer are left out). The fit is
    a low-order polar polynomial (cubic in angle, quadratic in gap), robust (Cauchy weights).
    """
    phi, gap = _polar(ball, side, fine.x_px + origin_px[0], fine.y_px + origin_px[1])
    (ex, ey), (tx, ty) = _side_axes(ball, side, phi)
    u_t = fine.dx_px * tx + fine.dy_px * ty
    u_r = fine.dx_px * ex + fine.dy_px * ey
    speed = ball.stream
    ok = (
        (fine.valid | fine.replaced) & np.isfinite(u_t) & (gap >= gap_px[0]) & (gap <= gap_px[1])
        & (phi > BAND_DEG[0] - 10.0) & (phi < BAND_DEG[1] + 15.0) & (u_t > 0.6 * speed)
    )
    if ok.sum() < 30:
        return None
    r = ball.radius_px
    coef_t = _robust_lstsq(OuterStream._basis(phi[ok], gap[ok], r, True), u_t[ok])
    coef_r = _robust_lstsq(OuterStream._basis(phi[ok], gap[ok], r, False), u_r[ok])
    return OuterStream(coef_t, coef_r, r)


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


# --- the band of particle images next to the ball --------------------------------------------


class NearWallBand:
    """Samples of both frames on a polar grid along one side of the ball (ball frame).

    ``residual(u_t, u_r)`` compares frame A at ``p - D/2 - u/2`` with frame B at
    ``p + D/2 + u/2`` for every sample ``p`` (cubic splines of the frames); the
    tangential motion is applied as a rotation about the ball centre (flow along the outline).
    """

    def __init__(self, frame_a, frame_b, ball: BallFrame, side: str, *,
                 phi_deg=BAND_DEG, gap_px=BAND_GAP_PX, arc_step_px=1.0, gap_step_px=0.5):
        self.ball = ball
        self.side = side
        r = ball.radius_px
        step_deg = math.degrees(arc_step_px / r)
        phi = np.arange(phi_deg[0], phi_deg[1] + step_deg / 2, step_deg)
        gap = np.arange(gap_px[0], gap_px[1] + gap_step_px / 2, gap_step_px)
        grid_phi, grid_gap = np.meshgrid(phi, gap, indexing="ij")
        self.phi_grid = phi
        self.gap_count = gap.size
        self.phi = grid_phi.ravel()
        self.gap = grid_gap.ravel()
        (ex, ey), (tx, ty) = _side_axes(ball, side, self.phi)
        self._e = (ex, ey)
        self._t = (tx, ty)
        x, y = ball.center_px[0] + (r + self.gap) * ex, ball.center_px[1] + (r + self.gap) * ey
        height, width = frame_a.shape
        self.inside_fraction = float(np.mean((x >= 0) & (y >= 0) & (x <= width - 1)
                                             & (y <= height - 1)))
        # the model samples the frames half the air's displacement either side of the band: size
        # the crop by the faster of the ball and the air (a held ball does not move at all)
        reach = 3.0 * max(math.hypot(*ball.displacement_px), ball.stream) + 10.0
        self.y0 = max(0, int(y.min() - reach))
        self.x0 = max(0, int(x.min() - reach))
        y1 = min(height, int(y.max() + reach) + 1)
        x1 = min(width, int(x.max() + reach) + 1)
        crop_a = np.asarray(frame_a[self.y0:y1, self.x0:x1], dtype=np.float64)
        crop_b = np.asarray(frame_b[self.y0:y1, self.x0:x1], dtype=np.float64)
        self.scale = float(np.std(crop_a)) + 1e-9
        self.coeff_a = ndimage.spline_filter(crop_a, order=3)
        self.coeff_b = ndimage.spline_filter(crop_b, order=3)

    def _positions(self, turn_rad, rho):
        """Image positions of the samples turned by ``turn_rad`` about the ball centre, at radius
        ``rho``; the turn is small (half a frame pair's motion), so cos/sin are series."""
        t2 = turn_rad * turn_rad
        cos_t = 1.0 - t2 / 2.0 + t2 * t2 / 24.0
        sin_t = turn_rad * (1.0 - t2 / 6.0 + t2 * t2 / 120.0)
        (ex, ey), (tx, ty) = self._e, self._t
        x = self.ball.center_px[0] + rho * (ex * cos_t + tx * sin_t)
        y = self.ball.center_px[1] + rho * (ey * cos_t + ty * sin_t)
        return x, y

    def residual(self, u_t: np.ndarray, u_r: np.ndarray) -> np.ndarray:
        """Normalised difference of the two frames under ball-frame motion ``(u_t, u_r)`` (px)."""
        rho = self.ball.radius_px + self.gap
        half_turn = 0.5 * u_t / rho
        dx, dy = self.ball.displacement_px
        xa, ya = self._positions(-half_turn, rho - 0.5 * u_r)
        xb, yb = self._positions(half_turn, rho + 0.5 * u_r)
        a = ndimage.map_coordinates(
            self.coeff_a, [ya - 0.5 * dy - self.y0, xa - 0.5 * dx - self.x0], order=3,
            prefilter=False, mode="nearest",
        )
        b = ndimage.map_coordinates(
            self.coeff_b, [yb + 0.5 * dy - self.y0, xb + 0.5 * dx - self.x0], order=3,
            prefilter=False, mode="nearest",
        )
        return (a - b) / self.scale


# --- the layer model and its fit -------------------------------------------------------------


def layer_gap_px(radius_px: float, phi_s_deg: float, slope: float, relax_px: float, phi_deg,
                 final_deg: float = 0.0):
    """Distance (px) of the layer from the outline at angles ``phi_deg`` (separation convention).

    The layer leaves the outline at ``phi_s_deg`` at ``atan(slope)`` from the tangent; its heading
    then relaxes exponentially, over the arc length ``relax_px``, toward ``final_deg`` (the wake
    direction on this side, from the rearward axis, positive away from the axis toward the side).
    Upstream of ``phi_s_deg`` the layer's tangent continues into the wall (negative distance), so
    the flow next to the wall slows smoothly as the separation point nears.

    Parameters
    ----------
    radius_px, phi_s_deg, slope, relax_px, final_deg : float
    phi_deg : (N,) ndarray
        Angles (deg) where the distance is wanted.

    Returns
    -------
    (N,) ndarray
        Distance outside the outline (px).
    """
    phi = np.asarray(phi_deg, dtype=np.float64)
    th = math.radians(phi_s_deg)
    psi0 = -th + math.atan(slope)
    psi_f = math.radians(final_deg)
    s = np.linspace(0.0, 3.0 * radius_px, 241)
    # heading integrated in closed form: psi(s) = psi_f + (psi0 - psi_f) exp(-s / L)
    psi = psi_f + (psi0 - psi_f) * np.exp(-s / max(relax_px, 1e-6))
    ds = s[1] - s[0]
    step_xi, step_zeta = np.cos(psi), np.sin(psi)
    xi = radius_px * math.sin(th) + np.concatenate(
        [[0.0], np.cumsum(0.5 * (step_xi[1:] + step_xi[:-1]) * ds)])
    zeta = radius_px * math.cos(th) + np.concatenate(
        [[0.0], np.cumsum(0.5 * (step_zeta[1:] + step_zeta[:-1]) * ds)])
    curve_phi = np.maximum.accumulate(np.degrees(np.arctan2(xi, zeta)))
    curve_gap = np.hypot(xi, zeta) - radius_px
    ahead = np.interp(phi, curve_phi, curve_gap)
    back = radius_px * slope * np.radians(phi - phi_s_deg)
    return np.where(phi >= phi_s_deg, ahead, back)


def _model(band: NearWallBand, params, u_t, u_r, final_deg=0.0):
    """Ball-frame motion of the layered model; ``params = (phi_s, a, L/R, w, u_wake, k_t, k_r)``."""
    phi_s, slope, relax, width, u_wake, k_t, k_r = params
    r = band.ball.radius_px
    g_layer = layer_gap_px(r, phi_s, slope, relax * r, band.phi_grid, final_deg)
    g_layer = np.repeat(g_layer, band.gap_count)
    stream = 0.5 * (1.0 + np.tanh((band.gap - g_layer) / max(width, 0.3)))
    return u_wake + (k_t * u_t - u_wake) * stream, k_r * u_r * stream


def fit_side(frame_a, frame_b, ball: BallFrame, fine: VectorField, origin_px, side: str, *,
             final_deg: float = 0.0) -> SideProposal:
    """Fit the shear layer on one side; an empty proposal with the reason when there is none.

    ``final_deg`` is the direction the layer turns to (the wake's, from the rearward axis,
    positive toward this side).
    """
    outer = outer_stream(fine, origin_px, ball, side)
    if outer is None:
        return SideProposal(None, None, 0.0, "too few valid vectors beside the ball to model the "
                            "stream there")
    band = NearWallBand(frame_a, frame_b, ball, side)
    if band.inside_fraction < MIN_INSIDE_FRACTION:
        return SideProposal(None, None, 0.0, "the image edge cuts the band next to the ball on "
                            "this side")
    u_t = outer.tangential(band.phi, band.gap)
    u_r = outer.radial(band.phi, band.gap)
    attached = band.residual(u_t, u_r)
    attached_cost = float(np.sum(attached**2))
    # residual scale: neighbouring samples are correlated, so one independent value per
    # SAMPLES_PER_INDEPENDENT samples
    sigma2 = attached_cost / attached.size * SAMPLES_PER_INDEPENDENT + 1e-24
    starts, start_cost = _coarse_search(band, u_t, u_r, final_deg, sigma2)
    if not start_cost < (1.0 - MIN_IMPROVEMENT) * attached_cost:
        return SideProposal(None, None, 0.0, "no separated shear layer next to the ball "
                            "(the attached-flow model fits as well: attached flow?)")
    fits = [_refine(band, u_t, u_r, start, final_deg, math.sqrt(sigma2)) for start in starts]
    params, spread, _ = min(fits, key=lambda fit: fit[2])
    phi_s = float(params[0])
    if phi_s > BAND_DEG[1] - REAR_MARGIN_DEG:
        return SideProposal(None, None, 0.0, "no separation ahead of the rear of the ball "
                            "(attached flow?)")
    uncertainty = math.hypot(spread, model_floor_deg(ball.radius_px))
    gain = 1.0 - start_cost / attached_cost
    quality = float(np.clip(gain / 0.2, 0.0, 1.0) * np.clip(2.0 / max(spread, 1e-3), 0.0, 1.0))
    remark = ""
    if math.degrees(math.atan(params[1])) > 25.0:
        remark = "the layer leaves unusually steeply: check the proposal"
    return SideProposal(round(phi_s, 2), round(uncertainty, 2), round(quality, 3), remark)


def model_floor_deg(radius_px: float) -> float:
    """Uncertainty floor (deg) for a ball of ``radius_px``: ``MODEL_FLOOR_ARC_PX`` along the outline."""
    return math.degrees(MODEL_FLOOR_ARC_PX / radius_px)


def _prior_terms(params) -> np.ndarray:
    """Prior residuals of the slope ``a``, ``L/R`` and the width ``w`` (squares add to the cost).

    Parameters
    ----------
    params : sequence of 7 float
        ``(phi_s, a, L/R, w, u_wake, k_t, k_r)``.

    Returns
    -------
    (3,) ndarray
        Dimensionless residuals: zero for a slope inside ``PRIOR_LEAVE_DEG``.
    """
    slope = params[1]
    lo, hi = (math.tan(math.radians(v)) for v in PRIOR_LEAVE_DEG)
    return np.array([
        (max(0.0, lo - slope) + max(0.0, slope - hi)) / PRIOR_SLOPE_WALL,
        math.log(params[2] / PRIOR_RELAX[0]) / PRIOR_RELAX[1],
        math.log(params[3] / PRIOR_WIDTH[0]) / PRIOR_WIDTH[1],
    ])


def _prior_penalty(params) -> float:
    """Sum of the squared prior terms (:func:`_prior_terms`)."""
    return float(np.sum(_prior_terms(params) ** 2))


def _coarse_search(band: NearWallBand, u_t, u_r, final_deg, sigma2: float):
    """Starting points for the refinement, best first, and the best data cost.

    ``phi_s`` on a 2 deg grid with the prior's layer; then ``(phi_s, a, L)`` on a 1 deg grid
    around the best (5 slopes, 3 lengths), scored by data cost over ``sigma2`` plus the priors;
    the best of each ``phi_s`` cell, keeping ``REFINE_STARTS`` starts at least 3 deg apart.
    """
    def cost(params):
        return float(np.sum(band.residual(*_model(band, params, u_t, u_r, final_deg)) ** 2))

    mid_slope = math.tan(math.radians(0.5 * (PRIOR_LEAVE_DEG[0] + PRIOR_LEAVE_DEG[1])))
    best = (np.inf, None)
    for phi_s in np.arange(SEARCH_DEG[0], SEARCH_DEG[1] + 1.0, 2.0):
        params = [phi_s, mid_slope, PRIOR_RELAX[0], PRIOR_WIDTH[0], 0.0, 1.0, 1.0]
        c = cost(params)
        if c < best[0]:
            best = (c, params)
    data_best = best[0]
    scored = []
    for phi_s in np.arange(best[1][0] - 4.0, best[1][0] + 4.5, 1.0):
        for angle in (5.0, 7.5, 10.0, 12.5, 15.0):
            for relax in (0.5, 1.0, 2.0):
                params = [phi_s, math.tan(math.radians(angle)), relax, PRIOR_WIDTH[0], 0.0, 1.0,
                          1.0]
                c = cost(params)
                data_best = min(data_best, c)
                scored.append((c / sigma2 + _prior_penalty(params), params))
    scored.sort(key=lambda item: item[0])
    starts = []
    for _, params in scored:
        if all(abs(params[0] - other[0]) >= 3.0 for other in starts):
            starts.append(params)
        if len(starts) == REFINE_STARTS:
            break
    return starts, data_best


#: Typical step of each parameter ``(phi_s deg, a, L/R, w px, u_wake px, k_t, k_r)`` for the
#: refinement's trust region: a degree of angle is not comparable with a unit of slope.
REFINE_SCALE = np.array([1.0, 0.05, 0.3, 0.5, 0.2, 0.02, 0.1])


def _refine(band: NearWallBand, u_t, u_r, start, final_deg, sigma: float):
    """Least-squares refinement with the priors (``sigma``: the residuals' scale).

    Returns the parameters, the angle's standard deviation (deg) and the final cost.
    """

    def residuals(p):
        r = band.residual(*_model(band, p, u_t, u_r, final_deg)) / sigma
        return np.concatenate([r, _prior_terms(p)])

    lower = [start[0] - 8.0, 0.0, 0.15, 0.3, -3.0, 0.7, 0.0]
    upper = [start[0] + 8.0, 0.7, 6.0, 5.0, 3.0, 1.3, 2.0]
    sol = least_squares(
        residuals, start, bounds=(lower, upper), diff_step=1e-3, max_nfev=40, xtol=1e-4,
        tr_solver="lsmr", ftol=1e-4, x_scale=REFINE_SCALE,
    )
    cov = np.linalg.pinv(sol.jac.T @ sol.jac)
    return sol.x, float(math.sqrt(max(cov[0, 0], 0.0))), float(sol.cost)


# --- wake ------------------------------------------------------------------------------------


def wake_deflection(
    field: VectorField, origin_px, ball: BallFrame, *, lab_frame: bool = False,
    reach=(1.2, 4.0),
) -> float | None:
    """Direction of the wake centreline relative to the rearward axis (deg, + toward upper).

    Behind the ball (``reach`` radii from its centre along the axis, within 1.5 radii of it)
    the wake is the air that keeps up with the ball: weight ``1 - |u|/U`` in the ball frame, or
    the lab-frame motion along the flight over the ball's, ``u . D / |D|^2`` (clipped to 0..1).
    The centreline is the straight line fitted to the vectors' positions with those weights
    (weighted least squares of the cross-axis position on the along-axis one).
    """
    fx, fy = flight_unit(ball.flight_deg)
    nx, ny = side_normal(ball.flight_deg, "upper")
    rx = field.x_px + origin_px[0] - ball.center_px[0]
    ry = field.y_px + origin_px[1] - ball.center_px[1]
    xi = -(rx * fx + ry * fy)
    eta = rx * nx + ry * ny
    dx, dy = ball.displacement_px
    speed2 = max(dx * dx + dy * dy, 1e-12)
    stream = max(ball.stream, 1e-9)
    r = ball.radius_px
    usable = (field.valid | field.replaced) & np.isfinite(field.dx_px) & np.isfinite(field.dy_px)
    region = usable & (xi >= reach[0] * r) & (xi <= reach[1] * r) & (np.abs(eta) < 1.5 * r)
    u, v = np.where(region, field.dx_px, 0.0), np.where(region, field.dy_px, 0.0)
    if lab_frame:
        follow = (u * dx + v * dy) / speed2
    else:
        follow = 1.0 - np.hypot(u, v) / stream
    weight = np.where(region, np.clip(follow, 0.0, 1.0), 0.0)
    if weight.sum() < 5.0 or np.ptp(xi[weight > 0]) < 0.5 * r:
        return None
    mean_xi = np.sum(weight * xi) / weight.sum()
    mean_eta = np.sum(weight * eta) / weight.sum()
    slope = np.sum(weight * (xi - mean_xi) * (eta - mean_eta)) / np.sum(weight * (xi - mean_xi) ** 2)
    return round(math.degrees(math.atan(slope)), 2)


def wake_state(upper: SideProposal, lower: SideProposal) -> str:
    """Our label for the shot: which side holds on longer, if the difference is clear.

    "symmetric" when ``|upper - lower| <= max(STATE_THRESHOLD_DEG, combined uncertainty)``,
    else "upper side holds on longer" / "lower side holds on longer" (the side with the larger,
    i.e. later, separation angle); "undetermined" without both proposals.
    """
    if upper.angle_deg is None or lower.angle_deg is None:
        return "undetermined"
    combined = math.hypot(upper.uncertainty_deg or 0.0, lower.uncertainty_deg or 0.0)
    diff = upper.angle_deg - lower.angle_deg
    if abs(diff) <= max(STATE_THRESHOLD_DEG, combined):
        return "symmetric"
    return "upper side holds on longer" if diff > 0 else "lower side holds on longer"
