"""Ball outline, masks, flight and scale on synthetic shots with known truth.

The truth of every synthetic shot is the circle the generator painted (core.synth_shot: the
disc's pixel coverage is half at the radius, derived) and the ball's displacement it was moved
by. The second, physically built family (core.synth_physical) is checked by a benchmark-style
table in the report, not here (it is slower to draw).
"""

import math

import numpy as np
import pytest

from core import WakelineError
from core.ball import (
    ball_displacement,
    ball_mask,
    find_ball,
    find_balls,
    flight_from_balls,
    flight_from_stream,
    match_ball_image,
    nominal_diameter_mm,
    scale_from_ball,
)
from core.results import BallFit, VectorField
from core.rulebook import ball_size_problem
from core.synth_shot import ball_shot


@pytest.mark.parametrize(
    ("flight_deg", "radius_px", "seed"), [(180.0, 60.0, 1), (3.0, 66.0, 2), (185.0, 54.0, 3)]
)
def test_centre_and_radius_within_half_a_pixel(flight_deg, radius_px, seed):
    # truth from the generator (core.synth_shot); 0.5 px is the issue's acceptance limit
    frame_a, frame_b, truth = ball_shot(flight_deg=flight_deg, radius_px=radius_px, seed=seed)
    for frame, centre in ((frame_a, truth.center_a_px), (frame_b, truth.center_b_px)):
        fit = find_ball(frame)
        assert math.hypot(fit.center_px[0] - centre[0], fit.center_px[1] - centre[1]) < 0.5
        assert abs(fit.radius_px - truth.radius_px) < 0.5
        assert not fit.cut_by_edge


def test_the_painted_disc_covers_pi_r_squared_about_its_centre():
    # the generators' truth convention (core.synth_look.paint_ball): pixel (i, j) is the unit
    # square centred on x = j, y = i, and the disc covers each by its area share, so the shares
    # sum to pi R^2 with their centroid at the centre (closed form)
    from core.synth_look import paint_ball

    centre, radius = (171.3, 118.6), 60.4
    air = np.full((300, 400), 1000.0)
    painted = paint_ball(air.copy(), centre, radius, 90.0, np.random.default_rng(0), rim=False,
                         noise_counts=0.0, dark_counts=0.0, surface_counts=0.0, background=1000.0)
    share = (air - painted) / air
    y, x = np.mgrid[0:300, 0:400]
    assert share.sum() == pytest.approx(math.pi * radius**2, rel=1e-4)
    assert (share * x).sum() / share.sum() == pytest.approx(centre[0], abs=0.005)
    assert (share * y).sum() / share.sum() == pytest.approx(centre[1], abs=0.005)


@pytest.mark.parametrize("surface", ["black", "half the air's mean"])
def test_a_disc_drawn_here_is_found_where_it_was_drawn(surface):
    # a ball drawn by this test, not by a generator: particle images (core.synth) with a disc
    # laid over them, each pixel's share of the disc from 8 x 8 sub-samples (closed form of the
    # area to 1/64); no lit rim, so the circle rests on the particle-free disc or the step
    from core import synth

    centre, radius = (171.3, 118.6), 60.4
    frame, _ = synth.particle_pair((300, 400), synth.uniform(3.0, 0.0), density_ppp=0.05,
                                   diameter_px=(2.0, 3.5), noise=0.02, seed=5)
    y, x = np.mgrid[0:300, 0:400]
    sub = (np.arange(8) + 0.5) / 8 - 0.5
    share = np.mean([(x + dx - centre[0]) ** 2 + (y + dy - centre[1]) ** 2 < radius**2
                     for dy in sub for dx in sub], axis=0)
    level = 0.0 if surface == "black" else 0.5 * frame.mean()
    fit = find_ball(frame * (1.0 - share) + level * share)
    for got, true, sigma in ((fit.center_px[0], centre[0], fit.center_sigma_px[0]),
                             (fit.center_px[1], centre[1], fit.center_sigma_px[1]),
                             (fit.radius_px, radius, fit.radius_sigma_px)):
        assert abs(got - true) < min(0.5, 3.0 * sigma)


