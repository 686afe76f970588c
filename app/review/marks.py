"""The separation marks of a shot: which angle each side's mark shows, when the analyst's mark
stands apart from the machine's proposal, and the lines of each side's fitted layer (no Qt
here)."""

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


#: A fitted layer is drawn at least this far (deg) behind its separation point.
MIN_REACH_DEG = 5.0


def fitted_layer_lines(circle, flight_deg: float, side: str, layer: dict | None):
    """``core.separation.layer_curves`` of a side's fitted layer (``SideProposal.layer``) about
    ``circle`` ((cx, cy), r: the ball at mid-exposure), drawn only as far rearward as the band
    the fit saw, not extrapolated; None without a layer or for a record of another layout."""
    from core.separation import layer_curves

    if not layer or circle is None:
        return None
    try:
        reach = max(MIN_REACH_DEG, float(layer["window_deg"][1]) - float(layer["phi_s"]))
        return layer_curves(circle[0], circle[1], flight_deg, side, layer, reach_deg=reach)
    except (KeyError, TypeError, ValueError, IndexError):
        return None
