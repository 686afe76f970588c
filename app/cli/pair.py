"""`wakeline pair`: measure one frame pair headless and write its JSON and vector CSV."""

from __future__ import annotations

import argparse
import csv
import json
from pathlib import Path

from app.cli.options import (
    air_temperature,
    check_outputs,
    finite_number,
    known_ball_types,
    positive_number,
    time_between_frames,
    zero_or_positive,
)
from app.review.text import shot_rows
from core import WakelineError
from core.store.files import atomic_write, writing
from core.summary import ShotSummary


def add_commands(subparsers) -> None:
    p = subparsers.add_parser(
        "pair",
        help="measure one frame pair (headless)",
        description="Measure one frame pair: ball, flight, velocity field, vorticity and "
        "proposed separation angles. Prints a summary; --json and --vectors write files.",
    )
    p.add_argument("frame_a", help="frame A (TIFF or PNG), or a two-page TIFF holding both frames")
    p.add_argument("frame_b", nargs="?", help="frame B (omit when frame_a is a two-page TIFF)")
    p.add_argument("--dt", type=time_between_frames, metavar="S",
                   help="time between the frames, seconds")
    p.add_argument("--scale", type=positive_number, metavar="MM_PER_PX",
                   help="image scale, mm per pixel")
    p.add_argument("--ball-diameter", type=positive_number, metavar="MM",
                   help="ball diameter, mm")
    p.add_argument("--ball-type", choices=known_ball_types(),
                   help="use the rulebook nominal diameter")
    p.add_argument("--no-ball", action="store_true", help="no ball in the picture: PIV only")
    p.add_argument("--flight-deg", type=finite_number, metavar="D",
                   help="flight direction override, deg (0 = +x, 90 = toward the top)")
    p.add_argument("--air-temp", type=air_temperature, metavar="C",
                   help="air temperature for the Reynolds number, deg C (default 20)")
    p.add_argument("--no-glare-mask", action="store_true",
                   help="correlate saturated glare too (by default it is left out)")
    p.add_argument("--normalise", type=zero_or_positive, metavar="SPACINGS", default=3.0,
                   help="local intensity normalisation window in particle spacings (0: off; "
                        "default 3)")
    p.add_argument("--background", type=Path, metavar="FRAME",
                   help="background image of this camera position to subtract (e.g. a "
                        "session's per-pixel minimum)")
    p.add_argument("--json", type=Path, metavar="OUT", help="write the result record as JSON")
    p.add_argument("--vectors", type=Path, metavar="OUT.csv",
                   help="write vectors as CSV: x_px,y_px,dx_px,dy_px,valid")
    p.set_defaults(func=run_pair)


def run_pair(args: argparse.Namespace) -> int:
    from core.conditioning import background_problem
    from core.images import read_frame, read_frame_pair
    from core.shot import ShotSettings, measure_shot

    given = [name for name, value in (("--ball-type", args.ball_type),
                                      ("--ball-diameter", args.ball_diameter),
                                      ("--flight-deg", args.flight_deg)) if value is not None]
    if args.no_ball and given:  # they would be taken without a word and used for nothing
        raise WakelineError(f"--no-ball: {' and '.join(given)} describe the ball, and with "
                            "--no-ball there is none to measure; leave one or the other out")
    inputs = [p for p in (args.frame_a, args.frame_b, args.background) if p]
    check_outputs([args.json, args.vectors], inputs=inputs)
    frame_a, frame_b = read_frame_pair(args.frame_a, args.frame_b)
    background = None
    if args.background:
        background = read_frame(args.background)
        if background.shape != frame_a.shape:
            raise WakelineError(f"{args.background}: background is {background.shape[1]} x "
                                f"{background.shape[0]} px, the frames "
                                f"{frame_a.shape[1]} x {frame_a.shape[0]} px")
        if problem := background_problem(background, (("frame A", frame_a),
                                                      ("frame B", frame_b))):
            raise WakelineError(f"{args.background}: not a background image: {problem}")
    settings = ShotSettings(
        dt_s=args.dt,
        scale_mm_per_px=args.scale,
        ball_diameter_mm=args.ball_diameter,
        ball_type=args.ball_type,
        find_ball=not args.no_ball,
        flight_deg=args.flight_deg,
        air_temp_c=args.air_temp,
        mask_glare=not args.no_glare_mask,
        normalise_spacings=args.normalise or None,
    )
    try:
        result = measure_shot(frame_a, frame_b, settings, background=background)
    except WakelineError as exc:  # "frame B: no ball found": which file that is
        names = {"frame A": f"frame A ({args.frame_a})",
                 "frame B": f"frame B ({args.frame_b or f'{args.frame_a}, page 2'})"}
        said = str(exc)
        for name, named in names.items():
            if said.startswith(name):
                said = named + said.removeprefix(name)
        raise WakelineError(said) from None
    summary = result.summary()
    summary["warnings"] = [pair_wording(w) for w in summary["warnings"]]  # JSON and screen
    if args.json:
        _write_text(args.json, json.dumps(summary, indent=2) + "\n")
    if args.vectors:
        write_vectors_csv(args.vectors, result.field)
    print(describe(ShotSummary.from_dict(summary)))
    return 0


def _write_text(path: Path, text: str) -> None:
    with writing(path), atomic_write(path) as tmp:
        tmp.write_text(text, encoding="utf-8")


def write_vectors_csv(path: Path, field) -> None:
    """CSV of every grid vector (masked ones as NaN with valid 0), image coordinates, px."""
    with writing(path), atomic_write(path) as tmp, \
            open(tmp, "w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh)
        writer.writerow(["x_px", "y_px", "dx_px", "dy_px", "valid"])
        for x, y, dx, dy, ok in zip(
            field.x_px.ravel(), field.y_px.ravel(), field.dx_px.ravel(),
            field.dy_px.ravel(), field.valid.ravel(),
        ):
            writer.writerow([f"{x:.2f}", f"{y:.2f}", f"{dx:.4f}", f"{dy:.4f}", int(bool(ok))])


def pair_wording(warning: str) -> str:
    """A measurement's warning as it applies to two frame files given on the command line
    (a session's advice names shots.csv)."""
    from core.shot import SWAPPED_CHECK, SWAPPED_REMEDY

    return (warning.replace(SWAPPED_REMEDY, "give the two frames the other way round")
            .replace(SWAPPED_CHECK, "the order of the two frames given"))


def describe(summary: ShotSummary) -> str:
    """A few human lines about a shot's result (the words of ``app.review.text``)."""
    lines = [f"{label}: {text}" for label, text in shot_rows(summary)]
    lines += [f"warning: {w}" for w in summary.warnings]
    if summary.reynolds is None and summary.flight is not None:
        # said here: the other lines would leave it out without a word
        given = summary.settings
        if summary.flight.speed_m_s is None:
            why = "it needs dt and the scale"
        elif not (given.get("ball_diameter_mm") or given.get("ball_type")):
            why = "it needs the ball's diameter (--ball-diameter or --ball-type)"
        else:
            why = "the air hardly moves past the ball"
        lines.append(f"note: no Reynolds number: {why}")
    return "\n".join(lines)
