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
3. **proposes the condition's separation** from the mean near-wall flow
   (:func:`side_separation`). Next to the wall, small windows (the ensemble idea down to single
   pixels: Westerweel, Geelhoed & Lindken 2004) are correlated against a search region larger
   by the largest displacement, so that both kinds of air keep all their particle-image pairs:
   the stream, and the still or reversed air under a separated layer. Each window's summed
   plane says which share of its pairs moves with the stream; that share is carried to the
   wall along a layer leaving it at a shallow angle, and the separation angle is where the
   carried shares step from stream to slow. The uncertainty comes from a bootstrap over the
   shots (Efron & Tibshirani 1993; the planes are kept shot by shot, so a resampled ensemble
   costs a weighted sum, not a new correlation) and from the departure angle's range.

Why the near-wall planes are not the vectors of step 2: a multi-pass correlation deforms the
windows by a predictor that, next to the wall, follows the stream; the still air under the
layer then loses most of its pairs and the stream wins windows it fills only a quarter of,
which put the dividing line up to 15 deg late on synthetic repeats. The share estimate is
symmetric between the two kinds of air, so where a window holds half of each it says one half.

This is not the shot-by-shot proposal (``core.separation`` fits a layer model to one shot's
particle images); it is a small, separate estimate from the averaged flow, read beside the
mean of the single-shot picks (``core.conditions``).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np
from scipy import ndimage
from scipy.signal import fftconvolve

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
#: Near-wall windows (px of the common frame): size, spacing, the ring next to the outline left
#: out (the ball's lit rim reaches this far after resampling), and how far out their centroids
#: may lie.
NEAR_WALL_WINDOW_PX = 16
NEAR_WALL_STEP_PX = 2
NEAR_WALL_MARGIN_PX = 1.5
NEAR_WALL_REACH_PX = 8.0
#: Share of a near-wall window that must lie outside the ball and its ring.
NEAR_WALL_MIN_KEPT = 0.2
#: Angles searched on each side (deg, separation convention).
SEARCH_DEG = (-45.0, 75.0)
#: The shallow angle separated layers leave the wall at, from its tangent (about 5-15 deg:
#: common practice, docs/references.md): the middle carries the shares to the wall, the ends
#: give the model's part of the uncertainty.
DEPARTURE_DEG = (5.0, 15.0)
#: Each kind of air counts within this radius of its expected displacement: a fraction of the
#: stream plus a few px (the stream beside a separated layer is slower than potential flow, the
#: air under it may flow back).
CATCH_STREAM = 0.35
CATCH_PX = 2.0
#: Correlation peaks count toward a share above the plane's median plus this many robust
#: standard deviations of its noise.
PEAK_NOISE_SIGMAS = 3.0
#: Bootstrap replicates over the shots (their standard deviation to about 10 %); the generator's
#: seed keeps a result reproducible.
BOOTSTRAP_REPLICATES = 60
BOOTSTRAP_SEED = 20000
#: Expansion of the standard uncertainty into the reported interval (about 95 %).
COVERAGE_K = 2.0

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


# --- the near-wall flow: which share of the air follows the stream --------------------------------


