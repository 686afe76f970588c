"""The ensemble view of a condition: its repeat shots aligned on the ball and seen as one.

A condition's repeat shots show the same mean flow around the ball, each with its own ball
position, size in the picture, flight direction and particles. This module

1. **aligns** every shot on its ball: both frames are resampled (``scipy.ndimage``, cubic
   splines) into one *common frame* in which the ball sits still at the same place and size,
   the flight points along the common axis and the upper side is up (the ball frame, as in a
   wind tunnel); frame A is taken half the ball's displacement back and frame B half forward,
   as the shot's own fine correlation does (``core.shot``);
2. **correlates the ensemble**: the correlation planes of all shots are summed window by window
   before each peak search (``core.piv.correlate_ensemble``; ensemble correlation: Meinhart,
   Wereley & Santiago 2000), which gives the condition's mean flow in the ball frame, shown in
   the window like a shot;
3. **proposes the condition's separation**: one layer model (``core.layer_model``) fitted to
   the particle images of all the shots at once (``core.separation.fit_shots_side``), with the
   stream outside the layer from the ensemble's mean flow. The uncertainty is the fit's own
   budget, as for one shot, with the launches' own proposals when they are known: their spread,
   how far their mean lies from the condition's pick, and their circles' and flights' entries
   (:func:`launch_entries`).

How good the condition's pick is depends on the family of shots
(``benchmarks/bench_ensemble.py``; docs/separation_accuracy.md, "The ensemble and a
condition's interval"): on the kinematic family's 48 px balls it erred by a median 1.4 deg
where the launches' mean erred by 3.1 deg, but on the physical family the launches' mean was better at 150 px (0.8
against 1.2 deg) and far better at 60 px (1.6 against 4.4 deg): the launches' layers differ,
and one model fits them all. The mean flow it gives is a picture of the condition; its pick is
a cross-check of the launches' mean.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np
from scipy import ndimage

from core import WakelineError
from core.geometry import SIDES, flight_unit, side_normal
from core.results import BallFit, Flight, SeparationResult, SideProposal
from core.settings import PivPass, PivSettings

#: Extent of the common frame around the ball, in radii: ahead of it, behind it (the wake) and
#: to each side.
AHEAD_RADII = 1.6
BEHIND_RADII = 3.0
ACROSS_RADII = 1.9
#: Passes of the ensemble's mean field (shown like a shot): those of a shot's fine correlation
#: (``core.shot``), then smaller windows the summed planes still carry.
ENSEMBLE_PASSES = (
    PivPass(64, 0.5), PivPass(32, 0.5), PivPass(24, 0.5), PivPass(16, 0.5), PivPass(12, 0.5),
)
#: Ring around the ball left out of the ensemble's mean field (px): rim glare and the
#: alignment's own error (the shots' correlation uses the same, ``core.ball``).
FIELD_MARGIN_PX = 3.0
Progress = Callable[[int, int, str], object]


# --- one shot's ball and motion -----------------------------------------------------------------


@dataclass(frozen=True)
class ShotPose:
    """Where a shot's ball is and how it moves (image px), from its measured summary."""

    shot_id: str
    center_px: tuple[float, float]  # ball centre at mid-exposure
    radius_px: float
    displacement_px: tuple[float, float]  # ball centre B - A
    flight_deg: float
    scale_mm_per_px: float | None = None
    dt_s: float | None = None

    @classmethod
    def from_summary(cls, shot_id: str, summary) -> ShotPose | None:
        """The pose of a measured shot (a ``core.summary.ShotSummary``); None without a ball in
        both frames or a flight."""
        if summary is None:
            return None
        ball_a, ball_b, flight = summary.ball_a, summary.ball_b, summary.flight
        if ball_a is None or ball_b is None or flight is None:
            return None
        centre = (0.5 * (ball_a.center_px[0] + ball_b.center_px[0]),
                  0.5 * (ball_a.center_px[1] + ball_b.center_px[1]))
        radius = 0.5 * (ball_a.radius_px + ball_b.radius_px)
        if not (math.isfinite(radius) and radius > 0):
            return None
        return cls(shot_id, centre, float(radius), tuple(flight.displacement_px),
                   float(flight.direction_deg), summary.scale_mm_per_px, summary.dt_s)


