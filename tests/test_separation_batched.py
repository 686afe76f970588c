"""Many models at once give, row by row, exactly what one model at a time gives.

The separation fit evaluates its models in batches (the coarse search's candidates) for speed;
these checks hold the batched paths to the one-at-a-time ones, bit for bit, so that batching
cannot move a proposal. The fit's Jacobian is held to numerical differentiation, and the
compiled loops to the numpy formulas they replace.
"""

import copy
import math

import numba
import numpy as np
import pytest
from scipy import ndimage

from core.layer_model import (
    PARAM_NAMES,
    _gradient,
    _profile_value,
    _spacing,
    centre_offset,
    dividing_line_px,
    dividing_lines_px,
    profile,
    side_flow,
)
from core.near_wall import (
    BallMotion,
    JointBand,
    NearWallBand,
    OuterStream,
    _bilinear,
    side_axes,
)
from core.resample import cubic_resampled, spline_values
from core.side_fit import SideProblem
from core.synth_shot import ball_shot

RADIUS_PX = 60.0


@pytest.fixture(scope="module")
def problem():
    frame_a, frame_b, truth = ball_shot((260, 360), radius_px=RADIUS_PX, seed=4)
    centre = tuple(0.5 * (a + b) for a, b in zip(truth.center_a_px, truth.center_b_px,
                                                 strict=True))
    shift = float(np.hypot(*truth.displacement_px))
    ball = BallMotion(centre, RADIUS_PX, truth.displacement_px, truth.flight_deg)
    band = NearWallBand(frame_a, frame_b, ball, "upper", phi_deg=(-30.0, 50.0),
                        gap_px=(2.0, 14.0), max_speed_px=2.0 * shift, arc_step_px=1.5)
    coef_t = np.zeros(10)
    coef_t[0], coef_t[4] = 0.9 * shift, 0.5
    coef_r = np.zeros(6)
    coef_r[1] = 0.3
    outer = OuterStream(coef_t, coef_r, RADIUS_PX, (-30.0, 30.0))
    side = SideProblem(band, outer, final_deg=4.0, log_delta_prior=np.log(1.5))
    side.sigma = 0.7
    return side


def _models(problem, count=7, seed=0):
    """Models that differ from each other in every parameter (and two that share a line)."""
    rng = np.random.default_rng(seed)
    base = problem.start(8.0, leave_deg=10.0)
    spread = np.array([6.0, 0.08, 0.4, 0.3, 0.03, 0.05, 0.2, 0.2, 0.3, 0.1, 0.2])
    table = base + spread * rng.uniform(-1.0, 1.0, (count, len(PARAM_NAMES)))
    table[1, :3] = table[0, :3]  # same dividing line, other layer
    return table


def _one_moved(problem):
    """A model and one copy per parameter with that parameter moved: most share their layer's
    profile or their no-slip length, which the batch computes once for them (as the search's
    candidates that differ in ``follow`` do)."""
    base = problem.start(8.0, leave_deg=10.0)
    return np.vstack([base, base + np.diag(1e-3 * np.maximum(1.0, np.abs(base)))])


@pytest.mark.parametrize("shape", ["erf", "quartic"])
@pytest.mark.parametrize("models", [_models, _one_moved])
def test_side_flow_of_many_models_equals_one_at_a_time(problem, shape, models):
    table = models(problem)
    u_t, u_r = side_flow(problem.geom, table, problem.u_t, problem.u_r, shape)
    assert u_t.shape == u_r.shape == (len(table), problem.u_t.size)
    for row, (t_row, r_row) in zip(table, zip(u_t, u_r, strict=True), strict=True):
        one_t, one_r = side_flow(problem.geom, row, problem.u_t, problem.u_r, shape)
        np.testing.assert_array_equal(t_row, one_t)
        np.testing.assert_array_equal(r_row, one_r)


