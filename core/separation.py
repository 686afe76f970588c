"""Proposed separation angles: fit the flow next to each side of the ball where it separates.

Separation is where the wall shear changes sign. PIV cannot resolve the boundary layer (sub-mm)
and correlation windows that touch the ball's mask smear the layer away, so the flow next to the
wall is fitted to the particle images themselves, in the ball frame, in a thin band along the
outline (:mod:`core.near_wall`): the model of :mod:`core.layer_model` (an attached layer whose
dividing line touches the wall at ``phi_s`` and then lifts off as a free shear layer that
thickens downstream), with the stream outside it from the finer PIV vectors beside the ball.
The layer is fitted in both of its forms (``LAYER_FORMS``: whether its dividing line or its
centre keeps to the departure path) and the better-scoring fit kept.

The model's priors, all in physical units, and the least-squares refinement are in
:mod:`core.side_fit`.

The uncertainty combines, as standard uncertainties: the fit's own standard error, the fitted
circle's error (refit with the radius moved by its uncertainty), the flight direction's (one to
one), the model form (refit with the alternative layer profile, and with the near-wall model's
form constants halved and doubled) and the priors' leverage (refit with the thickness
prior's laminar thickness, where its range starts, halved and doubled). The reported
``uncertainty_deg`` is ``COVERAGE_K`` times their root sum of squares: an interval meant to
cover the truth in at least ``COVERAGE`` of cases, calibrated on one family of synthetic shots
and checked on the other (docs/separation_accuracy.md).

Angles follow the shot convention: from the plane through the ball centre normal to the flight,
positive rearward; *upper* is the side toward the top of the picture (core.geometry).
"""

from __future__ import annotations

import itertools
import math
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, replace

import numpy as np
from scipy import ndimage
from threadpoolctl import threadpool_limits

from core.layer_model import PARAM_NAMES
from core.near_wall import (
    BallMotion,
    JointBand,
    NearWallBand,
    SeedingMap,
    outer_stream,
    seeding_ratio,
    side_axes,
)
from core.results import SeparationResult, SideProposal, VectorField
from core.side_fit import PRIOR_LEAVE_DEG, Fit, SideProblem, refine
from core.wake import wake_direction, wake_state