def test_a_bright_ball_among_small_faint_particle_images_is_found():
    # truth from the generator; a lit rim: the issue's 0.3 px limit. A white ball in an 8-bit
    # frame whose particle images are 1-1.8 px across (faint once binned) and whose sheet is
    # uneven: the outline's step was the most textured thing near the ball, so relative to it
    # the air around looked quiet and a patch at the top edge was taken for the ball
    # (bench_separation's kinematic shot 5 of seed 11 with --particles 1.0 1.8).
    frame_a, _, truth = ball_shot((768, 1024), radius_px=171.72, flight_deg=-1.85, seed=305,
                                  surface="bright", rim=True, uneven_sheet=0.507, bits=8,
                                  diameter_px=(1.0, 1.8), upper_deg=-3.4, lower_deg=29.0)
    fit = find_ball(frame_a)
    centre = truth.center_a_px
    assert math.hypot(fit.center_px[0] - centre[0], fit.center_px[1] - centre[1]) < 0.3
    assert abs(fit.radius_px - truth.radius_px) < 0.3


@pytest.mark.parametrize("shift_px", [8.0, 70.0])
def test_a_pair_fitted_at_once_gives_the_circles_of_one_after_the_other(shift_px, monkeypatch):
    # two threads fit both frames at once from frame A's coarse circle, one fits them in turn:
    # the same circles; a ball that moved further than the first band (70 px) is fitted again
    # from frame A's circle. Truth: the painted circles (core.synth_shot), within the issue's
    # 0.3 px with a lit rim
    from core.ball import outline

    frame_a, frame_b, truth = ball_shot((384, 640), radius_px=60.0, shift_px=shift_px, seed=9)
    refits = []
    search = outline.find_ball
    monkeypatch.setattr(outline, "find_ball", lambda *a, **k: refits.append(k) or search(*a, **k))
    one = find_balls(frame_a, frame_b, threads=1)
    two = find_balls(frame_a, frame_b, threads=2)
    assert one == two
    assert len(refits) == (2 if shift_px > 50.0 else 0)  # once per call, from frame A's circle
    assert all(k["near"] is not None for k in refits)
    for fit_2, centre in zip(two, (truth.center_a_px, truth.center_b_px), strict=True):
        assert math.dist(fit_2.center_px, centre) < 0.3
        assert abs(fit_2.radius_px - truth.radius_px) < 0.3


@pytest.mark.parametrize(
    ("looks", "flight_deg", "seed"),
    [({}, 184.0, 4), ({"surface": "dim", "seam_deg": 20.0, "spin_deg": 1.0}, 3.0, 5),
     ({"surface": "bright", "glint": True}, 95.0, 6)],
)
def test_flight_direction_and_speed_within_their_uncertainty(looks, flight_deg, seed):
    """Replaces the single-look check at 0.5 deg: the flight now carries its own uncertainty,
    and the truth (the generator's displacement) lies within three of it on every look, which
    is within 0.5 deg at a 9 px shift with a lit rim (within 1.5 deg when the match rests on
    the surface's pattern); the speed within 1 % (the scale and dt given exactly)."""
    frame_a, frame_b, truth = ball_shot(flight_deg=flight_deg, shift_px=9.0, seed=seed, **looks)
    ball_a, ball_b = find_ball(frame_a), find_ball(frame_b)
    match = match_ball_image(frame_a, frame_b, ball_a, ball_b)
    assert match is not None  # a lit rim or a seam is a pattern seen in both frames
    shift, cov, _ = ball_displacement(ball_a, ball_b, match)
    flight = flight_from_balls(
        ball_a, ball_b, displacement_px=shift, displacement_cov_px2=cov, dt_s=truth.dt_s,
        scale_mm_per_px=truth.scale_mm_per_px,
    )
    error = abs((flight.direction_deg - truth.flight_deg + 180) % 360 - 180)
    assert flight.direction_sigma_deg < (0.5 if ball_a.outline == "lit rim" else 1.5)
    assert error <= 3.0 * flight.direction_sigma_deg
    assert flight.speed_m_s == pytest.approx(truth.speed_m_s, rel=0.01)
    assert abs(flight.speed_m_s - truth.speed_m_s) <= 3.0 * flight.speed_sigma_m_s


def test_a_bare_ball_gives_no_image_match_and_the_circles_carry_the_flight():
    # a dark ball without a lit rim shows only camera noise inside: nothing to match between
    # the frames, so the displacement is the circles' and its uncertainty theirs (truth from
    # the generator; three standard uncertainties)
    frame_a, frame_b, truth = ball_shot(flight_deg=180.0, shift_px=9.0, rim=False, seed=7)
    ball_a, ball_b = find_ball(frame_a), find_ball(frame_b)
    assert ball_a.outline == "particle images"
    assert match_ball_image(frame_a, frame_b, ball_a, ball_b) is None
    shift, cov, _ = ball_displacement(ball_a, ball_b, None)
    flight = flight_from_balls(ball_a, ball_b, displacement_px=shift, displacement_cov_px2=cov)
    error = abs((flight.direction_deg - truth.flight_deg + 180) % 360 - 180)
    assert error <= 3.0 * flight.direction_sigma_deg
    # and no wider than the circles make it: the two centres' uncertainties across the flight
    # (image rows here) over the 9 px shift (derived, first order), each centre within the
    # issue's 1 px for a ball without a lit rim
    across = math.hypot(ball_a.center_sigma_px[1], ball_b.center_sigma_px[1])
    assert max(*ball_a.center_sigma_px, *ball_b.center_sigma_px) <= 1.0
    assert flight.direction_sigma_deg == pytest.approx(math.degrees(across / 9.0), rel=0.1)


