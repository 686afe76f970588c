"""Laminar boundary layer on a sphere: surface velocity, Thwaites-Mangler, Falkner-Skan profiles.

Angles ``t`` are in radians from the front stagnation point along the meridian; lengths are in
sphere radii ``R`` unless a name says otherwise; velocities are in free-stream speeds ``U``.
Nothing here knows about pixels or images.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy.integrate import cumulative_trapezoid

#: Thwaites' laminar separation criterion (Thwaites 1949, Aeronaut. Q. 1:245; memory).
LAMBDA_SEPARATION = -0.09
#: Thwaites' constant a in theta^2 Ue^6 = a nu int Ue^5 dx (Thwaites 1949; memory).
THWAITES_A = 0.45


def measured_surface_velocity(t: np.ndarray) -> np.ndarray:
    """Surface velocity ``Ue/U`` of a sphere below the drag crisis, measured.

    Tomotika's (1935) polynomial fit to Fage's (1936) measurements at Re ~ 1.6e5:
    ``1.5 t - 0.4371 t^3 + 0.1481 t^5 - 0.0423 t^7`` (memory). Checked by its consequence:
    Thwaites' method puts laminar separation at 81 deg from the front stagnation point on it,
    where Achenbach (1972, J. Fluid Mech. 54:565) measured 80-82 deg (memory). The fit holds up
    to about separation; it falls steeply beyond 95 deg and changes sign at 107 deg.

    Parameters
    ----------
    t : ndarray
        Angle from the front stagnation point, rad.
    """
    t = np.asarray(t, dtype=np.float64)
    t2 = t * t
    return t * (1.5 + t2 * (-0.4371 + t2 * (0.1481 - 0.0423 * t2)))


def measured_surface_velocity_slope(t: np.ndarray) -> np.ndarray:
    """``d(Ue/U)/dt`` of :func:`measured_surface_velocity` (per rad)."""
    t2 = np.asarray(t, dtype=np.float64) ** 2
    return 1.5 + t2 * (-3 * 0.4371 + t2 * (5 * 0.1481 - 7 * 0.0423 * t2))


def potential_surface_velocity(t: np.ndarray) -> np.ndarray:
    """Surface velocity ``Ue/U = 1.5 sin t`` of potential flow past a sphere.

    Batchelor (1967), An Introduction to Fluid Dynamics (memory).
    """
    return 1.5 * np.sin(t)


def blended_surface_velocity(
    t: np.ndarray, measured_weight: float
) -> tuple[np.ndarray, np.ndarray]:
    """Surface velocity and its slope between the measured (weight 1) and the potential (0) one.

    Both share the stagnation-point slope ``1.5`` (the potential value), so every blend has
    the same flow at the front stagnation point and the two sides of a shot join there.

    Returns
    -------
    ue, due_dt : ndarray
        ``Ue/U`` and ``d(Ue/U)/dt`` (per rad), shaped like ``t``.
    """
    w = float(measured_weight)
    ue = w * measured_surface_velocity(t) + (1.0 - w) * potential_surface_velocity(t)
    due = w * measured_surface_velocity_slope(t) + (1.0 - w) * 1.5 * np.cos(t)
    return ue, due


def thwaites_shear(lam: np.ndarray) -> np.ndarray:
    """Thwaites' shear function ``l = tau_w theta / (mu Ue) ~ (lambda + 0.09)^0.62``.

    The fit to Thwaites' table given by White (Viscous Fluid Flow; memory); zero at separation.
    """
    return np.clip(np.asarray(lam, dtype=np.float64) - LAMBDA_SEPARATION, 0.0, None) ** 0.62


@dataclass(frozen=True)
class ThwaitesLayer:
    """The laminar layer along one meridian, from Thwaites' method with Mangler's transformation.

    Attributes
    ----------
    t : (N,) ndarray
        Angle from the front stagnation point, rad, up to the separation point included.
    ue : (N,) ndarray
        Edge velocity ``Ue/U``.
    theta2_re : (N,) ndarray
        ``(theta/R)^2 Re_R`` with ``Re_R = U R / nu``: the momentum thickness at any Reynolds
        number (the laminar layer scales with ``1/sqrt(Re)``).
    lam : (N,) ndarray
        Thwaites' pressure-gradient parameter ``lambda = theta^2 (dUe/dx) / nu``.
    t_sep : float
        Laminar separation (``lambda = -0.09``), rad from the front stagnation point.
    """

    t: np.ndarray
    ue: np.ndarray
    theta2_re: np.ndarray
    lam: np.ndarray
    t_sep: float

    def theta_over_r(self, reynolds_radius: float) -> np.ndarray:
        """Momentum thickness ``theta/R`` along the meridian at ``Re_R = U R / nu``."""
        return np.sqrt(self.theta2_re / reynolds_radius)


def thwaites_momentum(x: np.ndarray, ue: np.ndarray, r0: np.ndarray | float = 1.0) -> np.ndarray:
    """Thwaites' momentum thickness ``(theta/L)^2 Re_L = 0.45 int r0^2 Ue^5 dx / (r0^2 Ue^6)``.

    Lengths in a reference length ``L``, velocities in ``U``, ``Re_L = U L / nu``; ``r0`` is the
    body's local radius for Mangler's transformation (1 for a planar layer). Trapezoid rule on
    the given grid; where ``r0 Ue`` is zero the result is NaN (the caller takes the limit).
    """
    x = np.asarray(x, dtype=np.float64)
    weight = np.broadcast_to(np.asarray(r0, dtype=np.float64) ** 2, x.shape)
    integral = cumulative_trapezoid(weight * ue**5, x, initial=0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        return THWAITES_A * integral / (weight * ue**6)


def thwaites_mangler(measured_weight: float, points: int = 3001) -> ThwaitesLayer:
    """Thwaites' method with Mangler's transformation on a sphere, from the front stagnation point.

    For an axisymmetric body of local radius ``r0 = R sin(x/R)`` (Mangler's transformation
    carries the planar method over; White, Viscous Fluid Flow; memory)::

        theta^2 = 0.45 nu / (r0^2 Ue^6) * int_0^x r0^2 Ue^5 dx,   lambda = theta^2 (dUe/dx) / nu

    and the laminar layer separates at ``lambda = -0.09`` (Thwaites 1949; memory). In units of
    ``R`` and ``U`` this is ``(theta/R)^2 Re_R = 0.45 J(t)`` with ``J = int sin^2 Ue^5 dt /
    (sin^2 Ue^6)``, and ``lambda = 0.45 J dUe/dt``: the separation angle does not depend on the
    Reynolds number. At the stagnation point ``J -> 1/(8 a)`` with ``Ue ~ a t`` (derived), so
    ``lambda = 0.45/8`` there.

    Parameters
    ----------
    measured_weight : float
        Weight of the measured surface velocity against the potential one
        (:func:`blended_surface_velocity`).
    points : int
        Grid points over ``0 .. pi``.
    """
    t = np.linspace(0.0, math.pi, points)
    ue, due = blended_surface_velocity(t, measured_weight)
    theta2_re = thwaites_momentum(t, ue, np.sin(t))
    # near the stagnation point the quotient is 0/0 and the trapezoid rule is poor: use the limit
    theta2_re[t < 0.05] = THWAITES_A / (8.0 * float(due[0]))
    lam = theta2_re * due
    after = np.nonzero((lam <= LAMBDA_SEPARATION) | ~np.isfinite(lam) | (ue <= 0))[0]
    after = after[after > 0]
    if after.size == 0:
        raise ValueError("no laminar separation on this surface velocity")
    k = int(after[0])
    # separation between grid points k-1 and k: interpolate lambda linearly
    frac = (lam[k - 1] - LAMBDA_SEPARATION) / (lam[k - 1] - lam[k])
    t_sep = float(t[k - 1] + frac * (t[k] - t[k - 1]))
    keep = slice(0, k + 1)
    t_out = t[keep].copy()
    t_out[-1] = t_sep
    ue_s, _ = blended_surface_velocity(np.array([t_sep]), measured_weight)
    th_s = theta2_re[k - 1] + frac * (theta2_re[k] - theta2_re[k - 1])
    return ThwaitesLayer(
        t=t_out,
        ue=np.append(ue[:k], ue_s),
        theta2_re=np.append(theta2_re[:k], th_s),
        lam=np.append(lam[:k], LAMBDA_SEPARATION),
        t_sep=t_sep,
    )


def separation_angle_deg(measured_weight: float) -> float:
    """Where the layer separates (deg from the plane through the centre normal to the flight,
    positive rearward) on the blend of surface velocities with this measured weight (1:
    measured, 0: potential flow)."""
    return math.degrees(thwaites_mangler(measured_weight).t_sep) - 90.0


def weight_for_separation(angle_deg: float) -> float:
    """The measured weight whose layer separates at ``angle_deg`` (bisection: separation moves
    monotonically from +13.6 deg at weight 0 to -8.9 deg at weight 1), to 4 decimals."""
    return _weight_for_angle(separation_angle_deg, angle_deg, 24)


def _weight_for_angle(angle_of_weight, angle_deg: float, steps: int) -> float:
    """Bisection on the measured weight, separation moving rearward as the weight falls."""
    low, high = 0.0, 1.0
    for _ in range(steps):
        mid = 0.5 * (low + high)
        if angle_of_weight(mid) > angle_deg:
            low = mid
        else:
            high = mid
    return round(0.5 * (low + high), 4)


# --- Falkner-Skan similarity profiles ------------------------------------------------------

#: Wall shear ``f''(0)`` and ``beta`` of solved Falkner-Skan profiles, used as first guesses:
#: (0, -0.19884) Hartree's separation profile, (0.4696, 0) Blasius, (1.2326, 1) Hiemenz
#: (solved here by shooting; they agree with the tables recalled from White, memory).
_GUESS_SHEAR = np.array([0.0, 0.0857, 0.3193, 0.4696, 0.9277, 1.2326])
_GUESS_BETA = np.array([-0.19884, -0.19, -0.1, 0.0, 0.5, 1.0])


@dataclass(frozen=True)
class FalknerSkanTable:
    """Falkner-Skan profiles ``f'(eta)`` indexed by their wall shear, attached branch.

    ``f''' + f f'' + beta (1 - f'^2) = 0``, ``f(0) = f'(0) = 0``, ``f'(inf) = 1``, with
    ``u/Ue = f'(eta)``. All thicknesses are in units of ``eta``.

    Attributes
    ----------
    wall_shear : (K,) ndarray
        ``f''(0)``, increasing from 0 (separation).
    beta : (K,) ndarray
        Pressure-gradient parameter of each profile.
    eta : (M,) ndarray
        Uniform grid of the similarity variable.
    df : (K, M) ndarray
        ``f' = u/Ue`` on the grid.
    theta, delta_star, delta99 : (K,) ndarray
        Momentum, displacement and 99 % thickness.
    max_slope : (K,) ndarray
        Largest ``f''`` across the profile (its vorticity thickness is ``1/max_slope``).
    shear_parameter : (K,) ndarray
        Thwaites' ``l = f''(0) theta``: the same wall-shear parameter as in Thwaites' method, by
        which a Thwaites state is matched to a profile.
    """

    wall_shear: np.ndarray
    beta: np.ndarray
    eta: np.ndarray
    df: np.ndarray
    theta: np.ndarray
    delta_star: np.ndarray
    delta99: np.ndarray
    max_slope: np.ndarray
    shear_parameter: np.ndarray


def _falkner_skan_march(wall_shear, beta, step, steps):
    """RK4 march of the Falkner-Skan equation and its derivative in ``beta``, all profiles at once.

    Returns the states ``(f, f', f'')`` on every grid point, shape ``(steps + 1, 3, K)``, and
    ``d f'(eta_max) / d beta``.
    """
    k = wall_shear.size
    y = np.zeros((3, k))
    y[2] = wall_shear
    z = np.zeros((3, k))  # d y / d beta
    out = np.empty((steps + 1, 3, k))
    out[0] = y

    def rhs(y, z):
        f, f1, f2 = y
        g, g1, g2 = z
        f3 = -f * f2 - beta * (1.0 - f1 * f1)
        g3 = -(g * f2 + f * g2) - (1.0 - f1 * f1) + 2.0 * beta * f1 * g1
        return np.stack((f1, f2, f3)), np.stack((g1, g2, g3))

    for i in range(steps):
        k1y, k1z = rhs(y, z)
        k2y, k2z = rhs(y + 0.5 * step * k1y, z + 0.5 * step * k1z)
        k3y, k3z = rhs(y + 0.5 * step * k2y, z + 0.5 * step * k2z)
        k4y, k4z = rhs(y + step * k3y, z + step * k3z)
        y = y + step / 6.0 * (k1y + 2 * k2y + 2 * k3y + k4y)
        z = z + step / 6.0 * (k1z + 2 * k2z + 2 * k3z + k4z)
        # a wrong beta makes f' run away; bound it so Newton can come back
        y[1] = np.clip(y[1], -4.0, 4.0)
        out[i + 1] = y
    return out, z[1]


def falkner_skan_beta(wall_shear: np.ndarray, *, eta_max: float = 12.0, step: float = 0.02):
    """Solve for the ``beta`` whose attached Falkner-Skan profile has wall shear ``f''(0)``.

    Shooting on ``beta`` at fixed ``f''(0)`` (Newton's method with the sensitivity equations,
    all profiles together): unlike shooting on ``f''(0)`` at fixed ``beta`` this stays regular at
    the separation profile, where the attached and reversed branches meet.

    Parameters
    ----------
    wall_shear : (K,) ndarray
        ``f''(0)`` in ``0 .. 1.2326`` (separation .. Hiemenz stagnation flow).

    Returns
    -------
    beta : (K,) ndarray
    states : (M, 3, K) ndarray
        ``f, f', f''`` on the grid ``eta = 0, step, .., eta_max``.
    """
    s = np.atleast_1d(np.asarray(wall_shear, dtype=np.float64))
    beta = np.interp(s, _GUESS_SHEAR, _GUESS_BETA)
    steps = round(eta_max / step)
    for _ in range(12):
        states, sens = _falkner_skan_march(s, beta, step, steps)
        residual = states[-1, 1] - 1.0
        beta = beta - residual / sens
        if np.max(np.abs(residual)) < 1e-11:
            break
    states, _ = _falkner_skan_march(s, beta, step, steps)
    return beta, states


@functools.lru_cache(maxsize=2)
def falkner_skan_table(
    profiles: int = 49, eta_max: float = 12.0, step: float = 0.02
) -> FalknerSkanTable:
    """Tabulate attached Falkner-Skan profiles from separation (``f''(0) = 0``) to Hiemenz flow.

    Known values the table reproduces: Blasius ``f''(0) = 0.4696`` at ``beta = 0`` (seen in
    standard texts, e.g. White) and Hartree's (1937) separation at ``beta = -0.1988`` (memory).
    """
    s = np.linspace(0.0, _GUESS_SHEAR[-1], profiles)
    beta, states = falkner_skan_beta(s, eta_max=eta_max, step=step)
    eta = np.arange(states.shape[0]) * step
    df = np.clip(states[:, 1, :].T, 0.0, None)
    d2f = states[:, 2, :].T
    theta = np.trapezoid(df * (1.0 - df), eta, axis=1)
    delta_star = np.trapezoid(1.0 - df, eta, axis=1)
    delta99 = np.array([np.interp(0.99, np.maximum.accumulate(row), eta) for row in df])
    return FalknerSkanTable(
        wall_shear=s,
        beta=beta,
        eta=eta,
        df=df,
        theta=theta,
        delta_star=delta_star,
        delta99=delta99,
        max_slope=d2f.max(axis=1),
        shear_parameter=s * theta,
    )


# --- a tripped (turbulent) layer: Head's entrainment method ----------------------------------

#: Shape factor of a turbulent layer just after a trip (common practice: 1.4 is the usual start
#: of Head's method after transition).
TRIPPED_SHAPE_FACTOR = 1.4
#: Head's method predicts separation where the shape factor reaches about 2.4 (Head 1958, the
#: value commonly taken with the method, e.g. in White, Viscous Fluid Flow; memory; 1.8-2.4 is
#: quoted as the range where it separates).
HEAD_SEPARATION_H = 2.4
#: Below about this momentum-thickness Reynolds number no turbulent layer sustains itself
#: (Preston 1958; memory), and Ludwieg-Tillmann's friction law was fitted well above it: a
#: tripped layer that reaches separation under it is refused.
MIN_TURBULENT_RE_THETA = 300.0


def head_h1(h: np.ndarray | float) -> np.ndarray:
    """Head's mass-flow shape factor ``H1 = (delta - delta*)/theta`` from ``H = delta*/theta``.

    Head (1958) as fitted by Cebeci and Bradshaw and quoted by White, Viscous Fluid Flow (memory):
    ``3.3 + 0.8234 (H - 1.1)^-1.287`` up to ``H = 1.6``, ``3.3 + 1.5501 (H - 0.6778)^-3.064``
    beyond.
    """
    h = np.asarray(h, dtype=np.float64)
    if np.any(h <= 1.1):
        raise ValueError("Head's H1(H) holds for shape factors above 1.1")
    low = 3.3 + 0.8234 * (h - 1.1) ** -1.287
    high = 3.3 + 1.5501 * (h - 0.6778) ** -3.064
    return np.where(h <= 1.6, low, high)


def head_h_from_h1(h1: np.ndarray | float) -> np.ndarray:
    """The inverse of :func:`head_h1` (``H1 > 3.3``). The two fits meet at ``H = 1.6`` only to
    0.02 in ``H1`` (5.309 and 5.287): between those it is off by under 0.003 in ``H``."""
    excess = np.maximum(np.asarray(h1, dtype=np.float64) - 3.3, 1e-9)
    low = 1.1 + (excess / 0.8234) ** (-1.0 / 1.287)
    high = 0.6778 + (excess / 1.5501) ** (-1.0 / 3.064)
    return np.where(excess >= float(head_h1(1.6)) - 3.3, low, high)


def head_entrainment(h1: np.ndarray | float) -> np.ndarray:
    """Head's entrainment function ``F = 0.0306 (H1 - 3)^-0.6169`` (memory, as above)."""
    return 0.0306 * np.maximum(np.asarray(h1, dtype=np.float64) - 3.0, 1e-9) ** -0.6169


def ludwieg_tillmann_cf(h: np.ndarray | float, re_theta: np.ndarray | float) -> np.ndarray:
    """Skin friction ``cf = 0.246 10^(-0.678 H) Re_theta^-0.268`` (Ludwieg and Tillmann 1949;
    memory)."""
    return 0.246 * 10.0 ** (-0.678 * np.asarray(h)) * np.asarray(re_theta) ** -0.268


@dataclass(frozen=True)
class TrippedLayer:
    """A layer laminar up to a trip and turbulent behind it, along one meridian of a sphere.

    Attributes
    ----------
    t : (N,) ndarray
        Angle from the front stagnation point, rad, from the trip to separation included.
    theta_r : (N,) ndarray
        Momentum thickness over the radius.
    shape_factor : (N,) ndarray
        ``H = delta*/theta``.
    ue : (N,) ndarray
        Edge velocity ``Ue/U``.
    t_trip, t_sep : float
        The trip and turbulent separation (``H`` = :data:`HEAD_SEPARATION_H`), rad.
    """

    t: np.ndarray
    theta_r: np.ndarray
    shape_factor: np.ndarray
    ue: np.ndarray
    t_trip: float
    t_sep: float


def head_march(edge, radius, x0: float, x1: float, theta0: float, reynolds: float, *,
               h0: float = TRIPPED_SHAPE_FACTOR):
    """Head's entrainment method from ``x0`` until the layer separates or ``x1`` is reached.

    The axisymmetric momentum-integral and entrainment equations (with the body's local radius
    ``r0``; planar with ``r0`` constant; Head 1958, White, Viscous Fluid Flow; memory), in a
    reference length and speed::

        d theta/dx = cf/2 - (H + 2) theta Ue'/Ue - theta r0'/r0
        d(r0 Ue theta H1)/dx = r0 Ue F(H1)

    with Ludwieg-Tillmann's skin friction at ``Re_theta = Ue theta Re``. Separation is where
    ``H`` reaches :data:`HEAD_SEPARATION_H`.

    Parameters
    ----------
    edge : callable
        ``x -> (Ue, dUe/dx)``.
    radius : callable
        ``x -> (r0, dr0/dx)``.
    theta0 : float
        Momentum thickness at ``x0`` (kept across a trip); ``h0`` the shape factor there.
    reynolds : float
        ``U L / nu`` of the reference length and speed.

    Returns
    -------
    solution : scipy's ``solve_ivp`` result (``y = (theta, r0 Ue theta H1)``, ``sol`` dense)
    separation : float or None
        Where ``H`` reaches :data:`HEAD_SEPARATION_H` (None: attached up to ``x1``).
    shape : callable
        ``(x, y) -> H`` of a state.
    """
    from scipy.integrate import solve_ivp

    def shape(x, y):
        return state(x, y)[-1]

    def state(x, y):
        ue, due = edge(x)
        r0, dr0 = radius(x)
        h1 = y[1] / (r0 * ue * y[0])
        return ue, due, r0, dr0, h1, float(head_h_from_h1(h1))

    def rhs(x, y):
        theta = y[0]
        ue, due, r0, dr0, h1, h = state(x, y)
        cf = float(ludwieg_tillmann_cf(h, max(ue * theta * reynolds, 1.0)))
        dtheta = 0.5 * cf - (h + 2.0) * theta * due / ue - theta * dr0 / r0
        return [dtheta, r0 * ue * float(head_entrainment(h1))]

    def separated(x, y):
        return shape(x, y) - HEAD_SEPARATION_H

    separated.terminal = True
    ue0, _ = edge(x0)
    r00, _ = radius(x0)
    start = [theta0, r00 * ue0 * theta0 * float(head_h1(h0))]
    solution = solve_ivp(
        rhs, (x0, x1), start, events=separated, rtol=1e-8, atol=1e-12, dense_output=True,
        max_step=0.01 * (x1 - x0),
    )
    events = solution.t_events[0]
    return solution, (float(events[0]) if events.size else None), shape


@functools.lru_cache(maxsize=32)
def head_tripped_layer(
    measured_weight: float, trip_rad: float, reynolds_radius: float, points: int = 601
) -> TrippedLayer:
    """Thwaites-Mangler up to ``trip_rad``, then :func:`head_march` to turbulent separation.

    On the sphere in units of ``R`` and ``U`` (``r0 = sin t``). The trip keeps the momentum
    thickness and sets ``H`` to :data:`TRIPPED_SHAPE_FACTOR`. Unlike the laminar layer's, the
    separation angle depends (weakly) on the Reynolds number. Kept for reuse (a shot asks for
    its sides' separation before it builds their flow): treat the arrays as read-only.
    """
    laminar = thwaites_mangler(measured_weight)
    if not 0.0 < trip_rad < laminar.t_sep:
        raise ValueError(
            f"the trip must lie between the stagnation point and laminar separation "
            f"({math.degrees(laminar.t_sep):.1f} deg from it)"
        )
    theta0 = float(np.sqrt(np.interp(trip_rad, laminar.t, laminar.theta2_re) / reynolds_radius))

    def edge(t):
        ue, due = blended_surface_velocity(np.array([t]), measured_weight)
        return float(ue[0]), float(due[0])

    def radius(t):
        return math.sin(t), math.cos(t)

    solution, t_sep, shape = head_march(
        edge, radius, trip_rad, math.pi - 0.05, theta0, reynolds_radius
    )
    if t_sep is None:
        raise ValueError("the tripped layer does not separate on this surface velocity")
    t = np.linspace(trip_rad, t_sep, points)
    states = solution.sol(t)
    h = np.array([shape(x, y) for x, y in zip(t, states.T)])
    ue, _ = blended_surface_velocity(t, measured_weight)
    re_theta = float(ue[-1] * states[0, -1] * reynolds_radius)
    if re_theta < MIN_TURBULENT_RE_THETA:
        raise ValueError(f"too low a Reynolds number for a turbulent layer: Re_theta "
                         f"{re_theta:.0f} at separation, under {MIN_TURBULENT_RE_THETA:.0f}")
    return TrippedLayer(t, states[0], h, ue, float(trip_rad), t_sep)


def tripped_weight_for_separation(angle_deg: float, trip_deg: float,
                                  reynolds_radius: float) -> float:
    """The measured weight on which a layer tripped at ``trip_deg`` (from the front stagnation
    point) separates at ``angle_deg`` (from the plane normal to the flight, + rearward), to 4
    decimals: bisection, separation moving monotonically rearward as the weight falls (at
    ``Re_R`` 7e4 from +2.4 deg at weight 1 to +41 deg at 0)."""

    def angle(weight):
        layer = head_tripped_layer(weight, math.radians(trip_deg), reynolds_radius)
        return math.degrees(layer.t_sep) - 90.0

    earliest, latest = angle(1.0), angle(0.0)
    if not earliest <= angle_deg <= latest:
        raise ValueError(f"a layer tripped at {trip_deg:g} deg separates between "
                         f"{earliest:.1f} and {latest:.1f} deg at this Reynolds number")
    return _weight_for_angle(angle, angle_deg, 20)


# --- turbulent velocity profiles ---------------------------------------------------------------

#: Exponent of the attached turbulent profile's power law (the one-seventh law; common practice).
POWER_LAW_N = 7.0


@dataclass(frozen=True)
class TurbulentProfiles:
    """Turbulent mean-velocity profiles ``u/Ue`` over ``eta = y/delta`` indexed by shape factor.

    Each is ``(1 - a) eta^(1/7) + a sin^2(pi eta / 2)`` up to ``eta = 1`` (1 beyond): the
    one-seventh law (common practice) blended with Coles' wake function (Coles 1956; memory),
    ``a`` chosen for the shape factor ``H`` (own form; ``H`` runs from 1.29 at ``a = 0`` to 4 at
    ``a = 1``). At Head's separation (``H = 2.4``) the air still moves next to the wall at a
    fifth of the edge speed a fiftieth of ``delta`` out: of the order of Stratford's separating
    layer, whose velocity grows as the square root of the wall distance (0.14 there; Stratford
    1959; memory), though this profile grows as its one-seventh power; the wall shear's zero
    lies in the viscous sublayer, under a pixel, which the profile leaves out.

    Attributes
    ----------
    shape_factor : (K,) ndarray
        Head's ``H`` of each row, increasing to :data:`HEAD_SEPARATION_H`.
    eta : (M,) ndarray
        Uniform grid of ``y/delta`` from 0 to ``ETA_MAX``.
    df : (K, M) ndarray
        ``u/Ue``.
    theta : (K,) ndarray
        Momentum thickness over ``delta``.
    """

    shape_factor: np.ndarray
    eta: np.ndarray
    df: np.ndarray
    theta: np.ndarray

    ETA_MAX = 1.5

    def row(self, h: np.ndarray | float) -> np.ndarray:
        """Fractional row index of shape factor ``h``."""
        return np.interp(h, self.shape_factor, np.arange(self.shape_factor.size))


@functools.lru_cache(maxsize=1)
def turbulent_profiles(rows: int = 56, points: int = 601) -> TurbulentProfiles:
    """Tabulate :class:`TurbulentProfiles` for shape factors 1.3 .. Head's separation."""
    eta = np.linspace(0.0, TurbulentProfiles.ETA_MAX, points)
    inside = np.minimum(eta, 1.0)
    power = inside ** (1.0 / POWER_LAW_N)
    wake = np.sin(0.5 * math.pi * inside) ** 2
    blend = np.linspace(0.0, 1.0, 401)[:, None]
    df = (1.0 - blend) * power + blend * wake
    h = np.trapezoid(1.0 - df, eta, axis=1) / np.trapezoid(df * (1.0 - df), eta, axis=1)
    wanted = np.linspace(1.3, HEAD_SEPARATION_H, rows)
    a = np.interp(wanted, h, blend[:, 0])
    df = (1.0 - a[:, None]) * power + a[:, None] * wake
    theta = np.trapezoid(df * (1.0 - df), eta, axis=1)
    return TurbulentProfiles(wanted, eta, df, theta)
