"""Synthetic ball shots with known truth: a ball flying through seeded air, and its wake.

The flow is built in the ball frame around the ball centre at mid-exposure and then shifted to
the lab frame (air at rest far away, the ball moving):

- outside the wake: potential flow past a sphere (Batchelor 1967, memory) with the free stream
  ``-D`` (the air streams past the ball opposite to its displacement ``D`` per frame pair);
- each separated shear layer leaves the surface at the prescribed separation angle, at a shallow
  ``leave_deg`` from the tangent, and bends (its heading relaxes exponentially with arc length)
  toward the wake direction; across it the speed drops with a ``tanh`` profile of half-width
  ``layer_px`` (a few px: thin, as real shear layers near separation are);
- inside the wake (between the two layers, behind the ball) the ball-frame flow is the potential
  flow reversed and weakened (``reverse_fraction``: the recirculation runs forward along the
  wall under the layer), fading a few radii behind the ball, so in the lab frame the near wake
  is carried along with the ball;
- at the wall the flow is brought to rest over ``no_slip_px`` (a kinematic stand-in for the
  attached boundary layer).

Separation is where the wall shear changes sign (the onset of reverse flow at the wall), the
same meaning as in the physically built family: with the layer's half-width ``w`` and the reverse
fraction ``r`` it lies where the wake weight at the wall reaches ``1 / (1 + r)``, a little behind
the point where the layer's centre line leaves the outline (``BallWakeFlow.separation_deg``).
``ball_shot`` places the layer so that this point is the requested angle. With
``reverse_fraction = 0`` (the older form of this family) there is no reverse flow and the
layer's start is taken as the separation point.

The ball is painted over the particle images in each frame at its own position: a dark disc
(particles absent inside it) with a lit rim brightest on the side facing the light sheet's source.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from core.geometry import flight_unit, side_normal
from core.synth import particle_pair, render_particles
from core.synth_look import BACKGROUND_COUNTS, paint_ball, surface_counts, unevenly_lit


@dataclass
class ShotTruth:
    """What a synthetic shot was made with (image coordinates, px; angles deg)."""

    center_a_px: tuple[float, float]
    center_b_px: tuple[float, float]
    radius_px: float
    flight_deg: float
    displacement_px: tuple[float, float]
    speed_m_s: float
    dt_s: float
    scale_mm_per_px: float
    ball_diameter_mm: float
    upper_deg: float | None  # None: attached flow, no separation
    lower_deg: float | None
    wake_deflection_deg: float | None  # positive toward the upper side
    leave_deg: tuple[float, float] = (10.0, 10.0)  # (upper, lower) departure from the tangent


@dataclass(frozen=True)
class _Layer:
    """One separated shear layer in side coordinates (xi rearward, zeta toward that side)."""

    xi_px: np.ndarray  # (K,) increasing
    zeta_px: np.ndarray  # (K,)
    heading_rad: np.ndarray  # (K,) angle from +xi toward +zeta
    start: tuple[float, float, float]  # xi0, zeta0, heading0
    radius_px: float
    arc_px: np.ndarray  # (K,) arc length along the layer from its start

    @classmethod
    def build(cls, radius_px, angle_deg, leave_deg, final_deg, bend_px) -> _Layer:
        th = math.radians(angle_deg)
        psi0 = -th + math.radians(leave_deg)
        psi_end = math.radians(final_deg)
        s = np.arange(0.0, 12.0 * radius_px, 0.25)
        psi = psi_end + (psi0 - psi_end) * np.exp(-s / bend_px)
        ds = 0.25
        xi = radius_px * math.sin(th) + np.concatenate([[0.0], np.cumsum(np.cos(psi[:-1]) * ds)])
        zeta = radius_px * math.cos(th) + np.concatenate([[0.0], np.cumsum(np.sin(psi[:-1]) * ds)])
        return cls(xi, zeta, psi, (xi[0], zeta[0], psi0), radius_px, s)

    def outward_distance(self, xi: np.ndarray, zeta: np.ndarray) -> np.ndarray:
        """Signed distance (px) from the layer, positive on the outer (free-stream) side."""
        xi0, zeta0, psi0 = self.start
        path = np.interp(xi, self.xi_px, self.zeta_px)
        heading = np.interp(xi, self.xi_px, self.heading_rad)
        ahead = xi - xi0
        # upstream of separation the layer's continuation dives into the ball, so attached flow
        # there is outside the wake
        back = zeta0 + ahead * math.tan(psi0) - ahead**2 / self.radius_px
        path = np.where(ahead < 0, back, path)
        heading = np.where(ahead < 0, psi0, heading)
        return (zeta - path) * np.cos(heading)

    def arc_length(self, xi: np.ndarray) -> np.ndarray:
        """Arc length (px) along the layer from its start to abscissa ``xi`` (0 upstream)."""
        return np.interp(xi, self.xi_px, self.arc_px, left=0.0)


@dataclass(frozen=True)
class BallWakeFlow:
    """Lab-frame displacement (px per frame pair) around a flying ball with a separated wake.

    Call with image coordinates ``(x_px, y_px)`` (arrays) to get ``(dx_px, dy_px)``.
    """

    center_px: tuple[float, float]  # ball centre at mid-exposure
    radius_px: float
    displacement_px: tuple[float, float]  # ball displacement A->B
    flight_deg: float
    upper_deg: float | None
    lower_deg: float | None
    leave_deg: tuple[float, float] = (10.0, 10.0)
    wake_deflection_deg: float = 0.0
    layer_px: float = 1.5
    bend_px: float | None = None
    wake_speed_fraction: float = 0.0  # ball-frame wake drift along the free stream, fraction of U
    held: bool = False  # the ball is held still (tunnel): the air streams by at -displacement_px
    reverse_fraction: float = 0.0  # reverse flow in the near wake, fraction of the potential flow
    no_slip_px: float = 0.0  # e-folding length (px) of the no-slip damping at the wall (0: none)
    spread_rate: float = 0.0  # growth of the layer's vorticity thickness per px along it

    def __call__(self, x_px, y_px):
        rx = np.asarray(x_px, dtype=np.float64) - self.center_px[0]
        ry = np.asarray(y_px, dtype=np.float64) - self.center_px[1]
        ux, uy = self._potential(rx, ry)
        w, follow = self._layers(rx, ry)
        keep = 1.0 - w * (1.0 + self._reverse(rx, ry))
        fx, fy = -self.displacement_px[0], -self.displacement_px[1]
        ux = keep * ux + w * self.wake_speed_fraction * fx
        uy = keep * uy + w * self.wake_speed_fraction * fy
        for (tx, ty), gain in follow:  # the flow in a lifted layer runs along it
            along = (ux * tx + uy * ty) * gain
            rho = np.maximum(np.hypot(rx, ry), 1e-9)
            ux, uy = ux + along * rx / rho, uy + along * ry / rho
        if self.no_slip_px > 0:
            gap = np.clip(np.hypot(rx, ry) - self.radius_px, 0.0, None)
            damp = -np.expm1(-gap / self.no_slip_px)
            ux, uy = ux * damp, uy * damp
        if self.held:
            return ux, uy
        return ux + self.displacement_px[0], uy + self.displacement_px[1]

    def _centre_offset(self) -> float:
        """How far (half-widths) the layer's centre lies outside its path, the dividing line.

        The flow reverses where the wake weight exceeds ``1 / (1 + r)``, i.e. ``atanh((1 - r) /
        (1 + r))`` half-widths inside the centre (derived); without reverse flow the path is the
        centre (the older form of this family).
        """
        r = self.reverse_fraction
        return math.atanh((1.0 - r) / (1.0 + r)) if r > 0 else 0.0

    def _reverse(self, rx, ry) -> np.ndarray:
        """Reverse-flow fraction: ``reverse_fraction`` beside the ball, fading over 3 radii behind."""
        if self.reverse_fraction == 0:
            return np.zeros(np.shape(rx))
        fx, fy = flight_unit(self.flight_deg)
        behind = np.clip(-(rx * fx + ry * fy), 0.0, None)
        return self.reverse_fraction * np.exp(-behind / (3.0 * self.radius_px))

    def separation_deg(self, side: str) -> float | None:
        """Where the wall shear on ``side`` changes sign (deg, separation convention).

        Just outside the outline the flow is ``(1 - w (1 + r))`` times the potential flow, whose
        tangential part runs rearward everywhere between the stagnation points: the wall shear
        changes sign where the wake weight ``w`` reaches ``1 / (1 + r)`` (derived). Without
        reverse flow the layer's start is returned (the older form of this family).
        """
        start = self.upper_deg if side == "upper" else self.lower_deg
        if start is None or self.reverse_fraction == 0:
            return start
        phi = np.radians(np.arange(start - 5.0, start + 60.0, 0.005))
        fx, fy = flight_unit(self.flight_deg)
        nx, ny = side_normal(self.flight_deg, side)
        rho = self.radius_px + 1e-6
        rx = rho * (np.cos(phi) * nx - np.sin(phi) * fx)
        ry = rho * (np.cos(phi) * ny - np.sin(phi) * fy)
        w = self.wake_weight(rx + self.center_px[0], ry + self.center_px[1])
        keep = 1.0 - w * (1.0 + self._reverse(rx, ry))
        phi = np.degrees(phi)
        crossing = np.flatnonzero((keep[:-1] > 0) & (keep[1:] <= 0))
        if crossing.size == 0:
            return None
        i = crossing[0]
        return float(phi[i] + (phi[i + 1] - phi[i]) * keep[i] / (keep[i] - keep[i + 1]))

    def _potential(self, rx: np.ndarray, ry: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Ball-frame potential flow past the sphere, free stream ``-D`` (zero inside)."""
        sx, sy = -self.displacement_px[0], -self.displacement_px[1]
        r2 = rx**2 + ry**2
        outside = r2 > self.radius_px**2
        r2s = np.where(outside, r2, 1.0)
        k = self.radius_px**3 / r2s**1.5
        dot = sx * rx + sy * ry
        ux = sx * (1.0 + 0.5 * k) - 1.5 * k * dot * rx / r2s
        uy = sy * (1.0 + 0.5 * k) - 1.5 * k * dot * ry / r2s
        return np.where(outside, ux, 0.0), np.where(outside, uy, 0.0)

    def wake_weight(self, x_px, y_px) -> np.ndarray:
        """1 inside the wake, 0 in the free stream (smooth across each shear layer)."""
        rx = np.asarray(x_px, dtype=np.float64) - self.center_px[0]
        ry = np.asarray(y_px, dtype=np.float64) - self.center_px[1]
        return self._layers(rx, ry)[0]

    def _layers(self, rx, ry):
        """Wake weight and, per side, how the flow turns to follow the lifted layer.

        Returns the weight (1 inside the wake, 0 in the free stream) and a list of
        ``((tx, ty), gain)``: the side's rearward tangent and ``tan`` of the layer's angle to it,
        faded out away from the layer (zero ahead of its start and without reverse flow, the
        older form of this family): the flow there gains a radial part ``gain * u_t``.
        """
        if self.upper_deg is None or self.lower_deg is None:
            return np.zeros(np.shape(rx)), []
        fx, fy = flight_unit(self.flight_deg)
        weight = np.ones(np.shape(rx))
        follow = []
        bend = self.bend_px if self.bend_px is not None else 0.8 * self.radius_px
        for side, angle, leave, final in (
            ("upper", self.upper_deg, self.leave_deg[0], self.wake_deflection_deg),
            ("lower", self.lower_deg, self.leave_deg[1], -self.wake_deflection_deg),
        ):
            nx, ny = side_normal(self.flight_deg, side)
            xi = -(rx * fx + ry * fy)
            zeta = rx * nx + ry * ny
            layer = _Layer.build(self.radius_px, angle, leave, final, bend)
            d = layer.outward_distance(xi, zeta)
            arc = layer.arc_length(xi)
            # the layer spreads over its first radius of path (beyond it the far wake would
            # swell over the whole picture)
            half_width = self.layer_px + 0.5 * self.spread_rate * np.minimum(arc, self.radius_px)
            offset = self._centre_offset()
            weight *= 0.5 * (1.0 - np.tanh(d / half_width - offset))
            if offset > 0:
                phi = np.arctan2(xi, zeta)
                heading = np.interp(xi, layer.xi_px, layer.heading_rad)
                near = 0.5 * (np.tanh(d / half_width + 2.0) - np.tanh(d / half_width - offset - 2.0))
                gain = np.where(arc > 0, np.tan(heading + phi) * near, 0.0)
                tangent = (-np.cos(phi) * fx - np.sin(phi) * nx, -np.cos(phi) * fy - np.sin(phi) * ny)
                follow.append((tangent, gain))
        return weight, follow


