"""Physically built synthetic shots: :func:`physical_shot`, :func:`physical_cases` and the truth."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from core.geometry import flight_unit, side_normal
from core.synth import render_particles
from core.synth_physical.boundary_layer import falkner_skan_table, thwaites_mangler
from core.synth_physical.camera import (
    SURFACES,
    BallLook,
    LightSheet,
    camera_background,
    expose,
    paint_ball,
    surface_level,
)
from core.synth_physical.flow import BallWake, SideSpec, WakeSpec, side_separation_rad
from core.synth_shot import ShotTruth

#: Reynolds number U D / nu of a smooth sphere's drag crisis (Achenbach 1972; memory): beyond it a
#: real layer turns turbulent before separating; the laminar model is kept there and flagged.
SMOOTH_SPHERE_CRITICAL_RE = 3.7e5
#: Substeps of the midpoint rule per half exposure interval: against 8 substeps, 2 move particles
#: by at most 0.04 px (0.01 px at the 99th percentile next to the wall) on a 200 px ball.
ADVECTION_SUBSTEPS = 2


@dataclass
class PhysicalShotTruth(ShotTruth):
    """Truth of a physically built shot: the first family's fields and what made the flow.

    Per-side pairs are ``(upper, lower)``; lengths in px unless named otherwise. ``upper_deg`` /
    ``lower_deg`` are where the attached layer's wall shear vanishes (Thwaites' separation), or
    on a tripped side where Head's method separates the turbulent layer, in the README's
    convention (angle from the front stagnation point - 90 deg).
    """

    reynolds_number: float = 0.0  # U D / nu
    beyond_drag_crisis: bool = False  # Re above a smooth sphere's crisis, laminar model kept
    kinematic_viscosity_m2_s: float = 0.0
    air_temp_c: float = 20.0
    delta99_sep_px: tuple[float, float] = (0.0, 0.0)
    theta_sep_px: tuple[float, float] = (0.0, 0.0)  # momentum thickness
    vorticity_thickness_sep_px: tuple[float, float] = (0.0, 0.0)
    spreading_coefficient: float = 0.18  # c in d(delta_w)/dx = c (U1 - U2)/(U1 + U2)
    spreading_rate: tuple[float, float] = (0.0, 0.0)  # d(delta_w)/dx of each free layer
    measured_share: tuple[float, float] = (1.0, 1.0)
    trip_deg: tuple[float | None, float | None] = (None, None)  # from the front stagnation point
    turning_px: tuple[float, float] = (0.0, 0.0)
    closure_px: float = 0.0  # ball centre to the end of the recirculation, along the wake
    surface: str = "dark"
    lit_rim: bool = True
    glint: bool = False
    shadow: bool = False
    shadow_side: str | None = None
    light_from_deg: float = 90.0
    bit_depth: int = 12
    held: bool = False
    spin_rpm: float = 0.0


def air_kinematic_viscosity(temp_c: float = 20.0, pressure_pa: float = 101325.0) -> float:
    """Kinematic viscosity of dry air (m^2/s) from Sutherland's law and the ideal gas.

    ``mu = 1.716e-5 (T/273.15)^1.5 (273.15 + 110.4)/(T + 110.4)`` Pa s (White, Viscous Fluid
    Flow; memory) and ``rho = p / (287.05 T)``: 1.51e-5 m^2/s at 20 deg C.
    """
    t_k = temp_c + 273.15
    mu = 1.716e-5 * (t_k / 273.15) ** 1.5 * (273.15 + 110.4) / (t_k + 110.4)
    return mu / (pressure_pa / (287.05 * t_k))


def separation_thickness_factor(measured_share: float) -> float:
    """``delta99_sep / R * sqrt(U R / nu)``: the layer thickness at separation at any Reynolds.

    The laminar layer scales as ``1/sqrt(Re)`` (Thwaites; derived), so one number per surface
    velocity gives the thickness at every speed, size and viscosity.
    """
    layer = thwaites_mangler(measured_share)
    table = falkner_skan_table()
    return math.sqrt(float(layer.theta2_re[-1])) * float(table.delta99[0] / table.theta[0])


def physical_flow(
    shape: tuple[int, int] = (1024, 1280),
    *,
    radius_px: float = 200.0,
    flight_deg: float = 180.0,
    speed_m_s: float | None = None,
    ball_diameter_mm: float = 72.0,
    dt_s: float | None = None,
    shift_px: float | None = None,
    center_px: tuple[float, float] | None = None,
    layer_px: float | None = None,
    air_temp_c: float = 20.0,
    measured_share: tuple[float, float] = (1.0, 0.6),
    departure_deg: tuple[float, float] = (10.0, 12.0),
    turning_radii: tuple[float, float] = (1.0, 1.0),
    trip_deg: tuple[float | None, float | None] = (None, None),
    wake_deflection_deg: float | None = None,
    spreading_coefficient: float = 0.18,
    reverse_ratio: float = 0.1,
    axis_reverse_ratio: float = 0.3,
    closure_diameters: float = 1.5,
    rollup_fraction: float = 0.4,
    held: bool = False,
    seed: int = 0,
) -> tuple[BallWake, PhysicalShotTruth]:
    """The flow of :func:`physical_shot` without the images: the ball-frame flow and the truth.

    Takes the flow's parameters of :func:`physical_shot` (same meaning, same defaults) and gives
    the same flow and truth for the same seed; the truth's image fields keep their defaults.
    ``flow.velocity(rx, ry, tau)`` is the ball-frame velocity (px per frame interval) at
    ``(rx, ry)`` from the ball centre at mid-exposure; in the lab frame add ``displacement_px``.
    """
    if not all(0.0 <= share <= 1.0 for share in measured_share):
        raise ValueError("measured_share must lie in 0..1 (measured .. potential surface velocity)")
    if not all(0.0 <= angle <= 30.0 for angle in departure_deg):
        raise ValueError("departure_deg must lie in 0..30 deg")
    rng = np.random.default_rng([seed, 0])
    height, width = shape
    scale = ball_diameter_mm / (2.0 * radius_px)
    radius_m = 0.5e-3 * ball_diameter_mm
    nu = air_kinematic_viscosity(air_temp_c)
    laminar = [share for share, trip in zip(measured_share, trip_deg) if trip is None]
    if layer_px is not None:
        if not laminar:
            raise ValueError("layer_px sets the laminar sides' thickness: give a side no trip")
        factor = float(np.mean([separation_thickness_factor(share) for share in laminar]))
        reynolds_radius = (factor * radius_px / layer_px) ** 2
        if speed_m_s is None:
            speed_m_s = reynolds_radius * nu / radius_m
        else:
            nu = speed_m_s * radius_m / reynolds_radius
    speed_m_s = 30.0 if speed_m_s is None else float(speed_m_s)
    reynolds_radius = speed_m_s * radius_m / nu
    if dt_s is None:
        drawn = rng.uniform(8.0, 10.0)  # drawn either way: a given shift changes nothing else
        dt_s = (drawn if shift_px is None else shift_px) * scale * 1e-3 / speed_m_s
    elif shift_px is not None:
        raise ValueError("give dt_s or shift_px, not both")
    shift_px = speed_m_s * dt_s / (scale * 1e-3)
    fx, fy = flight_unit(flight_deg)
    if center_px is None:
        margin = radius_px + 12.0
        center_px = (
            float(np.clip(0.5 * (width - 1) + 0.22 * width * fx, margin, width - 1 - margin)),
            float(np.clip(0.5 * (height - 1) + 0.22 * height * fy, margin, height - 1 - margin)),
        )
    reach = math.hypot(width, height) + 2.0 * radius_px
    specs = [
        SideSpec(share, departure, turning, trip)
        for share, departure, turning, trip in zip(
            measured_share, departure_deg, turning_radii, trip_deg
        )
    ]
    if wake_deflection_deg is None:
        t_up, t_lo = (side_separation_rad(spec, reynolds_radius) for spec in specs)
        wake_deflection_deg = float(np.clip(-0.4 * math.degrees(t_up - t_lo), -10.0, 10.0))
    wake = WakeSpec(
        wake_deflection_deg,
        spreading_coefficient,
        reverse_ratio,
        axis_reverse_ratio,
        closure_diameters,
        rollup_fraction,
    )
    flow = BallWake(
        radius_px,
        shift_px,
        flight_deg,
        reynolds_radius,
        specs[0],
        specs[1],
        wake,
        reach,
        rng,
    )
    moved = (0.0, 0.0) if held else (shift_px * fx, shift_px * fy)
    up, lo = flow.sides["upper"], flow.sides["lower"]
    truth = PhysicalShotTruth(
        center_a_px=(center_px[0] - 0.5 * moved[0], center_px[1] - 0.5 * moved[1]),
        center_b_px=(center_px[0] + 0.5 * moved[0], center_px[1] + 0.5 * moved[1]),
        radius_px=float(radius_px),
        flight_deg=float(flight_deg) % 360.0,
        displacement_px=moved,
        speed_m_s=speed_m_s,
        dt_s=float(dt_s),
        scale_mm_per_px=scale,
        ball_diameter_mm=ball_diameter_mm,
        upper_deg=flow.separation_deg("upper"),
        lower_deg=flow.separation_deg("lower"),
        wake_deflection_deg=float(wake_deflection_deg),
        leave_deg=tuple(map(float, departure_deg)),
        reynolds_number=2.0 * reynolds_radius,
        beyond_drag_crisis=bool(2.0 * reynolds_radius > SMOOTH_SPHERE_CRITICAL_RE),
        kinematic_viscosity_m2_s=nu,
        air_temp_c=air_temp_c,
        delta99_sep_px=(up.delta99_sep_px, lo.delta99_sep_px),
        theta_sep_px=(up.theta_sep_px, lo.theta_sep_px),
        vorticity_thickness_sep_px=(up.vorticity_thickness_sep_px, lo.vorticity_thickness_sep_px),
        spreading_coefficient=spreading_coefficient,
        spreading_rate=(up.spreading_rate, lo.spreading_rate),
        measured_share=(float(measured_share[0]), float(measured_share[1])),
        trip_deg=tuple(None if trip is None else float(trip) for trip in trip_deg),
        turning_px=(up.turning_px, lo.turning_px),
        closure_px=flow.closure_xi_px,
        held=held,
    )
    return flow, truth


def physical_shot(
    shape: tuple[int, int] = (1024, 1280),
    *,
    radius_px: float = 200.0,
    flight_deg: float = 180.0,
    speed_m_s: float | None = None,
    ball_diameter_mm: float = 72.0,
    dt_s: float | None = None,
    shift_px: float | None = None,
    center_px: tuple[float, float] | None = None,
    layer_px: float | None = None,
    air_temp_c: float = 20.0,
    measured_share: tuple[float, float] = (1.0, 0.6),
    departure_deg: tuple[float, float] = (10.0, 12.0),
    turning_radii: tuple[float, float] = (1.0, 1.0),
    trip_deg: tuple[float | None, float | None] = (None, None),
    wake_deflection_deg: float | None = None,
    spreading_coefficient: float = 0.18,
    reverse_ratio: float = 0.1,
    axis_reverse_ratio: float = 0.3,
    closure_diameters: float = 1.5,
    rollup_fraction: float = 0.4,
    surface: str = "dark",
    lit_rim: bool = True,
    glint: bool = False,
    shadow: bool = False,
    light_from_deg: float = 90.0,
    sheet_unevenness: float = 0.5,
    bit_depth: int = 12,
    density_ppp: float = 0.05,
    diameter_px: tuple[float, float] = (1.5, 4.0),
    out_of_plane: float = 0.1,
    spin_rpm: float = 1500.0,
    held: bool = False,
    seed: int = 0,
) -> tuple[np.ndarray, np.ndarray, PhysicalShotTruth]:
    """A synthetic shot whose flow is built from boundary-layer physics (second family).

    Per side, Thwaites' method with Mangler's transformation runs on a published surface velocity
    (measured, potential, or a blend: ``measured_share``) and the layer separates where it
    says; Falkner-Skan profiles give the layer's velocity, an ``erf`` free shear layer spreading
    at the mixing-layer rate leaves the wall, and a recirculating wake follows (see
    ``core.synth_physical.flow``). Particles are advected through the flow over the exposure
    interval (midpoint rule, ``ADVECTION_SUBSTEPS`` substeps per half) and imaged through an
    uneven light sheet onto an 8- or 12-bit camera, the ball painted over them.

    Parameters
    ----------
    shape : (int, int)
        Frame shape ``(H, W)``.
    radius_px, flight_deg, ball_diameter_mm : float
        Ball radius, flight direction (0 = toward +x, 90 = toward the top) and diameter; the
        scale is ``ball_diameter_mm / (2 radius_px)``.
    speed_m_s : float, optional
        Ball speed (or air speed past a held ball). Default 30 m/s, or from ``layer_px``.
    dt_s : float, optional
        Time between the frames; by default the ball moves 8-10 px.
    shift_px : float, optional
        The ball's displacement between the frames (px; the air's past a held ball), setting
        ``dt_s`` instead; the rest of the shot is the one the same seed gives without it.
    center_px : (float, float), optional
        Ball centre at mid-exposure; by default ahead of the frame centre so the wake fits.
    layer_px : float, optional
        Mean of the untripped sides' 99 % layer thickness at separation, px. It sets the Reynolds
        number (``delta99 / R ~ 1/sqrt(Re)``): through the speed when ``speed_m_s`` is None,
        else through the kinematic viscosity (a fluid other than air at ``air_temp_c``; the truth
        records it). Layers thinner than ``0.008-0.010 R`` need a Reynolds number beyond a
        smooth sphere's drag crisis; the laminar model is kept and the truth flags it.
    air_temp_c : float
        Air temperature for the viscosity (Sutherland's law).
    measured_share : (float, float)
        Per side (upper, lower), weight of the measured surface velocity against potential
        flow's, 0..1: separation from 81 deg (1) to 104 deg (0) from the front stagnation point.
    departure_deg : (float, float)
        Per side, angle of the free layer's centreline from the wall tangent, 0-25 deg.
    turning_radii : (float, float)
        Per side, arc length (radii) over which the free layer turns to the wake direction.
    trip_deg : (float or None, float or None)
        Per side, where the seam trips the layer turbulent (deg from the front stagnation point,
        before laminar separation): Head's entrainment method carries it from there to a
        turbulent separation, later and from a thicker layer (at ``measured_share`` 0.05-0.2,
        +16 to +30 deg); its thickness follows from the Reynolds number (``speed_m_s`` or
        ``layer_px``). Refused (ValueError) where the layer reaches separation under a
        momentum-thickness Reynolds number of 300: give swing speeds (``Re_R`` 5e4 and more).
    wake_deflection_deg : float, optional
        Wake direction behind the ball, positive toward the upper side; by default the wake
        turns toward the side that separates first, 0.4 deg per deg of difference.
    spreading_coefficient, reverse_ratio, axis_reverse_ratio, closure_diameters, rollup_fraction
        See :class:`core.synth_physical.flow.WakeSpec`.
    surface : {"dark", "dim", "bright"}
        Ball surface against the seeded air: much darker, about as bright, or brighter (white,
        with laser glare).
    lit_rim, glint, shadow : bool
        Lit band where the sheet meets the ball; a saturated specular patch; the ball's laser
        shadow (a 2R strip away from the light with no lit particles; otherwise the strip is
        lit back by a mirror).
    light_from_deg : float
        Direction the sheet comes from (flight convention).
    sheet_unevenness : float
        0 (even) .. 1: offset of the sheet's Gaussian profile, its fall-off along the beam and
        streaks.
    bit_depth : int
        8 or 12 (integer counts, clipped at full scale).
    density_ppp, diameter_px, out_of_plane : float
        Particles per pixel in the sheet, range of particle image diameters (px), out-of-plane
        motion per frame interval as a fraction of the sheet thickness.
    spin_rpm : float
        Spin: the seam and the surface grain turn between the frames.
    held : bool
        Wind tunnel: the ball sits still and the air streams past it.
    seed : int
        Equal seeds give equal shots.

    Returns
    -------
    frame_a, frame_b : (H, W) ndarray of float32
        Integer counts ``0 .. 2**bit_depth - 1``.
    truth : PhysicalShotTruth
    """
    if surface not in SURFACES:
        raise ValueError(f"surface must be one of {SURFACES}, not {surface!r}")
    if bit_depth not in (8, 12):
        raise ValueError("bit_depth must be 8 or 12")
    flow, truth = physical_flow(
        shape,
        radius_px=radius_px,
        flight_deg=flight_deg,
        speed_m_s=speed_m_s,
        ball_diameter_mm=ball_diameter_mm,
        dt_s=dt_s,
        shift_px=shift_px,
        center_px=center_px,
        layer_px=layer_px,
        air_temp_c=air_temp_c,
        measured_share=measured_share,
        departure_deg=departure_deg,
        turning_radii=turning_radii,
        trip_deg=trip_deg,
        wake_deflection_deg=wake_deflection_deg,
        spreading_coefficient=spreading_coefficient,
        reverse_ratio=reverse_ratio,
        axis_reverse_ratio=axis_reverse_ratio,
        closure_diameters=closure_diameters,
        rollup_fraction=rollup_fraction,
        held=held,
        seed=seed,
    )
    rng = np.random.default_rng([seed, 1])
    height, width = shape
    scale = truth.scale_mm_per_px
    shift_px = flow.speed_px
    center_px = (
        0.5 * (truth.center_a_px[0] + truth.center_b_px[0]),
        0.5 * (truth.center_a_px[1] + truth.center_b_px[1]),
    )

    sheet = _light_sheet(shape, light_from_deg, sheet_unevenness, scale, shadow, rng)
    thickness = sheet.thickness_px

    # --- particles: seeded at mid-exposure, advected back and forth in the ball frame ---------
    oop = out_of_plane * thickness
    z_half = 0.5 * thickness + abs(oop)
    pad = 0.75 * shift_px + 4.0 * diameter_px[1]
    count = round(density_ppp * (width + 2 * pad) * (height + 2 * pad) * (2.0 * z_half / thickness))
    lab_x = rng.uniform(-pad, width - 1 + pad, count)
    lab_y = rng.uniform(-pad, height - 1 + pad, count)
    keep = np.hypot(lab_x - center_px[0], lab_y - center_px[1]) > radius_px
    lab_x, lab_y = lab_x[keep], lab_y[keep]
    z_mid = rng.uniform(-z_half, z_half, lab_x.size)
    # out-of-plane motion, scattered by half its mean (the 3D wake): pairs are lost
    z_move = oop * (1.0 + 0.5 * rng.standard_normal(lab_x.size))
    diam = np.clip(
        rng.lognormal(math.log(math.sqrt(diameter_px[0] * diameter_px[1])), 0.25, lab_x.size),
        diameter_px[0],
        diameter_px[1],
    )
    brightness = rng.lognormal(0.0, 0.35, lab_x.size)
    rho_x, rho_y = lab_x - center_px[0], lab_y - center_px[1]
    positions = [_advect(flow, rho_x, rho_y, -0.5), _advect(flow, rho_x, rho_y, +0.5)]

    # --- ball, camera ----------------------------------------------------------------------------
    full_scale = float(2**bit_depth - 1)
    look = _ball_look(
        surface, lit_rim, glint, light_from_deg, spin_rpm * 2 * math.pi / 60.0 * truth.dt_s, rng
    )
    background = camera_background(shape, full_scale, rng)
    read_noise = rng.uniform(3.0, 8.0) if bit_depth == 12 else rng.uniform(0.4, 1.2)
    peak_counts = rng.uniform(0.35, 0.6) * full_scale * brightness
    frames = []
    level = None
    centers = (truth.center_a_px, truth.center_b_px)
    for (px, py), center, tau in zip(positions, centers, (-0.5, 0.5)):
        x, y = px + center[0], py + center[1]
        z = z_mid + tau * z_move
        peak = (
            peak_counts
            * np.exp(-8.0 * z**2 / thickness**2)
            * sheet.intensity(x, y, shape, center, radius_px)
        )
        air = _render(shape, x, y, diam, peak, read_noise)
        if level is None:  # one surface level for both frames: the ball does not change
            level = surface_level(air, background, center, radius_px, look)
        light = paint_ball(air, background, center, radius_px, tau, look, sheet, level, full_scale)
        frames.append(expose(light, background, bit_depth, rng, read_noise))

    truth = dataclasses.replace(
        truth,
        surface=surface,
        lit_rim=lit_rim,
        glint=glint,
        shadow=shadow,
        shadow_side=_shadow_side(flight_deg, sheet) if shadow else None,
        light_from_deg=float(light_from_deg),
        bit_depth=bit_depth,
        spin_rpm=float(spin_rpm),
    )
    return frames[0], frames[1], truth


def _light_sheet(shape, light_from_deg, unevenness, scale_mm_per_px, shadow, rng) -> LightSheet:
    """A 1-2 mm sheet from ``light_from_deg``, uneven in proportion to ``unevenness`` (0..1)."""
    size = max(shape)
    k = unevenness
    return LightSheet(
        from_deg=light_from_deg,
        width_px=size * rng.uniform(1.1, 1.6) / (1.0 + k),
        offset_px=size * rng.uniform(-0.25, 0.25) * k,
        falloff=rng.uniform(0.1, 0.4) * k,
        streaks=tuple(
            (
                rng.uniform(0.0, 0.12) * k,
                2 * math.pi / rng.uniform(40.0, 250.0),
                rng.uniform(0, 2 * math.pi),
            )
            for _ in range(2)
        ),
        thickness_px=rng.uniform(1.0, 2.0) / scale_mm_per_px,
        shadow=shadow,
        shadow_level=rng.uniform(0.0, 0.04) if shadow else rng.uniform(0.7, 1.0),
    )


def _render(shape, x, y, diam, peak, floor_counts):
    """Particle images, skipping those too faint to see and drawing small ones on small patches."""
    seen = peak > 0.1 * floor_counts
    small = seen & (diam <= 2.6)
    large = seen & ~small
    return render_particles(shape, x[small], y[small], diam[small], peak[small]) + render_particles(
        shape, x[large], y[large], diam[large], peak[large]
    )


def _advect(flow: BallWake, x: np.ndarray, y: np.ndarray, tau_end: float):
    """Move particles from mid-exposure to ``tau_end`` (frame intervals) in the ball-frame flow.

    Midpoint rule with ``ADVECTION_SUBSTEPS`` steps: the ball moves uniformly, so the lab-frame
    motion is the ball-frame one plus the ball's (added by the caller through the centres).
    """
    h = tau_end / ADVECTION_SUBSTEPS
    tau = 0.0
    for _ in range(ADVECTION_SUBSTEPS):
        u, v = flow.velocity(x, y, tau)
        um, vm = flow.velocity(x + 0.5 * h * u, y + 0.5 * h * v, tau + 0.5 * h)
        x, y = x + h * um, y + h * vm
        tau += h
    return x, y


def _ball_look(
    surface: str,
    lit_rim: bool,
    glint: bool,
    light_from_deg: float,
    spin_rad_per_frame: float,
    rng: np.random.Generator,
) -> BallLook:
    """Random seam, spin axis, grain and rim/glare strengths for one ball."""

    def unit():
        v = rng.standard_normal(3)
        return tuple(v / np.linalg.norm(v))

    waves = []
    for _ in range(10):
        kx, ky, kz = unit()
        k = rng.uniform(6.0, 20.0)
        waves.append((k * kx, k * ky, k * kz, rng.uniform(0.0, 2 * math.pi)))
    bright = surface == "bright"
    return BallLook(
        surface=surface,
        lit_rim=lit_rim,
        glint=glint,
        seam_normal=unit(),
        spin_axis=unit(),
        spin_rad_per_frame=spin_rad_per_frame,
        seam_contrast=rng.uniform(-0.4, 0.4),
        texture=tuple(waves),
        texture_amplitude=rng.uniform(0.02, 0.06),
        level_factor=rng.uniform(0.8, 1.25) if surface != "bright" else rng.uniform(0.9, 1.5),
        rim_fraction=rng.uniform(0.9, 1.4) if bright else rng.uniform(0.3, 0.7),
        glint_angle_deg=light_from_deg + rng.uniform(-25.0, 25.0),
        glint_length_px=rng.uniform(4.0, 12.0),
        glint_width_px=rng.uniform(1.5, 3.0),
        glare_fraction=rng.uniform(0.1, 0.3) if bright else 0.0,
        glare_length_px=rng.uniform(3.0, 8.0),
    )


def _shadow_side(flight_deg: float, sheet: LightSheet) -> str | None:
    """The side whose separation region lies in the ball's shadow (None: shadow ahead or behind)."""
    ex, ey = sheet.direction()
    for side in ("upper", "lower"):
        nx, ny = side_normal(flight_deg, side)
        if nx * ex + ny * ey > 0.5:
            return side
    return None


#: Ball diameters of the sweep (mm): cricket ball, baseball, softball (rulebook sizes; memory).
SWEEP_DIAMETERS_MM = (71.9, 73.5, 97.0)


def physical_cases(count: int, seed: int = 0) -> list[dict]:
    """Keyword sets for :func:`physical_shot` spanning the conditions of a sweep, reproducibly.

    Radius 150-260 px; layer thickness at separation (mean 99 % thickness of both sides)
    1.5-9 px, reached through the speed at the air's viscosity (so the Reynolds number the
    method can compute from speed, diameter and temperature is the one that made the layer);
    departures 0-25 deg per side, 80 % of them in 5-20; separation from the measured to the
    potential surface velocity per side; flights within 4 deg of left or right; dark, dim and
    bright balls, a lit rim in 70 %, a glint in 25 %; an uneven sheet from above or below; 8- and
    12-bit cameras; a shadowed side in about 1 of 6; a held ball in 1 of 10.

    Returns
    -------
    list of dict
        ``count`` keyword dicts (each with its own ``seed``); equal seeds give equal lists.
    """
    rng = np.random.default_rng([seed, 2])
    cases = []
    for _ in range(count):
        departures = []
        for _side in range(2):
            if rng.random() < 0.8:
                departures.append(float(rng.uniform(5.0, 20.0)))
            else:
                departures.append(
                    float(rng.choice([rng.uniform(0.0, 5.0), rng.uniform(20.0, 25.0)]))
                )
        cases.append(
            {
                "radius_px": float(rng.uniform(150.0, 260.0)),
                "layer_px": float(rng.uniform(1.5, 9.0)),
                "ball_diameter_mm": float(rng.choice(SWEEP_DIAMETERS_MM)),
                "air_temp_c": float(rng.uniform(12.0, 28.0)),
                "flight_deg": float((180.0 if rng.random() < 0.5 else 0.0) + rng.uniform(-4.0, 4.0))
                % 360.0,
                "measured_share": (float(rng.uniform(0.0, 1.0)), float(rng.uniform(0.0, 1.0))),
                "departure_deg": tuple(departures),
                "turning_radii": (float(rng.uniform(0.6, 1.6)), float(rng.uniform(0.6, 1.6))),
                "spreading_coefficient": float(rng.uniform(0.14, 0.22)),
                "reverse_ratio": float(rng.uniform(0.05, 0.15)),
                "axis_reverse_ratio": float(rng.uniform(0.2, 0.4)),
                "closure_diameters": float(rng.uniform(1.0, 2.0)),
                "rollup_fraction": float(rng.uniform(0.2, 0.6)),
                "surface": str(rng.choice(SURFACES)),
                "lit_rim": bool(rng.random() < 0.7),
                "glint": bool(rng.random() < 0.25),
                "shadow": bool(rng.random() < 1.0 / 6.0),
                "light_from_deg": float(
                    (90.0 if rng.random() < 0.5 else 270.0) + rng.uniform(-20.0, 20.0)
                ),
                "sheet_unevenness": float(rng.uniform(0.2, 1.0)),
                "bit_depth": int(rng.choice([8, 12])),
                "density_ppp": float(rng.uniform(0.03, 0.07)),
                "out_of_plane": float(rng.uniform(0.05, 0.2)),
                "spin_rpm": float(rng.uniform(500.0, 2500.0)),
                "held": bool(rng.random() < 0.1),
                "seed": int(rng.integers(0, 2**31 - 1)),
            }
        )
    return cases
