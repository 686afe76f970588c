"""The readout panel (right): the current shot's numbers, review status, notes and review buttons.

Per side: proposed and final separation angle, uncertainty and quality, and the difference
between the sides; the wake deflection and state; flight direction and speed; the shot's
metadata; the analyst's note. While a mark is dragged the final cell shows the live angle.
"""

from __future__ import annotations

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QAction, QFont, QKeySequence
from PySide6.QtWidgets import (
    QFormLayout,
    QFrame,
    QGridLayout,
    QGroupBox,
    QHBoxLayout,
    QLabel,
    QPlainTextEdit,
    QScrollArea,
    QSizePolicy,
    QToolButton,
    QVBoxLayout,
    QWidget,
)

from app.qt.icons import status_icon
from app.review import colours
from app.review.columns import decided_status, status_text
from app.review.model import ProcessState, ReviewStatus
from app.review.text import (
    MISSING,
    angle_text,
    ball_text,
    direction_text,
    geometry_text,
    layer_meaning,
    layer_text,
    outdated_uncertainty_note,
    proposal_remarks,
    quality_meaning,
    quality_text,
    reviewed_wake_text,
    reynolds_short_text,
    reynolds_text,
    speed_text,
    uncertainty_meaning,
    uncertainty_text,
    vectors_text,
)
from core.geometry import SIDES
from core.results import SideProposal

# the notes field's own keys (NoteEdit.keyPressEvent), for the F1 key list
NOTE_KEYS = (("Ctrl+Return / Esc", ("in the note field: save the note and hand the keys "
                                    "back to the list")),)
ROWS = ("proposed", "final", "uncertainty", "quality", "layer")
ROW_TIPS = {"layer": "the fitted shear layer: its departure from the wall's tangent and its "
                     "vorticity thickness at separation (hover a value for more)"}
PROBLEM_STYLE = (f"QLabel {{ background: #f6e3e6; color: {colours.STATUS_COLOURS['unusable']};"
                 " border-radius: 4px; padding: 6px; }")
NOTICE_STYLE = (f"QLabel {{ background: {colours.PAPER_TINT}; color: {colours.MUTED_INK};"
                " border-radius: 4px; padding: 6px; }")
LIVE_STYLE = f"color: {colours.STATUS_COLOURS['adjusted']}; font-weight: bold;"
CHECK_STYLE = ("QLabel { background: #fbefd9; color: #7a4b06; border-radius: 4px; "
               "padding: 6px; }")
CHECK_HINT = ("Ball ▸ Correct the ball's circles (Ctrl+B) or Set the flight direction… "
              "measures the shot again with yours.")


def _metadata_text(value) -> str:
    if isinstance(value, float):
        return f"{value:.6g}"
    return MISSING if value in (None, "") else str(value)


NOTE_PLACEHOLDER = "Notes on this shot (saved when you leave the field: Ctrl+Return or Esc)"


class NoteEdit(QPlainTextEdit):
    """Notes field: commits on leaving the field, Ctrl+Return or Escape; both keys also leave it,
    so the next key is a review key again, not a letter of the note."""

    committed = Signal(str)
    finished = Signal()  # Esc or Ctrl+Return: the window hands the keyboard back to the list

    def focusOutEvent(self, event) -> None:
        super().focusOutEvent(event)
        self.committed.emit(self.toPlainText())

    def keyPressEvent(self, event) -> None:
        ctrl = bool(event.modifiers() & Qt.KeyboardModifier.ControlModifier)
        if event.key() == Qt.Key.Key_Escape or (
                ctrl and event.key() in (Qt.Key.Key_Return, Qt.Key.Key_Enter)):
            self.committed.emit(self.toPlainText())
            self.finished.emit()
            if self.hasFocus():
                self.clearFocus()
            return
        super().keyPressEvent(event)


#: The panel's least width (px); wider where its numbers need it (``_keep_readable``).
MIN_WIDTH_PX = 280