def ball_shot(
    shape: tuple[int, int] = (384, 512),
    *,
    radius_px: float = 64.0,
    flight_deg: float = 180.0,
    shift_px: float = 8.0,
    center_px: tuple[float, float] | None = None,
    upper_deg: float | None = 10.0,
    lower_deg: float | None = 10.0,
    leave_deg: tuple[float, float] = (10.0, 10.0),
    wake_deflection_deg: float = 0.0,
    layer_px: float = 1.5,
    reverse_fraction: float = 0.1,
    no_slip_px: float | None = None,
    spread_rate: float = 0.18,
    speed_m_s: float = 30.0,
    ball_diameter_mm: float = 71.6,
    density_ppp: float = 0.06,
    noise: float = 0.03,
    light_from_deg: float = 270.0,
    held: bool = False,
    seed: int = 0,
    surface: str | float = "dark",
    rim: bool = True,
    glint: bool = False,
    seam_deg: float | None = None,
    spin_deg: float = 0.0,
    shadow: bool = False,
    uneven_sheet: float = 0.0,
    bits: int = 12,
    diameter_px: tuple[float, float] = (2.0, 3.2),
) -> tuple[np.ndarray, np.ndarray, ShotTruth]:
    """A synthetic shot: a ball moving ``shift_px`` along ``flight_deg`` between the frames.

    Parameters
    ----------
    shape : (int, int)
        Frame shape ``(H, W)``.
    radius_px : float
        Ball radius (px).
    flight_deg : float
        Flight direction (0 = toward +x, 90 = toward the top of the picture).
    shift_px : float
        Ball displacement between the frames (px).
    center_px : (float, float), optional
        Ball centre at mid-exposure; by default a quarter of the width ahead of the frame centre
        so the wake fits behind it.
    upper_deg, lower_deg : float or None
        True separation angles (deg from the plane normal to the flight, positive rearward);
        both None gives the attached potential flow (no wake).
    leave_deg : (float, float)
        Angle (deg) at which each shear layer leaves the surface, from the local tangent.
    wake_deflection_deg : float
        Final direction of the wake relative to the rearward axis, positive toward the upper side.
    layer_px : float
        Half-width of the shear layers' tanh velocity profile (px); the layer's vorticity
        thickness is twice this.
    reverse_fraction : float
        Reverse flow in the near wake (fraction of the potential flow); 0 gives the older form
        of this family, whose separation point is the layer's start.
    no_slip_px : float, optional
        E-folding length of the no-slip damping at the wall (px); default ``layer_px`` (0 when
        ``reverse_fraction`` is 0).
    spread_rate : float
        Growth of the layer's vorticity thickness per px along it behind its start (plane mixing
        layers spread at about 0.14-0.22: Brown & Roshko 1974, memory).
    speed_m_s : float
        Ball speed; with the scale from ``ball_diameter_mm`` it sets ``dt_s``.
    ball_diameter_mm : float
        True ball diameter (mm); the scale is ``ball_diameter_mm / (2 radius_px)``.
    density_ppp, noise : float
        Seeding (particles per pixel) and image noise (fraction of the particle peak).
    light_from_deg : float
        Direction (same convention as the flight) toward the light source: the rim is brightest
        on that side of the ball.
    held : bool
        The ball is held still (a tunnel): it sits at ``center_px`` in both frames and the air
        streams past it at ``shift_px`` against ``flight_deg``; the truth's displacement is 0.
    seed : int
        Random seed (particles, noise).
    surface : "dark", "dim", "bright" or float
        The ball's surface level: dark (a little above the camera background, as an unlit
        ball), dim (the seeded air's mean level, so the ball is not darker than the air),
        bright (a white ball in scattered light, shaded toward the light), or counts.
    rim : bool
        Paint the lit rim where the sheet grazes the ball.
    glint : bool
        A saturated glint where the sheet hits the ball, its glare spilling over the outline.
    seam_deg : float, optional
        Paint a seam (a great circle with stitches) whose picture runs along this direction.
    spin_deg : float
        In-plane turn of the seam between the frames (counter-clockwise on screen).
    shadow : bool
        The ball blocks the sheet: no lit particles in the strip of width ``2 R`` behind it as
        seen from the light source (each frame at its own ball position).
    uneven_sheet : float
        Particle brightness falls across the picture from 1 to ``1 - uneven_sheet`` (a light
        sheet's Gaussian profile across it and decay along it).
    bits : int
        Camera bit depth (full scale ``2**bits - 1``; background, rim and surface scale with it).
    diameter_px : (float, float)
        Range of the particle images' diameters (px).

    Returns
    -------
    frame_a, frame_b : (H, W) ndarray of float32
    truth : ShotTruth
    """
    height, width = shape
    fx, fy = flight_unit(flight_deg)
    if center_px is None:
        center_px = ((width - 1) / 2 + fx * 0.25 * width, (height - 1) / 2 + fy * 0.25 * height)
    disp = (shift_px * fx, shift_px * fy)
    moved = (0.0, 0.0) if held else disp
    center_a = (center_px[0] - moved[0] / 2, center_px[1] - moved[1] / 2)
    center_b = (center_px[0] + moved[0] / 2, center_px[1] + moved[1] / 2)
    attached = upper_deg is None or lower_deg is None
    if no_slip_px is None:
        no_slip_px = layer_px if reverse_fraction > 0 else 0.0
    flow = BallWakeFlow(
        center_px, radius_px, disp, flight_deg, upper_deg, lower_deg, tuple(leave_deg),
        0.0 if attached else wake_deflection_deg, layer_px, held=held,
        reverse_fraction=reverse_fraction, no_slip_px=no_slip_px, spread_rate=spread_rate,
    )
    if not attached:
        flow = _place_layers(flow, upper_deg, lower_deg)
    counts = (2**bits - 1) / 4095.0  # the painting's levels are set for a 12-bit camera
    background = BACKGROUND_COUNTS * counts
    frame_a, frame_b, parts = particle_pair(
        shape, flow, density_ppp=density_ppp, diameter_px=diameter_px, noise=noise, seed=seed,
        background=background, return_particles=True, bits=bits,
    )
    light_from = None if not shadow else light_from_deg
    if uneven_sheet:
        frame_a, frame_b, parts = unevenly_lit(frame_a, frame_b, parts, uneven_sheet,
                                                light_from_deg)
    # no particle lies inside the ball (nor, with a shadow, in the unlit strip behind it): take
    # away the light of those drawn there
    frame_a = _remove_inside(frame_a, parts.x_a_px, parts.y_a_px, parts.diameter_px,
                             parts.peak_a, center_a, radius_px, light_from)
    frame_b = _remove_inside(frame_b, parts.x_b_px, parts.y_b_px, parts.diameter_px,
                             parts.peak_b, center_b, radius_px, light_from)
    looks = {}
    if (surface, rim, glint, bits) != ("dark", True, False, 12):
        looks = {
            "surface_counts": surface_counts(surface, frame_a, center_a, radius_px, light_from,
                                           counts),
            "shading": 0.15 if surface == "bright" else 0.0, "rim": rim, "glint": glint,
            "rim_counts": 2600.0 * counts, "dark_counts": 55.0 * counts, "noise_counts": 20.0 * counts,
            "full_scale": float(2**bits - 1), "background": background,
        }
    rng = np.random.default_rng(seed + 7919)
    seam_a = seam_b = {}
    if seam_deg is not None:
        seam_a = {"seam_deg": seam_deg - 0.5 * spin_deg}
        seam_b = {"seam_deg": seam_deg + 0.5 * spin_deg}
    frame_a = paint_ball(frame_a, center_a, radius_px, light_from_deg, rng, **looks, **seam_a)
    frame_b = paint_ball(frame_b, center_b, radius_px, light_from_deg, rng, **looks, **seam_b)
    scale = ball_diameter_mm / (2.0 * radius_px)
    dt_s = shift_px * scale * 1e-3 / speed_m_s
    truth = ShotTruth(
        center_a, center_b, float(radius_px), float(flight_deg) % 360.0, moved, speed_m_s, dt_s,
        scale, ball_diameter_mm, None if attached else float(upper_deg),
        None if attached else float(lower_deg), None if attached else float(wake_deflection_deg),
        tuple(leave_deg),
    )
    return frame_a, frame_b, truth


