"""Conditions: a session's shots grouped by chosen manifest columns (repeat launches of one ball
at one seam angle, speed and spin), and the statistics of each group.

Per condition: the usable shots (every shot not marked unusable that has an angle), and for
each side the mean, sample standard deviation and confidence interval of the final angle (the
analyst's where there is one, else the proposal: ``ShotRecord.shown_deg``), the same for the
per-shot difference upper - lower and for the wake deflection, and the range of the shots'
Reynolds numbers. The interval is Student's t on the shot-to-shot spread,
``mean +- t(0.975, n - 1) sd / sqrt(n)`` (``scipy.stats.t``), which treats the launches as
independent draws of one condition, or the shots' own mean uncertainty over ``sqrt(n)``
(the proposals'), whichever is wider (:class:`Spread`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy import stats

from core.geometry import SIDES
from core.store.records import ReviewStatus, ShotRecord
from core.store.table import REYNOLDS_DIGITS, significant

#: Columns a new session groups by, those its shots have values in (``surface``: the ball's
#: finish, e.g. red or white lacquer, worn; a manifest's own word).
DEFAULT_COLUMNS = ("ball_type", "surface", "seam_deg", "speed_nominal_m_s", "spin_rpm",
                   "spin_axis_deg")
#: Manifest columns that describe one shot rather than a condition.
NOT_GROUPING = ("notes", "dt_s", "scale_mm_per_px", "flight_deg", "frames_swapped")
CONFIDENCE = 0.95
NO_VALUE = "(none)"


@dataclass(frozen=True)
class Spread:
    """Mean, sample standard deviation and ``CONFIDENCE`` interval of some values (deg).

    The interval's half-width is the larger of Student's t on the values' spread and the
    values' own mean uncertainty over the square root of their number (``by_shots`` says the
    latter set it): what the mean would be known to if the shots' errors were independent.
    The spread alone can be far narrower when they are not (on small balls in the picture the
    launches agreed with each other and missed the condition together; docs/
    separation_accuracy.md, "The ensemble and a condition's interval"). An empirical choice,
    checked with 4 and 6 launches: an error the shots share does not shrink with their number,
    so with many launches this too may fall short. The larger, not the root sum of squares:
    the shots' own uncertainty holds the random part that the spread shows too. Where only
    some values have an uncertainty (a positive, finite one), their mean stands for all; the
    upper - lower interval takes each shot's two sides as independent (a flight error moves
    them apart, a circle error together); on the benchmark's repeats it covered 95 of 96
    conditions. ``sd`` needs two values; one value has an interval only from its own
    uncertainty; None where there is none."""

    n: int = 0
    mean: float | None = None
    sd: float | None = None
    low: float | None = None
    high: float | None = None
    by_shots: bool = False

    @classmethod
    def of(cls, values, own=None) -> Spread:
        """``own``: the values' own expanded uncertainties, in the same order (None where not
        known); without them the interval is the spread's alone."""
        values = list(values)
        own = [None] * len(values) if own is None else list(own)
        pairs = [(v, u) for v, u in zip(values, own, strict=True)
                 if v is not None and math.isfinite(v)]
        n = len(pairs)
        if n == 0:
            return cls()
        data = np.array([v for v, _ in pairs], float)
        known = [u for _, u in pairs if u is not None and math.isfinite(u) and u > 0]
        mean = float(data.mean())
        by_shots = float(np.mean(known)) / math.sqrt(n) if known else 0.0
        if n == 1:
            if not known:
                return cls(1, mean)
            return cls(1, mean, None, mean - by_shots, mean + by_shots, True)
        sd = float(data.std(ddof=1))
        half = float(stats.t.ppf(0.5 + CONFIDENCE / 2.0, n - 1)) * sd / math.sqrt(n)
        if by_shots > half:
            return cls(n, mean, sd, mean - by_shots, mean + by_shots, True)
        return cls(n, mean, sd, mean - half, mean + half)

    @property
    def half_width(self) -> float | None:
        return None if self.low is None else 0.5 * (self.high - self.low)

    @property
    def interval_from(self) -> str | None:
        """What set the interval: "spread" (Student t) or "shots" (their own ±); None without."""
        if self.low is None:
            return None
        return "shots" if self.by_shots else "spread"


