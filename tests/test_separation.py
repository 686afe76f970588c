"""Separation proposals: small, fast checks against outside values (docs/references.md).

The statistical sweeps over both synthetic families (accuracy and coverage by condition, and
the calibration checked both ways) are a benchmark, not part of the test run:
``benchmarks/bench_separation.py`` writes ``docs/separation_accuracy.md``.
"""

import math
from dataclasses import replace

import numpy as np
import pytest

from core.conditioning import glare_mask
from core.geometry import angle_of_point
from core.layer_model import SideGeometry, centre_offset, dividing_line_px, profile, side_flow
from core.results import SideProposal
from core.separation import (
    COVERAGE_K,
    EXTRAPOLATION_DEPTH,
    extrapolation_deg,
    layer_curves,
    wake_state,
)
from core.shot import ShotSettings, measure_shot
from core.synth_physical import physical_shot
from core.synth_shot import BallWakeFlow, attached_shot, ball_shot


def _settings(truth):
    return ShotSettings(dt_s=truth.dt_s, ball_diameter_mm=truth.ball_diameter_mm,
                        air_temp_c=getattr(truth, "air_temp_c", None))


def _measure(frames):
    frame_a, frame_b, truth = frames
    return measure_shot(frame_a, frame_b, _settings(truth)), truth


def _picks(result, truth):
    """Each side's name, proposal and error against the generator's truth (deg)."""
    for side in ("upper", "lower"):
        proposal = getattr(result.separation, side)
        assert proposal.angle_deg is not None, (side, proposal.reason)
        yield side, proposal, proposal.angle_deg - getattr(truth, f"{side}_deg")


@pytest.fixture(scope="module")
def laminar_sphere():
    """A smooth ball below the drag crisis from the physically built family: Thwaites' method
    on the measured surface velocity puts laminar separation near 81 deg from the front
    stagnation point on both sides."""
    return _measure(physical_shot(
        (640, 800), radius_px=150.0, measured_share=(1.0, 1.0), departure_deg=(12.0, 12.0),
        layer_px=4.0, seed=3))


def test_laminar_sphere_separates_near_81_deg_from_stagnation(laminar_sphere):
    # laminar separation on a sphere below the drag crisis: 80-82 deg from the front stagnation
    # point (Achenbach 1972, J. Fluid Mech. 54:565, memory), i.e. -8 to -10 deg from the plane
    # normal to the flight; the generator's own truth (Thwaites 1949 with Mangler's
    # transformation on Fage's measured surface velocity, memory) lies there too. Achenbach
    # measured at about Re 1.6e5 and this shot is at about 3e4: the check rests on laminar
    # separation being set by the pressure distribution, which changes little across the
    # subcritical range (common practice), as Thwaites' method on one distribution has it
    result, truth = laminar_sphere
    assert -10.5 <= truth.upper_deg <= -7.5
    for _, proposal, error in _picks(result, truth):
        assert abs(error) <= proposal.uncertainty_deg
        assert abs(proposal.angle_deg - (-9.0)) <= 4.0
    assert result.separation.wake_state == "no clear difference"


def test_reynolds_number_of_the_shot(laminar_sphere):
    # Re = U D / nu with nu from Sutherland's law at the shot's air temperature (White,
    # Viscous Fluid Flow, memory): the generator made its layer at this Reynolds number
    result, truth = laminar_sphere
    assert result.reynolds == pytest.approx(truth.reynolds_number, rel=0.03)
    summary = result.summary()["reynolds"]
    assert summary["value"] == pytest.approx(result.reynolds)
    # about 3e4 here: far below the smooth sphere's crisis at about 2e5 (Achenbach 1972, memory)
    assert summary["value"] < 1.0e5
    assert summary["regime"].startswith("below the drag crisis")


def test_kinematic_family_pick_within_its_uncertainty():
    # the first family's separation is where its wall shear changes sign (derived in
    # core.synth_shot); a moderately thick layer leaving at 10-14 deg
    result, truth = _measure(ball_shot(
        (600, 800), radius_px=150.0, upper_deg=12.0, lower_deg=-4.0, leave_deg=(10.0, 14.0),
        layer_px=1.5, seed=31))
    for side, proposal, error in _picks(result, truth):
        assert abs(error) <= proposal.uncertainty_deg, (side, error, proposal.budget)
        assert abs(error) <= 2.5
    assert result.separation.wake_state == "upper side holds on longer"