@pytest.mark.parametrize("shape", ["erf", "quartic"])
@pytest.mark.parametrize("models", [_models, _one_moved])
def test_compiled_flow_is_the_models_formulas(problem, shape, models):
    # the per-sample loop is compiled; here the model of core/layer_model.py's docstring is
    # written out with numpy, one model at a time, on the same dividing lines
    geom = problem.geom
    phi, gap = geom.phi_grid[:, None], geom.gap_grid[None, :]
    u_t_out = problem.u_t.reshape(phi.size, -1)
    u_r_out = problem.u_r.reshape(phi.size, -1)
    table = models(problem)  # the Jacobian-like rows share layers and no-slip lengths
    u_t, u_r = side_flow(geom, table, problem.u_t, problem.u_r, shape)
    for k, row in enumerate(table):
        phi_s, slope, relax, log_delta, spread, r, drop, thin, follow, k_t, k_r = row
        q = 1.0 - np.exp(-np.clip(phi_s - phi, 0.0, None) / geom.upstream_deg)
        delta_s = np.exp(log_delta)
        delta = delta_s * (1.0 - thin * q) + spread * np.clip(np.radians(phi - phi_s), 0, None) \
            * geom.radius_px
        lift = dividing_line_px(geom.radius_px, phi_s, slope, relax * geom.radius_px,
                                geom.phi_grid, geom.final_deg)[:, None]
        rise = np.gradient(lift[:, 0], np.radians(geom.phi_grid) * geom.radius_px)[:, None]
        centre = lift + centre_offset(r, shape) * delta * (1.0 - drop * q)
        wall = 1.0 - np.exp(-gap / (geom.wall_fraction * delta_s * (1.0 - thin * q)))
        across = profile((gap - centre) / delta, shape)
        along = k_t * u_t_out * (-r + (1.0 + r) * across) * wall
        under = 1.0 - profile((gap - centre - delta) / delta, shape)
        radial = k_r * u_r_out * across * wall + follow * along * rise * under
        # px per pair; the compiled profile is tabulated to 2e-11 (the test below)
        np.testing.assert_allclose(u_t[k], along.ravel(), rtol=0, atol=1e-9)
        np.testing.assert_allclose(u_r[k], radial.ravel(), rtol=0, atol=1e-9)


def test_compiled_error_function_profile_is_scipys_to_within_its_table():
    # the compiled loop interpolates the profile in a table (core/layer_model.py); against
    # scipy.special.erf (through core.layer_model.profile) and the profile's slope exp(-pi x^2)
    x = np.linspace(-6.0, 6.0, 400_001)
    values = _profiles_compiled(x)
    np.testing.assert_allclose(values, profile(x), rtol=0, atol=2e-11)
    slope = np.diff(values) / np.diff(x)
    middle = 0.5 * (x[1:] + x[:-1])
    np.testing.assert_allclose(slope, np.exp(-np.pi * middle**2), rtol=0, atol=2e-8)
    assert _profiles_compiled(np.array([np.nextafter(4.0, 0.0), -4.0, np.nan]))[:2].tolist() \
        == [1.0, 0.0]  # the table's last point, its edge
    assert np.isnan(_profiles_compiled(np.array([np.nan]))[0])


@pytest.mark.parametrize("beyond", [0.0, 0.5])
def test_cubic_resampling_is_scipys(beyond):
    # the band's pictures are resampled by a compiled cubic B-spline where every point lies in
    # the picture (its first and last samples included), by scipy's map_coordinates otherwise
    # (the second case: one point half a sample past the last column): against scipy's
    # map_coordinates (order 3, edge repeated) on a picture of white noise (the spline's tails
    # at their largest)
    rng = np.random.default_rng(5)
    picture = rng.uniform(0.0, 4000.0, (40, 70))
    rows = rng.uniform(0.0, 39.0, (300, 50))
    cols = rng.uniform(0.0, 69.0, (300, 50))
    rows[0, :4], cols[0, :4] = [0.0, 39.0, 0.0, 39.0], [0.0, 0.0, 69.0, 69.0 + beyond]
    expected = ndimage.map_coordinates(picture, [rows, cols], order=3, mode="nearest")
    tolerance = 1e-14 * np.abs(picture).max()  # rounding
    np.testing.assert_allclose(cubic_resampled(picture, rows, cols), expected, rtol=0,
                               atol=tolerance)
    np.testing.assert_allclose(cubic_resampled(picture, rows[1], cols[1]), expected[1],
                               rtol=0, atol=tolerance)
    # from coefficients, in their single precision, as the ball finder samples its rays:
    # scipy's sums rounded to single precision alike
    coefficients = ndimage.spline_filter(picture, 3, output=np.float32, mode="nearest")
    inner_rows, inner_cols = 1.0 + rows * (36.0 / 39.0), 1.0 + cols * (66.0 / 69.0)
    values = spline_values(coefficients, inner_rows, inner_cols)
    assert values.dtype == np.float32
    np.testing.assert_allclose(values, ndimage.map_coordinates(
        coefficients, [inner_rows, inner_cols], order=3, mode="nearest", prefilter=False),
        rtol=1e-6, atol=1e-6 * np.abs(picture).max())