def test_the_match_follows_the_seam_as_the_ball_spins():
    # the seam turns 1.5 deg between the frames (the generator's spin); the lit rim does not
    frame_a, frame_b, truth = ball_shot(flight_deg=180.0, shift_px=9.0, surface="bright",
                                        seam_deg=30.0, spin_deg=1.5, rim=False, seed=8)
    ball_a, ball_b = find_ball(frame_a), find_ball(frame_b)
    match = match_ball_image(frame_a, frame_b, ball_a, ball_b)
    assert match.rotation_deg == pytest.approx(1.5, abs=0.3)
    error = np.subtract(match.displacement_px, truth.displacement_px)
    assert np.all(np.abs(error) <= 3.0 * np.sqrt(np.diag(match.covariance_px2)))


def test_held_ball_flies_against_the_free_stream():
    # a tunnel: the air streams at (-6, 0.5) px per pair past a ball that does not move; the
    # flight is the opposite of the air's motion past the ball (README, frames of reference)
    yy, xx = np.mgrid[8:400:16, 8:600:16].astype(float)
    rng = np.random.default_rng(1)
    dx = -6.0 + rng.normal(0, 0.1, xx.shape)
    dy = 0.5 + rng.normal(0, 0.1, xx.shape)
    ones = np.ones(xx.shape, dtype=bool)
    field = VectorField(xx, yy, dx, dy, ones, ~ones, ~ones, np.full(xx.shape, 3.0))
    ball = BallFit((300.0, 200.0), 40.0)
    flight = flight_from_stream(field, ball, dt_s=1e-4, scale_mm_per_px=0.1)
    # the ball flies through the air to the right and up: atan2(0.5 up, 6 right) (derived)
    assert flight.source.startswith("free stream")
    assert flight.direction_deg == pytest.approx(math.degrees(math.atan2(0.5, 6.0)), abs=0.1)
    assert flight.speed_m_s == pytest.approx(math.hypot(6.0, 0.5) * 0.1e-3 / 1e-4, rel=0.01)
    assert 0 < flight.direction_sigma_deg < 1.5


def test_flight_override_and_missing_dt():
    a = BallFit((100.0, 100.0), 50.0)
    b = BallFit((100.2, 100.0), 50.0)
    flight = flight_from_balls(a, b, flight_deg=90.0)
    assert flight.direction_deg == 90.0 and flight.source == "override"
    assert flight.speed_m_s is None


def test_flight_convention_up_is_90_deg():
    a = BallFit((100.0, 100.0), 50.0)
    b = BallFit((100.0, 92.0), 50.0)  # moved toward the top of the picture
    assert flight_from_balls(a, b).direction_deg == pytest.approx(90.0)


def test_ball_cut_by_the_image_edge_still_fits():
    frame_a, _, truth = ball_shot(
        shape=(256, 384), radius_px=60.0, center_px=(20.0, 128.0), flight_deg=180.0, seed=5
    )
    fit = find_ball(frame_a)
    assert fit.cut_by_edge
    # truth from the generator; a third of the outline is gone, so a looser 1.5 px limit (ours)
    assert abs(fit.radius_px - truth.radius_px) < 1.5
    assert abs(fit.center_px[0] - truth.center_a_px[0]) < 1.5


def test_no_ball_is_a_clear_message():
    rng = np.random.default_rng(0)
    frame = rng.poisson(200.0, (256, 256)).astype(np.float32)
    with pytest.raises(WakelineError, match="no ball found"):
        find_ball(frame, name="shot 7 frame A")


def test_hint_excludes_regions_of_the_wrong_size():
    frame_a, _, _ = ball_shot(shape=(256, 384), radius_px=40.0, seed=6)
    with pytest.raises(WakelineError, match="no ball found"):
        find_ball(frame_a, radius_hint_px=80.0)


