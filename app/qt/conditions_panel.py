"""The statistics dock: the session's conditions (shots grouped by chosen manifest columns) with
their statistics, the ensemble view of one condition, and how an imported second review agrees.

``install_statistics(window)`` docks the panel beside the session overview and wires it to the
window's ``SessionModel`` (the only way it reaches the store): clicking a condition selects its
shots in the shot list (the first becomes current); "Ensemble view" correlates the condition's
shots as one in the background and shows the result like a shot (``app.qt.ensemble_view``);
"Import review…" reads another analyst's table into a layer of the session, whose marks the
canvas then shows (``app.qt.analyst_marks``).
"""

from __future__ import annotations

from PySide6.QtCore import QItemSelectionModel, Qt, QTimer, Signal
from PySide6.QtGui import QAction
from PySide6.QtWidgets import (
    QAbstractItemView,
    QDockWidget,
    QFileDialog,
    QFrame,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QMenu,
    QPushButton,
    QScrollArea,
    QSplitter,
    QTableWidget,
    QTableWidgetItem,
    QToolButton,
    QVBoxLayout,
    QWidget,
)

from app.qt.docks import dock_action
from app.qt.workers import BackgroundJob, JobOutcome
from app.review import colours
from app.review.conditions import (
    TABLE_HEADER,
    common_text,
    condition_cells,
    ensemble_cell_text,
)
from core import WakelineError
from core.agreement import agreement_lines, compare_reviews, latest_layer
from core.conditions import CONFIDENCE, grouping_columns

ENSEMBLE_HEADER = "ensemble"
#: What an ensemble cell without a result says (it is computed on request only: it correlates
#: every shot of the condition again).
ENSEMBLE_NOT_YET = ("not computed for this session yet: select the condition and press "
                    "Ensemble view")
GROUPING_WIDTH_PX = 200  # the grouping button's text at most


def _shots_tip(condition) -> str:
    """``shots s01, s02, s03; left out s02 (unusable or no angle)``."""
    tip = f"shots {', '.join(condition.shot_ids)}"
    if condition.left_out_ids:
        tip += f"; left out {', '.join(condition.left_out_ids)} (unusable or no angle)"
    return tip


