"""One shot from frame pair to proposal: ball, masks, PIV, fields, separation.

This is the function the CLI, the batch workers and the window all call; the records they
exchange, ``ShotSettings`` and ``ShotResult``, are in ``core.shot_result`` (imported here too).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from core import WakelineError
from core.geometry import turn_deg
from core.plausibility import DIRECTION_TOLERANCE_DEG
from core.results import (
    BY_ANALYST,
    BallFit,
    Flight,
    SeparationResult,
    SideProposal,
    VectorField,
)
from core.rulebook import RULEBOOK_DIAMETERS_MM
from core.shot_result import FINE_PASSES, ShotResult, ShotSettings, fine_vorticity

__all__ = ["ShotResult", "ShotSettings", "measure_shot", "remeasure_ball"]


#: Ball displacement (px) below which its direction is not trusted without an override.
MIN_FLIGHT_PX = 1.0

#: What a session's analyst does about frames that look swapped (``wakeline pair`` words it,
#: and the check below, for its own two files).
SWAPPED_REMEDY = ("say frames_swapped yes for the shot in shots.csv and import again with "
                  "--correct-values")
#: What a session's analyst checks when the flight given and the frames' order disagree.
SWAPPED_CHECK = "the shot's frames_swapped in shots.csv"


def measure_shot(
    frame_a: np.ndarray, frame_b: np.ndarray, settings: ShotSettings, progress=None,
    background: np.ndarray | None = None,
) -> ShotResult:
    """Measure one shot: ball (unless ``settings.find_ball`` is False), PIV, fields, separation.

    Stages: ball circle in each frame -> masks (ball + margin, per frame) -> PIV with the core
    settings -> a finer correlation (down to 16 px windows) on a crop around the ball in the
    ball frame -> velocity and vorticity -> separation proposal (layer fit to the particle images
    next to the ball, with the stream outside it from the fine field).

    Units of the fields on the result: with ``dt_s`` and a scale (given, or derived from the
    fitted ball and its diameter) ``u_m_s``/``v_m_s`` are lab-frame m/s and ``vorticity_1_s`` is
    1/s; without ``dt_s`` the velocities are None and the vorticity is per frame pair
    (displacement px per px), as noted in the warnings.

    Parameters
    ----------
    frame_a, frame_b : (H, W) ndarray
        The frame pair, same shape, in the order they were exposed (a session's loaders put
        them so where the manifest says ``frames_swapped``: ``core.store.in_exposure_order``).
    settings : ShotSettings
    progress : callable, optional
        Passed to the correlation (``progress(done, total, message)``).
    background : (H, W) ndarray, optional
        Background image of the camera position (:func:`core.conditioning.background_image`),
        subtracted from both frames before correlation.

    Raises
    ------
    core.WakelineError
        When the shot cannot be measured (e.g. no ball found where one was asked for).
    """
    from core.piv import correlate_pair

    clock = _StageClock()
    glare = _glare(frame_a, frame_b, settings)
    balls = _balls(frame_a, frame_b, settings) if _wants_ball(settings) else None
    masks = glare if balls is None else _masks(frame_a.shape, balls, glare)
    clock.lap("ball")
    cond_a, cond_b = _conditioned(frame_a, frame_b, settings, background, glare)
    vf = correlate_pair(cond_a, cond_b, masks[0], masks[1], settings.piv, progress)
    clock.lap("piv")  # with the conditioning
    return _after_piv(vf, (frame_a, frame_b), (cond_a, cond_b), balls, glare, settings, clock)


def remeasure_ball(
    frame_a: np.ndarray, frame_b: np.ndarray, stored: ShotResult, settings: ShotSettings,
    background: np.ndarray | None = None,
) -> ShotResult:
    """Measure a shot again after the analyst set its circles or its flight direction.

    Only what depends on them is redone: the scale (when derived from the ball), the flight,
    the frame-order check, the fine correlation in the ball frame, the separation, the
    Reynolds number and the fields in m/s; the ball is not searched for where the analyst set
    its circle (``settings.circle_a_px``, ``circle_b_px``), and the main correlation is the
    stored one (its masks were drawn with the circles as they were: only windows at the
    outline differ). When ``settings`` differ from ``stored.settings`` in anything else (PIV
    passes, scale, ...), or the shot has no ball, the whole shot is measured again.

    Parameters
    ----------
    frame_a, frame_b : (H, W) ndarray
    stored : ShotResult
        The shot's last result (its main field is kept).
    settings : ShotSettings
        The settings to measure with, the analyst's circles and flight direction included.
    background : (H, W) ndarray, optional
        As for :func:`measure_shot`.

    Raises
    ------
    core.WakelineError
        As :func:`measure_shot`.
    """
    if not _wants_ball(settings) or not settings.measured_alike(stored.settings):
        return measure_shot(frame_a, frame_b, settings, background=background)
    clock = _StageClock()
    glare = _glare(frame_a, frame_b, settings)
    balls = _balls(frame_a, frame_b, settings)
    cond_a, cond_b = _conditioned(frame_a, frame_b, settings, background, glare)
    clock.lap("ball")
    field = replace(stored.field, warnings=list(stored.field.warnings))
    return _after_piv(field, (frame_a, frame_b), (cond_a, cond_b), balls, glare, settings, clock)


def _after_piv(vf: VectorField, raw, conditioned, balls, glare, settings: ShotSettings,
               clock) -> ShotResult:
    """The stages after the main correlation: ball stages (when there is a ball), fields."""
    from core.rulebook import ball_size_problem

    size = ball_size_problem(settings.ball_type, settings.ball_diameter_mm)
    warnings = [size] if size else []
    result = ShotResult(field=vf, settings=settings, scale_mm_per_px=settings.scale_mm_per_px,
                        warnings=warnings, stage_seconds=clock.seconds)
    if balls is not None:
        _ball_stages(result, raw, conditioned, balls, glare, warnings, clock)
    _fill_fields(result, warnings)
    clock.lap("fields")
    return result


class _StageClock:
    """Wall time of consecutive stages (seconds), accumulated by name."""

    def __init__(self):
        import time

        self._now = time.perf_counter
        self._last = self._now()
        self.seconds: dict[str, float] = {}

    def lap(self, name: str) -> None:
        now = self._now()
        self.seconds[name] = self.seconds.get(name, 0.0) + now - self._last
        self._last = now


#: Standard uncertainty (px) of a circle the analyst placed by hand (centre per axis and
#: radius): about what a drag on screen places at the zoom an outline is judged at.
HAND_CIRCLE_SIGMA_PX = 0.5


def _wants_ball(settings: ShotSettings) -> bool:
    return bool(settings.find_ball or settings.circle_a_px or settings.circle_b_px)


def _balls(frame_a, frame_b, settings: ShotSettings):
    """The ball in both frames: the analyst's circles where set, else found (near the other)."""
    from core.ball import find_ball, find_balls

    hint = _expected_radius_px(settings)
    given = [None if c is None else hand_ball(c, frame_a.shape)
             for c in (settings.circle_a_px, settings.circle_b_px)]
    try:
        if given == [None, None]:
            return find_balls(frame_a, frame_b, radius_hint_px=hint,
                              threads=min(2, settings.piv.threads()))
        ball_a = given[0] or find_ball(frame_a, radius_hint_px=hint, name="frame A",
                                       near=given[1])
        ball_b = given[1] or find_ball(frame_b, radius_hint_px=hint, name="frame B",
                                       near=ball_a)
    except WakelineError as exc:
        if hint is None:
            raise
        raise WakelineError(f"{exc}; {_scale_note(settings, hint, frame_a.shape)}") from None
    return ball_a, ball_b