@numba.njit
def _profiles_compiled(x):
    out = np.empty_like(x)
    for i in range(x.size):
        out[i] = _profile_value(x[i], False)
    return out


def test_compiled_loops_work_where_no_cache_folder_can_be_written(monkeypatch):
    # numba refuses cache=True when neither __pycache__ nor a user cache folder is writable
    # (a read-only install and home): core.compiled then compiles without a cache
    import core.compiled

    real = numba.njit

    def refusing(*args, cache=False, **options):
        if cache:
            raise RuntimeError("cannot cache function 'f': no locator available for file")
        return real(*args, **options)

    monkeypatch.setattr(core.compiled.numba, "njit", refusing)

    def twice(x):
        return 2.0 * x

    assert core.compiled.compiled(twice)(1.5) == 3.0


def test_band_residual_of_many_models_equals_one_at_a_time(problem):
    u_t, u_r = problem.flow(_models(problem))
    band = problem.band
    joint = JointBand([band, band.view()])
    many, many_joint = band.residual(u_t, u_r), joint.residual(u_t, u_r)
    assert many_joint.shape == (len(u_t), 2 * band.phi.size)
    for k in range(len(u_t)):
        np.testing.assert_array_equal(many[k], band.residual(u_t[k], u_r[k]))
        np.testing.assert_array_equal(many_joint[k], joint.residual(u_t[k], u_r[k]))


def test_band_residual_of_many_models_leaves_the_same_samples_out(problem):
    mask = np.zeros((260, 360), dtype=bool)
    cx, cy = (int(v) for v in problem.band.ball.center_px)
    mask[cy - 75:cy - 55, cx - 10:cx + 10] = True  # a glint over part of the upper band
    band = problem.band.view()
    band.leave_out((mask, None), 2.0)
    assert 0.0 < band.kept_fraction < 1.0
    u_t, u_r = problem.flow(_models(problem))
    many = band.residual(u_t, u_r)
    for k in range(len(u_t)):
        np.testing.assert_array_equal(many[k], band.residual(u_t[k], u_r[k]))


def _band_beside_a_glint(problem):
    """A glint masked in frame A above the ball, and the band with the samples near it left
    out (2 px reach)."""
    mask = np.zeros((260, 360), dtype=bool)
    cx, cy = (int(v) for v in problem.band.ball.center_px)
    mask[cy - 75:cy - 55, cx - 10:cx + 10] = True
    band = problem.band.view()
    band.leave_out((mask, None), 2.0)
    return mask, band


def test_samples_left_out_for_glare_are_those_near_it_and_count_zero(problem):
    # a glint masked in frame A: the band's samples within reach of it (2 px, plus the lookup's
    # own pixel) drop out of every residual, and none farther away does
    mask, band = _band_beside_a_glint(problem)
    residual = band.residual(*problem.flow(problem.start(8.0)))
    dropped = residual == 0.0
    ball = band.ball
    (ex, ey), _ = side_axes(ball.flight_deg, band.side, band.phi)
    x = ball.center_px[0] - 0.5 * ball.displacement_px[0] + band.rho * ex  # frame A's samples
    y = ball.center_px[1] - 0.5 * ball.displacement_px[1] + band.rho * ey
    distance = ndimage.map_coordinates(ndimage.distance_transform_edt(~mask), [y, x], order=1)
    assert 0 < dropped.sum() < dropped.size
    assert distance[dropped].max() <= 2.0 + 1.5
    assert not dropped[distance > 2.0 + 1.5].any()


