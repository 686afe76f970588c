"""Which shots' ball and flight look wrong: ``core.plausibility``'s checks with the session's
usual flight direction (no Qt here). The readout and the shot sheet show them."""

from __future__ import annotations

from core.plausibility import flight_checks, usual_direction
from core.store import ShotRecord


def session_direction(records) -> float | None:
    """The flight direction most measured shots of a session share, or None."""
    return usual_direction([r.summary.flight.direction_deg for r in records
                            if r.summary is not None and r.summary.flight is not None])


def shot_checks(record: ShotRecord, usual_direction_deg: float | None = None) -> list[str]:
    """The disagreements of one shot's ball and flight, one line each (none unmeasured)."""
    if record.summary is None:
        return []
    return flight_checks(record.summary, record.metadata, usual_direction_deg)