def _scale_note(settings: ShotSettings, radius_px: float, shape) -> str:
    """How big the given scale makes the ball, and the inverse scale where that size cannot be
    the ball's (a scale given in px per mm)."""
    scale, diameter = settings.scale_mm_per_px, stated_ball_diameter_mm(settings)
    kind = (settings.ball_type or "").strip().lower()  # the ball its nominal diameter is of
    ball = ("ball" if settings.ball_diameter_mm or not kind
            else kind if kind.endswith("ball") else f"{kind} ball")
    # a diameter given as typed; a ball type's nominal one to four figures
    typed = f"{diameter:g}" if settings.ball_diameter_mm else f"{diameter:.4g}"
    note = (f"the scale given, {scale:g} mm/px, makes the {typed} mm {ball} "
            f"{2.0 * radius_px:.1f} px across")
    if 8.0 <= radius_px <= 0.5 * min(shape):
        return note
    low, high = RULEBOOK_DIAMETERS_MM
    if not 0.5 * low <= diameter <= 2.0 * high:  # the diameter is the slip, not the scale
        return note + (f"; a ball of {typed} mm? (the rulebooks' balls are "
                       f"{low:.0f}-{high:.0f} mm): check ball_diameter_mm")
    return note + (f"; in px per mm? {scale:g} px/mm is {1.0 / scale:.4g} mm/px, a ball "
                   f"{diameter * scale:.0f} px across")