def test_smoothed_band_leaves_out_the_glare_three_sigma_further(problem):
    # a Gaussian spreads light over about three sigma (common practice: 99.7 % within it)
    _, band = _band_beside_a_glint(problem)
    smooth = band.blurred(1.0)
    flow = problem.flow(problem.start(8.0))
    sharp_out = band.residual(*flow) == 0.0
    smooth_out = smooth.residual(*flow) == 0.0
    assert np.all(smooth_out[sharp_out]) and smooth_out.sum() > sharp_out.sum()
    # within reach of the sharp band's left-out samples (the square window's corner, 3 sqrt 2
    # px, and half a px for the samples' spacing)
    left = np.column_stack([band.phi[sharp_out], band.rho[sharp_out]])
    arc = np.radians(1.0) * band.rho
    for k in np.nonzero(smooth_out & ~sharp_out)[0]:
        distance = np.min(np.hypot((left[:, 0] - band.phi[k]) * arc[k], left[:, 1] - band.rho[k]))
        assert distance <= 3.0 * math.sqrt(2.0) + 0.5


def test_costs_and_scores_of_many_models_equal_one_at_a_time(problem):
    table = _models(problem)
    residuals = problem.residuals(table)
    costs = problem.data_cost(table)
    scores = problem.score(table)
    for k, row in enumerate(table):
        np.testing.assert_array_equal(residuals[k], problem.residuals(row))
        assert costs[k] == problem.data_cost(row)
        assert scores[k] == problem.score(row)


def test_costs_of_many_models_in_several_batches_equal_one_batch(problem, monkeypatch):
    table = _models(problem, count=9)
    whole = problem.data_cost(table)
    monkeypatch.setattr("core.side_fit.BATCH_SAMPLES", 2 * problem.band.phi.size)
    np.testing.assert_array_equal(problem.data_cost(table), whole)


def _inside_the_priors(problem, phi_s=8.0):
    """A model away from the priors' range ends (where their slopes jump)."""
    return problem.start(phi_s, leave_deg=10.0, delta_factor=1.6)


def _outside_the_priors(problem, phi_s=8.0):
    """A model beyond the priors' ranges where they have them, within the fit's bounds: steeper
    than 25 deg, thicker than ``PRIOR_THICKER`` laminar thicknesses, more reverse flow, drop
    and thinning than treated alike."""
    params = problem.start(phi_s, leave_deg=29.0, delta_factor=6.0, reverse=0.4)
    params[PARAM_NAMES.index("drop")] = 1.1
    params[PARAM_NAMES.index("thin")] = 0.8
    return params


def _differenced(residuals, params, step=1e-7):
    """Central differences of ``residuals`` by each parameter (steps small enough to stay in
    most of the bilinear lookups' cells, large enough to stay clear of rounding)."""
    columns = []
    for j in range(params.size):
        h = step * max(1.0, abs(params[j]))
        up, down = params.copy(), params.copy()
        up[j] += h
        down[j] -= h
        columns.append((residuals(up) - residuals(down)) / (2.0 * h))
    return np.stack(columns, axis=1)


def _column_errors(jacobian, numeric):
    """Each column's distance from numerical differentiation, relative to its size."""
    assert jacobian.shape == numeric.shape
    assert np.all(np.linalg.norm(numeric, axis=0) > 0)  # every parameter moves the residuals
    return np.linalg.norm(jacobian - numeric, axis=0) / np.linalg.norm(numeric, axis=0)


#: How closely the Jacobian must follow numerical differentiation of the residuals, column by
#: column (a wrong term is off by its own size; the differences' steps cross a few cells).
JACOBIAN_TOLERANCE = 1e-3


