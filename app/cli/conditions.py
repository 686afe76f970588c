"""`wakeline conditions`, `wakeline add-review`, `wakeline agreement`: a session beyond one shot
(repeat launches grouped into conditions, their ensemble view, a second analyst's review)."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from app.cli.options import UsageError
from core import WakelineError


def add_commands(subparsers) -> None:
    _add_conditions(subparsers)
    _add_review(subparsers)
    _add_agreement(subparsers)


def _add_conditions(subparsers) -> None:
    p = subparsers.add_parser(
        "conditions",
        help="group the shots into conditions and print their statistics",
        description="Group a session's shots by manifest columns (repeat launches of one "
        "condition) and print, per condition, the usable shots and the mean, standard "
        "deviation and 95 % interval (Student t on the shot-to-shot spread, or the shots' own "
        "mean uncertainty over sqrt(n) where wider) of each side's "
        "final angle (the analyst's, else the proposal), of upper - lower and of the wake "
        "deflection, and the Reynolds number range. --by keeps the grouping in the session "
        "where it can write it (the window and 'wakeline table --by' use it). --ensemble also correlates each "
        "condition's shots as one (aligned on the ball) and proposes its separation, a "
        "cross-check of the shots' mean (the better estimate in three of four synthetic "
        "settings: docs/separation_accuracy.md).",
    )
    p.add_argument("session", type=Path, help="session file (.h5)")
    p.add_argument("--by", type=column_list, metavar="COLUMNS",
                   help="comma-separated manifest columns, e.g. seam_deg,speed_nominal_m_s "
                   "(kept in the session); default: the session's grouping")
    p.add_argument("--ensemble", action="store_true",
                   help="add the ensemble view's separation of each condition (slower: reads "
                   "and correlates every shot's frames)")
    p.set_defaults(func=run_conditions)


def _add_review(subparsers) -> None:
    p = subparsers.add_parser(
        "add-review",
        help="import another analyst's review of the session as a separate layer",
        description="Read another analyst's review of the same shots from their table "
        "(the CSV 'wakeline table' writes, or any CSV with its columns shot, review_status, "
        "upper_final_deg, lower_final_deg and, as given, upper_uncertainty_deg, "
        "lower_uncertainty_deg, unusable_reason, review_note, reviewed_by, reviewed_utc) and "
        "keep it in the session beside the session's own picks, which it never changes; a "
        "layer of the same name is replaced. Then print how the two reviews agree. A file "
        "with a bad row, or with decided shots and no final-angle column, is refused whole.",
    )
    p.add_argument("session", type=Path, help="session file (.h5)")
    p.add_argument("review", type=Path, metavar="REVIEW.csv", help="the other analyst's table")
    p.add_argument("--name", metavar="NAME",
                   help="name of the layer (default: the table's reviewed_by, else the file "
                   "name)")
    p.set_defaults(func=run_add_review)


def _add_agreement(subparsers) -> None:
    p = subparsers.add_parser(
        "agreement",
        help="compare the session's review with an imported one",
        description="Per side: the shots both analysts gave a final angle, the mean and the "
        "largest difference, and the shots where the two differ by more than their combined "
        "uncertainty (the proposals' uncertainties added in quadrature); shots whose review "
        "status differs.",
    )
    p.add_argument("session", type=Path, help="session file (.h5)")
    p.add_argument("--layer", metavar="NAME", help="the imported review to compare with "
                   "(default: the only one, or the last imported)")
    p.set_defaults(func=run_agreement)


def column_list(text: str) -> list[str]:
    """``"seam_deg, spin_rpm"`` -> ``["seam_deg", "spin_rpm"]``."""
    columns = [c.strip() for c in text.split(",") if c.strip()]
    if not columns:
        raise argparse.ArgumentTypeError("give at least one column name")
    return columns


def grouping_of(session, by: list[str] | None) -> list[str]:
    """The columns to group by: ``by`` (checked), else the session's, else the defaults.

    Raises
    ------
    app.cli.options.UsageError
        A column no shot of the session has.
    """
    from core.conditions import default_columns, grouping_columns

    records = list(session.values())
    if by is None:
        stored = session.conditions_by()
        return stored if stored is not None else default_columns(records)
    available = grouping_columns(records)
    unknown = [c for c in by if c not in available]
    if unknown:
        from core.store.files import near_miss_hint

        raise UsageError(f"argument --by: no column {unknown[0]!r} with values in "
                         f"{session.path.name}{near_miss_hint(unknown[:1], available)} "
                         f"(columns: {', '.join(available) or 'none'})")
    return by


def condition_ensembles(session, conditions) -> dict:
    """The ensemble view of each condition, by label (the reason as text where there is none);
    a line on stderr as each one starts."""
    import sys

    from core.ensemble import session_ensemble

    out = {}
    for number, condition in enumerate(conditions, start=1):
        print(f"ensemble {number}/{len(conditions)}: {condition.label}", file=sys.stderr)
        try:
            out[condition.label] = session_ensemble(session, condition.usable_ids)
        except WakelineError as exc:
            out[condition.label] = str(exc)
    return out


def run_conditions(args: argparse.Namespace) -> int:
    from core.conditions import CONFIDENCE, group_conditions
    from core.store import Session, SessionLocked, SessionReadOnly

    unwritable = ""
    try:
        opened = Session.open(args.session, writable=args.by is not None)
    except SessionLocked as exc:  # or its kind SessionReadOnly
        # the statistics only read: a grouping that cannot be kept is still used, and said so
        opened = Session.open(args.session, writable=False)
        unwritable = ("not writable here" if isinstance(exc, SessionReadOnly)
                      else "open for writing elsewhere")
    with opened as session:
        by = grouping_of(session, args.by)
        if args.by is not None and by != session.conditions_by():
            if unwritable:
                print(f"note: {args.session} is {unwritable}: the grouping is used, not kept "
                      "in it", file=sys.stderr)
            else:
                session.set_conditions_by(by)
        conditions = group_conditions(session.values(), by)
        ensembles = condition_ensembles(session, conditions) if args.ensemble else {}
    print(f"{args.session}: {len(conditions)} condition(s) by "
          f"{', '.join(by) or 'nothing (all shots together)'}")
    print(f"  ±: the {CONFIDENCE:.0%} interval of the mean, Student t on the shot-to-shot spread, "
          "or the shots' own ± over √n where wider (\"shots' ±\"; with 2 shots t is 12.7, "
          "so the interval is wide); a side's angle is the final one, else the proposal "
          "(\"decided\": accepted or adjusted)")
    for condition in conditions:
        for line in condition_lines(condition, ensembles.get(condition.label)):
            print(line)
    if note := split_note(conditions, by):
        print(note)
    return 0


def split_note(conditions, by: list[str]) -> str:
    """A note when the grouping leaves (nearly) every condition one shot: its columns split the
    repeat launches apart (a nominal speed or spin that differs from launch to launch)."""
    singles = sum(len(c.shot_ids) == 1 for c in conditions)
    if len(conditions) < 3 or singles < 0.8 * len(conditions) or len(by) < 2:
        return ""
    example = "seam_deg" if "seam_deg" in by else by[0]
    return (f"note: {singles} of {len(conditions)} conditions hold one shot: grouped by "
            f"{', '.join(by)}, the repeats fall apart; group by fewer columns with --by "
            f"(e.g. --by {example})")


def condition_lines(condition, ensemble=None) -> list[str]:
    """A condition's statistics as text lines."""
    from app.review.conditions import reynolds_text
    from app.review.text import spread_text

    usable = (f"{len(condition.usable_ids)} of {len(condition.shot_ids)} shot(s) usable, "
              f"{len(condition.decided_ids)} decided")
    if condition.left_out_ids:
        usable += f"; left out {', '.join(condition.left_out_ids)}"
    lines = [f"{condition.label}: {usable}"]
    for name, spread in (("upper", condition.sides["upper"]),
                         ("lower", condition.sides["lower"]),
                         ("upper - lower", condition.difference),
                         ("wake deflection", condition.wake_deflection)):
        lines.append(f"  {name}: {spread_text(spread)}")
    if condition.reynolds:
        lines.append(f"  Reynolds number {reynolds_text(condition.reynolds)}")
    if ensemble is not None:
        from app.review.conditions import ensemble_disagreement

        lines.append("  ensemble: " + ensemble_text(ensemble))
        lines += [f"  check {line}" for line in ensemble_disagreement(condition, ensemble)]
    return lines