def test_a_thick_layer_is_not_picked_early():
    # layers of about 9 px vorticity thickness (layer_px is half of it) on a ball whose laminar
    # layer would be about 1 px: with the laminar thickness as the prior's median they were
    # fitted at two thirds of their thickness and picked 1.5-1.7 deg early. Truth: where the
    # first family's wall shear changes sign (derived in core.synth_shot)
    result, truth = _measure(ball_shot(
        (768, 1024), radius_px=170.0, upper_deg=10.0, lower_deg=-2.0, leave_deg=(8.0, 14.0),
        layer_px=4.5, seed=41))
    for side, proposal, error in _picks(result, truth):
        assert abs(error) <= min(1.3, proposal.uncertainty_deg), (side, error, proposal.budget)


def test_the_thickness_prior_spans_turbulent_layers():
    # a turbulent flat-plate layer, 0.37 x Re_x^-1/5, against a laminar one, 5 x Re_x^-1/2
    # (textbook formulas, memory), at Re_x of 1e5-3e5 (a ball's layer near separation): 2.3-3.3
    # times thicker. The prior treats those alike with the laminar thickness, and only layers
    # well outside that range pay for it
    from core.side_fit import SideProblem

    problem = SideProblem.__new__(SideProblem)  # prior_terms reads only the prior's centre
    problem.log_delta_prior = math.log(1.2)
    start = np.array([0.0, 0.2, 1.0, 0.0, 0.2, 0.1, 0.5, 0.35, 0.5, 1.0, 1.0])

    def thickness_term(ratio):
        params = start.copy()
        params[3] = math.log(1.2 * ratio)
        return problem.prior_terms(params)[2]

    for re_x in (1e5, 3e5):
        assert thickness_term((0.37 * re_x**-0.2) / (5.0 * re_x**-0.5)) == 0.0
    assert thickness_term(1.0) == 0.0
    assert abs(thickness_term(0.5)) > 0.9 and abs(thickness_term(8.0)) > 0.9


def test_the_spreading_prior_spans_laminar_and_turbulent_free_layers():
    # a free shear layer still laminar behind separation thickens as the square root of the
    # distance (a rate of order Re_x^-1/2, about 0.01 on a ball); a turbulent mixing layer at
    # 0.14-0.22 (U1 - U2)/(U1 + U2) (Brown & Roshko 1974, memory). Anything between is treated
    # alike; only faster spreading pays
    from core.side_fit import PRIOR_SPREAD, SPREADING_RATE, SideProblem

    problem = SideProblem.__new__(SideProblem)  # prior_terms reads only the prior's centre
    problem.log_delta_prior = 0.0
    reverse = 0.1
    ratio = (1.0 + reverse) / (1.0 - reverse)

    def spreading_term(rate):
        params = np.array([0.0, 0.2, 1.0, 0.0, rate * ratio, reverse, 0.5, 0.35, 0.5, 1.0, 1.0])
        return problem.prior_terms(params)[3]

    for rate in (0.01, 0.05, 0.14, 0.18, 0.22):
        assert spreading_term(rate) == 0.0, rate
    beyond = PRIOR_SPREAD[1] + SPREADING_RATE[1]  # one spread beyond the turbulent range's top
    assert spreading_term(beyond) == pytest.approx(1.0)


def test_a_slowly_spreading_free_layer_is_covered_by_its_uncertainty():
    # free layers that spread at a sixth of a turbulent mixing layer's rate (still laminar over
    # the band) on the physically built family; truth: Thwaites' separation (lambda = -0.09) on
    # the measured surface velocity and a blend with potential flow's. Before the spreading
    # prior spanned laminar layers, three of these four sides were picked 2.6-6.7 deg late
    # outside their stated uncertainty. At the stated 95 %, two misses or more in four have a
    # binomial chance of 1.4 %
    covered = []
    for seed in (3, 4):
        result, truth = _measure(physical_shot(
            (640, 800), radius_px=150.0, measured_share=(1.0, 0.5), departure_deg=(12.0, 8.0),
            layer_px=3.0, spreading_coefficient=0.03, seed=seed))
        covered += [abs(error) <= proposal.uncertainty_deg
                    for _, proposal, error in _picks(result, truth)]
    assert sum(covered) >= 3, covered


