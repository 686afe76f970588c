"""The shot list: every shot of the session with its review status, angles, measured values and
metadata, sortable on any column and filtered by status and by conditions on any value.

A table model over the session's cheap per-shot records (no field data is read), a sort/filter
proxy, and the panel that holds them. The columns and the filter's words are
``app.review.columns``; which columns show is the analyst's choice (right-click the header).
Updates after an edit or a finished shot touch one row, so a session of hundreds of shots stays
responsive. Several rows can be selected (Shift/Ctrl) to decide them at once.
"""

from __future__ import annotations

import re

from PySide6.QtCore import (
    QAbstractTableModel,
    QEvent,
    QItemSelectionModel,
    QModelIndex,
    QSortFilterProxyModel,
    Qt,
    Signal,
)
from PySide6.QtGui import QAction, QBrush, QColor, QFont, QKeySequence, QShortcut
from PySide6.QtWidgets import (
    QAbstractItemView,
    QComboBox,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QLineEdit,
    QMenu,
    QStyledItemDelegate,
    QTableView,
    QVBoxLayout,
    QWidget,
)

from app.qt.icons import state_icon, status_icon
from app.review import colours
from app.review.columns import (
    ALL_SHOTS,
    MEASURED,
    STATUS_FILTERS,
    Column,
    ShotQuery,
    decided_status,
    filter_help,
    matches_status,
    metadata_column,
    metadata_keys,
    parse_filter,
    status_text,
)
from app.review.model import ProcessState, ReviewStatus, SessionModel

SORT_ROLE = Qt.ItemDataRole.UserRole + 1
#: the columns every session has; measured values and metadata columns follow
FIXED = (("", "state", ("processing state: cracked outline = failed, dashed outline = not "
          "processed yet")), ("Shot", "shot", "shot id"), ("Status", "status", "review status"))
COL_STATE, COL_SHOT, COL_STATUS = range(len(FIXED))
# the list's own keys (the view's stepping and extended selection), for the F1 key list
LIST_KEYS = (
    ("Up / Down, PageUp / PageDown, Ctrl+Home / Ctrl+End", "step through shots in the list"),
    ("Shift+Up / Shift+Down, Ctrl+A", ("select several shots (Shift- or Ctrl-click too): a "
                                       "decision key decides them all, one undo step")),
)
DEFAULT_COLUMNS = ("upper_deg", "lower_deg", "seam_deg")
_WIDTHS = {COL_STATE: 22, COL_SHOT: 56, COL_STATUS: 92}
SHOT_COLUMN_MAX_PX = 150  # px: the shot ids' column at its widest
STATUS_ICON_PX = 28  # the status column at its narrowest: its icon alone
_RIGHT = int(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)


