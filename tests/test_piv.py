"""The correlation engine against synthetic images of known displacement."""

import json
import math
from dataclasses import asdict

import numpy as np
import pytest

from core import WakelineError, synth
from core.piv import (
    Cancelled,
    PivPass,
    PivSettings,
    correlate_pair,
    gaussian_peak_offset,
    parabolic_peak_offset,
)


def _sampled_gaussian(x0, sigma):
    k = np.array([-1.0, 0.0, 1.0])
    return np.exp(-((k - x0) ** 2) / (2 * sigma**2))


def test_gaussian_estimator_is_exact_on_a_sampled_gaussian_and_the_parabola_is_not():
    # Three-point Gaussian estimator (Willert & Gharib 1991; Raffel et al., memory).
    # derived: ln R(k) = c - (k - x0)^2 / (2 sigma^2) is a parabola in k, so the vertex of the
    # parabola through the three logarithms is x0 itself; the parabola through the raw samples
    # has its vertex elsewhere (about 0.267 for x0 = 0.3, sigma = 1.2).
    r = _sampled_gaussian(0.3, 1.2)
    assert float(gaussian_peak_offset(*r)) == pytest.approx(0.300, abs=1e-12)
    a, b, _ = np.polyfit([-1.0, 0.0, 1.0], r, 2)
    vertex = -b / (2 * a)
    assert float(parabolic_peak_offset(*r)) == pytest.approx(vertex, abs=1e-12)
    assert vertex == pytest.approx(0.267, abs=0.001)


def test_peak_estimators_fall_back_safely():
    # a non-positive sample has no logarithm: the parabolic estimate is used instead
    assert float(gaussian_peak_offset(-0.1, 1.0, 0.5)) == pytest.approx(
        float(parabolic_peak_offset(-0.1, 1.0, 0.5))
    )
    assert float(gaussian_peak_offset(1.0, 1.0, 1.0)) == 0.0  # flat: no peak, no offset
    out = gaussian_peak_offset(np.array([0.0, 0.5]), np.array([0.0, 1.0]), np.array([0.0, 0.5]))
    np.testing.assert_array_equal(out, [0.0, 0.0])


SWEEP = [round(0.1 * i, 1) for i in range(11)] + [3.3, 5.7]


@pytest.mark.parametrize("shift_px", SWEEP)
def test_uniform_displacement_sweep_is_accurate_and_unbiased(shift_px):
    # Random error of 32 px windows with Gaussian peak fit and 2-3.5 px particles: about
    # 0.02-0.05 px RMS (Raffel et al., memory, Monte-Carlo); the bias of FFT correlation is
    # removed by window deformation (Westerweel 1997, memory). Limits: RMS <= 0.05 px and
    # |mean| <= 0.02 px per component, over every vector including the border ones.
    truth = (shift_px, 0.6 - 0.5 * shift_px)
    a, b = synth.particle_pair(
        (256, 256),
        synth.uniform(*truth),
        density_ppp=0.05,
        diameter_px=(2.0, 3.5),
        noise=0.02,
        seed=int(10 * shift_px),
    )
    vf = correlate_pair(a, b)
    assert vf.window_px == 32
    assert np.all(vf.valid)
    for measured, true in ((vf.dx_px, truth[0]), (vf.dy_px, truth[1])):
        err = measured - true
        assert np.sqrt(np.mean(err**2)) <= 0.05
        assert abs(np.mean(err)) <= 0.02


def test_measured_shear_gives_its_vorticity_in_1_per_s():
    # simple shear dx = S (y - y0): omega = S per frame pair (derived, core.synth.uniform_shear),
    # S / dt in 1/s; measured from particle images by the correlation and the 5-point
    # least-squares derivative (0.02 px/px over 20 us: 1000 1/s; limit 2 % in the median)
    from core.fields import vorticity_1_s

    rate, dt_s = 0.02, 20e-6
    a, b = synth.particle_pair((256, 256), synth.uniform_shear(rate, 128.0, 2.0),
                               density_ppp=0.05, diameter_px=(2.0, 3.5), noise=0.02, seed=2)
    omega = vorticity_1_s(correlate_pair(a, b), dt_s)
    assert np.nanmedian(omega) == pytest.approx(rate / dt_s, rel=0.02)
    assert np.nanmedian(vorticity_1_s(correlate_pair(a, b))) == pytest.approx(rate, rel=0.02)


