"""Settings of the measurement that travel with a shot: correlation passes and checks.

Plain records (no numpy): the session store keeps them, the settings fingerprint is made
from them, and the correlation engine (``core.piv``) reads them.
"""

from __future__ import annotations

import json
import math
import numbers
import os
from dataclasses import dataclass

from core import WakelineError

#: Change of the predictor across a window (px, centre to corner) up to which the blocks of
#: the window are moved as a whole instead of deformed pixel by pixel (``core.piv.deform``).
DEFORM_MIN_CHANGE_PX = 0.1
#: Interrogation windows a pass may ask for (px): 8 is about the least that holds enough
#: particle images; 4096 is far beyond any frame's use and keeps a typo from being kept.
MIN_WINDOW_PX, MAX_WINDOW_PX = 8, 4096
#: Times between the two frames (s) a shot may have: double-pulse lasers fire their pulses from
#: about 0.1 us to some ms apart, and a ball at 10-50 m/s is shot with tens to hundreds of us
#: (common practice). Outside, the number is a slip of units (us typed as s), not a shot.
DT_RANGE_S = (1e-7, 1e-2)
#: How a camera position's background is made (``ShotSettings.background``;
#: ``core.conditioning.background_image``).
BACKGROUND_METHODS = ("min", "median")


def dt_problem(dt_s: float) -> str:
    """What is wrong with a time between frames (s): "" when nothing, else the words that say
    so (for the manifest's rows and the settings alike)."""
    low, high = DT_RANGE_S
    if low <= dt_s <= high:
        return ""
    hint = ""
    if low <= dt_s * 1e-6 <= high:
        hint = f"; in microseconds? {dt_s:g} us is {dt_s * 1e-6:g} s"
    return (f"{dt_s:g} s is outside {low:g} to {high:g} s, the time between a double-pulse "
            f"laser's two pulses{hint}")


@dataclass(frozen=True)
class PivPass:
    """One correlation pass: square windows of ``window_px`` with fractional ``overlap``."""

    window_px: int
    overlap: float = 0.5

    @property
    def spacing_px(self) -> int:
        """Distance between neighbouring window centres, px (at least 1)."""
        return max(1, round(self.window_px * (1.0 - self.overlap)))


@dataclass(frozen=True)
class PivSettings:
    """Settings of the correlation engine (JSON-able through ``to_dict``/``from_dict``)."""

    passes: tuple[PivPass, ...] = (PivPass(64, 0.5), PivPass(32, 0.5), PivPass(32, 0.5))
    median_threshold: float = 2.0
    median_eps_px: float = 0.1
    max_masked_fraction: float = 0.5
    #: windows whose predictor changes by at most this (px, centre to corner) are deformed
    #: block by block instead of pixel by pixel; 0: every pixel
    deform_min_change_px: float = DEFORM_MIN_CHANGE_PX
    workers: int | None = None  # None: all cores

    def __post_init__(self):
        passes = tuple(p if isinstance(p, PivPass) else PivPass(**dict(p)) for p in self.passes)
        object.__setattr__(self, "passes", passes)
        _check_settings(self)

    def threads(self) -> int:
        """The threads a shot may use: ``workers``, or one per core."""
        return self.workers or os.cpu_count() or 1

    def to_dict(self) -> dict:
        return {
            "passes": [{"window_px": p.window_px, "overlap": p.overlap} for p in self.passes],
            "median_threshold": self.median_threshold,
            "median_eps_px": self.median_eps_px,
            "max_masked_fraction": self.max_masked_fraction,
            "deform_min_change_px": self.deform_min_change_px,
            "workers": self.workers,
        }

    @classmethod
    def from_dict(cls, data: dict, *, strict: bool = False) -> PivSettings:
        """Settings from their JSON form; ``strict`` refuses values of the wrong kind (settings
        coming in), else they are converted as they always were (settings read back)."""
        known = {
            "passes", "median_threshold", "median_eps_px", "max_masked_fraction",
            "deform_min_change_px", "workers",
        }
        values = {k: v for k, v in dict(data).items() if k in known}
        if strict:
            unknown = sorted(set(dict(data)) - known)
            if unknown:  # a misspelt name would silently leave its default in force
                raise WakelineError(f"PIV settings: unknown key(s) {', '.join(unknown)} (known: "
                                    f"{', '.join(sorted(known))})")
            _check_kinds(values, known)
        if "passes" in values:
            values["passes"] = tuple(_pass_from(p, strict) for p in values["passes"])
        return cls(**values)


