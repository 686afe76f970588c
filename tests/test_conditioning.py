"""Image conditioning: glare masked, a background removed, intensity evened (core.conditioning)."""

import math

import numpy as np
import pytest

from core import WakelineError
from core.conditioning import (
    MIN_GLARE_AREA_PX,
    background_image,
    background_problem,
    glare_mask,
    normalise_local,
    particle_spacing_px,
    subtract_background,
)
from core.synth import render_particles
from core.synth_shot import ball_shot


def _particles(shape, count, peak, seed):
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, shape[1] - 1, count)
    y = rng.uniform(0, shape[0] - 1, count)
    return render_particles(shape, x, y, 2.8, peak)


def test_glare_is_masked_but_saturated_particle_images_are_not():
    # particle images twice as bright as full scale saturate over a few pixels only (a 2.8 px
    # Gaussian image above half its peak covers about pi (0.29 d)^2 = 2 px: derived); a glint
    # saturates a patch of ~100 px
    frame = np.clip(_particles((128, 128), 300, 2 * 4095.0, seed=1), 0, 4095)
    yy, xx = np.mgrid[0:128, 0:128]
    glint = np.hypot(xx - 64, yy - 64) < 6
    frame[glint] = 4095.0
    mask = glare_mask(frame)
    assert mask[glint].all()
    assert mask[64, 64 + 6 + 3]  # grown by its halo
    far = np.hypot(xx - 64, yy - 64) > 25
    assert not mask[far].any()  # saturated particle images elsewhere stay
    assert (frame[far] >= 4095).sum() > 0


def test_no_glare_on_an_unsaturated_frame():
    frame = _particles((96, 96), 200, 1500.0, seed=2)
    assert not glare_mask(frame, level=4095.0).any()
    assert MIN_GLARE_AREA_PX > math.pi * (0.29 * 2.8) ** 2 * 4  # far above a particle's core


def test_background_of_a_camera_position_keeps_the_fixed_reflection():
    # per-pixel minimum over frames whose particles move: the fixed light stays, the particle
    # light goes (closed form: min over frames of reflection + particles = reflection where a
    # pixel is free of particles in at least one frame)
    shape = (64, 64)
    yy, xx = np.mgrid[0:64, 0:64]
    reflection = 500.0 * np.exp(-((xx - 20) ** 2 + (yy - 40) ** 2) / 50.0) + 30.0
    frames = [reflection + _particles(shape, 150, 1000.0, seed=s) for s in range(8)]
    for method, tol in (("min", 1.0), ("median", 60.0)):
        background = background_image(frames, method)
        assert np.median(np.abs(background - reflection)) < tol
    cleaned = subtract_background(frames[0], background_image(frames, "min"))
    assert cleaned.min() >= 0 and np.median(cleaned) < 5.0


def test_a_frame_of_the_shot_is_no_background():
    # fixed light (sharp rings and a fixed noise pattern, as strong as the particle images) is
    # in both frames and in every background alike; a minimum or median over shots, even of
    # this shot's own two frames, shares it with A and B evenly, while frame B itself, at any
    # gain (another export), carries B's particle images only
    shape = (128, 128)
    rng = np.random.default_rng(7)
    yy, xx = np.mgrid[0:128, 0:128]
    fixed = 400.0 * ((np.hypot(xx - 64, yy - 64) % 20) < 2) + rng.normal(0.0, 80.0, shape)
    frames = [30.0 + fixed + _particles(shape, 800, 300.0, seed=s) for s in range(5)]
    pair = (("frame A", frames[0]), ("frame B", frames[1]))
    for method in ("min", "median"):
        for count in (2, 3, 5):
            assert background_problem(background_image(frames[:count], method), pair) == ""
    for other in (frames[4], 30.0 + fixed, np.zeros(shape), rng.normal(0.0, 1.0, shape)):
        assert background_problem(other, pair) == ""
    for gain in (1.0, 1.0 / 16.0):
        assert background_problem(gain * frames[1] + 7.0, pair).startswith(
            "its particle images are those of frame B: a background is")


def test_background_errors_are_one_line():
    with pytest.raises(WakelineError, match="at least two frames"):
        background_image([np.zeros((4, 4))])
    with pytest.raises(WakelineError, match="frame A: background image is 5x4"):
        subtract_background(np.zeros((8, 8)), np.zeros((4, 5)), "frame A")


def test_local_normalisation_evens_an_uneven_sheet():
    # the same seeding lit 4x more on the right than the left: min-max normalisation (common
    # practice) brings the particle images' local contrast to the same level on both sides
    shape = (128, 256)
    light = _particles(shape, 1600, 1000.0, seed=3)
    gain = np.linspace(0.25, 1.0, shape[1])[None, :]
    frame = 40.0 + light * gain
    out = normalise_local(frame, 3 * particle_spacing_px(frame))
    left, right = out[:, 8:48], out[:, 208:248]
    assert np.percentile(frame[:, 208:248], 99) > 2.0 * np.percentile(frame[:, 8:48], 99)
    assert np.percentile(right, 99) == pytest.approx(np.percentile(left, 99), rel=0.25)


def test_normalisation_leaves_masked_pixels_dark():
    frame = 40.0 + _particles((64, 64), 200, 1000.0, seed=4)
    mask = np.zeros(frame.shape, dtype=bool)
    mask[20:30, 20:30] = True
    frame[mask] = 4095.0
    out = normalise_local(frame, 15.0, mask=mask)
    assert (out[mask] == 0).all() and out[~mask].max() > 0.5


def test_particle_spacing_follows_the_seeding():
    # mean spacing of a 2-D Poisson seeding of density n is about 1 / sqrt(n) (derived); the
    # count misses overlapping images, so the figure is rough: within 30 %
    for density in (0.01, 0.03):
        frame_a, _, _ = ball_shot(density_ppp=density, seed=5)
        assert particle_spacing_px(frame_a) == pytest.approx(1.0 / math.sqrt(density), rel=0.3)


def test_conditioning_settings_enter_the_fingerprint():
    from dataclasses import replace

    from core.shot import ShotSettings

    base = ShotSettings()
    assert base.mask_glare and base.normalise_spacings
    assert base.fingerprint() != replace(base, mask_glare=False).fingerprint()
    assert base.fingerprint() != replace(base, normalise_spacings=None).fingerprint()
    assert ShotSettings.from_dict(base.to_dict()) == base