@pytest.mark.parametrize("shift_px", [0.2, 0.3, 0.5, 0.7, 3.3, 5.7])
def test_one_pass_without_deformation_is_unbiased(shift_px):
    # one 32 px pass, no window deformation: the sub-pixel peak estimator and the correction
    # for the windows' overlap (Westerweel 1997, memory) carry the whole result. The Gaussian
    # three-point fit on 2-3.5 px particle images leaves a bias of a few thousandths of a pixel
    # (Raffel et al., memory; the parabolic fit's is about 0.02-0.05 px); limit |mean| <= 0.01
    truth = (shift_px, 0.0)
    a, b = synth.particle_pair((256, 256), synth.uniform(*truth), density_ppp=0.05,
                               diameter_px=(2.0, 3.5), noise=0.02, seed=int(10 * shift_px) + 40)
    vf = correlate_pair(a, b, settings=PivSettings(passes=(PivPass(32, 0.5),)))
    assert vf.window_px == 32
    err = vf.dx_px[vf.valid] - truth[0]
    assert abs(np.mean(err)) <= 0.01
    assert abs(np.mean(vf.dy_px[vf.valid])) <= 0.01


def test_lamb_oseen_vortex_is_resolved():
    # Lamb-Oseen: swirl peak 0.63817 G / (2 pi rc) (closed form, seen); G chosen for a 6 px peak.
    # Limits RMS <= 0.1 px (commonly quoted overall error 0.05-0.1 px, Wieneke 2015, seen)
    # and >= 97 % valid.
    rc = 40.0
    circulation = 6.0 * 2 * math.pi * rc / 0.63817
    field = synth.lamb_oseen((195.3, 187.6), circulation, rc)
    a, b = synth.particle_pair((384, 384), field, seed=4)
    vf = correlate_pair(a, b)
    tx, ty = field(vf.x_px, vf.y_px)
    assert np.max(np.hypot(tx, ty)) > 5.5
    err = np.hypot(vf.dx_px - tx, vf.dy_px - ty)
    assert np.sqrt(np.mean(err**2)) <= 0.1
    assert np.mean(vf.valid) >= 0.97


def _ball_pair(centre_a, centre_b, radius, field, shape=(320, 320), seed=0):
    a, b = synth.particle_pair(shape, field, seed=seed)
    yy, xx = np.mgrid[0 : shape[0], 0 : shape[1]]
    masks = []
    for frame, (cx, cy) in ((a, centre_a), (b, centre_b)):
        inside = np.hypot(xx - cx, yy - cy) <= radius
        frame[inside] = 3000.0  # a bright ball surface
        masks.append(np.hypot(xx - cx, yy - cy) <= radius + 2)
    return a, b, masks[0], masks[1]