def test_a_fit_that_stopped_short_moves_to_the_better_profile_point():
    # a thin layer leaving at 15 deg whose refinement stops about 3 deg early: its profile
    # finds a better fit at the truth; it used to be read as a flat profile (40 deg uncertainty).
    # Truth: where the first family's wall shear changes sign (derived in core.synth_shot)
    result, truth = _measure(ball_shot(
        (768, 1024), radius_px=170.07689541612194, flight_deg=178.4574787375564,
        upper_deg=6.1008673540118075, lower_deg=25.77604525030023,
        leave_deg=(15.460416331044467, 10.08980991113668), layer_px=0.8740300776653576,
        wake_deflection_deg=-7.7299645584400345, reverse_fraction=0.07397355411574716,
        spread_rate=0.2992871751079341, seed=304))
    upper = result.separation.upper
    assert abs(upper.angle_deg - truth.upper_deg) <= 1.0, upper.budget
    assert upper.uncertainty_deg < 5.0, upper.budget


@pytest.mark.parametrize("flight_deg", [180.0, 3.0])
def test_attached_flow_proposes_nothing(flight_deg):
    # potential flow past a sphere: no wake, no vorticity (Batchelor 1967, memory)
    result, _ = _measure(attached_shot(flight_deg=flight_deg, seed=22))
    for proposal in (result.separation.upper, result.separation.lower):
        assert proposal.angle_deg is None
        assert "attached" in proposal.reason
    assert result.separation.wake_deflection_deg is None
    assert result.separation.wake_state == "undetermined"


def test_a_shadowed_side_is_refused_with_its_reason():
    # the ball blocks the sheet: no lit particle beside it on the far side from the light
    # (common practice: a laser shadow); light from below -> the upper side is dark
    result, _ = _measure(physical_shot(
        (640, 800), radius_px=150.0, shadow=True, light_from_deg=270.0, layer_px=4.0,
        seed=5))
    upper, lower = result.separation.upper, result.separation.lower
    assert upper.angle_deg is None and "too few particle images" in upper.reason
    assert lower.angle_deg is not None


def test_a_near_tangential_layer_is_covered_by_its_uncertainty():
    # a layer that leaves the wall almost tangentially (1 deg; the other side at 12 deg):
    # until both forms of the layer were fitted (LAYER_FORMS), the data could not tell its
    # start from its departure and only a wide uncertainty covered it; now it is placed within
    # half a degree here. Either way the stated uncertainty must hold the truth: where the
    # physically built family's layer separates, by Thwaites' method with Mangler's
    # transformation on Fage's measured surface velocity (memory; core.synth_physical)
    result, truth = _measure(physical_shot(
        (640, 800), radius_px=150.0, departure_deg=(1.0, 12.0), layer_px=5.0, seed=7))
    for side, proposal, error in _picks(result, truth):
        assert abs(error) <= proposal.uncertainty_deg
        assert abs(error) <= (1.0 if side == "upper" else 2.5), (side, error)


def test_a_seam_tripped_side_separates_later_and_is_covered_by_its_uncertainty():
    # the upper side tripped turbulent 40 deg from the front stagnation point (as a seam does):
    # Head's entrainment method separates it near 113 deg from there, the laminar side near
    # 81 deg (Thwaites on Fage's measured surface velocity); a sphere's turbulent layer leaves
    # at about 115-120 deg beyond the drag crisis (Achenbach 1972, J. Fluid Mech. 54:565;
    # memory). The method was not tuned on tripped layers: it picks them early (docs/
    # separation_accuracy.md, Known limits), here by 4-5.5 deg, inside the stated uncertainty
    result, truth = _measure(physical_shot(
        (640, 800), radius_px=150.0, measured_share=(0.1, 1.0), trip_deg=(40.0, None),
        departure_deg=(10.0, 12.0), speed_m_s=32.0, seed=3))
    picks = {side: (proposal, error) for side, proposal, error in _picks(result, truth)}
    for proposal, error in picks.values():
        assert abs(error) <= proposal.uncertainty_deg, (proposal.angle_deg, error)
    assert truth.upper_deg - truth.lower_deg > 30.0
    upper, lower = picks["upper"][0], picks["lower"][0]
    assert upper.angle_deg - lower.angle_deg > 20.0  # the asymmetry a swinging ball shows
    assert abs(picks["lower"][1]) <= 1.5
    assert -7.0 <= picks["upper"][1] <= 1.0


