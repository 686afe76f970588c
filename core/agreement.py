"""How two analysts' reviews of the same shots agree: the session's own picks against another
analyst's layer (``core.store.reviews``).

Per side, over the shots both gave a final angle: the mean difference (ours - theirs) and the
largest one, and the shots where the two differ by more than their combined uncertainty,
``sqrt(u_ours^2 + u_theirs^2)``. An analyst's angle carries the uncertainty of the proposal it
was judged against: ours the session's proposal, theirs the one their table gives (the
session's where it gives none). Shots whose review status differs are listed on their own.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from core.geometry import SIDES
from core.store.records import ShotRecord
from core.store.reviews import ReviewLayer


@dataclass(frozen=True)
class ShotDifference:
    shot_id: str
    side: str
    ours_deg: float
    theirs_deg: float
    combined_uncertainty_deg: float | None  # None when neither proposal has one

    @property
    def difference_deg(self) -> float:
        return self.ours_deg - self.theirs_deg

    @property
    def beyond(self) -> bool:
        """The two differ by more than their combined uncertainty."""
        u = self.combined_uncertainty_deg
        return u is not None and abs(self.difference_deg) > u


@dataclass
class SideAgreement:
    side: str
    differences: list[ShotDifference] = field(default_factory=list)

    @property
    def compared(self) -> int:
        return len(self.differences)

    @property
    def mean_difference_deg(self) -> float | None:
        if not self.differences:
            return None
        return sum(d.difference_deg for d in self.differences) / len(self.differences)

    @property
    def largest(self) -> ShotDifference | None:
        """The shot where the two differ most (by magnitude)."""
        return max(self.differences, key=lambda d: abs(d.difference_deg), default=None)

    @property
    def beyond(self) -> list[ShotDifference]:
        return [d for d in self.differences if d.beyond]


@dataclass
class Agreement:
    """The session's review against another analyst's layer ``layer``."""

    layer: str
    sides: dict[str, SideAgreement]
    status_differs: list[tuple[str, str, str]]  # (shot, our status, their status)
    not_in_layer: list[str]  # shots the other review does not name

    def flagged(self, shot_id: str) -> list[str]:
        """The sides of a shot where the two differ beyond their combined uncertainty."""
        return [side for side, a in self.sides.items()
                if any(d.shot_id == shot_id for d in a.beyond)]


def latest_layer(layers: dict[str, ReviewLayer]) -> ReviewLayer | None:
    """The review imported last (None without any)."""
    ordered = list(layers.values())
    if not ordered:
        return None
    return max(enumerate(ordered), key=lambda item: (item[1].imported_utc, item[0]))[1]


def compare_reviews(records, layer: ReviewLayer) -> Agreement:
    """Compare the picks of ``records`` (``ShotRecord``) with ``layer``."""
    sides = {side: SideAgreement(side) for side in SIDES}
    status_differs, missing = [], []
    for record in records:
        theirs = layer.picks.get(record.shot_id)
        if theirs is None:
            missing.append(record.shot_id)
            continue
        if theirs.status != record.pick.status:
            status_differs.append((record.shot_id, str(record.pick.status), str(theirs.status)))
        for side in SIDES:
            ours_deg, theirs_deg = record.final_deg(side), theirs.final_deg(side)
            if ours_deg is None or theirs_deg is None:
                continue
            sides[side].differences.append(ShotDifference(
                record.shot_id, side, float(ours_deg), float(theirs_deg),
                _combined(record, theirs.uncertainty_deg(side), side)))
    return Agreement(layer.name, sides, status_differs, missing)


def _combined(record: ShotRecord, theirs: float | None, side: str) -> float | None:
    ours = record.uncertainty_deg(side)
    if theirs is None:
        theirs = ours
    if ours is None:
        return None
    return math.hypot(ours, theirs)


def agreement_lines(agreement: Agreement) -> list[str]:
    """The comparison in a few lines of text (the command and the sheet)."""
    lines = [f"review compared with {agreement.layer}:"]
    for side, a in agreement.sides.items():
        if not a.compared:
            lines.append(f"  {side}: no shot with a final angle in both reviews")
            continue
        largest = a.largest
        if round(largest.difference_deg, 2) == 0:  # shown to 0.01 deg
            lines.append(f"  {side}: {a.compared} shot(s) in both; the same final angles "
                         "(to 0.01 deg)")
            continue
        lines.append(
            f"  {side}: {a.compared} shot(s) in both; mean difference "
            f"{a.mean_difference_deg:+.2f} deg (ours - theirs), largest "
            f"{largest.difference_deg:+.2f} deg (shot {largest.shot_id}); "
            f"{len(a.beyond)} beyond the combined uncertainty"
            + (": " + ", ".join(f"{d.shot_id} ({d.difference_deg:+.1f} > "
                                 f"{d.combined_uncertainty_deg:.1f})" for d in a.beyond)
               if a.beyond else ""))
    if agreement.status_differs:
        lines.append("  status differs: " + ", ".join(
            f"{shot} ({ours} / {theirs})" for shot, ours, theirs in agreement.status_differs))
    if agreement.not_in_layer:
        missing = list(agreement.not_in_layer)
        named = ", ".join(missing[:8]) + (" ..." if len(missing) > 8 else "")
        lines.append(f"  not in the other review: {len(missing)} shot(s): {named}")
    return lines