def test_mask_covers_the_ball_and_margin():
    mask = ball_mask((100, 100), BallFit((50.0, 50.0), 20.0), margin_px=3.0)
    assert mask[50, 50] and mask[50, 72] and not mask[50, 74]


@pytest.mark.parametrize("circle", [(50.3, 40.7, 20.2), (-5.5, 97.0, 30.0), (180.0, 50.0, 10.0),
                                    (60.0, 45.0, 200.0)])
def test_mask_window_matches_the_whole_frame_test(circle):
    # the mask tests only the disc's bounding box: the same pixels as testing every pixel
    cx, cy, r = circle
    yy, xx = np.ogrid[:100, :120]
    whole = (xx - cx) ** 2 + (yy - cy) ** 2 <= (r + 3.0) ** 2
    assert np.array_equal(ball_mask((100, 120), BallFit((cx, cy), r), margin_px=3.0), whole)


def test_rulebook_diameters():
    # Laws of Cricket, Law 4: circumference 22.4-22.9 cm (seen in quoted rule text)
    assert nominal_diameter_mm("cricket") == pytest.approx(226.5 / math.pi)
    # Official Baseball Rules 3.01: circumference 9-9.25 in (seen in quoted rule text)
    assert nominal_diameter_mm("Baseball") == pytest.approx(9.125 * 25.4 / math.pi)
    # 12 in softball: circumference 11 7/8 - 12 1/8 in (seen in quoted rule text)
    assert nominal_diameter_mm("softball") == pytest.approx(12.0 * 25.4 / math.pi)
    with pytest.raises(WakelineError):
        nominal_diameter_mm("golf")


def test_a_diameter_is_checked_against_every_grade_of_its_ball_type():
    # Laws of Cricket, Law 4 (memory): men's 22.4-22.9 cm round, women's 21.0-22.5, junior
    # 20.5-22.0; Official Baseball Rules 3.01: 9-9.25 in; softballs of 11 and 12 in (memory)
    for ball_type, diameter in (("cricket", 72.0), ("cricket", 205.0 / math.pi),
                                ("baseball", 73.5), ("softball", 11.0 * 25.4 / math.pi),
                                ("Softball", 97.0), ("golf", 42.7), (None, 97.0),
                                ("cricket", None)):
        assert ball_size_problem(ball_type, diameter) == "", (ball_type, diameter)
    assert ball_size_problem("cricket", 229.0 / math.pi * 1.009) == ""  # within 1 %
    assert "fit a cricket ball (rulebook 65.3-72.9 mm)" in ball_size_problem("cricket", 74.0)
    assert "fit a baseball (rulebook 72.8-74.8 mm)" in ball_size_problem("baseball", 97.0)
    # between the 11 in softball (87.9-89.9 mm) and the 12 in one (96.0-98.0 mm): neither
    assert ball_size_problem("softball", 93.0) == (
        "a ball diameter of 93 mm does not fit a softball (rulebook 87.9-89.9 or 96.0-98.0 mm): "
        "check the ball type and the diameter; the diameter given is used")


def test_scale_from_fitted_radius():
    assert scale_from_ball(50.0, 72.0) == pytest.approx(0.72)


@pytest.mark.parametrize(
    "flight_deg, upper_deg, lower_deg, seed",
    [(0.12, 21.8, 21.8, 303), (3.67, -9.2, 6.0, 305), (176.3, 7.5, 7.5, 300)],
)
def test_particles_beside_the_unlit_side_do_not_pull_the_outline(
    flight_deg, upper_deg, lower_deg, seed
):
    """On a realistic 200 px ball lit from below, the centre stays within 0.12 px of the truth
    across the light direction: a bright particle image just outside the faint far-side rim
    must not be taken for the rim (truth from the generator; before this check the far side
    pulled the centre ~0.2 px toward it)."""
    frame_a, _, truth = ball_shot(
        (768, 1024), radius_px=200.0, flight_deg=flight_deg, upper_deg=upper_deg,
        lower_deg=lower_deg, seed=seed,
    )
    fit = find_ball(frame_a)
    assert abs(fit.center_px[1] - truth.center_a_px[1]) <= 0.12
    assert abs(fit.radius_px - truth.radius_px) <= 0.25