@dataclass(frozen=True)
class CommonFrame:
    """The ball-centred frame a condition's shots are resampled into (px of that frame).

    The flight points along +x (``flight_deg`` 0) or -x (180), whichever most shots fly, the
    upper side is up, and the ball's radius is the shots' median.
    """

    shape: tuple[int, int]
    center_px: tuple[float, float]
    radius_px: float
    flight_deg: float
    stream_px: float  # the air's speed past the ball, px per frame pair (median of the shots)
    scale_mm_per_px: float | None  # median of the shots' scales, brought to this frame
    dt_s: float | None  # median of the shots'

    def map_from(self, pose: ShotPose) -> np.ndarray:
        """Linear map taking an offset from the ball centre in this frame to the shot's picture:
        flight to flight, upper side to upper side (a reflection where the shot flies the other
        way, so that upper stays upper), radius to radius."""
        shot = _basis(pose.flight_deg) * (pose.radius_px / self.radius_px)
        return shot @ np.linalg.inv(_basis(self.flight_deg))

    def outside_ball(self, margin_px: float) -> np.ndarray:
        """``(H, W)`` bool: pixels more than ``margin_px`` outside the outline."""
        yy, xx = np.ogrid[: self.shape[0], : self.shape[1]]
        reach = self.radius_px + margin_px
        return (xx - self.center_px[0]) ** 2 + (yy - self.center_px[1]) ** 2 > reach * reach


def _basis(flight_deg: float) -> np.ndarray:
    """Columns: the flight and the upper side's normal (image coordinates)."""
    return np.column_stack([flight_unit(flight_deg), side_normal(flight_deg, "upper")])


def common_frame(poses: list[ShotPose]) -> CommonFrame:
    """The common frame of a condition's shots (see :class:`CommonFrame`).

    Raises
    ------
    core.WakelineError
        Without shots.
    """
    if not poses:
        raise WakelineError("ensemble: no measured shot with a ball to align")
    radius = float(np.median([p.radius_px for p in poses]))
    leftward = sum(math.cos(math.radians(p.flight_deg)) < 0 for p in poses)
    flight = 180.0 if 2 * leftward >= len(poses) else 0.0
    width = math.ceil((AHEAD_RADII + BEHIND_RADII) * radius)
    height = math.ceil(2 * ACROSS_RADII * radius)
    behind = BEHIND_RADII * radius
    cx = behind if flight == 0.0 else width - 1 - behind
    stream = float(np.median([math.hypot(*p.displacement_px) * radius / p.radius_px
                              for p in poses]))
    scales = [p.scale_mm_per_px * p.radius_px / radius for p in poses if p.scale_mm_per_px]
    dts = [p.dt_s for p in poses if p.dt_s]
    return CommonFrame((height, width), (cx, (height - 1) / 2.0), radius, flight, stream,
                       float(np.median(scales)) if scales else None,
                       float(np.median(dts)) if dts else None)


