"""Frames for workers: read a shot's frame pair from a picklable description of where it is
(``Session.frame_source``), checking the files' checksums first. No ``Session`` needed."""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np

from core import WakelineError
from core.store.files import sha256_of
from core.store.records import damage_reason
from core.store.snapshot import STORAGE_ERRORS


def read_frames(shot_id: str, source: dict) -> tuple[np.ndarray, np.ndarray]:
    """Read a shot's frames from ``Session.frame_source`` output; checks checksums.

    Returns
    -------
    frame_a, frame_b : (H, W) float32 ndarray
    """
    from core.images import read_frame_pair

    if source["storage"] == "embedded":
        try:
            with h5py.File(source["file"], "r") as f:
                g = f[source["group"]]
                return g["a"][()].astype(np.float32), g["b"][()].astype(np.float32)
        except FileNotFoundError:
            raise
        except STORAGE_ERRORS as exc:
            raise WakelineError(f"shot {shot_id}: frames stored in {source['file']} are damaged "
                                f"({damage_reason(exc)})") from None
    problem = frame_file_problem(shot_id, source)
    if problem:
        raise WakelineError(problem)
    return read_frame_pair(source["path_a"], source["path_b"])


def frames_size(source: dict) -> tuple[int, int] | None:
    """``(H, W)`` of a shot's frames (``Session.frame_source`` output) from the files' headers or
    the stored arrays' shape, without reading the pixels; None where it cannot be told."""
    from core.images import frame_size

    if source["storage"] == "embedded":
        try:
            with h5py.File(source["file"], "r") as f:
                shape = f[source["group"]]["a"].shape
            return int(shape[0]), int(shape[1])
        except STORAGE_ERRORS:
            return None
    return frame_size(source["path_a"])


def frame_file_problem(shot_id: str, source: dict, checksums: bool = True) -> str:
    for path_key, sum_key in (("path_a", "sha256_a"), ("path_b", "sha256_b")):
        path = source.get(path_key)
        if path is None:
            continue
        if Path(path).is_dir():
            return f"shot {shot_id}: frame file {path} is a folder"
        if not Path(path).is_file():
            where = source.get("session_folder")
            hint = (f" (the session keeps its frames' places relative to its own folder, "
                    f"{where}: if the session file was moved or copied, move its frames with "
                    "it)") if where else ""
            return f"shot {shot_id}: frame file {path} not found{hint}"
        if not checksums or not source.get(sum_key):
            continue
        try:
            changed = sha256_of(Path(path)) != source[sum_key]
        except OSError as exc:  # e.g. no permission to read it (any more)
            return f"shot {shot_id}: frame file {path} cannot be read ({exc.strerror or exc})"
        if changed:
            return f"shot {shot_id}: frame file {path} changed since import (SHA-256 differs)"
    return ""


def in_exposure_order(frame_a, frame_b, swapped: bool):
    """A shot's frames in the order they were exposed: the files' own, or the other way round
    where the manifest says ``frames_swapped`` (a camera that wrote the later exposure first).
    Every reader of a session's frames for measuring or showing them goes through here."""
    return (frame_b, frame_a) if swapped else (frame_a, frame_b)