#: Band along the outline where the layer is fitted: the first gap (px) outside the outline;
#: the last, ``BAND_DEPTH`` times twice the laminar thickness, kept within ``BAND_LAST_GAP_PX``
#: (on balls of R 150-250 px at Re about 1.4e5: 16-18 px, two to three times a layer at the
#: top of the thickness prior's flat range).
BAND_FIRST_GAP_PX = 2.0
#: Spacing of the band's samples along the outline (px); rows are 0.5 px apart near the wall.
BAND_ARC_STEP_PX = 1.5
BAND_LAST_GAP_PX = (16.0, 28.0)
BAND_DEPTH = 4.0
#: Angles (deg, separation convention) searched for the separation point.
SEARCH_DEG = (-40.0, 62.0)
#: Band extent beyond the search range (deg): some attached flow ahead, some wake behind.
BAND_DEG = (-50.0, 80.0)
#: Laminar layer thickness at separation: ``delta = LAMINAR_DELTA_COEF D / sqrt(Re)`` (derived,
#: see core.side_fit's docstring).
LAMINAR_DELTA_COEF = 1.5
#: Reynolds number assumed for the thickness prior when the shot has none (no dt or scale).
FALLBACK_REYNOLDS = 1.5e5
#: The coarse search uses every ``COARSE_EVERY``-th angle and gap row of the band at first,
#: every other one around its best angles; the refinement the band's samples within
#: ``FIT_WINDOW_DEG`` of its start.
COARSE_EVERY = 3
FIT_WINDOW_DEG = (-25.0, 40.0)
#: Depth (layer thicknesses) to which the dividing line's place below the layer is uncertain
#: (calibrated: docs/separation_accuracy.md).
EXTRAPOLATION_DEPTH = 0.2
#: Evaluations of the model (``max_nfev``: each step's, besides its Jacobian) of the main
#: refinement and the angle's profile, and of each of the budget's refits from its result.
REFINE_ITERATIONS = 15
ALTERNATIVE_ITERATIONS = 5
#: The angle's profile is taken this far either side of the best fit (deg); the fit's own
#: standard uncertainty is capped at ``PROFILE_MAX_DEG``.
PROFILE_STEP_DEG = 3.0
PROFILE_MAX_DEG = 20.0
#: A profile point that scores better than the best fit is where the refinement should have
#: gone (it stops after ``REFINE_ITERATIONS`` in a rough landscape): the fit moves there and is
#: refined again, at most this many times.
PROFILE_MOVES = 3
#: Thicknesses (over the laminar one) tried by the coarse search, and how many of its first
#: stage's best angles are searched further.
COARSE_THICKNESS = (1.0, 3.0)
#: Spreading rates of the free layer (times the stream's ratio) the coarse search tries: a
#: layer still laminar over the band, and a turbulent mixing layer's (``core.side_fit``).
COARSE_SPREADING = (0.02, 0.18)
COARSE_CANDIDATES = 2
#: Refinements run from this many starting points of the coarse search (the best wins): the
#: image-matching cost has several shallow minima along the outline. One more where they share
#: a spreading rate (``COARSE_SPREADING``): the other rate's best.
REFINE_STARTS = 2
#: The layer's forms fitted (``SideGeometry.outward_growth``): its growth behind separation
#: all outward of the dividing line, which keeps to the departure path, or evenly about its
#: centre, which keeps to it; the better-scoring fit's form is kept.
LAYER_FORMS = (1.0, 0.0)
#: The search for starting points sees the frames smoothed by a Gaussian of this fraction of
#: the ball's speed relative to the air (px per pair; :meth:`NearWallBand.blurred`).
COARSE_BLUR = 0.0625
#: The reported uncertainty is ``COVERAGE_K`` standard uncertainties, meant to cover the truth
#: in at least ``COVERAGE`` of proposals. The sources' standard uncertainties are on the safe
#: side (bounds and factor-of-two spans, not spreads), so the factor is calibrated rather than
#: the normal distribution's 2: chosen on the kinematic family (the 95th percentile of its
#: |error| over the standard uncertainty, 1.46, rounded up) and checked on the physical one
#: (docs/separation_accuracy.md).
COVERAGE = 0.95
COVERAGE_K = 1.5
#: A proposal needs the separating model to beat the attached-flow model by this fraction of
#: the residual, and a separation point no later than ``LATEST_DEG`` (135 deg from the front
#: stagnation point; even supercritical spheres separate by about 110-120 deg: Achenbach 1972,
#: memory; a fit that far back is an attached flow's).
MIN_IMPROVEMENT = 0.02
LATEST_DEG = 45.0
#: Band samples this close (px) to glare are left out of the fit; at least this share of the
#: band must stay.
GLARE_REACH_PX = 2.0
MIN_CLEAR_FRACTION = 0.6
#: Share of the band that must lie inside the image (and clear of glare) for a proposal.
MIN_INSIDE_FRACTION = 0.9
#: Particle images in the band beside the ball, relative to the free stream nearby, below which
#: the side is refused (unlit: a laser shadow; or sparsely seeded).
MIN_SEEDING_RATIO = 0.35


@dataclass
class BallFrame:
    """The ball at mid-exposure, its motion and what is known of the shot (image px)."""

    center_px: tuple[float, float]
    radius_px: float
    displacement_px: tuple[float, float]  # ball centre B - A
    flight_deg: float
    stream_px: float | None = None  # air speed past the ball, px per pair (None: |displacement|)
    reynolds: float | None = None
    radius_sigma_px: float = 0.0  # standard uncertainty of the circle (radius, centre)
    center_sigma_px: float = 0.0
    flight_sigma_deg: float = 0.0  # standard uncertainty of the flight direction

    @property
    def stream(self) -> float:
        """Speed of the air relative to the ball far from it (px per frame pair)."""
        if self.stream_px is not None:
            return float(self.stream_px)
        return math.hypot(*self.displacement_px)

    @property
    def motion(self) -> BallMotion:
        return BallMotion(tuple(self.center_px), float(self.radius_px),
                          tuple(self.displacement_px), float(self.flight_deg))

    def laminar_delta_px(self) -> float:
        """The laminar layer's vorticity thickness at separation (px): where the thickness
        prior's range starts (:data:`core.side_fit.PRIOR_THICKER`)."""
        return laminar_delta_px(self.radius_px, self.reynolds)


def laminar_delta_px(radius_px: float, reynolds: float | None) -> float:
    """A laminar layer's vorticity thickness at separation (px) on a ball of ``radius_px`` at
    ``reynolds`` (``FALLBACK_REYNOLDS`` when not known)."""
    re = reynolds if reynolds and reynolds > 0 else FALLBACK_REYNOLDS
    return LAMINAR_DELTA_COEF * 2.0 * radius_px / math.sqrt(re)


