"""A shot's numbers as text: the one formatter of angles, flight, wake, ball and vectors used by
the review window's readout, the shot sheet and ``wakeline pair`` (no Qt here).

Angles are in degrees with their sign (positive rearward, see README): one decimal on screen,
two on the shot sheet (``SHEET_DECIMALS``; the session keeps them whole); speeds in m/s with one
decimal; a missing value is an em dash.
"""

from __future__ import annotations

import math

from core.geometry import SIDES
from core.results import Flight, SeparationResult, SideProposal, uncertainty_outdated
from core.store import ShotRecord
from core.summary import ShotSummary, VectorCounts
from core.wake import wake_state

MISSING = "—"
BALL_DISPLACEMENT = "ball displacement"  # the usual source of the flight direction
#: the usual reasons a shot cannot be used, offered when it is marked unusable (free text too)
UNUSABLE_REASONS = ("seeding too sparse", "ball out of the sheet", "laser misfire",
                    "out of focus")
OTHER_REASON = "other"
SHEET_DECIMALS = 2  # angles on the shot sheet, rounded to 0.01 deg
_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def times_ten_text(digits: str, power: int) -> str:
    """``1.43 × 10⁵``: ``digits`` times a power of ten written with superscript figures;
    ``digits`` alone for the power zero."""
    return digits if power == 0 else f"{digits} × 10{str(power).translate(_SUPERSCRIPT)}"


def scientific_text(value: float, figures: int = 3) -> str:
    """``143000`` -> ``1.43 × 10⁵`` with ``figures`` significant figures, trailing zeros kept
    (``1.40 × 10⁵``, as the conditions' ranges write it); small numbers as they are: ``512``."""
    short = f"{value:.{figures}g}"
    if "e" not in short:
        return short
    mantissa, _, exponent = f"{value:.{figures - 1}e}".partition("e")
    return times_ten_text(mantissa, int(exponent))


def angle_text(value_deg: float | None, signed: bool = True, decimals: int = 1) -> str:
    """``+12.3°`` (or ``12.3°`` unsigned); the em dash when there is no finite value."""
    if value_deg is None or not math.isfinite(value_deg):
        return MISSING
    return f"{value_deg:+.{decimals}f}°" if signed else f"{value_deg:.{decimals}f}°"


def uncertainty_text(value_deg: float | None, decimals: int = 1) -> str:
    """``± 1.5°``, or the em dash."""
    return MISSING if value_deg is None else \
        f"± {angle_text(value_deg, signed=False, decimals=decimals)}"


def quality_text(value: float | None) -> str:
    """Proposal quality 0..1 with two decimals, or the em dash."""
    return MISSING if value is None or not math.isfinite(value) else f"{value:.2f}"


def proposal_text(side: SideProposal, decimals: int = 1) -> str:
    """``+12.3° ± 1.5°, quality 0.80``, or ``none (reason)`` without a proposal."""
    if side.angle_deg is None:
        return "none" + (f" ({side.reason})" if side.reason else "")
    out = angle_text(side.angle_deg, decimals=decimals)
    if side.uncertainty_deg is not None:
        out += f" {uncertainty_text(side.uncertainty_deg, decimals)}"
    if side.quality is not None:
        out += f", quality {quality_text(side.quality)}"
    return out


def proposal_remarks(summary: ShotSummary | None) -> list[str]:
    """What the machine said of proposals it made (glare hiding the wall, a steep departure),
    ``upper side: ...``, one per side that has one."""
    if summary is None:
        return []
    return [f"{side} side: {p.reason}" for side in SIDES
            if (p := summary.side(side)).angle_deg is not None and p.reason]