def test_glare_over_the_separation_point_widens_the_uncertainty_across_it():
    # a glint where the sheet meets a white ball, right where the lower layer leaves the wall
    # (a thick layer; 8-bit camera): the saturated pixels hide the wall there (common practice:
    # glare is masked, not read), so the pick may be anywhere under them. This side was picked
    # 19.8 deg early with 16.9 deg stated before the hidden wall was a budget entry
    # (benchmarks/bench_separation.py's kinematic shot 44 of seed 11, to the digit: the pick
    # there is chaotic, rounded values land it elsewhere)
    frames = ball_shot((768, 1024), radius_px=187.3177385686872, flight_deg=183.70807652241191,
                       upper_deg=24.316397437631814, lower_deg=-5.18552233053296,
                       leave_deg=(15.440600964751743, 19.32944489867276),
                       layer_px=4.387943858513065, wake_deflection_deg=-2.158683765195871,
                       reverse_fraction=0.15953037021105765, spread_rate=0.24145850569808616,
                       seed=344, surface="bright", rim=True, uneven_sheet=0.5195883154870913,
                       bits=8, glint=True)
    result, truth = _measure(frames)
    lower = result.separation.lower
    assert "glare hides the wall" in lower.reason
    # the interval is widened across the hidden stretch where the other entries fall short of
    # it (since 0.3.15 this side's other minima alone reach across it: 3.2 +- 38.8 deg), and only
    # there; the reach itself: test_the_reach_across_hidden_wall below
    others = COVERAGE_K * math.sqrt(sum(v * v for k, v in lower.budget.items()
                                        if k != "hidden wall"))
    assert ("hidden wall" in lower.budget) == (others < lower.uncertainty_deg - 0.01)
    # every source the budget names has its few words in the readout's tip
    from app.review.text import BUDGET_GLOSS

    assert set(lower.budget) | set(result.separation.upper.budget) <= set(BUDGET_GLOSS)
    total = COVERAGE_K * math.sqrt(sum(v * v for v in lower.budget.values()))
    assert lower.uncertainty_deg == pytest.approx(total, abs=0.01)
    assert abs(lower.angle_deg - truth.lower_deg) <= lower.uncertainty_deg
    # the arc the glint hides deep into the air (14 px from the outline), from the masked
    # pixels: the stated interval reaches across it
    glare = glare_mask(frames[0])
    ys, xs = np.nonzero(glare)
    centre = truth.center_a_px
    outside = np.abs(np.hypot(xs - centre[0], ys - centre[1]) - truth.radius_px - 14.0) <= 1.0
    arc = [angle_of_point(centre, truth.flight_deg, "lower", (x, y))
           for x, y in zip(xs[outside], ys[outside], strict=True)]
    assert lower.angle_deg - lower.uncertainty_deg <= min(arc) < max(arc) \
        <= lower.angle_deg + lower.uncertainty_deg
    assert "glare" not in result.separation.upper.reason


class _Band:
    """The parts of a band :func:`_hidden_wall_reach` reads: its angles and the hidden ones."""

    def __init__(self, hidden_deg):
        self.phi_grid = np.arange(-50.0, 80.5, 1.0)
        self.hidden = np.zeros(self.phi_grid.size, dtype=bool)
        for lo, hi in hidden_deg:
            self.hidden |= (self.phi_grid >= lo) & (self.phi_grid <= hi)

    def wall_hidden(self):
        return self.hidden


@pytest.mark.parametrize(("hidden_deg", "phi_s", "uncertainty", "reach", "remark"), [
    ([], 0.0, 5.0, None, None),  # nothing hidden
    ([(20.0, 30.0)], 0.0, 5.0, None, None),  # out of reach
    ([(3.0, 9.0)], 0.0, 5.0, 10.0, "from 2° to 10°"),  # touched: widened to its far end
    ([(3.0, 11.0), (13.0, 20.0)], 0.0, 5.0, 21.0, "from 2° to 21°"),  # joined one by one
    ([(-2.0, 1.0)], 0.0, 5.0, 5.0, "from -3° to 2°"),  # inside the reach: named only
    ([(-50.0, -40.0)], -35.0, 4.0, 16.0, "to the band's end"),  # its end is not seen
    ([(3.0, 9.0)], 0.0, math.nan, None, None),  # no number, no loop
])
def test_the_reach_across_hidden_wall(hidden_deg, phi_s, uncertainty, reach, remark):
    # the layer may leave the wall anywhere under the glare, up to the next angle seen (1 deg
    # apart here)
    from types import SimpleNamespace

    from core.separation import _hidden_wall_reach

    problem = SimpleNamespace(band=_Band(hidden_deg))
    got = _hidden_wall_reach(problem, phi_s, uncertainty)
    if reach is None:
        assert got is None
    else:
        assert got[0] == pytest.approx(reach)
        assert remark in got[1]


