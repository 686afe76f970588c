"""The review window at the sizes analysts use it: the picture's room, the shot list and the
panels on narrow and low screens."""

from __future__ import annotations

import pytest
from PySide6.QtCore import Qt
from test_window import _open

# The offscreen platform warns that it cannot propagate size hints; harmless (DEVELOPERS.md).
pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")


def test_a_narrow_shot_list_keeps_the_angles_in_sight_and_the_status_icons(
        main_window, make_session, qtbot):
    # at 1100 px the list once scrolled sideways, the lower angle out of sight
    from PySide6.QtCore import Qt as QtNs

    from app.qt.shot_list import _WIDTHS, COL_STATUS, STATUS_ICON_PX

    window = _open(main_window, qtbot, make_session(2), show=True)
    panel, view = window.shot_list, window.shot_list.view
    header = lambda: panel.table_model.headerData(COL_STATUS, QtNs.Orientation.Horizontal)
    window.resize(1100, 760)
    qtbot.waitUntil(lambda: view.columnWidth(COL_STATUS) < _WIDTHS[COL_STATUS], timeout=30_000)
    shown = sum(view.columnWidth(c) for c in range(panel.table_model.columnCount())
                if not view.isColumnHidden(c) and c != panel.table_model.columnCount() - 1)
    assert shown <= view.viewport().width() or view.columnWidth(COL_STATUS) == STATUS_ICON_PX
    assert header() == ""
    window.resize(1600, 900)
    sizes = window.splitter.sizes()
    window.splitter.setSizes([480, sizes[1] - (480 - sizes[0]), sizes[2]])  # the list widened
    qtbot.waitUntil(lambda: view.columnWidth(COL_STATUS) == _WIDTHS[COL_STATUS], timeout=30_000)
    assert header() == "Status"
    window.close()


def test_a_small_window_gives_the_picture_room_unless_the_panels_were_set_by_hand(
        main_window, make_session, qtbot):
    from app.qt.canvas import HINT_MIN_WIDTH, LEGEND_MIN_WIDTH
    from app.qt.window import CANVAS_ROOM_PX

    window = _open(main_window, qtbot, make_session(2), show=True)
    window.resize(1600, 900)
    qtbot.wait(50)
    before = window.splitter.sizes()
    window.resize(1024, 700)

    def roomy() -> bool:  # the picture as wide as asked, or the side panels at their least
        sizes = window.splitter.sizes()
        least = [max(window.splitter.widget(i).minimumWidth(),
                     window.splitter.widget(i).minimumSizeHint().width()) for i in (0, 2)]
        return sizes[1] >= CANVAS_ROOM_PX - 2 or [sizes[0], sizes[2]] == least

    qtbot.waitUntil(roomy, timeout=30_000)
    assert window.splitter.sizes()[1] > 450  # it was squeezed to about 200 px
    # and the overview docked below gives up height: the picture was about 230 px high
    from app.qt.window import CANVAS_HEIGHT_PX

    dock = window.overview_dock
    qtbot.waitUntil(lambda: window.splitter.height() >= CANVAS_HEIGHT_PX - 2
                    or dock.height() <= dock.minimumSizeHint().height(), timeout=30_000)
    assert dock.isVisible() and dock.height() < 230 and window.splitter.height() > 400
    # narrow as it is, the hint has its own line above the legend instead of a few letters
    assert window.canvas.width() < LEGEND_MIN_WIDTH + HINT_MIN_WIDTH
    assert window.canvas.legend.y() > window.canvas.hover_label.y()
    # and the cursor readout is tall enough for the longest reading at its width
    from app.qt.canvas import HOVER_LONGEST

    label = window.canvas.hover_label

    def readable() -> bool:
        room = label.contentsRect().adjusted(6, 2, -6, -2)
        need = label.fontMetrics().boundingRect(room, int(Qt.TextFlag.TextWordWrap),
                                                HOVER_LONGEST)
        return need.height() <= room.height() + 4  # the padding's rounding
    qtbot.waitUntil(readable, timeout=30_000)
    # wide again, the side panels have their room back (the shot list's columns whole)
    window.resize(1600, 900)
    qtbot.waitUntil(lambda: window.splitter.sizes() == before, timeout=30_000)
    # the analyst's own widths stay
    wide = window.splitter.sizes()
    window.splitter.moveSplitter(wide[0] + 300, 2)  # as a drag would: the picture 300 px
    set_by_hand = window.splitter.sizes()
    window.resize(1599, 900)
    qtbot.wait(50)
    assert window.splitter.sizes()[1] < CANVAS_ROOM_PX
    assert abs(window.splitter.sizes()[1] - set_by_hand[1]) <= 2


def test_the_window_fits_a_laptop_screen(main_window, make_session, qtbot):
    """With a session open the window goes down to 1280 x 720 and narrower (a 1366 or 1280 px
    wide laptop screen): long legends wrap, the control bar takes a second row."""
    window = _open(main_window, qtbot, make_session(5), show=True)
    window.model.set_current("s02")
    window.statistics.refresh()
    window.statistics_dock.raise_()
    qtbot.wait(20)
    assert window.minimumSizeHint().width() <= 1200
    window.resize(1280, 720)
    qtbot.waitUntil(lambda: window.width() == 1280)
    assert window.shot_list.text_filter.width() >= window.shot_list.text_filter.sizeHint().width()
    canvas = window.canvas
    label = canvas.hover_label  # the hint whole, within the label's lines
    room = label.contentsRect()
    needed = label.fontMetrics().boundingRect(room, int(Qt.TextFlag.TextWordWrap), label.text())
    assert needed.height() <= room.height() and needed.width() <= room.width()
    header = window.shot_list.view.horizontalHeader()
    assert header.length() <= window.shot_list.view.viewport().width()  # every column whole


def test_a_window_that_opens_low_keeps_the_decision_and_the_picture_in_sight(
        main_window, make_session, qtbot):
    """Opened at 1100 x 700 with the conditions in front below: the review buttons and the note
    stay below the scrolled readout, and the panel below gives up height for the picture."""
    from app.qt.window import CANVAS_HEIGHT_PX

    window = _open(main_window, qtbot, make_session(3), show=True)
    window.statistics_dock.raise_()
    window.resize(1100, 700)
    dock = window.statistics_dock
    # docks sharing the place keep the largest of their least heights
    least = max(d.minimumSizeHint().height() for d in (dock, window.overview_dock))
    qtbot.waitUntil(lambda: window.splitter.height() >= CANVAS_HEIGHT_PX - 2
                    or dock.height() <= least, timeout=30_000)
    assert window.splitter.height() > 420
    readout = window.readout
    for widget in (*readout.buttons.values(), readout.note):
        corner = widget.mapTo(readout, widget.rect().bottomRight())
        assert widget.isVisible() and readout.rect().contains(corner)


def test_shot_ids_that_begin_alike_are_shown_whole(main_window, make_session, qtbot):
    """Lab names (``run_0417_shot_01``...) begin alike: the ids' column widens for the longest
    (up to its limit) instead of showing every row as ``run_…``."""
    from app.qt.shot_list import COL_SHOT

    window = _open(main_window, qtbot, make_session(3, prefix="run_0417_shot_"), show=True)
    view = window.shot_list.view
    wanted = view.fontMetrics().horizontalAdvance("run_0417_shot_03")
    assert view.columnWidth(COL_SHOT) >= wanted
    assert view.textElideMode() == Qt.TextElideMode.ElideMiddle  # beyond it: the end stays
