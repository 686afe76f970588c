"""The session overview panel: every shot's upper and lower separation angle against one numeric
column, as a pyqtgraph scatter coloured by review status (numbers: ``app.review.overview``).

Filled points are the analyst's final angle, hollow ones a proposal not yet reviewed. Clicking a
point emits ``shot_clicked(shot_id)``.
"""

from __future__ import annotations

from functools import cache

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtWidgets

from app.review import colours
from app.review.overview import (
    PLOTTED_STATUSES,
    SHOT_ORDER,
    OverviewPoints,
    default_column,
    left_out_text,
    numeric_columns,
    overview_points,
)

# --- the window panel --------------------------------------------------------------------------

UPPER_SYMBOL = "t1"  # triangle pointing up
LOWER_SYMBOL = "t"  # triangle pointing down
POINT_SIZE = 11


#: The angle axis's title, and the one of a plot too low to hold it (px).
Y_TITLE, Y_TITLE_SHORT, Y_TITLE_MIN_PX = "separation (deg)", "deg", 170


class SessionOverview(QtWidgets.QWidget):
    """Scatter of separation angles against a chosen column, one point pair per shot.

    Signals
    -------
    shot_clicked(str)
        The shot id of a clicked point.
    """

    shot_clicked = QtCore.Signal(str)

    def __init__(self, parent: QtWidgets.QWidget | None = None):
        super().__init__(parent)
        self._records: list = []
        self._points: OverviewPoints | None = None
        self._current: str | None = None
        self._ranged_for: tuple | None = None  # (column, shot count, single value range)
        self._source = None
        # many record changes in a row (a batch run, a quick review) redraw once
        self._refresh_timer = QtCore.QTimer(self)
        self._refresh_timer.setSingleShot(True)
        self._refresh_timer.setInterval(40)
        self._refresh_timer.timeout.connect(self._refresh_now)

        self._chosen_column = ""  # the user's choice; until then the session's default
        self.column_box = QtWidgets.QComboBox()
        self.column_box.setToolTip("Quantity on the horizontal axis")
        self.column_box.setSizeAdjustPolicy(
            QtWidgets.QComboBox.SizeAdjustPolicy.AdjustToContents)
        self.column_box.currentTextChanged.connect(self._on_column_changed)
        self.column_box.textActivated.connect(self._on_column_chosen)
        self.note_label = QtWidgets.QLabel()
        self.note_label.setStyleSheet(f"color: {colours.MUTED_INK};")

        self.plot = pg.PlotWidget(background="w")
        self.plot.setMinimumSize(280, 130)  # a low window: the dock gives up height (window.py)
        item = self.plot.getPlotItem()
        item.showGrid(x=True, y=True, alpha=0.15)
        item.setLabel("left", Y_TITLE)
        self.plot.installEventFilter(self)  # a short plot takes a short title (eventFilter)
        # room under the bottom axis's label (without it the label's lower half, descenders
        # and all, fell off the widget's edge)
        item.layout.setContentsMargins(0, 0, 0, 14)
        item.setMenuEnabled(False)
        for axis in ("left", "bottom"):
            item.getAxis(axis).setPen(pg.mkPen(colours.MUTED_INK))
            item.getAxis(axis).setTextPen(pg.mkPen(colours.INK))
        self.plane_line = pg.InfiniteLine(pos=0, angle=0, pen=pg.mkPen(colours.RULE, width=1))
        item.addItem(self.plane_line)
        self.link_lines = pg.PlotCurveItem(pen=pg.mkPen(colours.RULE, width=1), connect="pairs")
        item.addItem(self.link_lines)
        # each proposal's uncertainty (95 %); none where the analyst moved the mark
        self.error_bars = {side: pg.ErrorBarItem(pen=pg.mkPen(colours.MUTED_INK, width=1),
                                                 beam=0.0) for side in ("upper", "lower")}
        for bars in self.error_bars.values():
            item.addItem(bars)
        self.upper_item = pg.ScatterPlotItem(symbol=UPPER_SYMBOL, size=POINT_SIZE, hoverable=True)
        self.lower_item = pg.ScatterPlotItem(symbol=LOWER_SYMBOL, size=POINT_SIZE, hoverable=True)
        self.current_item = pg.ScatterPlotItem(
            symbol="o", size=POINT_SIZE + 9, pen=pg.mkPen(colours.INK, width=2), brush=None
        )
        for scatter in (self.upper_item, self.lower_item):
            scatter.sigClicked.connect(self._on_points_clicked)
            item.addItem(scatter)
        # the ring sits on points already drawn: ignoring its bounds spares an axis relayout per step
        item.addItem(self.current_item, ignoreBounds=True)

        top = QtWidgets.QHBoxLayout()
        top.addWidget(QtWidgets.QLabel("Against:"))
        top.addWidget(self.column_box)
        top.addStretch(1)
        top.addWidget(self.note_label)
        layout = QtWidgets.QVBoxLayout(self)
        layout.setContentsMargins(4, 4, 4, 4)
        layout.setSpacing(2)
        layout.addLayout(top)
        # the legend on a line of its own, the panel's whole width: squeezed beside the chooser
        # in a narrow panel it wrapped to many lines and took the plot's height
        layout.addWidget(_legend_label())
        layout.addWidget(self.plot, 1)

    # public ---------------------------------------------------------------------------------

    def eventFilter(self, watched, event) -> bool:
        if watched is self.plot and event.type() == QtCore.QEvent.Type.Resize:
            title = Y_TITLE if event.size().height() >= Y_TITLE_MIN_PX else Y_TITLE_SHORT
            axis = self.plot.getPlotItem().getAxis("left")
            if axis.labelText != title:
                axis.setLabel(title)
        return super().eventFilter(watched, event)
    def set_records(self, records) -> None:
        """Show these shot records (``core.store.ShotRecord``), keeping the chosen column."""
        self._records = list(records)
        columns = numeric_columns(self._records) if self._records else [SHOT_ORDER]
        wanted = self._chosen_column or default_column(self._records or [])
        if wanted not in columns:
            wanted = columns[0]
        blocker = QtCore.QSignalBlocker(self.column_box)
        self.column_box.clear()
        self.column_box.addItems(columns)
        self.column_box.setCurrentText(wanted)
        del blocker
        self._redraw()

    def follow(self, source) -> None:
        """Take the records from ``source()`` (a callable) now and on every ``refresh_soon``."""
        self._source = source
        self._refresh_now()

    def refresh_soon(self, *_args) -> None:
        """Ask for a redraw from the followed source; requests close together are merged."""
        if self._source is not None:
            self._refresh_timer.start()

    def _refresh_now(self) -> None:
        if self._source is not None:
            self.set_records(self._source())

    def set_column(self, column: str) -> None:
        """Put ``column`` on the horizontal axis (one of ``numeric_columns``)."""
        self._chosen_column = column
        self.column_box.setCurrentText(column)

    def column(self) -> str:
        return self.column_box.currentText()

    def points(self) -> OverviewPoints | None:
        """The numbers currently drawn."""
        return self._points

    def set_current(self, shot_id: str | None) -> None:
        """Ring the points of the shot selected elsewhere (e.g. in the shot list)."""
        self._current = shot_id
        self._draw_current()

    def point_scene_pos(self, shot_id: str, side: str = "upper") -> QtCore.QPointF:
        """Scene position of a shot's point (for tests and tooltips)."""
        pts = self._points
        i = pts.shot_ids.index(shot_id)
        y = pts.upper_deg[i] if side == "upper" else pts.lower_deg[i]
        view = self.plot.getPlotItem().getViewBox()
        return view.mapViewToScene(QtCore.QPointF(float(pts.drawn_x()[i]), float(y)))

    # slots ------------------------------------------------------------------------------------
    def _on_column_changed(self, column: str) -> None:
        if column:
            self._redraw()

    def _on_column_chosen(self, column: str) -> None:
        self._chosen_column = column

    def _on_points_clicked(self, _item, spots, _event=None) -> None:
        if len(spots):
            self.shot_clicked.emit(str(spots[0].data()))

    # drawing ----------------------------------------------------------------------------------
    def _redraw(self) -> None:
        column = self.column_box.currentText() or SHOT_ORDER
        self._points = pts = overview_points(self._records, column)
        self.plot.getPlotItem().setLabel("bottom", column)
        for scatter, values in ((self.upper_item, pts.upper_deg), (self.lower_item, pts.lower_deg)):
            scatter.setData(spots=_spots(pts, values))
        self._draw_links(pts)
        self._draw_error_bars(pts)
        self.note_label.setText(left_out_text(pts))
        self.note_label.setVisible(bool(pts.left_out))
        self._draw_current()
        value, single = pts.single_x(), pts.single_x_range()
        axis = self.plot.getPlotItem().getAxis("bottom")
        # one value on the axis (one shot, or a column alike on every shot): labelled alone,
        # not with ticks between the side-by-side shots that read as a sweep
        axis.setTicks(None if value is None else [[(value, f"{value:g}")]])
        axis.enableAutoSIPrefix(single is None)  # its label is the value itself, unscaled
        if (column, len(pts.shot_ids), single) != self._ranged_for:
            # fit the view to a new column, shot count or single value only, so an edit keeps
            # the analyst's zoom
            self._ranged_for = (column, len(pts.shot_ids), single)
            self.plot.getPlotItem().enableAutoRange()
            if single is not None:  # the automatic range would zoom to the shots' spread
                self.plot.getPlotItem().setXRange(*single, padding=0)

    def _draw_links(self, pts: OverviewPoints) -> None:
        both = np.isfinite(pts.upper_deg) & np.isfinite(pts.lower_deg)
        xs = np.repeat(pts.drawn_x()[both], 2)
        ys = np.column_stack([pts.upper_deg[both], pts.lower_deg[both]]).ravel()
        self.link_lines.setData(xs, ys)

    def _draw_error_bars(self, pts: OverviewPoints) -> None:
        xs = pts.drawn_x()
        for side, bars in self.error_bars.items():
            values, spreads = getattr(pts, f"{side}_deg"), getattr(pts, f"{side}_u_deg")
            keep = np.isfinite(values) & np.isfinite(spreads)
            bars.setData(x=xs[keep], y=values[keep], top=spreads[keep], bottom=spreads[keep],
                         beam=_beam(xs))

    def _draw_current(self) -> None:
        pts = self._points
        if pts is None or self._current not in pts.shot_ids:
            self.current_item.setData([], [])
            return
        i = pts.shot_ids.index(self._current)
        ys = [v for v in (pts.upper_deg[i], pts.lower_deg[i]) if np.isfinite(v)]
        self.current_item.setData([pts.drawn_x()[i]] * len(ys), ys)


