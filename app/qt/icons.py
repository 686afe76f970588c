"""Loading wakeline's own SVG icons (icons/ at the top of the project) as QIcons, cached."""

from __future__ import annotations

import sys
from functools import cache
from pathlib import Path

from PySide6.QtGui import QIcon

from app.review.model import ProcessState, ReviewStatus


def _icon_dir() -> Path:
    """icons/ of the source tree (checkout or editable install), else where a wheel puts it."""
    source = Path(__file__).resolve().parents[2] / "icons"
    installed = Path(sys.prefix) / "share" / "wakeline" / "icons"
    return source if source.is_dir() else installed


ICON_DIR = _icon_dir()

STATUS_ICONS = {status: f"status_{status.name.lower()}" for status in ReviewStatus}
STATE_ICONS = {ProcessState.FAILED: "state_failed", ProcessState.UNPROCESSED: "state_unprocessed"}


def icon_path(name: str) -> Path:
    """Path of ``icons/<name>.svg``; raises FileNotFoundError when the icon is missing."""
    path = ICON_DIR / f"{name}.svg"
    if not path.is_file():
        raise FileNotFoundError(f"{path}: icon file missing")
    return path


@cache
def icon(name: str) -> QIcon:
    """The icon ``icons/<name>.svg`` (needs a QGuiApplication)."""
    return QIcon(str(icon_path(name)))


def status_icon(status: str) -> QIcon:
    """Icon of a review status."""
    return icon(STATUS_ICONS[status])


def state_icon(state: str) -> QIcon | None:
    """Icon marking a failed or unprocessed shot; None for a processed one."""
    name = STATE_ICONS.get(state)
    return None if name is None else icon(name)


def app_icon() -> QIcon:
    return icon("wakeline")