class ShotTableModel(QAbstractTableModel):
    """One row per shot of a ``SessionModel``; reads only ``ShotRecord`` objects."""

    def __init__(self, session_model: SessionModel, parent=None) -> None:
        super().__init__(parent)
        self._model = session_model
        self._ids: list[str] = []
        self._row_of: dict[str, int] = {}
        self._keys: dict[str, tuple] = {}
        self._columns: list[Column] = list(MEASURED)
        self.status_icons_only = False  # a narrow list: the status column shows its icon alone
        self._italic = QFont()
        self._italic.setItalic(True)
        self._muted = QBrush(QColor(colours.MUTED_INK))
        session_model.session_changed.connect(self._on_session_changed)
        session_model.record_changed.connect(self._on_record_changed)

    def _on_session_changed(self) -> None:
        self.beginResetModel()
        self._ids = self._model.shot_ids()
        self._row_of = {sid: row for row, sid in enumerate(self._ids)}
        self._keys = {}
        records = self._model.records()
        self._columns = list(MEASURED) + [metadata_column(k) for k in metadata_keys(records)]
        self.endResetModel()

    def _on_record_changed(self, shot_id: str) -> None:
        row = self._row_of.get(shot_id)
        self._keys.pop(shot_id, None)
        if row is not None:
            self.dataChanged.emit(self.index(row, 0), self.index(row, self.columnCount() - 1))

    def shot_id(self, row: int) -> str:
        return self._ids[row]

    def shot_ids(self) -> list[str]:
        return list(self._ids)

    def row_of(self, shot_id: str) -> int:
        return self._row_of.get(shot_id, -1)

    def column_name(self, col: int) -> str:
        """The filter's word for a column (``shot``, ``status``, ``upper_deg``, ``seam_deg``)."""
        return FIXED[col][1] if col < len(FIXED) else self._columns[col - len(FIXED)].name

    def column_of(self, name: str) -> int:
        """The column named ``name``, or -1."""
        names = [self.column_name(c) for c in range(self.columnCount())]
        return names.index(name) if name in names else -1

    def _column(self, col: int) -> Column | None:
        return self._columns[col - len(FIXED)] if col >= len(FIXED) else None

    # -- QAbstractTableModel -----------------------------------------------------------------
    def rowCount(self, parent=QModelIndex()) -> int:  # noqa: B008 - Qt's signature
        return 0 if parent.isValid() else len(self._ids)

    def columnCount(self, parent=QModelIndex()) -> int:  # noqa: B008
        return 0 if parent.isValid() else len(FIXED) + len(self._columns)

    def headerData(self, section, orientation, role=Qt.ItemDataRole.DisplayRole):
        if orientation != Qt.Orientation.Horizontal:
            return None
        column = self._column(section)
        if role == Qt.ItemDataRole.DisplayRole:
            if section == COL_STATUS and self.status_icons_only:
                return ""  # its word would be cut to a few letters; the tip still names it
            return FIXED[section][0] if column is None else column.header
        if role == Qt.ItemDataRole.ToolTipRole:
            return FIXED[section][2] if column is None else f"{column.name}: {column.tip}"
        return None

    def data(self, index: QModelIndex, role=Qt.ItemDataRole.DisplayRole):
        if not index.isValid():
            return None
        rec = self._model.record(self._ids[index.row()])
        col = index.column()
        column = self._column(col)
        if role == Qt.ItemDataRole.DisplayRole:
            return self._display(rec, col, column)
        if role == SORT_ROLE:
            keys = self._keys.get(rec.shot_id)
            if keys is None:  # sorting asks many times per row: keep the keys until it changes
                keys = self._keys[rec.shot_id] = tuple(
                    self._sort_key(rec, c) for c in range(self.columnCount()))
            return keys[col]
        if role == Qt.ItemDataRole.DecorationRole:
            if col == COL_STATE:
                return state_icon(rec.state)
            if col == COL_STATUS and (decided := decided_status(rec)) is not None:
                return status_icon(decided)
        if role == Qt.ItemDataRole.ToolTipRole:
            return self._tooltip(rec)
        if role in (Qt.ItemDataRole.FontRole, Qt.ItemDataRole.ForegroundRole) and _proposal_only(
                rec, column):
            return self._italic if role == Qt.ItemDataRole.FontRole else self._muted
        if role == Qt.ItemDataRole.TextAlignmentRole and column is not None and (
                column.kind != "metadata" or column.value(rec) is not None):
            return _RIGHT  # numbers line up on the right
        return None

    @staticmethod
    def _display(rec, col: int, column: Column | None):
        if col == COL_SHOT:
            return rec.shot_id
        if col == COL_STATUS:
            return status_text(rec)
        return None if column is None else column.text(rec)

    def _sort_key(self, rec, col: int):
        """Numbers before text before nothing, so empty cells gather at one end."""
        if col == COL_STATE:
            return (0, (ProcessState.FAILED, ProcessState.UNPROCESSED, ProcessState.PROCESSED)
                    .index(rec.state))
        if col == COL_SHOT:
            return (0, _natural_key(rec.shot_id))
        if col == COL_STATUS:
            return (1, status_text(rec))
        column = self._column(col)
        number = column.value(rec)
        if number is not None:
            return (0, number)
        text = column.text(rec)
        return (1, text) if text else (2, "")

    @staticmethod
    def _tooltip(rec) -> str:
        lines = [f"shot {rec.shot_id}: {status_text(rec)}"]
        if rec.state == ProcessState.FAILED and rec.failure:
            lines.append(f"failed: {rec.failure}")
        if rec.pick.status == ReviewStatus.UNUSABLE and rec.pick.reason:
            lines.append(f"unusable: {rec.pick.reason}")
        if rec.pick.note:
            lines.append(f"note: {rec.pick.note}")
        return "\n".join(lines)


