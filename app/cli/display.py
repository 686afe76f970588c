"""Whether the review window can be shown here (no Qt needed to tell)."""

from __future__ import annotations

import ctypes
import os
import sys

#: What Qt's xcb platform plugin (the window on an X11 desktop) loads beyond the libraries every
#: Qt program needs, by Debian package (from ``ldd`` of PySide6's libqxcb.so and libQt6XcbQpa).
#: Without them Qt 6.5+ aborts with its own message instead of opening the window.
XCB_LIBRARIES = {
    "libx11-xcb1": "libX11-xcb.so.1",
    "libxcb1": "libxcb.so.1",
    "libxcb-cursor0": "libxcb-cursor.so.0",
    "libxcb-icccm4": "libxcb-icccm.so.4",
    "libxcb-image0": "libxcb-image.so.0",
    "libxcb-keysyms1": "libxcb-keysyms.so.1",
    "libxcb-randr0": "libxcb-randr.so.0",
    "libxcb-render0": "libxcb-render.so.0",
    "libxcb-render-util0": "libxcb-render-util.so.0",
    "libxcb-shape0": "libxcb-shape.so.0",
    "libxcb-shm0": "libxcb-shm.so.0",
    "libxcb-sync1": "libxcb-sync.so.1",
    "libxcb-util1": "libxcb-util.so.1",
    "libxcb-xfixes0": "libxcb-xfixes.so.0",
    "libxcb-xkb1": "libxcb-xkb.so.1",
    "libxkbcommon-x11-0": "libxkbcommon-x11.so.0",
}


def has_display() -> bool:
    """True when a Qt window can be shown: a display is set, or a windowing platform is chosen."""
    platform = os.environ.get("QT_QPA_PLATFORM", "")
    if platform:
        return platform not in ("offscreen", "minimal")
    if not sys.platform.startswith("linux"):
        return True
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))


def why_no_display() -> str:
    """Why :func:`has_display` says no, in the words of the variable that decides it."""
    platform = os.environ.get("QT_QPA_PLATFORM", "")
    if platform:
        return f"QT_QPA_PLATFORM is {platform}, which draws nothing on a screen"
    return "DISPLAY is not set"


def _uses_xcb() -> bool:
    """Whether Qt will show the window through X11 (xcb) here."""
    platform = os.environ.get("QT_QPA_PLATFORM", "")
    if platform:
        return platform.split(":")[0] == "xcb"
    if not sys.platform.startswith("linux"):
        return False
    wayland = os.environ.get("WAYLAND_DISPLAY") and os.environ.get("XDG_SESSION_TYPE") == "wayland"
    return bool(os.environ.get("DISPLAY")) and not wayland


def missing_window_libraries() -> list[str]:
    """The Debian packages the window needs here and lacks (empty off X11 or when all load)."""
    if not _uses_xcb():
        return []
    missing = []
    for package, soname in XCB_LIBRARIES.items():
        try:
            ctypes.CDLL(soname)
        except OSError:
            missing.append(package)
    return missing


def missing_libraries_message(packages: list[str]) -> str:
    """One line: which libraries the window lacks and how to install them."""
    names = " ".join(packages)
    return (f"the window needs Debian libraries that are missing: {names} "
            f"(as root: apt-get install {names})")