def propose_separation(
    frame_a: np.ndarray,
    frame_b: np.ndarray,
    ball: BallFrame,
    fine: VectorField,
    fine_origin_px: tuple[float, float],
    lab_field: VectorField,
    seeding: SeedingMap | None = None,
    glare: tuple[np.ndarray | None, np.ndarray | None] = (None, None),
    threads: int = 1,
) -> SeparationResult:
    """Separation proposal on both sides, wake deflection and wake state of one shot.

    Parameters
    ----------
    frame_a, frame_b : (H, W) ndarray
        The frame pair (lab frame, as recorded).
    ball : BallFrame
        Ball circle at mid-exposure, its displacement, the flight direction and uncertainties.
    fine : VectorField
        Fine correlation around the ball *in the ball frame* (the ball at rest), positions
        relative to ``fine_origin_px``.
    fine_origin_px : (float, float)
        Image position (x, y) of the fine field's origin.
    lab_field : VectorField
        The whole-frame field (lab frame, image coordinates): it reaches further behind the ball
        for the wake's direction.
    seeding : SeedingMap, optional
        Particle-image density around the ball; without it no side is refused for seeding.
    glare : ((H, W) bool ndarray or None, same)
        Saturated glare in frames A and B (core.conditioning): band samples in or next to it
        are left out of the fit (a glint on the ball is bright and still in the ball frame,
        and would pass for air at rest).
    threads : int
        Threads the shot may use: with two or more, the two sides are fitted at once.

    Returns
    -------
    SeparationResult
    """
    # a held ball (tunnel): the lab frame is the ball frame
    moving = math.hypot(*ball.displacement_px) >= 0.5 * ball.stream
    wake = wake_direction(lab_field, (0.0, 0.0), ball, lab_frame=moving)
    # each layer turns toward the wake's direction (on the lower side it points away from it)
    toward = 0.0 if wake is None else wake.deflection_deg

    def fit(side):
        return fit_side(frame_a, frame_b, ball, fine, fine_origin_px, side,
                        final_deg=toward if side == "upper" else -toward, seeding=seeding,
                        glare=glare)

    names = ("upper", "lower")
    # the solver's linear algebra (an SVD of a few thousand by eleven a step) is quicker on
    # one BLAS thread than on several, and the sides may already take the cores
    with threadpool_limits(limits=1, user_api="blas"):
        if threads > 1:  # the model's compiled parts run without the GIL
            with ThreadPoolExecutor(2) as pool:
                sides = dict(zip(names, pool.map(fit, names), strict=True))
        else:
            sides = {side: fit(side) for side in names}
    if sides["upper"].angle_deg is None and sides["lower"].angle_deg is None:
        wake = None
    state = wake_state(sides["upper"], sides["lower"])
    return SeparationResult(
        sides["upper"], sides["lower"], None if wake is None else wake.deflection_deg, state,
        wake_deflection_uncertainty_deg=None if wake is None else wake.uncertainty_deg)


# --- the fit of one side ---------------------------------------------------------------------


def band_last_gap_px(laminar_delta_px: float) -> float:
    """The band's outer edge (px outside the outline): ``BAND_DEPTH`` times twice the laminar
    thickness, within ``BAND_LAST_GAP_PX``."""
    return float(np.clip(BAND_FIRST_GAP_PX + BAND_DEPTH * 2.0 * laminar_delta_px,
                         *BAND_LAST_GAP_PX))


def side_problem(frame_a, frame_b, ball: BallFrame, fine: VectorField, origin_px, side: str,
                 final_deg: float, glare=(None, None)) -> SideProblem | str:
    """The side's fitting problem, or the reason there is none."""
    delta_prior = ball.laminar_delta_px()
    last_gap = band_last_gap_px(delta_prior)
    outer = outer_stream(fine, origin_px, ball, side, BAND_DEG)
    if outer is None:
        return "too few valid vectors beside the ball to model the stream there"
    band = NearWallBand(frame_a, frame_b, ball.motion, side, phi_deg=BAND_DEG,
                        gap_px=(BAND_FIRST_GAP_PX, last_gap), max_speed_px=2.0 * ball.stream,
                        arc_step_px=BAND_ARC_STEP_PX)
    if band.inside_fraction < MIN_INSIDE_FRACTION:
        return "the image edge cuts the band next to the ball on this side"
    band.leave_out(glare, GLARE_REACH_PX)
    if band.kept_fraction < MIN_CLEAR_FRACTION:
        return "glare covers too much of the band next to the ball on this side"
    return SideProblem(band, outer, final_deg, math.log(delta_prior))