def uncertainty_meaning(side: SideProposal) -> str:
    """What a proposal's ± means, with the sources of its uncertainty largest first (a tip).

    The factor is read off the proposal's own numbers (its ± over the root sum of squares of
    its budget): results measured with an earlier factor (2 in 0.1, 1.6 in 0.2) keep theirs."""
    from core.separation import COVERAGE, COVERAGE_K

    if side.uncertainty_deg is None:
        return ""
    rss = math.sqrt(sum(v * v for v in (side.budget or {}).values()))
    factor = round(side.uncertainty_deg / rss, 1) if rss > 0 else COVERAGE_K
    lines = [(f"± {side.uncertainty_deg:.1f}° is meant to hold the true angle in "
             f"{COVERAGE:.0%} of proposals: {factor:g} × the root sum of squares of these "
             "standard uncertainties:")]
    for source, value in sorted((side.budget or {}).items(), key=lambda kv: -kv[1]):
        gloss = BUDGET_GLOSS.get(source)
        lines.append(f"  {source} {value:.2f}°" + (f": {gloss}" if gloss else ""))
    return "\n".join(lines)


#: What each source of a proposal's uncertainty stands for, in a few words (its budget's names:
#: core.separation; docs/separation_accuracy.md says how each is measured).
BUDGET_GLOSS = {
    "fit": "what the particle images alone allow",
    "circle": "the ball's circle moved within its own uncertainty",
    "flight": "the flight direction within its own uncertainty",
    "model form": "the near-wall model's form (profile shape, settling arc, no-slip length)",
    "prior": "the layer-thickness prior halved and doubled",
    "extrapolation": "where a shallow layer meets the wall, below what the images see",
    "other minimum": "other starts the images hardly reject",
    "layer form": "which line of the spreading layer keeps to its path",
    "hidden wall": "glare hides the wall where the layer may leave it",
    "launches": "the launches' own proposals: their spread over √n",
    "distance to the launches' mean": "beyond what their spread explains",
}


def outdated_uncertainty_note(record, remedy: str = "Process ▸ Reprocess this shot") -> str:
    """A note for a shot whose proposals' ± was made by an earlier wakeline, in another way
    (empty when current or not known); ``remedy`` is how to get the current one."""
    if record.summary is None or not uncertainty_outdated(record.software_version):
        return ""
    return (f"the ± was made by wakeline {record.software_version} in an earlier way; "
            f"{remedy} gives the current one")


#: Below these the images hardly show where a layer starts (docs/separation_accuracy.md,
#: Known limits): a departure (deg from the wall) and a vorticity thickness (px).
SHALLOW_DEPARTURE_DEG = 5.0
THIN_LAYER_PX = 1.5


def layer_text(side: SideProposal) -> str:
    """The fitted layer in brief: ``8°, 2.9 px`` (its departure from the wall's tangent and
    its vorticity thickness at separation), or the em dash."""
    if side.angle_deg is None or side.departure_deg is None or side.layer_px is None:
        return MISSING
    return f"{side.departure_deg:.0f}°, {side.layer_px:.1f} px"


def layer_meaning(side: SideProposal, scale_mm_per_px: float | None = None) -> str:
    """What the fitted layer's two numbers are (a tip), and when they mean that its start is
    hard to place (judged on the numbers as shown)."""
    if layer_text(side) == MISSING:
        return ""
    size = f"{side.layer_px:.1f} px" + (
        f" ({side.layer_px * scale_mm_per_px:.2f} mm)" if scale_mm_per_px else "")
    text = (f"the fitted shear layer leaves the wall at {side.departure_deg:.1f}° to its "
            f"tangent; its vorticity thickness at separation is {size}")
    hard = []
    if round(side.departure_deg) < SHALLOW_DEPARTURE_DEG:
        hard.append("It leaves nearly along the wall: the images hardly show where it starts, "
                    "and its ± widens with that")
    if round(side.layer_px, 1) < THIN_LAYER_PX:
        hard.append("It is thinner than the particle images: where it starts leans on the "
                    "thickness prior, and its ± may fall short")
    if hard:
        text += ". " + ". ".join(hard) + "; read the proposal as a range"
    return text