def test_flow_past_a_masked_sphere_reports_no_vector_inside_the_mask():
    # Potential flow past a sphere (Batchelor 1967, memory): u_r = U cos a (1 - R^3/r^3),
    # u_a = -U sin a (1 + R^3/(2 r^3)); the sphere is masked in both frames.
    sphere = synth.potential_sphere((160.0, 158.0), 50.0, 5.0)
    a, b, mask_a, mask_b = _ball_pair((160.0, 158.0), (160.0, 158.0), 50.0, sphere)
    vf = correlate_pair(a, b, mask_a, mask_b)
    col = np.clip(np.rint(vf.x_px).astype(int), 0, 319)
    row = np.clip(np.rint(vf.y_px).astype(int), 0, 319)
    inside = mask_a[row, col] | mask_b[row, col]
    assert np.count_nonzero(inside) > 10
    assert not np.any(vf.valid[inside])
    assert np.all(vf.masked[inside])
    assert np.all(np.isnan(vf.dx_px[vf.masked])) and np.all(np.isnan(vf.peak_ratio[vf.masked]))
    # beside the ball the vectors see a strong gradient with neighbours on one side only;
    # they must not be rejected for it (see test_validate, extrapolating median test)
    beside = ~vf.masked & (np.hypot(vf.x_px - 160.0, vf.y_px - 158.0) < 52.0 + vf.window_px)
    assert np.count_nonzero(beside) >= 15
    assert np.mean(vf.valid[beside]) >= 0.9
    # away from the ball (window clear of the mask) the flow is measured as it should be
    far = np.hypot(vf.x_px - 160.0, vf.y_px - 158.0) > 50.0 + 2 + 0.75 * vf.window_px
    tx, ty = sphere(vf.x_px, vf.y_px)
    err = np.hypot(vf.dx_px - tx, vf.dy_px - ty)[far]
    assert np.sqrt(np.mean(err**2)) <= 0.1


def test_a_ball_that_moves_between_frames_is_excluded_in_each_frame():
    # the bright ball moves 9 px while the air moves 2 px: if its pixels took part, windows on
    # its edge would lock on the ball's motion
    a, b, mask_a, mask_b = _ball_pair((150.0, 160.0), (159.0, 160.0), 40.0, synth.uniform(2.0, 0.5))
    vf = correlate_pair(a, b, mask_a, mask_b)
    measured = ~vf.masked
    near = measured & (np.hypot(vf.x_px - 155.0, vf.y_px - 160.0) < 40 + vf.window_px)
    assert np.count_nonzero(near) > 8
    assert np.max(np.abs(vf.dx_px[near] - 2.0)) < 0.3
    assert np.max(np.abs(vf.dy_px[near] - 0.5)) < 0.3
    only_b = mask_b & ~mask_a
    col = np.rint(vf.x_px).astype(int)
    row = np.rint(vf.y_px).astype(int)
    assert np.count_nonzero(only_b[row, col]) > 0
    assert np.all(vf.masked[only_b[row, col]])


def test_quarter_window_rule_warns_only_when_broken():
    # keep first-pass displacement <= 1/4 of the window (Keane & Adrian 1990, memory)
    a, b = synth.particle_pair((256, 256), synth.uniform(10.0, 5.0), seed=1)
    assert correlate_pair(a, b).warnings == []  # 11.2 px < 16 px
    a, b = synth.particle_pair((256, 256), synth.uniform(19.0, 0.0), seed=1)
    vf = correlate_pair(a, b)
    assert len(vf.warnings) == 1 and "quarter" in vf.warnings[0]


def test_grid_and_record_layout():
    settings = PivSettings(passes=(PivPass(32, 0.5), PivPass(16, 0.5)))
    a, b = synth.particle_pair((96, 128), synth.uniform(1.0, 0.0), seed=2)
    vf = correlate_pair(a, b, settings=settings)
    # centres at (D - 1)/2 + k * spacing in image coordinates (origin at the pixel centre)
    assert vf.x_px.shape == (11, 15) and vf.window_px == 16 and vf.spacing_px == 8.0
    np.testing.assert_allclose(vf.x_px[0], 7.5 + 8.0 * np.arange(15))
    np.testing.assert_allclose(vf.y_px[:, 0], 7.5 + 8.0 * np.arange(11))
    for name, arr in vf.arrays().items():
        assert arr.shape == (11, 15), name
    assert vf.valid.dtype == bool and not np.any(vf.replaced & vf.valid)