def fit_side(frame_a, frame_b, ball: BallFrame, fine: VectorField, origin_px, side: str, *,
             final_deg: float = 0.0, seeding: SeedingMap | None = None,
             glare=(None, None)) -> SideProposal:
    """Fit the flow next to one side; an empty proposal with the reason when there is none.

    ``final_deg`` is the direction the layer turns to (the wake's, from the rearward axis,
    positive toward this side).
    """
    if seeding is not None:
        ratio = seeding_ratio(seeding, ball, side)
        if ratio < MIN_SEEDING_RATIO:
            return SideProposal(None, None, 0.0, f"too few particle images beside the ball on "
                                f"this side ({ratio:.0%} of the air around it): unlit (a laser "
                                "shadow?) or sparsely seeded")
    problem = side_problem(frame_a, frame_b, ball, fine, origin_px, side, final_deg, glare)
    if isinstance(problem, str):
        return SideProposal(None, None, 0.0, problem)
    return fit_problem(problem, ball, final_deg)


def fit_shots_side(pairs, ball: BallFrame, fine: VectorField, origin_px, side: str, *,
                   final_deg: float = 0.0) -> SideProposal:
    """One layer fitted to the particle images of several shots at once (a condition's repeat
    launches), each frame pair already resampled into one ball frame where the ball sits still
    at ``ball``'s circle (``ball.displacement_px`` (0, 0), ``ball.stream_px`` the air's speed).

    Parameters
    ----------
    pairs : list of ((H, W) ndarray, (H, W) ndarray)
        Frames A and B of each shot in the common ball frame.
    ball, fine, origin_px, side, final_deg
        As for :func:`fit_side`; ``fine`` is the shots' common field (e.g. their ensemble
        correlation) in the ball frame.
    """
    delta_prior = ball.laminar_delta_px()
    last_gap = band_last_gap_px(delta_prior)
    outer = outer_stream(fine, origin_px, ball, side, BAND_DEG)
    if outer is None:
        return SideProposal(None, None, 0.0, "too few valid vectors beside the ball to model "
                            "the stream there")
    bands = [NearWallBand(a, b, ball.motion, side, phi_deg=BAND_DEG,
                          gap_px=(BAND_FIRST_GAP_PX, last_gap), max_speed_px=2.0 * ball.stream,
                          arc_step_px=BAND_ARC_STEP_PX) for a, b in pairs]
    problem = SideProblem(JointBand(bands), outer, final_deg, math.log(delta_prior))
    return fit_problem(problem, ball, final_deg)