class _StartKept(QStyledItemDelegate):
    """Cells cut short at their end ("back to re…"), not in their middle."""

    def initStyleOption(self, option, index) -> None:
        super().initStyleOption(option, index)
        option.textElideMode = Qt.TextElideMode.ElideRight


def _proposal_only(rec, column: Column | None) -> bool:
    """An angle column showing the machine's proposal, not a decided angle (drawn in italics)."""
    side = {"upper_deg": "upper", "lower_deg": "lower"}.get(getattr(column, "name", ""))
    return side is not None and rec.final_deg(side) is None


def _natural_key(text: str):
    """Sort "s2" before "s10": digits compare as numbers."""
    parts = re.findall(r"\d+|\D+", text)
    return tuple((0, int(t), "") if t.isdigit() else (1, 0, t) for t in parts)


class ShotFilter(QSortFilterProxyModel):
    """Filters shots by status/state and by the words of ``app.review.columns.parse_filter``."""

    def __init__(self, session_model: SessionModel, parent=None) -> None:
        super().__init__(parent)
        self._model = session_model
        self._status = ALL_SHOTS
        self._text = ""
        self.query = ShotQuery([], [])
        self.setSortRole(SORT_ROLE)
        self.setDynamicSortFilter(True)
        session_model.session_changed.connect(self._reparse)

    @property
    def problem(self) -> str:
        """Why the filter matches nothing ("" when it reads well)."""
        return self.query.problem

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
            self.query = parse_filter(text, self._model.records())
            self.endFilterChange()

    def _reparse(self) -> None:
        """A new session has other metadata columns: read the words again."""
        self.beginFilterChange()
        self.query = parse_filter(self._text, self._model.records())
        self.endFilterChange()

    def filterAcceptsRow(self, source_row: int, source_parent: QModelIndex) -> bool:
        rec = self._model.record(self.sourceModel().shot_id(source_row))
        return matches_status(rec, self._status) and self.query.matches(rec)

    def lessThan(self, left: QModelIndex, right: QModelIndex) -> bool:
        return left.data(SORT_ROLE) < right.data(SORT_ROLE)