def test_peak_ratio_separates_signal_from_noise():
    # peak ratio = primary / secondary correlation peak (Charonko & Vlachos 2013, memory)
    settings = PivSettings(passes=(PivPass(32, 0.5),))
    a, b = synth.particle_pair((256, 256), synth.uniform(2.0, 1.0), seed=3)
    c, _ = synth.particle_pair((256, 256), synth.uniform(2.0, 1.0), seed=99)
    good = correlate_pair(a, b, settings=settings).peak_ratio
    noise = correlate_pair(a, c, settings=settings).peak_ratio
    # thresholds ours: a clear single peak for a true pair, near-equal peaks for unrelated frames
    assert np.median(good) > 3.0
    assert np.median(noise) < 1.6


def test_outliers_are_replaced_and_flagged():
    a, b = synth.particle_pair((256, 256), synth.uniform(2.0, 1.0), seed=5)
    rng = np.random.default_rng(0)
    b[96:128, 96:128] = rng.uniform(0, 4095, (32, 32))  # a patch of noise in frame B
    vf = correlate_pair(a, b)
    assert np.any(vf.replaced)
    assert not np.any(vf.valid & vf.replaced)
    assert np.all(np.isfinite(vf.dx_px))
    # closed form: uniform flow, so a replacement from neighbours is exact up to their noise
    assert np.max(np.abs(vf.dx_px[vf.replaced] - 2.0)) < 0.5


def test_progress_reports_each_pass_and_can_stop():
    a, b = synth.particle_pair((128, 128), synth.uniform(1.0, 0.0), seed=6)
    calls = []
    correlate_pair(a, b, progress=lambda done, total, msg: calls.append((done, total)))
    assert calls == [(0, 3), (1, 3), (2, 3), (3, 3)]
    with pytest.raises(Cancelled):
        correlate_pair(a, b, progress=lambda done, total, msg: done == 1)


def test_settings_round_trip_through_json_and_reject_nonsense():
    s = PivSettings(
        passes=(PivPass(48, 0.75), PivPass(24, 0.5)), median_threshold=3.0,
        deform_min_change_px=0.25, workers=1,
    )
    back = PivSettings.from_dict(json.loads(json.dumps(s.to_dict())))
    assert back == s
    assert PivSettings.from_dict(asdict(s)) == s
    with pytest.raises(WakelineError):
        PivSettings(passes=())
    with pytest.raises(WakelineError):
        PivSettings(passes=(PivPass(32, 1.0),))
    with pytest.raises(WakelineError):
        PivSettings(passes=(PivPass(4, 0.5),))
    with pytest.raises(WakelineError, match="deformation threshold"):
        PivSettings(deform_min_change_px=-1.0)


def test_bad_frames_are_refused_with_one_line():
    a = np.zeros((64, 64), np.float32)
    with pytest.raises(WakelineError, match="shapes differ"):
        correlate_pair(a, np.zeros((64, 65)))
    with pytest.raises(WakelineError, match="smaller than"):
        correlate_pair(a[:40], a[:40])
    with pytest.raises(WakelineError, match="mask of frame B"):
        correlate_pair(a, a, mask_b=np.zeros((3, 3), bool))


@pytest.mark.parametrize("p", [PivPass(32, 0.5), PivPass(32, 0.6), PivPass(20, 0.75)])
def test_masked_pixel_counts_match_a_direct_count(p):
    from core.piv.grid import grid_for, masked_counts

    mask = np.random.default_rng(0).random((100, 130)) < 0.3
    g = grid_for(mask.shape, p)
    direct = [
        mask[i * g.step : i * g.step + g.window, j * g.step : j * g.step + g.window].sum()
        for i in range(g.rows)
        for j in range(g.cols)
    ]
    np.testing.assert_array_equal(masked_counts(mask, g), direct)