@cache
def _spot_style(colour: str, filled: bool) -> tuple:
    """One pen and brush per look: pyqtgraph keeps a symbol image per pen and brush *object*,
    so new ones for every point would draw every symbol again on each redraw."""
    return pg.mkPen(colour, width=1.6), pg.mkBrush(colour if filled else "#ffffff")


def _spots(pts: OverviewPoints, values: np.ndarray) -> list[dict]:
    spots = []
    xs = pts.drawn_x()
    for i, shot_id in enumerate(pts.shot_ids):
        if not np.isfinite(values[i]):
            continue
        pen, brush = _spot_style(colours.STATUS_COLOURS[pts.status[i]], bool(pts.is_final[i]))
        spots.append({"pos": (float(xs[i]), float(values[i])), "data": shot_id, "pen": pen,
                      "brush": brush})
    return spots


def _beam(xs: np.ndarray) -> float:
    """Width of the bars' end caps: a little of the spread of the points along x."""
    span = float(np.ptp(xs)) if xs.size > 1 else 1.0
    return 0.008 * (span if span > 0 else 1.0)


def _legend_label() -> QtWidgets.QLabel:
    swatches = " &nbsp; ".join(
        f"<span style='color:{colours.STATUS_COLOURS[s]}; font-size:14px'>&#9679;</span> {s}"
        for s in PLOTTED_STATUSES
    )
    label = QtWidgets.QLabel(
        f"&#9650; upper &nbsp; &#9660; lower &nbsp; | &nbsp; {swatches}"
        " &nbsp; | &nbsp; hollow: not yet reviewed &nbsp; | &nbsp; bars: ± 95 % of the proposal"
        " &nbsp; | &nbsp; deg from the plane normal to the flight, + rearward"
    )
    label.setTextFormat(QtCore.Qt.TextFormat.RichText)
    label.setWordWrap(True)  # more lines in a narrow window, not a wider window
    return label