def test_a_hidden_stretch_beyond_the_stated_reach_widens_it_by_its_own_entry(monkeypatch):
    # where the hidden wall reaches further than the other entries, the interval is widened to
    # its far end and the budget names what it adds, so the entries still add up
    import core.separation

    monkeypatch.setattr(core.separation, "_hidden_wall_reach",
                        lambda problem, phi_s, uncertainty: (50.0, "glare hides the wall (stand-in)"))
    result, _ = _measure(ball_shot((600, 800), radius_px=150.0, seed=8))
    side = result.separation.upper
    assert side.uncertainty_deg == pytest.approx(50.0, abs=0.01)
    assert side.budget["hidden wall"] > 0.0
    total = COVERAGE_K * math.sqrt(sum(v * v for v in side.budget.values()))
    assert total == pytest.approx(50.0, abs=0.02)
    assert "stand-in" in side.reason


def test_the_budget_adds_up_to_the_uncertainty():
    # an expanded uncertainty: COVERAGE_K times the root sum of squares of the sources
    result, _ = _measure(ball_shot((600, 800), radius_px=150.0, seed=8))
    side = result.separation.upper
    total = COVERAGE_K * math.sqrt(sum(v * v for v in side.budget.values()))
    assert side.uncertainty_deg == pytest.approx(total, abs=0.01)
    assert {"fit", "circle", "flight", "model form", "prior"} <= set(side.budget)


@pytest.mark.parametrize("departure_deg", [0.0, 2.0, 10.0, 25.0])
def test_extrapolation_is_the_arc_over_which_a_straight_line_rises_through_the_depth(
        departure_deg):
    # plane geometry (derived, checked by construction): walk a straight line from a point of a
    # circle of radius R at the departure angle from the tangent until its distance from the
    # centre is R + h; the arc on the circle up to that point is the extrapolation entry
    radius, layer = 200.0, 5.0
    depth = EXTRAPOLATION_DEPTH * layer
    beta = math.radians(departure_deg)
    s = np.linspace(0.0, 200.0, 2_000_001)
    x, y = s * math.cos(beta), radius + s * math.sin(beta)  # from (0, R), tangent along +x
    reached = np.argmax(np.hypot(x, y) >= radius + depth)
    arc_deg = math.degrees(math.atan2(x[reached], y[reached]))
    params = [0.0, math.tan(beta), 1.0, math.log(layer)]
    assert extrapolation_deg(params, radius) == pytest.approx(arc_deg, abs=1e-3)
    if departure_deg >= 10.0:  # a steep line: depth over slope
        assert extrapolation_deg(params, radius) == pytest.approx(
            math.degrees(depth / (radius * math.tan(beta))), rel=0.1)


def test_an_alternative_that_changes_nothing_moves_the_angle_by_nothing(monkeypatch):
    # the budget's circle, model-form and prior entries are refits from the best fit under the
    # alternative: redone under the model itself, the fit stays about where it was (a
    # linearised step from the best fit moved it by about 0.1 deg, up to several, on both
    # synthetic families; a refit moves it by what the best fit had left to converge: 0.26 deg
    # here since 0.3.16 (another start wins on one side), 0.12 before, under 0.05 before that)
    from core import separation

    seen = []
    budget = separation._uncertainty_budget

    def keep(problem, best, ball, rises):
        seen.append((problem, best))
        return budget(problem, best, ball, rises)

    monkeypatch.setattr(separation, "_uncertainty_budget", keep)
    _measure(ball_shot((600, 800), radius_px=150.0, seed=8))
    assert len(seen) == 2
    for problem, best in seen:
        assert abs(separation._refit_shift(problem, best)) < 0.3
        doubled = replace(problem.geom, wall_fraction=2.0 * problem.geom.wall_fraction)
        assert separation._refit_shift(problem, best, geom=doubled) != 0.0