def _place_layers(flow: BallWakeFlow, upper_deg: float, lower_deg: float) -> BallWakeFlow:
    """The flow with each layer's start moved so that its wall shear changes sign at the
    requested angle (fixed-point iteration on the offset between the two, which is smooth)."""
    from dataclasses import replace

    starts = {"upper": upper_deg, "lower": lower_deg}
    for _ in range(8):
        found = {side: flow.separation_deg(side) for side in starts}
        error = max(abs(found[s] - want) for s, want in (("upper", upper_deg),
                                                           ("lower", lower_deg)))
        if error < 1e-3:
            break
        starts = {"upper": starts["upper"] + upper_deg - found["upper"],
                  "lower": starts["lower"] + lower_deg - found["lower"]}
        flow = replace(flow, upper_deg=starts["upper"], lower_deg=starts["lower"])
    return flow


def _remove_inside(frame, x_px, y_px, diameter_px, peak, center_px, radius_px,
                   shadow_from_deg=None) -> np.ndarray:
    """Frame without the light of particles whose centre lies inside the ball's outline, and
    with ``shadow_from_deg`` (direction toward the light source) also of those in the ball's
    shadow: the strip of width ``2 R`` behind it as seen from the source."""
    rx, ry = x_px - center_px[0], y_px - center_px[1]
    inside = np.hypot(rx, ry) < radius_px
    if shadow_from_deg is not None:
        lx, ly = flight_unit(shadow_from_deg)
        inside |= (rx * lx + ry * ly < 0) & (np.abs(-rx * ly + ry * lx) < radius_px)
    light = render_particles(frame.shape, x_px[inside], y_px[inside], diameter_px[inside],
                             peak[inside])
    return np.clip(frame - light, 0.0, None)


def smooth_sphere_shot(**kwargs) -> tuple[np.ndarray, np.ndarray, ShotTruth]:
    """Smooth sphere below the drag crisis: laminar separation 81 deg from the front stagnation
    point on both sides, i.e. -9 deg from the plane normal to the flight (Achenbach 1972,
    J. Fluid Mech. 54:565, memory: 80-82 deg).
    """
    kwargs.setdefault("upper_deg", 81.0 - 90.0)
    kwargs.setdefault("lower_deg", 81.0 - 90.0)
    return ball_shot(**kwargs)


def attached_shot(**kwargs) -> tuple[np.ndarray, np.ndarray, ShotTruth]:
    """Attached potential flow past a sphere, no wake (Batchelor 1967, memory)."""
    kwargs["upper_deg"] = None
    kwargs["lower_deg"] = None
    return ball_shot(**kwargs)
