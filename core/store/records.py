"""What the store keeps per shot: the analyst's pick, the cheap record, statuses and states.

Statuses and states are ``StrEnum``: their values are the words written in the session file,
the table CSV and the window, and a member compares equal to its word.
"""

from __future__ import annotations

import math
import shlex
from dataclasses import asdict, dataclass, field, fields, replace
from enum import StrEnum

from core import WakelineError
from core.geometry import (
    SIDES,
    angle_of_point,
    mid_circle,
    on_own_side,
    point_at_angle,
    turn_deg,
    upper_normal,
)
from core.results import BY_ANALYST, GIVEN_FLIGHT, SideProposal
from core.summary import ShotSummary
from core.wake import wake_state

#: The analyst's ball and flight of a shot, kept with the pick (None: as measured).
GEOMETRY_FIELDS = ("circle_a_px", "circle_b_px", "flight_deg")
#: Who made a pick's decision and its note, and when: set by every edit, except one that puts
#: back an earlier pick (undo, redo), which gives them.
AUTHORSHIP_FIELDS = ("who", "when", "note_who", "note_when")


class ReviewStatus(StrEnum):
    """The analyst's decision on a shot."""

    TO_REVIEW = "to review"
    ACCEPTED = "accepted"
    ADJUSTED = "adjusted"
    UNUSABLE = "unusable"


class ProcessState(StrEnum):
    """Whether a shot has been measured (a failed shot keeps its last good summary)."""

    UNPROCESSED = "unprocessed"
    PROCESSED = "processed"
    FAILED = "failed"


@dataclass
class Pick:
    """The analyst's decision for one shot; every edit is kept in the shot's history."""

    status: ReviewStatus = ReviewStatus.TO_REVIEW
    upper_deg: float | None = None  # analyst's separation angle, deg (set when adjusted)
    lower_deg: float | None = None
    reason: str = ""  # why the shot is unusable
    note: str = ""
    who: str = ""  # who made the decision (status, angles, reason)
    when: str = ""  # ISO 8601 UTC of the decision
    note_who: str = ""  # who wrote the note last ("" in files written before notes had theirs)
    note_when: str = ""  # ISO 8601 UTC of the note
    # the analyst's circles (cx, cy, r) px in frames A and B and flight direction (deg) for
    # this shot; processing takes them instead of finding the ball (None: as measured)
    circle_a_px: tuple[float, float, float] | None = None
    circle_b_px: tuple[float, float, float] | None = None
    flight_deg: float | None = None

    def __post_init__(self):
        for name in ("circle_a_px", "circle_b_px"):
            value = getattr(self, name)
            if value is not None:
                setattr(self, name, tuple(float(v) for v in value))

    def to_dict(self) -> dict:
        out = {**asdict(self), "status": str(self.status)}
        for name in ("circle_a_px", "circle_b_px"):
            out[name] = None if out[name] is None else list(out[name])
        return out

    def geometry(self) -> dict:
        """The analyst's ball and flight (``GEOMETRY_FIELDS``), None where measured."""
        return {name: getattr(self, name) for name in GEOMETRY_FIELDS}

    def has_geometry(self) -> bool:
        return any(value is not None for value in self.geometry().values())

    @classmethod
    def from_dict(cls, data: dict) -> Pick:
        """A stored pick; raises ValueError or TypeError when a value has the wrong kind."""
        known = {f.name for f in fields(cls)}
        values = {k: v for k, v in data.items() if k in known}
        if "status" in values:
            values["status"] = ReviewStatus(values["status"])
        for key, value in values.items():
            if key.endswith("_deg") and value is not None and (
                    isinstance(value, bool) or not isinstance(value, (int, float))):
                raise TypeError(f"pick {key} {value!r} is not a number")
            if key in ("reason", "note", "who", "when") and not isinstance(value, str):
                raise TypeError(f"pick {key} {value!r} is not text")
            if key in ("circle_a_px", "circle_b_px") and value is not None:
                _check_circle(key, value, TypeError)
        return cls(**values)