def fit_problem(problem: SideProblem, ball: BallFrame, final_deg: float) -> SideProposal:
    """The fit of one side's problem: coarse search, refinements, the uncertainty budget."""
    problem.sigma = problem.attached_scale()
    starts, start_cost = [], math.inf
    # the search for starting points looks at smoothed frames (coarse to fine), the same for
    # both forms of the layer
    smoothed = problem.blurred(COARSE_BLUR * ball.stream)
    for growth in LAYER_FORMS:
        searched = smoothed.with_growth(growth)
        found, cost = _coarse_search(searched)
        starts += [(problem.with_growth(growth), start) for start in found]
        start_cost = min(start_cost, cost)
    # where the search's costs were taken (attached flow has no layer: alike in both forms)
    coarse_attached = searched.view(every=2).attached_cost()
    if not start_cost < (1.0 - MIN_IMPROVEMENT) * coarse_attached:
        return SideProposal(None, None, 0.0, "no separated shear layer next to the ball "
                            "(the attached-flow model fits as well: attached flow?)")
    fits = []
    for form, start in starts:
        near = form.view((start[0] + FIT_WINDOW_DEG[0], start[0] + FIT_WINDOW_DEG[1]))
        fits.append((refine(near, start, max_nfev=REFINE_ITERATIONS), near))
    # the fits saw different windows: compare them on the samples all of them saw
    angles = [fit.params[0] for fit, _ in fits]
    shared = (max(angles) + FIT_WINDOW_DEG[0], min(angles) + FIT_WINDOW_DEG[1])
    phi = problem.band.phi_grid
    if phi[(phi >= shared[0]) & (phi <= shared[1])].size < 2:
        # starts further apart than a window's width (frames of different shots, say): no
        # sample saw them all, so they are compared on the whole band
        shared = None
    common = {growth: problem.with_growth(growth).view(shared) for growth in LAYER_FORMS}
    scores = np.array([common[near.outward_growth].score(fit.params) for fit, near in fits])
    chosen = int(np.argmin(scores))
    best, near = fits[chosen]
    best, rises = _settled(near, best)
    phi_s = float(best.params[0])
    # the settled fit stands where the chosen one stood (it scores at least as well on its
    # own window; on the shared samples it keeps the chosen one's standing if that was better)
    angles[chosen], scores[chosen] = phi_s, min(scores[chosen],
                                                common[near.outward_growth].score(best.params))
    if phi_s > LATEST_DEG:
        return SideProposal(None, None, 0.0, "no separation ahead of the rear of the ball "
                            "(attached flow?)")
    budget = _uncertainty_budget(near, best, ball, rises)
    budget["other minimum"] = _other_minima(angles, scores, phi_s)
    # which of the layer's lines keeps to its path is not known: how far the angle moves to the
    # other form's best fit is a model-form uncertainty like the refits' (unweighted)
    other = [k for k, (_, fit_near) in enumerate(fits)
             if fit_near.outward_growth != near.outward_growth]
    if other:
        budget["layer form"] = abs(angles[min(other, key=lambda k: scores[k])] - phi_s)
    standard = math.sqrt(sum(v * v for v in budget.values()))
    uncertainty = COVERAGE_K * standard
    remarks = []
    hidden = _hidden_wall_reach(problem, phi_s, uncertainty)
    if hidden is not None:
        reach, remark = hidden
        if reach > uncertainty:
            # the expanded uncertainty reaches across the hidden stretch: its share of the
            # budget is what the other sources leave of that reach
            budget["hidden wall"] = math.sqrt((reach / COVERAGE_K) ** 2 - standard**2)
            uncertainty = reach
        remarks.append(remark)
    # how much of the attached flow's misfit the layer takes away, in the fit's own window
    gain = 1.0 - near.data_cost(best.params) / near.attached_cost()
    quality = float(np.clip(gain / 0.2, 0.0, 1.0) * np.clip(2.0 / max(uncertainty, 1e-3), 0, 1))
    departure = math.degrees(math.atan(best.params[1]))
    if departure > PRIOR_LEAVE_DEG[1]:
        remarks.append("the layer leaves unusually steeply: check the proposal")
    remark = "; ".join(remarks)
    layer = {name: round(float(v), 5) for name, v in zip(PARAM_NAMES, best.params, strict=True)}
    layer.update(final_deg=round(final_deg, 3), outward_growth=near.outward_growth,
                 band_first_gap_px=BAND_FIRST_GAP_PX,
                 band_last_gap_px=float(problem.band.gap_grid[-1]),
                 window_deg=[round(float(v), 3) for v in near.band.phi_grid[[0, -1]]])
    return SideProposal(round(phi_s, 2), round(uncertainty, 2), round(quality, 3), remark,
                        departure_deg=round(departure, 1),
                        layer_px=round(math.exp(best.params[3]), 2),
                        budget={k: round(float(v), 3) for k, v in budget.items()}, layer=layer)


def _hidden_wall_reach(problem: SideProblem, phi_s: float, uncertainty: float):
    """Where glare hides the band next to the proposal across its depth
    (:meth:`NearWallBand.wall_hidden`), the layer may leave the wall anywhere under the glare
    and the data cannot say where: the expanded uncertainty (deg) that reaches across every
    hidden stretch within the proposal's reach (growing the reach as stretches join; at least
    ``uncertainty``), and the remark naming the stretches; None when no hidden stretch lies
    within ``uncertainty`` of ``phi_s`` (or ``uncertainty`` is not a number).

    A stretch runs to the next angle the band sees on either side (one step of the band's
    angles past its last hidden one), where the layer may already have left the wall.
    """
    if not math.isfinite(uncertainty):
        return None
    phi = problem.band.phi_grid
    hidden = problem.band.wall_hidden()
    if not hidden.any():
        return None
    step = float(phi[1] - phi[0]) if phi.size > 1 else 0.0
    labels, count = ndimage.label(hidden)
    stretches = []
    for k in range(1, count + 1):
        inside = phi[labels == k]
        stretches.append((float(inside[0]) - step, float(inside[-1]) + step))
    reach = uncertainty
    while True:
        near = [s for s in stretches if s[1] >= phi_s - reach and s[0] <= phi_s + reach]
        wider = max([reach] + [max(phi_s - s[0], s[1] - phi_s) for s in near])
        if not wider > reach:
            break
        reach = wider
    if not near:
        return None
    first, last = min(s[0] for s in near), max(s[1] for s in near)
    at_end = " (to the band's end)" if first < phi[0] or last > phi[-1] else ""
    return reach, (f"glare hides the wall from {round(first)}° to {round(last)}°{at_end}: the "
                   "layer may leave it anywhere there")