@dataclass
class NearWallPlanes:
    """Summable correlation planes of the windows next to one side of the ball, shot by shot.

    Window ``k`` of frame A (``NEAR_WALL_WINDOW_PX`` square) is correlated against a region of
    frame B around it (a linear correlation, ``scipy.signal.fftconvolve``), so that two kinds of
    air keep all their particle-image pairs: the stream beside the wall, near the potential
    flow's displacement ``stream_px`` there, and the still or slowly reversed air under a
    separated layer, near zero (ball frame).
    """

    phi_deg: np.ndarray  # (K,) separation-convention angle of the window's kept centroid
    gap_px: np.ndarray  # (K,) its distance outside the outline
    stream_px: np.ndarray  # (K, 2) the stream's expected displacement there (x, y)
    shift_px: np.ndarray  # (K, 2) int: the displacement (x, y) of plane index (0, 0)
    catch_px: float  # radius around each expected displacement that counts for it
    planes: np.ndarray  # (N, K, P, P) float32, one stack per shot
    radius_px: float

    def shares(self, weights=None) -> np.ndarray:
        """Share of each window's particle-image pairs that moves with the stream, ``(K,)``,
        for the shots weighted by ``weights`` (``(N,)``, default all once).

        The plane summed over the shots counts, within ``catch_px`` of the stream's expected
        displacement and of zero, its values above its noise (median + ``PEAK_NOISE_SIGMAS``
        robust standard deviations); the two discs have the same area, so noise weighs on both
        alike and a window holding as many pairs of each kind gives one half.
        """
        total = (self.planes.sum(axis=0) if weights is None
                 else np.tensordot(np.asarray(weights, dtype=np.float32), self.planes, axes=1))
        values = total.reshape(len(total), -1)
        median = np.median(values, axis=1, keepdims=True)
        noise = 1.4826 * np.median(np.abs(values - median), axis=1, keepdims=True)
        above = np.maximum(values - (median + PEAK_NOISE_SIGMAS * noise), 0.0)
        fast_disc, slow_disc = self._discs()
        fast = np.where(fast_disc, above, 0.0).sum(axis=1)
        both = fast + np.where(slow_disc, above, 0.0).sum(axis=1)
        return np.where(both > 0, fast / np.where(both > 0, both, 1.0), np.nan)

    def _discs(self) -> tuple[np.ndarray, np.ndarray]:
        """``(K, P * P)`` bool each: plane samples within ``catch_px`` of the stream's expected
        displacement, and of zero."""
        size = self.planes.shape[-1]
        iy, ix = np.divmod(np.arange(size * size), size)
        sx = ix[None, :] + self.shift_px[:, 0, None]
        sy = iy[None, :] + self.shift_px[:, 1, None]
        reach = self.catch_px**2
        fast = (sx - self.stream_px[:, 0, None]) ** 2 + (sy - self.stream_px[:, 1, None]) ** 2
        return fast <= reach, sx**2 + sy**2 <= reach

    def wall_angles(self, departure_deg: float) -> np.ndarray:
        """Each window's angle carried to the wall along a layer leaving it at ``departure_deg``
        from the tangent: the layer's gap ``g = s tan(a) + s^2 / (2 R)`` at arc length ``s``
        (a straight line, the outline curving away under it: derived), solved for ``s``."""
        t = math.tan(math.radians(departure_deg))
        r = self.radius_px
        gap = np.maximum(self.gap_px, 0.0)
        arc = r * (np.sqrt(t * t + 2.0 * gap / r) - t)
        return self.phi_deg - np.degrees(arc / r)


def near_wall_planes(pairs, common: CommonFrame, side: str) -> NearWallPlanes:
    """The near-wall planes of ``side`` from the shots' frames in the common frame.

    Parameters
    ----------
    pairs : list of (a, b, unseen)
        As from :func:`to_common_frame`.
    common : CommonFrame
    side : "upper" or "lower"
    """
    d = NEAR_WALL_WINDOW_PX
    stream = common.stream_px
    kept_ball = common.outside_ball(NEAR_WALL_MARGIN_PX)
    starts_y = np.arange(0, common.shape[0] - d + 1, NEAR_WALL_STEP_PX)
    starts_x = np.arange(0, common.shape[1] - d + 1, NEAR_WALL_STEP_PX)
    y0, x0 = (a.ravel() for a in np.meshgrid(starts_y, starts_x, indexing="ij"))
    phi, gap = _polar(common, side, x0 + (d - 1) / 2.0, y0 + (d - 1) / 2.0)
    near = ((gap > -d / 2.0) & (gap < NEAR_WALL_REACH_PX + d / 2.0)
            & (phi > SEARCH_DEG[0] - 20.0) & (phi < SEARCH_DEG[1] + 20.0))
    y0, x0 = y0[near], x0[near]
    keep = np.stack([kept_ball[y : y + d, x : x + d] for y, x in zip(y0, x0, strict=True)])
    count = keep.sum(axis=(1, 2))
    rows, cols = np.mgrid[0:d, 0:d]
    cx = x0 + (keep * cols).sum(axis=(1, 2)) / np.maximum(count, 1)
    cy = y0 + (keep * rows).sum(axis=(1, 2)) / np.maximum(count, 1)
    phi, gap = _polar(common, side, cx, cy)
    use = ((count >= NEAR_WALL_MIN_KEPT * d * d) & (gap <= NEAR_WALL_REACH_PX)
           & (phi >= SEARCH_DEG[0]) & (phi <= SEARCH_DEG[1]))
    y0, x0, keep, phi, gap = y0[use], x0[use], keep[use], phi[use], gap[use]
    flow = _potential_stream(common, side, phi, gap)
    catch = CATCH_STREAM * stream + CATCH_PX
    reach = math.ceil(0.5 * float(np.hypot(*flow.T).max()) + catch) + 1
    shift = np.rint(0.5 * flow).astype(int) - reach
    planes = [_window_planes(a, b, unseen | ~kept_ball, keep, y0, x0, shift, reach)
              for a, b, unseen in pairs]
    return NearWallPlanes(phi, gap, flow, shift, catch, np.stack(planes), common.radius_px)