def test_small_integer_frames_and_odd_passes_work():
    a, b = synth.particle_pair((64, 80), synth.uniform(1.2, 0.4), seed=1)
    vf = correlate_pair(a.astype(np.uint16), b.astype(np.uint16))
    assert vf.x_px.shape == (3, 4)
    np.testing.assert_allclose(vf.dx_px, 1.2, atol=0.1)
    odd = PivSettings(passes=(PivPass(24, 1 / 3), PivPass(20, 0.6)))
    vf = correlate_pair(a, b, settings=odd)
    assert vf.spacing_px == 8.0 and np.all(vf.valid)
    np.testing.assert_allclose(vf.dy_px, 0.4, atol=0.1)


def test_blank_frames_give_no_vectors_rather_than_invented_ones():
    blank = np.zeros((128, 128), np.float32)
    vf = correlate_pair(blank, blank)
    assert not np.any(vf.valid) and not np.any(vf.replaced)
    assert np.all(np.isnan(vf.dx_px))
    assert any("no correlation peak" in w for w in vf.warnings)


def test_out_of_plane_loss_of_pairs_lowers_the_peak_ratio():
    # loss of pairs F_O ~ 1 - |dz|/dz0 weakens the correlation peak (Keane & Adrian 1992, memory)
    settings = PivSettings(passes=(PivPass(32, 0.5),))
    ratios = []
    for dz in (0.0, 12.0):
        a, b = synth.particle_pair(
            (256, 256),
            synth.uniform(1.5, 0.5),
            out_of_plane_px=dz,
            sheet_thickness_px=16.0,
            seed=8,
        )
        ratios.append(np.median(correlate_pair(a, b, settings=settings).peak_ratio))
    assert ratios[1] < 0.7 * ratios[0]


def test_uniform_shear_is_measured_up_to_the_image_edges_and_a_masked_wall():
    # simple shear dx = dx0 + S (y - y0) (closed form, derived): edge rows and vectors beside
    # the wall see neighbours on one side only and must not be rejected for the gradient
    field = synth.uniform_shear(0.05, y_ref_px=128.0, dx0_px=2.0)
    a, b = synth.particle_pair((256, 256), field, seed=3)
    vf = correlate_pair(a, b)
    tx, _ = field(vf.x_px, vf.y_px)
    assert np.all(vf.valid)
    assert np.sqrt(np.mean((vf.dx_px - tx) ** 2)) <= 0.05
    yy, xx = np.mgrid[0:256, 0:256]
    wall = yy > 170 - 0.3 * (xx - 128)
    vf = correlate_pair(a, b, wall, wall)
    tx, ty = field(vf.x_px, vf.y_px)
    err = np.hypot(vf.dx_px - tx, vf.dy_px - ty)
    assert np.mean(vf.valid[~vf.masked]) >= 0.97
    assert np.sqrt(np.mean(err[~vf.masked] ** 2)) <= 0.08
    # a partly masked window sees the flow at the centroid of its open pixels, up to half a
    # window from its centre: 0.05 px/px x 8 px = 0.4 px if that were ignored (derived)
    wall_y = 170 - 0.3 * (vf.x_px - 128)
    beside = ~vf.masked & (wall_y - vf.y_px < 16)
    assert np.count_nonzero(beside) >= 10
    assert np.sqrt(np.mean(err[beside] ** 2)) <= 0.11


def test_result_does_not_depend_on_the_number_of_workers():
    field = synth.lamb_oseen((60.0, 70.0), 600.0, 25.0)
    a, b = synth.particle_pair((160, 144), field, seed=9)
    one = correlate_pair(a, b, settings=PivSettings(workers=1))
    two = correlate_pair(a, b, settings=PivSettings(workers=2))
    np.testing.assert_allclose(one.dx_px, two.dx_px, atol=1e-6)
    np.testing.assert_allclose(one.dy_px, two.dy_px, atol=1e-6)
    np.testing.assert_array_equal(one.valid, two.valid)


def _uniform_predictor(grid, dx, dy):
    from core.piv.predictor import Predictor

    shape = (grid.rows, grid.cols)
    return Predictor(grid, np.full(shape, dx), np.full(shape, dy))