def hand_ball(circle, shape) -> BallFit:
    """A ``BallFit`` of a circle (cx, cy, r) px the analyst placed on a frame of ``shape``."""
    cx, cy, r = (float(v) for v in circle)
    height, width = shape
    cut = cx - r < 0 or cy - r < 0 or cx + r > width - 1 or cy + r > height - 1
    sigma = HAND_CIRCLE_SIGMA_PX
    return BallFit((cx, cy), r, cut_by_edge=cut, center_sigma_px=(sigma, sigma),
                   radius_sigma_px=sigma, outline=BY_ANALYST)


def _expected_radius_px(settings: ShotSettings) -> float | None:
    """Ball radius (px) from its diameter and a given scale, when both are known."""
    diameter = stated_ball_diameter_mm(settings)
    if diameter and settings.scale_mm_per_px:
        return 0.5 * diameter / settings.scale_mm_per_px
    return None


def _glare(frame_a, frame_b, settings: ShotSettings):
    """Glare masks of both frames (None each when glare is not masked or there is none)."""
    from core.conditioning import glare_mask

    if not settings.mask_glare:
        return None, None
    masks = [glare_mask(frame) for frame in (frame_a, frame_b)]
    return tuple(m if m.any() else None for m in masks)


def _conditioned(frame_a, frame_b, settings: ShotSettings, background, glare):
    """The frames as correlated: background removed, glare darkened, locally normalised (not
    on sparse seeding, where it raised the vectors' error on synthetic shots)."""
    from core.conditioning import (
        SPARSE_SPACING_PX,
        normalise_local,
        particle_spacing_px,
        subtract_background,
    )

    frames = [frame_a, frame_b]
    if background is not None:
        frames = [subtract_background(f, background, name)
                  for f, name in zip(frames, ("frame A", "frame B"), strict=True)]
    spacing = particle_spacing_px(frames[0]) if settings.normalise_spacings else math.inf
    if spacing <= SPARSE_SPACING_PX:
        window = settings.normalise_spacings * spacing
        frames = [normalise_local(f, window, mask=m) for f, m in zip(frames, glare, strict=True)]
    else:
        frames = [f if m is None else np.where(m, 0, f).astype(np.float32)
                  for f, m in zip(frames, glare, strict=True)]
    return frames[0], frames[1]


def stated_ball_diameter_mm(settings: ShotSettings) -> float | None:
    """The ball's diameter a shot is measured with: given, or its type's nominal one."""
    from core.ball import nominal_diameter_mm

    if settings.ball_diameter_mm:
        return float(settings.ball_diameter_mm)
    if settings.ball_type:
        return nominal_diameter_mm(settings.ball_type)
    return None


def _masks(shape, balls, glare=(None, None)):
    from core.ball import ball_mask

    masks = [ball_mask(shape, ball) for ball in balls]
    return tuple(m if g is None else m | g for m, g in zip(masks, glare, strict=True))