class ShotListPanel(QWidget):
    """Left panel: filter controls over the shot table. Emits ``shot_selected`` on a new row and
    ``columns_changed`` when the analyst shows or hides a column."""

    shot_selected = Signal(str)
    columns_changed = Signal()

    def __init__(self, session_model: SessionModel, parent=None) -> None:
        super().__init__(parent)
        self._model = session_model
        self._shown_columns = set(DEFAULT_COLUMNS)
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
        self.text_filter.setPlaceholderText("filter: seam_deg:10..30")  # more in the tip
        self.text_filter.setClearButtonEnabled(True)
        self.text_filter.setToolTip(filter_help())
        self.count_label = QLabel(self)
        self.count_label.setWordWrap(True)
        self.setMinimumWidth(240)
        self.status_filter.setMaximumWidth(120)
        self._layout()
        self.status_filter.currentTextChanged.connect(self._on_status_filter)
        self.text_filter.textChanged.connect(self._on_text_filter)
        self.text_filter.returnPressed.connect(self.view.setFocus)
        # Escape gives the keys back to the list too (the filter stays), as it does in the notes
        escape = QShortcut(QKeySequence(Qt.Key.Key_Escape), self.text_filter,
                           context=Qt.ShortcutContext.WidgetShortcut)
        escape.activated.connect(self.view.setFocus)
        self.view.selectionModel().currentRowChanged.connect(self._on_current_row)
        self.view.selectionModel().selectionChanged.connect(self._update_count)
        session_model.current_changed.connect(self._on_current_changed)
        session_model.session_changed.connect(self._update_count)
        self.table_model.modelReset.connect(self._apply_columns)
        for signal in (self.proxy.rowsInserted, self.proxy.rowsRemoved, self.proxy.modelReset,
                       self.proxy.layoutChanged):
            signal.connect(self._update_count)

    def _setup_view(self) -> None:
        view = self.view
        view.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        view.setSelectionMode(QAbstractItemView.SelectionMode.ExtendedSelection)
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
        header.setDefaultSectionSize(54)
        header.setContextMenuPolicy(Qt.ContextMenuPolicy.CustomContextMenu)
        header.customContextMenuRequested.connect(self._column_menu)
        view.viewport().installEventFilter(self)  # its width sets the status column's
        view.setTextElideMode(Qt.TextElideMode.ElideMiddle)  # ids that begin alike stay apart
        self._status_words = _StartKept(view)  # a status' words read from their start
        view.setItemDelegateForColumn(COL_STATUS, self._status_words)
        self.table_model.modelReset.connect(self._fit_shot_column)  # a session opened
        self._apply_columns()

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

    # -- columns -----------------------------------------------------------------------------
    def shown_columns(self) -> list[str]:
        """Names of the value columns shown (besides state, shot and status), in list order."""
        model = self.table_model
        return [model.column_name(c) for c in range(len(FIXED), model.columnCount())
                if not self.view.isColumnHidden(c)]

    def wanted_columns(self) -> list[str]:
        """Every column the analyst asked to see, this session's or not (what the window keeps)."""
        return sorted(self._shown_columns)

    def show_columns(self, names) -> None:
        """Show these value columns and hide the others (names a session lacks are kept for the
        next session that has them)."""
        self._shown_columns = set(names)
        self._apply_columns()

    def _apply_columns(self) -> None:
        for col in range(self.table_model.columnCount()):
            name = self.table_model.column_name(col)
            self.view.setColumnHidden(col, col >= len(FIXED) and name not in self._shown_columns)
            self.view.setColumnWidth(col, _WIDTHS.get(col, 54))
        self._fit_shot_column()

    def _fit_shot_column(self) -> None:
        """The shot ids' column wide enough for the session's longest id (lab names such as
        ``shot_017`` all begin alike), up to ``SHOT_COLUMN_MAX_PX`` (a longer one loses its
        middle, not its end); the status column then fits what is left."""
        metrics = self.view.fontMetrics()
        longest = max((metrics.horizontalAdvance(shot_id)
                       for shot_id in self.table_model.shot_ids()), default=0)
        width = min(SHOT_COLUMN_MAX_PX, max(_WIDTHS[COL_SHOT], longest + 14))
        self.view.setColumnWidth(COL_SHOT, int(width))
        self._fit_status_column()

    def eventFilter(self, watched, event) -> bool:
        if watched is self.view.viewport() and event.type() == QEvent.Type.Resize:
            self._fit_status_column()  # the list's own width, once its layout has set it
        return super().eventFilter(watched, event)

    def _fit_status_column(self) -> None:
        """In a narrow list the status column gives up its words before the angles scroll out
        of sight: down to its icon (the row's tip still says it), never below."""
        view = self.view
        others = sum(view.columnWidth(c) for c in range(self.table_model.columnCount())
                     if c != COL_STATUS and not view.isColumnHidden(c))
        room = view.viewport().width() - others
        width = int(min(_WIDTHS[COL_STATUS], max(STATUS_ICON_PX, room)))
        view.setColumnWidth(COL_STATUS, width)
        icons_only = width < _WIDTHS[COL_STATUS] // 2
        if icons_only != self.table_model.status_icons_only:
            self.table_model.status_icons_only = icons_only
            self.table_model.headerDataChanged.emit(Qt.Orientation.Horizontal, COL_STATUS,
                                                    COL_STATUS)

    def _column_menu(self, pos) -> QMenu:
        """The header's menu: every column, checked when shown (the list keeps the choice)."""
        menu = QMenu(self)
        model = self.table_model
        for col in range(len(FIXED), model.columnCount()):
            name = model.column_name(col)
            action = QAction(f"{model.headerData(col, Qt.Orientation.Horizontal)}  ({name})",
                             menu)
            action.setCheckable(True)
            action.setChecked(not self.view.isColumnHidden(col))
            action.setToolTip(model.headerData(col, Qt.Orientation.Horizontal,
                                               Qt.ItemDataRole.ToolTipRole))
            action.toggled.connect(lambda on, n=name: self._toggle_column(n, on))
            menu.addAction(action)
        menu.setToolTipsVisible(True)
        if pos is not None:
            menu.popup(self.view.horizontalHeader().mapToGlobal(pos))
        return menu

    def _toggle_column(self, name: str, shown: bool) -> None:
        (self._shown_columns.add if shown else self._shown_columns.discard)(name)
        self._apply_columns()
        self.columns_changed.emit()

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
        problem = self.proxy.problem
        text = f"{total} shots" if shown == total else f"{shown} of {total} shots shown"
        selected = len(self.view.selectionModel().selectedRows())
        if selected > 1:
            text += f", {selected} selected (a decision key decides them all)"
        self.count_label.setText(f"{text}; filter: {problem}" if problem else text)
        self.count_label.setStyleSheet(
            f"color: {colours.STATUS_COLOURS[ReviewStatus.UNUSABLE]};" if problem else "")

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
        self._make_current(index)

    def _make_current(self, index: QModelIndex) -> None:
        flags = (QItemSelectionModel.SelectionFlag.ClearAndSelect
                 | QItemSelectionModel.SelectionFlag.Rows)
        self.view.selectionModel().setCurrentIndex(index, flags)
        self.view.scrollTo(index)

    # -- stepping and selection --------------------------------------------------------------
    def visible_ids(self) -> list[str]:
        """Shot ids in the order shown (after sorting and filtering)."""
        return [self._id_at(row) for row in range(self.proxy.rowCount())]

    def _id_at(self, proxy_row: int) -> str:
        source = self.proxy.mapToSource(self.proxy.index(proxy_row, COL_SHOT))
        return self.table_model.shot_id(source.row())

    def selected_ids(self) -> list[str]:
        """The selected shots in the order shown (the current one when none is selected)."""
        rows = sorted(i.row() for i in self.view.selectionModel().selectedRows(COL_SHOT))
        return [self._id_at(row) for row in rows]

    def select_ids(self, shot_ids) -> None:
        """Select these shots (shown ones only); the first becomes current."""
        wanted = set(shot_ids)
        selection = self.view.selectionModel()
        selection.clearSelection()
        flags = (QItemSelectionModel.SelectionFlag.Select
                 | QItemSelectionModel.SelectionFlag.Rows)
        first = None
        for row in range(self.proxy.rowCount()):
            if self._id_at(row) in wanted:
                index = self.proxy.index(row, COL_SHOT)
                first = first or index
                selection.select(index, flags)
        if first is not None:
            selection.setCurrentIndex(first, QItemSelectionModel.SelectionFlag.NoUpdate)
            self.shot_selected.emit(self._id_at(first.row()))

    def neighbour(self, shot_id: str, offset: int) -> str:
        """The shot ``offset`` rows from ``shot_id`` in the shown order ("" when none)."""
        row = self.table_model.row_of(shot_id)
        if row < 0:
            return ""
        index = self.proxy.mapFromSource(self.table_model.index(row, COL_SHOT))
        target = index.row() + offset
        if not index.isValid() or not 0 <= target < self.proxy.rowCount():
            return ""
        return self._id_at(target)

    def step(self, offset: int) -> None:
        """Make the shot ``offset`` rows below (negative: above) the current one current."""
        rows = self.proxy.rowCount()
        if rows == 0:
            return
        current = self.view.currentIndex()
        row = current.row() + offset if current.isValid() else (0 if offset > 0 else rows - 1)
        self._make_current(self.proxy.index(max(0, min(rows - 1, row)), COL_SHOT))
