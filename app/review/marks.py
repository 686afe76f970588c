"""The separation marks of a shot: which angle each side's mark shows, and when the analyst's
mark stands apart from the machine's proposal (no Qt here)."""

from __future__ import annotations

from core.geometry import SIDES
from core.store import ShotRecord

#: A mark within this of the proposal (deg) is the proposal: below the 0.1 deg fine nudge, and
#: the proposal is then not drawn apart from it.
SAME_MARK_DEG = 0.05


def moved_from_proposal(angle_deg: float | None, proposed_deg: float | None) -> bool:
    """True when a mark at ``angle_deg`` stands apart from the proposal ``proposed_deg``."""
    if angle_deg is None:
        return False
    return proposed_deg is None or abs(angle_deg - proposed_deg) > SAME_MARK_DEG


def mark_angles(record: ShotRecord) -> tuple[dict, dict]:
    """``(proposed, final)``: side -> angle (deg or None) of a shot's proposals and final picks."""
    proposed = {side: record.proposed_deg(side) for side in SIDES}
    final = {side: record.final_deg(side) for side in SIDES}
    return proposed, final