def test_block_shift_is_the_cubic_spline_shift_of_scipy():
    # A uniform predictor moves every block by the same amount; the deformed frames must be
    # scipy.ndimage.shift's cubic-spline shift of the frames (reference library), A by +d/2 and
    # B by -d/2 (A'(x) = A(x - d/2), B'(x) = B(x + d/2)).
    from scipy import ndimage

    from core.piv.deform import Frames
    from core.piv.grid import grid_for

    rng = np.random.default_rng(5)
    a, b = (rng.random((96, 128)).astype(np.float32) * 100 for _ in range(2))
    grid = grid_for(a.shape, PivPass(32, 0.5))
    frames = Frames(a, b, None, None, workers=1, power=1.0)
    da, db, excluded = frames.deformed(_uniform_predictor(grid, 2.6, -1.3), grid, 0.1)
    for deformed, frame, sign in ((da, a, 1.0), (db, b, -1.0)):
        expected = ndimage.shift(frame, (sign * -0.65, sign * 1.3), order=3, mode="mirror")
        np.testing.assert_allclose(deformed, expected, atol=2e-3)
    # pixels sampled from beyond the image (over half a pixel past its edge) are excluded:
    # A's first column (x - 1.3) and last row (y + 0.65), B's last column and first row
    assert excluded is not None
    assert excluded[:, 0].all() and excluded[:, -1].all()
    assert excluded[0].all() and excluded[-1].all() and not excluded[1:-1, 1:-1].any()
    # a mask of A moves with A to the nearest pixel: A'(y, x) = A(y + 0.65, x - 1.3)
    yy, xx = np.mgrid[0:96, 0:128]
    disc = np.hypot(xx - 60.0, yy - 45.0) <= 12.0
    masked_frames = Frames(a, b, disc, None, workers=1, power=1.0)
    _, _, excluded = masked_frames.deformed(_uniform_predictor(grid, 2.6, -1.3), grid, 0.1)
    expected = np.zeros_like(disc)
    expected[:-1, 1:] = disc[1:, :-1]
    np.testing.assert_array_equal(excluded[1:-1, 1:-1], expected[1:-1, 1:-1])


def test_pixel_by_pixel_deformation_matches_map_coordinates_on_the_whole_frame():
    # Where the predictor changes, windows are resampled pixel by pixel in strips of rows from
    # the padded whole-frame coefficients; they must equal map_coordinates on the whole frame
    # (scipy, reference library).
    from scipy import ndimage

    from core.piv.deform import Frames
    from core.piv.grid import grid_for
    from core.piv.predictor import Predictor

    rng = np.random.default_rng(6)
    a, b = (rng.random((192, 192)).astype(np.float32) * 100 for _ in range(2))
    grid = grid_for(a.shape, PivPass(32, 0.5))
    y, x = np.meshgrid(grid.y_px, grid.x_px, indexing="ij")
    bump = 3.0 * np.exp(-((x - 96) ** 2 + (y - 96) ** 2) / (2 * 20.0**2))
    predictor = Predictor(grid, 1.2 + bump, 0.4 - bump)
    frames = Frames(a, b, None, None, workers=2, power=1.0)
    da, db, _ = frames.deformed(predictor, grid, 0.1)
    exact = predictor.change_across(grid) > 0.1
    assert 0 < exact.sum() < exact.size  # both kinds of windows occur
    rows, cols = np.arange(a.shape[0]), np.arange(a.shape[1])
    half_x, half_y = predictor.dense_half(rows, cols)
    centre = (slice(72, 120), slice(72, 120))  # inside the resampled region
    for deformed, frame, sign in ((da, a, -1.0), (db, b, 1.0)):
        coords = np.array([rows[:, None] + sign * half_y, cols[None, :] + sign * half_x])
        expected = ndimage.map_coordinates(frame, coords, order=3, mode="mirror")
        np.testing.assert_allclose(deformed[centre], expected[centre], atol=1e-3)
        # elsewhere blocks move by their centre value: the difference stays small
        assert np.percentile(np.abs(deformed - expected)[:176, :176], 99) < 0.05 * 100


