"""Where wakeline keeps per-user files (logs, the demo session): XDG data home, no Qt needed."""

from __future__ import annotations

import os
from pathlib import Path


def user_data_dir() -> Path:
    """``$WAKELINE_HOME`` or ``$XDG_DATA_HOME/wakeline`` (default ``~/.local/share/wakeline``), created."""
    root = os.environ.get("WAKELINE_HOME")
    if root:
        path = Path(root)
    else:
        base = os.environ.get("XDG_DATA_HOME") or Path.home() / ".local" / "share"
        path = Path(base) / "wakeline"
    path.mkdir(parents=True, exist_ok=True)
    return path
