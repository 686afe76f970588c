"""The shot list: every shot of the session with its review status, angles and processing state.

A table model over the session's cheap per-shot records (no field data is read), a sort/filter
proxy, and the panel that holds them. Updates after an edit or a finished shot touch one row, so
a session of hundreds of shots stays responsive.
"""

from __future__ import annotations

import math
import re

from PySide6.QtCore import (
    QAbstractTableModel,
    QItemSelectionModel,
    QModelIndex,
    QSortFilterProxyModel,
    Qt,
    Signal,
)
from PySide6.QtGui import QBrush, QColor, QFont
from PySide6.QtWidgets import (
    QAbstractItemView,
    QComboBox,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QLineEdit,
    QTableView,
    QVBoxLayout,
    QWidget,
)

from app.qt.icons import state_icon, status_icon
from app.review import colours
from app.review.model import ProcessState, ReviewStatus, SessionModel
from app.review.text import angle_text

SORT_ROLE = Qt.ItemDataRole.UserRole + 1
COLUMNS = ("", "Shot", "Status", "Upper", "Lower", "Seam °")
COL_STATE, COL_SHOT, COL_STATUS, COL_UPPER, COL_LOWER, COL_SEAM = range(len(COLUMNS))

ALL_SHOTS = "all shots"
#: the filter's choices: every shot, a review status, or a processing state
STATUS_FILTERS = (ALL_SHOTS, *ReviewStatus, ProcessState.FAILED, ProcessState.UNPROCESSED)
_CONDITION = re.compile(r"^\s*([A-Za-z_][\w]*)\s*(<=|>=|=|<|>|:)\s*(\S+)\s*$")


