"""The numbers of the session overview: every shot's upper and lower separation angle against
one numeric column (metadata, or the pseudo-columns shot order and measured speed).

Shared by the window's overview panel (``app.qt.overview``) and the sheet's cover page.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from app.review.columns import as_number
from app.review.marks import moved_from_proposal
from core.store import ReviewStatus, ShotRecord

SHOT_ORDER = "shot order"  # pseudo-column: position of the shot in the session
MEASURED_SPEED = "measured speed_m_s"  # pseudo-column: ball speed from its displacement
PREFERRED_COLUMNS = ("seam_deg", "speed_nominal_m_s", "spin_rpm")
#: unusable shots are counted, not drawn
PLOTTED_STATUSES = (ReviewStatus.TO_REVIEW, ReviewStatus.ACCEPTED, ReviewStatus.ADJUSTED)


@dataclass
class OverviewPoints:
    """The numbers behind the overview plot.

    All arrays have one entry per plotted shot, in session order. ``upper_deg``/``lower_deg`` are
    NaN where a side has no angle; ``is_final`` is False where the value shown is the proposal.
    ``upper_u_deg``/``lower_u_deg``: the uncertainty of the proposal where the value shown is the
    proposal (reviewed or not), NaN where the analyst moved the mark or none is known.
    """

    column: str
    shot_ids: list[str]
    x: np.ndarray
    upper_deg: np.ndarray
    lower_deg: np.ndarray
    status: list[ReviewStatus]
    is_final: np.ndarray
    left_out: dict[str, int] = field(default_factory=dict)  # reason -> number of shots not drawn
    upper_u_deg: np.ndarray | None = None
    lower_u_deg: np.ndarray | None = None

    def __post_init__(self) -> None:
        for name in ("upper_u_deg", "lower_u_deg"):
            if getattr(self, name) is None:
                setattr(self, name, np.full(len(self.shot_ids), np.nan))

    def __len__(self) -> int:
        return len(self.shot_ids)

    def drawn_x(self) -> np.ndarray:
        """``x`` with shots that share a value set side by side, so repeats stay visible."""
        return spread_ties(self.x)

    def single_x(self) -> float | None:
        """The one value every drawn shot has (one shot, or a column alike on all), else None:
        the axis then shows that value alone, not ticks between the side-by-side shots."""
        finite = self.x[np.isfinite(self.x)]
        return float(finite[0]) if finite.size and np.ptp(finite) == 0 else None

    def single_x_range(self) -> tuple[float, float] | None:
        """The horizontal range about :meth:`single_x` (5 % of it, at least twice the
        side-by-side spread), or None."""
        value = self.single_x()
        if value is None:
            return None
        xs = self.drawn_x()
        spread = float(np.nanmax(np.abs(xs - value)))
        pad = max(0.05 * (abs(value) or 1.0), 2.0 * spread)
        return value - pad, value + pad


def spread_ties(x: np.ndarray, fraction: float = 0.012) -> np.ndarray:
    """Offset equal values symmetrically by ``fraction`` of the data range each (of the value
    itself, or of 1 at 0, where every value is the same).

    Parameters
    ----------
    x : (N,) ndarray

    Returns
    -------
    (N,) ndarray
        Unique values unchanged; ``k`` equal values spread over ``(k - 1) * step`` around them.
    """
    x = np.asarray(x, dtype=float)
    out = x.copy()
    if x.size < 2:
        return out
    span = float(x.max() - x.min())
    step = fraction * (span if span > 0 else (abs(float(x[0])) or 1.0))
    for value in np.unique(x):
        where = np.flatnonzero(x == value)
        out[where] = value + (np.arange(where.size) - (where.size - 1) / 2) * step
    return out


def _measured_speed(record: ShotRecord) -> float | None:
    flight = None if record.summary is None else record.summary.flight
    return None if flight is None else as_number(flight.speed_m_s)


def column_value(record, column: str, position: int) -> float | None:
    """Value of ``column`` for one shot record (metadata or one of the pseudo-columns)."""
    if column == SHOT_ORDER:
        return float(position + 1)
    if column == MEASURED_SPEED:
        return _measured_speed(record)
    return as_number((record.metadata or {}).get(column))


def numeric_columns(records) -> list[str]:
    """Metadata columns whose filled values are all numbers, preferred ones first.

    The pseudo-columns ``shot order`` (always) and ``measured speed_m_s`` (when any shot has a
    measured speed) are appended.
    """
    seen: dict[str, bool] = {}
    for record in records:
        for key, value in (record.metadata or {}).items():
            if value is None or (isinstance(value, str) and not value.strip()):
                continue
            seen[key] = seen.get(key, True) and as_number(value) is not None
    numeric = [k for k, ok in seen.items() if ok]
    ordered = [k for k in PREFERRED_COLUMNS if k in numeric]
    ordered += sorted(k for k in numeric if k not in PREFERRED_COLUMNS)
    if any(_measured_speed(r) is not None for r in records):
        ordered.append(MEASURED_SPEED)
    ordered.append(SHOT_ORDER)
    return ordered


def default_column(records) -> str:
    """The column the overview opens with: the seam orientation when the session has it."""
    return numeric_columns(records)[0]


def _shown_angle(record, side: str) -> tuple[float, bool]:
    final = record.final_deg(side)
    if final is not None:
        return float(final), True
    proposed = record.proposed_deg(side) if record.pick.status == ReviewStatus.TO_REVIEW else None
    return (float(proposed) if proposed is not None else float("nan")), False


def _shown_uncertainty(record, side: str, shown: float) -> float:
    """The proposal's uncertainty when ``shown`` is the proposal, else NaN."""
    proposed, spread = record.proposed_deg(side), record.uncertainty_deg(side)
    if proposed is None or spread is None or moved_from_proposal(shown, proposed):
        return float("nan")
    return float(spread)