@pytest.mark.parametrize(("flight_deg", "seed"), [(182.0, 308), (3.7, 305), (178.1, 310)])
def test_outline_of_a_large_ball_within_a_third_of_a_pixel_all_round(flight_deg, seed):
    # a 200 px ball as in the separation sweep, lit from below (the top of the rim is faint).
    # Budget (derived): a layer leaving the wall at 5 deg crosses an outline drawn 0.3 px too far
    # out 0.3 / (200 tan 5 deg) rad = 1.0 deg late, so the whole outline must be closer than that
    frame_a, frame_b, truth = ball_shot(
        (768, 1024), radius_px=200.0, flight_deg=flight_deg, upper_deg=0.3, lower_deg=-14.2,
        leave_deg=(6.6, 15.0), seed=seed,
    )
    for frame, centre in ((frame_a, truth.center_a_px), (frame_b, truth.center_b_px)):
        fit = find_ball(frame)
        off_centre = math.hypot(fit.center_px[0] - centre[0], fit.center_px[1] - centre[1])
        # farthest distance between the fitted and the drawn outline
        assert off_centre + abs(fit.radius_px - truth.radius_px) < 0.3


def test_a_ball_filling_most_of_the_frame_fits_too():
    # a 300 px ball in a 2160 x 2560 frame (the benchmark's large shot): the first, wide search
    # band of such a ball reaches bright particles that must not pass for its rim.
    # 0.5 px is the issue's acceptance limit; truth from the generator (core.synth_shot)
    frame_a, frame_b, truth = ball_shot(
        (2160, 2560), radius_px=300.0, shift_px=10.0, upper_deg=12.0, lower_deg=4.0, seed=1,
        density_ppp=0.04,
    )
    for frame, centre in ((frame_a, truth.center_a_px), (frame_b, truth.center_b_px)):
        fit = find_ball(frame)
        assert math.hypot(fit.center_px[0] - centre[0], fit.center_px[1] - centre[1]) < 0.5
        assert abs(fit.radius_px - truth.radius_px) < 0.5


def _found_within(frame_a, frame_b, truth, centre_px, radius_px=None):
    """Both frames' circles within ``centre_px`` of the true centre and ``radius_px`` (default
    the same) of the true radius, and within three of the fit's own standard uncertainties."""
    for frame, centre in ((frame_a, truth.center_a_px), (frame_b, truth.center_b_px)):
        fit = find_ball(frame)
        dx, dy = fit.center_px[0] - centre[0], fit.center_px[1] - centre[1]
        dr = fit.radius_px - truth.radius_px
        assert math.hypot(dx, dy) < centre_px
        assert abs(dr) < (centre_px if radius_px is None else radius_px)
        assert abs(dx) <= 3 * fit.center_sigma_px[0] and abs(dy) <= 3 * fit.center_sigma_px[1]
        assert abs(dr) <= 3 * fit.radius_sigma_px


# --- the ball by what it is in a PIV frame: a round region without particle images ----------

APPEARANCES = {
    "dark, no rim": {"rim": False},
    "dim, rim": {"surface": "dim"},
    "dim, no rim": {"surface": "dim", "rim": False},
    "bright, rim": {"surface": "bright"},
    "bright, no rim": {"surface": "bright", "rim": False},
    "glint": {"surface": "bright", "glint": True},
    "glint, dark, no rim": {"glint": True, "rim": False},
    "shadow, rim": {"shadow": True},
    "shadow, dim, no rim": {"shadow": True, "surface": "dim", "rim": False},
    "seam, dim, no rim": {"surface": "dim", "rim": False, "seam_deg": 30.0, "spin_deg": 1.0},
    "uneven sheet, rim": {"uneven_sheet": 0.8},
    "uneven sheet, no rim": {"uneven_sheet": 0.8, "rim": False},
    "8 bit, rim": {"bits": 8},
    "8 bit, dim, no rim": {"bits": 8, "surface": "dim", "rim": False},
}


@pytest.mark.parametrize("name", list(APPEARANCES))
def test_found_in_every_appearance_within_the_issue_limits(name):
    """Every appearance of the issue: found, centre and radius within 0.3 px with a lit rim and
    1 px without (the issue's targets; truth from the generator), and the truth within three
    of the fit's own standard uncertainties (its covariance is honest)."""
    looks = APPEARANCES[name]
    frame_a, frame_b, truth = ball_shot(flight_deg=183.0, seed=21, **looks)
    limit = 0.3 if looks.get("rim", True) else 1.0
    _found_within(frame_a, frame_b, truth, limit)


def test_the_shadow_strips_straight_edges_are_not_the_ball():
    # lit from below, the ball shadows a strip 2R wide up to the top of the picture: no lit
    # particles in it, so it looks like the ball; only the round end is the outline (truth from
    # the generator)
    frame_a, _, truth = ball_shot(shadow=True, rim=False, surface="dim", light_from_deg=270.0,
                                  seed=22)
    fit = find_ball(frame_a)
    assert math.hypot(fit.center_px[0] - truth.center_a_px[0],
                      fit.center_px[1] - truth.center_a_px[1]) < 1.0
    assert abs(fit.radius_px - truth.radius_px) < 1.0