@dataclass
class ShotRecord:
    """Cheap per-shot information, available without reading any field data.

    ``summary`` is the typed summary of the last successful processing; it is kept when a
    later run fails (``state`` FAILED, reason in ``failure``).
    """

    shot_id: str
    metadata: dict
    state: ProcessState = ProcessState.UNPROCESSED
    failure: str = ""
    summary: ShotSummary | None = None
    pick: Pick = field(default_factory=Pick)
    frames: dict = field(default_factory=dict)  # storage, path_a, path_b, sha256_a, sha256_b
    processed_utc: str = ""
    software_version: str = ""
    fingerprint: str = ""  # ShotSettings.fingerprint() of the last run, successful or not

    def proposed_deg(self, side: str) -> float | None:
        """Proposed separation angle on ``side`` ("upper"/"lower"), deg, or None."""
        return None if self.summary is None else self.summary.proposed_deg(side)

    def uncertainty_deg(self, side: str) -> float | None:
        """Uncertainty of the proposed angle on ``side``, deg, or None."""
        return None if self.summary is None else self.summary.uncertainty_deg(side)

    def final_deg(self, side: str) -> float | None:
        """The angle to report: the analyst's value when adjusted (the proposal on a side the
        analyst left alone), the proposal when accepted, else None."""
        status = self.pick.status
        if status == ReviewStatus.ADJUSTED:
            value = getattr(self.pick, f"{_checked_side(side)}_deg")
            return value if value is not None else self.proposed_deg(side)
        if status == ReviewStatus.ACCEPTED:
            return self.proposed_deg(side)
        return None

    def shown_deg(self, side: str) -> float | None:
        """The angle to draw a mark at: the final angle where there is one, else the proposal."""
        final = self.final_deg(side)
        return final if final is not None else self.proposed_deg(side)

    def wake_state(self, moving: dict | None = None) -> str:
        """The wake state of the angles as they stand: the analyst's where set, else the
        proposals, each with its proposal's uncertainty (``core.wake.wake_state``); "" for a
        shot marked unusable or not measured. ``moving``: side -> angle of a mark being dragged.
        """
        if self.summary is None or self.pick.status == ReviewStatus.UNUSABLE:
            return ""
        angles = {s: self.shown_deg(s) for s in SIDES} | dict(moving or {})
        return wake_state(*(SideProposal(angles[s], self.uncertainty_deg(s)) for s in SIDES))

    def wake_deflection_deg(self) -> float | None:
        """The measured wake deflection as a result to report: None for a shot marked
        unusable (its numbers are not results) or not measured."""
        return self._wake("wake_deflection_deg")

    def wake_deflection_uncertainty_deg(self) -> float | None:
        """The wake deflection's expanded uncertainty, as :meth:`wake_deflection_deg`; None
        also for results of versions that did not give one (before 0.3.2)."""
        return self._wake("wake_deflection_uncertainty_deg")

    def _wake(self, name: str) -> float | None:
        if self.summary is None or self.pick.status == ReviewStatus.UNUSABLE:
            return None
        return getattr(self.summary.separation, name)


def _checked_side(side: str) -> str:
    if side not in SIDES:
        raise ValueError(f"side must be 'upper' or 'lower', not {side!r}")
    return side


def check_shot_id(shot_id: str, error=WakelineError) -> None:
    """Refuse a shot id that is not non-empty text without surrounding spaces (``error``: the
    exception to raise; a stored entry's bad id is damage, a ValueError)."""
    if not isinstance(shot_id, str) or not shot_id.strip() or shot_id != shot_id.strip():
        raise error(f"shot {shot_id!r}: a shot id must be non-empty text without "
                    "leading or trailing spaces")