def test_compiled_window_resampling_equals_map_coordinates_inside_and_past_the_padding():
    # The deformed pixels are the cubic spline's values at x +- h(x) as scipy's map_coordinates
    # gives them (reference library), to the last bit, whether the compiled loop samples them
    # (taps inside the padded coefficients) or scipy does (a shift reaching past the padding).
    from scipy import ndimage

    from core.piv.deform import _Box, _warp_region

    rng = np.random.default_rng(8)
    coeff = ndimage.spline_filter(rng.random((40, 50)).astype(np.float32) * 100, order=3,
                                  output=np.float32, mode="mirror")
    box = _Box(4, 20, 6, 30)
    pick = rng.random((16, 24)) < 0.6
    for pad, reach in ((6, 3.5), (6, 12.0)):  # inside the padding, then well past it
        half_x, half_y = (rng.uniform(-reach, reach, (16, 24)) for _ in range(2))
        padded = np.pad(coeff, pad, mode="reflect")
        out = np.full((40, 50), -1.0, np.float32)
        _warp_region(padded, pad, out, box, pick, half_x, half_y, -1.0)
        y, x = np.mgrid[box.r0:box.r1, box.c0:box.c1].astype(float) + pad
        expected = ndimage.map_coordinates(padded, [y - half_y, x - half_x], order=3,
                                           prefilter=False, output=np.float32)
        inside = out[box.slices]
        np.testing.assert_array_equal(inside[pick], expected[pick])
        assert (inside[~pick] == -1.0).all() and (np.delete(out, np.s_[4:20], 0) == -1).all()


def test_both_deformations_exclude_the_same_pixels_around_a_masked_sphere():
    # Masks move with the frames in both kinds of deformation: block by block (default) and
    # pixel by pixel (threshold 0) must exclude the same windows, and the vectors must agree
    # to well within the random error (0.02-0.05 px, Raffel et al., memory).
    sphere = synth.potential_sphere((150.0, 128.0), 40.0, 4.0)
    a, b, ma, mb = _ball_pair((148.0, 128.0), (152.0, 128.0), 40.0, sphere, shape=(256, 288),
                              seed=3)
    blocks = correlate_pair(a, b, ma, mb)
    pixels = correlate_pair(a, b, ma, mb, settings=PivSettings(deform_min_change_px=0.0))
    np.testing.assert_array_equal(blocks.masked, pixels.masked)
    both = blocks.valid & pixels.valid
    diff = np.hypot(blocks.dx_px - pixels.dx_px, blocks.dy_px - pixels.dy_px)[both]
    assert both.mean() > 0.8 and np.sqrt(np.mean(diff**2)) <= 0.01


def test_block_deformation_gives_the_same_vectors_as_pixel_deformation():
    # The threshold only changes how the predictor's shift is applied where it is nearly
    # uniform; the vectors must agree with deforming every pixel to well within the random
    # error of 32 px windows (0.02-0.05 px, Raffel et al., memory).
    vortex = synth.lamb_oseen((150.0, 140.0), 900.0, 30.0)

    def field(x, y):
        dx, dy = vortex(x, y)
        return dx + 3.3, dy - 1.2

    a, b = synth.particle_pair((288, 320), field, seed=8)
    blocks = correlate_pair(a, b)
    pixels = correlate_pair(a, b, settings=PivSettings(deform_min_change_px=0.0))
    diff = np.hypot(blocks.dx_px - pixels.dx_px, blocks.dy_px - pixels.dy_px)
    assert np.sqrt(np.mean(diff**2)) <= 0.01
    tx, ty = field(blocks.x_px, blocks.y_px)
    err = np.hypot(blocks.dx_px - tx, blocks.dy_px - ty)
    assert np.sqrt(np.mean(err**2)) <= 0.1
