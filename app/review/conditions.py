"""The numbers and words of the conditions view (no Qt): the statistics panel's table, the
separation-vs-condition plot of the panel and the sheet, and the ensemble's lines.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from app.review.text import MISSING, angle_text, spread_text, times_ten_text, uncertainty_text
from core.conditions import ensemble_outside

#: Header of the statistics table (the panel and the sheet's summary page).
TABLE_HEADER = ("condition", "usable", "upper", "lower", "upper − lower", "wake", "Re")


def usable_text(condition, compact: bool = False) -> str:
    """``3 of 3, 1 decided`` (``3 of 3`` compact): the shots counted, of all the condition's,
    and how many of them the analyst accepted or adjusted (the others count with their
    proposals)."""
    text = f"{len(condition.usable_ids)} of {len(condition.shot_ids)}"
    return text if compact else f"{text}, {len(condition.decided_ids)} decided"


def condition_cells(condition, conditions=(), compact: bool = False) -> list[str]:
    """A condition (``core.conditions.Condition``) as the cells of ``TABLE_HEADER``, named by
    what tells it from the other ``conditions``; ``compact`` leaves out the standard deviation
    and the count (a printed table)."""
    name = short_label(condition, conditions) if conditions else condition.label
    show = compact_spread_text if compact else spread_text
    return [name, usable_text(condition, compact),
            *(show(s) for s in (condition.sides["upper"], condition.sides["lower"],
                                condition.difference, condition.wake_deflection)),
            reynolds_text(condition.reynolds)]


def condition_cell_notes(condition) -> list[str]:
    """What a printed row of ``condition_cells(compact=True)`` leaves out, one small line under
    each cell: the decided count under "usable", and under each value the shots' standard
    deviation (with "shots' ±" where the shots' own ± set the interval, "one shot" for one)."""
    return ["", f"{len(condition.decided_ids)} decided",
            *(spread_note(s) for s in (condition.sides["upper"], condition.sides["lower"],
                                       condition.difference, condition.wake_deflection)),
            ""]


def spread_note(spread) -> str:
    """``sd 1.2°``, ``sd 0.3°, shots' ±``, ``one shot`` or nothing (no values)."""
    if spread.n == 0:
        return ""
    if spread.n == 1 or spread.sd is None:
        return "one shot" if spread.n == 1 else ""
    return f"sd {angle_text(spread.sd, signed=False)}" + (", shots' ±" if spread.by_shots else "")


def compact_spread_text(spread) -> str:
    """``+12.3° ± 1.5°`` (the interval's half-width; one shot's own ±, the count being in
    the usable column), ``+12.3° (1 shot)`` without a ±, or the em dash."""
    if spread.n == 0:
        return MISSING
    if spread.half_width is None:
        return f"{angle_text(spread.mean)} (1 shot)"
    return f"{angle_text(spread.mean)} {uncertainty_text(spread.half_width)}"


def compact_ensemble_text(view, marked=()) -> str:
    """``U -15.6° ± 10.9°, L +13.8° ± 12.4°`` (the reason where there is no ensemble); the
    sides in ``marked`` get a dagger (a printed table's footnote)."""
    if view is None or isinstance(view, str):
        return "" if view is None else "none"
    parts = []
    for side in ("upper", "lower"):
        p = getattr(view.separation, side)
        value = MISSING if p.angle_deg is None else angle_text(p.angle_deg)
        if p.uncertainty_deg is not None:
            value += f" {uncertainty_text(p.uncertainty_deg)}"
        parts.append(f"{side[0].upper()} {value}" + ("†" if side in marked else ""))
    return ", ".join(parts)


def ensemble_cell_text(condition, view) -> str:
    """:func:`compact_ensemble_text` with the sides whose ensemble lies outside the shots'
    interval (:func:`ensemble_disagreement`), for a table cell."""
    outside = [side[0].upper() for side in ensemble_outside(condition, view)]
    return compact_ensemble_text(view) + (
        f" (outside the shots' interval: {', '.join(outside)})" if outside else "")


def varying_columns(conditions) -> list[str]:
    """The grouping columns whose values differ between the conditions."""
    if not conditions:
        return []
    columns = list(conditions[0].values)
    return [c for c in columns if len({cond.values[c] for cond in conditions}) > 1]


def short_label(condition, conditions) -> str:
    """A condition named by the columns that tell it from the others; "all shots" when there
    are no others (what they share: ``common_text``)."""
    varying = varying_columns(conditions)
    if not varying:
        return "all shots"
    return ", ".join(f"{c} {condition.values[c] or '(none)'}" for c in varying)


def common_text(conditions) -> str:
    """What every condition shares, e.g. ``ball_type cricket, spin_rpm 600``."""
    if not conditions:
        return ""
    varying = set(varying_columns(conditions))
    same = [(c, v) for c, v in conditions[0].values.items() if c not in varying and v]
    return ", ".join(f"{c} {v}" for c, v in same)


def reynolds_text(span) -> str:
    """The condition's Reynolds numbers as "1.39-1.44 × 10⁵" (one power of ten, as the
    readout writes a shot's)."""
    if not span:
        return MISSING
    low, high = span
    power = math.floor(math.log10(high)) if high > 0 else 0
    a, b = f"{low / 10**power:.2f}", f"{high / 10**power:.2f}"
    digits = a if a == b else f"{a}-{b}"
    return times_ten_text(digits, power)


def plot_column(conditions) -> str | None:
    """The grouping column to put on the plot's horizontal axis: the first whose values are all
    numbers (None: the conditions are placed one after another)."""
    if not conditions:
        return None
    for column in conditions[0].values:
        values = [c.values[column] for c in conditions]
        if all(_number(v) is not None for v in values if v) and any(values):
            return column
    return None


def _number(text: str) -> float | None:
    try:
        value = float(text)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


@dataclass(frozen=True)
class PlotPoint:
    """One condition on the separation-vs-condition plot (angles in deg)."""

    x: float
    side: str
    mean: float
    low: float | None  # the confidence interval (None with one shot)
    high: float | None
    kind: str = "shots"  # "shots": mean of the single-shot picks; "ensemble": the ensemble's
    #: where conditions share ``x``: this one's place among them and their number (drawn side
    #: by side), and what tells it from them (the values of the other columns that differ)
    place: tuple[int, int] = (0, 1)
    tag: str = ""


def plot_points(conditions, ensembles=None) -> tuple[str, list[PlotPoint]]:
    """The plot's axis title and points: per condition and side the mean of the shots' final
    angles with its interval, and where given (``ensembles``: label -> ``EnsembleView``) the
    ensemble's proposal with its interval, set a little to the right. Conditions at the same
    value of the plotted column (a seam angle with red and white balls) get their place among
    each other and a tag naming what tells them apart."""
    column = plot_column(conditions)
    placed = []
    for index, condition in enumerate(conditions):
        x = _number(condition.values[column]) if column else None
        if column and x is None:
            continue  # no value in the plotted column
        placed.append((float(index + 1) if x is None else x, condition))
    points = []
    for x, condition in placed:
        shared = [c for other_x, c in placed if other_x == x]
        place = (shared.index(condition), len(shared))
        tag = _tag(condition, shared, column) if len(shared) > 1 else ""
        for side, spread in condition.sides.items():
            if spread.mean is not None:
                points.append(PlotPoint(x, side, spread.mean, spread.low, spread.high,
                                        place=place, tag=tag))
        view = (ensembles or {}).get(condition.label)
        if view is not None and not isinstance(view, str):
            for side in ("upper", "lower"):
                p = getattr(view.separation, side)
                if p.angle_deg is not None:
                    u = p.uncertainty_deg
                    points.append(PlotPoint(x, side, p.angle_deg,
                                            None if u is None else p.angle_deg - u,
                                            None if u is None else p.angle_deg + u, "ensemble",
                                            place=place, tag=tag))
    return (column or "condition"), points


def _tag(condition, shared, column: str | None) -> str:
    """What tells ``condition`` from the others ``shared`` at its place on the plot: the values
    of the columns (not the plotted one) that differ among them, e.g. ``white``."""
    differ = [c for c in varying_columns(shared) if c != column]
    return ", ".join(condition.values[c] or "(none)" for c in differ)


def ensemble_disagreement(condition, view) -> list[str]:
    """One line per side whose ensemble proposal lies outside the interval of the shots' mean
    (``core.conditions.ensemble_outside``), to look at both; [] when none."""
    out = []
    for side in ensemble_outside(condition, view):
        mine, shots = getattr(view.separation, side), condition.sides[side]
        out.append(f"{side}: the ensemble ({angle_text(mine.angle_deg)}) lies outside the "
                   f"shots' interval ({angle_text(shots.mean)} "
                   f"{uncertainty_text(shots.half_width)}): look at both")
    return out


def ensemble_lines(condition, view) -> list[str]:
    """The ensemble's proposal beside the mean of the single-shot picks, per side."""
    lines = []
    for side in ("upper", "lower"):
        p = getattr(view.separation, side)
        if p.angle_deg is None:
            mine = f"none ({p.reason})"
        else:
            mine = f"{angle_text(p.angle_deg)} {uncertainty_text(p.uncertainty_deg)}"
            if p.budget:
                mine += f" (largest term: {max(p.budget, key=p.budget.get)})"
            if p.reason:
                mine += f" ({p.reason})"
        lines.append(f"{side}: ensemble {mine}; shots {spread_text(condition.sides[side])}")
    used = f"{len(view.shot_ids)} shot(s) aligned on the ball: {', '.join(view.shot_ids)}"
    if view.left_out:
        used += "; left out " + ", ".join(f"{s} ({r})" for s, r in view.left_out.items())
    return [*lines, *ensemble_disagreement(condition, view), used]
