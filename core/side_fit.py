"""One side's fitting problem and its least-squares refinement.

:class:`SideProblem` holds what the fit of one side needs: the band of particle images beside
the ball (:mod:`core.near_wall`), the stream outside the layer, and the priors of the model of
:mod:`core.layer_model`, all in physical units. The data alone can hardly tell a steeper
departure from a later one, nor a thicker layer from a later one, so the model's shape
parameters carry them:

- the layer's vorticity thickness at separation: any from the laminar layer's ``delta_lam``
  to ``PRIOR_THICKER`` times it alike, thinner ones falling off as ``ln(delta / delta_lam)``
  over 0.7, thicker ones as its excess over ``ln PRIOR_THICKER`` over 0.7; ``delta_lam = 1.5 D /
  sqrt(Re)`` in px (the laminar layer scales as ``D / sqrt(Re)``; Thwaites' method with
  Mangler's transformation on the measured sphere distribution gives ``theta = 0.29 D /
  sqrt(Re)`` at separation, and Hartree's separating profile has a vorticity thickness of 4.73
  ``theta``: 1.37 derived, 1.5 in use, 9 % apart, see docs/references.md). Thicker layers are as likely as the laminar
  one: a turbulent layer is 2-3 times thicker at these Reynolds numbers, and the particle
  images smear a thin layer in the pictures;
- its spreading behind separation: any rate ``d delta / ds`` from none (the refinement keeps it
  at 0.02 or more) to ``0.22 (1 + r) / (1 - r)`` alike, faster ones falling off over ``0.04 (...)``: from a free layer still laminar over
  the band (it thickens as the square root of the distance) to a turbulent mixing layer between
  the stream and the reverse flow ``-r U`` (Brown & Roshko 1974, memory: 0.14-0.22 quoted). A
  prior centred on the turbulent rate (until 0.3.15) picked slowly spreading layers late
  beyond their uncertainty (docs/separation_accuracy.md);
- any departure angle within 0-25 deg alike (tangential included), any reverse flow within
  2-30 % of the stream alike, a weak prior on the turning length.

:func:`refine` is the least-squares refinement of a model from a start (scipy's trust-region
solver, with the model's own Jacobian). How the refinements
are combined into a proposal and its uncertainty: :mod:`core.separation`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from core.layer_model import PARAM_NAMES, SideGeometry, side_flow, side_flow_slopes
from core.near_wall import NearWallBand, OuterStream

#: The prior's spread of ``ln delta`` (the thickness at separation) outside the range it treats
#: alike: from the ball's laminar thickness (``core.separation.BallFrame.laminar_delta_px``) to
#: ``PRIOR_THICKER`` times it. A turbulent flat-plate layer is 2-3 times a laminar one's
#: thickness at ``Re_x`` of 1e5-3e5 (``0.37 x Re_x^-0.2`` against ``5 x Re_x^-0.5``, textbook
#: formulas, memory), and particle images of 2-3 px smear a layer of 1-2 px to about their size.
#: With the laminar thickness as the median (0.3.5 and before) the first family's layers of
#: 5-9 px were fitted at 0.7 of their thickness and picked a median 1.2 deg early.
PRIOR_LOG_DELTA_SD = 0.7
PRIOR_THICKER = 4.0
#: Mixing-layer spreading rate of the vorticity thickness for a stream over still air and its
#: spread (Brown & Roshko 1974, memory: 0.14-0.22 quoted): a turbulent free shear layer's.
SPREADING_RATE = (0.18, 0.04)
#: Spreading rates (times the stream's ratio ``(1 + r) / (1 - r)``) treated alike: from a
#: laminar free layer's, which hardly spreads over the band (its thickness grows as the square
#: root of the distance: a rate of ``O(Re_x^-1/2)``, about 0.01 here), to the top of the
#: turbulent range; beyond, the penalty grows over ``SPREADING_RATE[1]``. A layer that leaves a
#: ball laminar turns turbulent somewhere behind separation, so over the band it may spread at
#: any rate between the two. (The refinement's bounds keep the rate at 0.02 or more.)
PRIOR_SPREAD = (0.0, 0.22)
#: Departure angles (deg from the tangent) treated alike; beyond, the penalty grows as the
#: distance of ``tan angle`` from the range over ``PRIOR_WALL``.
PRIOR_LEAVE_DEG = (0.0, 25.0)
#: Reverse flow under the layer (fraction of the stream) treated alike.
PRIOR_REVERSE = (0.02, 0.30)
#: Drop of the attached layer's centre toward the wall ahead of separation, and its thinning,
#: treated alike within these ranges.
PRIOR_DROP = (0.0, 1.0)
PRIOR_THIN = (0.0, 0.7)
PRIOR_WALL = 0.02
#: Prior on the layer's turning length over the radius: median and sd of ``ln(L / R)``.
PRIOR_RELAX = (1.0, 0.7)
#: A refinement moves the angle at most this far (deg) from its start.
REFINE_REACH_DEG = 10.0
#: Typical step of each parameter (``PARAM_NAMES`` order) for the refinement's trust region.
REFINE_SCALE = np.array([1.0, 0.05, 0.3, 0.2, 0.03, 0.05, 0.1, 0.1, 0.2, 0.02, 0.1])
#: Band samples times models evaluated in one go by the coarse search (memory, not the answer).
BATCH_SAMPLES = 200_000
#: Neighbouring image samples are correlated (particle images span several samples): the
#: residual variance is scaled by this many samples per independent one.
SAMPLES_PER_INDEPENDENT = 10.0


@dataclass
class SideProblem:
    """Everything one side's fit needs: the band, the outer stream at its samples, the priors."""

    band: NearWallBand
    outer: OuterStream
    final_deg: float  # the wake's direction on this side
    log_delta_prior: float  # ln of the laminar thickness (px): where the thickness prior starts
    sigma: float = 1.0  # residual scale
    outward_growth: float = 1.0  # the layer's form: :class:`~core.layer_model.SideGeometry`

    def __post_init__(self):
        self.geom = SideGeometry(self.band.ball.radius_px, self.band.phi_grid,
                                 self.band.gap_grid, self.final_deg,
                                 outward_growth=self.outward_growth)
        self.u_t = self.outer.tangential(self.band.phi, self.band.gap)
        self.u_r = self.outer.radial(self.band.phi, self.band.gap)

    def view(self, phi_deg=None, *, every: int = 1) -> SideProblem:
        """The same problem on fewer samples (:meth:`NearWallBand.view`); the residual scale
        follows the decimation so that the data weigh the same against the priors."""
        return SideProblem(self.band.view(phi_deg, every=every), self.outer, self.final_deg,
                           self.log_delta_prior, self.sigma / every, self.outward_growth)

    def blurred(self, sigma_px: float) -> SideProblem:
        """The same problem on smoothed frames (:meth:`NearWallBand.blurred`), its residual
        scale from its own attached flow (:meth:`attached_scale`)."""
        other = SideProblem(self.band.blurred(sigma_px), self.outer, self.final_deg,
                            self.log_delta_prior, outward_growth=self.outward_growth)
        other.sigma = other.attached_scale()
        return other

    def with_growth(self, outward_growth: float) -> SideProblem:
        """The same problem under the other form of the layer (``outward_growth``)."""
        return SideProblem(self.band, self.outer, self.final_deg, self.log_delta_prior,
                           self.sigma, outward_growth)

    def attached_cost(self) -> float:
        """Data cost of attached flow: the outer stream down to the wall, no layer."""
        return float(np.sum(self.band.residual(self.u_t, self.u_r) ** 2))

    def attached_scale(self) -> float:
        """Residual scale from the attached flow's residuals: their root mean square times
        ``sqrt(SAMPLES_PER_INDEPENDENT)``."""
        attached = self.band.residual(self.u_t, self.u_r)
        return math.sqrt(np.sum(attached**2) / attached.size * SAMPLES_PER_INDEPENDENT) + 1e-12

    # The methods below take one model's parameters, (11,), or K models' as rows, (K, 11) (a
    # search's candidates), and then answer row by row; the slopes (jacobian, prior_slopes)
    # take one model's only.

    def flow(self, params, shape="erf", geom=None):
        return side_flow(geom or self.geom, params, self.u_t, self.u_r, shape)

    def data_cost(self, params, shape="erf", geom=None):
        """Sum of the squared residuals of the band (no ``sigma``): a float, or ``(K,)``."""
        table = np.asarray(params, dtype=np.float64)
        if table.ndim == 1:
            return float(np.sum(self.band.residual(*self.flow(table, shape, geom)) ** 2))
        # a few models at a time keep the (K, S) temporaries small
        rows = max(1, BATCH_SAMPLES // self.band.phi.size)
        return np.concatenate([
            np.sum(self.band.residual(*self.flow(table[i:i + rows], shape, geom)) ** 2, axis=-1)
            for i in range(0, len(table), rows)])

    def residuals(self, params, shape="erf", geom=None, log_delta_prior=None) -> np.ndarray:
        """What the fit squares and sums: the band's residuals over ``sigma``, then the priors'."""
        data = self.band.residual(*self.flow(params, shape, geom)) / self.sigma
        return np.concatenate([data, self.prior_terms(params, log_delta_prior)], axis=-1)

    def jacobian(self, params, shape="erf", geom=None, log_delta_prior=None) -> np.ndarray:
        """Derivatives of :meth:`residuals` by the 11 parameters of one model, ``(S + 8, 11)``
        (a joint band's shots' ``S`` rows each, one shot after the other, then the priors'):
        the motion's (:func:`~core.layer_model.side_flow_slopes`) through the frames'
        lookups' (:meth:`~core.near_wall.NearWallBand.residual_slopes`)."""
        params = np.asarray(params, dtype=np.float64)
        u_t, u_r, by_t, by_r = side_flow_slopes(geom or self.geom, params, self.u_t, self.u_r,
                                                shape)
        data_t, data_r = self.band.residual_slopes(u_t, u_r)
        shots = data_t.size // u_t.size  # a joint band's shots share the model's motion
        if shots > 1:
            by_t, by_r = np.tile(by_t, (shots, 1)), np.tile(by_r, (shots, 1))
        data = (data_t[:, None] * by_t + data_r[:, None] * by_r) / self.sigma
        return np.vstack([data, self.prior_slopes(params, log_delta_prior)])

    def score(self, params, data_cost=None):
        """Data cost over ``sigma^2`` plus the priors: what the fit minimises (twice its cost)."""
        if data_cost is None:
            data_cost = self.data_cost(params)
        priors = np.sum(self.prior_terms(params) ** 2, axis=-1)
        if np.ndim(priors) == 0:
            return data_cost / self.sigma**2 + float(priors)
        return data_cost / self.sigma**2 + priors

    def prior_terms(self, params, log_delta_prior=None) -> np.ndarray:
        """Dimensionless prior residuals (their squares add to the cost), ``PARAM_NAMES`` order."""
        table = np.asarray(params, dtype=np.float64)
        _, slope, relax, log_delta, spread, reverse, drop, thin, follow, _, _ = (
            np.atleast_2d(table).T)
        centre = self.log_delta_prior if log_delta_prior is None else log_delta_prior
        lo, hi = (math.tan(math.radians(v)) for v in PRIOR_LEAVE_DEG)
        ratio = (1.0 + reverse) / np.maximum(1.0 - reverse, 1e-3)
        terms = np.stack([
            _outside(slope, lo, hi),
            np.array([math.log(v / PRIOR_RELAX[0]) for v in relax]) / PRIOR_RELAX[1],
            # from the laminar thickness to PRIOR_THICKER times it alike
            _outside(log_delta - centre, 0.0, math.log(PRIOR_THICKER), PRIOR_LOG_DELTA_SD),
            _outside(spread, PRIOR_SPREAD[0] * ratio, PRIOR_SPREAD[1] * ratio,
                     SPREADING_RATE[1] * ratio),
            _outside(reverse, *PRIOR_REVERSE),
            _outside(drop, *PRIOR_DROP),
            _outside(thin, *PRIOR_THIN),
            _outside(follow, 0.0, 1.0),
        ], axis=-1)
        return terms if table.ndim == 2 else terms[0]

    def prior_slopes(self, params, log_delta_prior=None) -> np.ndarray:
        """Derivatives of one model's :meth:`prior_terms` by its parameters, ``(8, 11)``
        (where a term is flat inside its range, 0 at the range's ends)."""
        _, slope, relax, log_delta, spread, reverse, *_ = params
        i = {name: k for k, name in enumerate(PARAM_NAMES)}
        lo, hi = (math.tan(math.radians(v)) for v in PRIOR_LEAVE_DEG)
        out = np.zeros((8, len(PARAM_NAMES)))
        out[0, i["slope"]] = _outside_slope(slope, lo, hi)
        out[1, i["relax"]] = 1.0 / (relax * PRIOR_RELAX[1])
        centre = self.log_delta_prior if log_delta_prior is None else log_delta_prior
        out[2, i["log_delta"]] = _outside_slope(log_delta - centre, 0.0,
                                                math.log(PRIOR_THICKER), PRIOR_LOG_DELTA_SD)
        ratio = (1.0 + reverse) / max(1.0 - reverse, 1e-3)
        # +1 above the range, -1 below it, 0 inside (the term: the distance outside it)
        side = int(spread > PRIOR_SPREAD[1] * ratio) - int(spread < PRIOR_SPREAD[0] * ratio)
        out[3, i["spread"]] = side / (SPREADING_RATE[1] * ratio)
        if side and 1.0 - reverse > 1e-3:  # d ratio / d reverse = 2 / (1 - reverse)^2
            out[3, i["reverse"]] = (-side * spread / (SPREADING_RATE[1] * ratio**2)
                                    * 2.0 / (1.0 - reverse) ** 2)
        for row, (name, (low, high)) in enumerate(
                (("reverse", PRIOR_REVERSE), ("drop", PRIOR_DROP), ("thin", PRIOR_THIN),
                 ("follow", (0.0, 1.0))), start=4):
            out[row, i[name]] = _outside_slope(params[i[name]], low, high)
        return out

    def start(self, phi_s, leave_deg=8.0, delta_factor=1.0, reverse=0.1, follow=0.5,
              spreading=SPREADING_RATE[0]):
        """Parameters within the priors' ranges (at their medians where they have them) but for
        those given: the thickness is the laminar one, where the prior's range starts, times
        ``delta_factor``; ``spreading`` the rate (times the stream's ratio), a turbulent mixing
        layer's by default."""
        ratio = (1.0 + reverse) / (1.0 - reverse)
        return np.array([phi_s, math.tan(math.radians(leave_deg)), PRIOR_RELAX[0],
                         self.log_delta_prior + math.log(delta_factor),
                         spreading * ratio, reverse, 0.5, 0.35, follow, 1.0, 1.0])


def _outside(value: np.ndarray, lo: float, hi: float, scale: float = PRIOR_WALL) -> np.ndarray:
    """Distance of ``value`` outside ``[lo, hi]`` over ``scale`` (0 inside)."""
    return (np.maximum(0.0, lo - value) + np.maximum(0.0, value - hi)) / scale


def _outside_slope(value: float, lo: float, hi: float, scale: float = PRIOR_WALL) -> float:
    """Derivative of :func:`_outside` by ``value``."""
    return (-1.0 if value < lo else 1.0 if value > hi else 0.0) / scale


@dataclass
class Fit:
    params: np.ndarray
    score: float  # data cost over sigma^2 plus the priors (SideProblem.score)


def refine(problem: SideProblem, start, *, shape="erf", geom=None, log_delta_prior=None,
           max_nfev=60, hold=()) -> Fit:
    """Least-squares refinement with the priors of all parameters but those named in ``hold``
    (``PARAM_NAMES``), which keep their start values. The Jacobian is the model's own
    (:meth:`SideProblem.jacobian`)."""
    start = np.asarray(start, dtype=np.float64)
    free = np.array([name not in hold for name in PARAM_NAMES])

    def full(q):
        p = start.copy()
        p[free] = q
        return p

    def residuals(q):
        return problem.residuals(full(q), shape, geom, log_delta_prior)

    def jacobian(q):
        return problem.jacobian(full(q), shape, geom, log_delta_prior)[:, free]

    lower = np.array([start[0] - REFINE_REACH_DEG, 0.0, 0.15, math.log(0.3), 0.02, 0.01, 0.0, 0.0, 0.0, 0.7,
                      0.0])
    upper = np.array([start[0] + REFINE_REACH_DEG, 0.7, 6.0, math.log(40.0), 0.6, 0.45,
                      PRIOR_DROP[1] + 0.2, 0.9, 1.0, 1.3, 2.0])
    x0 = np.clip(start, lower + 1e-9, upper - 1e-9)[free]
    solver = _Evaluations(residuals, jacobian, max_nfev)
    sol = least_squares(
        solver.step, x0, jac=solver.jacobian, bounds=(lower[free], upper[free]),
        max_nfev=max_nfev, xtol=1e-4, ftol=1e-4, x_scale=REFINE_SCALE[free], tr_solver="exact",
    )
    return Fit(full(sol.x), float(2.0 * sol.cost))


class _Evaluations:
    """``residuals`` and ``jacobian`` as least_squares evaluates them, the evaluations counted:
    scipy's trf asks for a Jacobian after every accepted step, but after its last allowed
    evaluation (``max_nfev``) it stops without using it, so zeros stand in (a Jacobian costs
    about one and a half evaluations; the fit's parameters and cost are the same to the last
    bit, only the result's unused gradient and status differ)."""

    def __init__(self, residuals, jacobian, max_nfev: int):
        self.residuals, self.slopes, self.max_nfev = residuals, jacobian, max_nfev
        self.count, self.size = 0, 0

    def step(self, q):
        self.count += 1
        values = self.residuals(q)
        self.size = values.shape[-1]
        return values

    def jacobian(self, q):
        if self.count >= self.max_nfev:
            return np.zeros((self.size, q.size))
        return self.slopes(q)