@pytest.mark.parametrize("shape", ["erf", "quartic"])
@pytest.mark.parametrize("growth", [1.0, 0.0])
@pytest.mark.parametrize("phi_s", [-4.0, 8.0, 30.0])
@pytest.mark.parametrize("model", [_inside_the_priors, _outside_the_priors])
def test_the_models_jacobian_is_the_residuals_derivative(problem, shape, growth, phi_s, model):
    # the fit's Jacobian is worked out by the chain rule (core.layer_model.side_flow_slopes,
    # the lookups' slopes, the priors' slopes); numerical differentiation of the residuals is
    # the outside check
    form = problem.with_growth(growth)
    params = model(form, phi_s)
    jacobian = form.jacobian(params, shape)
    assert jacobian.shape == (problem.band.phi.size + 8, len(PARAM_NAMES))
    numeric = _differenced(lambda p: form.residuals(p, shape), params)
    assert np.max(_column_errors(jacobian, numeric)) < JACOBIAN_TOLERANCE


def test_the_jacobian_follows_the_alternatives_the_budget_refits_under(problem):
    # the uncertainty budget refits with another near-wall form, circle and thickness prior
    from dataclasses import replace

    geom = replace(problem.geom, upstream_deg=0.5 * problem.geom.upstream_deg,
                   wall_fraction=2.0 * problem.geom.wall_fraction,
                   radius_px=problem.geom.radius_px + 0.7,
                   gap_grid=problem.geom.gap_grid - 0.7)
    prior = problem.log_delta_prior + math.log(2.0)
    for params in (_inside_the_priors(problem), _outside_the_priors(problem)):
        jacobian = problem.jacobian(params, "erf", geom, prior)
        numeric = _differenced(lambda p: problem.residuals(p, "erf", geom, prior), params)
        assert np.max(_column_errors(jacobian, numeric)) < JACOBIAN_TOLERANCE
        assert not np.allclose(jacobian, problem.jacobian(params))  # they do differ


@pytest.mark.parametrize("rate", [0.05, 0.3])
def test_the_jacobian_of_the_spreading_prior_flat_below_its_top_and_sloped_above(problem, rate):
    # the prior treats spreading rates from none to 0.22 alike (laminar to turbulent free
    # layers); a rate of 0.3 pays, through the stream's ratio too
    params = _inside_the_priors(problem)
    reverse = params[PARAM_NAMES.index("reverse")]
    params[PARAM_NAMES.index("spread")] = rate * (1.0 + reverse) / (1.0 - reverse)
    jacobian = problem.jacobian(params)
    numeric = _differenced(problem.residuals, params)
    assert np.max(_column_errors(jacobian, numeric)) < JACOBIAN_TOLERANCE
    assert np.any(jacobian[-8 + 3] != 0.0) == (rate > 0.22)


def test_the_jacobian_of_samples_left_out_and_of_several_shots(problem):
    # glare's samples count zero, slopes too; a joint band's shots (here the band and the same
    # band on smoothed frames, so that their slopes differ) one after the other
    glare = copy.copy(problem.band)
    ball = glare.ball
    mask = np.zeros((260, 360), dtype=bool)
    x, y = int(ball.center_px[0]), int(ball.center_px[1] - ball.radius_px)
    mask[y - 8:y + 3, x - 12:x + 12] = True
    glare.leave_out([mask, None], reach_px=1.0)
    assert 0.0 < glare.kept_fraction < 1.0
    joint = JointBand([glare, problem.band.blurred(1.0)])
    for band in (glare, joint):
        side = SideProblem(band, problem.outer, problem.final_deg, problem.log_delta_prior,
                           problem.sigma)
        params = _inside_the_priors(side)
        jacobian = side.jacobian(params)
        numeric = _differenced(side.residuals, params)
        assert np.max(_column_errors(jacobian, numeric)) < JACOBIAN_TOLERANCE
    left_out = glare._weight == 0.0
    assert np.all(SideProblem(glare, problem.outer, problem.final_deg, problem.log_delta_prior,
                              problem.sigma).jacobian(params)[:left_out.size][left_out] == 0.0)