def _ball_stages(result: ShotResult, raw, conditioned, balls, glare, warnings: list[str],
                 clock) -> None:
    """Scale, flight, frame-order check and separation (fills ``result`` in place)."""
    from core.fields import valid_near_ball

    settings = result.settings
    ball_a, ball_b = balls
    result.ball_a, result.ball_b = ball_a, ball_b
    first = len(warnings)
    if ball_a.cut_by_edge or ball_b.cut_by_edge:
        warnings.append("the image edge cuts the ball: its circle is fitted to the visible outline")
    warnings.extend(_ball_warnings(ball_a, ball_b, _expected_radius_px(settings)))
    flight = _flight(result, raw, balls, glare, warnings)
    result.flight = flight
    # a held ball's direction given: the free stream past it flows against its flight
    against = (None if settings.flight_deg is None
               else _held_flight_from_stream(result.field, ball_a, flight))
    gap = None if against is None else abs(turn_deg(settings.flight_deg, against))
    if gap is not None and DIRECTION_TOLERANCE_DEG < gap < 180.0 - DIRECTION_TOLERANCE_DEG:
        warnings.append(  # (the wrong way round altogether: below, where no separation is fitted)
            f"the flight direction given ({settings.flight_deg:g} deg) is {gap:.0f} deg from the "
            f"{against:.1f} deg the free stream gives the held ball (against the stream): check "
            "the flight direction")
    result.ball_warnings = list(warnings[first:])  # what the ball and flight stages said
    clock.lap("ball")
    result.valid_near_ball = valid_near_ball(result.field, ball_a, 2.0 * result.field.spacing_px)
    stream = _air_stream_px(result.field, ball_a, flight)
    result.reynolds = _reynolds(result, stream)
    if gap is not None and gap >= 180.0 - DIRECTION_TOLERANCE_DEG:
        warnings.append(
            f"the flight direction given ({settings.flight_deg:g} deg) looks the wrong way "
            f"round: the free stream past the held ball gives {against:.1f} deg (against the "
            f"stream); check the flight direction, or {SWAPPED_CHECK} (no separation "
            "proposed)")
        reason = (f"the flight direction given ({settings.flight_deg:g} deg) looks the wrong "
                  "way round, or the frames are swapped (see warnings)")
        result.separation = SeparationResult(SideProposal(None, reason=reason),
                                             SideProposal(None, reason=reason))
        return
    if _order_reversed(result.field, ball_a, flight):
        if settings.flight_deg is not None:
            # with the direction given, the likelier mistake is the direction, not the order
            warnings.append(
                f"the flight direction given ({settings.flight_deg:g} deg) looks the wrong way "
                "round: the air ahead of the ball (as given) moves with it and the air behind "
                f"does not; check the flight direction, or {SWAPPED_CHECK} (no separation "
                "proposed)"
            )
            reason = (f"the flight direction given ({settings.flight_deg:g} deg) looks the "
                      "wrong way round, or the frames are swapped (see warnings)")
        else:
            warnings.append(
                "frames look swapped: the air ahead of the ball moves with it and the air "
                f"behind does not; if the camera wrote them so, {SWAPPED_REMEDY} (no separation "
                "proposed)" if not settings.frames_swapped else
                "frames look swapped, though frames_swapped says they were: the air ahead of "
                "the ball moves with it and the air behind does not; check the shot's "
                "frames_swapped in shots.csv (no separation proposed)"
            )
            reason = "frames look swapped (see warnings)"
        result.separation = SeparationResult(
            SideProposal(None, reason=reason), SideProposal(None, reason=reason)
        )
        return
    if stream is None:
        reason = "the air hardly moves relative to the ball: no wake to follow"
        result.separation = SeparationResult(SideProposal(None, reason=reason),
                                             SideProposal(None, reason=reason))
        return
    result.separation = _separation(*conditioned, balls, flight, stream, settings, clock,
                                    result, glare, raw[0])


def _air_stream_px(lab_field: VectorField, ball: BallFit, flight: Flight) -> float | None:
    """The air's speed past the ball (px between frames): the ball's own, or a held ball's free
    stream; None when the air hardly moves relative to the ball."""
    stream = float(np.hypot(*flight.displacement_px))
    if stream < MIN_FLIGHT_PX:  # a held ball: the air streams past it
        stream = _free_stream_px(lab_field, ball)
    return stream if stream >= MIN_FLIGHT_PX else None