class ReadoutPanel(QWidget):
    """Right panel. Review buttons run the window's actions (same shortcuts as the menu)."""

    note_committed = Signal(str)

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self._shot_id = ""
        self._record = None
        self._note_shown = ""
        self._keep_typed_note = False
        self._build()

    # -- construction ------------------------------------------------------------------------
    def _build(self) -> None:
        self.title = QLabel("no shot", self)
        font = QFont(self.title.font())
        font.setPointSizeF(font.pointSizeF() * 1.35)
        font.setBold(True)
        self.title.setFont(font)
        self.title.setWordWrap(True)  # a long shot id wraps rather than widening the panel
        self.status_icon = QLabel(self)
        self.status_label = QLabel(self)
        self.problem = QLabel(self)
        self.problem.setWordWrap(True)
        self.problem.setStyleSheet(PROBLEM_STYLE)
        self.problem.hide()
        self.checks = QLabel(self)
        self.checks.setWordWrap(True)
        self.checks.setStyleSheet(CHECK_STYLE)
        self.checks.setToolTip("the measured ball or flight disagrees with what else is known "
                               "of the shot: its manifest, the session's other shots, the "
                               "other frame's circle, the wake")
        self.checks.hide()
        self.notes = QLabel(self)  # what the measurement itself warned of
        self.notes.setWordWrap(True)
        self.notes.setStyleSheet(NOTICE_STYLE)
        self.notes.hide()
        head = QHBoxLayout()
        head.addWidget(self.title, 1)
        head.addWidget(self.status_icon)
        head.addWidget(self.status_label)

        content = self._content = QWidget(self)
        box = QVBoxLayout(content)
        box.setContentsMargins(6, 6, 6, 6)
        box.addLayout(head)
        box.addWidget(self.problem)
        box.addWidget(self.checks)
        box.addWidget(self.notes)
        self._angles = self._separation_group()
        box.addWidget(self._angles)
        box.addWidget(self._flight_group())
        self.meta_group = QGroupBox("Shot", content)
        self.meta_form = QFormLayout(self.meta_group)
        self.meta_form.setLabelAlignment(Qt.AlignmentFlag.AlignLeft)
        self.meta_form.setRowWrapPolicy(QFormLayout.RowWrapPolicy.WrapLongRows)
        box.addWidget(self.meta_group)
        box.addStretch(1)
        scroll = self._scroll = QScrollArea(self)
        scroll.setWidgetResizable(True)
        scroll.setFrameShape(QFrame.Shape.NoFrame)
        # squeezed below its numbers' width (a window too narrow for every panel's least width):
        # a scroll bar rather than cut-off numbers
        scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAsNeeded)
        scroll.setWidget(content)
        outer = QVBoxLayout(self)
        outer.setContentsMargins(0, 0, 6, 4)
        outer.addWidget(scroll, 1)
        # the decision and the note stay in sight below the scrolled readout, however low the
        # window
        outer.addWidget(self._review_group())
        self.setMinimumWidth(MIN_WIDTH_PX)

    def _keep_readable(self) -> None:
        """However narrow the window, the panel keeps the width the angles' two columns need:
        a low window scrolls the readout, but no number is cut off at its side (the picture
        gives up the room instead). Only the angles count: a long shot id or manifest column
        wraps rather than widening the panel."""
        self._content.layout().activate()  # the new texts' sizes, not the last shot's
        margins = self._content.layout().contentsMargins()
        need = (self._angles.minimumSizeHint().width() + margins.left() + margins.right()
                + self._scroll.verticalScrollBar().sizeHint().width()
                + sum(self.layout().getContentsMargins()[::2]))
        self.setMinimumWidth(max(MIN_WIDTH_PX, need))

    def _separation_group(self) -> QGroupBox:
        # the convention in the header row, the rest on hovering: a low window keeps its room
        # for the angles and the review buttons
        group = QGroupBox("Separation angle")
        group.setToolTip("degrees from the plane through the ball centre normal to the flight; "
                         "positive = rearward (downstream); from the front stagnation point "
                         "add 90°. ± holds the true angle in 95 % of proposals; quality falls "
                         "as ± widens (hover over a row for how)")
        grid = QGridLayout(group)
        grid.setHorizontalSpacing(14)
        self.cells: dict[tuple[str, str], QLabel] = {}
        convention = QLabel("deg, + rearward", group)
        convention.setStyleSheet(f"color: {colours.MUTED_INK};")
        grid.addWidget(convention, 0, 0)
        for col, side in enumerate(SIDES, start=1):
            head = QLabel(side, group)
            head.setStyleSheet(f"color: {_side_colour(side)}; font-weight: bold;")
            head.setAlignment(Qt.AlignmentFlag.AlignRight)
            grid.addWidget(head, 0, col)
        for row, name in enumerate(ROWS, start=1):
            label = QLabel(name, group)
            label.setToolTip(ROW_TIPS.get(name, ""))
            grid.addWidget(label, row, 0)
            for col, side in enumerate(SIDES, start=1):
                cell = QLabel("—", group)
                cell.setAlignment(Qt.AlignmentFlag.AlignRight)
                cell.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
                self.cells[(name, side)] = cell
                grid.addWidget(cell, row, col)
        self.difference = QLabel("—", group)
        self.wake = QLabel("—", group)
        self.wake.setWordWrap(True)
        grid.addWidget(QLabel("upper − lower", group), len(ROWS) + 1, 0)
        grid.addWidget(self.difference, len(ROWS) + 1, 1, 1, 2, Qt.AlignmentFlag.AlignRight)
        grid.addWidget(QLabel("wake", group), len(ROWS) + 2, 0)
        grid.addWidget(self.wake, len(ROWS) + 2, 1, 1, 2, Qt.AlignmentFlag.AlignRight)
        # the regime the angles belong to (laminar or turbulent separation), in view with them
        # rather than below the fold of a low window
        self.reynolds = QLabel("—", group)
        self.reynolds.setWordWrap(True)
        self.reynolds.setAlignment(Qt.AlignmentFlag.AlignRight)
        grid.addWidget(QLabel("Reynolds", group), len(ROWS) + 3, 0)
        grid.addWidget(self.reynolds, len(ROWS) + 3, 1, 1, 2, Qt.AlignmentFlag.AlignRight)
        grid.setColumnStretch(0, 1)
        return group

    def _flight_group(self) -> QGroupBox:
        group = QGroupBox("Flight and ball")
        form = QFormLayout(group)
        self.flight_dir = QLabel("—", group)
        self.flight_speed = QLabel("—", group)
        self.ball_size = QLabel("—", group)
        self.vectors = QLabel("—", group)
        self.by_hand = QLabel("", group)
        self.by_hand.setStyleSheet(f"color: {colours.STATUS_COLOURS['adjusted']};")
        for label in (self.flight_dir, self.flight_speed, self.ball_size, self.vectors,
                      self.by_hand):
            label.setWordWrap(True)
        form.addRow("direction", self.flight_dir)
        form.addRow("speed", self.flight_speed)
        form.addRow("ball", self.ball_size)
        form.addRow("vectors", self.vectors)
        form.addRow("", self.by_hand)
        return group

    def _review_group(self) -> QGroupBox:
        group = QGroupBox("Review")
        box = QVBoxLayout(group)
        grid = QGridLayout()
        self.buttons: dict[str, QToolButton] = {}
        for index, key in enumerate((ReviewStatus.ACCEPTED, ReviewStatus.ADJUSTED,
                                     ReviewStatus.UNUSABLE, ReviewStatus.TO_REVIEW)):
            button = QToolButton(group)
            button.setToolButtonStyle(Qt.ToolButtonStyle.ToolButtonTextBesideIcon)
            button.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Fixed)
            self.buttons[key] = button
            grid.addWidget(button, index // 2, index % 2)
        box.addLayout(grid)
        self.reason = QLabel(group)
        self.reason.setWordWrap(True)
        box.addWidget(self.reason)
        self.note = NoteEdit(group)
        self.note.setPlaceholderText(NOTE_PLACEHOLDER)
        self.note.setFixedHeight(72)
        self.note.committed.connect(self._on_note_committed)
        box.addWidget(self.note)
        self.last_edit = QLabel(group)
        self.last_edit.setWordWrap(True)  # a long analyst name must not widen the panel
        self.last_edit.setStyleSheet(f"color: {colours.MUTED_INK};")
        box.addWidget(self.last_edit)
        return group

    def set_actions(self, actions: dict[str, QAction]) -> None:
        """Give each review button its window action (status -> QAction)."""
        for key, action in actions.items():
            button = self.buttons[key]
            button.setDefaultAction(action)
            shortcut = action.shortcut().toString(QKeySequence.SequenceFormat.NativeText)
            button.setToolTip(f"{action.toolTip()} ({shortcut})" if shortcut else action.toolTip())

    # -- showing -----------------------------------------------------------------------------
    @property
    def shot_id(self) -> str:
        return self._shot_id

    def show_record(self, record) -> None:
        """Fill the panel from a ``ShotRecord`` (None: empty); reads no field data.

        A note being typed is never thrown away: moving to another shot saves it for the shot
        it was typed on; a refresh of the same shot (an edit, processing) leaves it in the
        field, to be saved when the field is left.
        """
        new_id = "" if record is None else record.shot_id
        typed = self._unsaved_note()
        if typed is not None and new_id != self._shot_id:
            self._on_note_committed(typed)
        self._keep_typed_note = typed is not None and new_id == self._shot_id
        self._shot_id = new_id
        self._record = record
        if record is None:
            self._clear()
            return
        self.title.setText(f"Shot {record.shot_id}")
        status = status_text(record)
        if (decided := decided_status(record)) is not None:
            self.status_icon.setPixmap(status_icon(decided).pixmap(18, 18))
        else:  # not processed (or failed) yet: nothing decided, no status icon
            self.status_icon.clear()
        self.status_label.setText(status)
        self._show_problem(record)
        self._show_notes(record)
        self._show_angles(record)
        self._show_wake(record)
        self._show_flight(record)
        self._show_metadata(record.metadata)
        self._show_review(record)
        self._keep_readable()

    def show_live(self, side: str, angle_deg: float) -> None:
        """While a mark is dragged: the final cell and the difference follow the live angle."""
        cell = self.cells[("final", side)]
        cell.setText(angle_text(angle_deg))
        cell.setStyleSheet(LIVE_STYLE)
        record = self._record
        if record is None:
            return
        other = "lower" if side == "upper" else "upper"
        other_deg = record.final_deg(other)
        if other_deg is None:
            other_deg = record.proposed_deg(other)
        if other_deg is not None:
            diff = angle_deg - other_deg if side == "upper" else other_deg - angle_deg
            self.difference.setText(f"{angle_text(diff)} (moving)")
            self.difference.setStyleSheet(LIVE_STYLE)
        self.wake.setText(reviewed_wake_text(record, moving={side: angle_deg}))
        self.wake.setStyleSheet(LIVE_STYLE)

    def show_checks(self, lines: list[str]) -> None:
        """Where the shot's ball and flight disagree with what else is known (none: hidden)."""
        text = "Check the ball and flight:\n" + "\n".join(f"• {line}" for line in lines)
        self.checks.setText(f"{text}\n{CHECK_HINT}" if lines else "")
        self.checks.setVisible(bool(lines))

    def show_current(self) -> None:
        """Show the last record again (after a cancelled drag)."""
        self.show_record(self._record)

    def live_text(self, side: str) -> str:
        return self.cells[("final", side)].text()

    def _clear(self) -> None:
        self.title.setText("no shot")
        self.status_icon.clear()
        self.status_label.clear()
        self.problem.hide()
        self.checks.hide()
        self.notes.hide()
        for cell in self.cells.values():
            cell.setText("—")
            cell.setStyleSheet("")
        for label in (self.difference, self.wake, self.flight_dir, self.flight_speed,
                      self.ball_size, self.vectors):
            label.setText("—")
        self._show_metadata({})
        self.reason.clear()
        self._set_note("")
        self.last_edit.clear()
        self._keep_readable()

    def _show_problem(self, record) -> None:
        if record.state == ProcessState.FAILED:
            text = f"Processing failed: {record.failure or 'no reason given'}"
            if record.summary:
                text += "\nThe numbers below are from the last run that succeeded."
            self.problem.setStyleSheet(PROBLEM_STYLE)
        elif record.state == ProcessState.UNPROCESSED:
            text = "Not processed yet."
            self.problem.setStyleSheet(NOTICE_STYLE)
        else:
            text = ""
        self.problem.setText(text)
        self.problem.setVisible(bool(text))

    def _show_notes(self, record) -> None:
        summary = record.summary
        warnings = proposal_remarks(summary) + ([] if summary is None else [
            w for w in summary.warnings if w not in summary.ball_warnings])
        outdated = outdated_uncertainty_note(record)
        if outdated:
            warnings.append(outdated)
        text = "From the measurement:\n" + "\n".join(f"• {w}" for w in warnings)
        self.notes.setText(text if warnings else "")
        self.notes.setVisible(bool(warnings))

    def _show_angles(self, record) -> None:
        for side in SIDES:
            detail = SideProposal(None) if record.summary is None else record.summary.side(side)
            final = record.final_deg(side) if record.pick.status != ReviewStatus.UNUSABLE else None
            values = {
                "proposed": angle_text(detail.angle_deg),
                "final": angle_text(final),
                "uncertainty": uncertainty_text(detail.uncertainty_deg),
                "quality": quality_text(detail.quality if detail.angle_deg is not None
                                        else None),  # no proposal, no quality of it
                "layer": layer_text(detail),
            }
            for name, text in values.items():
                self.cells[(name, side)].setText(text)
                self.cells[(name, side)].setStyleSheet("")
            self.cells[("proposed", side)].setToolTip(detail.reason)
            self.cells[("uncertainty", side)].setToolTip(uncertainty_meaning(detail))
            self.cells[("quality", side)].setToolTip(quality_meaning(detail))
            self.cells[("layer", side)].setToolTip(layer_meaning(
                detail, None if record.summary is None else record.summary.scale_mm_per_px))
        self.difference.setText(self._difference_text(record))
        self.difference.setStyleSheet("")

    @staticmethod
    def _difference_text(record) -> str:
        finals = [record.final_deg(s) for s in SIDES]
        if record.pick.status != ReviewStatus.UNUSABLE and None not in finals:
            return f"{angle_text(finals[0] - finals[1])} (final)"
        proposed = [record.proposed_deg(s) for s in SIDES]
        if None not in proposed:
            return f"{angle_text(proposed[0] - proposed[1])} (proposed)"
        return MISSING

    def _show_wake(self, record) -> None:
        self.wake.setText(reviewed_wake_text(record))
        self.wake.setStyleSheet("")

    def _show_flight(self, record) -> None:
        summary = record.summary
        flight = None if summary is None else summary.flight
        self.flight_dir.setText(direction_text(flight))
        self.flight_speed.setText(speed_text(None if flight is None else flight.speed_m_s))
        self.ball_size.setText(MISSING if summary is None else ball_text(summary))
        self.reynolds.setText(MISSING if summary is None else reynolds_short_text(summary))
        self.reynolds.setToolTip("" if summary is None else reynolds_text(summary))
        self.vectors.setText(MISSING if summary is None else vectors_text(summary.vectors))
        self.by_hand.setText(geometry_text(record.pick))
        self.by_hand.setVisible(bool(self.by_hand.text()))

    def _show_metadata(self, metadata: dict) -> None:
        while self.meta_form.rowCount():
            self.meta_form.removeRow(0)
        for key in sorted(metadata):
            if key == "shot":
                continue
            label = QLabel(_metadata_text(metadata[key]), self.meta_group)
            label.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
            label.setWordWrap(True)
            self.meta_form.addRow(key, label)

    def _show_review(self, record) -> None:
        pick = record.pick
        if pick.status == ReviewStatus.UNUSABLE:
            self.reason.setText(f"Unusable: {pick.reason}")
        else:
            self.reason.clear()
        self.reason.setVisible(bool(self.reason.text()))
        self._set_note(pick.note)
        lines = [f"{pick.status} {_stamp(pick.when)} by {pick.who}"] if pick.when else []
        if pick.note and pick.note_when:  # the note has its own author and time
            lines.append(f"note {_stamp(pick.note_when)} by {pick.note_who}")
        self.last_edit.setText("\n".join(lines))

    def _unsaved_note(self) -> str | None:
        text = self.note.toPlainText()
        return text if self._shot_id and text != self._note_shown else None

    def _set_note(self, text: str) -> None:
        self._note_shown = text
        if not self._keep_typed_note and self.note.toPlainText() != text:
            self.note.setPlainText(text)

    def _on_note_committed(self, text: str) -> None:
        if self._shot_id and text != self._note_shown:
            self._note_shown = text
            self.note_committed.emit(text)

    def save_typed_note(self) -> None:
        """Save a note being typed now (the session is about to close or be replaced: the
        field would not be left first)."""
        typed = self._unsaved_note()
        if typed is not None:
            self._on_note_committed(typed)

    def keep_unsaved_note(self, shot_id: str, text: str) -> None:
        """A note whose save was refused stays in the field, still unsaved, to be saved when
        the field is next left (the refusal showed the stored note)."""
        if shot_id == self._shot_id and self._record is not None:
            self._note_shown = self._record.pick.note
            self.note.setPlainText(text)

    def set_read_only(self, read_only: bool) -> None:
        """A read-only session's notes can be read, not typed (they could not be saved)."""
        self.note.setReadOnly(read_only)
        self.note.setPlaceholderText("No notes (read-only session)" if read_only
                                     else NOTE_PLACEHOLDER)


def _stamp(when: str) -> str:
    """``2026-12-02 05:03 UTC`` from the stored ISO time."""
    return f"{when[:16].replace('T', ' ')} UTC" if when else ""


def _side_colour(side: str) -> str:
    return colours.UPPER_SIDE if side == "upper" else colours.LOWER_SIDE
