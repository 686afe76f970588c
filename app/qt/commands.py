"""Undoable review edits: every change to a pick (angle, status, reason, note) is one command,
and a decision on several shots at once is one command too (``BatchEdit``).

Each command keeps the pick's editable fields before and after the edit and writes them through
``SessionModel.apply_pick``, so undo and redo are saved edits too: the store's history records
them like any other, and closing the window at any moment loses nothing.
"""

from __future__ import annotations

from PySide6.QtGui import QUndoCommand

from app.review.model import ReviewStatus, SessionModel, pick_values
from core import WakelineError

NUDGE_MERGE_ID = 4101  # consecutive nudges of one mark on one shot merge into one undo step


class PickEdit(QUndoCommand):
    """Change some fields of one shot's pick.

    Parameters
    ----------
    model : SessionModel
    shot_id : str
    changes : dict
        New values for a subset of ``status, upper_deg, lower_deg, reason, note``.
    text : str
        What the Edit menu shows ("Undo <text>").
    """

    def __init__(self, model: SessionModel, shot_id: str, changes: dict, text: str) -> None:
        super().__init__(text)
        self._model = model
        self.shot_id = shot_id
        current = pick_values(model.record(shot_id).pick)
        self.before = {name: current[name] for name in changes}
        self.after = dict(changes)
        self._applied = False

    def apply(self) -> None:
        """Make the edit now, before the command goes on the undo stack.

        A refused edit (``core.WakelineError``) raises here, where the window can report it,
        instead of inside ``QUndoStack.push`` (Qt cannot pass exceptions back from ``redo``).
        """
        self._model.apply_pick(self.shot_id, **self.after)
        self._applied = True

    def redo(self) -> None:
        if self._applied:  # the push right after apply(): already done
            self._applied = False
            return
        self._apply_from_stack(self.after)

    def undo(self) -> None:
        self._apply_from_stack(self.before)

    def _apply_from_stack(self, values: dict) -> None:
        """Qt cannot take an exception back from undo/redo: a refusal (e.g. the session became
        read-only) is reported by signal, the command retired, and the views shown the truth."""
        try:
            self._model.apply_pick(self.shot_id, **values)
        except WakelineError as exc:
            self.setObsolete(True)
            self._model.refresh(self.shot_id)
            self._model.edit_refused.emit(str(exc))


class MarkMove(PickEdit):
    """Move one separation mark (drag or nudge): the pick becomes "adjusted".

    The other side keeps its current final value (or its proposal) so that an adjusted pick
    always carries both angles the analyst stands behind.
    """

    def __init__(
        self, model: SessionModel, shot_id: str, side: str, angle_deg: float, nudge: bool = False
    ) -> None:
        record = model.record(shot_id)
        other = "lower" if side == "upper" else "upper"
        other_deg = record.shown_deg(other)
        changes = {
            "status": ReviewStatus.ADJUSTED,
            f"{side}_deg": float(angle_deg),
            f"{other}_deg": other_deg,
            "reason": "",
        }
        verb = "Nudge" if nudge else "Move"
        super().__init__(model, shot_id, changes, f"{verb} {side} mark to {angle_deg:.1f}°")
        self.side = side
        self._nudge = nudge

    def id(self) -> int:
        return NUDGE_MERGE_ID if self._nudge else -1

    def mergeWith(self, other: QUndoCommand) -> bool:
        if not (isinstance(other, MarkMove) and other._nudge and self._nudge):
            return False
        if other.shot_id != self.shot_id or other.side != self.side:
            return False
        self.after = dict(other.after)
        self.setText(other.text())
        return True


class BatchEdit(QUndoCommand):
    """One decision on several shots: one undo step. ``edits`` are ``PickEdit``s not yet applied.

    ``apply`` makes them in order; when the store refuses one, those already made are undone
    before the refusal is raised, so a batch is made whole or not at all.
    """

    def __init__(self, edits: list[PickEdit], text: str) -> None:
        super().__init__(text)
        self.edits = list(edits)

    def apply(self) -> None:
        done = []
        try:
            for edit in self.edits:
                edit.apply()
                done.append(edit)
        except WakelineError:
            for edit in reversed(done):
                edit.undo()
            raise

    def redo(self) -> None:
        for edit in self.edits:
            edit.redo()
            if edit.isObsolete():
                self.setObsolete(True)

    def undo(self) -> None:
        for edit in reversed(self.edits):
            edit.undo()
            if edit.isObsolete():
                self.setObsolete(True)
