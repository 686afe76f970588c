"""The ball-frame flow of a physically built shot, in px and px per frame interval.

Per side of the ball (its half of the image plane, "upper" or "lower"), with ``t`` the angle
from the front stagnation point along the outline and ``d = r - R`` the distance from the wall:

- **outer flow**: potential flow past a sphere far away (Batchelor 1967; memory), corrected
  near the wall by a Stokes stream function so that the air slides along the wall at the side's
  surface velocity (measured, potential or a blend; see ``boundary_layer``); beyond separation the
  slip stays at its separation value (constant pressure along a free streamline) and fades to
  the potential value at the rear axis, inside the wake where no outer flow is seen;
- **attached layer** (``t < t_sep``): the outer tangential velocity times the Falkner-Skan
  profile matched to Thwaites' state (momentum thickness and wall-shear parameter);
- **free shear layer** (behind the separation point): a centreline leaving the wall at the
  departure angle from the tangent and turning toward the wake direction (its curvature falls
  linearly to zero over the turning length); across it an ``erf`` profile whose vorticity
  thickness starts at the separating profile's and grows linearly at the mixing-layer rate
  (Brown & Roshko 1974; memory); over a few layer thicknesses after separation the frozen
  separating profile hands over to it;
- **wake interior** (between the free layers): reverse flow, weak next to the layers and strong
  on the axis, that closes on the axis ``closure_diameters`` behind the ball, then a forward
  deficit recovering as the far-wake law ``(x - x0)^(-2/3)`` (axisymmetric self-similar wake;
  memory); no slip at the wall;
- **roll-up**: shielded Lamb-Oseen vortices on each free layer from one radius downstream, each
  taking a share of the layer's circulation into a core (no far field), convected at the mean of
  the velocities on both sides of the layer, placed with a random phase.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.ndimage import gaussian_filter1d, map_coordinates
from scipy.special import erf

from core.geometry import flight_unit, upper_normal
from core.synth_physical.boundary_layer import (
    FalknerSkanTable,
    blended_surface_velocity,
    falkner_skan_table,
    head_tripped_layer,
    thwaites_mangler,
    thwaites_shear,
    turbulent_profiles,
)

SQRT_PI = math.sqrt(math.pi)
#: Surface arc (in layer thicknesses delta99 at separation) over which the frozen separating
#: profile hands over to the free shear layer.
HANDOVER_DELTA99 = 4.0
#: Arc (rad) behind separation over which the reverse flow under the layer builds up.
REVERSE_ONSET_RAD = 0.25
#: Arc (rad) over which the outer slip's slope at separation dies out behind it.
SLIP_SETTLE_RAD = 0.1
#: Arc (rad) behind a trip over which the laminar profile turns into the turbulent one (own: a
#: transition region, short against the turbulent run to separation).
TRANSITION_RAD = math.radians(5.0)
#: Behind a tripped side's separation the separating profile, frozen for the handover, is lifted
#: off the wall: its near-wall air stops below a height that grows at this share of the arc
#: behind separation, up to half the layer's thickness (own), so the wall shear turns where
#: Head's method separates the layer.
TRIPPED_LIFT = 0.5
#: Vorticity thickness of an ``erf`` free layer (from rest to the edge speed) over its momentum
#: thickness: ``sqrt(2) pi`` (derived: ``int (1 - erf^2) = 2 sqrt(2/pi)``). A tripped side's free
#: layer starts with its separating profile's momentum thickness (the profile's own largest
#: slope is at the wall).
ERF_VORTICITY_OVER_THETA = math.sqrt(2.0) * math.pi
#: Behind a tripped side's separation, the reverse flow's no-slip layer is this share of the
#: laminar construction's (in units of the 99 % thickness): the backflow under a detached
#: turbulent layer is thin against the layer, its largest speed within about a fifth of it
#: (Simpson's measurements; memory, order only). Where the flow next to the wall turns is set by
#: ``TRIPPED_LIFT`` (within 4 deg behind Head's separation, tested); this share makes the reverse
#: flow a quarter pixel out three to four times what the whole no-slip length gives.
TRIPPED_WALL_SHARE = 0.25


class UniformTable:
    """Rows of values on a uniform grid, interpolated linearly (clamped at the ends).

    ``np.interp`` searches its grid for every point; on a uniform grid the index is one
    multiply, which is what keeps the flow fast enough for ~10^5 particles.
    """

    def __init__(self, x: np.ndarray, rows: np.ndarray):
        self.x0 = float(x[0])
        self.dx = float(x[1] - x[0])
        self.rows = np.atleast_2d(np.asarray(rows, dtype=np.float64))
        self.last = self.rows.shape[1] - 1

    def __call__(self, x: np.ndarray, rows: slice = slice(None)) -> np.ndarray:
        pos = np.clip((np.asarray(x, dtype=np.float64) - self.x0) / self.dx, 0.0, self.last)
        i = np.minimum(pos.astype(np.intp), self.last - 1)
        frac = pos - i
        table = self.rows[rows]
        return table[:, i] * (1.0 - frac) + table[:, i + 1] * frac


def _resample(x: np.ndarray, rows: list[np.ndarray], points: int) -> UniformTable:
    """Resample rows given on a monotonic grid ``x`` onto a uniform grid of ``points``."""
    grid = np.linspace(x[0], x[-1], points)
    return UniformTable(grid, np.stack([np.interp(grid, x, row) for row in rows]))


@dataclass(frozen=True)
class SideSpec:
    """What sets one side's flow.

    Attributes
    ----------
    measured_weight : float
        Weight of the measured surface velocity against the potential one (0..1): 1 separates
        at 81 deg from the front stagnation point, 0 at 104 deg.
    departure_deg : float
        Angle between the free layer's centreline and the wall tangent at separation (>= 0).
    turning_radii : float
        Arc length (ball radii) over which the free layer turns to the wake direction.
    trip_deg : float or None
        Angle from the front stagnation point where the layer is tripped turbulent (by the
        seam): laminar (Thwaites) up to it, turbulent (Head's method) behind it. None: laminar
        to separation.
    """

    measured_weight: float = 1.0
    departure_deg: float = 10.0
    turning_radii: float = 1.0
    trip_deg: float | None = None


def side_separation_rad(spec: SideSpec, reynolds_radius: float) -> float:
    """Where a side's layer separates, rad from the front stagnation point."""
    if spec.trip_deg is None:
        return thwaites_mangler(spec.measured_weight).t_sep
    return head_tripped_layer(
        spec.measured_weight, math.radians(spec.trip_deg), reynolds_radius
    ).t_sep


@dataclass(frozen=True)
class WakeSpec:
    """What sets the wake (shared by both sides).

    Attributes
    ----------
    deflection_deg : float
        Final direction of the wake relative to the rearward axis, positive toward the upper side.
    spreading_coefficient : float
        ``c`` in ``d(delta_w)/dx = c (U1 - U2)/(U1 + U2)``; 0.14-0.22 are quoted, 0.18 typical
        (Brown & Roshko 1974; memory).
    reverse_ratio : float
        Reverse-flow speed next to the free layers as a fraction of the speed outside them
        (``-U2/U1``).
    axis_reverse_ratio : float
        Largest reverse-flow speed on the wake axis as a fraction of the free stream.
    closure_diameters : float
        Distance from the rear of the ball to where the recirculation closes on the axis.
    rollup_fraction : float
        Share of a free layer's circulation gathered into the roll-up vortices (0 = none).
    """

    deflection_deg: float = 0.0
    spreading_coefficient: float = 0.18
    reverse_ratio: float = 0.1
    axis_reverse_ratio: float = 0.3
    closure_diameters: float = 1.5
    rollup_fraction: float = 0.4


@dataclass(frozen=True)
class Vortex:
    """A shielded Lamb-Oseen vortex (ball frame, px): core ``core_px``, shield ``shield_px``.

    ``circulation_px2`` is counter-clockwise positive on the screen; the vortex moves at
    ``velocity_px`` per frame interval from ``center_px`` at mid-exposure.
    """

    center_px: tuple[float, float]
    velocity_px: tuple[float, float]
    circulation_px2: float
    core_px: float
    shield_px: float


class SideFlow:
    """One side's attached layer, free shear layer path and outer-flow slip, in px.

    Built from Thwaites' method on the side's surface velocity at the Reynolds number
    ``reynolds_radius = U R / nu`` (and Head's behind a trip); ``sign`` is +1 for the upper side
    and -1 for the lower one.
    """

    def __init__(
        self,
        spec: SideSpec,
        sign: int,
        radius_px: float,
        speed_px: float,
        reynolds_radius: float,
        wake: WakeSpec,
        reach_px: float,
        table: FalknerSkanTable,
    ):
        self.spec, self.sign, self.radius_px, self.speed_px = spec, sign, radius_px, speed_px
        self.table = table
        self._laminar_layer(thwaites_mangler(spec.measured_weight), reynolds_radius)
        # behind a trip the turbulent layer and its separation replace the laminar one's
        if spec.trip_deg is not None:
            self._tripped_layer(reynolds_radius)
        u1 = self.ue_sep_px
        u2 = -wake.reverse_ratio * u1
        self.spreading_rate = wake.spreading_coefficient * (u1 - u2) / (u1 + u2)
        # under a tripped side's thick layer the reverse flow hugs the wall (TRIPPED_WALL_SHARE)
        share = 1.0 if spec.trip_deg is None else TRIPPED_WALL_SHARE
        self.wall_layer_px = share * self.delta99_sep_px
        self.xi_sep_px = -radius_px * math.cos(self.t_sep)
        self.handover_px = HANDOVER_DELTA99 * self.delta99_sep_px * max(math.sin(self.t_sep), 0.5)
        self._outer_slip()
        self._free_layer_path(wake, reach_px)

    # --- attached layer -----------------------------------------------------------------------
    def _laminar_layer(self, layer, reynolds_radius: float) -> None:
        """The laminar layer to separation: Falkner-Skan profiles matched to Thwaites' states."""
        table, radius_px = self.table, self.radius_px
        self.t_sep = layer.t_sep
        self.t_trip = math.inf
        self.ue_sep_px = float(layer.ue[-1]) * self.speed_px
        # attached layer along t: momentum thickness, matched profile and its length scale
        theta_px = radius_px * layer.theta_over_r(reynolds_radius)
        shear = thwaites_shear(layer.lam)
        profile_index = np.interp(shear, table.shear_parameter, np.arange(table.wall_shear.size))
        theta_eta = np.interp(profile_index, np.arange(table.wall_shear.size), table.theta)
        length_px = theta_px / theta_eta  # y = length * eta
        self.attached_table = _resample(layer.t, [length_px, profile_index], 2048)
        self.attached_reach_px = float(length_px.max()) * float(table.eta[-1])
        sep_len = float(length_px[-1])
        self.theta_sep_px = float(theta_px[-1])
        self.delta99_sep_px = sep_len * float(table.delta99[0])
        self.vorticity_thickness_sep_px = sep_len / float(table.max_slope[0])
        # the free layer starts where the separating profile is at half the edge speed
        self.start_height_px = float(np.interp(0.5, table.df[0], table.eta)) * sep_len

    def _tripped_layer(self, reynolds_radius: float) -> None:
        """Behind the trip: one-seventh-law and wake profiles matched to Head's states."""
        layer = head_tripped_layer(
            self.spec.measured_weight, math.radians(self.spec.trip_deg), reynolds_radius
        )
        profiles = turbulent_profiles()
        self.t_trip, self.t_sep = layer.t_trip, layer.t_sep
        self.ue_sep_px = float(layer.ue[-1]) * self.speed_px
        theta_px = self.radius_px * layer.theta_r
        row = profiles.row(layer.shape_factor)
        delta_px = theta_px / np.interp(row, np.arange(profiles.theta.size), profiles.theta)
        self.tripped_table = _resample(layer.t, [delta_px, row], 2048)
        self.attached_reach_px = max(
            self.attached_reach_px, float(delta_px.max()) * profiles.ETA_MAX
        )
        separating = profiles.df[-1]
        sep_delta = self.sep_delta_px = float(delta_px[-1])
        self.theta_sep_px = float(theta_px[-1])
        self.delta99_sep_px = float(np.interp(0.99, separating, profiles.eta)) * sep_delta
        self.vorticity_thickness_sep_px = ERF_VORTICITY_OVER_THETA * self.theta_sep_px
        self.start_height_px = float(np.interp(0.5, separating, profiles.eta)) * sep_delta

    def attached_profile(self, t, d):
        """``u/Ue`` of the attached layer at angle ``t`` and wall distance ``d``.

        Beyond separation the separating profile is kept (frozen) for the handover, on a
        tripped side lifted off the wall (``TRIPPED_LIFT``); behind a trip the laminar profile
        turns into the turbulent one over ``TRANSITION_RAD``.
        """
        table = self.table
        length, index = self.attached_table(np.minimum(t, min(self.t_sep, self.t_trip)))
        step = table.eta[1] - table.eta[0]
        eta_index = np.minimum(d / length / step, table.eta.size - 1.0)
        laminar = map_coordinates(table.df, [index, eta_index], order=1, mode="nearest")
        if not math.isfinite(self.t_trip):
            return laminar
        profiles = turbulent_profiles()
        delta, row = self.tripped_table(np.clip(t, self.t_trip, self.t_sep))
        step = profiles.eta[1] - profiles.eta[0]
        eta_index = np.minimum(d / delta / step, profiles.eta.size - 1.0)
        turbulent = map_coordinates(profiles.df, [row, eta_index], order=1, mode="nearest")
        # capped at half the separating layer's thickness, so the lifted profile is whole
        # where the attached layer's reach ends (at 1.5 thicknesses or more)
        lift = np.minimum(TRIPPED_LIFT * self.radius_px * np.maximum(t - self.t_sep, 0.0),
                          0.5 * self.sep_delta_px)
        with np.errstate(divide="ignore", invalid="ignore"):
            turbulent *= np.where(lift > 0.0, -np.expm1(-((d / lift) ** 2)), 1.0)
        w = np.clip((t - self.t_trip) / TRANSITION_RAD, 0.0, 1.0)
        return laminar + (turbulent - laminar) * (w * w * (3.0 - 2.0 * w))

    # --- outer flow ---------------------------------------------------------------------------
    def _outer_slip(self) -> None:
        """Tabulate the slip correction ``D = Ue - 1.5 U sin t`` and ``d(sin t D)/dt / sin t``."""
        t = np.linspace(0.0, math.pi, 721)
        ue, _ = blended_surface_velocity(t, self.spec.measured_weight)
        ue = ue * self.speed_px
        potential = 1.5 * self.speed_px * np.sin(t)
        after = t > self.t_sep
        # about constant pressure along the free streamline: the slope at separation dies out
        # over SLIP_SETTLE_RAD (so the slip and the flow stay smooth across the separation ray),
        # then the slip fades to the potential value at the rear axis, inside the wake
        _, slope = blended_surface_velocity(np.array([self.t_sep]), self.spec.measured_weight)
        beyond = np.clip(t - self.t_sep, 0.0, None)
        settled = self.ue_sep_px + float(slope[0]) * self.speed_px * SLIP_SETTLE_RAD * -np.expm1(
            -beyond / SLIP_SETTLE_RAD
        )
        ramp = np.clip(beyond / (math.pi - self.t_sep), 0.0, 1.0)
        ramp = ramp * ramp * (3.0 - 2.0 * ramp)
        ue = np.where(after, settled + (potential - settled) * ramp, ue)
        # smoothed over 1.5 deg so that no derivative jumps along the separation ray
        slip = gaussian_filter1d(ue - potential, sigma=6.0, mode="nearest")
        product = np.sin(t) * slip
        with np.errstate(divide="ignore", invalid="ignore"):
            k = np.gradient(product, t) / np.sin(t)
        k[0], k[-1] = k[1], k[-2]
        self.slip_table = UniformTable(t, np.stack((slip, k)))
        self.slip_decay_px = self.radius_px  # the correction reaches about one radius out

    def outer(self, r, t):
        """Outer flow at radius ``r`` and angle ``t``: radial and tangential parts, px per frame.

        Potential flow past the sphere plus the slip correction from the Stokes stream function
        ``dpsi = -R sin t D(t) (r - R) exp(-(r - R)/R)``: ``u_r = (1/(r^2 sin t)) dpsi/dt``,
        ``u_t = -(1/(r sin t)) dpsi/dr`` (divergence-free; zero normal flow at the wall).
        """
        big_r, u = self.radius_px, self.speed_px
        k3 = (big_r / r) ** 3
        tc = np.clip(t, 0.0, math.pi)
        d = r - big_r
        decay = np.exp(-d / self.slip_decay_px)
        g = d * decay
        dg = (1.0 - d / self.slip_decay_px) * decay
        slip, slip_k = self.slip_table(tc)
        ur = -u * np.cos(t) * (1.0 - k3) - big_r * g / r**2 * slip_k
        ut = u * np.sin(t) * (1.0 + 0.5 * k3) + big_r / r * dg * slip
        return ur, ut

    # --- free shear layer ---------------------------------------------------------------------
    def _free_layer_path(self, wake: WakeSpec, reach_px: float) -> None:
        """Centreline of the free layer, a graph ``q(xi)`` in the side's (downstream, outward) axes.

        Heading ``phi`` (from the downstream axis, outward positive) starts at the wall tangent's
        ``90 deg - t_sep`` plus the departure angle and reaches the wake's ``final``; its rate of
        turn (the curvature) falls linearly to zero over the turning length, so heading and
        curvature are continuous. A turning length too short for the path to clear the ball is
        lengthened.
        """
        big_r = self.radius_px
        h0 = self.start_height_px
        phi0 = math.pi / 2 - self.t_sep + math.radians(self.spec.departure_deg)
        final = math.radians(wake.deflection_deg) * self.sign
        turn = max(self.spec.turning_radii, 0.2) * big_r
        s = np.arange(0.0, reach_px + 2.0, 1.0)
        xi0 = -(big_r + h0) * math.cos(self.t_sep)
        q0 = (big_r + h0) * math.sin(self.t_sep)
        for _ in range(30):
            frac = np.minimum(s / turn, 1.0)
            phi = phi0 + (final - phi0) * (2.0 * frac - frac * frac)
            xi = xi0 + np.concatenate(
                ([0.0], np.cumsum(0.5 * (np.cos(phi[1:]) + np.cos(phi[:-1]))))
            )
            q = q0 + np.concatenate(([0.0], np.cumsum(0.5 * (np.sin(phi[1:]) + np.sin(phi[:-1])))))
            if np.min(np.hypot(xi, q)) >= big_r + 0.5 * h0:
                break
            turn *= 1.25
        self.turning_px = turn
        self.path_s, self.path_xi, self.path_q, self.path_phi = s, xi, q, phi
        self.path_table = _resample(xi, [s, q, phi], int(xi[-1] - xi[0]) + 2)

    def layer_coordinates(self, xi, q_side):
        """Arc length along the free layer and signed distance from it (outward positive), px."""
        s, qc, phi = self.path_table(xi)
        return s, (q_side - qc) * np.cos(phi)

    def vorticity_thickness(self, s):
        """Vorticity thickness of the free layer at arc length ``s`` from its start, px."""
        return self.vorticity_thickness_sep_px + self.spreading_rate * np.maximum(s, 0.0)


class BallWake:
    """Velocity of the air around a ball (ball frame: ball at rest, air streaming), px per frame.

    Parameters
    ----------
    radius_px : float
        Ball radius.
    speed_px : float
        Free-stream speed in the ball frame, px per frame interval (the ball's displacement).
    flight_deg : float
        Flight direction (0 = toward +x, 90 = toward the top of the picture); the air streams
        the opposite way.
    reynolds_radius : float
        ``U R / nu``.
    upper, lower : SideSpec
    wake : WakeSpec
    reach_px : float
        How far downstream (px) the free layers and roll-up vortices are built.
    rng : numpy.random.Generator
        Phase and scatter of the roll-up vortices.
    """

    def __init__(
        self,
        radius_px: float,
        speed_px: float,
        flight_deg: float,
        reynolds_radius: float,
        upper: SideSpec,
        lower: SideSpec,
        wake: WakeSpec,
        reach_px: float,
        rng: np.random.Generator,
    ):
        self.radius_px = float(radius_px)
        self.speed_px = float(speed_px)
        self.flight_deg = flight_deg
        self.wake = wake
        self.table = falkner_skan_table()
        self.f = flight_unit(flight_deg)
        self.n_up = upper_normal(flight_deg)
        self.sides = {
            "upper": SideFlow(
                upper, +1, radius_px, speed_px, reynolds_radius, wake, reach_px, self.table
            ),
            "lower": SideFlow(
                lower, -1, radius_px, speed_px, reynolds_radius, wake, reach_px, self.table
            ),
        }
        self._wake_axis(reach_px)
        self.vortices = self._rollup_vortices(rng)

    # --- wake geometry ------------------------------------------------------------------------
    def _wake_axis(self, reach_px: float) -> None:
        """Centre line ``c(xi)``, half-width ``b(xi)`` and slope of the wake between the layers."""
        up, lo = self.sides["upper"], self.sides["lower"]
        xi = np.linspace(min(up.path_xi[0], lo.path_xi[0]), reach_px, 2048)
        q_up = np.interp(xi, up.path_xi, up.path_q)
        q_lo = -np.interp(xi, lo.path_xi, lo.path_q)
        centre = 0.5 * (q_up + q_lo)
        self.axis_table = UniformTable(
            xi, np.stack((centre, 0.5 * (q_up - q_lo), np.gradient(centre, xi)))
        )
        big_r = self.radius_px
        self.closure_xi_px = big_r + self.wake.closure_diameters * 2.0 * big_r
        self.virtual_origin_px = self.closure_xi_px - big_r

    def split_q(self, xi):
        """Lateral position dividing the sides: the flight axis ahead, the wake's centre behind."""
        return self.axis_table(xi, slice(0, 1))[0] * np.clip(xi / self.radius_px, 0.0, 1.0)

    def centreline_speed(self, xi, edge_reverse_px):
        """Interior speed along the wake, on its axis and next to its layers (px per frame).

        Positive downstream. Inside the recirculation (``xi`` up to the closure) both reverse and
        fall to zero at the closure as ``1 - sigma^2``; beyond it the far-wake deficit
        ``((xc - x0)/(xi - x0))^(2/3)``.
        """
        big_r, u = self.radius_px, self.speed_px
        sigma = np.clip((xi - big_r) / (self.closure_xi_px - big_r), 0.0, None)
        bubble = sigma < 1.0
        x0 = self.virtual_origin_px
        deficit = ((self.closure_xi_px - x0) / np.maximum(xi - x0, self.closure_xi_px - x0)) ** (
            2.0 / 3.0
        )
        forward = u * (1.0 - deficit)
        shape = np.where(bubble, 1.0 - sigma * sigma, 0.0)
        axis = np.where(bubble, -u * self.wake.axis_reverse_ratio * shape, forward)
        edge = np.where(bubble, -edge_reverse_px * shape, forward)
        return axis, edge

    def _rollup_vortices(self, rng: np.random.Generator) -> list[Vortex]:
        """Roll-up vortices along both free layers from one radius downstream of separation.

        Spacing 3 vorticity thicknesses (it grows with the layer, as pairing does), first one at a
        random phase, up to 2 radii beyond the recirculation's closure (farther the roll-ups
        outgrow the picture); each takes ``rollup_fraction`` (reached over one radius) of the
        layer's circulation ``dU * spacing`` into a core of a quarter spacing, shielded at 0.6
        spacing.
        """
        vortices: list[Vortex] = []
        if self.wake.rollup_fraction <= 0:
            return vortices
        big_r = self.radius_px
        ed = (-self.f[0], -self.f[1])
        for side in self.sides.values():
            out_n = (self.n_up[0] * side.sign, self.n_up[1] * side.sign)
            spin = math.copysign(1.0, ed[0] * out_n[1] - ed[1] * out_n[0])
            s = big_r * (
                1.0 + rng.uniform(0.0, 1.0) * 3.0 * side.vorticity_thickness(big_r) / big_r
            )
            end = min(float(side.path_s[-1]), self.closure_xi_px + 2.0 * big_r)
            while s < end:
                spacing = 3.0 * float(side.vorticity_thickness(s))
                xi = float(np.interp(s, side.path_s, side.path_xi))
                q = float(np.interp(s, side.path_s, side.path_q))
                phi = float(np.interp(s, side.path_s, side.path_phi))
                q += rng.normal(0.0, 0.1) * float(side.vorticity_thickness(s))
                _, edge = self.centreline_speed(
                    np.array([xi]), self.wake.reverse_ratio * side.ue_sep_px
                )
                jump = side.ue_sep_px - float(edge[0])
                share = self.wake.rollup_fraction * min((s - big_r) / big_r, 1.0)
                # position and velocity in image coordinates
                gx = -xi * self.f[0] + q * out_n[0]
                gy = -xi * self.f[1] + q * out_n[1]
                heading = (
                    math.cos(phi) * ed[0] + math.sin(phi) * out_n[0],
                    math.cos(phi) * ed[1] + math.sin(phi) * out_n[1],
                )
                convect = 0.5 * (side.ue_sep_px + float(edge[0]))
                if share > 0 and jump > 0:
                    vortices.append(
                        Vortex(
                            (gx, gy),
                            (convect * heading[0], convect * heading[1]),
                            spin * share * jump * spacing,
                            0.25 * spacing,
                            0.6 * spacing,
                        )
                    )
                s += spacing
        return vortices

    # --- velocity -----------------------------------------------------------------------------
    def velocity(
        self, rx: np.ndarray, ry: np.ndarray, tau: float = 0.0
    ) -> tuple[np.ndarray, np.ndarray]:
        """Ball-frame velocity at ``(rx, ry)`` from the ball centre (image axes), px per frame.

        ``tau`` is the time from mid-exposure in frame intervals (it moves the roll-up vortices).
        Zero inside the ball.
        """
        rx = np.asarray(rx, dtype=np.float64)
        ry = np.asarray(ry, dtype=np.float64)
        fx, fy = self.f
        nx, ny = self.n_up
        p = rx * fx + ry * fy
        q = rx * nx + ry * ny
        r = np.hypot(rx, ry)
        xi = -p
        vx = np.zeros(rx.shape)
        vy = np.zeros(rx.shape)
        outside = r > self.radius_px
        upper = q >= self.split_q(xi)
        for name, mask in (("upper", upper & outside), ("lower", ~upper & outside)):
            side = self.sides[name]
            idx = np.nonzero(mask)
            v_p, v_q = self._side_velocity(side, p[idx], side.sign * q[idx], r[idx])
            vx[idx] = v_p * fx + side.sign * v_q * nx
            vy[idx] = v_p * fy + side.sign * v_q * ny
        self._add_vortices(rx, ry, tau, vx, vy, outside)
        return vx, vy

    def _side_velocity(self, side: SideFlow, p, q_side, r):
        """Velocity on one side, components along ``f`` and the side's outward normal."""
        t = np.mod(np.arctan2(q_side, p), 2.0 * math.pi)
        cos_t, sin_t = np.cos(t), np.sin(t)
        d = r - self.radius_px
        ur, ut = side.outer(r, t)
        # attached layer (frozen separating profile beyond t_sep)
        bl_r, bl_t = ur, ut.copy()
        near = np.nonzero(d < side.attached_reach_px)
        bl_t[near] *= side.attached_profile(t[near], d[near])
        xi = -p
        w = np.clip((xi - side.xi_sep_px) / side.handover_px, 0.0, 1.0)
        w = w * w * (3.0 - 2.0 * w)
        vr, vt = bl_r.copy(), bl_t.copy()
        free = np.nonzero(w > 0)
        if free[0].size:
            fr, ft = self._free_velocity(
                side, p[free], q_side[free], r[free], t[free], d[free], ur[free], ut[free]
            )
            wf = w[free]
            vr[free] = (1.0 - wf) * bl_r[free] + wf * fr
            vt[free] = (1.0 - wf) * bl_t[free] + wf * ft
        v_p = vr * cos_t - vt * sin_t
        v_q = vr * sin_t + vt * cos_t
        return v_p, v_q

    def _free_velocity(self, side: SideFlow, p, q_side, r, t, d, ur, ut):
        """Free layer over the wake interior with no slip at the wall (radial, tangential parts)."""
        xi = -p
        s, n = side.layer_coordinates(xi, q_side)
        outer_share = 0.5 * (1.0 + erf(SQRT_PI * n / side.vorticity_thickness(s)))
        no_slip = -np.expm1(-d / side.wall_layer_px)
        share = outer_share * -np.expm1(-((d / side.wall_layer_px) ** 2))
        out_r, out_t = ur.copy(), ut.copy()
        # the interior matters where the outer share is visibly below 1
        inside = np.nonzero(share < 1.0 - 1e-9)
        wall_r, wall_t = self._interior(side, p[inside], q_side[inside], r[inside], t[inside])
        in_r, in_t = wall_r * no_slip[inside], wall_t * no_slip[inside]
        sh = share[inside]
        out_r[inside] = in_r + sh * (ur[inside] - in_r)
        out_t[inside] = in_t + sh * (ut[inside] - in_t)
        return out_r, out_t

    def _interior(self, side: SideFlow, p, q_side, r, t):
        """Wake interior (radial, tangential parts): recirculation, then the recovering deficit."""
        xi = -p
        q = side.sign * q_side
        axis, edge = self.centreline_speed(xi, self.wake.reverse_ratio * side.ue_sep_px)
        c, b, slope = self.axis_table(xi)
        eta = (q - c) / np.maximum(b, 1.0)
        inner = np.clip(1.0 - eta * eta, 0.0, 1.0)
        speed = edge + (axis - edge) * inner
        # direction: potential flow past the ball with a unit stream downstream, its speed capped
        # at 1 (it slows toward the rear stagnation point but is not faster beside the ball)
        k3 = (self.radius_px / r) ** 3
        cos_t, sin_t = np.cos(t), np.sin(t)
        hr = -cos_t * (1.0 - k3)
        ht = sin_t * (1.0 + 0.5 * k3)
        cap = np.maximum(np.hypot(hr, ht), 1.0)
        # the wake's lateral drift (deflection), in the side's polar axes
        slope = slope * np.clip(xi / self.radius_px - 1.0, 0.0, 1.0)
        drift_q = side.sign * slope
        hr = hr / cap + drift_q * sin_t
        ht = ht / cap + drift_q * cos_t
        onset = np.clip((t - side.t_sep) / REVERSE_ONSET_RAD, 0.0, 1.0)
        return speed * onset * hr, speed * onset * ht

    def _add_vortices(self, rx, ry, tau, vx, vy, outside) -> None:
        """Add the roll-up vortices: a Lamb-Oseen core less the same circulation spread wider."""
        if not self.vortices:
            return
        # candidates: points in the box that holds every vortex's reach, sorted along x
        boxes = np.array(
            [
                (
                    v.center_px[0] + tau * v.velocity_px[0],
                    v.center_px[1] + tau * v.velocity_px[1],
                    2.0 * v.shield_px,
                )
                for v in self.vortices
            ]
        )
        lo_x, hi_x = np.min(boxes[:, 0] - boxes[:, 2]), np.max(boxes[:, 0] + boxes[:, 2])
        lo_y, hi_y = np.min(boxes[:, 1] - boxes[:, 2]), np.max(boxes[:, 1] + boxes[:, 2])
        candidates = np.nonzero(outside & (rx > lo_x) & (rx < hi_x) & (ry > lo_y) & (ry < hi_y))[0]
        order = candidates[np.argsort(rx[candidates])]
        sorted_x = rx[order]
        for v in self.vortices:
            cx = v.center_px[0] + tau * v.velocity_px[0]
            cy = v.center_px[1] + tau * v.velocity_px[1]
            reach = 2.0 * v.shield_px  # the shielded field is below 0.5 % of its peak beyond
            lo, hi = np.searchsorted(sorted_x, (cx - reach, cx + reach))
            band = order[lo:hi]
            near = band[outside[band] & (np.abs(ry[band] - cy) < reach)]
            if near.size == 0:
                continue
            dx = rx[near] - cx
            dy = ry[near] - cy
            r2 = np.maximum(dx * dx + dy * dy, 1e-12)
            # v_theta / r of a Lamb-Oseen vortex; screen-counter-clockwise tangent (dy, -dx)/r
            ratio = (-np.expm1(-r2 / v.core_px**2) + np.expm1(-r2 / v.shield_px**2)) / r2
            ratio *= v.circulation_px2 / (2.0 * math.pi)
            vx[near] += ratio * dy
            vy[near] -= ratio * dx

    # --- truth --------------------------------------------------------------------------------
    def separation_deg(self, name: str) -> float:
        """Separation angle of one side in the README's convention (deg, 0 at the flight normal)."""
        return math.degrees(self.sides[name].t_sep) - 90.0
