"""The review window's review: showing the current shot on the canvas and the readout, and the
analyst's edits (status keys, nudges, dragged marks, notes) as undoable commands. A part of
``MainWindow`` (``app.qt.window``).
"""

from __future__ import annotations

import logging

from PySide6.QtWidgets import QInputDialog

from app.qt.canvas import CanvasShot
from app.qt.commands import MarkMove, PickEdit
from app.review.marks import mark_angles
from app.review.model import ProcessState, ReviewStatus
from core import WakelineError
from core.geometry import SIDES

log = logging.getLogger("wakeline.window")


class ReviewActions:
    """Showing and reviewing the current shot (mixed into ``MainWindow``)."""

    def _on_session_changed(self) -> None:
        self._shown_key = None
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
            self.canvas.update_marks(*mark_angles(record), editable=self._editable(record))
        self.readout.show_record(record)

    def _canvas_shot(self, record) -> CanvasShot:
        messages = []
        result = None
        if record.state == ProcessState.PROCESSED:
            try:
                result = self.model.result(record.shot_id)
            except (WakelineError, OSError, KeyError) as exc:  # a damaged stored result
                # log text only: a kept exception would hold this window through its traceback
                log.warning("shot %s: stored result unreadable: %s", record.shot_id, str(exc))
                messages.append(f"shot {record.shot_id}: stored result cannot be read ({exc}); "
                                "reprocess it (Ctrl+Shift+P)")
        elif record.state == ProcessState.FAILED:
            messages.append(f"Processing failed: {record.failure or 'no reason given'}")
        else:
            messages.append("Not processed yet" + (
                " — processing is running." if self.job is not None else
                " — use Process ▸ Process shots that need it (Ctrl+P)."))
        frame_a = frame_b = None
        try:
            frame_a, frame_b = self.model.frames(record.shot_id)
        except (WakelineError, OSError) as exc:
            messages.append(str(exc))
        proposed, final = mark_angles(record)
        return CanvasShot(
            shot_id=record.shot_id, frame_a=frame_a, frame_b=frame_b, result=result,
            proposed_deg=proposed, final_deg=final, message="\n".join(messages),
            editable=self._editable(record),
        )

    def _editable(self, record) -> bool:
        return not self.model.read_only and record.pick.status != ReviewStatus.UNUSABLE

    # -- review edits ------------------------------------------------------------------------
    def _can_edit(self) -> bool:
        return bool(self.model.current_id) and not self.model.read_only

    def _push(self, command) -> None:
        """Apply an edit (saved at once) and put it on the undo stack; report a refusal."""
        try:
            command.apply()
        except WakelineError as exc:
            self.show_problem("Edit not saved", str(exc))
            self._show_current(full=False)
            return
        self.undo_stack.push(command)

    def set_status(self, status: ReviewStatus, reason: str | None = None) -> None:
        """Review the current shot: accepted, adjusted, unusable (asks a reason) or to review."""
        if not self._can_edit():
            return
        shot_id = self.model.current_id
        record = self.model.record(shot_id)
        if status == ReviewStatus.UNUSABLE:
            if reason is None:
                reason = self._ask_reason(record.pick.reason)
            if not reason:
                return
            changes = {"status": status, "reason": reason}
        elif status == ReviewStatus.ADJUSTED:
            changes = {"status": status, "reason": ""}
            for side in SIDES:
                changes[f"{side}_deg"] = self.canvas.mark_angle(side) if \
                    self.canvas.shot is not None and self.canvas.shot.shot_id == shot_id else \
                    record.shown_deg(side)
        else:
            changes = {"status": status, "reason": ""}
        if status == record.pick.status and status != ReviewStatus.ADJUSTED:
            return
        self._push(PickEdit(self.model, shot_id, changes, f"Mark shot {shot_id} {status}"))

    def _ask_reason(self, previous: str) -> str:
        text, ok = QInputDialog.getText(self, "Unusable shot", "Why can this shot not be used?",
                                        text=previous)
        return text.strip() if ok else ""

    def nudge(self, side: str, step_deg: float) -> None:
        if not self._can_edit() or self.canvas.shot is None:
            return
        record = self.model.record(self.model.current_id)
        if record.pick.status == ReviewStatus.UNUSABLE or record.state != ProcessState.PROCESSED:
            return
        current = self.canvas.mark_angle(side)
        angle = round((0.0 if current is None else current) + step_deg, 6)
        self._push(MarkMove(self.model, record.shot_id, side, angle, nudge=True))

    def _on_mark_released(self, side: str, angle_deg: float) -> None:
        if not self._can_edit():
            return
        shot_id = self.model.current_id
        self._push(MarkMove(self.model, shot_id, side, angle_deg))

    def _on_note_committed(self, text: str) -> None:
        shot_id = self.readout.shot_id
        if not shot_id or self.model.read_only:
            return
        if self.model.record(shot_id).pick.note == text:
            return
        self._push(PickEdit(self.model, shot_id, {"note": text}, f"Edit note of shot {shot_id}"))

    def next_to_review(self) -> None:
        ids = self.shot_list.visible_ids()
        if not ids:
            return
        start = ids.index(self.model.current_id) + 1 if self.model.current_id in ids else 0
        for shot_id in ids[start:] + ids[:start]:
            if self.model.record(shot_id).pick.status == ReviewStatus.TO_REVIEW:
                self.model.set_current(shot_id)
                return
        self.statusBar().showMessage("No shot left to review.", 5000)
