"""Option types shared by several commands."""

from __future__ import annotations

import argparse


def whole_count(text: str) -> int:
    """A count of 0 or more (``--workers``)."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"{value} (use 0 or more)")
    return value