def _window_planes(a, b, masked, keep, y0, x0, shift, reach) -> np.ndarray:
    """Linear correlation of each A window (``keep`` its pixels used) with its B region, both
    with their mean removed over the pixels they use, ``(K, P, P)`` float32."""
    d = keep.shape[1]
    size = d + 2 * reach
    pad = size + int(np.abs(shift).max())
    b_pad = np.pad(b, pad)
    use_b = np.pad(~masked, pad)
    corners = list(zip(y0, x0, strict=True))
    wa = np.stack([a[y : y + d, x : x + d] for y, x in corners])
    ka = keep & ~np.stack([masked[y : y + d, x : x + d] for y, x in corners])
    rows, cols = y0 + shift[:, 1] + pad, x0 + shift[:, 0] + pad
    corners = list(zip(rows, cols, strict=True))
    wb = np.stack([b_pad[y : y + size, x : x + size] for y, x in corners])
    kb = np.stack([use_b[y : y + size, x : x + size] for y, x in corners])
    wa = _mean_removed(wa, ka)
    wb = _mean_removed(wb, kb)
    # correlation = convolution with the window turned half round
    planes = fftconvolve(wb, wa[:, ::-1, ::-1], mode="valid", axes=(1, 2))
    return planes.astype(np.float32)


def _mean_removed(windows: np.ndarray, used: np.ndarray) -> np.ndarray:
    count = np.maximum(used.sum(axis=(1, 2), keepdims=True), 1)
    mean = (windows * used).sum(axis=(1, 2), keepdims=True) / count
    return np.where(used, windows - mean, 0.0)


def _polar(common: CommonFrame, side: str, x_px, y_px) -> tuple[np.ndarray, np.ndarray]:
    """Separation-convention angle (deg) and gap outside the outline (px) of points."""
    fx, fy = flight_unit(common.flight_deg)
    nx, ny = side_normal(common.flight_deg, side)
    rx = np.asarray(x_px, dtype=np.float64) - common.center_px[0]
    ry = np.asarray(y_px, dtype=np.float64) - common.center_px[1]
    phi = np.degrees(np.arctan2(-(rx * fx + ry * fy), rx * nx + ry * ny))
    return phi, np.hypot(rx, ry) - common.radius_px


def _potential_stream(common: CommonFrame, side: str, phi_deg, gap_px) -> np.ndarray:
    """Ball-frame displacement (x, y; px per pair) of potential flow past a sphere at points
    beside it (Batchelor 1967, memory): rearward ``U cos(phi) (1 + R^3 / (2 r^3))`` along the
    outline and ``-U sin(phi) (1 - R^3 / r^3)`` outward, ``(K, 2)``."""
    fx, fy = flight_unit(common.flight_deg)
    nx, ny = side_normal(common.flight_deg, side)
    t = np.radians(phi_deg)
    cube = (common.radius_px / (common.radius_px + np.maximum(gap_px, 0.0))) ** 3
    along = common.stream_px * np.cos(t) * (1.0 + 0.5 * cube)
    out = -common.stream_px * np.sin(t) * (1.0 - cube)
    tangent = (-np.sin(t) * nx - np.cos(t) * fx, -np.sin(t) * ny - np.cos(t) * fy)
    radial = (np.cos(t) * nx - np.sin(t) * fx, np.cos(t) * ny - np.sin(t) * fy)
    return np.column_stack([along * tangent[0] + out * radial[0],
                            along * tangent[1] + out * radial[1]])


def step_angle(angles: np.ndarray, shares: np.ndarray) -> float | None:
    """Where ``shares`` (1 = stream) step down to 0 along ``angles``: the angle minimising
    ``sum(1 - share)`` before it plus ``sum(share)`` after it (least absolute deviations from a
    step, robust to stray windows); the midpoint between the two windows it falls between.
    None when the shares never step (all stream or all slow)."""
    ok = np.isfinite(shares) & np.isfinite(angles)
    if np.count_nonzero(ok) < 4:
        return None
    order = np.argsort(angles[ok])
    a, s = angles[ok][order], shares[ok][order]
    # cost of a step after the first j windows, j = 0..n
    cost = (np.concatenate([[0.0], np.cumsum(1.0 - s)])
            + np.concatenate([np.cumsum(s[::-1])[::-1], [0.0]]))
    j = int(np.argmin(cost))
    if j == 0 or j == len(a):
        return None
    return float(0.5 * (a[j - 1] + a[j]))


