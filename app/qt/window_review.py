"""The review window's review: showing the current shot on the canvas and the readout, and the
analyst's edits (decisions on one or several shots, nudges, dragged marks, notes) as undoable
commands. A part of ``MainWindow`` (``app.qt.window``).
"""

from __future__ import annotations

import logging

from PySide6.QtWidgets import QInputDialog, QMessageBox

from app.qt.canvas import CanvasShot
from app.qt.commands import MarkMove, PickEdit, PicksEdit
from app.review.columns import reviewable
from app.review.marks import mark_angles, moved_from_proposal
from app.review.model import ProcessState, ResultUnreadable, ReviewStatus, pick_values
from app.review.text import OTHER_REASON, UNUSABLE_REASONS, angle_text
from core import WakelineError
from core.geometry import SIDES

log = logging.getLogger("wakeline.window")


def decision_note(record, read_only: bool = False) -> str:
    """What the canvas says of the review's decision: an unusable shot's marks look like any
    other shot's, so its reason is shown over the picture (with the key that undoes it where
    the session can be written)."""
    if record.pick.status != ReviewStatus.UNUSABLE:
        return ""
    undo = "" if read_only else " — R puts it back to review"
    return f"Unusable: {record.pick.reason or 'no reason given'}{undo}."


class ReviewActions:
    """Showing and reviewing the current shot (mixed into ``MainWindow``)."""

    def _on_session_changed(self) -> None:
        self._shown_key = None
        self.canvas.keep_for_comparison(None)
        self._update_title()
        self._update_enabled()
        if self.model.session is None:
            self.canvas.show_shot(None)
            self.readout.show_record(None)

    def _on_current_changed(self, shot_id: str) -> None:
        previous = self._previous_id
        self._previous_id = shot_id
        self._show_current(full=True)
        self._update_enabled()
        self._remember_last_shot(shot_id)
        if shot_id:
            # read the next shot in the direction of travel while the analyst looks at this one
            back = bool(previous) and self.shot_list.neighbour(shot_id, 1) == previous
            self._prefetch_id = self.shot_list.neighbour(shot_id, -1 if back else 1)
            self._prefetch_timer.start()

    def _prefetch(self) -> None:
        if self.job is None:  # while processing, leave the session file to the worker
            self.model.prefetch(self._prefetch_id)

    def _on_record_changed(self, shot_id: str) -> None:
        if shot_id == self.model.current_id:
            self._show_current(full=False)
            self._update_enabled()
        reference = self.canvas.reference
        if reference is not None and reference.shot_id == shot_id:
            self.canvas.update_reference_marks(*mark_angles(self.model.record(shot_id)))

    def _on_edit_replayed(self, shot_ids: list, said: str) -> None:
        """An undo or redo changed these shots: the first becomes current when the one shown
        is not among them, so the analyst sees what changed (or is told the filter hides it)."""
        if self.model.current_id not in shot_ids:
            shown = set(self.shot_list.visible_ids())
            if any(shot_id in shown for shot_id in shot_ids):
                self.shot_list.select_ids(shot_ids)
            else:
                said += " (the shot list's filter hides it)"
        self.statusBar().showMessage(said, 6000)

    def keep_for_comparison(self) -> None:
        """Keep the current shot beside the others for comparison; on the kept shot, let go."""
        shot_id = self.model.current_id
        reference = self.canvas.reference
        if not shot_id or (reference is not None and reference.shot_id == shot_id):
            self.canvas.keep_for_comparison(None)
            return
        self.canvas.keep_for_comparison(self._canvas_shot(self.model.record(shot_id)))
        self.statusBar().showMessage(f"Shot {shot_id} kept on the right: step to another shot "
                                     "to compare; K on it again lets it go.", 8000)

    def _show_current(self, full: bool) -> None:
        shot_id = self.model.current_id
        if not shot_id:
            self._shown_key = None
            self.canvas.show_shot(None)
            self.readout.show_record(None)
            return
        record = self.model.record(shot_id)
        key = (shot_id, record.state, record.processed_utc, record.fingerprint)
        if full or key != self._shown_key:
            shot = self._canvas_shot(record)
            self.canvas.show_shot(shot)
            self._shown_key = key
        else:
            self.canvas.update_marks(*mark_angles(record), editable=self._editable(record),
                                     decision_note=decision_note(record, self.model.read_only))
        self.readout.show_record(record)
        self.readout.show_checks(self.model.checks(shot_id))

    def _canvas_shot(self, record) -> CanvasShot:
        messages = []
        result = None
        if record.state == ProcessState.FAILED:
            messages.append(f"Processing failed: {record.failure or 'no reason given'}")
        if record.state != ProcessState.UNPROCESSED:  # a failed shot: its last good run's
            try:
                result = self.model.result(record.shot_id)
            except (WakelineError, OSError, KeyError) as exc:  # a damaged stored result
                # log text only: a kept exception would hold this window through its traceback
                log.warning("shot %s: stored result unreadable: %s", record.shot_id, str(exc))
                # the store's own words name the shot and the damage; the fix in the window's
                messages.append(
                    f"{exc.damage}; reprocess it (Ctrl+Shift+P)"
                    if isinstance(exc, ResultUnreadable) else
                    f"shot {record.shot_id}: stored result cannot be read ({exc}); "
                    "reprocess it (Ctrl+Shift+P)")
            if record.state == ProcessState.FAILED and result is not None:
                messages.append("Shown: the last run that succeeded.")
        else:
            messages.append("Not processed yet" + (
                " — processing is running." if self.job is not None else
                " — use Process ▸ Process shots that need it (Ctrl+P)."))
        frame_a = frame_b = None
        try:
            frame_a, frame_b = self.model.frames(record.shot_id)
        except (WakelineError, OSError) as exc:
            if str(exc) not in record.failure:  # the failure may be this very problem
                messages.append(str(exc))
        proposed, final = mark_angles(record)
        return CanvasShot(
            shot_id=record.shot_id, frame_a=frame_a, frame_b=frame_b, result=result,
            proposed_deg=proposed, final_deg=final, message="\n".join(messages),
            decision_note=decision_note(record, self.model.read_only),
            editable=self._editable(record),
        )

    def _editable(self, record) -> bool:
        return (not self.model.read_only and record.pick.status != ReviewStatus.UNUSABLE
                and not self.measuring_again(record.shot_id))

    def _waiting_for_measurement(self, shot_ids: list[str]) -> list[str]:
        """Those of ``shot_ids`` being measured again after a correction of their ball, said
        in the status bar: their marks and decisions wait for the new proposals."""
        waiting = [s for s in shot_ids if self.measuring_again(s)]
        if waiting:
            self.statusBar().showMessage(
                f"Shot {waiting[0]} is being measured again with its corrected ball: its marks "
                "and decision wait for the new proposals.", 6000)
        return waiting

    # -- review edits ------------------------------------------------------------------------
    def _can_edit(self) -> bool:
        return bool(self.model.current_id) and not self.model.read_only

    def _push(self, command) -> bool:
        """Apply an edit (saved at once) and put it on the undo stack; report a refusal."""
        try:
            command.apply()
        except WakelineError as exc:
            self.show_problem("Edit not saved", str(exc))
            self._show_current(full=False)
            return False
        self.undo_stack.push(command)
        return True

    def decision_targets(self) -> list[str]:
        """The shots a decision key applies to: the selected ones when several are selected
        (the current one among them), else the current shot."""
        selected = self.shot_list.selected_ids()
        current = self.model.current_id
        return selected if len(selected) > 1 and current in selected else [current]

    def set_status(self, status: ReviewStatus, reason: str | None = None) -> None:
        """Decide the current shot, or every selected shot as one undo step: accepted, adjusted,
        unusable (asks a reason) or back to review. Then, when that setting is on, the next
        shot still to review becomes current."""
        if not self._can_edit():
            return
        order, current = self.shot_list.visible_ids(), self.model.current_id
        targets = self.decision_targets()
        waiting = self._waiting_for_measurement(targets)
        records = [self.model.record(s) for s in targets if s not in waiting]
        if not records:
            return
        if status in (ReviewStatus.ACCEPTED, ReviewStatus.ADJUSTED):
            records = [r for r in records if r.summary is not None]  # nothing proposed yet
        if status == ReviewStatus.ACCEPTED:
            records = self._accepting(records)
            if records is None:
                self.statusBar().showMessage("Kept the marks you moved.", 5000)
                return
        if status == ReviewStatus.UNUSABLE and records:
            reason = reason or self._ask_reason(records[0].pick.reason, len(records))
            if not reason:
                return
        edits = {}
        for record in records:
            changes = self._decision(record, status, reason)
            current = pick_values(record.pick)
            if any(current[k] != v for k, v in changes.items()):
                edits[record.shot_id] = changes
        if edits:
            text = (f"Mark {len(edits)} shots {status}" if len(edits) > 1
                    else f"Mark shot {next(iter(edits))} {status}")
            if not self._push(PicksEdit(self.model, edits, text)):
                return
        if len(targets) > 1:
            self.statusBar().showMessage(
                f"{len(edits)} of {len(targets)} selected shots marked {status}"
                + (f" ({len(waiting)} being measured again left as they are)." if waiting
                   else "."), 6000)
        if status != ReviewStatus.TO_REVIEW and self.act_advance.isChecked():
            self._advance(order, current, set(targets))

    def _decision(self, record, status: ReviewStatus, reason: str | None) -> dict:
        """The pick fields a decision sets on one shot."""
        if status == ReviewStatus.UNUSABLE:
            return {"status": status, "reason": reason}
        changes = {"status": status, "reason": ""}
        if status == ReviewStatus.ADJUSTED:
            shown = self.canvas.shot is not None and self.canvas.shot.shot_id == record.shot_id
            for side in SIDES:  # the marks where they are: dragged, nudged or proposed
                changes[f"{side}_deg"] = (self.canvas.mark_angle(side) if shown
                                          else record.shown_deg(side))
        return changes

    def _accepting(self, records: list) -> list | None:
        """The shots to accept: a shot whose marks the analyst moved is accepted (its marks set
        aside; Ctrl+Z brings them back) only when the analyst says so; None: none at all."""
        moved = [r for r in records if r.pick.status == ReviewStatus.ADJUSTED and any(
            moved_from_proposal(r.final_deg(s), r.proposed_deg(s)) for s in SIDES)]
        if not moved:
            return records
        if len(records) == 1:
            marks = ", ".join(f"{s} {angle_text(records[0].final_deg(s))}" for s in SIDES)
            choice = self.ask("Accept the proposal?",
                              f"You moved the marks of shot {records[0].shot_id} ({marks}). "
                              "Accepting the proposal sets your marks aside (Ctrl+Z brings "
                              "them back).", ("Accept the proposal", "Keep my marks"))
            return records if choice == 0 else None
        choice = self.ask("Accept the proposals?",
                          f"You moved the marks of {len(moved)} of the {len(records)} selected "
                          "shots. Accepting the proposal sets those marks aside (Ctrl+Z brings "
                          "them back).", (f"Accept all {len(records)}",
                                          f"Keep the {len(moved)} adjusted", "Cancel"))
        if choice == 0:
            return records
        return [r for r in records if r not in moved] if choice == 1 else None

    def ask(self, title: str, text: str, choices: tuple[str, ...]) -> int | None:
        """Ask the analyst to choose; the index of the choice (the last one is Escape's)."""
        box = QMessageBox(QMessageBox.Icon.Question, title, text, parent=self)
        buttons = [box.addButton(choice, QMessageBox.ButtonRole.AcceptRole)
                   for choice in choices]
        box.setDefaultButton(buttons[0])
        box.setEscapeButton(buttons[-1])
        box.exec()
        clicked = box.clickedButton()
        return buttons.index(clicked) if clicked in buttons else None

    def _ask_reason(self, previous: str, count: int = 1) -> str:
        """Why the shot(s) cannot be used: one of the usual reasons, or the analyst's words."""
        reasons = list(UNUSABLE_REASONS)
        if previous and previous not in reasons:
            reasons.insert(0, previous)
        dialog = QInputDialog(self)
        dialog.setWindowTitle("Unusable shot" if count == 1 else f"{count} unusable shots")
        dialog.setLabelText(("Why can this shot not be used?" if count == 1 else
                             f"Why can these {count} shots not be used?")
                            + "\nChoose a reason or type your own:")
        dialog.setComboBoxItems([*reasons, OTHER_REASON])
        dialog.setComboBoxEditable(True)
        # no reason chosen for the analyst: Enter alone must not record the first of the list
        dialog.setTextValue(previous)
        if not dialog.exec():
            return ""
        reason = dialog.textValue().strip()
        if not reason:
            self.statusBar().showMessage("No reason given: nothing was marked unusable.", 6000)
        if reason == OTHER_REASON:
            reason, ok = QInputDialog.getText(self, dialog.windowTitle(), "The reason:")
            reason = reason.strip() if ok else ""
        return reason

    def _advance(self, order: list[str], after: str, decided: set[str]) -> None:
        """On to the next shot still to review after ``after``, in the order the list showed
        before the decision (a filter may have hidden the decided shots since)."""
        shown = set(self.shot_list.visible_ids())
        start = order.index(after) + 1 if after in order else 0
        for shot_id in order[start:] + order[:start]:
            if shot_id in shown and shot_id not in decided and reviewable(
                    self.model.record(shot_id)):
                self.model.set_current(shot_id)
                return
        self.statusBar().showMessage("No shot left to review.", 5000)

    def nudge(self, side: str, step_deg: float) -> None:
        if not self._can_edit() or self.canvas.shot is None:
            return
        if self._waiting_for_measurement([self.model.current_id]):
            return
        record = self.model.record(self.model.current_id)
        if record.pick.status == ReviewStatus.UNUSABLE:
            self.statusBar().showMessage(f"Shot {record.shot_id} is marked unusable: R puts it "
                                         "back to review, then its marks move.", 6000)
            return
        if record.summary is None:  # a failed shot's last good run has marks, as a drag finds
            self.statusBar().showMessage(f"Shot {record.shot_id} has no measured marks yet; "
                                         "process it (Ctrl+Shift+P) first.", 6000)
            return
        current = self.canvas.mark_angle(side)
        angle = round((0.0 if current is None else current) + step_deg, 6)
        self._move_mark(MarkMove(self.model, record.shot_id, side, angle, nudge=True))

    def _on_mark_released(self, side: str, angle_deg: float) -> None:
        if not self._can_edit():
            return
        shot_id = self.model.current_id
        if self._waiting_for_measurement([shot_id]):  # dragged as the measurement began
            self._show_current(full=False)
            return
        self._move_mark(MarkMove(self.model, shot_id, side, angle_deg))

    def _move_mark(self, command: MarkMove) -> None:
        """Push a mark's move; one that turns an accepted shot into an adjusted one says so (a
        nudge key sits beside the accept key)."""
        was = self.model.record(command.shot_id).pick.status
        if self._push(command) and was == ReviewStatus.ACCEPTED:
            self.statusBar().showMessage(
                f"Shot {command.shot_id} was accepted; moving its {command.side} mark made it "
                "adjusted (Ctrl+Z undoes the move).", 8000)

    def _on_note_committed(self, text: str) -> None:
        shot_id = self.readout.shot_id
        if not shot_id or self.model.read_only:
            return
        if self.model.record(shot_id).pick.note == text:
            return
        if not self._push(PickEdit(self.model, shot_id, {"note": text},
                                   f"Edit note of shot {shot_id}")):
            self.readout.keep_unsaved_note(shot_id, text)  # not wiped: to try again

    def step_shot(self, offset: int) -> None:
        """The next (or previous) shot in the list; at its end the window says so."""
        before = self.model.current_id
        self.shot_list.step(offset)
        if before and self.model.current_id == before:
            self.statusBar().showMessage(
                "Last shot of the list." if offset > 0 else "First shot of the list.", 4000)

    def next_to_review(self) -> None:
        """The next shot still to review (measured, undecided) after the current one."""
        self._advance(self.shot_list.visible_ids(), self.model.current_id, set())