@pytest.mark.parametrize("seed", [7, 9])
def test_a_large_ball_beside_its_shadow_strip_in_a_tight_frame(seed):
    # a ball 300 px across in a 640 x 800 frame, its shadow a strip as wide as the ball up to
    # the top of the picture: half the outline seen, the rest runs into the strip. Many small
    # quiet patches between particles outvoted it (49 of 60 frames found no ball, seeds 0-29,
    # and 8 of the rest were off by 2-360 px); the centres are now ranked per octave of radius,
    # the air around a candidate is judged on its lit half and a circle that strays from its
    # votes gets one more look (all 60 found, 58 within 1 px, the worst 1.3 px). Truth from
    # the generator; 1 px: the issue's target without a lit rim
    frame_a, frame_b, truth = ball_shot((640, 800), radius_px=150.0, flight_deg=183.0,
                                        seed=seed, shadow=True, rim=False)
    for frame, centre in ((frame_a, truth.center_a_px), (frame_b, truth.center_b_px)):
        fit = find_ball(frame)
        dx, dy = fit.center_px[0] - centre[0], fit.center_px[1] - centre[1]
        assert math.hypot(dx, dy) < 1.0 and abs(fit.radius_px - truth.radius_px) < 1.0
        assert abs(dx) <= 3 * fit.center_sigma_px[0] and abs(dy) <= 3 * fit.center_sigma_px[1]


def test_a_glare_arc_is_left_out_of_the_outline():
    # a saturated glint where the sheet hits the ball, its glare over the outline: the rays
    # through it are dropped, so part of the outline is not used and the circle stays true
    frame_a, _, truth = ball_shot(surface="bright", glint=True, rim=False, seed=23)
    fit = find_ball(frame_a)
    assert fit.arc_share < 0.97
    assert math.hypot(fit.center_px[0] - truth.center_a_px[0],
                      fit.center_px[1] - truth.center_a_px[1]) < 0.3


def test_the_outline_cue_follows_what_is_seen():
    rim, _, _ = ball_shot(seed=24)
    bright, _, _ = ball_shot(surface="bright", rim=False, seed=24)
    bare, _, _ = ball_shot(rim=False, seed=24)
    assert find_ball(rim).outline == "lit rim"
    assert find_ball(bright).outline == "surface edge"
    assert find_ball(bare).outline == "particle images"


def test_a_surface_the_air_brightness_is_no_longer_refused():
    # the issue: a dim ball (about the seeded air's mean) was refused as "no region much darker
    # than the seeded air"; its mean is the air's here (generator, "dim")
    frame_a, _, truth = ball_shot(surface="dim", rim=False, seed=25)
    yy, xx = np.mgrid[0 : frame_a.shape[0], 0 : frame_a.shape[1]]
    inside = np.hypot(xx - truth.center_a_px[0], yy - truth.center_a_px[1]) < truth.radius_px - 2
    air = np.hypot(xx - truth.center_a_px[0], yy - truth.center_a_px[1]) > truth.radius_px + 3
    assert frame_a[inside].mean() == pytest.approx(frame_a[air].mean(), rel=0.25)
    assert abs(find_ball(frame_a).radius_px - truth.radius_px) < 1.0


def test_warnings_for_radius_scale_frames_and_poor_fits():
    from core.shot import _ball_warnings

    good = BallFit((100.0, 100.0), 64.0, center_sigma_px=(0.02, 0.02), radius_sigma_px=0.02,
                   arc_share=0.8, outline="lit rim")
    assert _ball_warnings(good, good, 64.2) == []
    # 64 px against 66 px from diameter / scale: 3 % off, beyond the ~1 % of the issue
    assert any("diameter / scale" in w for w in _ball_warnings(good, good, 66.0))
    other = BallFit((108.0, 100.0), 64.5, center_sigma_px=(0.02, 0.02), radius_sigma_px=0.02,
                    arc_share=0.8, outline="lit rim")
    assert any("differs between the frames" in w for w in _ball_warnings(good, other, None))
    poor = BallFit((100.0, 100.0), 64.0, center_sigma_px=(0.9, 0.4), radius_sigma_px=0.5,
                   arc_share=0.25, outline="particle images")
    assert any("frame B" in w and "poorly fitted" in w for w in _ball_warnings(good, poor, None))