def _other_minima(angles, scores, chosen: float) -> float:
    """Standard uncertainty (deg) from other minima of the fit that the data hardly reject.

    Each minimum is weighted by its likelihood, ``exp(-score / 2)`` (the scores are
    chi-square-like: data cost over the residual scale plus the priors); the result is the
    root of the weighted mean square distance of the minima from the chosen angle.
    """
    scores = np.asarray(scores, dtype=np.float64)
    weights = np.exp(-0.5 * (scores - scores.min()))
    weights /= weights.sum()
    return float(math.sqrt(np.sum(weights * (np.asarray(angles) - chosen) ** 2)))


def _coarse_search(problem: SideProblem):
    """Starting points for the refinement, best first, and the best data cost (on every other
    sample of the band). ``problem`` is the one the search looks at (the fit passes the one
    on smoothed frames: :meth:`SideProblem.blurred`).

    ``phi_s`` on a 3 deg grid at a few thicknesses and both of ``COARSE_SPREADING``'s rates,
    the other priors at their medians; around the best few (at least 6 deg apart), ``(phi_s,
    departure, thickness)`` with ``phi_s`` on a 1.5 deg grid and four departures, three
    thicknesses, at the spreading rate found there. Every
    candidate is scored by its data cost over ``sigma^2`` plus the priors (a thick "attached"
    layer can mimic a separated one far too early or late); the best of each ``phi_s`` cell
    are kept, ``REFINE_STARTS`` of them at least 3 deg apart, and in both stages the best of a
    spreading rate they lack (:func:`_each_rate`).
    """
    sparse = problem.view(every=COARSE_EVERY)
    problem = problem.view(every=2)
    tags, candidates = [], []
    for factor, reverse, follow, spreading in itertools.product(
            COARSE_THICKNESS, (0.08, 0.25), (0.0, 1.0), COARSE_SPREADING):
        for phi_s in np.arange(SEARCH_DEG[0], SEARCH_DEG[1] + 1.0, 3.0):
            tags.append((factor, reverse, follow, spreading))
            candidates.append(sparse.start(phi_s, delta_factor=factor, reverse=reverse,
                                           follow=follow, spreading=spreading))
    first = list(zip(sparse.score(np.array(candidates)), candidates, tags, strict=True))
    candidates = []
    for _, centre, (factor, reverse, follow, spreading) in _each_rate(
            _distinct(first, 6.0, COARSE_CANDIDATES), first):
        for phi_s in centre[0] + np.array([-3.0, -1.5, 0.0, 1.5, 3.0]):
            for leave in (2.0, 7.0, 13.0, 19.0):
                for f in (0.6 * factor, factor, 1.6 * factor):
                    candidates.append(problem.start(phi_s, leave, f, reverse, follow,
                                                    spreading))
    costs = problem.data_cost(np.array(candidates))
    scored = list(zip(problem.score(np.array(candidates), costs), candidates, strict=True))
    starts = _each_rate(_distinct(scored, 3.0, REFINE_STARTS), scored)
    return [item[1] for item in starts], float(np.min(costs))


def _each_rate(kept, scored):
    """``kept`` (the best of ``scored``, ``(score, params, ...)``) and, for each of
    ``COARSE_SPREADING``'s rates none of them has, the best of ``scored`` at that rate: one
    rate's candidates can crowd the other's out (slowly spreading layers far behind the truth
    once took both starts of a side, and the turbulent layer near it, which fits far better
    once refined, was never refined)."""
    spread = PARAM_NAMES.index("spread")
    reverse = PARAM_NAMES.index("reverse")

    def rate(item):
        params = item[1]
        return round(params[spread] * (1.0 - params[reverse]) / (1.0 + params[reverse]), 6)

    kept = list(kept)
    for wanted in COARSE_SPREADING:
        if all(rate(item) != round(wanted, 6) for item in kept):
            at_rate = [item for item in scored if rate(item) == round(wanted, 6)]
            if at_rate:
                kept.append(min(at_rate, key=lambda item: item[0]))
    return kept


def _distinct(scored, apart_deg: float, count: int):
    """The best ``count`` of ``(score, params, ...)`` whose angles lie ``apart_deg`` apart."""
    kept = []
    for item in sorted(scored, key=lambda item: item[0]):
        if all(abs(item[1][0] - other[1][0]) >= apart_deg for other in kept):
            kept.append(item)
        if len(kept) == count:
            break
    return kept