def side_separation(planes: NearWallPlanes, weights=None,
                    departure_deg: float | None = None) -> float | None:
    """The separation angle (deg) of the mean flow the (weighted) shots show: where the shares
    of the near-wall windows, carried to the wall, step from stream to slow."""
    if departure_deg is None:
        departure_deg = float(np.mean(DEPARTURE_DEG))
    return step_angle(planes.wall_angles(departure_deg), planes.shares(weights))


def condition_separation(planes: NearWallPlanes) -> SideProposal:
    """The condition's separation on one side with its uncertainty.

    The standard uncertainty combines the bootstrap's standard deviation over the shots
    (resampled with replacement, ``BOOTSTRAP_REPLICATES`` times) and the departure angle's part:
    the separation found with ``DEPARTURE_DEG``'s ends, their difference taken as the width of
    a uniform distribution (``/ sqrt(12)``). ``uncertainty_deg`` is ``COVERAGE_K`` times that.
    A resampled ensemble holds repeated shots, so fewer particle images than the real one: its
    spread errs on the wide side (on synthetic repeats the interval covered the truth on every
    side, ``benchmarks/bench_ensemble.py``).
    """
    angle = side_separation(planes)
    if angle is None:
        return SideProposal(None, reason="the near-wall flow of the ensemble does not change "
                            "from stream to slow air within the searched angles")
    ends = [side_separation(planes, departure_deg=a) for a in DEPARTURE_DEG]
    model = abs(ends[1] - ends[0]) / math.sqrt(12.0) if None not in ends else 0.0
    count = planes.planes.shape[0]
    spread = 0.0
    if count >= 2:
        rng = np.random.default_rng(BOOTSTRAP_SEED)
        draws = rng.multinomial(count, np.full(count, 1.0 / count), size=BOOTSTRAP_REPLICATES)
        found = [side_separation(planes, w) for w in draws]
        found = np.array([f for f in found if f is not None])
        if found.size > 1:
            spread = float(np.std(found, ddof=1))
    if count < 2:
        return SideProposal(angle, None, None, "one shot only: no spread between launches to "
                            "give an uncertainty")
    return SideProposal(angle, COVERAGE_K * math.hypot(spread, model), None, "")


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
                  progress: Progress | None = None) -> EnsembleView:
    """The ensemble view of repeat shots.

    Parameters
    ----------
    shots : list of (ShotPose, frame_a, frame_b)
        The condition's measured shots with their frames (as recorded).
    settings : PivSettings, optional
        Validation and threads of the mean field; its passes are ``ENSEMBLE_PASSES``.
    progress : callable, optional
        ``progress(done, total, message)``; returning True stops (``core.piv.Cancelled``).

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
    steps = len(shots) + 1 + len(ENSEMBLE_PASSES)
    pairs = []
    for number, (pose, frame_a, frame_b) in enumerate(shots, start=1):
        _tell(progress, number - 1, steps, f"aligning shot {pose.shot_id}")
        pairs.append(to_common_frame(frame_a, frame_b, pose, common))
    sides = {}
    for side in SIDES:
        sides[side] = condition_separation(near_wall_planes(pairs, common, side))
    _tell(progress, len(shots) + 1, steps, "ensemble correlation")
    field_mask = ~common.outside_ball(FIELD_MARGIN_PX)
    piv = replace(settings or PivSettings(), passes=ENSEMBLE_PASSES)

    def passes_done(done, _total, message):
        return _tell(progress, len(shots) + 1 + done, steps, message)

    vf = correlate_ensemble([(a, b, unseen | field_mask, unseen | field_mask)
                             for a, b, unseen in pairs], piv, passes_done)
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
        else:
            chosen.append(pose)
    if not chosen:
        why = "; ".join(f"{s}: {r}" for s, r in left_out.items()) or "no shots given"
        raise WakelineError(f"ensemble: no shot to align ({why})")
    shots = [(pose, *session.load_frames(pose.shot_id)) for pose in chosen]
    view = ensemble_view(shots, settings, progress)
    view.left_out = left_out
    return view