@dataclass
class Condition:
    """The shots of one condition and their statistics."""

    values: dict[str, str]  # grouping column -> value as text ("" where the shot has none)
    shot_ids: list[str]
    usable_ids: list[str] = field(default_factory=list)
    decided_ids: list[str] = field(default_factory=list)  # usable and accepted or adjusted
    sides: dict[str, Spread] = field(default_factory=dict)  # "upper", "lower"
    difference: Spread = field(default_factory=Spread)  # upper - lower, shot by shot
    wake_deflection: Spread = field(default_factory=Spread)
    reynolds: tuple[float, float] | None = None  # smallest and largest of the usable shots

    @property
    def left_out_ids(self) -> list[str]:
        """The shots not counted: marked unusable, or with no angle on either side."""
        return [s for s in self.shot_ids if s not in self.usable_ids]

    @property
    def label(self) -> str:
        """``seam_deg 20, speed_nominal_m_s 30``; "all shots" without grouping columns."""
        if not self.values:
            return "all shots"
        return ", ".join(f"{c} {v or NO_VALUE}" for c, v in self.values.items())


def value_text(value) -> str:
    """A manifest value as the text that names its condition: numbers as ``%g`` (so 30 and
    30.0 are one condition), text stripped, None and NaN as ""."""
    if value is None:
        return ""
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return "" if not math.isfinite(value) else f"{float(value):g}"
    text = str(value).strip()
    try:
        number = float(text)
    except ValueError:
        return text
    return f"{number:g}" if math.isfinite(number) else ""


def grouping_columns(records) -> list[str]:
    """Manifest columns shots can be grouped by: the preferred ones first, then the others."""
    seen = {k for r in records for k, v in (r.metadata or {}).items() if value_text(v)}
    seen -= set(NOT_GROUPING) | {"shot"}
    return [c for c in DEFAULT_COLUMNS if c in seen] + sorted(seen - set(DEFAULT_COLUMNS))


def default_columns(records) -> list[str]:
    """The columns of ``DEFAULT_COLUMNS`` the shots have values in."""
    present = set(grouping_columns(records))
    return [c for c in DEFAULT_COLUMNS if c in present]


def group_conditions(records, by) -> list[Condition]:
    """The conditions of ``records`` grouped by the columns ``by``, with their statistics,
    sorted by their values (numbers by size)."""
    by = list(by)
    groups: dict[tuple[str, ...], list[ShotRecord]] = {}
    for record in records:
        key = tuple(value_text((record.metadata or {}).get(c)) for c in by)
        groups.setdefault(key, []).append(record)
    out = [_condition(dict(zip(by, key, strict=True)), members)
           for key, members in groups.items()]
    return sorted(out, key=lambda c: [_sort_key(v) for v in c.values.values()])


def _sort_key(text: str):
    try:
        return (0, float(text), "")
    except ValueError:
        return (1 if text else 2, 0.0, text)


def usable(record: ShotRecord) -> bool:
    """A shot counts unless it is marked unusable or has no angle on either side."""
    return record.pick.status != ReviewStatus.UNUSABLE and any(
        record.shown_deg(side) is not None for side in SIDES)


def _condition(values: dict[str, str], members: list[ShotRecord]) -> Condition:
    kept = [r for r in members if usable(r)]
    sides = {side: Spread.of([r.shown_deg(side) for r in kept],
                             [r.uncertainty_deg(side) for r in kept]) for side in SIDES}
    difference = Spread.of([_difference(r) for r in kept], [_both(r) for r in kept])
    wake = Spread.of([r.wake_deflection_deg() for r in kept],
                     [r.wake_deflection_uncertainty_deg() for r in kept])
    reynolds = [v for v in (reynolds_number(r) for r in kept) if v is not None]
    decided = [r.shot_id for r in kept
               if r.pick.status in (ReviewStatus.ACCEPTED, ReviewStatus.ADJUSTED)]
    return Condition(values, [r.shot_id for r in members], [r.shot_id for r in kept],
                     decided_ids=decided, sides=sides, difference=difference,
                     wake_deflection=wake,
                     reynolds=(min(reynolds), max(reynolds)) if reynolds else None)


def _difference(record: ShotRecord) -> float | None:
    upper, lower = record.shown_deg("upper"), record.shown_deg("lower")
    return None if upper is None or lower is None else upper - lower


def _both(record: ShotRecord) -> float | None:
    """The uncertainty of upper - lower from the two sides' (root sum of squares)."""
    upper, lower = record.uncertainty_deg("upper"), record.uncertainty_deg("lower")
    return None if upper is None or lower is None else math.hypot(upper, lower)