def _profile(problem: SideProblem, best: Fit) -> list[Fit]:
    """The fits with the angle held ``PROFILE_STEP_DEG`` before and after the best fit's, every
    other parameter refitted from the best fit's values."""
    held = []
    for sign in (-1.0, 1.0):
        moved = best.params.copy()
        moved[0] += sign * PROFILE_STEP_DEG
        # converged, as the best fit is: cut at ALTERNATIVE_ITERATIONS the profile's scores
        # stopped short of their minima by amounts that inputs hardly differing changed (the
        # air's viscosity moved by 0.3 % took a demo side's fit entry from 1.2 to 1.9 deg
        # and back), and a rise too large understates the fit's entry
        held.append(refine(problem, moved, hold=("phi_s",), max_nfev=REFINE_ITERATIONS))
    return held


def _settled(problem: SideProblem, best: Fit) -> tuple[Fit, list[float]]:
    """The best fit once its profile finds nothing better, and the profile's rises of the score
    (before, after). A profile point scoring lower than the best fit is a better fit the
    refinement stopped short of: refine again from it (``PROFILE_MOVES`` times at most)."""
    profile = _profile(problem, best)
    for _ in range(PROFILE_MOVES):
        better = min(profile, key=lambda fit: fit.score)
        if not better.score < best.score:
            break
        best = refine(problem, better.params, max_nfev=REFINE_ITERATIONS)
        profile = _profile(problem, best)
    return best, [fit.score - best.score for fit in profile]


def _uncertainty_budget(problem: SideProblem, best: Fit, ball: BallFrame,
                        rises: list[float]) -> dict[str, float]:
    """Standard uncertainties (deg) of the separation angle by source.

    The fit's own: the profile of the score along the angle (``rises``: how much the score
    rises with the angle held ``PROFILE_STEP_DEG`` before and after it, every other parameter
    refitted, :func:`_settled`); the flatter side's rise ``d`` gives ``step / sqrt(d)`` (a score
    rises by 1 at one standard deviation). It sees what the curvature at the minimum misses: a
    near-tangential layer whose start the data cannot place, a parameter held at its bound.
    Each other source is how far the angle moves when the fit is redone from the best fit
    (:func:`_refit_shift`) under: the circle's radius moved by its standard uncertainty both
    ways (half the spread; a centre error moves the outline by as much radially), the model's
    form (:func:`_model_form_shift`), the laminar thickness where the thickness prior's range
    starts halved and doubled (the larger move). Refits, not linear steps: one Gauss-Newton
    step from the best fit tracked the refits' moves poorly on both synthetic families
    (correlation 0.3 and under; it moved the angle by about 0.1 deg even with nothing changed,
    the Jacobian being nearly singular along the poorly determined parameters), while refits
    of ``ALTERNATIVE_ITERATIONS`` evaluations agree with full ones (correlation 0.7-1.0).
    """
    rise = max(min(rises), PROFILE_STEP_DEG**2 / PROFILE_MAX_DEG**2)
    budget = {"fit": PROFILE_STEP_DEG / math.sqrt(rise)}
    radius_sd = math.hypot(ball.radius_sigma_px, ball.center_sigma_px)
    if radius_sd > 0:
        moved = [_refit_shift(problem, best, geom=replace(
                     problem.geom, radius_px=problem.geom.radius_px + sign * radius_sd,
                     gap_grid=problem.geom.gap_grid - sign * radius_sd))
                 for sign in (-1.0, 1.0)]
        budget["circle"] = 0.5 * abs(moved[1] - moved[0])
    budget["flight"] = float(ball.flight_sigma_deg)
    budget["model form"] = _model_form_shift(problem, best)
    budget["prior"] = max(
        abs(_refit_shift(problem, best, log_delta_prior=problem.log_delta_prior + shift))
        for shift in (-math.log(2.0), math.log(2.0))
    )
    budget["extrapolation"] = extrapolation_deg(best.params, problem.geom.radius_px)
    return budget


def _model_form_shift(problem: SideProblem, best: Fit) -> float:
    """Standard uncertainty (deg) from the model's form: how far the refitted angle moves with
    the other layer profile (a compact polynomial instead of the error function), and with each
    of the near-wall model's two form constants halved and doubled (the larger move of each):
    the arc over which the attached layer settles onto the wall ahead of separation, and the
    no-slip length. Root sum of squares of the three."""
    moves = [_refit_shift(problem, best, shape="quartic")]
    geom = problem.geom
    for name in ("upstream_deg", "wall_fraction"):
        moves.append(max(
            (_refit_shift(problem, best, geom=replace(geom, **{name: factor * getattr(geom, name)}))
             for factor in (0.5, 2.0)), key=abs))
    return math.sqrt(sum(m * m for m in moves))