def quality_meaning(side: SideProposal) -> str:
    """How a proposal's quality follows from its fit and its uncertainty (a tip): quality is
    how clearly the separating layer beats attached flow times how narrow the interval is
    (2° over the ±, at most 1), so a wide ± always means a low quality."""
    if side.quality is None or side.uncertainty_deg is None:
        return ""
    narrow = min(1.0, 2.0 / max(side.uncertainty_deg, 1e-3))
    clear = min(1.0, side.quality / narrow) if narrow > 0 else 0.0
    why = ("the interval is wide" if narrow < clear else
           "attached flow fits nearly as well" if clear < 1.0 else "")
    text = (f"quality {quality_text(side.quality)} = how clearly the separated layer beats "
            f"attached flow ({clear:.2f}) × how narrow the interval is "
            f"(2° / ± {side.uncertainty_deg:.1f}° = {narrow:.2f}, at most 1)")
    return text + (f": low because {why}" if why and side.quality < 0.5 else "")


def geometry_text(pick) -> str:
    """What the analyst set of a shot's ball and flight, or "" (measured)."""
    parts = []
    circles = [f for f in "ab" if getattr(pick, f"circle_{f}_px") is not None]
    if circles:
        parts.append("circles in frames A and B" if len(circles) > 1
                     else f"circle in frame {circles[0].upper()}")
    if pick.flight_deg is not None:
        parts.append(f"flight {angle_text(pick.flight_deg, signed=False)}")
    return ", ".join(parts) + " set by the analyst" if parts else ""


def speed_text(speed_m_s: float | None) -> str:
    """``30.1 m/s``, or the em dash."""
    return MISSING if speed_m_s is None else f"{speed_m_s:.1f} m/s"


def direction_text(flight: Flight | None, decimals: int = 1) -> str:
    """Flight direction, with its source when it is not the ball's own displacement."""
    if flight is None:
        return MISSING
    out = angle_text(flight.direction_deg, signed=False, decimals=decimals)
    if flight.source and flight.source != BALL_DISPLACEMENT:
        out += f" ({flight.source})"
    return out


def flight_text(flight: Flight | None, decimals: int = 1) -> str:
    """``178.3° at 30.1 m/s``; says why the speed is unknown when it is."""
    if flight is None:
        return MISSING
    direction = direction_text(flight, decimals)
    if flight.speed_m_s is None:
        return f"{direction}, speed unknown (needs dt and a scale)"
    return f"{direction} at {speed_text(flight.speed_m_s)}"


def wake_text(separation: SeparationResult, decimals: int = 1, state: str | None = None) -> str:
    """The wake state (the proposal's, or ``state``), and its deflection from the flight axis
    when measured."""
    state = separation.wake_state if state is None else state
    if separation.wake_deflection_deg is None:
        return state
    deflection = angle_text(separation.wake_deflection_deg, decimals=decimals)
    if separation.wake_deflection_uncertainty_deg is not None:
        deflection += " " + uncertainty_text(separation.wake_deflection_uncertainty_deg, decimals)
    return f"{state}, deflected {deflection} from the flight axis"


def reviewed_wake_text(record: ShotRecord, decimals: int = 1, moving: dict | None = None) -> str:
    """The wake of a shot as reviewed: the state of its angles as they stand (the analyst's
    where set, ``moving`` while a mark is dragged; ``ShotRecord.wake_state``), naming the
    proposals' state where it differs, and the measured deflection; the em dash for a shot
    marked unusable or not measured."""
    state = record.wake_state(moving)
    if not state:
        return MISSING
    proposed = wake_state(record.summary.side("upper"), record.summary.side("lower"))
    if state != proposed:
        state += f" (proposals: {proposed})"
    return wake_text(record.summary.separation, decimals, state)


def ball_text(summary: ShotSummary) -> str:
    """Ball centre and radius in frame A; its diameter with the scale when there is one."""
    ball = summary.ball_a
    if ball is None:
        return MISSING
    cx, cy = ball.center_px
    out = f"centre ({cx:.1f}, {cy:.1f}) px, r {ball.radius_px:.1f} px"
    scale = summary.scale_mm_per_px
    if scale:
        out += f", Ø {2 * ball.radius_px * scale:.1f} mm at {scale:.4g} mm/px"
    return out