def checked_angle(shot_id: str, side: str, value) -> float | None:
    """``value`` as a finite angle in degrees (None stays None)."""
    if value is None:
        return None
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise WakelineError(f"shot {shot_id}: {side} {value!r} is not a number") from None
    if not math.isfinite(value):
        raise WakelineError(f"shot {shot_id}: {side} must be a finite angle in degrees")
    return value


def checked_status(shot_id: str, status) -> ReviewStatus:
    try:
        return ReviewStatus(status)
    except ValueError:
        raise WakelineError(f"shot {shot_id}: review status {status!r} is not one of "
                            f"{', '.join(ReviewStatus)}") from None


def _check_circle(name: str, value, error) -> tuple[float, float, float]:
    """``value`` as a circle (cx, cy, r) px of finite numbers with r > 0; else ``error``."""
    try:
        circle = tuple(float(v) for v in value)
    except (TypeError, ValueError):
        raise error(f"{name} {value!r} is not a circle (cx, cy, r)") from None
    if len(circle) != 3 or not all(math.isfinite(v) for v in circle) or circle[2] <= 0:
        raise error(f"{name} {value!r} is not a circle (cx, cy, r) with a radius above 0")
    return circle


def check_pick(shot_id: str, pick: Pick) -> None:
    if pick.status == ReviewStatus.UNUSABLE and not pick.reason.strip():
        raise WakelineError(f"shot {shot_id}: marking a shot unusable needs a reason")
    if pick.status == ReviewStatus.ADJUSTED and pick.upper_deg is None and pick.lower_deg is None:
        raise WakelineError(f"shot {shot_id}: an adjusted pick needs an upper or lower angle")


def damage_reason(exc: Exception) -> str:
    """A few words on why a hand-damaged entry could not be read (for a one-line report)."""
    if isinstance(exc, KeyError):  # a missing key, or h5py's text for an unreadable object
        if exc.args and isinstance(exc.args[0], str) and " " in exc.args[0]:
            return exc.args[0]
        return f"no {exc.args[0]!r}" if exc.args else "a key is missing"
    text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return text


class ResultUnreadable(WakelineError):
    """A shot's stored result cannot be read: ``damage`` says what is wrong (the shot, the
    file, why), the message adds how to measure the shot again. It still counts as
    processed, so only a forced run takes it; the window gives its own remedy."""

    def __init__(self, damage: str, path, shot_id: str) -> None:
        super().__init__(damage, path, shot_id)  # as given: it pickles (a worker's error)
        self.damage, self.path, self.shot_id = damage, path, shot_id

    def __str__(self) -> str:
        return (f"{self.damage}; process the shot again by force (wakeline process "
                f"{shlex.quote(str(self.path))} --force --shots {shlex.quote(self.shot_id)}; "
                "in the window: Process ▸ Reprocess this shot)")


def edited_pick(shot_id: str, current: Pick, changes: dict, by: str, now: str) -> Pick:
    """``current`` with ``changes`` (``status``, ``upper_deg``, ``lower_deg``, ``reason``,
    ``note``, and the analyst's ball and flight ``GEOMETRY_FIELDS``), checked. ``by`` and
    ``now`` are the decision's author and time when a decision field is changed, and the note's
    own when the note changes: editing a note leaves who made the decision as it was. An edit
    that puts back an earlier pick gives its ``AUTHORSHIP_FIELDS`` instead.

    Raises
    ------
    WakelineError
        An unknown field or status, "unusable" without a reason, or a non-finite angle.
    """
    unknown = set(changes) - {"status", "upper_deg", "lower_deg", "reason", "note",
                              *GEOMETRY_FIELDS, *AUTHORSHIP_FIELDS}
    if unknown:
        raise WakelineError(f"shot {shot_id}: no pick field {', '.join(sorted(unknown))}")
    changes = dict(changes)
    # an edit put back (undo, redo) keeps the author and time it had
    kept = {name: changes.pop(name) for name in AUTHORSHIP_FIELDS if name in changes}
    if not all(isinstance(value, str) for value in kept.values()):
        raise WakelineError(f"shot {shot_id}: a pick's author and time are text")
    if "status" in changes:
        changes["status"] = checked_status(shot_id, changes["status"])
    for name in ("upper_deg", "lower_deg", "flight_deg"):
        if name in changes:
            changes[name] = checked_angle(shot_id, name, changes[name])
    for name in ("circle_a_px", "circle_b_px"):
        if changes.get(name) is not None:
            try:
                changes[name] = _check_circle(name, changes[name], ValueError)
            except ValueError as exc:
                raise WakelineError(f"shot {shot_id}: {exc}") from None
    if set(changes) - {"note"}:
        changes.update(who=by, when=now)
    if changes.get("note", current.note) != current.note:
        changes.update(note_who=by, note_when=now)
    changes.update(kept)
    pick = replace(current, **changes)
    check_pick(shot_id, pick)
    return pick


