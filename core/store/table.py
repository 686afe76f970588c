"""The table of picks: one row per shot, as text cells and as a CSV file. Angles are rounded to
0.01 deg (the session keeps them whole)."""

from __future__ import annotations

import csv
import math
from pathlib import Path

from core.geometry import SIDES
from core.plausibility import session_direction, shot_checks
from core.store.companions import refuse_session_output
from core.store.files import atomic_write
from core.store.manifest import NUMBER_COLUMNS, TEXT_COLUMNS
from core.store.records import ShotRecord


def session_table_rows(session) -> tuple[list[str], list[list[str]]]:
    """One row per shot: metadata, proposed and final angles, uncertainty, wake, review. The wake
    state is that of the final angles (``ShotRecord.wake_state``); it and the wake deflection
    are empty for an unusable shot, as its final angles are.

    Returns
    -------
    header : list of str
        Column names with units in them.
    rows : list of list of str
        Cells as text; empty where there is no value.
    """
    records = list(session.values())
    extra = sorted({k for r in records for k in r.metadata}
                   - set(NUMBER_COLUMNS) - set(TEXT_COLUMNS) - {"shot"})
    meta_cols = list(NUMBER_COLUMNS) + list(TEXT_COLUMNS) + extra
    header = ["shot", *meta_cols, *RESULT_COLUMNS]
    warned = shot_warnings(records)
    rows = [[r.shot_id, *(cell_text(r.metadata.get(c)) for c in meta_cols), *_result_cells(r),
             "yes" if session.needs_processing(r.shot_id) else "no",
             cell_text("; ".join(warned.get(r.shot_id, ()))), *_qualities(r)]
            for r in records]
    return header, rows


def shot_warnings(records) -> dict[str, list[str]]:
    """Per measured shot with any: what the measurement warned of and where its ball and flight
    disagree with what else is known (``core.plausibility``: the window's and the sheet's
    checks, against the manifest and the direction most of ``records`` fly in), each once."""
    records = list(records)
    usual = session_direction(records)
    warned = {}
    for r in records:
        if r.summary is not None:
            lines = [*r.summary.warnings, *shot_checks(r, usual)]
            if lines:
                warned[r.shot_id] = list(dict.fromkeys(lines))
    return warned


RESULT_COLUMNS = (
    "state", "failure", "flight_direction_deg", "flight_speed_m_s", "scale_used_mm_per_px",
    "reynolds_number",
    "upper_proposed_deg", "upper_uncertainty_deg", "lower_proposed_deg", "lower_uncertainty_deg",
    "upper_final_deg", "lower_final_deg", "wake_deflection_deg",
    "wake_deflection_uncertainty_deg", "wake_state",
    "review_status", "unusable_reason", "review_note", "reviewed_by", "reviewed_utc",
    "processed_utc", "software_version", "note_by", "note_utc", "proposal_notes",
    "needs_processing", "warnings", "upper_quality", "lower_quality",
)
ANGLE_DECIMALS = 2
#: Significant digits of the measured speed, the scale used and the Reynolds number: beyond
#: their uncertainty (a tenth of a per cent at best, the scale from a fitted ball; half a per
#: cent and more, the speed and Re) a longer number only looks more certain.
SPEED_DIGITS, SCALE_DIGITS, REYNOLDS_DIGITS = 4, 5, 4


def _result_cells(r: ShotRecord) -> list[str]:
    summary, pick = r.summary, r.pick
    flight = None if summary is None else summary.flight
    values = [
        r.state, r.failure,
        _angle(None if flight is None else flight.direction_deg),
        significant(None if flight is None else flight.speed_m_s, SPEED_DIGITS),
        significant(None if summary is None else summary.scale_mm_per_px, SCALE_DIGITS),
        significant(None if summary is None else summary.reynolds, REYNOLDS_DIGITS),
        *map(_angle, (r.proposed_deg("upper"), r.uncertainty_deg("upper"),
                      r.proposed_deg("lower"), r.uncertainty_deg("lower"),
                      r.final_deg("upper"), r.final_deg("lower"), r.wake_deflection_deg(),
                      r.wake_deflection_uncertainty_deg())),
        r.wake_state(),  # from the final angles: follows the analyst's edits
        pick.status, pick.reason, pick.note, pick.who, pick.when,
        r.processed_utc, r.software_version, pick.note_who, pick.note_when,
        _proposal_notes(summary),  # the columns before it keep their places
    ]
    return [cell_text(v) for v in values]


def _qualities(r: ShotRecord) -> list[str]:
    """Each side's proposal quality (0-1, two decimals; empty without a proposal)."""
    if r.summary is None:
        return ["", ""]
    values = [r.summary.side(side).quality if r.summary.side(side).angle_deg is not None
              else None for side in SIDES]
    return [cell_text(None if v is None else round(float(v), 2)) for v in values]


def _proposal_notes(summary) -> str | None:
    """Why a side has no proposal, or what to check in the one it has, side by side:
    ``upper: ...; lower: ...``."""
    if summary is None:
        return None
    notes = [f"{side}: {reason}" for side in SIDES if (reason := summary.side(side).reason)]
    return "; ".join(notes) or None


def _angle(value: float | None) -> str | None:
    """An angle rounded to ``ANGLE_DECIMALS`` without trailing zeros: 12.35, 7.5, -3."""
    if value is None or not math.isfinite(value):
        return None
    text = f"{value:.{ANGLE_DECIMALS}f}".rstrip("0").rstrip(".")
    return "0" if text == "-0" else text


def significant(value: float | None, digits: int) -> float | None:
    """``value`` rounded to ``digits`` significant digits (whole numbers stay whole)."""
    if value is None or not math.isfinite(value) or value == 0:
        return value
    return float(f"{value:.{digits}g}")


#: First characters that make a spreadsheet run a cell as a formula (OWASP, "CSV injection").
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def cell_text(value) -> str:
    """A value as a CSV cell: "" for none, floats to 10 significant digits, text made safe."""
    if value is None:
        return ""
    if isinstance(value, float):
        return "" if not math.isfinite(value) else f"{value:.10g}"
    return spreadsheet_safe(str(value))


def spreadsheet_safe(text: str) -> str:
    """Text a spreadsheet shows as text: a leading quote before one that would start a formula
    (a note "=HYPERLINK(...)" or a reason "-ball out"); numbers such as "-3.5" stay as they are."""
    if not text.startswith(FORMULA_STARTS):
        return text
    try:
        float(text)
    except ValueError:
        return "'" + text
    return text


def write_table_csv(session, path) -> int:
    """Write the table of picks as UTF-8 CSV with a header row; returns the number of rows.

    The file is written whole or not at all (``atomic_write``): a reader never sees half a table.

    Raises
    ------
    WakelineError
        When ``path`` is the session or one of its companion files (the window's export too).
    """
    refuse_session_output(Path(path), session)
    header, rows = session_table_rows(session)
    with atomic_write(path) as tmp, open(tmp, "w", encoding="utf-8", newline="") as fh:
        write_csv_rows(fh, header, rows)
    return len(rows)


def write_csv_rows(fh, header: list[str], rows) -> None:
    """A header and rows as CSV on an open text file (a table file, or standard output), each
    cell as :func:`cell_text` makes it (text cells pass unchanged)."""
    writer = csv.writer(fh)
    writer.writerow(header)
    writer.writerows([cell_text(v) for v in row] for row in rows)
