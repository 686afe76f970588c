"""``shots.csv``, the manifest of a folder of shots: its columns and how a row is read."""

from __future__ import annotations

import math
from pathlib import Path

from core import WakelineError
from core.air import temperature_problem
from core.settings import dt_problem
from core.store.files import NEAR_MISS, near_miss_hint, read_csv_table

REQUIRED_COLUMNS = ("shot", "dt_s", "scale_mm_per_px", "ball_diameter_mm")
NUMBER_COLUMNS = (
    "dt_s", "scale_mm_per_px", "ball_diameter_mm", "speed_nominal_m_s", "spin_rpm",
    "spin_axis_deg", "seam_deg", "flight_deg", "air_temp_c",
)
TEXT_COLUMNS = ("ball_type", "notes")
#: Yes-or-no columns, kept as "yes" where yes and left out where no or empty (so that a column
#: of "no" added later changes no shot): ``frames_swapped`` says the camera wrote the later
#: exposure as frame A (the shot's frames are then read the other way round).
FLAG_COLUMNS = ("frames_swapped",)
_FLAG_WORDS = {"yes": "yes", "y": "yes", "true": "yes", "1": "yes",
               "no": "no", "n": "no", "false": "no", "0": "no"}
#: Every column wakeline reads by name (the others are kept as text metadata).
KNOWN_COLUMNS = (*REQUIRED_COLUMNS, *NUMBER_COLUMNS, *TEXT_COLUMNS, *FLAG_COLUMNS, "surface",
                 "camera")
MANIFEST_NAME = "shots.csv"


def column_notes(header: list[str]) -> list[str]:
    """A note for each column of the manifest's header that is not one wakeline reads but
    nearly spells one (``seam_angle_deg`` for ``seam_deg``): kept as text, it would leave the
    column it was meant for empty (two seam angles pooled into one condition)."""
    import difflib

    notes = []
    for name in header:
        if name in KNOWN_COLUMNS:
            continue
        close = difflib.get_close_matches(name, [c for c in KNOWN_COLUMNS if c not in header],
                                          n=1, cutoff=NEAR_MISS)
        if close:
            notes.append(f"column {name!r} is not one wakeline reads (kept as text); did you "
                         f"mean {close[0]!r}?")
    return notes


def read_manifest(path: Path) -> tuple[list[str], list[tuple[int, dict, str]]]:
    """Parse ``shots.csv``: its header, and ``(line, metadata, problem)`` per data row (problem
    "" when good).

    Numbers become floats (None when empty); ``ball_type`` and ``notes`` and unknown columns
    stay text.
    """
    header, reader = read_csv_table(path, "manifest")
    # a spreadsheet's "Shot" or "DT_S" is the column wakeline reads
    header = [name.lower() if name.lower() in KNOWN_COLUMNS else name for name in header]
    for number, name in enumerate(header, start=1):
        if name and name in header[:number - 1]:
            raise WakelineError(f"{path}: column {name!r} appears twice (columns "
                                f"{header.index(name) + 1} and {number}); keep one")
    missing = [c for c in REQUIRED_COLUMNS if c not in header]
    if missing:
        raise WakelineError(f"{path}: missing column{'s' if len(missing) > 1 else ''} "
                            + ", ".join(repr(c) for c in missing)
                            + (_separator_hint(header) or near_miss_hint(
                                missing, [n for n in header if n not in KNOWN_COLUMNS])))
    rows = []
    end_of_last = reader.line_num
    for cells in reader:
        line, end_of_last = end_of_last + 1, reader.line_num  # where the row starts
        if not any(c.strip() for c in cells):
            continue
        if len(cells) > len(header):
            rows.append((line, {"shot": cells[0].strip()},
                         f"{len(cells)} cells but the header has {len(header)} columns"))
            continue
        values = dict(zip(header, (c.strip() for c in cells)))
        metadata, problem = _row_metadata(values)
        rows.append((line, metadata, problem))
    return header, rows


def _separator_hint(header: list[str]) -> str:
    """Why the columns may be missing: a header of one cell holding another separator (a
    spreadsheet saved with ';' where the decimal mark is a comma, or tabs)."""
    if len(header) == 1:
        for separator, name in ((";", "';'"), ("\t", "tabs")):
            if separator in header[0]:
                return (f" (the header is separated by {name}; {MANIFEST_NAME} must be "
                        "comma-separated, with '.' as the decimal mark)")
    return ""


def _row_metadata(values: dict) -> tuple[dict, str]:
    metadata = {"shot": values.get("shot", "")}
    if not metadata["shot"]:
        return metadata, "empty shot id"
    for key, text in values.items():
        if key == "shot" or not key:
            continue
        if key in NUMBER_COLUMNS:
            number, problem = _number(key, text)
            if problem:
                return metadata, problem
            metadata[key] = number
        elif key in FLAG_COLUMNS:
            if text and text.lower() not in _FLAG_WORDS:
                return metadata, f"{key} {text!r} is not yes or no"
            if text and _FLAG_WORDS[text.lower()] == "yes":
                metadata[key] = "yes"
        else:
            metadata[key] = text
    return metadata, _row_problem(metadata)


def _number(key: str, text: str) -> tuple[float | None, str]:
    if text == "":
        return None, ""
    try:
        if "_" in text:  # Python reads 1_000 as 1000; a spreadsheet's cell does not
            raise ValueError(text)
        value = float(text)
    except ValueError:
        return None, f"{key} {text!r} is not a number"
    if not math.isfinite(value):
        return None, f"{key} {text!r} is not a finite number"
    return value, ""


#: Manifest columns that are angles (deg).
ANGLE_COLUMNS = ("seam_deg", "spin_axis_deg", "flight_deg")


def _row_problem(meta: dict) -> str:
    if meta.get("dt_s") is None:
        return "dt_s is empty (time between frames, s)"
    # (a launcher's nominal speed of 0 or less would quietly turn its check off)
    for key in ("dt_s", "scale_mm_per_px", "ball_diameter_mm", "speed_nominal_m_s"):
        if meta.get(key) is not None and meta[key] <= 0:
            return f"{key} must be positive, got {meta[key]:g}"
    for key in ANGLE_COLUMNS:  # an angle beyond a whole turn either way is a slip
        if meta.get(key) is not None and not -360.0 <= meta[key] <= 360.0:
            return f"{key} {meta[key]:g} lies outside -360 to 360 deg"
    if problem := dt_problem(meta["dt_s"]):
        return f"dt_s {problem}"
    if meta.get("air_temp_c") is not None and (problem := temperature_problem(meta["air_temp_c"])):
        return f"air_temp_c {problem}"
    if meta.get("ball_diameter_mm") is None and not meta.get("ball_type"):
        return "ball_diameter_mm is empty and no ball_type gives a nominal diameter"
    return ""