def test_a_lookups_slopes_are_its_cells_and_nothing_where_clamped():
    from core.near_wall import _lookup, _lookup_slopes, _row_steps

    picture = np.random.default_rng(8).normal(size=(30, 40))
    steps = _row_steps(picture)
    h = 1e-7
    for row, col in [(3.3, 7.6), (28.2, 0.4), (12.5, 38.9)]:
        by_row, by_col = _lookup_slopes(picture, steps, row, col)
        assert by_row == pytest.approx(
            (_lookup(picture, steps, row + h, col) - _lookup(picture, steps, row - h, col))
            / (2 * h), rel=1e-6)
        assert by_col == pytest.approx(
            (_lookup(picture, steps, row, col + h) - _lookup(picture, steps, row, col - h))
            / (2 * h), rel=1e-6)
    assert _lookup_slopes(picture, steps, -2.0, 5.5)[0] == 0.0  # above the first row
    assert _lookup_slopes(picture, steps, 35.0, 5.5)[0] == 0.0
    assert _lookup_slopes(picture, steps, 5.5, -1.0)[1] == 0.0
    assert _lookup_slopes(picture, steps, 5.5, 45.0)[1] == 0.0


@pytest.mark.parametrize("hold", [(), ("phi_s",)])
def test_a_refinement_is_given_the_jacobian_of_what_it_fits(problem, hold, monkeypatch):
    # refine hands the solver the Jacobian of the residuals it hands it: the free parameters'
    # columns, under the alternative form and prior
    from dataclasses import replace

    import core.side_fit

    seen = []
    solve = core.side_fit.least_squares

    def spy(fun, x0, *, jac, **options):
        # the Jacobian first: after max_nfev evaluations refine stands zeros in for it
        seen.append((jac(x0), _differenced(fun, x0), x0))
        return solve(fun, x0, jac=jac, **options)

    monkeypatch.setattr(core.side_fit, "least_squares", spy)
    geom = replace(problem.geom, wall_fraction=2.0 * problem.geom.wall_fraction)
    core.side_fit.refine(problem, _inside_the_priors(problem), shape="quartic", geom=geom,
                         log_delta_prior=problem.log_delta_prior - 0.5, max_nfev=3, hold=hold)
    jacobian, numeric, x0 = seen[0]
    assert x0.size == len(PARAM_NAMES) - len(hold)
    assert np.max(_column_errors(jacobian, numeric)) < JACOBIAN_TOLERANCE


@pytest.mark.parametrize("max_nfev", [3, 5, 15])
def test_a_refinement_is_the_same_without_the_jacobian_after_its_last_evaluation(
        problem, max_nfev, monkeypatch):
    # core.side_fit.refine leaves out the Jacobian the solver asks for after its last
    # allowed evaluation (it stops without using it): the fit must be the one with it
    from core.side_fit import _Evaluations, refine

    start = problem.start(8.0, leave_deg=10.0)
    asked = []
    spy = _Evaluations.jacobian

    def counted(self, q):
        out = spy(self, q)
        asked.append(bool(np.any(out)))
        return out

    monkeypatch.setattr(_Evaluations, "jacobian", counted)
    fit = refine(problem, start, max_nfev=max_nfev)
    assert asked[-1] is False and all(asked[:-1])  # the last one was left out
    monkeypatch.setattr(_Evaluations, "jacobian", lambda self, q: self.slopes(q))
    full = refine(problem, start, max_nfev=max_nfev)
    np.testing.assert_array_equal(fit.params, full.params)
    assert fit.score == full.score


