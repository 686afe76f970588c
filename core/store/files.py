"""File helpers of the store: the one atomic write, fsync, strict JSON, checksums, timestamps."""

from __future__ import annotations

import hashlib
import json
import math
import os
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path

import numpy as np


def now_utc() -> str:
    """The time now, ISO 8601 UTC to the second with a ``Z``."""
    return datetime.now(UTC).isoformat(timespec="seconds").replace("+00:00", "Z")


def fsync_dir(path: Path) -> None:
    """Make a rename or unlink in ``path`` durable (no-op where directories cannot be opened)."""
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def fsync_file(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


@contextmanager
def atomic_write(path, suffix: str = ".tmp") -> Iterator[Path]:
    """Write a file whole or not at all: yields a temporary path beside ``path`` to write to;
    on leaving the block the file is fsynced and renamed over ``path`` and the rename made
    durable. On an exception the temporary file is removed and ``path`` is left as it was.
    """
    path = Path(path)
    tmp = path.with_name(path.name + suffix)
    tmp.unlink(missing_ok=True)
    try:
        yield tmp
        fsync_file(tmp)
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    fsync_dir(path.parent)


def json_ready(value):
    """Replace non-finite floats by None and tuples by lists so ``json.dumps`` is strict."""
    if isinstance(value, dict):
        return {str(k): json_ready(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_ready(v) for v in value]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    return value


def dumps(value) -> str:
    """Strict JSON text of ``value`` (see :func:`json_ready`), UTF-8 characters kept."""
    return json.dumps(json_ready(value), allow_nan=False, ensure_ascii=False)


def sha256_of(path: Path) -> str:
    """SHA-256 hex digest of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()