def ensemble_text(view) -> str:
    """The ensemble's proposal per side in one line, with the shots it used."""
    from app.review.text import angle_text, uncertainty_text

    if isinstance(view, str):
        return view
    parts = []
    for side in ("upper", "lower"):
        proposal = getattr(view.separation, side)
        if proposal.angle_deg is None:
            parts.append(f"{side} none ({proposal.reason})")
        else:
            parts.append(f"{side} {angle_text(proposal.angle_deg)} "
                         f"{uncertainty_text(proposal.uncertainty_deg)}")
    used = f"{len(view.shot_ids)} shot(s) aligned"
    if view.left_out:
        used += ", left out " + ", ".join(f"{s} ({r})" for s, r in view.left_out.items())
    return ", ".join(parts) + f" [{used}]"


def run_add_review(args: argparse.Namespace) -> int:
    from core.agreement import agreement_lines, compare_reviews
    from core.store import Session
    from core.store.reviews import read_review_csv

    with Session.open(args.session) as session:
        layer = read_review_csv(args.review, list(session), args.name)
        session.add_review_layer(layer)
        agreement = compare_reviews(session.values(), layer)
    print(f"{args.session}: review {layer.name!r} of {len(layer.picks)} shot(s) kept beside "
          "the session's own")
    for line in agreement_lines(agreement):
        print(line)
    return 0


def run_agreement(args: argparse.Namespace) -> int:
    from core.agreement import agreement_lines, compare_reviews, latest_layer
    from core.store import Session

    with Session.open(args.session, writable=False) as session:
        layers = session.review_layers()
        if not layers:
            raise WakelineError(f"{args.session}: no imported review to compare with (import "
                                "one with 'wakeline add-review')")
        name = args.layer or latest_layer(layers).name
        if name not in layers:
            raise UsageError(f"argument --layer: no review {name!r} in {args.session} (reviews: "
                                f"{', '.join(layers)})")
        agreement = compare_reviews(session.values(), layers[name])
    for line in agreement_lines(agreement):
        print(line)
    return 0