def reynolds_text(summary: ShotSummary) -> str:
    """The Reynolds number, the air temperature it assumes and the regime it implies."""
    if summary.reynolds is None:
        return MISSING
    temp = (summary.data.get("reynolds") or {}).get("air_temp_c")
    settings = summary.data.get("settings")
    assumed = isinstance(settings, dict) and settings.get("air_temp_c") is None
    out = scientific_text(summary.reynolds)
    if temp is not None:  # the default when no temperature was given: say so
        out += f" (air at {temp:g} °C{', assumed' if assumed else ''})"
    return out + (f"; {summary.regime}" if summary.regime else "")


def reynolds_short_text(summary: ShotSummary) -> str:
    """The Reynolds number and the regime's head ("below the drag crisis"), for a narrow cell;
    :func:`reynolds_text` says the rest."""
    if summary.reynolds is None:
        return MISSING
    head = summary.regime.split(":")[0] if summary.regime else ""
    return scientific_text(summary.reynolds) + (f", {head}" if head else "")


def vectors_text(vectors: VectorCounts) -> str:
    """Valid, replaced and masked vectors of the last pass and its grid; the windows that gave
    none of those (no correlation peak, nothing near to replace them from), when there are
    any."""
    out = (f"{vectors.valid} valid, {vectors.replaced} replaced, {vectors.masked} masked "
           f"of {vectors.count}")
    missing = vectors.count - vectors.valid - vectors.replaced - vectors.masked
    if missing > 0:
        out += f"; {missing} gave none"
    if vectors.window_px is not None:
        out += f" ({vectors.window_px} px windows, {vectors.spacing_px:g} px apart)"
    return out


def shot_rows(summary: ShotSummary) -> list[tuple[str, str]]:
    """``(label, text)`` rows of a shot's numbers, most important first; rows with nothing to
    tell (no ball: no separation, wake or ball) are left out."""
    rows = []
    if summary.ball_a is not None:
        rows += [(f"{side} separation", proposal_text(summary.side(side)))
                 for side in ("upper", "lower")]
        remarks = proposal_remarks(summary)
        if remarks:
            rows.append(("proposals", "; ".join(remarks)))
        rows.append(("wake", wake_text(summary.separation)))
    if summary.flight is not None:
        rows.append(("flight", flight_text(summary.flight)))
    if summary.reynolds is not None:
        rows.append(("Reynolds number", reynolds_text(summary)))
    if summary.ball_a is not None:
        rows.append(("ball", ball_text(summary)))
    rows.append(("vectors", vectors_text(summary.vectors)))
    return rows


def spread_text(spread) -> str:
    """A condition's values (``core.conditions.Spread``): ``+12.3° ± 1.5° (sd 1.2°, n 4)`` with
    the half-width of the 95 % interval, ``shots' ±`` where the shots' own uncertainty set it;
    one shot's value with its own ±; the em dash without any."""
    if spread.n == 0:
        return MISSING
    if spread.n == 1:
        if spread.half_width is None:
            return f"{angle_text(spread.mean)} (one shot)"
        return f"{angle_text(spread.mean)} {uncertainty_text(spread.half_width)} (one shot)"
    how = ", shots' ±" if spread.by_shots else ""
    return (f"{angle_text(spread.mean)} {uncertainty_text(spread.half_width)} "
            f"(sd {angle_text(spread.sd, signed=False)}, n {spread.n}{how})")


def decisions_text(reopened: int, changed: int) -> str:
    """What a run did to the analyst's decisions, for its closing line ("" when nothing)."""
    text = ""
    if reopened:
        text += f"; {reopened} decided shot(s) back to review"
    if changed:
        text += f"; {changed} adjusted shot(s) whose angles were kept, carried or renewed"
    return text