class ShotTableModel(QAbstractTableModel):
    """One row per shot of a ``SessionModel``; reads only ``ShotRecord`` objects."""

    def __init__(self, session_model: SessionModel, parent=None) -> None:
        super().__init__(parent)
        self._model = session_model
        self._ids: list[str] = []
        self._row_of: dict[str, int] = {}
        self._keys: dict[str, tuple] = {}
        self._italic = QFont()
        self._italic.setItalic(True)
        self._muted = QBrush(QColor(colours.MUTED_INK))
        session_model.session_changed.connect(self._on_session_changed)
        session_model.record_changed.connect(self._on_record_changed)

    def _on_session_changed(self) -> None:
        self.beginResetModel()
        self._ids = self._model.shot_ids()
        self._row_of = {sid: row for row, sid in enumerate(self._ids)}
        self._keys: dict[str, tuple] = {}
        self.endResetModel()

    def _on_record_changed(self, shot_id: str) -> None:
        row = self._row_of.get(shot_id)
        self._keys.pop(shot_id, None)
        if row is not None:
            self.dataChanged.emit(self.index(row, 0), self.index(row, len(COLUMNS) - 1))

    def shot_id(self, row: int) -> str:
        return self._ids[row]

    def row_of(self, shot_id: str) -> int:
        return self._row_of.get(shot_id, -1)

    # -- QAbstractTableModel -----------------------------------------------------------------
    def rowCount(self, parent=QModelIndex()) -> int:  # noqa: B008 - Qt's signature
        return 0 if parent.isValid() else len(self._ids)

    def columnCount(self, parent=QModelIndex()) -> int:  # noqa: B008
        return 0 if parent.isValid() else len(COLUMNS)

    def headerData(self, section, orientation, role=Qt.ItemDataRole.DisplayRole):
        if orientation == Qt.Orientation.Horizontal and role == Qt.ItemDataRole.DisplayRole:
            return COLUMNS[section]
        if orientation == Qt.Orientation.Horizontal and role == Qt.ItemDataRole.ToolTipRole:
            return _HEADER_TIPS[section]
        return None

    def data(self, index: QModelIndex, role=Qt.ItemDataRole.DisplayRole):
        if not index.isValid():
            return None
        rec = self._model.record(self._ids[index.row()])
        col = index.column()
        if role == Qt.ItemDataRole.DisplayRole:
            return self._display(rec, col)
        if role == SORT_ROLE:
            keys = self._keys.get(rec.shot_id)
            if keys is None:  # sorting asks many times per row: keep the keys until it changes
                keys = self._keys[rec.shot_id] = tuple(
                    self._sort_key(rec, c) for c in range(len(COLUMNS)))
            return keys[col]
        if role == Qt.ItemDataRole.DecorationRole:
            if col == COL_STATE:
                return state_icon(rec.state)
            if col == COL_STATUS:
                return status_icon(rec.pick.status)
        if role == Qt.ItemDataRole.ToolTipRole:
            return self._tooltip(rec)
        if (
            role in (Qt.ItemDataRole.FontRole, Qt.ItemDataRole.ForegroundRole)
            and col in (COL_UPPER, COL_LOWER)
            and rec.final_deg(_side(col)) is None
        ):
            return self._italic if role == Qt.ItemDataRole.FontRole else self._muted
        if role == Qt.ItemDataRole.TextAlignmentRole and col in (COL_UPPER, COL_LOWER, COL_SEAM):
            return int(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
        return None

    @staticmethod
    def _angle(rec, side: str) -> float | None:
        """Final angle when decided, else the proposal (shown in italics)."""
        if rec.pick.status == ReviewStatus.UNUSABLE:
            return None
        return rec.shown_deg(side)

    def _display(self, rec, col: int):
        if col == COL_SHOT:
            return rec.shot_id
        if col == COL_STATUS:
            return rec.pick.status
        if col in (COL_UPPER, COL_LOWER):
            return angle_text(self._angle(rec, _side(col)))
        if col == COL_SEAM:
            seam = _number(rec.metadata.get("seam_deg"))
            return "" if seam is None else f"{seam:g}"
        return None

    def _sort_key(self, rec, col: int):
        if col == COL_STATE:
            return (ProcessState.FAILED, ProcessState.UNPROCESSED, ProcessState.PROCESSED).index(
                rec.state)
        if col == COL_SHOT:
            return _natural_key(rec.shot_id)
        if col == COL_STATUS:
            return rec.pick.status
        if col in (COL_UPPER, COL_LOWER):
            value = self._angle(rec, _side(col))
            return math.inf if value is None else value
        seam = _number(rec.metadata.get("seam_deg"))
        return math.inf if seam is None else seam

    @staticmethod
    def _tooltip(rec) -> str:
        lines = [f"shot {rec.shot_id}: {rec.state}, {rec.pick.status}"]
        if rec.state == ProcessState.FAILED and rec.failure:
            lines.append(f"failed: {rec.failure}")
        if rec.pick.status == ReviewStatus.UNUSABLE and rec.pick.reason:
            lines.append(f"unusable: {rec.pick.reason}")
        if rec.pick.note:
            lines.append(f"note: {rec.pick.note}")
        return "\n".join(lines)


_HEADER_TIPS = (
    "processing state: cracked outline = failed, dashed outline = not processed yet",
    "shot id",
    "review status",
    "upper separation angle, deg from the plane normal to the flight (italic: proposal only)",
    "lower separation angle, deg from the plane normal to the flight (italic: proposal only)",
    "seam angle from the shot metadata, deg",
)


def _side(col: int) -> str:
    return "upper" if col == COL_UPPER else "lower"


def _number(value) -> float | None:
    try:
        out = float(value)
    except (TypeError, ValueError):
        return None
    return out if math.isfinite(out) else None


def _natural_key(text: str):
    """Sort "s2" before "s10": digits compare as numbers."""
    parts = re.findall(r"\d+|\D+", text)
    return tuple((0, int(t), "") if t.isdigit() else (1, 0, t) for t in parts)


class ShotFilter(QSortFilterProxyModel):
    """Filters shots by status/state and by a condition on metadata or a piece of the shot id.

    The text filter takes ``key<value``, ``key>value``, ``key<=value``, ``key>=value``,
    ``key=value`` or ``key:low..high`` on any metadata column (e.g. ``seam_deg:10..30``);
    anything else matches part of the shot id.
    """

    def __init__(self, session_model: SessionModel, parent=None) -> None:
        super().__init__(parent)
        self._model = session_model
        self._status = ALL_SHOTS
        self._text = ""
        self.setSortRole(SORT_ROLE)
        self.setDynamicSortFilter(True)

    def set_status(self, status: str) -> None:
        if status not in STATUS_FILTERS:
            raise ValueError(f"unknown status filter {status!r}")
        if status != self._status:
            self.beginFilterChange()
            self._status = status
            self.endFilterChange()

    def set_text(self, text: str) -> None:
        text = text.strip()
        if text != self._text:
            self.beginFilterChange()
            self._text = text
            self.endFilterChange()

    def filterAcceptsRow(self, source_row: int, source_parent: QModelIndex) -> bool:
        source = self.sourceModel()
        rec = self._model.record(source.shot_id(source_row))
        if self._status in (ProcessState.FAILED, ProcessState.UNPROCESSED):
            if rec.state != self._status:
                return False
        elif self._status != ALL_SHOTS and rec.pick.status != self._status:
            return False
        return _text_matches(self._text, rec)

    def lessThan(self, left: QModelIndex, right: QModelIndex) -> bool:
        a, b = left.data(SORT_ROLE), right.data(SORT_ROLE)
        try:
            return a < b
        except TypeError:
            return str(a) < str(b)


def _text_matches(text: str, rec) -> bool:
    if not text:
        return True
    match = _CONDITION.match(text)
    if match is None:
        return text.lower() in rec.shot_id.lower()
    key, op, value = match.groups()
    have = rec.metadata.get(key)
    if op == ":":
        low, _, high = value.partition("..")
        number = _number(have)
        lo, hi = _number(low), _number(high)
        return number is not None and lo is not None and hi is not None and lo <= number <= hi
    want, number = _number(value), _number(have)
    if op == "=":
        return str(have) == value if want is None or number is None else number == want
    if want is None or number is None:
        return False
    return {"<": number < want, ">": number > want, "<=": number <= want, ">=": number >= want}[op]


class ShotListPanel(QWidget):
    """Left panel: filter controls over the shot table. Emits ``shot_selected`` on a new row."""

    shot_selected = Signal(str)

    def __init__(self, session_model: SessionModel, parent=None) -> None:
        super().__init__(parent)
        self._model = session_model
        self.table_model = ShotTableModel(session_model, self)
        self.proxy = ShotFilter(session_model, self)
        self.proxy.setSourceModel(self.table_model)
        self.view = QTableView(self)
        self.view.setModel(self.proxy)
        self._setup_view()
        self.status_filter = QComboBox(self)
        self.status_filter.addItems(STATUS_FILTERS)
        self.status_filter.setToolTip("show only shots with this review status or state")
        self.text_filter = QLineEdit(self)
        self.text_filter.setPlaceholderText("filter: shot id, or seam_deg:10..30, speed_m_s>30")
        self.text_filter.setClearButtonEnabled(True)
        self.text_filter.setToolTip(_filter_help())
        self.count_label = QLabel(self)
        self.setMinimumWidth(240)
        self.status_filter.setMaximumWidth(120)
        self._layout()
        self.status_filter.currentTextChanged.connect(self._on_status_filter)
        self.text_filter.textChanged.connect(self._on_text_filter)
        self.text_filter.returnPressed.connect(self.view.setFocus)
        self.view.selectionModel().currentRowChanged.connect(self._on_current_row)
        session_model.current_changed.connect(self._on_current_changed)
        session_model.session_changed.connect(self._update_count)
        self.proxy.rowsInserted.connect(self._update_count)
        self.proxy.rowsRemoved.connect(self._update_count)
        self.proxy.modelReset.connect(self._update_count)
        self.proxy.layoutChanged.connect(self._update_count)

    def _setup_view(self) -> None:
        view = self.view
        view.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        view.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        view.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        view.setSortingEnabled(True)
        view.sortByColumn(COL_SHOT, Qt.SortOrder.AscendingOrder)
        view.verticalHeader().setVisible(False)
        view.verticalHeader().setDefaultSectionSize(22)
        view.setAlternatingRowColors(True)
        view.setShowGrid(False)
        view.setWordWrap(False)
        header = view.horizontalHeader()
        header.setHighlightSections(False)
        header.setSectionResizeMode(QHeaderView.ResizeMode.Interactive)
        header.setStretchLastSection(True)
        for col, width in zip(range(len(COLUMNS)), (22, 56, 92, 54, 54, 46)):
            view.setColumnWidth(col, width)

    def _layout(self) -> None:
        top = QHBoxLayout()
        top.setContentsMargins(0, 0, 0, 0)
        top.addWidget(self.status_filter, 0)
        top.addWidget(self.text_filter, 1)
        box = QVBoxLayout(self)
        box.setContentsMargins(4, 4, 4, 4)
        box.addLayout(top)
        box.addWidget(self.view, 1)
        box.addWidget(self.count_label)

    # -- slots -------------------------------------------------------------------------------
    def _on_status_filter(self, text: str) -> None:
        self.proxy.set_status(text)
        self._keep_current_visible()

    def _on_text_filter(self, text: str) -> None:
        self.proxy.set_text(text)
        self._keep_current_visible()

    def _keep_current_visible(self) -> None:
        self._select(self._model.current_id)
        self._update_count()

    def _update_count(self, *_args) -> None:
        total = len(self._model.shot_ids())
        shown = self.proxy.rowCount()
        self.count_label.setText(
            f"{total} shots" if shown == total else f"{shown} of {total} shots shown"
        )

    def _on_current_row(self, current: QModelIndex, _previous: QModelIndex) -> None:
        if current.isValid():
            source = self.proxy.mapToSource(current)
            self.shot_selected.emit(self.table_model.shot_id(source.row()))

    def _on_current_changed(self, shot_id: str) -> None:
        self._select(shot_id)

    def _select(self, shot_id: str) -> None:
        row = self.table_model.row_of(shot_id) if shot_id else -1
        if row < 0:
            return
        index = self.proxy.mapFromSource(self.table_model.index(row, COL_SHOT))
        if not index.isValid() or index == self.view.currentIndex():
            return
        flags = (
            QItemSelectionModel.SelectionFlag.ClearAndSelect
            | QItemSelectionModel.SelectionFlag.Rows
        )
        self.view.selectionModel().setCurrentIndex(index, flags)
        self.view.scrollTo(index)

    # -- stepping ----------------------------------------------------------------------------
    def visible_ids(self) -> list[str]:
        """Shot ids in the order shown (after sorting and filtering)."""
        out = []
        for row in range(self.proxy.rowCount()):
            source = self.proxy.mapToSource(self.proxy.index(row, COL_SHOT))
            out.append(self.table_model.shot_id(source.row()))
        return out

    def neighbour(self, shot_id: str, offset: int) -> str:
        """The shot ``offset`` rows from ``shot_id`` in the shown order ("" when none)."""
        row = self.table_model.row_of(shot_id)
        if row < 0:
            return ""
        index = self.proxy.mapFromSource(self.table_model.index(row, COL_SHOT))
        target = index.row() + offset
        if not index.isValid() or not 0 <= target < self.proxy.rowCount():
            return ""
        source = self.proxy.mapToSource(self.proxy.index(target, COL_SHOT))
        return self.table_model.shot_id(source.row())

    def step(self, offset: int) -> None:
        """Make the shot ``offset`` rows below (negative: above) the current one current."""
        rows = self.proxy.rowCount()
        if rows == 0:
            return
        current = self.view.currentIndex()
        row = current.row() + offset if current.isValid() else (0 if offset > 0 else rows - 1)
        row = max(0, min(rows - 1, row))
        flags = (
            QItemSelectionModel.SelectionFlag.ClearAndSelect
            | QItemSelectionModel.SelectionFlag.Rows
        )
        index = self.proxy.index(row, COL_SHOT)
        self.view.selectionModel().setCurrentIndex(index, flags)
        self.view.scrollTo(index)


def _filter_help() -> str:
    return (
        "Type part of a shot id, or a condition on a metadata column:\n"
        "  seam_deg:10..30   (range, inclusive)\n"
        "  speed_m_s>30   seam_deg<=0   ball_type=cricket"
    )
