"""What the analyst can sort and filter the shots by: the shot list's columns, the status words,
and the filter's conditions (no Qt here; the shot list in ``app.qt.shot_list`` shows them).

A measured column is one line of ``MEASURED``: its name (the filter's word, unit in the name),
a short header, a function of the shot's ``ShotRecord`` and a tip. Besides those, the filter takes
every metadata column of the session and any number in the stored shot summary by its path
(``reynolds.value``, ``vectors.valid``), so a value the measurement adds is found at once.

The filter is words separated by spaces, all of which must hold: a condition ``name<value``,
``>``, ``<=``, ``>=``, ``=``, ``!=`` or ``name:low..high`` (inclusive), or any other word, which
must be part of the shot id. ``speed_m_s>30 seam_deg:10..30 quality<0.5``.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from dataclasses import dataclass

from app.review.text import angle_text, quality_text
from core.geometry import SIDES
from core.store import ProcessState, ReviewStatus, ShotRecord
from core.store.records import MEASUREMENT_AUTHOR

NOT_PROCESSED = "not processed"
FAILED = "failed"
ALL_SHOTS = "all shots"
#: A decision the measurement sent back to review (its proposal moved, a mark would have
#: crossed to the other side): "to review" too, told apart from never-decided shots.
BACK_TO_REVIEW = "back to review"
#: the status filter's choices: every shot, a review status, or a processing state
STATUS_FILTERS = (ALL_SHOTS, *ReviewStatus, BACK_TO_REVIEW, FAILED, NOT_PROCESSED)


def status_text(record: ShotRecord) -> str:
    """The review status in words; a shot never measured is "not processed" (or "failed"),
    not "to review": there is nothing to review yet. A decision the measurement sent back is
    "back to review"."""
    if record.pick.status == ReviewStatus.TO_REVIEW:
        if record.summary is None:
            return FAILED if record.state == ProcessState.FAILED else NOT_PROCESSED
        if record.pick.who == MEASUREMENT_AUTHOR:
            return BACK_TO_REVIEW
    return str(record.pick.status)


def decided_status(record: ShotRecord) -> ReviewStatus | None:
    """The review status its icon shows; None for a shot with nothing to review yet."""
    return None if status_text(record) in (FAILED, NOT_PROCESSED) else record.pick.status


def matches_status(record: ShotRecord, choice: str) -> bool:
    """Whether a shot belongs under one of ``STATUS_FILTERS`` ("to review" takes the shots
    sent back to review too)."""
    if choice == ALL_SHOTS:
        return True
    if choice == FAILED:
        return record.state == ProcessState.FAILED
    if choice == NOT_PROCESSED:
        return record.state == ProcessState.UNPROCESSED
    if choice == ReviewStatus.TO_REVIEW:
        return reviewable(record)
    return status_text(record) == choice


def reviewable(record: ShotRecord) -> bool:
    """Still to review, and measured: a decision can be made on it."""
    return record.pick.status == ReviewStatus.TO_REVIEW and record.summary is not None


# -- values of a shot ---------------------------------------------------------------------------


def as_number(value) -> float | None:
    """A finite float, or None (text, empty, NaN, booleans)."""
    if value is None or isinstance(value, bool):
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


def shown_angle(record: ShotRecord, side: str) -> float | None:
    """The angle the list shows: the final one when decided, else the proposal; none for an
    unusable shot."""
    if record.pick.status == ReviewStatus.UNUSABLE:
        return None
    return record.shown_deg(side)


def summary_number(*path: str) -> Callable[[ShotRecord], float | None]:
    """The number at ``path`` in the stored summary JSON, e.g. ``("reynolds", "value")``."""
    def value(record: ShotRecord) -> float | None:
        data = None if record.summary is None else record.summary.data
        for key in path:
            data = data.get(key) if isinstance(data, dict) else None
        return as_number(data)

    return value


def _side_value(side: str, name: str) -> Callable[[ShotRecord], float | None]:
    def value(record: ShotRecord) -> float | None:
        return None if record.summary is None else as_number(
            getattr(record.summary.side(side), name))

    return value


def _difference(record: ShotRecord) -> float | None:
    upper, lower = (shown_angle(record, side) for side in SIDES)
    return None if upper is None or lower is None else upper - lower


def _worst(name: str, pick) -> Callable[[ShotRecord], float | None]:
    sides = [_side_value(side, name) for side in SIDES]

    def value(record: ShotRecord) -> float | None:
        values = [v for v in (f(record) for f in sides) if v is not None]
        return pick(values) if values else None

    return value


@dataclass(frozen=True)
class Column:
    """A value of a shot the list can show and the filter can test."""

    name: str  # the filter's word, unit in the name
    header: str  # the list's short header
    value: Callable[[ShotRecord], float | None]
    tip: str
    kind: str = "number"  # "angle" (signed degrees), "quality" (0..1), "number" or "metadata"

    def text(self, record: ShotRecord) -> str:
        if self.kind == "metadata":
            return metadata_text(record, self.name)
        value = self.value(record)
        if value is None:
            return ""
        if self.kind == "angle":
            return angle_text(value)
        if self.kind == "quality":
            return quality_text(value)
        return number_text(value)


_ANGLE_TIP = "deg from the plane normal to the flight, + rearward"
MEASURED = (
    Column("upper_deg", "Upper", lambda r: shown_angle(r, "upper"),
           f"upper separation angle, {_ANGLE_TIP} (italic: proposal only)", "angle"),
    Column("lower_deg", "Lower", lambda r: shown_angle(r, "lower"),
           f"lower separation angle, {_ANGLE_TIP} (italic: proposal only)", "angle"),
    Column("upper_minus_lower_deg", "U − L", _difference, "upper − lower separation angle, deg",
           "angle"),
    Column("upper_uncertainty_deg", "± U", _side_value("upper", "uncertainty_deg"),
           "uncertainty of the upper proposal, deg"),
    Column("lower_uncertainty_deg", "± L", _side_value("lower", "uncertainty_deg"),
           "uncertainty of the lower proposal, deg"),
    Column("uncertainty_deg", "±", _worst("uncertainty_deg", max),
           "the larger uncertainty of the two proposals, deg"),
    Column("upper_quality", "Q U", _side_value("upper", "quality"),
           "quality of the upper proposal, 0..1", "quality"),
    Column("lower_quality", "Q L", _side_value("lower", "quality"),
           "quality of the lower proposal, 0..1", "quality"),
    Column("quality", "Q", _worst("quality", min), "the lower quality of the two proposals, 0..1",
           "quality"),
    Column("speed_m_s", "Speed", summary_number("flight", "speed_m_s"),
           "measured ball speed, m/s"),
    Column("reynolds", "Re", summary_number("reynolds", "value"),
           "Reynolds number of the ball in the air stream"),
    Column("wake_deflection_deg", "Wake", ShotRecord.wake_deflection_deg,
           "wake deflection from the flight axis, deg, + toward the upper side (none for an "
           "unusable shot, as in the table)", "angle"),
    Column("wake_deflection_uncertainty_deg", "± W", ShotRecord.wake_deflection_uncertainty_deg,
           "uncertainty of the wake deflection, deg (95 %, as the angles')", "angle"),
)
MEASURED_BY_NAME = {column.name: column for column in MEASURED}


def number_text(value: float) -> str:
    """A number for a narrow column: ``30.1``, ``1.5``, ``2.13e5``."""
    if value != 0 and not 1e-3 <= abs(value) < 1e5:
        mantissa, exponent = f"{value:.2e}".split("e")
        return f"{mantissa}e{int(exponent)}"
    return f"{value:.4g}" if abs(value) < 1e3 else f"{value:.0f}"


UNIT_SUFFIXES = (("_deg", " °"), ("_m_s", " m/s"), ("_mm_per_px", " mm/px"), ("_mm", " mm"),
                 ("_rpm", " rpm"), ("_temp_c", " temp °C"), ("_s", " s"))


def metadata_column(key: str) -> Column:
    """A column of the manifest (``seam_deg``, ``ball_type``...); its header shows the unit
    (``seam °``), the filter takes the name."""
    header = key
    for suffix, unit in UNIT_SUFFIXES:
        if key.endswith(suffix):
            header = key[: -len(suffix)] + unit
            break
    return Column(key, header.replace("_", " "), lambda r: as_number(r.metadata.get(key)),
                  f"{key} from the shot's manifest row", "metadata")


def metadata_text(record: ShotRecord, key: str) -> str:
    value = record.metadata.get(key)
    number = as_number(value)
    if number is not None:
        return f"{number:g}"
    return "" if value is None else str(value)


def metadata_keys(records) -> list[str]:
    """Every metadata column of the session (but a measured value's name), the usual first."""
    keys = {k for r in records for k in r.metadata} - {"shot"} - set(MEASURED_BY_NAME)
    usual = [k for k in ("seam_deg", "speed_nominal_m_s", "spin_rpm", "ball_type") if k in keys]
    return usual + sorted(keys - set(usual))


# -- the filter ----------------------------------------------------------------------------------

_CONDITION = re.compile(r"^([A-Za-z_][\w.]*)(<=|>=|!=|=|<|>|:)(.+)$")


@dataclass(frozen=True)
class Condition:
    name: str
    op: str
    text: str  # the value as typed

    def holds(self, value, number: float | None) -> bool:
        """``value`` is the shot's raw value, ``number`` the same as a number (or None)."""
        if self.op == ":":
            low, _, high = self.text.partition("..")
            lo, hi = as_number(low), as_number(high)
            return None not in (number, lo, hi) and lo <= number <= hi
        want = as_number(self.text)
        if self.op in ("=", "!="):
            same = (number == want if want is not None and number is not None
                    else value is not None and str(value) == self.text)
            return same if self.op == "=" else not same
        if want is None or number is None:
            return False
        return {"<": number < want, ">": number > want, "<=": number <= want,
                ">=": number >= want}[self.op]


@dataclass
class ShotQuery:
    """A parsed filter: conditions on values, pieces of the shot id, and the first problem."""

    conditions: list[Condition]
    id_parts: list[str]
    problem: str = ""

    def matches(self, record: ShotRecord) -> bool:
        if self.problem:
            return False
        shot = record.shot_id.lower()
        if not all(part in shot for part in self.id_parts):
            return False
        for condition in self.conditions:
            value, number = _value_of(record, condition.name)
            if not condition.holds(value, number):
                return False
        return True


def _value_of(record: ShotRecord, name: str):
    column = MEASURED_BY_NAME.get(name)
    if column is not None:
        number = column.value(record)
        return number, number
    if name in record.metadata:
        value = record.metadata[name]
        return value, as_number(value)
    number = summary_number(*name.split("."))(record)
    return number, number


def parse_filter(text: str, records) -> ShotQuery:
    """Read the filter's words; a condition on an unknown name makes ``problem`` (one line) and
    matches nothing, so a typo never looks like an empty result."""
    query = ShotQuery([], [])
    known = set(MEASURED_BY_NAME) | set(metadata_keys(records))
    for word in text.replace(",", " ").split():
        match = _CONDITION.match(word)
        if match is None:
            query.id_parts.append(word.lower())
            continue
        name, op, value = match.groups()
        if op == ":" and ".." not in value:
            query.problem = query.problem or f"{word}: a range is written {name}:low..high"
        elif op == ":" and None in map(as_number, value.split("..", 1)):
            query.problem = query.problem or f"{word}: a range's ends are numbers"
        elif op in ("<", ">", "<=", ">=") and as_number(value) is None:
            query.problem = query.problem or f"{word}: '{value}' is not a number"
        elif name not in known and not ("." in name and _in_some_summary(name, records)):
            query.problem = query.problem or (
                f"no column '{name}' (try {', '.join(c.name for c in MEASURED[:3])}, "
                "speed_m_s, a metadata column or a summary path such as reynolds.value)")
        query.conditions.append(Condition(name, op, value))
    return query


def _in_some_summary(path: str, records) -> bool:
    value = summary_number(*path.split("."))
    return any(value(r) is not None for r in records)


def filter_help() -> str:
    """The filter field's tooltip: the words it takes."""
    names = "\n".join(f"  {c.name:24s} {c.tip}" for c in MEASURED)
    return (
        "Words separated by spaces, all must hold:\n"
        "  part of a shot id       s1\n"
        "  a condition             speed_m_s>30   seam_deg<=0   ball_type=cricket\n"
        "  a range (inclusive)     seam_deg:10..30\n"
        "Operators: < > <= >= = != and name:low..high.\n"
        "Measured values:\n" + names + "\n"
        "Also every metadata column, and any number of the stored summary by its path\n"
        "(e.g. reynolds.value, vectors.valid)."
    )
