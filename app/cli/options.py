"""Option types shared by several commands."""

from __future__ import annotations

import argparse
import math
from pathlib import Path

from core import WakelineError


class UsageError(WakelineError):
    """A bad option value found only once the command has looked at its files (a column the
    session lacks): bad usage, exit 2, told like argparse's own errors."""


def known_ball_types() -> list[str]:
    """The ``ball_type`` words the measurement has a rulebook diameter for."""
    from core.ball import NOMINAL_BALL_DIAMETER_MM

    return sorted(NOMINAL_BALL_DIAMETER_MM)


def whole_count(text: str) -> int:
    """A count of 0 or more (``--workers``)."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"{value} (use 0 or more)")
    return value


#: The transports a dask scheduler's address may name (``distributed``'s comm schemes)
SCHEDULER_SCHEMES = ("tcp", "tls", "ucx", "ws", "wss")


def scheduler_address(text: str) -> str:
    """``tcp://HOST:PORT`` (or ``HOST:PORT``, or another of dask's transports) of a scheduler,
    checked before a client waits on it (``--scheduler``)."""
    scheme, sep, rest = text.strip().partition("://")
    if not sep:
        scheme, rest = "tcp", scheme
    host, colon, port = rest.rpartition(":")
    if scheme not in SCHEDULER_SCHEMES or not colon or not host or not port.isdigit() or not (
            0 < int(port) < 65536):
        raise argparse.ArgumentTypeError(f"{text!r} is not an address like tcp://HOST:PORT")
    return f"{scheme}://{host}:{int(port)}"


def positive_number(text: str) -> float:
    """A finite number above 0 (``--dt``, ``--scale``, ``--ball-diameter``)."""
    value = finite_number(text)
    if not value > 0:
        raise argparse.ArgumentTypeError(f"must be positive, got {text}")
    return value


def time_between_frames(text: str) -> float:
    """``--dt``: seconds, within what a double-pulse laser gives (``core.settings.dt_problem``)."""
    from core.settings import dt_problem

    value = positive_number(text)
    if problem := dt_problem(value):
        raise argparse.ArgumentTypeError(problem)
    return value


def zero_or_positive(text: str) -> float:
    """A finite number of 0 or more (``--normalise``, where 0 is off)."""
    value = finite_number(text)
    if value < 0:
        raise argparse.ArgumentTypeError(f"must be 0 (off) or positive, got {text}")
    return value


def air_temperature(text: str) -> float:
    """A temperature in deg C above absolute zero (``--air-temp``)."""
    from core.air import temperature_problem

    value = finite_number(text)
    problem = temperature_problem(value)
    if problem:
        raise argparse.ArgumentTypeError(problem)
    return value


def finite_number(text: str) -> float:
    """A number that is not infinite or NaN (``--flight-deg``)."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"{text!r} is not a finite number")
    return value


def check_outputs(outputs, session: Path | None = None, inputs=()) -> None:
    """Refuse output paths that would overwrite what the command reads or writes elsewhere.

    ``outputs``: the files the command is about to write (None entries are skipped);
    ``session``: the session it reads (the snapshot and every companion file are refused);
    ``inputs``: frame files it reads (the ``shots.csv`` beside them, the import's manifest, is
    refused too: the analyst's list of shots).

    Raises
    ------
    WakelineError
        "OUT: is ...; choose another output file" (the session, its companions, its frames
        or their manifest, another HDF5 file or its companions), "OUT: is a folder; ..." or
        "OUT: is not an ordinary file ..." (outputs are written beside and renamed over: a
        pipe or a device would be replaced by a file).
    """
    from core.store.companions import refuse_input_file, refuse_other_session, refuse_session_file
    from core.store.files import same_place

    seen: list[Path] = []
    for out in (Path(o) for o in outputs if o is not None):
        if out.is_dir():
            raise WakelineError(f"{out}: is a folder; give the name of the file to write in it")
        if out.exists() and not out.is_file():  # a pipe or a device is replaced, not written
            raise WakelineError(f"{out}: is not an ordinary file (a pipe or a device); give "
                                "the name of a file to write")
        if session is not None:
            refuse_session_file(out, Path(session))
        refuse_input_file(out, inputs)
        refuse_other_session(out)
        if any(same_place(out, other) for other in seen):
            raise WakelineError(f"{out}: given for both outputs; choose another output file")
        seen.append(out)