def _reynolds(result: ShotResult, stream_px: float | None):
    """The shot's Reynolds number from the air's speed past the ball, when dt, the scale and
    the ball's diameter are known."""
    from core.air import reynolds_number

    settings = result.settings
    scale, dt = result.scale_mm_per_px, settings.dt_s
    air_m_s = stream_px * scale * 1e-3 / dt if stream_px and scale and dt else None
    return reynolds_number(air_m_s, stated_ball_diameter_mm(settings), settings.air_temp_c)


def _ball_warnings(ball_a: BallFit, ball_b: BallFit, expected_r: float | None) -> list[str]:
    """Radius against diameter / scale, the frames' radii against each other, poor fits."""
    from core.ball import POOR_ARC_SHARE, POOR_CENTRE_SIGMA_PX

    out = []
    sa, sb = ball_a.radius_sigma_px, ball_b.radius_sigma_px
    both = float(np.hypot(sa, sb)) if np.isfinite([sa, sb]).all() else 0.0
    mean_r = 0.5 * (ball_a.radius_px + ball_b.radius_px)
    if expected_r:
        off = mean_r - expected_r
        # 1 %: a ball's rulebook diameter range spans about 2 % (Laws of Cricket, Law 4)
        if abs(off) > 0.01 * expected_r and abs(off) > 2.0 * 0.5 * both:
            out.append(
                f"the fitted ball radius ({mean_r:.1f} px) differs from diameter / scale "
                f"({expected_r:.1f} px) by {100 * off / expected_r:+.1f} %: check the scale and "
                "the ball diameter"
            )
    if both > 0 and abs(ball_a.radius_px - ball_b.radius_px) > 3.0 * both:
        out.append(
            f"the ball's radius differs between the frames ({ball_a.radius_px:.2f} vs "
            f"{ball_b.radius_px:.2f} px, beyond their uncertainty {both:.2f} px): one outline "
            "may be spoilt"
        )
    for name, ball in (("frame A", ball_a), ("frame B", ball_b)):
        if ball.outline == BY_ANALYST:
            continue
        worst = max(ball.center_sigma_px) if np.isfinite(ball.center_sigma_px).all() else 0.0
        if ball.arc_share < POOR_ARC_SHARE or worst > POOR_CENTRE_SIGMA_PX:
            out.append(
                f"{name}: the ball's circle is poorly fitted ({100 * ball.arc_share:.0f} % of "
                f"its outline seen, from the {ball.outline or 'outline'}; centre uncertain by "
                f"{worst:.2f} px)"
            )
    return out