def test_the_settling_arc_shapes_the_attached_layer_and_the_no_slip_length_the_wall():
    # the model-form check refits with the settling arc and the no-slip length halved and
    # doubled; by the model's definition (core/layer_model.py) the settling arc acts ahead of
    # separation only, and the no-slip length everywhere at the wall
    phi = np.arange(-30.0, 40.0, 0.5)
    gaps = np.arange(2.0, 16.0, 0.5)
    geom = SideGeometry(150.0, phi, gaps)
    params = [5.0, math.tan(math.radians(10.0)), 1.0, math.log(3.0), 0.2, 0.1, 0.5, 0.35, 0.5,
              1.0, 1.0]
    outer = np.ones(phi.size * gaps.size), np.zeros(phi.size * gaps.size)
    base = side_flow(geom, params, *outer)[0].reshape(phi.size, gaps.size)
    arc = side_flow(replace(geom, upstream_deg=0.5 * geom.upstream_deg), params,
                    *outer)[0].reshape(phi.size, gaps.size)
    wall = side_flow(replace(geom, wall_fraction=2.0 * geom.wall_fraction), params,
                     *outer)[0].reshape(phi.size, gaps.size)
    ahead = phi < 4.0
    assert np.abs(arc - base)[ahead].max() > 0.01
    assert np.array_equal(arc[phi >= 5.0], base[phi >= 5.0])
    assert np.abs(wall - base)[~ahead].max() > 0.01


def test_wake_state_threshold():
    def side(angle, unc=1.0):
        return SideProposal(angle, unc)

    assert wake_state(side(10.0), side(6.0)) == "no clear difference"  # 4 deg < 5 deg
    assert wake_state(side(10.0), side(2.0)) == "upper side holds on longer"
    assert wake_state(side(0.0, 9.0), side(10.0, 9.0)) == "no clear difference"  # within hypot(9, 9)
    assert wake_state(side(None), side(3.0)) == "undetermined"


def test_dividing_line_leaves_the_outline_at_the_departure_angle():
    radius, phi_s, leave = 60.0, 12.0, 10.0
    slope = math.tan(math.radians(leave))
    phi = np.array([11.0, 12.0, 20.0, 35.0])
    # a line that does not turn (its final heading is its first one) is straight
    gap = dividing_line_px(radius, phi_s, slope, 1e9, phi, final_deg=leave - phi_s)
    assert gap[0] == 0.0 and gap[1] == pytest.approx(0.0, abs=1e-9)
    # a line leaving a circle of radius R at angle b from the tangent at polar angle p_s lies at
    # R cos b from the centre, its foot at p_s - b: r(p) = R cos b / cos(p - p_s + b) (derived)
    b = math.radians(leave)
    expected = radius * math.cos(b) / np.cos(np.radians(phi[2:] - phi_s) + b) - radius
    assert gap[2:] == pytest.approx(expected, rel=1e-3)


def test_layer_profile_has_unit_vorticity_thickness_and_its_zero_where_stated():
    # vorticity thickness = velocity difference / largest slope (derived): both profiles are
    # scaled to a largest slope of 1 per thickness
    x = np.linspace(-2.0, 2.0, 4001)
    for shape in ("erf", "quartic"):
        slope = np.gradient(profile(x, shape), x)
        assert slope.max() == pytest.approx(1.0, abs=2e-3)
        # the flow -r + (1 + r) profile(x) vanishes c thicknesses below the centre
        for reverse in (0.05, 0.2):
            c = centre_offset(reverse, shape)
            assert -reverse + (1 + reverse) * profile(np.array(-c), shape) == pytest.approx(
                0.0, abs=1e-6)


def test_layer_curves_start_on_the_outline_at_the_pick():
    layer = {"phi_s": 8.0, "slope": 0.2, "relax": 1.0, "log_delta": math.log(2.0),
             "spread": 0.2, "reverse": 0.1, "final_deg": 0.0, "band_first_gap_px": 2.0,
             "band_last_gap_px": 16.0, "window_deg": [-17.0, 48.0]}
    curves = layer_curves((300.0, 200.0), 100.0, 180.0, "upper", layer)
    start = curves["dividing"][0]
    assert math.hypot(start[0] - 300.0, start[1] - 200.0) == pytest.approx(100.0, abs=1e-6)
    # upper side, flight to the left: the pick 8 deg behind the top lies right of the top
    assert start[1] < 200.0 and start[0] > 300.0
    assert np.all(np.hypot(*(curves["centre"] - (300.0, 200.0)).T) > 100.0)