class StatisticsPanel(QWidget):
    """Conditions table, grouping chooser, ensemble and review buttons, agreement lines.

    Signals
    -------
    shots_chosen(list)
        The shot ids of a clicked condition.
    ensemble_asked(object)
        The condition (``core.conditions.Condition``) whose ensemble view was asked for.
    review_asked()
        "Import review…" was pressed.
    problem(str)
        A change the store refused, in one line.
    """

    shots_chosen = Signal(list)
    ensemble_asked = Signal(object)
    review_asked = Signal()
    problem = Signal(str)

    def __init__(self, model, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.model = model
        self.conditions: list = []
        self.ensembles: dict = {}  # condition label -> EnsembleView, for this session
        self._refresh_timer = QTimer(self)
        self._refresh_timer.setSingleShot(True)
        self._refresh_timer.setInterval(60)
        self._refresh_timer.timeout.connect(self.refresh)
        self.group_button = QToolButton(self)
        self.group_button.setPopupMode(QToolButton.ToolButtonPopupMode.InstantPopup)
        self.group_menu = QMenu(self.group_button)
        self.group_button.setMenu(self.group_menu)
        self.method_label = QLabel(
            f"mean ± half-width of the {CONFIDENCE:.0%} interval (Student t on the "
            "shot-to-shot spread, or the shots' own mean ± over √n where wider: \"shots' ±\"; "
            "one shot: its own ±); final angle, else the proposal; unusable shots left out",
            self)
        self.method_label.setStyleSheet(f"color: {colours.MUTED_INK};")
        self.method_label.setWordWrap(True)  # more lines in a narrow window, not a wider one
        self.table = QTableWidget(0, len(TABLE_HEADER) + 1, self)
        self.table.setHorizontalHeaderLabels([*TABLE_HEADER, ENSEMBLE_HEADER])
        self.table.horizontalHeaderItem(len(TABLE_HEADER)).setToolTip(
            "the ensemble's pick (one layer fitted to all the condition's launches), computed "
            "on request: select a condition and press Ensemble view")
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.table.verticalHeader().setVisible(False)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Interactive)
        self.table.horizontalHeader().setStretchLastSection(True)
        self.table.itemSelectionChanged.connect(self._on_row_chosen)
        self.ensemble_button = QPushButton("Ensemble view", self)
        self.ensemble_button.setToolTip(
            "align the condition's shots on the ball, correlate them as one and propose the "
            "condition's separation from the mean near-wall flow (select a condition first)")
        self.ensemble_button.clicked.connect(self._ask_ensemble)
        self.review_button = QPushButton("Import review…", self)
        self.review_button.setToolTip("another analyst's table of the same shots, kept as a "
                                      "separate layer; their marks show on the canvas")
        self.review_button.clicked.connect(self.review_asked)
        self.agreement_label = QLabel(self)
        self.agreement_label.setWordWrap(True)
        self.agreement_label.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        top = QHBoxLayout()
        top.addWidget(QLabel("Group by:", self))
        top.addWidget(self.group_button)
        top.addWidget(self.method_label, 1)
        top.addWidget(self.ensemble_button)
        top.addWidget(self.review_button)
        self.agreement_label.setAlignment(Qt.AlignmentFlag.AlignTop | Qt.AlignmentFlag.AlignLeft)
        # the agreement beside the table, scrolled when long: below it, a long one left the
        # table two rows in a dock of ordinary height
        self.agreement_pane = agreement = QScrollArea(self)
        agreement.setWidget(self.agreement_label)
        agreement.setWidgetResizable(True)
        agreement.setFrameShape(QFrame.Shape.NoFrame)
        beside = QSplitter(Qt.Orientation.Horizontal, self)
        beside.addWidget(self.table)
        beside.addWidget(agreement)
        beside.setStretchFactor(0, 3)
        beside.setStretchFactor(1, 2)
        beside.setSizes([600, 400])  # the table's whole width would leave the text a sliver
        beside.setChildrenCollapsible(False)
        box = QVBoxLayout(self)
        box.setContentsMargins(4, 4, 4, 4)
        box.addLayout(top)
        box.addWidget(beside, 1)

    # -- showing -------------------------------------------------------------------------------
    def refresh_soon(self, *_args) -> None:
        self._refresh_timer.start()

    def refresh(self) -> None:
        """Rebuild the grouping menu, the table and the agreement from the model."""
        self.conditions = self.model.conditions() if self.model.session is not None else []
        self._fill_group_menu(self.model.conditions_by())
        selected = self.selected_condition()
        blocker = self.table.blockSignals(True)
        self.table.setRowCount(len(self.conditions))
        for row, condition in enumerate(self.conditions):
            cells = [*condition_cells(condition, self.conditions),
                     self._ensemble_cell(condition)]
            for col, text in enumerate(cells):
                item = QTableWidgetItem(text)
                ensemble_col = col == len(cells) - 1
                item.setToolTip(_shots_tip(condition) if col == 0 else
                                ENSEMBLE_NOT_YET if ensemble_col and not text else text)
                self.table.setItem(row, col, item)
            if selected is not None and condition.label == selected.label:
                self.table.selectRow(row)
        self.table.blockSignals(blocker)
        self.table.resizeColumnsToContents()
        self.ensemble_button.setEnabled(self.selected_condition() is not None)
        self.review_button.setEnabled(self.model.session is not None
                                      and not self.model.read_only)
        self._show_agreement()

    def _fill_group_menu(self, chosen: list[str]) -> None:
        self.group_menu.clear()
        for column in grouping_columns(self.model.records()):
            action = QAction(column, self.group_menu)
            action.setCheckable(True)
            action.setChecked(column in chosen)
            action.toggled.connect(lambda on, c=column: self._toggle_column(c, on))
            self.group_menu.addAction(action)
        grouping = ", ".join(chosen) or "nothing (all shots together)"
        # a long grouping is shortened on the button (whole in its tip), not widening the window
        self.group_button.setText(self.group_button.fontMetrics().elidedText(
            grouping, Qt.TextElideMode.ElideRight, GROUPING_WIDTH_PX))
        same = common_text(self.conditions)
        self.group_button.setToolTip(f"grouped by {grouping}; " + (
            f"every condition: {same}" if same else
            "manifest columns whose values make a condition (kept in the session)"))

    def _toggle_column(self, column: str, on: bool) -> None:
        columns = [c for c in self.model.conditions_by() if c != column]
        if on:
            order = grouping_columns(self.model.records())
            columns = sorted([*columns, column], key=order.index)
        try:
            self.model.set_conditions_by(columns)
        except WakelineError as exc:
            self.problem.emit(str(exc))

    def _ensemble_cell(self, condition) -> str:
        return ensemble_cell_text(condition, self.ensembles.get(condition.label))

    def _show_agreement(self) -> None:
        layer = latest_layer(self.model.review_layers())
        # without a second review the table takes the dock's width (Import review… is beside)
        self.agreement_pane.setVisible(layer is not None)
        if layer is None:
            self.agreement_label.setText("No second review imported.")
            return
        agreement = compare_reviews(self.model.records(), layer)
        self.agreement_label.setText("\n".join(agreement_lines(agreement)))

    # -- choosing ------------------------------------------------------------------------------
    def selected_condition(self):
        rows = {index.row() for index in self.table.selectedIndexes()}
        if len(rows) != 1:
            return None
        row = rows.pop()
        return self.conditions[row] if row < len(self.conditions) else None

    def choose(self, row: int) -> None:
        """Select the condition in ``row`` (as a click does)."""
        self.table.selectRow(row)

    def _on_row_chosen(self) -> None:
        condition = self.selected_condition()
        self.ensemble_button.setEnabled(condition is not None)
        if condition is not None:
            self.shots_chosen.emit(list(condition.shot_ids))

    def _ask_ensemble(self) -> None:
        condition = self.selected_condition()
        if condition is not None:
            self.ensemble_asked.emit(condition)

    def set_ensemble(self, condition, view) -> None:
        self.ensembles[condition.label] = view
        self.refresh()