def _traced_with_numpy(radius_px, phi_s, slope, relax_px, phi, final_deg):
    """The dividing line's formulas (core.layer_model) as whole-array numpy operations."""
    s = np.linspace(0.0, 3.0 * radius_px, 241)
    psi0 = -math.radians(phi_s) + math.atan(slope)
    psi_f = math.radians(final_deg)
    psi = psi_f + (psi0 - psi_f) * np.exp(-s / relax_px)
    xi = radius_px * math.sin(math.radians(phi_s)) + np.concatenate(
        [[0.0], np.cumsum(0.5 * (np.cos(psi[1:]) + np.cos(psi[:-1])) * (s[1] - s[0]))])
    zeta = radius_px * math.cos(math.radians(phi_s)) + np.concatenate(
        [[0.0], np.cumsum(0.5 * (np.sin(psi[1:]) + np.sin(psi[:-1])) * (s[1] - s[0]))])
    along = np.maximum.accumulate(np.degrees(np.arctan2(xi, zeta)))
    gap = np.hypot(xi, zeta) - radius_px
    return np.where(phi > phi_s, np.interp(phi, along, gap), 0.0)


def test_no_dividing_lines_trace_to_no_rows():
    assert dividing_lines_px(110.0, [], np.linspace(0.0, 40.0, 9)).shape == (0, 9)


def test_compiled_dividing_line_is_its_numpy_formulas():
    phi = np.linspace(-30.0, 80.0, 200)
    for line in [(5.0, 0.1, 80.0), (12.0, 0.6, 400.0), (-3.0, 0.0, 40.0), (40.0, 0.3, 20.0)]:
        for final in (0.0, 12.0, -20.0):
            np.testing.assert_allclose(dividing_line_px(110.0, *line, phi, final_deg=final),
                                       _traced_with_numpy(110.0, *line, phi, final),
                                       rtol=1e-12, atol=1e-11)


def test_dividing_lines_traced_together_equal_one_at_a_time():
    phi = np.linspace(-30.0, 60.0, 121)
    lines = [(5.0, 0.1, 80.0), (12.0, 0.3, 150.0), (-3.0, 0.0, 40.0)]
    together = dividing_lines_px(110.0, lines, phi, final_deg=3.0)
    for line, row in zip(lines, together, strict=True):
        np.testing.assert_array_equal(row, dividing_line_px(110.0, *line, phi, final_deg=3.0))


def test_bilinear_lookup_is_the_bilinear_interpolation():
    # the band's hand-written lookup against scipy's order-1 spline, edges clamped
    rng = np.random.default_rng(3)
    picture = rng.normal(size=(40, 70))
    row = rng.uniform(-2.0, 42.0, 500)
    col = rng.uniform(-2.0, 72.0, 500)
    expected = ndimage.map_coordinates(picture, [np.clip(row, 0, 39), np.clip(col, 0, 69)],
                                       order=1, mode="nearest")
    np.testing.assert_allclose(_bilinear(picture, row, col), expected, atol=1e-5)


@pytest.mark.parametrize("phi", [np.linspace(-20.0, 50.0, 90), np.geomspace(1.0, 60.0, 90)])
def test_rise_of_the_dividing_lines_is_numpys_gradient(phi):
    # written out for speed; it must stay numpy's formulas, evenly spaced angles or not
    rows = np.random.default_rng(5).normal(size=(3, phi.size))
    x = np.radians(phi) * 110.0
    np.testing.assert_array_equal(_gradient(rows, _spacing(110.0, phi)),
                                  np.gradient(rows, x, axis=1))
    np.testing.assert_array_equal(_gradient(rows, 0.25), np.gradient(rows, 0.25, axis=1))


def test_the_angles_profile_is_refitted_to_its_minima(problem):
    # the fit's own uncertainty is how far the score rises with the angle held either side of
    # the best fit; held fits cut short (five evaluations, until 0.3.18) stopped above their
    # minima by amounts that inputs hardly differing changed: a demo side's entry went from
    # 1.2 to 1.9 deg and back as the air's temperature moved by half a degree
    from core.separation import REFINE_ITERATIONS, _profile
    from core.side_fit import refine

    best = refine(problem, problem.start(8.0, leave_deg=10.0), max_nfev=REFINE_ITERATIONS)
    for held in _profile(problem, best):
        further = refine(problem, held.params, hold=("phi_s",), max_nfev=200)
        assert held.score - further.score < 0.5  # a score of 1 is one standard deviation