def _refit_shift(problem: SideProblem, best: Fit, **alternative) -> float:
    """How far (deg) the angle moves when the fit is redone under an alternative (another
    profile ``shape``, ``geom`` or ``log_delta_prior``; :func:`~core.side_fit.refine`'s options) from the best
    fit's parameters, ``ALTERNATIVE_ITERATIONS`` evaluations of the model at most."""
    moved = refine(problem, best.params, max_nfev=ALTERNATIVE_ITERATIONS, **alternative)
    return float(moved.params[0] - best.params[0])


def extrapolation_deg(params, radius_px: float) -> float:
    """Standard uncertainty (deg) of carrying the layer the data see down to the wall.

    The data see the layer itself; where its dividing line meets the wall depends on how deep
    that line lies below it, which the data hardly measure: about ``EXTRAPOLATION_DEPTH`` layer
    thicknesses, ``h``. A line leaving the outline (radius ``R``) straight at ``beta`` from the
    tangent is ``h`` above it after ``s = -R sin(beta) + sqrt(R^2 sin^2(beta) + 2 R h + h^2)``
    along it (derived: its distance from the centre is ``sqrt(R^2 + 2 R s sin(beta) + s^2)``),
    an arc of ``atan2(s cos(beta), R + s sin(beta))`` on the wall: ``s`` is about
    ``h / tan(beta)`` for a steep layer, and for a tangential one, whose start the data place
    worst, the wall's own curving away bounds it at ``sqrt(2 R h)``.
    """
    beta = math.atan(max(float(params[1]), 0.0))
    depth = EXTRAPOLATION_DEPTH * math.exp(params[3])
    rise = radius_px * math.sin(beta)
    along = -rise + math.sqrt(rise * rise + 2.0 * radius_px * depth + depth * depth)
    return math.degrees(math.atan2(along * math.cos(beta), radius_px + along * math.sin(beta)))


def layer_curves(center_px, radius_px: float, flight_deg: float, side: str, layer: dict,
                 *, reach_deg: float = 60.0, step_deg: float = 0.5) -> dict[str, np.ndarray]:
    """Image polylines of a side's fitted layer (for drawing): ``(N, 2)`` arrays of (x, y) px.

    ``dividing``: the dividing line from the separation point ``reach_deg`` rearward (where the
    flow turns from forward to reverse); ``centre``: the layer's centre (its half-speed line)
    over the same angles; ``band``: the closed outline of the part of the band that was fitted.

    Parameters
    ----------
    center_px, radius_px, flight_deg : the ball at mid-exposure and its flight.
    side : {"upper", "lower"}
    layer : dict
        ``SideProposal.layer``: the fitted parameters (``PARAM_NAMES``), ``final_deg``, the
        band's gaps and the fit window.
    """
    from core.layer_model import centre_offset, dividing_line_px

    phi_s = layer["phi_s"]
    phi = np.arange(phi_s, phi_s + reach_deg + step_deg / 2, step_deg)
    lift = dividing_line_px(radius_px, phi_s, layer["slope"], layer["relax"] * radius_px, phi,
                            layer.get("final_deg", 0.0))
    # the centre lies the profile's offset above the dividing line, times the thickness at
    # separation and the share of the growth since that lifts it (SideGeometry.outward_growth)
    grown = layer["spread"] * np.radians(phi - phi_s) * radius_px
    lifted = math.exp(layer["log_delta"]) + layer.get("outward_growth", 1.0) * grown
    centre = lift + centre_offset(layer["reverse"]) * lifted
    lo, hi = layer["window_deg"]
    band_phi = np.arange(lo, hi + step_deg / 2, step_deg)
    inner = np.full(band_phi.shape, radius_px + layer["band_first_gap_px"])
    outer = np.full(band_phi.shape, radius_px + layer["band_last_gap_px"])

    def points(angles, rho):
        (ex, ey), _ = side_axes(flight_deg, side, angles)
        return np.column_stack([center_px[0] + rho * ex, center_px[1] + rho * ey])

    band = np.vstack([points(band_phi, inner), points(band_phi[::-1], outer[::-1]),
                      points(band_phi[:1], inner[:1])])
    return {"dividing": points(phi, radius_px + lift), "centre": points(phi, radius_px + centre),
            "band": band}