def overview_points(records, column: str) -> OverviewPoints:
    """Collect one point pair per shot for ``column`` (see ``OverviewPoints``).

    Shots marked unusable, shots without a value in ``column`` and shots with no angle on
    either side are left out and counted in ``left_out``.
    """
    ids, xs, ups, lows, statuses, finals, spreads = [], [], [], [], [], [], []
    left_out: dict[str, int] = {}

    def skip(reason: str) -> None:
        left_out[reason] = left_out.get(reason, 0) + 1

    for position, record in enumerate(records):
        status = record.pick.status
        if status not in PLOTTED_STATUSES:
            skip(status)
            continue
        x = column_value(record, column, position)
        if x is None:
            skip(f"no {column}")
            continue
        upper, upper_final = _shown_angle(record, "upper")
        lower, lower_final = _shown_angle(record, "lower")
        if math.isnan(upper) and math.isnan(lower):
            skip("no angle")
            continue
        ids.append(record.shot_id)
        xs.append(x)
        ups.append(upper)
        lows.append(lower)
        statuses.append(status)
        finals.append(upper_final or lower_final)
        spreads.append((_shown_uncertainty(record, "upper", upper),
                        _shown_uncertainty(record, "lower", lower)))
    return OverviewPoints(
        column=column,
        shot_ids=ids,
        x=np.asarray(xs, dtype=float),
        upper_deg=np.asarray(ups, dtype=float),
        lower_deg=np.asarray(lows, dtype=float),
        status=statuses,
        is_final=np.asarray(finals, dtype=bool),
        left_out=left_out,
        upper_u_deg=np.asarray([u for u, _ in spreads], dtype=float),
        lower_u_deg=np.asarray([u for _, u in spreads], dtype=float),
    )


def left_out_text(points: OverviewPoints) -> str:
    """One line saying which shots are not drawn, or "" when all are."""
    if not points.left_out:
        return ""
    parts = [f"{n} {reason}" for reason, n in sorted(points.left_out.items())]
    return "not drawn: " + ", ".join(parts)