def _check_kinds(values: dict, known: set) -> None:
    """Refuse PIV settings of the wrong kind (a word for a number, a number for the passes)."""
    for name in known - {"passes", "workers"}:
        if name in values and not is_number(values[name]):
            raise WakelineError(f"PIV settings: {name} must be a number, not "
                                f"{shown(values[name])}")
    workers = values.get("workers")
    if workers is not None:
        if not (is_number(workers) and float(workers).is_integer()):
            raise WakelineError(f"PIV settings: workers must be a whole number or null, not "
                                f"{shown(workers)}")
        values["workers"] = int(workers)
    passes = values.get("passes")
    if passes is not None and not isinstance(passes, (list, tuple)):
        raise WakelineError(f"PIV settings: passes must be a list of passes, not "
                            f"{shown(passes)}")


def is_number(value) -> bool:
    """A real, finite number (not a switch: ``True`` is not 1 here), numpy's included."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        return False
    try:
        return math.isfinite(float(value))
    except OverflowError:  # an integer too large for a float
        return False


def shown(value) -> str:
    """A value as the analyst wrote it (JSON), or as Python shows it where JSON cannot."""
    try:
        return json.dumps(value)
    except (TypeError, ValueError):
        return repr(value)


def _pass_from(p, strict: bool = False) -> PivPass:
    """A pass from ``{"window_px": 32, "overlap": 0.5}`` or ``[32, 0.5]``."""
    if isinstance(p, PivPass):
        return p
    if not strict:  # as read back: converted as it always was
        if isinstance(p, dict):
            return PivPass(int(p["window_px"]), float(p.get("overlap", 0.5)))
        window, overlap = p
        return PivPass(int(window), float(overlap))
    if isinstance(p, dict) and "window_px" in p:
        unknown = sorted(set(p) - {"window_px", "overlap"})
        if unknown:
            raise WakelineError(f"PIV settings: a pass has unknown key(s) {', '.join(unknown)} "
                                "(known: overlap, window_px)")
        window, overlap = p["window_px"], p.get("overlap", 0.5)
    elif isinstance(p, (list, tuple)) and len(p) == 2:
        window, overlap = p
    else:
        raise WakelineError(f"PIV settings: a pass must be {{\"window_px\": W, \"overlap\": O}} "
                            f"or [W, O], not {shown(p)}")
    if not (is_number(window) and is_number(overlap)):
        raise WakelineError(f"PIV settings: a pass's window and overlap must be numbers, not "
                            f"{shown(p)}")
    if not float(window).is_integer() or not MIN_WINDOW_PX <= window <= MAX_WINDOW_PX:
        raise WakelineError(f"PIV settings: window {shown(window)} px (use a whole number from "
                            f"{MIN_WINDOW_PX} to {MAX_WINDOW_PX})")
    return PivPass(int(window), float(overlap))


def _check_settings(s: PivSettings) -> None:
    if not s.passes:
        raise WakelineError("PIV settings: at least one pass is needed")
    for p in s.passes:
        if int(p.window_px) != p.window_px or p.window_px < MIN_WINDOW_PX:
            raise WakelineError(f"PIV settings: window {p.window_px} px (use a whole number >= "
                                f"{MIN_WINDOW_PX})")
        if not 0.0 <= p.overlap < 1.0:
            raise WakelineError(f"PIV settings: overlap {p.overlap} (use 0 <= overlap < 1)")
    if s.median_threshold <= 0 or s.median_eps_px < 0:
        raise WakelineError("PIV settings: median threshold must be > 0 and eps >= 0")
    if not 0.0 <= s.max_masked_fraction <= 1.0:
        raise WakelineError("PIV settings: max masked fraction must lie in 0..1")
    if not s.deform_min_change_px >= 0:
        raise WakelineError("PIV settings: the deformation threshold must be >= 0 px")
    if s.workers is not None and s.workers < 1:
        raise WakelineError("PIV settings: workers must be at least 1")
