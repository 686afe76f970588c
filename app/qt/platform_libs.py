"""Whether Qt can load its platform plugin here, asked before Qt is: a missing system library
makes Qt abort the whole process ("could not load the Qt platform plugin"), so the window checks
the plugin's libraries first and names the Debian packages to install instead.

Only ``PySide6``'s location is needed (no Qt module is imported, no application is made).
"""

from __future__ import annotations

import ctypes
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

#: Library file names whose Debian package does not follow the usual naming rule.
PACKAGE_OF = {
    "libglib-2.0.so.0": "libglib2.0-0",
    "libgobject-2.0.so.0": "libglib2.0-0",
    "libgthread-2.0.so.0": "libglib2.0-0",
}
_MISSING = re.compile(r"^\s*(\S+)\s+=>\s+not found", re.MULTILINE)


def platform_plugins() -> list[str]:
    """The platform plugins Qt will try here, in order (``QT_QPA_PLATFORM`` or the desktop's)."""
    chosen = os.environ.get("QT_QPA_PLATFORM", "").strip()
    if chosen:
        return [name.split(":")[0].strip() for name in chosen.split(";") if name.strip()]
    if not sys.platform.startswith("linux"):
        return []
    plugins = ["wayland"] if os.environ.get("WAYLAND_DISPLAY") else []
    return plugins + (["xcb"] if os.environ.get("DISPLAY") else [])


def unreachable_display() -> str | None:
    """Why the X display set in ``DISPLAY`` cannot be used (a stale ``DISPLAY`` over ssh, an X
    server that is gone), or None when it answers or Qt has another plugin to try. Asked of
    libX11 itself (``XOpenDisplay``): Qt's xcb plugin aborts the whole program when it cannot
    connect, after the analyst's work is done (the demo then wrote nothing)."""
    plugins = platform_plugins()
    if plugins != ["xcb"]:  # another first, or one to fall back on ("xcb;offscreen")
        return None
    try:
        xlib = ctypes.CDLL("libX11.so.6")
    except OSError:
        return None  # then the plugin's libraries name what to install
    xlib.XOpenDisplay.restype = ctypes.c_void_p
    xlib.XOpenDisplay.argtypes = [ctypes.c_char_p]
    xlib.XCloseDisplay.argtypes = [ctypes.c_void_p]
    connection = xlib.XOpenDisplay(None)
    if connection:
        xlib.XCloseDisplay(connection)
        return None
    return f"cannot connect to the X display DISPLAY={os.environ.get('DISPLAY', '')}"


def plugin_file(name: str) -> Path | None:
    """The platform plugin's library (``libq<name>.so``) inside PySide6, if it is there."""
    import PySide6

    path = Path(PySide6.__file__).parent / "Qt" / "plugins" / "platforms" / f"libq{name}.so"
    return path if path.is_file() else None


def missing_libraries(plugin: Path) -> list[str]:
    """Shared libraries the plugin needs that the system does not have (``ldd``'s view)."""
    ldd = shutil.which("ldd")
    if ldd is None:
        return []  # nothing to ask; Qt will say what it says
    try:
        out = subprocess.run([ldd, str(plugin)], capture_output=True, text=True, timeout=10,
                             check=False).stdout
    except (OSError, subprocess.SubprocessError):
        return []
    return list(dict.fromkeys(_MISSING.findall(out)))


def debian_package(library: str) -> str:
    """The Debian package that ships a library: ``libxcb-icccm.so.4`` -> ``libxcb-icccm4``,
    ``libxkbcommon-x11.so.0`` -> ``libxkbcommon-x11-0`` (a dash when the name ends in a digit)."""
    if library in PACKAGE_OF:
        return PACKAGE_OF[library]
    stem, _, version = library.partition(".so.")
    version = version.split(".")[0]
    if not version:
        return stem.lower()
    joiner = "-" if stem[-1:].isdigit() else ""
    return f"{stem}{joiner}{version}".lower()


def platform_problem() -> str:
    """One line naming the Debian packages to install when no platform plugin Qt would try can
    load; "" when one can (or when there is nothing to check: another system, no ``ldd``)."""
    if not sys.platform.startswith("linux"):
        return ""
    problems = []
    for name in platform_plugins():
        plugin = plugin_file(name)
        if plugin is None:
            return ""  # not ours to judge (a plugin from elsewhere); let Qt try
        missing = missing_libraries(plugin)
        if not missing:
            return ""
        problems.append((name, missing))
    if not problems:
        return ""
    name, missing = problems[0]
    packages = " ".join(dict.fromkeys(debian_package(lib) for lib in missing))
    return (f"the window cannot start: Qt's '{name}' platform plugin needs {', '.join(missing)}; "
            f"install with: sudo apt-get install {packages}")