def _flight(result: ShotResult, raw, balls, glare, warnings: list[str]) -> Flight:
    """Scale from the ball when not given, and the flight with its uncertainty, cross-checked
    against the air moving with the ball; a held ball's flight from the free stream."""
    from core.ball import (
        air_direction,
        ball_displacement,
        flight_from_balls,
        flight_from_stream,
        match_ball_image,
        scale_from_ball,
    )

    settings = result.settings
    ball_a, ball_b = balls
    scale_rel = 0.0
    diameter = stated_ball_diameter_mm(settings)
    if result.scale_mm_per_px is None and diameter:
        mean_r = 0.5 * (ball_a.radius_px + ball_b.radius_px)
        result.scale_mm_per_px = scale_from_ball(mean_r, diameter)
        sigma_r = 0.5 * float(np.hypot(ball_a.radius_sigma_px, ball_b.radius_sigma_px))
        scale_rel = sigma_r / mean_r if np.isfinite(sigma_r) else 0.0
    match = match_ball_image(*raw, ball_a, ball_b, glare_a=glare[0], glare_b=glare[1])
    shift, cov, note = ball_displacement(ball_a, ball_b, match)
    if note:
        warnings.append(note)
    flight = flight_from_balls(
        ball_a, ball_b, displacement_px=shift, displacement_cov_px2=cov, dt_s=settings.dt_s,
        scale_mm_per_px=result.scale_mm_per_px, scale_sigma_rel=scale_rel,
        flight_deg=settings.flight_deg,
    )
    moved = float(np.hypot(*shift))
    if settings.flight_deg is not None:
        return flight
    if moved < MIN_FLIGHT_PX:
        held = flight_from_stream(result.field, ball_a, dt_s=settings.dt_s,
                                  scale_mm_per_px=result.scale_mm_per_px, displacement_px=shift)
        if held is not None and float(np.hypot(*_stream_px(result.field, ball_a))) >= MIN_FLIGHT_PX:
            warnings.append(
                f"the ball moved only {moved:.2f} px between frames: taken as held (tunnel), its "
                "flight direction is the opposite of the free stream; give the flight direction "
                "(override) to set it"
            )
            return held
        warnings.append(
            f"the ball moved only {moved:.2f} px between frames: flight direction unreliable; "
            "give the flight direction (override) for a held ball"
        )
        return flight
    air = air_direction(result.field, ball_a, moved)
    if air is not None:
        flight.air_direction_deg, flight.air_direction_sigma_deg = air
        gap = turn_deg(air[0], flight.direction_deg)
        combined = float(np.hypot(flight.direction_sigma_deg or 0.0, air[1]))
        if abs(gap) > 2.0 * combined:
            warnings.append(
                f"the flight direction from the ball ({flight.direction_deg:.1f} deg) and that of "
                f"the air moving with it ({air[0]:.1f} deg) differ by {abs(gap):.1f} deg, beyond "
                f"their uncertainties ({2.0 * combined:.1f} deg): check the ball's circles"
            )
    return flight


def _order_reversed(vf: VectorField, ball: BallFit, flight: Flight) -> bool:
    """True when the air ahead of the ball follows it more than the air behind (wake)."""
    from core.geometry import flight_unit

    dx, dy = flight.displacement_px
    moved = float(np.hypot(dx, dy))
    if moved < MIN_FLIGHT_PX:
        return False
    fx, fy = flight_unit(flight.direction_deg)
    rx, ry = vf.x_px - ball.center_px[0], vf.y_px - ball.center_px[1]
    along = rx * fx + ry * fy
    across = np.abs(-rx * fy + ry * fx)
    r = ball.radius_px
    follow = (vf.dx_px * dx + vf.dy_px * dy) / moved
    usable = vf.valid & np.isfinite(follow) & (across < 0.7 * r)
    ahead = usable & (along > 1.2 * r) & (along < 2.5 * r)
    behind = usable & (along < -1.2 * r) & (along > -2.5 * r)
    if ahead.sum() < 3 or behind.sum() < 3:
        return False
    return float(np.median(follow[ahead])) > float(np.median(follow[behind])) + 0.2 * moved


def _held_flight_from_stream(field, ball, flight: Flight) -> float | None:
    """A held ball's flight direction (deg) by its free stream (against it), or None: the ball
    moved, or the air hardly moves past it."""
    from core.ball import flight_from_stream

    if float(np.hypot(*flight.displacement_px)) >= MIN_FLIGHT_PX:
        return None
    stream = flight_from_stream(field, ball)
    if stream is None or float(np.hypot(*_stream_px(field, ball))) < MIN_FLIGHT_PX:
        return None
    return round(stream.direction_deg, 1) % 360.0