#: A proposal that moves by less than this (deg) on reprocessing is the same one (the table
#: gives angles to 0.01 deg).
SAME_PROPOSAL_DEG = 0.005


#: Who a pick names when the measurement, not the analyst, changed it (a decision sent back to
#: review because its proposal moved).
MEASUREMENT_AUTHOR = "wakeline"


def decision_on_new_proposals(record: ShotRecord, proposals: dict, now: str,
                              summary: ShotSummary | None = None):
    """What becomes of the analyst's decision when a shot's proposals change to ``proposals``
    (side -> deg or None), measured anew as ``summary``: a decision resting on a proposal never
    silently takes the new one.

    An accepted pick whose proposal moved goes back to review (the number accepted is gone);
    an adjusted pick's side left at the proposal keeps the angle it had (the analyst stood
    behind both angles, as a moved mark in the window records them). Where the flight turned
    (swapped frames, a corrected direction: :func:`_flight_turn`), an adjusted pick's angles,
    read against the old flight, are carried to the new one keeping their places on the ball;
    a mark that would land on the other side goes back to review. Returns the new pick and a
    line saying what was done, or ``(None, "")`` when the decision stands as it is.
    """
    pick = record.pick
    moved = [side for side in SIDES
             if not _same_angle(record.proposed_deg(side), proposals.get(side))]
    if pick.status == ReviewStatus.ACCEPTED and moved:
        changes = ", ".join(f"{side} {_deg(record.proposed_deg(side))} → "
                            f"{_deg(proposals.get(side))}" for side in moved)
        return (replace(pick, status=ReviewStatus.TO_REVIEW, who=MEASUREMENT_AUTHOR, when=now),
                f"the proposal accepted before moved ({changes}): back to review")
    if pick.status != ReviewStatus.ADJUSTED:
        return None, ""
    following = [side for side in moved if getattr(pick, f"{side}_deg") is None]
    kept = {f"{side}_deg": record.proposed_deg(side) for side in following
            if record.proposed_deg(side) is not None}
    new = [side for side in following if record.proposed_deg(side) is None]
    said = []
    turn = _flight_turn(record.summary, summary)
    if turn is not None:
        held = {side: kept.get(f"{side}_deg", getattr(pick, f"{side}_deg")) for side in SIDES}
        carried = {side: _carried_mark(record.summary, summary, side, angle)
                   for side, angle in held.items() if angle is not None}
        turned = (f"the flight turned by {turn:.1f}° ({record.summary.flight.direction_deg:.1f}° "
                  f"→ {summary.flight.direction_deg:.1f}°)")
        landed = [new_side for new_side, _ in carried.values()]
        if len(set(landed)) < len(landed):  # a mark passed a stagnation point
            return (replace(pick, status=ReviewStatus.TO_REVIEW, who=MEASUREMENT_AUTHOR, when=now),
                    f"{turned}: both marks would lie on the {landed[0]} side: back to review")
        kept = {f"{new_side}_deg": angle for new_side, angle in carried.values()}
        for side in SIDES:  # a side whose mark went to the other now follows its proposal
            kept.setdefault(f"{side}_deg", None)
        said.append(f"{turned}: the adjusted marks keep their places on the ball (" + ", ".join(
            f"{side} {_deg(held[side])} → " + ("" if new_side == side else f"{new_side} ")
            + _deg(angle) for side, (new_side, angle) in carried.items()) + ")")
    elif kept:
        sides = ", ".join(f"{name[:-4]} {_deg(value)}" for name, value in kept.items())
        said.append(f"the adjusted pick keeps {sides} (the proposal there moved)")
    if new:  # no angle to keep: the new proposal stands, and is named for a look
        said.append("the adjusted pick takes the new proposal on " + ", ".join(
            f"{side} ({_deg(proposals.get(side))}): check it" for side in new))
    return (replace(pick, **kept) if kept else None), "; ".join(said)


