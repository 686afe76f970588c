"""Whether the review window can be shown here (no Qt needed to tell)."""

from __future__ import annotations

import os
import sys


def has_display() -> bool:
    """True when a Qt window can be shown: a display is set, or a windowing platform is chosen."""
    platform = os.environ.get("QT_QPA_PLATFORM", "")
    if platform:
        return platform not in ("offscreen", "minimal")
    if not sys.platform.startswith("linux"):
        return True
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))