@pytest.mark.parametrize("growth", [1.0, 0.0])
def test_the_layer_form_says_which_line_keeps_to_the_departure_path(growth):
    # a plane mixing layer spreads into both streams; which of its lines keeps straight behind
    # separation is not known: its dividing line (the growth all outward, the centre rising
    # by the profile's offset times the growth) or its centre (the growth even about it)
    layer = {"phi_s": 0.0, "slope": 0.0, "relax": 1.0, "log_delta": math.log(2.0),
             "spread": 0.2, "reverse": 0.1, "final_deg": 0.0, "outward_growth": growth,
             "band_first_gap_px": 2.0, "band_last_gap_px": 16.0, "window_deg": [-25.0, 40.0]}
    curves = layer_curves((300.0, 200.0), 100.0, 180.0, "upper", layer, reach_deg=20.0)
    apart = np.hypot(*(curves["centre"] - curves["dividing"]).T)
    offset = centre_offset(0.1) * 2.0  # at separation: the offset times the thickness
    assert apart[0] == pytest.approx(offset, rel=1e-6)
    arc = math.radians(20.0) * 100.0
    assert apart[-1] == pytest.approx(offset + growth * centre_offset(0.1) * 0.2 * arc,
                                      rel=0.02)


def test_a_layer_whose_centre_keeps_to_a_tangential_path_is_placed_at_separation():
    # the physically built family's layers keep their centre on the departure path; one leaving
    # Thwaites' separation point at 0.8 deg was picked 6.2 deg late (5.8 deg stated) while the
    # model let only its dividing line keep to the path (then its centre rises by the profile's
    # offset times the mixing-layer growth, some 8 deg worth, whatever the departure); fitted
    # in both forms, the better one kept, it is placed within a degree
    from core.synth_physical import physical_cases

    result, truth = _measure(physical_shot(**physical_cases(1, 11)[0]))
    lower = result.separation.lower
    assert lower.layer["outward_growth"] == 0.0
    assert abs(lower.angle_deg - truth.lower_deg) < 1.0 <= lower.uncertainty_deg
    # the other form's best fit (late, as before) is a budget entry: the form is not known
    # (3 deg is ours: the other form's fit lies 5.9 deg away on this shot today, and
    # the 6.2 deg it was picked late before says the entry must not be small)
    assert lower.budget["layer form"] > 3.0


def test_first_family_separates_where_its_wall_shear_changes_sign():
    # the truth of the first family: just outside the wall the flow is (1 - w (1 + r)) times
    # the potential flow, so the wall shear changes sign where w = 1 / (1 + r) (derived)
    flow = BallWakeFlow((200.0, 150.0), 60.0, (-8.0, 0.0), 180.0, 12.0, 12.0,
                        reverse_fraction=0.1, no_slip_px=1.5, spread_rate=0.2)
    sep = flow.separation_deg("upper")
    from core.geometry import point_at_angle

    def tangential(angle):
        x0, y0 = point_at_angle((200.0, 150.0), 60.05, 180.0, "upper", angle)
        x1, y1 = point_at_angle((200.0, 150.0), 60.05, 180.0, "upper", angle + 0.01)
        ux, uy = flow(np.array([x0]), np.array([y0]))
        return float((ux[0] + 8.0) * (x1 - x0) + uy[0] * (y1 - y0))  # ball frame, rearward

    assert tangential(sep - 1.0) > 0 > tangential(sep + 1.0)


def test_smoothed_frames_keep_the_cost_rising_with_the_motion_error_further_out():
    # Gaussian scale space (Witkin 1983; Lindeberg 1994; memory): smoothing commutes with a
    # translation, so a pair that is one image moved as a whole still matches exactly at the
    # true motion, and the matching cost of a motion e px wrong follows 1 - R(e), R the
    # autocorrelation of the particle images, whose width grows with the smoothing. On the
    # sharp frames the cost has saturated a few px out; smoothed by 2 px it still rises.
    from scipy import ndimage

    from core.near_wall import BallMotion, NearWallBand

    frame_a, _, truth = ball_shot((260, 360), radius_px=60.0, seed=4, density_ppp=0.05)
    shift = 12.0
    frame_b = ndimage.shift(frame_a, (0.0, shift), order=3, mode="nearest")
    centre = (truth.center_a_px[0] + 0.5 * shift, truth.center_a_px[1])
    ball = BallMotion(centre, 60.0, (shift, 0.0), 0.0)  # the ball flies toward +x
    band = NearWallBand(frame_a, frame_b, ball, "upper", phi_deg=(-40.0, 40.0),
                        gap_px=(2.0, 14.0), max_speed_px=2.0 * shift, arc_step_px=1.5)
    assert band.blurred(0.0) is band

    def costs(b, errors):
        zero = np.zeros(b.phi.size)
        return np.array([np.mean(b.residual(zero + e, zero) ** 2) for e in errors])

    errors = np.arange(0.0, 9.0, 1.0)
    sharp, smooth = costs(band, errors), costs(band.blurred(2.0), errors)
    # at the true motion both match (to the cubic resampling's error)
    assert sharp[0] < 0.02 * sharp[-1] and smooth[0] < 0.02 * smooth[-1]
    # sharp: nearly saturated 3 px out; smoothed: still well short of its far level
    assert sharp[3] > 0.8 * sharp[-1]
    assert smooth[3] < 0.6 * smooth[-1]
    assert np.all(np.diff(smooth) > 0)
    # the same samples, the same ones left out
    np.testing.assert_array_equal(band.blurred(2.0).phi, band.phi)


