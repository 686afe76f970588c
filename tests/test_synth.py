"""Synthetic particle images and analytic displacement fields."""

import math

import numpy as np
import pytest

from core import synth


def test_same_seed_gives_same_frames_and_other_seed_differs():
    shape = (64, 96)
    a1, b1 = synth.particle_pair(shape, synth.uniform(1.5, -0.5), seed=7)
    a2, b2 = synth.particle_pair(shape, synth.uniform(1.5, -0.5), seed=7)
    a3, _ = synth.particle_pair(shape, synth.uniform(1.5, -0.5), seed=8)
    assert a1.dtype == np.float32 and a1.shape == shape
    np.testing.assert_array_equal(a1, a2)
    np.testing.assert_array_equal(b1, b2)
    assert np.any(a1 != a3)


@pytest.mark.parametrize("density_ppp", [0.01, 0.05])
def test_particle_count_follows_density(density_ppp):
    # N = ppp * area inside the e^-2 sheet thickness (derived from the definition of ppp)
    shape = (256, 256)
    _, _, parts = synth.particle_pair(
        shape, synth.uniform(0.0, 0.0), density_ppp=density_ppp, return_particles=True, seed=3
    )
    in_frame = (
        (parts.x_a_px >= -0.5)
        & (parts.x_a_px < shape[1] - 0.5)
        & (parts.y_a_px >= -0.5)
        & (parts.y_a_px < shape[0] - 0.5)
    )
    thickness = 8.0 * 3.5  # the documented default sheet thickness
    in_sheet = np.abs(parts.z_px) <= thickness / 2
    expected = density_ppp * shape[0] * shape[1]
    count = np.count_nonzero(in_frame & in_sheet)
    assert abs(count - expected) < 4 * math.sqrt(expected)


def test_bit_depth_rounds_and_saturates():
    a, _ = synth.particle_pair((64, 64), synth.uniform(0.5, 0.5), bits=8, peak_fraction=3.0)
    assert a.max() == 255.0 and a.min() >= 0.0
    assert np.count_nonzero(a == 255.0) > 10
    np.testing.assert_array_equal(a, np.rint(a))


def test_pixel_integrated_particle_keeps_its_volume_and_centroid():
    # integral of I0 exp(-8 r^2/d^2) over the plane is I0 pi d^2 / 8 (derived, Gaussian integral);
    # with 100 % fill factor the pixel means sum to exactly that, centred on the particle
    img = synth.render_particles((31, 31), np.array([15.3]), np.array([14.65]), 3.0, 200.0)
    assert img.sum() == pytest.approx(200.0 * math.pi * 9.0 / 8.0, rel=1e-6)
    yy, xx = np.mgrid[0:31, 0:31]
    # centroid to 1e-4 px: the patch is cut at 3 sigma + 1 px
    assert (img * xx).sum() / img.sum() == pytest.approx(15.3, abs=1e-4)
    assert (img * yy).sum() / img.sum() == pytest.approx(14.65, abs=1e-4)


def test_pixel_value_is_mean_of_gaussian_over_the_pixel():
    # brute-force mean over the pixel area of I0 exp(-8 r^2/d^2) (derived: definition)
    img = synth.render_particles((9, 9), np.array([4.2]), np.array([3.9]), 2.4, 100.0)
    s = np.linspace(-0.5, 0.5, 401)[:-1] + 0.5 / 400
    for row, col in [(4, 4), (3, 5), (4, 3)]:
        yy, xx = np.meshgrid(row + s, col + s, indexing="ij")
        mean = np.mean(100.0 * np.exp(-8 * ((xx - 4.2) ** 2 + (yy - 3.9) ** 2) / 2.4**2))
        assert img[row, col] == pytest.approx(mean, rel=1e-4)


def test_particles_are_placed_symmetrically_about_the_seed_point():
    field = synth.lamb_oseen((40.0, 40.0), 300.0, 10.0)
    _, _, parts = synth.particle_pair((80, 80), field, return_particles=True, noise=0.0)
    mid_x = 0.5 * (parts.x_a_px + parts.x_b_px)
    mid_y = 0.5 * (parts.y_a_px + parts.y_b_px)
    dx, dy = field(mid_x, mid_y)
    np.testing.assert_allclose(parts.x_b_px - parts.x_a_px, dx, atol=1e-12)
    np.testing.assert_allclose(parts.y_b_px - parts.y_a_px, dy, atol=1e-12)