def test_stored_records_without_uncertainties_still_load():
    from core.summary import ShotSummary

    stored = ShotSummary.from_dict({
        "ball": {"frame_a": {"center_px": [1.0, 2.0], "radius_px": 3.0, "residual_px": 0.1,
                             "cut_by_edge": False}},
        "flight": {"direction_deg": 180.0, "speed_m_s": 30.0, "displacement_px": [-8.0, 0.0]},
    })
    old, flight = stored.ball_a, stored.flight
    assert math.isnan(old.radius_sigma_px) and old.covariance_px2 is None
    assert flight.direction_sigma_deg is None and flight.source == "ball displacement"


def test_ransac_circle_keeps_the_inliers_skimage_ransac_keeps():
    # the fine search's RANSAC solves all trials at once; on an outline with a third of its
    # points spoilt (particle images pushing them 1-8 px out) it keeps the same inliers as
    # skimage's ransac with CircleModel, which it replaces
    import warnings

    from skimage.measure import CircleModel, ransac

    from core.ball.coarse import ransac_circle

    rng = np.random.default_rng(3)
    theta = rng.uniform(0, 2 * math.pi, 600)
    rho = 80.0 + rng.normal(0, 0.08, theta.size)
    spoilt = rng.random(theta.size) < 0.33
    rho[spoilt] += rng.uniform(1.0, 8.0, spoilt.sum())
    points = np.column_stack([40.0 + rho * np.cos(theta), 30.0 + rho * np.sin(theta)])
    ours = ransac_circle(points, 0.5, (41.0, 29.5, 79.0), 5.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _, theirs = ransac(points, CircleModel, min_samples=3, residual_threshold=0.5,
                           max_trials=100, rng=np.random.default_rng(1))
    assert np.array_equal(ours, theirs) and np.array_equal(ours, ~spoilt)
    # no circle within reach of the start: none
    assert ransac_circle(points, 0.5, (140.0, 30.0, 79.0), 5.0) is None


def test_row_medians_of_finite_values_match_numpys_nanmedian():
    # the outline's coherence test takes the median of each ray's neighbours without NaNs by
    # sorting; np.nanmedian is what it replaces
    import warnings

    from core.ball.outline import _nan_median_rows

    rng = np.random.default_rng(4)
    rows = rng.normal(size=(2000, 9))
    rows[rng.random(rows.shape) < 0.4] = np.nan
    rows[:5] = np.nan
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        expected = np.nanmedian(rows, axis=1)
    np.testing.assert_array_equal(_nan_median_rows(rows), expected)


def test_the_balls_brightness_spread_is_numpys_percentiles():
    # the image match's gain sorts the ball's pixels before taking their percentiles (faster);
    # the same spread as np.percentile of the unsorted pixels
    from core.ball.flight import _spread

    values = np.random.default_rng(5).standard_t(3, 100001).astype(np.float32) * 40.0
    assert _spread(values) == float(np.subtract(*np.percentile(values, [99, 50])))


def test_beside_a_shadow_the_disc_is_fitted_to_the_lit_half_and_the_shadows_edges():
    # particle images evenly spread around a ball of radius 60 at the origin, none in a strip
    # 120 wide from its far side (its laser shadow, toward +y; the light comes from -y): the
    # lit half's images face the circle, those beside the strip behind the ball face the
    # strip's edges (normals +-x), the strip's own air is not used; without the strip, all of
    # them face the circle (geometry of the construction)
    from core.ball.disc import _around_outline

    rng = np.random.default_rng(6)
    x, y = rng.uniform(-150, 150, (2, 20000))
    around = np.hypot(x, y) > 60.0
    lit = ~((np.abs(x) < 60.0) & (y > 0))
    points = _around_outline(x[around & lit], y[around & lit], 0.0, 0.0, 60.0, 4.0, 84.0)
    edge = points.along.any(axis=1)
    assert np.all(points.py[~edge] <= 0.0)
    assert np.allclose(np.hypot(points.px[~edge], points.py[~edge]),
                       points.px[~edge] * points.normal_x[~edge]
                       + points.py[~edge] * points.normal_y[~edge])
    assert np.all((points.py[edge] > 0) & (points.py[edge] < 60.0))
    assert np.allclose(np.abs(points.normal_x[edge]), 1.0)
    assert np.all(np.sign(points.px[edge]) == np.sign(points.normal_x[edge]))
    assert np.all((np.abs(points.px[edge]) > 56.0) & (np.abs(points.px[edge]) < 84.0))
    whole = _around_outline(x[around], y[around], 0.0, 0.0, 60.0, 4.0, 84.0)
    assert not whole.along.any()
    assert whole.px.size == np.count_nonzero(around & (np.hypot(x, y) < 84.0))


def test_a_dark_sector_without_a_shadow_strip_keeps_the_lit_half_only():
    # the same evenly spread particle images without a strip: a dark direction forced on the
    # fit (as glare or the picture's edge would make one) finds the air behind the ball as
    # seeded as beside it, so no shadow edges are fitted; with the picture ending just behind
    # the ball, neither (geometry of the construction)
    from core.ball.disc import _around_outline

    rng = np.random.default_rng(6)
    x, y = rng.uniform(-150, 150, (2, 20000))
    around = np.hypot(x, y) > 60.0
    forced = _around_outline(x[around], y[around], 0.0, 0.0, 60.0, 4.0, 84.0,
                             axis=-math.pi / 2)
    assert not forced.along.any()
    assert np.all(forced.py < 0.0)
    cut = around & (y < 62.0)
    edge_of_picture = _around_outline(x[cut], y[cut], 0.0, 0.0, 60.0, 4.0, 84.0,
                                      axis=-math.pi / 2)
    assert not edge_of_picture.along.any()


@pytest.mark.parametrize("seed", [21, 22, 23])
def test_a_dark_ball_without_rim_beside_its_shadow(seed):
    # the particle-free disc fitted to the lit half and the shadow's edges behind the ball (truth
    # from the generator): fitted to all particle images, the shadow's missing ones drew it up to
    # 3.8 px toward the shadow; to the lit half only, up to 2.9 px off with the radius 2.9 px
    # too large (its arc fixes them only together; 57 frames of seeds 0-29); with the edges,
    # which hold the ball's width, within 1.7 px and 1.5 px there, and within three of its own
    # standard uncertainties. Not yet the 1 px target: the lit arc's sparse particle images
    # alone place the centre along the light (R = 64 px, 0.06 particles per px)
    frame_a, frame_b, truth = ball_shot(flight_deg=183.0, seed=seed, shadow=True, rim=False)
    _found_within(frame_a, frame_b, truth, 1.8, 1.5)


@pytest.mark.parametrize(("surface", "radius", "seed"), [("dark", 90.0, 1), ("dim", 150.0, 2)])
def test_a_rimless_ball_beside_its_shadow_on_the_physical_family(surface, radius, seed):
    # the second synthetic family (truth from the generator), sheet from below, shadow upward:
    # the dark ball's disc was 1.3 px off from its lit half alone (both frames; now with the
    # shadow's edges); the large dim ball was fitted 26 px off from its shaded limb fading to
    # the shadow's level in the wide first band (now the disc brings the circle close first)
    from core.synth_physical import physical_shot

    frame_a, frame_b, truth = physical_shot(
        (700, 900), radius_px=radius, surface=surface, lit_rim=False, shadow=True,
        light_from_deg=270.0, seed=seed,
    )
    _found_within(frame_a, frame_b, truth, 1.0)


def test_a_bright_balls_halo_is_left_out_of_the_outline():
    # the second synthetic family's bright ball scatters light into the air beside its lit
    # side, a halo fading over 3-8 px: its tail drew the surface step's crossing outward there
    # (this shot: 1.2 px off, the radius 0.9 px too large, outside three of the fit's own
    # standard uncertainties). The arc where the air beside the outline stands above the air a
    # few pixels further out is now left out (0.4 px off). Truth from the generator; 1 px:
    # the issue's target without a lit rim
    from core.synth_physical import physical_shot

    frame_a, frame_b, truth = physical_shot(
        (384, 512), radius_px=64.0, flight_deg=183.0, surface="bright", lit_rim=False,
        sheet_unevenness=0.0, seed=43,
    )
    _found_within(frame_a, frame_b, truth, 1.0)


def test_a_dim_balls_faded_limb_is_left_out_of_the_outline():
    # the second synthetic family's dim ball is shaded toward its limb, which fades to the
    # air's level over several pixels on part of the outline: the step's crossing fell inside
    # the outline there and drew the circle in (this shot, beside its laser shadow: 1.2 px
    # off, the radius 1.1 px small). Rays whose surface 2-3 px inside the outline is already
    # below half-way are left out. Truth from the generator; 1 px: the issue's target without
    # a lit rim
    from core.synth_physical import physical_shot

    frame_a, frame_b, truth = physical_shot(
        (384, 512), radius_px=64.0, flight_deg=183.0, surface="dim", lit_rim=False,
        shadow=True, sheet_unevenness=0.0, seed=40,
    )
    _found_within(frame_a, frame_b, truth, 1.0)