#: A flight that turns by more than this (deg) between two measurements of a shot was
#: corrected (swapped frames, a direction given), not measured again: the analyst's marks, read
#: against the old flight, are carried to the new one. Measured again with other settings, a
#: flight moves by hundredths to tenths of a degree.
FLIGHT_TURN_DEG = 2.0
#: The same for a flight given or circles set by hand: any turn but rounding's.
HAND_TURN_DEG = 1e-6


def _flight_turn(old: ShotSummary | None, new: ShotSummary | None) -> float | None:
    """How far (deg) the flight turned from ``old`` to ``new``, when beyond ``FLIGHT_TURN_DEG``
    or across a direction where upper and lower change places (``core.geometry``), both with a
    flight and a circle; else None."""
    if old is None or new is None or old.flight is None or new.flight is None:
        return None
    if mid_circle(old.ball_a, old.ball_b) is None or mid_circle(new.ball_a, new.ball_b) is None:
        return None
    before, after = old.flight.direction_deg, new.flight.direction_deg
    turn = abs(turn_deg(after, before))
    (ax, ay), (bx, by) = upper_normal(before), upper_normal(after)
    # a direction or circle set by hand is a correction, however small
    by_hand = new.flight.source == GIVEN_FLIGHT or BY_ANALYST in (
        getattr(new.ball_a, "outline", ""), getattr(new.ball_b, "outline", ""))
    least = HAND_TURN_DEG if by_hand else FLIGHT_TURN_DEG
    return turn if turn > least or ax * bx + ay * by < 0 else None


def _carried_mark(old: ShotSummary, new: ShotSummary, side: str,
                  angle: float) -> tuple[str, float]:
    """Where the outline point at ``angle`` on ``side`` under ``old``'s circle and flight lies
    under ``new``'s: its side there and its angle. The point changes sides where it passes a
    stagnation point, or where the names swap (across 91 and 271 deg)."""
    (centre, radius), (new_centre, _) = (mid_circle(old.ball_a, old.ball_b),
                                         mid_circle(new.ball_a, new.ball_b))
    point = point_at_angle(centre, radius, old.flight.direction_deg, side, angle)
    offset = (point[0] - centre[0] + new_centre[0], point[1] - centre[1] + new_centre[1])
    carried = angle_of_point(new_centre, new.flight.direction_deg, side, offset)
    # a mark held at a stagnation point (+-90) comes back a rounding beyond it
    if abs(carried) > 90.0 + ON_SIDE_SLACK_DEG:  # every point lies on one side or the other
        side = next(other for other in SIDES if other != side)
        carried = angle_of_point(new_centre, new.flight.direction_deg, side, offset)
    return side, on_own_side(carried)


#: How far (deg) past a stagnation point a carried mark may come out by rounding.
ON_SIDE_SLACK_DEG = 1e-6


def _same_angle(a: float | None, b: float | None) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return abs(a - b) < SAME_PROPOSAL_DEG


def _deg(value: float | None) -> str:
    return "none" if value is None else f"{value:+.2f}°"