def select_shots(window, shot_ids: list[str]) -> None:
    """Select ``shot_ids`` in the window's shot list (those its filter shows); the first shown
    becomes the current shot."""
    shot_list = window.shot_list
    shown = [s for s in shot_list.visible_ids() if s in set(shot_ids)]
    if not shown:
        window.statusBar().showMessage("The shot list's filter hides this condition's shots.",
                                       5000)
        return
    window.model.set_current(shown[0])
    selection = shot_list.view.selectionModel()
    flags = QItemSelectionModel.SelectionFlag.Select | QItemSelectionModel.SelectionFlag.Rows
    for shot_id in shown[1:]:
        row = shot_list.table_model.row_of(shot_id)
        index = shot_list.proxy.mapFromSource(shot_list.table_model.index(row, 0))
        selection.select(index, flags)


def install_statistics(window) -> StatisticsPanel:
    """Dock the statistics panel beside the session overview and wire it to the model."""
    from app.qt.ensemble_view import show_ensemble

    panel = StatisticsPanel(window.model, window)
    dock = QDockWidget("Conditions", window)
    dock.setObjectName("statistics_dock")
    dock.setWidget(panel)
    window.addDockWidget(Qt.DockWidgetArea.BottomDockWidgetArea, dock)
    overview_dock = getattr(window, "overview_dock", None)
    if overview_dock is not None:
        window.tabifyDockWidget(overview_dock, dock)
        overview_dock.raise_()
    toggle = dock_action(window, dock, "&Conditions and agreement",
                         "statistics per condition, the ensemble view, a second review")
    view_menu = getattr(window, "view_menu", None)
    if view_menu is not None:
        view_menu.addAction(toggle)
    model = window.model
    model.session_changed.connect(lambda: panel.ensembles.clear())
    for signal in (model.session_changed, model.record_changed, model.conditions_changed):
        signal.connect(panel.refresh_soon)
    panel.shots_chosen.connect(lambda ids: select_shots(window, ids))
    panel.ensemble_asked.connect(lambda condition: start_ensemble(window, condition))
    panel.review_asked.connect(lambda: import_review_dialog(window))
    panel.problem.connect(lambda text: window.show_problem("Grouping not saved", text))
    window.statistics, window.statistics_dock = panel, dock
    window.show_ensemble = lambda condition, view: show_ensemble(window, condition, view)
    return panel


def start_ensemble(window, condition) -> BackgroundJob | None:
    """Compute the ensemble view of ``condition`` in the background, then show it."""
    if window.job is not None:
        window.show_problem("Busy", "Wait for the running job to finish or cancel it.")
        return None
    model = window.model
    ids = list(condition.usable_ids)

    def run(report, should_stop):
        from core.piv import Cancelled

        try:
            return model.ensemble(ids, should_stop, report)
        except Cancelled:
            return None

    job = BackgroundJob(run, window)
    job.item_done.connect(lambda item: _on_progress(window, item))
    job.finished.connect(lambda outcome: _on_ensemble_done(window, condition, outcome))
    window._start_job(job, f"Ensemble of {condition.label}", 0)
    return job


def _on_progress(window, item) -> None:
    done, total, message = item
    window.progress.setRange(0, total)
    window.progress.setValue(done)
    window.progress_label.setText(f"Ensemble: {message}")


def _on_ensemble_done(window, condition, outcome: JobOutcome) -> None:
    window._end_job()
    if outcome.error:
        window.show_problem("Ensemble view", outcome.error)
        return
    if outcome.value is None:
        window.statusBar().showMessage("Ensemble view cancelled.", 5000)
        return
    window.statistics.set_ensemble(condition, outcome.value)
    window.show_ensemble(condition, outcome.value)


def import_review_dialog(window, path: str | None = None) -> None:
    """Ask for another analyst's table (CSV) and keep it as a layer of the session."""
    if window.model.session is None:
        return
    if path is None:
        folder = str(window.model.path.parent)
        path, _ = QFileDialog.getOpenFileName(window, "Import another analyst's review", folder,
                                              "CSV tables (*.csv);;All files (*)")
    if not path:
        return
    try:
        layer = window.model.read_review(path)
        earlier = window.model.review_layers().get(layer.name)
        if earlier is not None and window.ask(
                "Replace a review?",
                f"The session already holds a review by {layer.name!r} ({len(earlier.picks)} "
                f"shots, from {earlier.source}). Replace it with this one "
                f"({len(layer.picks)} shots, from {layer.source})?",
                ("Replace it", "Keep the earlier one")) != 0:
            return
        window.model.keep_review(layer)
    except (WakelineError, OSError) as exc:
        window.show_problem("Import review", str(exc))
        return
    window.statusBar().showMessage(
        f"Review {layer.name!r} of {len(layer.picks)} shots imported; its marks show on the "
        "canvas.", 8000)
