"""What goes on the shot sheet, without painting it (no Qt): which shots, how many pages, and
the texts of the cover and of a shot panel (in the words and number formats
of ``app.review.text``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

from app.review.columns import BACK_TO_REVIEW, status_text
from app.review.marks import moved_from_proposal
from app.review.text import MISSING, SHEET_DECIMALS, angle_text, layer_text, proposal_text
from core import WakelineError
from core.results import SideProposal
from core.store import ReviewStatus, ShotRecord

PER_PAGE_CHOICES = (1, 2, 3, 4)
CONVENTIONS = (
    "Separation angle: deg from the plane through the ball centre normal to the flight, "
    "+ rearward (add 90 for the angle from the front stagnation point). Upper = side toward the "
    "top of the picture. Layer: the fitted shear layer's departure from the wall and its "
    "vorticity thickness at separation. Flight direction: 0 deg = toward +x (right), 90 deg = "
    "toward the top. "
    "Vorticity in 1/s, counter-clockwise on the page positive. Velocity in m/s, lab frame. "
    "Pictures: dashed line = plane normal to the flight; arrow = flight; filled dot = final "
    "separation; hollow dot = proposal (grey where the analyst moved the mark; ? = not reviewed)."
)




@dataclass
class SheetReport:
    """What ``make_sheet`` wrote."""

    path: Path
    pages: int
    shot_ids: list[str]
    damaged: list[str] = field(default_factory=list)  # shots whose stored result is unreadable


def parse_statuses(text: str | None) -> tuple[str, ...] | None:
    """``"accepted,adjusted"`` -> ``(ACCEPTED, ADJUSTED)``; None or "" -> None (all). Besides
    the review statuses, "back to review" (a decision the measurement sent back, as the shot
    list says: a part of "to review")."""
    if not text:
        return None
    wanted = tuple(s.strip() for s in text.split(",") if s.strip())
    words = [str(s) for s in ReviewStatus] + [BACK_TO_REVIEW]
    unknown = [s for s in wanted if s not in words]
    if unknown:
        raise WakelineError(
            f"--status: unknown review status {unknown[0]!r} (use {', '.join(words)})"
        )
    return tuple(s if s == BACK_TO_REVIEW else ReviewStatus(s) for s in wanted)


def sheet_name_problem(path) -> str | None:
    """Why the shot sheet cannot be written under ``path``'s name (a PDF named as another kind
    of file, a table's say), or None."""
    name = Path(path).name
    if name.lower().endswith(".pdf"):
        return None
    return f"the shot sheet is a PDF: name it .pdf (not {name})"


def select_records(session, shot_ids=None, statuses=None) -> list:
    """Records of the shots on the sheet, in session order."""
    records = list(session.values())
    if shot_ids:
        known = {r.shot_id for r in records}
        missing = [s for s in shot_ids if s not in known]
        if missing:
            raise WakelineError(f"{session.path}: no shot {missing[0]!r} in this session")
        chosen = set(shot_ids)
        records = [r for r in records if r.shot_id in chosen]
    if statuses:
        records = [r for r in records if r.pick.status in statuses
                   or (BACK_TO_REVIEW in statuses and status_text(r) == BACK_TO_REVIEW)]
    return records


def shot_page_count(n_shots: int, per_page: int) -> int:
    return max(1, math.ceil(n_shots / per_page)) if n_shots else 0


def status_counts(records) -> dict[str, int]:
    counts = {s: 0 for s in ReviewStatus}
    for r in records:
        counts[r.pick.status] = counts.get(r.pick.status, 0) + 1
    return counts


def process_counts(records) -> dict[str, int]:
    counts: dict[str, int] = {}
    for r in records:
        counts[r.state] = counts.get(r.state, 0) + 1
    return counts


def session_date(session, records) -> str:
    created = getattr(session, "created", None) or getattr(session, "created_utc", None)
    if created:
        return str(created)[:10]
    try:
        stamp = Path(session.path).stat().st_mtime
    except OSError:
        return ""
    return datetime.fromtimestamp(stamp, UTC).strftime("%Y-%m-%d") + " (file saved)"



