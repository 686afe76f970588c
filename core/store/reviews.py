"""What a session keeps beyond each shot's pick: the manifest columns that group its shots into
conditions, and other analysts' reviews of the same shots, each a separate *layer*.

Both are session content (format version 2: keys of the snapshot's index; journal records
``conditions`` and ``review_layer``, each with its own ``layout`` version), kept by
``ReviewContent``, a part of ``Session`` in its own module as ``JournalReplay`` is. A layer comes
from another analyst's table (``read_review_csv``): the CSV ``wakeline table`` writes, or any
CSV with its column names.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from pathlib import Path

from core import WakelineError
from core.geometry import SIDES
from core.store.files import json_ready, near_miss_hint, now_utc, read_csv_table
from core.store.records import ReviewStatus, damage_reason
from core.store.table import FORMULA_STARTS, RESULT_COLUMNS

#: Layout version of the journal records (and index keys) written here; a reader refuses newer.
LAYOUT = 1
CONTENT_OPS = ("conditions", "review_layer")

# --- another analyst's review ----------------------------------------------------------------------


@dataclass
class LayerPick:
    """Another analyst's decision on one shot, as their table gives it.

    ``*_uncertainty_deg`` are the uncertainties their table gave with the proposal (None when it
    had none): the uncertainty of their angle when the two reviews are compared.
    """

    status: ReviewStatus = ReviewStatus.TO_REVIEW
    upper_deg: float | None = None  # their final angle
    lower_deg: float | None = None
    upper_uncertainty_deg: float | None = None
    lower_uncertainty_deg: float | None = None
    reason: str = ""
    note: str = ""
    who: str = ""
    when: str = ""

    def final_deg(self, side: str) -> float | None:
        """Their angle to report on ``side``: given for an accepted or adjusted shot, else None."""
        if side not in SIDES:
            raise ValueError(f"side must be 'upper' or 'lower', not {side!r}")
        if self.status not in (ReviewStatus.ACCEPTED, ReviewStatus.ADJUSTED):
            return None
        return getattr(self, f"{side}_deg")

    def uncertainty_deg(self, side: str) -> float | None:
        return getattr(self, f"{side}_uncertainty_deg")

    def to_dict(self) -> dict:
        return json_ready({**asdict(self), "status": str(self.status)})

    @classmethod
    def from_dict(cls, data: dict) -> LayerPick:
        """A stored pick; ValueError or TypeError when a value has the wrong kind."""
        values = dict(data)
        values["status"] = ReviewStatus(values.get("status", ReviewStatus.TO_REVIEW))
        for key, value in values.items():
            if key.endswith("_deg") and value is not None and (
                    isinstance(value, bool) or not isinstance(value, (int, float))):
                raise TypeError(f"{key} {value!r} is not a number")
        return cls(**values)


@dataclass
class ReviewLayer:
    """Another analyst's review of the session's shots (shot id -> ``LayerPick``)."""

    name: str
    source: str = ""  # the file it was read from (its name)
    imported_utc: str = ""
    picks: dict[str, LayerPick] = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {"name": self.name, "source": self.source, "imported_utc": self.imported_utc,
                "picks": {shot: pick.to_dict() for shot, pick in self.picks.items()}}

    @classmethod
    def from_dict(cls, data: dict) -> ReviewLayer:
        if not isinstance(data.get("name"), str) or not data["name"].strip():
            raise ValueError("a review layer has no name")
        picks = data.get("picks") or {}
        if not isinstance(picks, dict):
            raise TypeError("the picks of a review layer are not a mapping")
        return cls(data["name"], str(data.get("source", "")), str(data.get("imported_utc", "")),
                   {str(k): LayerPick.from_dict(v) for k, v in picks.items()})


#: Columns of a review table (``wakeline table``'s names); ``shot`` and ``review_status`` are
#: required.
REVIEW_COLUMNS = {
    "status": "review_status", "upper_deg": "upper_final_deg", "lower_deg": "lower_final_deg",
    "upper_uncertainty_deg": "upper_uncertainty_deg",
    "lower_uncertainty_deg": "lower_uncertainty_deg", "reason": "unusable_reason",
    "note": "review_note", "who": "reviewed_by", "when": "reviewed_utc",
}


def read_review_csv(path: Path, shot_ids, name: str | None = None) -> ReviewLayer:
    """Another analyst's review of the session's shots from their table (CSV).

    Parameters
    ----------
    path : Path
        UTF-8 CSV with a header row: ``shot`` and ``review_status`` and, as they have them,
        ``upper_final_deg``, ``lower_final_deg``, ``upper_uncertainty_deg``,
        ``lower_uncertainty_deg``, ``unusable_reason``, ``review_note``, ``reviewed_by``,
        ``reviewed_utc`` (the table ``wakeline table`` writes has them all); other columns are
        ignored.
    shot_ids : collection of str
        The session's shots; a row naming another shot is refused.
    name : str, optional
        The layer's name; default the one ``reviewed_by`` of every row that has one (a shot
        still to review has none), else the file's name.

    Raises
    ------
    core.WakelineError
        One line naming the file (and the line and shot of the first bad row, with how many
        more there are): nothing is imported from a file with a bad row.
    """
    path = Path(path)
    header, reader = read_csv_table(path, "review table")
    missing = [c for c in ("shot", REVIEW_COLUMNS["status"]) if c not in header]
    if missing:
        raise WakelineError(
            f"{path}: not a review table (no column " + " or ".join(repr(c) for c in missing)
            + "; it needs shot and review_status, and takes the final angles, their "
            "uncertainties and the reviewer's columns as `wakeline table` writes them)")
    known = set(shot_ids)
    picks: dict[str, LayerPick] = {}
    problems: list[str] = []
    line = reader.line_num
    for cells in reader:
        line, start = reader.line_num, line + 1
        if not any(c.strip() for c in cells):
            continue
        values = dict(zip(header, (_unescaped(c.strip()) for c in cells)))
        shot = values.get("shot", "")
        try:
            if len(cells) != len(header):  # a cell short or over: the columns would slip
                raise ValueError(f"{len(cells)} cells but the header has {len(header)} columns")
            if shot not in known:
                raise ValueError("not in the session" if shot else "no shot id")
            if shot in picks:
                raise ValueError("given twice")
            picks[shot] = _row_pick(values)
        except ValueError as exc:
            problems.append(f"line {start} (shot {shot or '?'}): {exc}")
    if problems:
        more = f" (and {len(problems) - 1} more bad row(s))" if len(problems) > 1 else ""
        raise WakelineError(f"{path} {problems[0]}{more}; nothing was imported")
    if not picks:
        raise WakelineError(f"{path}: no reviewed shot in the table")
    lacking = [REVIEW_COLUMNS[key] for key in ("upper_deg", "lower_deg")
               if REVIEW_COLUMNS[key] not in header]
    if lacking and any(p.status in (ReviewStatus.ACCEPTED, ReviewStatus.ADJUSTED)
                       for p in picks.values()):
        raise WakelineError(
            f"{path}: no column " + " or ".join(repr(c) for c in lacking)
            # a column of wakeline's own table (its proposals, say) is no misspelling: taking
            # the proposals for a colleague's final angles would import the wrong numbers
            + near_miss_hint(lacking, [n for n in header if n not in REVIEW_COLUMNS.values()
                                       and n not in RESULT_COLUMNS])
            + ": the decided shots' final angles would be lost; "
            "nothing was imported")
    if not name:
        # the shots still to review have no reviewer: the one name of the others
        names = {p.who for p in picks.values() if p.who}
        name = names.pop() if len(names) == 1 else path.stem
    name = "".join(c for c in name if c.isprintable()).strip()  # no NUL, no line breaks
    return ReviewLayer(name or path.stem, path.name, now_utc(), picks)


def _unescaped(text: str) -> str:
    """A cell our table wrote with a leading quote (spreadsheet safety) back as it was."""
    if text.startswith("'") and text[1:].startswith(FORMULA_STARTS):
        return text[1:]
    return text


def _row_pick(values: dict) -> LayerPick:
    status_text = values.get(REVIEW_COLUMNS["status"], "") or str(ReviewStatus.TO_REVIEW)
    try:
        status = ReviewStatus(status_text)
    except ValueError:
        raise ValueError(f"review status {status_text!r} is not one of "
                         f"{', '.join(ReviewStatus)}") from None
    data = {"status": status}
    for key, column in REVIEW_COLUMNS.items():
        if key == "status":
            continue
        text = values.get(column, "")
        data[key] = _angle(column, text) if key.endswith("_deg") else text
    pick = LayerPick(**data)
    if status == ReviewStatus.UNUSABLE and not pick.reason:
        raise ValueError("unusable without a reason (column unusable_reason)")
    return pick


def _angle(column: str, text: str) -> float | None:
    if not text:
        return None
    try:
        if "_" in text:  # Python reads 1_000 as 1000; a spreadsheet's cell does not
            raise ValueError(text)
        value = float(text)
    except ValueError:
        raise ValueError(f"{column} {text!r} is not a number") from None
    if not math.isfinite(value):
        raise ValueError(f"{column} must be a finite angle in degrees")
    if not -180.0 < value <= 180.0:  # the range of an outline point's angle on its side
        raise ValueError(f"{column} {text} lies outside -180 to 180 deg")
    return value


# --- the session's part -------------------------------------------------------------------------


def review_content(snapshot, path) -> tuple[list[str] | None, dict[str, ReviewLayer]]:
    """The grouping columns and review layers of a snapshot (format 2; none in format 1).

    Raises
    ------
    core.WakelineError
        "S.h5: damaged session index (review content: ...)" when they cannot be read.
    """
    try:
        layers = [ReviewLayer.from_dict(item) for item in snapshot.review_layers]
        return columns_from(snapshot.conditions_by), {layer.name: layer for layer in layers}
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise WakelineError(f"{path}: damaged session index (review content: "
                            f"{damage_reason(exc)})") from None


def columns_from(data) -> list[str] | None:
    """Grouping columns as stored (None: not chosen); ValueError when damaged."""
    if data is None:
        return None
    if not isinstance(data, list) or not all(isinstance(c, str) and c for c in data):
        raise ValueError(f"grouping columns {data!r} are not a list of names")
    return list(data)


class ReviewContent:
    """The grouping columns and the review layers of a session (mixed into ``Session``).

    Uses the session's ``_conditions_by``, ``_layers``, ``_commit``, ``_mutex`` and
    ``_check_writable``.
    """

    def conditions_by(self) -> list[str] | None:
        """The manifest columns that group the shots into conditions (None: not chosen)."""
        return None if self._conditions_by is None else list(self._conditions_by)

    def set_conditions_by(self, columns) -> None:
        """Keep the grouping columns (an empty list: every shot alone); on disk on return."""
        columns = [str(c).strip() for c in columns]
        if any(not c for c in columns) or len(set(columns)) != len(columns):
            raise WakelineError(f"grouping columns {columns!r}: give distinct column names")
        with self._mutex:
            self._check_writable()
            self._commit({"op": "conditions", "layout": LAYOUT, "by": columns, "t": now_utc()})

    def review_layers(self) -> dict[str, ReviewLayer]:
        """Other analysts' reviews, by name (copies), in the order they were imported."""
        with self._mutex:
            return {name: ReviewLayer.from_dict(layer.to_dict())
                    for name, layer in self._layers.items()}

    def add_review_layer(self, layer: ReviewLayer) -> None:
        """Keep another analyst's review (a layer of the same name is replaced); on disk on
        return. The session's own picks are never touched."""
        with self._mutex:
            self._check_writable()
            unknown = sorted(set(layer.picks) - set(self._records))
            if unknown:
                raise WakelineError(f"review layer {layer.name!r}: shot {unknown[0]} is not in "
                                    f"{self.path.name}")
            self._commit({"op": "review_layer", "layout": LAYOUT, "layer": layer.to_dict(),
                          "t": now_utc()})

    def _apply_content(self, entry: dict) -> None:
        """Apply a ``conditions`` or ``review_layer`` journal record in memory."""
        if int(entry.get("layout", 1)) > LAYOUT:
            raise ValueError(f"{entry['op']} record of layout {entry['layout']}: written by a "
                             "newer wakeline?")
        if entry["op"] == "conditions":
            self._conditions_by = columns_from(entry["by"])
            return
        layer = ReviewLayer.from_dict(entry["layer"])
        unknown = sorted(set(layer.picks) - set(self._records))
        if unknown:
            raise ValueError(f"shot {unknown[0]!r} is not in the session")
        self._layers[layer.name] = layer