def test_starts_further_apart_than_a_fit_window_are_compared_on_the_whole_band(monkeypatch):
    # the refinements' starts are compared on the samples every refinement saw; starts more
    # than a window's width apart (frames A and B of different shots gave -38 and +40 deg)
    # share none, and the comparison then takes the whole band instead of failing
    from core import separation

    def far_apart(problem):
        return [problem.start(-38.0), problem.start(40.0)], 1.0  # any cost: the gain is checked

    monkeypatch.setattr(separation, "_coarse_search", far_apart)
    result, truth = _measure(ball_shot((600, 800), radius_px=150.0, upper_deg=12.0,
                                       lower_deg=4.0, seed=8))
    for side, proposal, error in _picks(result, truth):
        # started far from the truth (12 and 4 deg, the generator's), the fits land far from
        # it too, and their uncertainty says so
        assert abs(error) <= proposal.uncertainty_deg, (side, error, proposal.budget)


def test_the_uncertainty_covers_the_other_family_without_being_inflated():
    # COVERAGE_K was chosen on the kinematic family; on six shots of the physical family from a
    # draw set apart from the accuracy tables' (seed 78: 12 sides) the expanded uncertainty U
    # must cover the truth as stated (95 %: ten or more of twelve; nine or fewer has a
    # binomial chance of 2 %) and must not be wider than the errors call for. For normal errors
    # and U = 1.96 standard deviations the median of |error| / U is 0.34 (derived); heavier
    # tails (thin and near-tangential layers, which set the factor) lower it, to 0.2-0.25 here;
    # under 0.13 (ours) the interval would be about twice as wide as needed
    from core.synth_physical import physical_cases

    ratios = []
    for case in physical_cases(6, 78):
        frame_a, frame_b, truth = physical_shot(**case)
        result = measure_shot(frame_a, frame_b, _settings(truth))
        for side in ("upper", "lower"):
            proposal = getattr(result.separation, side)
            assert proposal.angle_deg is not None, (side, proposal.reason)
            error = abs(proposal.angle_deg - getattr(truth, f"{side}_deg"))
            ratios.append(error / proposal.uncertainty_deg)
    assert sum(r <= 1.0 for r in ratios) >= 10, ratios
    assert np.median(ratios) >= 0.13, ratios


def test_each_spreading_rate_keeps_a_refinement_start():
    # slowly spreading layers far behind the truth once took both starts of a side (the physical
    # family with sparse seeding: picked 19.3 deg late, 5.7 stated); the turbulent layer near
    # the truth, which fits far better once refined, was never refined
    from core.separation import COARSE_SPREADING, _each_rate
    from core.side_fit import SideProblem

    problem = SideProblem.__new__(SideProblem)  # start() reads only the thickness prior
    problem.log_delta_prior = 0.0
    slow, fast = COARSE_SPREADING
    scored = [(1.0, problem.start(18.5, spreading=slow)), (2.0, problem.start(15.5, spreading=slow)),
              (5.0, problem.start(-2.0, spreading=fast)), (6.0, problem.start(-5.0, spreading=fast))]
    kept = _each_rate(scored[:2], scored)
    assert [item[1][0] for item in kept] == [18.5, 15.5, -2.0]
    # nothing added where both rates are kept already
    assert _each_rate([scored[0], scored[2]], scored) == [scored[0], scored[2]]