def test_out_of_plane_motion_dims_particles_that_leave_the_sheet():
    # I0(z) = q exp(-8 z^2/dz0^2) (Raffel et al., memory): a particle moving across the sheet
    # changes brightness between frames
    _, _, parts = synth.particle_pair(
        (64, 64),
        synth.uniform(0, 0),
        out_of_plane_px=6.0,
        sheet_thickness_px=12.0,
        return_particles=True,
    )
    z_a = parts.z_px - 3.0
    np.testing.assert_allclose(
        parts.peak_a / parts.peak_a.max(),
        np.exp(-8 * z_a**2 / 144.0) / np.exp(-8 * z_a**2 / 144.0).max(),
    )
    assert np.mean(np.abs(parts.peak_a - parts.peak_b)) > 0.1 * parts.peak_a.max()


def _numeric_vorticity(field, x, y, h=1e-3):
    dxp, _ = field(x, y + h)
    dxm, _ = field(x, y - h)
    _, dyp = field(x + h, y)
    _, dym = field(x - h, y)
    return (dxp - dxm) / (2 * h) - (dyp - dym) / (2 * h)


def test_lamb_oseen_swirl_peak_and_vorticity():
    # v_theta max = 0.63817 G/(2 pi rc) at r = 1.1209 rc (Lamb-Oseen closed form, seen)
    field = synth.lamb_oseen((10.0, 20.0), 200.0, 8.0)
    dx, dy = field(np.array([10.0 + 1.1209 * 8.0]), np.array([20.0]))
    assert math.hypot(dx[0], dy[0]) == pytest.approx(0.63817 * 200 / (2 * math.pi * 8), rel=1e-4)
    assert dy[0] < 0  # right of the centre, counter-clockwise on screen moves up (-y)
    pts = np.array([[10.0, 20.0], [13.0, 25.0], [30.0, 5.0]])
    omega = field.vorticity(pts[:, 0], pts[:, 1])
    np.testing.assert_allclose(_numeric_vorticity(field, pts[:, 0], pts[:, 1]), omega, rtol=1e-5)
    assert omega[0] == pytest.approx(200.0 / (math.pi * 64.0))
    r = np.linspace(0.1, 40.0, 400001)
    scan = np.hypot(*field(10.0 + r, np.full_like(r, 20.0)))
    assert field.peak_displacement_px() == pytest.approx(scan.max(), rel=1e-7)


def test_uniform_shear_vorticity_sign():
    field = synth.uniform_shear(0.02, y_ref_px=50.0)
    x, y = np.array([3.0, 9.0]), np.array([10.0, 70.0])
    np.testing.assert_allclose(_numeric_vorticity(field, x, y), field.vorticity(x, y), atol=1e-9)


def test_potential_sphere_far_field_surface_speed_and_no_vorticity():
    # u_r = U cos a (1 - R^3/r^3), u_a = -U sin a (1 + R^3/(2 r^3)) (Batchelor 1967, memory):
    # surface speed 1.5 U sin a, free stream U far away, irrotational (derived)
    field = synth.potential_sphere((0.0, 0.0), 10.0, 4.0, direction_deg=90.0)
    dx, dy = field(np.array([0.0]), np.array([-1e5]))
    assert dx[0] == pytest.approx(0.0, abs=1e-9) and dy[0] == pytest.approx(-4.0, rel=1e-9)
    a = np.radians(np.array([30.0, 90.0, 140.0]))
    # angle a from the stream (toward -y); points on the surface just outside R
    x, y = 10.0001 * np.sin(a), -10.0001 * np.cos(a)
    dx, dy = field(x, y)
    np.testing.assert_allclose(np.hypot(dx, dy), 1.5 * 4.0 * np.sin(a), rtol=1e-3)
    xs, ys = np.array([14.0, -20.0, 3.0]), np.array([5.0, 13.0, -30.0])
    np.testing.assert_allclose(_numeric_vorticity(field, xs, ys), 0.0, atol=1e-6)
    inside_dx, inside_dy = field(np.array([2.0]), np.array([3.0]))
    assert inside_dx[0] == 0.0 and inside_dy[0] == 0.0