def _separation(frame_a, frame_b, balls, flight: Flight, stream: float,
                settings: ShotSettings, clock, result: ShotResult, glare=(None, None),
                raw_a=None):
    """Fine correlation around the ball in the ball frame, then the layer fit on each side.

    ``frame_a, frame_b`` are the conditioned frames; ``stream`` the air's speed past the ball
    (px, :func:`_air_stream_px`); the particle images beside the ball are counted on ``raw_a``
    (frame A as recorded; local normalisation dims the particles next to a bright ball).
    """
    from core.piv import correlate_pair
    from core.separation import BallFrame, propose_separation

    lab_field = result.field

    origin, a, b, mask, centre, radius, left = _ball_frame_crop(frame_a, frame_b, balls, flight)
    if min(a.shape) < 2 * FINE_PASSES[0].window_px:
        reason = "too little of the image around the ball for the fine correlation"
        return SeparationResult(SideProposal(None, reason=reason),
                                SideProposal(None, reason=reason))
    fine = replace(settings.piv, passes=FINE_PASSES)
    vf = correlate_pair(a, b, mask, mask, fine)
    vf = replace(vf, dx_px=vf.dx_px - left[0], dy_px=vf.dy_px - left[1])
    result.fine_field = replace(vf, x_px=vf.x_px + origin[0], y_px=vf.y_px + origin[1])
    clock.lap("fine piv")
    ball = BallFrame(centre, radius, tuple(flight.displacement_px), flight.direction_deg, stream,
                     reynolds=result.reynolds, **_uncertainties(balls, flight))
    seeding = _seeding_map(frame_a if raw_a is None else raw_a, *balls)
    proposal = propose_separation(frame_a, frame_b, ball, vf, origin, lab_field,
                                  seeding, glare, threads=settings.piv.threads())
    clock.lap("separation")
    return proposal


def _uncertainties(balls, flight: Flight) -> dict:
    """Standard uncertainties of the mid-exposure circle (the mean of the two frames': radius,
    and the centre per axis as the root mean square of x and y) and of the flight direction;
    zero where unknown."""

    def known(value) -> float:
        return float(value) if np.isfinite(value) else 0.0

    radius = [known(b.radius_sigma_px) for b in balls]
    centre = [known(np.sqrt(np.mean(np.square(b.center_sigma_px)))) for b in balls]
    return {
        "radius_sigma_px": float(np.hypot(*radius) / 2.0),
        "center_sigma_px": float(np.hypot(*centre) / 2.0),
        "flight_sigma_deg": known(flight.direction_sigma_deg or 0.0),
    }


def _seeding_map(frame, ball: BallFit, other: BallFit):
    """Particle-image density around the ball in frame A, as far out as
    :func:`core.near_wall.seeding_ratio` reads it (``SEEDING_RING`` from the mid-exposure centre,
    half the ball's displacement from frame A's) and the count's box (8 px) and the band-pass
    filter (12 px) reach."""
    from core.ball import ball_mask
    from core.near_wall import SEEDING_RING, SeedingMap, particle_image_density

    height, width = frame.shape
    cx, cy = ball.center_px
    half_shift = 0.5 * math.hypot(other.center_px[0] - cx, other.center_px[1] - cy)
    reach = SEEDING_RING[1] * ball.radius_px + 24 + half_shift
    y0, y1 = max(0, int(cy - reach)), min(height, int(cy + reach) + 1)
    x0, x1 = max(0, int(cx - reach)), min(width, int(cx + reach) + 1)
    crop = np.asarray(frame[y0:y1, x0:x1], dtype=np.float32)
    inside = ball_mask(crop.shape, BallFit((cx - x0, cy - y0), ball.radius_px), 1.0)
    return SeedingMap(particle_image_density(crop, inside), (y0, x0))


def _free_stream_px(vf: VectorField, ball: BallFit) -> float:
    """Median speed (px per pair) of valid vectors more than 2.5 radii from the ball."""
    far = np.hypot(vf.x_px - ball.center_px[0], vf.y_px - ball.center_px[1]) > 2.5 * ball.radius_px
    speed = np.hypot(vf.dx_px, vf.dy_px)[far & vf.valid]
    return float(np.median(speed)) if speed.size else float("nan")


def _stream_px(vf: VectorField, ball: BallFit) -> tuple[float, float]:
    """Median displacement (px per pair) of valid vectors more than 2.5 radii from the ball."""
    far = np.hypot(vf.x_px - ball.center_px[0], vf.y_px - ball.center_px[1]) > 2.5 * ball.radius_px
    far &= vf.valid
    if not far.any():
        return float("nan"), float("nan")
    return float(np.median(vf.dx_px[far])), float(np.median(vf.dy_px[far]))