def to_common_frame(frame_a: np.ndarray, frame_b: np.ndarray, pose: ShotPose,
                    common: CommonFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A shot's frames resampled into the common frame, ball frame (cubic splines,
    ``scipy.ndimage.map_coordinates``).

    Returns
    -------
    a, b : (H, W) float32 ndarray
        The frames in the common frame (``common.shape``).
    unseen : (H, W) bool ndarray
        Pixels either frame did not record (beyond its edges).
    """
    height, width = common.shape
    yy, xx = np.mgrid[0:height, 0:width].astype(np.float64)
    offset = np.stack([xx.ravel() - common.center_px[0], yy.ravel() - common.center_px[1]])
    q = common.map_from(pose) @ offset
    out, unseen = [], np.zeros(common.shape, bool)
    for frame, sign in ((frame_a, -0.5), (frame_b, 0.5)):
        frame = np.asarray(frame, dtype=np.float32)
        x = (q[0] + pose.center_px[0] + sign * pose.displacement_px[0]).reshape(common.shape)
        y = (q[1] + pose.center_px[1] + sign * pose.displacement_px[1]).reshape(common.shape)
        rows, cols = frame.shape
        unseen |= (x < 0) | (x > cols - 1) | (y < 0) | (y > rows - 1)
        out.append(ndimage.map_coordinates(frame, [y, x], order=3, mode="nearest",
                                           output=np.float32))
    return out[0], out[1], unseen


# --- the condition's separation ------------------------------------------------------------------


def condition_sides(pairs, common: CommonFrame, field, singles=None) -> dict[str, SideProposal]:
    """The condition's separation on each side: one layer fitted to all the aligned shots.

    Parameters
    ----------
    pairs : list of (a, b, unseen)
        The shots in the common frame (:func:`to_common_frame`).
    common : CommonFrame
    field : VectorField
        The ensemble's mean flow in the common frame (ball frame, px per pair).
    singles : dict, optional
        ``side -> list of the launches' own proposals`` (``SideProposal``, in the order of
        ``pairs``): they join the uncertainty (:func:`launch_entries`).
    """
    from core.separation import COVERAGE_K, BallFrame, fit_shots_side
    from core.wake import wake_direction

    ball = BallFrame(common.center_px, common.radius_px, (0.0, 0.0), common.flight_deg,
                     common.stream_px)
    wake = wake_direction(field, (0.0, 0.0), ball)
    deflection = 0.0 if wake is None else wake.deflection_deg
    frames = [(a, b) for a, b, _unseen in pairs]
    sides = {}
    for side in SIDES:
        proposal = fit_shots_side(frames, ball, field, (0.0, 0.0), side,
                                  final_deg=deflection if side == "upper" else -deflection)
        launches = [p for p in (singles or {}).get(side, []) if p.angle_deg is not None]
        if proposal.angle_deg is not None and len(launches) >= 2:
            budget = {**(proposal.budget or {}), **launch_entries(proposal.angle_deg, launches)}
            standard = math.sqrt(sum(v * v for v in budget.values()))
            proposal = replace(proposal, uncertainty_deg=round(COVERAGE_K * standard, 2),
                               budget={k: round(v, 3) for k, v in budget.items()})
        sides[side] = proposal
    return sides


def launch_entries(angle_deg: float, launches: list[SideProposal]) -> dict[str, float]:
    """The budget entries the launches' own proposals give the condition's (standard
    uncertainties, deg):

    - ``launches``: the launches' spread over the square root of their number (the condition's
      mean, not one launch).
    - ``distance to the launches' mean``: how far the condition's angle lies from the launches'
      mean, less what their spread explains (``sqrt(max(0, d^2 - sd^2 / n))``). The two are
      estimates of one angle from the same images, by one layer fitted to all and by one to
      each; like the model-form entries, the move from one to the other counts. The fit's own entries treat
      the shots' images as one data set and miss that every launch pulls the one layer its own
      way.
    - ``circle`` and ``flight``: the shots are aligned on their own measured circles and
      flights, whose errors are independent from shot to shot: the root mean square of the
      launches' own entries over the square root of their number.

    The form was chosen on the physical family's repeat launches and checked on the kinematic
    family's (docs/separation_accuracy.md, "The ensemble and a condition's
    interval").
    """
    count = len(launches)
    angles = np.array([p.angle_deg for p in launches], float)
    spread = float(np.std(angles, ddof=1)) / math.sqrt(count)
    apart = float(np.mean(angles)) - angle_deg
    beyond = math.sqrt(max(0.0, apart * apart - spread * spread))
    entries = {"launches": spread, "distance to the launches' mean": beyond}
    for name in ("circle", "flight"):
        moves = np.array([(p.budget or {}).get(name, 0.0) for p in launches], float)
        entries[name] = float(np.sqrt(np.mean(moves**2) / count))
    return entries


# --- the whole view -------------------------------------------------------------------------------


@dataclass
class EnsembleView:
    """A condition's repeat shots as one: the mean flow in the common frame and its separation.

    ``result`` is a ``core.shot.ShotResult`` of the common frame (ball frame: the ball at rest,
    vectors in px per frame pair, velocities in m/s of the air past the ball) so the window and
    the sheet draw it like a shot; ``frame_a``/``frame_b`` are the first shot's frames in the
    common frame (for the picture). ``separation`` holds the condition's proposal per side.
    """

    shot_ids: list[str]
    common: CommonFrame
    result: object
    frame_a: np.ndarray
    frame_b: np.ndarray
    separation: SeparationResult
    left_out: dict[str, str] = field(default_factory=dict)  # shot id -> why it is not in


def ensemble_view(shots, settings: PivSettings | None = None,
                  progress: Progress | None = None, singles=None) -> EnsembleView:
    """The ensemble view of repeat shots.

    Parameters
    ----------
    shots : list of (ShotPose, frame_a, frame_b)
        The condition's measured shots with their frames (as recorded).
    settings : PivSettings, optional
        Validation and threads of the mean field; its passes are ``ENSEMBLE_PASSES``.
    progress : callable, optional
        ``progress(done, total, message)``; returning True stops (``core.piv.Cancelled``).
    singles : dict, optional
        ``side -> the launches' own proposals`` (see :func:`condition_sides`).

    Raises
    ------
    core.WakelineError
        No shot, or frames the correlation refuses.
    """
    from core.fields import velocity_m_s, vorticity_1_s
    from core.piv import correlate_ensemble
    from core.separation import wake_state
    from core.shot import ShotResult, ShotSettings

    poses = [pose for pose, _a, _b in shots]
    common = common_frame(poses)
    steps = len(shots) + 2 + len(ENSEMBLE_PASSES)
    pairs = []
    for number, (pose, frame_a, frame_b) in enumerate(shots, start=1):
        _tell(progress, number - 1, steps, f"aligning shot {pose.shot_id}")
        pairs.append(to_common_frame(frame_a, frame_b, pose, common))
    _tell(progress, len(shots) + 1, steps, "ensemble correlation")
    field_mask = ~common.outside_ball(FIELD_MARGIN_PX)
    piv = replace(settings or PivSettings(), passes=ENSEMBLE_PASSES)

    def passes_done(done, _total, message):
        return _tell(progress, len(shots) + 1 + done, steps, message)

    vf = correlate_ensemble([(a, b, unseen | field_mask, unseen | field_mask)
                             for a, b, unseen in pairs], piv, passes_done)
    _tell(progress, steps - 1, steps, "the condition's separation")
    sides = condition_sides(pairs, common, vf, singles)
    ball = BallFit(common.center_px, common.radius_px)
    speed = None
    if common.scale_mm_per_px and common.dt_s:
        speed = common.stream_px * common.scale_mm_per_px * 1e-3 / common.dt_s
    flight = Flight(common.flight_deg, speed, (0.0, 0.0), source="common frame of the shots")
    separation = SeparationResult(sides["upper"], sides["lower"],
                                  wake_state=wake_state(sides["upper"], sides["lower"]))
    settings_used = ShotSettings(dt_s=common.dt_s, scale_mm_per_px=common.scale_mm_per_px,
                                 find_ball=False, piv=piv)
    result = ShotResult(field=vf, settings=settings_used, ball_a=ball, ball_b=ball,
                        flight=flight, separation=separation,
                        scale_mm_per_px=common.scale_mm_per_px,
                        warnings=list(vf.warnings))
    dt, scale = common.dt_s, common.scale_mm_per_px
    if dt and scale:
        result.u_m_s, result.v_m_s = velocity_m_s(vf.dx_px, vf.dy_px, dt, scale)
    result.vorticity_1_s = vorticity_1_s(vf, dt, usable=vf.valid | vf.replaced)
    first = pairs[0]
    return EnsembleView([p.shot_id for p in poses], common, result, first[0], first[1],
                        separation)


def _tell(progress, done: int, total: int, message: str):
    if progress is not None and progress(done, total, message) is True:
        from core.piv import Cancelled

        raise Cancelled(message)


def _measured_otherwise(session, shot_id: str, record) -> bool:
    """Whether the shot's result was measured with other values or settings than it has now
    (a session without ``settings_for`` cannot tell: no)."""
    settings_for = getattr(session, "settings_for", None)
    return settings_for is not None and record.fingerprint != settings_for(shot_id).fingerprint()


def session_ensemble(session, shot_ids, settings: PivSettings | None = None,
                     progress: Progress | None = None) -> EnsembleView:
    """The ensemble view of some shots of an open session (``core.store.Session``, or any
    mapping of shot id -> record with ``load_frames``): those not marked unusable whose last
    measurement found the ball and its flight; the others are named in ``left_out``.

    Raises
    ------
    core.WakelineError
        When none of the shots can take part (the reasons are in the message), or a frame
        file cannot be read.
    """
    chosen, left_out = [], {}
    for shot_id in shot_ids:
        record = session[shot_id]
        pose = ShotPose.from_summary(shot_id, record.summary)
        if record.pick.status == "unusable":
            left_out[shot_id] = "marked unusable"
        elif pose is None:
            left_out[shot_id] = "no measured ball and flight"
        elif _measured_otherwise(session, shot_id, record):
            # its pose is from values or settings it no longer has (a corrected frames_swapped
            # or scale): aligned on it, its frames would be misplaced
            left_out[shot_id] = "to be processed again (its values or settings changed)"
        else:
            chosen.append(pose)
    if not chosen:
        why = "; ".join(f"{s}: {r}" for s, r in left_out.items()) or "no shots given"
        raise WakelineError(f"ensemble: no shot to align ({why})")
    shots, unreadable = [], []
    for pose in chosen:  # every shot whose frames cannot be read is named, not the first only
        try:  # in the order they were exposed, as they were measured
            shots.append((pose, *session.load_frames(pose.shot_id)))
        except WakelineError as exc:
            unreadable.append(str(exc))
    if unreadable:
        raise WakelineError("; ".join(unreadable))
    singles = {side: [session[pose.shot_id].summary.side(side) for pose in chosen]
               for side in SIDES}
    view = ensemble_view(shots, settings, progress, singles)
    view.left_out = left_out
    return view