def reynolds_number(record: ShotRecord) -> float | None:
    """The shot's Reynolds number from its summary (``{"reynolds": {"value": ...}}``; older
    measurements have none)."""
    if record.summary is None:
        return None
    value = record.summary.to_dict().get("reynolds")
    if isinstance(value, dict):
        value = value.get("value")
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    return float(value) if math.isfinite(value) and value > 0 else None


# --- the table of conditions --------------------------------------------------------------------

SPREAD_COLUMNS = ("n", "mean_deg", "sd_deg", "ci_low_deg", "ci_high_deg", "ci_from")
ENSEMBLE_COLUMNS = ("ensemble_shots", "ensemble_upper_deg", "ensemble_upper_uncertainty_deg",
                    "ensemble_lower_deg", "ensemble_lower_uncertainty_deg")


def condition_table(conditions, by, ensembles=None) -> tuple[list[str], list[list]]:
    """Header and rows (values, None for empty) of the table of conditions.

    ``ensembles``: condition label -> ``core.ensemble.EnsembleView`` (or a reason why there is
    none, as text): adds the ensemble's proposals and the shots it used.
    """
    header = [*by, "shots", "usable_shots", "decided_shots", "shot_ids", "left_out"]
    for prefix in ("upper", "lower", "upper_minus_lower", "wake_deflection"):
        header += [f"{prefix}_{c}" if c != "n" else f"{prefix}_n" for c in SPREAD_COLUMNS]
    header += ["reynolds_min", "reynolds_max"]
    if ensembles is not None:
        header += list(ENSEMBLE_COLUMNS) + ["ensemble_note"]
    rows = []
    for c in conditions:
        row = [*(c.values[col] for col in by), len(c.shot_ids), len(c.usable_ids),
               len(c.decided_ids), " ".join(c.shot_ids), " ".join(c.left_out_ids)]
        for spread in (c.sides["upper"], c.sides["lower"], c.difference, c.wake_deflection):
            row += [spread.n, spread.mean, spread.sd, spread.low, spread.high,
                    spread.interval_from]
        row += ([significant(v, REYNOLDS_DIGITS) for v in c.reynolds] if c.reynolds
                else [None, None])
        if ensembles is not None:
            row += _ensemble_cells(c, ensembles.get(c.label))
        rows.append(row)
    return header, rows


def ensemble_outside(condition: Condition, view) -> list[str]:
    """The sides ("upper", "lower") on which the ensemble's proposal (``view``: a
    ``core.ensemble.EnsembleView``) lies outside the interval of the shots' mean. Its own ±
    holds that distance (``core.ensemble.launch_entries``), so it is the shots' interval that
    tells (docs/separation_accuracy.md, "The ensemble and a condition's interval")."""
    if view is None or isinstance(view, str):
        return []
    out = []
    for side in SIDES:
        mine, shots = getattr(view.separation, side), condition.sides[side]
        if (mine.angle_deg is not None and shots.half_width is not None
                and abs(mine.angle_deg - shots.mean) > shots.half_width):
            out.append(side)
    return out


def _ensemble_cells(condition: Condition, view) -> list:
    if view is None or isinstance(view, str):
        return [None] * len(ENSEMBLE_COLUMNS) + [view or ""]
    sep = view.separation
    notes = [r for r in (sep.upper.reason, sep.lower.reason) if r]
    notes += [f"{side}: outside the shots' interval" for side in ensemble_outside(condition, view)]
    return [len(view.shot_ids), sep.upper.angle_deg, sep.upper.uncertainty_deg,
            sep.lower.angle_deg, sep.lower.uncertainty_deg, "; ".join(notes)]


def write_condition_csv(session, path, by, ensembles=None) -> int:
    """Write the table of conditions (UTF-8 CSV, header row), whole or not at all; returns the
    number of conditions. Refuses to write over the session, its companion files, its frames
    and their shots.csv."""
    from core.store.companions import refuse_session_output
    from core.store.files import atomic_write
    from core.store.table import write_csv_rows

    refuse_session_output(Path(path), session)
    conditions = group_conditions(session.values(), by)
    header, rows = condition_table(conditions, by, ensembles)
    with atomic_write(path) as tmp, open(tmp, "w", encoding="utf-8", newline="") as fh:
        write_csv_rows(fh, header, rows)
    return len(rows)