def _ball_frame_crop(frame_a, frame_b, balls, flight: Flight):
    """Crop around the ball with both frames moved about half the ball displacement, so the
    ball sits (nearly) still at its mid-exposure position (the ball frame); one mask serves
    both frames.

    The frames are moved by whole pixels: resampling them (a cubic spline shift) cost a third
    of a second on a 2560 x 2160 shot and smooths the particle images.

    Returns
    -------
    origin : (float, float)
        Image position (x, y) of the crops' pixel (0, 0) (the ball at mid-exposure lies halfway
        between its places in the two crops, as in the frames).
    a, b : (h, w) float32 ndarray
        Frames A and B, moved.
    mask : (h, w) bool ndarray
        The ball in the crops (plus the mask margin), and what either crop took from beyond
        its frame's edge.
    centre, radius
        The ball at mid-exposure (image px).
    left : (float, float)
        The ball's motion (x, y) from crop a to crop b that the whole pixels leave (at most a
        pixel per axis): to be taken off the displacements measured on the crops.
    """
    from core.ball import ball_mask

    ball_a, ball_b = balls
    cx = 0.5 * (ball_a.center_px[0] + ball_b.center_px[0])
    cy = 0.5 * (ball_a.center_px[1] + ball_b.center_px[1])
    r = 0.5 * (ball_a.radius_px + ball_b.radius_px)
    half = 0.5 * np.asarray(flight.displacement_px, dtype=np.float64)  # (x, y)
    move = np.round(half).astype(int)  # frame A moved by +move, frame B by -move
    left = 2.0 * (half - move)  # the ball's motion from crop a to crop b
    height, width = frame_a.shape
    y0, y1 = max(0, int(cy - 1.9 * r)), min(height, int(cy + 1.9 * r) + 1)
    x0, x1 = max(0, int(cx - 2.3 * r)), min(width, int(cx + 2.3 * r) + 1)
    a, beyond_a = _moved_crop(frame_a, (y0, y1, x0, x1), move)
    b, beyond_b = _moved_crop(frame_b, (y0, y1, x0, x1), -move)
    mask = ball_mask(a.shape, BallFit((cx - x0, cy - y0), r)) | beyond_a | beyond_b
    return (float(x0), float(y0)), a, b, mask, (cx, cy), r, (float(left[0]), float(left[1]))


def _moved_crop(frame, box, move) -> tuple[np.ndarray, np.ndarray]:
    """``frame[y0:y1, x0:x1]`` with the picture moved by whole pixels ``move`` (x, y), and the
    pixels that came from beyond the frame's edge (its edge pixels repeated: masked, as their
    texture stands still)."""
    y0, y1, x0, x1 = box
    height, width = frame.shape
    rows = np.arange(y0, y1) - move[1]
    cols = np.arange(x0, x1) - move[0]
    beyond = (((rows < 0) | (rows >= height))[:, None]
              | ((cols < 0) | (cols >= width))[None, :])
    rows, cols = np.clip(rows, 0, height - 1), np.clip(cols, 0, width - 1)
    return np.asarray(frame[rows[:, None], cols[None, :]], dtype=np.float32), beyond


def _fill_fields(result: ShotResult, warnings: list[str]) -> None:
    """Velocity (m/s, lab frame) and vorticity (1/s, or per frame pair without dt)."""
    from core.fields import velocity_m_s, vorticity_1_s

    vf = result.field
    dt, scale = result.settings.dt_s, result.scale_mm_per_px
    if dt and scale:
        result.u_m_s, result.v_m_s = velocity_m_s(vf.dx_px, vf.dy_px, dt, scale)
    else:
        missing = " and no ".join(name for name, value in (("dt", dt), ("scale", scale))
                                  if not value)
        warnings.append(f"no {missing}: velocities not in m/s (displacements in px only)")
    result.vorticity_1_s = vorticity_1_s(vf, dt, usable=vf.valid | vf.replaced)
    result.fine_vorticity_1_s = fine_vorticity(result.fine_field, dt)
    if not dt:
        warnings.append("no dt: vorticity is per frame pair (px/px), not 1/s")
