"""The ball-frame flow next to one side of the ball: an attached layer that separates.

Separation is where the wall shear changes sign. The model describes the flow in a thin band
along the outline (angle ``phi``, deg in the separation convention; ``gap`` px outside the
outline) with the stream outside it ``U(phi, gap)`` from the PIV vectors:

- across the layer the speed goes from a weak reverse flow ``-r U`` on the wall side to ``U``
  with an error-function profile of vorticity thickness ``delta``, centred at a height ``h``:
  ``S = -r + (1 + r) Phi((gap - h) / delta)``; the wall brings it to rest over ``ell`` px
  (``u = U S (1 - exp(-gap / ell))``), so the wall shear has the sign of ``S(0)``;
- the line where ``S = 0`` (the dividing line) lies ``c delta`` below the layer's centre, with
  ``c = -Phi^-1(r / (1 + r))``. Ahead of separation it lies inside the wall (the attached layer
  moves forward at the wall) and rises toward it: with ``q = 1 - exp(-(phi_s - phi) / phi_u)``
  (``phi_u`` the settling arc, ``UPSTREAM_DEG`` by default) the attached layer is thinner,
  ``delta_s (1 - b q)`` (a boundary layer grows downstream), and its centre sits at
  ``c delta (1 - a q)`` (its profile fills out toward the wall). At ``phi_s`` the dividing
  line touches the wall: zero wall shear. Behind it the dividing line leaves the wall at the
  departure angle ``atan(slope)`` from the tangent and turns toward the wake's direction over
  the arc length ``L``; the layer thickens linearly at the spreading rate ``k`` (a plane
  turbulent mixing layer's at most; a free layer still laminar hardly spreads: the prior is
  :mod:`core.side_fit`'s). Which of its lines keeps to that path is not known (a mixing layer grows into
  both streams): with ``outward_growth`` 1 the dividing line does, the layer growing outward
  and its centre rising by ``c`` times the growth; with 0 the centre does, the layer growing
  evenly about it and the dividing line sinking toward the wall by as much (into it, the
  reverse flow hidden, where the path is shallow);
- the flow inside the layer may follow it: it gains the radial part ``f u dZ/ds`` of the
  rising dividing line, with ``f`` between 0 (the flow keeps along the wall) and 1 (it runs
  along the layer, as streamlines near the dividing streamline do).

No part of this is in pixels except through the priors (:mod:`core.separation`), which are in
physical units scaled by the shot's Reynolds number and image scale. The alternative profile
(``shape="quartic"``) replaces the error function by a compact polynomial of the same vorticity
thickness, for the model-form check.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy.special import erf, erfinv

from core.compiled import compiled

#: Parameter order of a side model.
PARAM_NAMES = ("phi_s", "slope", "relax", "log_delta", "spread", "reverse", "drop", "thin",
               "follow", "k_t", "k_r")
#: Angular scale (deg) over which the attached layer's centre drops toward the wall ahead of
#: separation.
UPSTREAM_DEG = 15.0
#: No-slip length over the layer's thickness at separation.
WALL_FRACTION = 0.5


@dataclass(frozen=True)
class SideGeometry:
    """What the model needs of the band: the outline's radius and the samples' coordinates."""

    radius_px: float
    phi_grid: np.ndarray  # (P,) deg
    gap_grid: np.ndarray  # (G,) px: the samples are the grid's P x G points, phi-major
    final_deg: float = 0.0  # the wake's direction on this side, from the rearward axis
    # the near-wall model's form (the model-form check refits with them halved and doubled)
    upstream_deg: float = UPSTREAM_DEG
    wall_fraction: float = WALL_FRACTION
    outward_growth: float = 1.0  # share of the layer's growth behind separation that lifts its
    # centre off the dividing line (1: the dividing line keeps to the path; 0: the centre does)


def profile(x: np.ndarray, shape: str = "erf") -> np.ndarray:
    """Layer profile from 0 to 1 with unit largest slope (``x`` in vorticity thicknesses)."""
    if shape == "erf":
        y = erf(math.sqrt(math.pi) * x)
        y += 1.0
        y *= 0.5
        return y
    # compact quartic: 0.5 + 15/16 y - 5/8 y^3 + 3/16 y^5 for |y| <= 1 with y = x 16 / 15,
    # whose largest slope is 1 (derived)
    y = np.clip(x * (16.0 / 15.0), -1.0, 1.0)
    return 0.5 + (15.0 / 16.0) * y - 0.625 * y**3 + 0.1875 * y**5


@functools.lru_cache(maxsize=256)
def centre_offset(reverse: float, shape: str = "erf") -> float:
    """``c``: the dividing line's depth below the layer's centre, in vorticity thicknesses."""
    p = reverse / (1.0 + reverse)
    if shape == "erf":
        return float(-erfinv(2.0 * p - 1.0) / math.sqrt(math.pi))
    lo, hi = -2.0, 0.0  # invert the quartic by bisection (monotonic)
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        if profile(np.array(mid), "quartic") < p:
            lo = mid
        else:
            hi = mid
    return -0.5 * (lo + hi)


def dividing_line_px(radius_px: float, phi_s_deg: float, slope: float, relax_px: float,
                     phi_deg: np.ndarray, final_deg: float = 0.0) -> np.ndarray:
    """Height (px) of the dividing line above the outline behind separation (0 ahead of it).

    It leaves the outline at ``phi_s_deg`` at ``atan(slope)`` from the tangent; its heading then
    relaxes exponentially over the arc length ``relax_px`` toward ``final_deg`` (the wake's
    direction on this side, from the rearward axis, positive away from it toward the side).

    Returns
    -------
    (N,) ndarray
        Height above the outline (px), 0 at and ahead of ``phi_s_deg``.
    """
    return dividing_lines_px(radius_px, [(phi_s_deg, slope, relax_px)], phi_deg, final_deg)[0]


#: Arc-length steps along which a dividing line is traced.
_LINE_STEPS = 240


def dividing_lines_px(radius_px: float, lines, phi_deg: np.ndarray,
                      final_deg: float = 0.0) -> np.ndarray:
    """:func:`dividing_line_px` of several lines ``(phi_s_deg, slope, relax_px)`` at once,
    ``(K, N)``: the lines are traced together, row by row as one would be."""
    phi = np.asarray(phi_deg, dtype=np.float64)
    lines = np.array([[float(v) for v in line] for line in lines], dtype=np.float64)
    if lines.size == 0:
        return np.zeros((0, phi.size))
    return _traced_lines(radius_px, lines, math.radians(final_deg), _arc_steps(radius_px), phi)


# The tracing is compiled (numba): a fit traces a new line for nearly every model it evaluates
# (and three more for each Jacobian), and as whole-array numpy operations on a few hundred
# points each line cost some twenty calls' overhead, more than the arithmetic.
@compiled
def _traced_lines(radius_px, lines, psi_f, s, phi):
    """:func:`dividing_lines_px` of the rows ``(phi_s_deg, slope, relax_px)`` of ``lines``: the
    heading relaxes as ``psi_f + (psi0 - psi_f) exp(-s / relax)`` along the arc lengths ``s``,
    the path is its running trapezoidal integral from the separation point, then read at the
    angles ``phi`` (its angle kept non-decreasing)."""
    steps = s.size
    ds = s[1] - s[0]
    out = np.zeros((lines.shape[0], phi.size))
    curve_phi = np.empty(steps)
    curve_gap = np.empty(steps)
    for k in range(lines.shape[0]):
        phi_s, slope, relax = lines[k, 0], lines[k, 1], lines[k, 2]
        th = math.radians(phi_s)
        psi0 = -th + math.atan(slope)
        decay = max(relax, 1e-6)
        xi, zeta = radius_px * math.sin(th), radius_px * math.cos(th)
        last_cos = last_sin = 0.0
        highest = -np.inf
        for j in range(steps):
            psi = psi_f + (psi0 - psi_f) * math.exp(-s[j] / decay)
            cos_psi, sin_psi = math.cos(psi), math.sin(psi)
            if j > 0:
                xi += 0.5 * (cos_psi + last_cos) * ds
                zeta += 0.5 * (sin_psi + last_sin) * ds
            last_cos, last_sin = cos_psi, sin_psi
            highest = max(highest, math.degrees(math.atan2(xi, zeta)))
            curve_phi[j] = highest
            curve_gap[j] = math.hypot(xi, zeta) - radius_px
        heights = np.interp(phi, curve_phi, curve_gap)
        for i in range(phi.size):
            if phi[i] > phi_s:
                out[k, i] = heights[i]
    return out


@functools.lru_cache(maxsize=16)
def _arc_steps(radius_px: float) -> np.ndarray:
    """Arc lengths (px) along which a dividing line is traced, from its start."""
    s = np.linspace(0.0, 3.0 * radius_px, _LINE_STEPS + 1)
    s.flags.writeable = False
    return s


def side_flow(geom: SideGeometry, params, u_t_outer: np.ndarray, u_r_outer: np.ndarray,
              shape: str = "erf") -> tuple[np.ndarray, np.ndarray]:
    """Ball-frame motion ``(u_t, u_r)`` (px per pair) at the band's samples.

    Parameters
    ----------
    geom : SideGeometry
    params : (11,) or (K, 11) array_like
        In the order of ``PARAM_NAMES``: ``phi_s`` (deg), ``slope`` (tan of the departure
        angle), ``relax`` (L / R), ``log_delta`` (ln of the vorticity thickness at separation,
        px), ``spread`` (d delta / ds), ``reverse`` (r), ``drop`` (a), ``thin`` (b), ``follow``
        (f), ``k_t``, ``k_r`` (scales of the outer stream's components). With ``K`` rows, ``K``
        models at once (a search's candidates).
    u_t_outer, u_r_outer : (P * G,) ndarray
        The stream outside the layer at the samples.
    shape : {"erf", "quartic"}

    Returns
    -------
    u_t, u_r : (P * G,) ndarray, or (K, P * G) for ``K`` models
    """
    table = np.asarray(params, dtype=np.float64)
    u_t, u_r = _models_flow(geom, np.atleast_2d(table), u_t_outer, u_r_outer, shape)
    if table.ndim == 1:
        return u_t[0], u_r[0]
    return u_t, u_r


def _models_flow(geom: SideGeometry, table: np.ndarray, u_t_outer, u_r_outer, shape: str):
    """:func:`side_flow` of ``K`` models, ``(K, 11)``: what varies along the outline is worked
    out per model and angle, ``(K, P)`` (:func:`_outline`), the rest sample by sample in
    :func:`_flow_at_samples`."""
    _, _, _, _, _, reverse, _, _, follow, k_t, k_r = (
        table[:, i:i + 1] for i in range(len(PARAM_NAMES)))
    phi = geom.phi_grid
    along = _outline(geom, table, shape)
    centre, delta, wall_px, rise = along.centre, along.delta, along.wall_px, along.rise
    # the error functions and exponentials are most of the cost: each is computed once for the
    # models that share what it depends on (the coarse search's candidates that differ only
    # in follow share the whole layer; many share the wall's no-slip length)
    per_model = (np.ascontiguousarray(column[:, 0]) for column in (reverse, follow, k_t, k_r))
    return _flow_at_samples(centre, delta, wall_px, rise, *per_model,
                            _first_alike(table, LAYER_COLUMNS),
                            _first_alike(table, WALL_COLUMNS),
                            np.ascontiguousarray(geom.gap_grid, dtype=np.float64),
                            u_t_outer.reshape(phi.size, geom.gap_grid.size),
                            u_r_outer.reshape(phi.size, geom.gap_grid.size), shape == "quartic")


def side_flow_slopes(geom: SideGeometry, params, u_t_outer: np.ndarray, u_r_outer: np.ndarray,
                     shape: str = "erf"):
    """:func:`side_flow` of one model, ``(S,)`` each, and its derivatives by the 11 parameters,
    ``(S, 11)`` each: the least-squares fit's Jacobian (:meth:`core.side_fit.SideProblem.
    jacobian`).

    Worked out by the chain rule through what varies along the outline (the layer's centre
    height, its thickness, the no-slip length and the dividing line's rise, :func:`_along`),
    except for the dividing line's dependence on ``(phi_s, slope, relax)``, which is traced:
    there a forward difference (three more lines of a few hundred points each) stands in. One
    pass over the samples instead of a finite difference's eleven more models.
    """
    table = np.asarray(params, dtype=np.float64)
    along = _along(geom, table, shape)
    return _flow_slopes_at_samples(
        *along, *(float(table[PARAM_NAMES.index(name)])
                  for name in ("reverse", "follow", "k_t", "k_r")),
        np.ascontiguousarray(geom.gap_grid, dtype=np.float64),
        u_t_outer.reshape(geom.phi_grid.size, geom.gap_grid.size),
        u_r_outer.reshape(geom.phi_grid.size, geom.gap_grid.size), shape == "quartic")


#: Forward-difference step of the dividing line's parameters (relative, at least absolute):
#: small enough to stay between the traced curve's points and short of its end (with 1e-3, the
#: fit's former difference step, a line ending inside the band made its columns up to 40 % off).
_LINE_STEP = 1e-6


def _along(geom: SideGeometry, params: np.ndarray, shape: str):
    """One model's centre height, vorticity thickness, no-slip length and dividing-line rise
    along the outline, ``(P,)`` each, and their derivatives by the parameters, ``(P, 11)``
    each (the terms of :func:`_outline`, differentiated)."""
    phi_s, _, _, _, spread, reverse, drop, thin, _, _, _ = params
    phi = geom.phi_grid
    n = len(PARAM_NAMES)
    at = _outline(geom, params[None, :], shape)
    delta_s, behind, ramp, c = float(at.delta_s[0, 0]), at.behind[0], at.ramp[0], at.c[0, 0]
    thin_part, lifted, settle = at.thin_part[0], at.lifted[0], at.settle[0]
    d_behind = np.where(phi > phi_s, -math.radians(1.0) * geom.radius_px, 0.0)  # by phi_s
    ahead = np.clip(phi_s - phi, 0.0, None)
    d_ramp = np.where(phi < phi_s, np.exp(-ahead / geom.upstream_deg) / geom.upstream_deg, 0.0)
    # the dividing line: one step along each of (phi_s, slope, relax) from the model's
    line = params[:3]
    steps = _LINE_STEP * np.maximum(1.0, np.abs(line)) * np.where(line < 0.0, -1.0, 1.0)
    lifts, rises = _dividing_lines(geom, line + np.diag(steps))
    c_by_reverse = -1.0 / (_slope_of(-c, shape) * (1.0 + reverse) ** 2)
    i = {name: k for k, name in enumerate(PARAM_NAMES)}
    d_delta = np.zeros((phi.size, n))
    d_delta[:, i["phi_s"]] = -delta_s * thin * d_ramp + spread * d_behind
    d_delta[:, i["log_delta"]] = delta_s * thin_part
    d_delta[:, i["spread"]] = behind
    d_delta[:, i["thin"]] = -delta_s * ramp
    d_lifted = d_delta.copy()
    d_lifted[:, i["phi_s"]] -= (1.0 - geom.outward_growth) * spread * d_behind
    d_lifted[:, i["spread"]] -= (1.0 - geom.outward_growth) * behind
    d_settle = np.zeros((phi.size, n))
    d_settle[:, i["phi_s"]] = -drop * d_ramp
    d_settle[:, i["drop"]] = -ramp
    d_centre = c * (d_lifted * settle[:, None] + lifted[:, None] * d_settle)
    d_centre[:, :3] += ((lifts - at.lift[0]) / steps[:, None]).T
    d_centre[:, i["reverse"]] += c_by_reverse * lifted * settle
    d_wall = geom.wall_fraction * d_delta
    d_wall[:, i["spread"]] = 0.0  # the no-slip length is the thickness at separation's share
    d_wall[:, i["phi_s"]] = -geom.wall_fraction * delta_s * thin * d_ramp
    d_rise = np.zeros((phi.size, n))
    d_rise[:, :3] = ((rises - at.rise[0]) / steps[:, None]).T
    return (at.centre[0], at.delta[0], at.wall_px[0], at.rise[0], d_centre, d_delta, d_wall,
            d_rise)


def _slope_of(x: float, shape: str) -> float:
    """Slope of :func:`profile` at ``x``."""
    if shape == "erf":
        return math.exp(-math.pi * x * x)
    y = x * (16.0 / 15.0)
    return 1.0 - 2.0 * y * y + y**4 if abs(y) < 1.0 else 0.0


@dataclass(frozen=True)
class _Outline:
    """What varies along the outline for ``K`` models, ``(K, P)`` each (``c`` ``(K, 1)``)."""

    delta_s: np.ndarray  # vorticity thickness at separation
    behind: np.ndarray  # arc length past separation (px)
    ramp: np.ndarray  # the attached layer's settling, 0 at and behind separation
    c: np.ndarray  # the dividing line's depth below the centre, in thicknesses
    lift: np.ndarray  # the dividing line's height
    rise: np.ndarray  # its dZ/ds
    thin_part: np.ndarray  # the attached layer's thickness over delta_s
    lifted: np.ndarray  # what c multiplies
    settle: np.ndarray  # the centre's share kept toward the wall
    delta: np.ndarray
    centre: np.ndarray
    wall_px: np.ndarray


def _outline(geom: SideGeometry, table: np.ndarray, shape: str) -> _Outline:
    """The layer's centre height, thickness, no-slip length and the dividing line along the
    outline for the ``K`` models of ``table``, ``(K, 11)``, with the terms they are made of."""
    phi_s, _, _, log_delta, spread, reverse, drop, thin = (
        table[:, i:i + 1] for i in range(PARAM_NAMES.index("follow")))  # slope, relax: the line
    phi = geom.phi_grid
    delta_s = np.array([[math.exp(v)] for v in log_delta[:, 0]])  # as one model's math.exp
    behind = np.clip(np.radians(phi - phi_s), 0.0, None) * geom.radius_px
    lift, rise = _dividing_lines(geom, table[:, :3])
    c = np.array([[centre_offset(float(v), shape)] for v in reverse[:, 0]])
    ramp = -np.expm1(-np.clip(phi_s - phi, 0.0, None) / geom.upstream_deg)
    thin_part = 1.0 - thin * ramp
    delta = delta_s * thin_part + spread * behind
    lifted = delta - (1.0 - geom.outward_growth) * spread * behind
    settle = 1.0 - drop * ramp
    return _Outline(delta_s, behind, ramp, c, lift, rise, thin_part, lifted, settle, delta,
                    lift + c * lifted * settle, geom.wall_fraction * delta_s * thin_part)


#: Parameters (columns) that shape the layer's profile (all but ``follow``, ``k_t``, ``k_r``),
#: and those that set the no-slip length at the wall.
LAYER_COLUMNS = slice(0, PARAM_NAMES.index("follow"))
WALL_COLUMNS = [PARAM_NAMES.index(name) for name in ("phi_s", "log_delta", "thin")]


def _first_alike(table: np.ndarray, columns) -> np.ndarray:
    """For each model (row of ``table``) the first model with the same values in ``columns``."""
    alike = _alike(table, columns)
    if alike is None:
        return np.arange(len(table))
    first, kind = alike
    return first[kind]


# The sample-by-sample part is compiled (numba) rather than written with numpy: as whole-array
# operations it made some twenty (K, P, G) temporaries per evaluation, and the fit evaluates
# thousands of models per side. Compiled, it also runs without the GIL, so both sides of a ball
# are fitted at once on two threads (core.separation).
@compiled
def _flow_at_samples(centre, delta, wall_px, rise, reverse, follow, k_t, k_r, same_layer,
                     same_wall, gap, u_t_outer, u_r_outer, quartic):
    """Ball-frame motion ``(u_t, u_r)``, ``(K, P * G)``, of ``K`` models at the band's samples.

    ``centre``, ``delta``, ``wall_px``: the layer's centre height, its vorticity thickness and
    the wall's no-slip length (px), ``(K, P)``; ``rise``: the dividing line's ``dZ/ds``,
    ``(K, P)``; ``reverse``, ``follow``, ``k_t``, ``k_r``: ``(K,)``; ``same_layer``,
    ``same_wall``: for each model the first with the same layer, the same no-slip length
    (their profiles are taken from it); ``gap``: ``(G,)``; ``u_t_outer``, ``u_r_outer``: the
    outer stream, ``(P, G)``.
    """
    models, angles = centre.shape
    gaps = gap.size
    u_t = np.empty((models, angles * gaps))
    u_r = np.empty((models, angles * gaps))
    across = np.empty((models, angles * gaps))  # the layer's profile
    inside = np.empty((models, angles * gaps))  # the share under its upper edge
    wall = np.empty((models, angles * gaps))  # the wall's no-slip factor
    for k in range(models):
        r = reverse[k]
        own_layer, own_wall = same_layer[k] == k, same_wall[k] == k
        for p in range(angles):
            d = delta[k, p]
            rising = rise[k, p] != 0.0
            for g in range(gaps):
                i = p * gaps + g
                if own_layer:
                    height = gap[g] - centre[k, p]
                    across[k, i] = _profile_value(height / d, quartic)
                    if rising:
                        inside[k, i] = 1.0 - _profile_value((height - d) / d, quartic)
                else:
                    across[k, i] = across[same_layer[k], i]
                    inside[k, i] = inside[same_layer[k], i]
                if own_wall:
                    wall[k, i] = -math.expm1(-gap[g] / wall_px[k, p])
                else:
                    wall[k, i] = wall[same_wall[k], i]
                t = k_t[k] * u_t_outer[p, g] * ((1.0 + r) * across[k, i] - r) * wall[k, i]
                radial = k_r[k] * u_r_outer[p, g] * across[k, i] * wall[k, i]
                if rising:
                    # the flow under the layer's upper edge follows the rising dividing line
                    radial += follow[k] * t * rise[k, p] * inside[k, i]
                u_t[k, i] = t
                u_r[k, i] = radial
    return u_t, u_r


_REVERSE, _FOLLOW, _K_T, _K_R = (PARAM_NAMES.index(name)
                                 for name in ("reverse", "follow", "k_t", "k_r"))


@compiled
def _flow_slopes_at_samples(centre, delta, wall_px, rise, d_centre, d_delta, d_wall, d_rise,
                            reverse, follow, k_t, k_r, gap, u_t_outer, u_r_outer, quartic):
    """:func:`_flow_at_samples` of one model, ``(S,)`` each, with its derivatives by the
    parameters, ``(S, 11)`` each, from those of the quantities along the outline
    (:func:`_along`)."""
    angles, gaps = centre.size, gap.size
    n = d_centre.shape[1]
    u_t = np.empty(angles * gaps)
    u_r = np.empty(angles * gaps)
    j_t = np.empty((angles * gaps, n))
    j_r = np.empty((angles * gaps, n))
    r = reverse
    for p in range(angles):
        d, w, z = delta[p], wall_px[p], rise[p]
        for g in range(gaps):
            i = p * gaps + g
            x = (gap[g] - centre[p]) / d
            across = _profile_value(x, quartic)
            across_x = _profile_slope(x, quartic)
            inside = 1.0 - _profile_value(x - 1.0, quartic)
            inside_x = -_profile_slope(x - 1.0, quartic)
            wall = -math.expm1(-gap[g] / w)
            wall_w = -math.exp(-gap[g] / w) * gap[g] / (w * w)
            outer_t, outer_r = u_t_outer[p, g], u_r_outer[p, g]
            form = (1.0 + r) * across - r
            t = k_t * outer_t * form * wall
            u_t[i] = t
            u_r[i] = k_r * outer_r * across * wall + follow * t * z * inside
            # partial derivatives by x (the height in thicknesses), the no-slip length, the rise
            t_x = k_t * outer_t * (1.0 + r) * across_x * wall
            t_w = k_t * outer_t * form * wall_w
            radial_x = k_r * outer_r * across_x * wall + follow * z * (t_x * inside + t * inside_x)
            radial_w = k_r * outer_r * across * wall_w + follow * z * t_w * inside
            radial_z = follow * t * inside
            for j in range(n):
                dx = -(d_centre[p, j] + x * d_delta[p, j]) / d
                j_t[i, j] = t_x * dx + t_w * d_wall[p, j]
                j_r[i, j] = radial_x * dx + radial_w * d_wall[p, j] + radial_z * d_rise[p, j]
            t_r = k_t * outer_t * (across - 1.0) * wall
            j_t[i, _REVERSE] += t_r
            j_r[i, _REVERSE] += follow * z * t_r * inside
            j_r[i, _FOLLOW] += t * z * inside
            t_k = outer_t * form * wall
            j_t[i, _K_T] += t_k
            j_r[i, _K_T] += follow * z * t_k * inside
            j_r[i, _K_R] += outer_r * across * wall
    return u_t, u_r, j_t, j_r


@compiled
def _profile_slope(x, quartic):
    """Derivative of :func:`_profile_value` (of its interpolation, for the error function)."""
    if quartic:
        y = x * (16.0 / 15.0)
        if not -1.0 < y < 1.0:
            return 0.0
        return 1.0 - 2.0 * y * y + y**4
    if not -_TABLE_REACH < x < _TABLE_REACH:
        return 0.0 if not math.isnan(x) else x
    u = (x + _TABLE_REACH) / _TABLE_STEP
    i = min(int(u), _ERF_TABLE.shape[0] - 2)
    t = u - i
    p0, p1 = _ERF_TABLE[i, 0], _ERF_TABLE[i + 1, 0]
    m0, m1 = _ERF_TABLE[i, 1], _ERF_TABLE[i + 1, 1]
    return (m0 + t * (2.0 * (3.0 * (p1 - p0) - 2.0 * m0 - m1)
                      + 3.0 * t * (2.0 * (p0 - p1) + m0 + m1))) / _TABLE_STEP


@compiled
def _profile_value(x, quartic):
    """:func:`profile` of one value; the error function's from :data:`_ERF_TABLE`."""
    if quartic:
        y = min(max(x * (16.0 / 15.0), -1.0), 1.0)
        return 0.5 + (15.0 / 16.0) * y - 0.625 * y**3 + 0.1875 * y**5
    if not -_TABLE_REACH < x < _TABLE_REACH:
        if math.isnan(x):
            return x  # NaN stays NaN
        return 0.0 if x < 0.0 else 1.0
    # cubic Hermite interpolation between the table's values and slopes (the slopes stored
    # times the step): continuous with its first derivative, as the fit's Jacobian
    # (:func:`_profile_slope`) wants; just below the reach, x + reach may round up to the
    # table's last point
    u = (x + _TABLE_REACH) / _TABLE_STEP
    i = min(int(u), _ERF_TABLE.shape[0] - 2)
    t = u - i
    p0, p1 = _ERF_TABLE[i, 0], _ERF_TABLE[i + 1, 0]
    m0, m1 = _ERF_TABLE[i, 1], _ERF_TABLE[i + 1, 1]
    return p0 + t * (m0 + t * (3.0 * (p1 - p0) - 2.0 * m0 - m1
                               + t * (2.0 * (p0 - p1) + m0 + m1)))


def _erf_table(step: float, reach: float) -> np.ndarray:
    """The error-function profile (:func:`profile`) and its slope times ``step`` on
    ``[-reach, reach]``, ``(N, 2)``."""
    x = np.arange(-reach, reach + 0.5 * step, step)
    return np.stack([profile(x), np.exp(-math.pi * x * x) * step], axis=1)


# The compiled loop interpolates the error function in a table instead of calling libm's erf:
# the layer's profile is most of a model evaluation's cost, and the table's lookup is several
# times cheaper. At 1/256 per step it is within 2e-11 of scipy.special.erf, its slope within
# about 1e-8 (tests/test_separation_batched.py); beyond 4 the profile is 0 or 1 to 1e-23.
_TABLE_STEP = 1.0 / 256.0
_TABLE_REACH = 4.0
_ERF_TABLE = _erf_table(_TABLE_STEP, _TABLE_REACH)


def _alike(table: np.ndarray, columns):
    """Models (rows of ``table``) with the same values in ``columns``: the first of each kind
    and each model's kind, or None when every model differs."""
    if len(table) < 2:
        return None
    first, kind, seen = [], [], {}
    for k, row in enumerate(table[:, columns]):
        key = row.tobytes()  # bit for bit: such models give the same numbers
        if key not in seen:
            seen[key] = len(first)
            first.append(k)
        kind.append(seen[key])
    if len(first) == len(table):
        return None
    return np.array(first), np.array(kind)


def _of_kinds(per_model: np.ndarray, alike) -> np.ndarray:
    """The rows of ``per_model`` for the first model of each kind (:func:`_alike`)."""
    return per_model if alike is None else per_model[alike[0]]


def _to_models(per_kind, alike):
    """Rows for each kind of model (:func:`_alike`) handed to every model of that kind."""
    return per_kind if alike is None else per_kind[alike[1]]


_LINE_CACHE: dict = {}


def _dividing_lines(geom: SideGeometry, lines: np.ndarray):
    """The dividing lines' heights over the angle grid and their rise ``dZ/ds``, ``(K, P)``
    each, for the rows ``(phi_s, slope, relax)`` of ``lines``: the last few lines are kept (the
    fit asks for the Jacobian where it has just evaluated the model, and a search's candidates
    share their lines), the new ones traced together."""
    phi = geom.phi_grid
    alike = _alike(lines, slice(None))
    grid = (geom.radius_px, geom.final_deg, phi.size, float(phi[0]), float(phi[-1]))
    keys = [(*line, *grid) for line in _of_kinds(lines, alike).tolist()]
    known = {}
    for key in keys:  # one lookup a key: another thread (the other side) may clear the cache
        line = _LINE_CACHE.get(key)
        if line is not None:
            known[key] = line
    new = [key for key in keys if key not in known]
    if new:
        r = geom.radius_px
        lifts = dividing_lines_px(r, [(phi_s, slope, relax * r) for phi_s, slope, relax, *_ in new],
                                  phi, geom.final_deg)
        rises = _gradient(lifts, _spacing(r, phi))
        traced = dict(zip(new, zip(lifts, rises, strict=True), strict=True))
        if len(_LINE_CACHE) + len(new) > 64:
            _LINE_CACHE.clear()
        _LINE_CACHE.update(traced)
        known.update(traced)
    found = [known[key] for key in keys]
    lift = np.stack([lift for lift, _ in found])
    rise = np.stack([rise for _, rise in found])
    return _to_models(lift, alike), _to_models(rise, alike)


_SPACINGS: dict = {}


def _spacing(radius_px: float, phi: np.ndarray):
    """Arc-length spacing of the angle grid as ``np.gradient`` takes it: one step when even, the
    steps otherwise (kept per grid)."""
    key = (radius_px, phi.tobytes())
    found = _SPACINGS.get(key)
    if found is None:
        steps = np.diff(np.radians(phi) * radius_px)
        found = steps[0] if (steps == steps[0]).all() else steps
        if len(_SPACINGS) > 16:
            _SPACINGS.clear()
        _SPACINGS[key] = found
    return found


def _gradient(rows: np.ndarray, spacing) -> np.ndarray:
    """``np.gradient(rows, x, axis=1)`` with the spacing of ``x`` from :func:`_spacing`, same
    formulas (second order inside, first order at the ends): written out because np.gradient's
    set-up for a coordinate array costs more than the arithmetic on a few lines."""
    out = np.empty_like(rows)
    if np.ndim(spacing) == 0:
        out[:, 1:-1] = (rows[:, 2:] - rows[:, :-2]) / (2.0 * spacing)
        first = last = spacing
    else:
        dx1, dx2 = spacing[:-1], spacing[1:]
        a = -(dx2) / (dx1 * (dx1 + dx2))
        b = (dx2 - dx1) / (dx1 * dx2)
        c = dx1 / (dx2 * (dx1 + dx2))
        out[:, 1:-1] = a * rows[:, :-2] + b * rows[:, 1:-1] + c * rows[:, 2:]
        first, last = spacing[0], spacing[-1]
    out[:, 0] = (rows[:, 1] - rows[:, 0]) / first
    out[:, -1] = (rows[:, -1] - rows[:, -2]) / last
    return out