def metadata_line(record) -> str:
    md = record.metadata or {}
    parts = []
    for key, label, unit in (("ball_type", "", ""), ("surface", "", ""),
                             ("seam_deg", "seam ", " deg"),
                             ("speed_nominal_m_s", "", " m/s nominal"),
                             ("spin_rpm", "spin ", " rpm")):
        value = md.get(key)
        if value not in (None, ""):
            parts.append(f"{label}{_short(value)}{unit}")
    return "   ".join(parts)


def _short(value) -> str:
    if isinstance(value, float):
        return f"{value:g}"
    return str(value)



def final_text(record: ShotRecord, side: str) -> str:
    """The angle to report on ``side``, marked when the analyst moved it; why there is none."""
    final = record.final_deg(side)
    if final is None:
        why = {ReviewStatus.UNUSABLE: " (unusable)", ReviewStatus.TO_REVIEW: " (not reviewed)"}
        return MISSING + why.get(record.pick.status, "")
    return sheet_angle(final) + ("  ADJUSTED" if moved_by_analyst(record, side) else "")


def sheet_angle(value_deg: float | None, signed: bool = True) -> str:
    """An angle as the sheet prints it, to 0.01 deg."""
    return angle_text(value_deg, signed, SHEET_DECIMALS)


def moved_by_analyst(record: ShotRecord, side: str) -> bool:
    """True when the analyst set this side's angle away from the proposal."""
    mine = getattr(record.pick, f"{side}_deg")
    return (record.pick.status == ReviewStatus.ADJUSTED
            and moved_from_proposal(mine, record.proposed_deg(side)))


def side_detail(record: ShotRecord, side: str) -> str:
    """The final angle from the front stagnation point, and the machine's proposal."""
    final = record.final_deg(side)
    parts = []
    if final is not None:
        parts.append(f"{sheet_angle(final + 90.0, signed=False)} from front stagnation")
    proposal = SideProposal(None) if record.summary is None else record.summary.side(side)
    parts.append("proposal " + proposal_text(proposal, SHEET_DECIMALS))
    if (layer := layer_text(proposal)) != MISSING:
        parts.append(f"layer {layer}")
    return "; ".join(parts)


def timing_text(record: ShotRecord) -> str:
    """Time between the frames, the scale used and the ball diameter."""
    md, summary = record.metadata or {}, record.summary
    parts = []
    dt = md.get("dt_s") if summary is None else summary.dt_s
    if dt not in (None, ""):
        parts.append(f"dt {float(dt) * 1e6:.1f}\u00a0µs")  # a value keeps its unit on its line
    scale = md.get("scale_mm_per_px") if summary is None else summary.scale_mm_per_px
    if scale not in (None, ""):
        derived = md.get("scale_mm_per_px") in (None, "")  # none given: the ball's
        parts.append(f"{float(scale):.4g}\u00a0mm/px" + (" from the ball" if derived else ""))
    if md.get("ball_diameter_mm") not in (None, ""):
        parts.append(f"ball\u00a0{float(md['ball_diameter_mm']):g}\u00a0mm")
    return ", ".join(parts) or MISSING


def review_text(record: ShotRecord) -> str:
    """The decision, who made it and when (a note has its own author: ``note_text``)."""
    pick = record.pick
    return str(pick.status) + _by(pick.who, pick.when)


def note_text(record: ShotRecord) -> str:
    """The analyst's note, then who wrote it and when, set apart by a dash; the em dash
    without one."""
    pick = record.pick
    if not pick.note:
        return MISSING
    author = _by(pick.note_who, pick.note_when).removeprefix(" by ").removeprefix(", ")
    return pick.note + (f" \u2014 {author}" if author else "")


def _by(who: str, when: str) -> str:
    out = f" by {who}" if who else ""
    return out + (f", {when[:16].replace('T', ' ')}" if when else "")



def selection_text(records, all_records, shot_ids, statuses, per_page,
                   vorticity_limit_1_s: float | None = None) -> str:
    parts = [f"This sheet: {len(records)} of {len(all_records)} shots"]
    if statuses:
        parts.append("status " + " or ".join(statuses))
    if shot_ids:
        parts.append("chosen by id")
    parts.append(f"{per_page} per page")
    parts.append("each panel its own vorticity colour range" if vorticity_limit_1_s is None
                 else f"vorticity colours ±{vorticity_limit_1_s:g} 1/s on every panel")
    return ", ".join(parts) + "."

