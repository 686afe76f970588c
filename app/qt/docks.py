"""The View menu's items of the docked panels: choosing one brings its panel to the front (a
tab behind another panel included); only a panel already in front is put away by it."""

from __future__ import annotations

import shiboken6
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import QDockWidget, QMainWindow, QTabBar


def in_front(window: QMainWindow, dock: QDockWidget) -> bool:
    """Whether ``dock`` is open and shows its contents: not closed, not a tab behind another."""
    if dock.isHidden():
        return False
    if dock.isFloating() or not window.tabifiedDockWidgets(dock):
        return True
    title = dock.windowTitle()
    for bar in window.findChildren(QTabBar):
        titles = [bar.tabText(i) for i in range(bar.count())]
        if bar.parent() is window and title in titles:
            return bar.currentIndex() == titles.index(title)
    return True


def bring_to_front(dock: QDockWidget) -> None:
    """Open ``dock`` and make its tab the current one when it shares the place with others."""
    dock.show()
    dock.raise_()


def dock_action(window: QMainWindow, dock: QDockWidget, text: str, tip: str = "",
                shortcut: str | None = None) -> QAction:
    """A checkable View item for ``dock`` (ticked while it is in front): choosing it shows the
    panel and brings it to the front; choosing it while the panel is in front closes it."""
    action = QAction(text, window)
    action.setCheckable(True)
    if shortcut:
        action.setShortcut(QKeySequence(shortcut))
    if tip:
        action.setStatusTip(tip)
        action.setToolTip(tip)

    def follow(*_args) -> None:
        # a panel hidden while the window is being destroyed (Python's exit) says so too late
        if shiboken6.isValid(window) and shiboken6.isValid(action):
            action.setChecked(in_front(window, dock))

    def choose(_checked: bool = False) -> None:
        # the action's tick flipped already; whether the panel was in front decides
        if in_front(window, dock):
            dock.close()
        else:
            bring_to_front(dock)
        follow()

    action.triggered.connect(choose)
    dock.visibilityChanged.connect(follow)
    window.addAction(action)  # its key works while the menu bar is closed
    follow()
    return action
