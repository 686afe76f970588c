"""Undoable review edits: every change to a pick (angle, status, reason, note) is one command,
and a decision on several shots at once is one command too (``PicksEdit``).

Each command keeps the pick's editable fields before and after the edit and writes them through
``SessionModel.apply_pick``, so undo and redo are saved edits too: the store's history records
them like any other, and closing the window at any moment loses nothing.
"""

from __future__ import annotations

from PySide6.QtGui import QUndoCommand

from app.review.model import ReviewStatus, SessionModel, authorship, pick_values, proposals
from core import WakelineError
from core.geometry import on_own_side

NUDGE_MERGE_ID = 4101  # consecutive nudges of one mark on one shot merge into one undo step


class PicksEdit(QUndoCommand):
    """Change some fields of the picks of one or more shots: one undo step.

    Parameters
    ----------
    model : SessionModel
    edits : dict
        Shot id -> new values for a subset of ``status, upper_deg, lower_deg, reason, note``.
    text : str
        What the Edit menu shows ("Undo <text>").
    """

    def __init__(self, model: SessionModel, edits: dict[str, dict], text: str) -> None:
        super().__init__(text)
        self._model = model
        self.after = {shot_id: dict(changes) for shot_id, changes in edits.items()}
        self.before = {}
        for shot_id, changes in edits.items():
            pick = model.record(shot_id).pick
            current = pick_values(pick)
            # undo puts back who made the decision and when, not who undid it
            self.before[shot_id] = {**{name: current[name] for name in changes},
                                    **authorship(pick)}
        # the proposals the edit was made on: undone or redone on others, it would decide on
        # numbers nobody looked at
        self._proposals = {shot_id: proposals(model.record(shot_id)) for shot_id in edits}
        self._applied = False

    def apply(self) -> None:
        """Make the edit now, before the command goes on the undo stack.

        A refused edit (``core.WakelineError``) raises here, where the window can report it,
        instead of inside ``QUndoStack.push`` (Qt cannot pass exceptions back from ``redo``);
        the store then keeps none of it.
        """
        picks = self._model.apply_picks(self.after)
        for shot_id, pick in picks.items():  # redo keeps this edit's author and time
            self.after[shot_id].update(authorship(pick))
        self._applied = True

    def redo(self) -> None:
        if self._applied:  # the push right after apply(): already done
            self._applied = False
            return
        self._apply_from_stack(self.after, "redone")

    def undo(self) -> None:
        self._apply_from_stack(self.before, "undone")

    def _apply_from_stack(self, values: dict[str, dict], done: str) -> None:
        """Qt cannot take an exception back from undo/redo: a refusal (e.g. the session became
        read-only, or a shot was measured again since the edit) is reported by signal, the
        command retired, and the views shown the truth."""
        moved = [shot_id for shot_id, seen in self._proposals.items()
                 if proposals(self._model.record(shot_id)) != seen]
        if moved:
            said = (f"shot {moved[0]} was measured again since this edit (its proposals "
                    f"moved): the edit is not {done}")
        else:
            try:
                self._model.apply_picks(values)
                self._model.edit_replayed.emit(list(values), f"{done.capitalize()}: {self.text()}")
                return
            except WakelineError as exc:  # the step leaves the list: "try again" cannot mean it
                said = (f"{exc} (not {done}: the step leaves the undo list; make the change "
                        "by hand once it can be saved)")
        self.setObsolete(True)
        for shot_id in values:
            self._model.refresh(shot_id)
        self._model.edit_refused.emit(said)


class PickEdit(PicksEdit):
    """Change some fields of one shot's pick (``changes``: see ``PicksEdit``)."""

    def __init__(self, model: SessionModel, shot_id: str, changes: dict, text: str) -> None:
        super().__init__(model, {shot_id: changes}, text)
        self.shot_id = shot_id


class MarkMove(PickEdit):
    """Move one separation mark (drag or nudge): the pick becomes "adjusted".

    The other side keeps its current final value (or its proposal) so that an adjusted pick
    always carries both angles the analyst stands behind.
    """

    #: Marks closer than this (deg) to where they stood count as back there (nudges round
    #: their angles to 1e-6 deg)
    BACK_TOLERANCE_DEG = 1e-4

    def __init__(
        self, model: SessionModel, shot_id: str, side: str, angle_deg: float, nudge: bool = False
    ) -> None:
        angle_deg = on_own_side(angle_deg)  # nudged or dragged past a stagnation point: there
        record = model.record(shot_id)
        # where both marks stood before this move (a run of merged nudges: before the first)
        self._shown_before = {s: record.shown_deg(s) for s in ("upper", "lower")}
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
        self.after = {shot_id: dict(changes) for shot_id, changes in other.after.items()}
        self.setText(other.text())
        if self._back_where_it_stood():
            # nudged there and back (Q then E): nothing was decided, so the shot gets back
            # what it had before the first nudge (its status too) and the step leaves the stack
            try:
                self._model.apply_picks(self.before)
            except WakelineError as exc:  # not saved: the shot keeps the nudges' net state
                self._model.edit_refused.emit(str(exc))
            else:
                self.setObsolete(True)
        return True

    def _back_where_it_stood(self) -> bool:
        after = self.after[self.shot_id]
        return all(self._shown_before[s] is not None and after[f"{s}_deg"] is not None
                   and abs(after[f"{s}_deg"] - self._shown_before[s]) < self.BACK_TOLERANCE_DEG
                   for s in ("upper", "lower"))



class GeometryEdit(QUndoCommand):
    """The analyst's circles or flight direction of one shot, and the result measured with
    them: one undo step. Undo puts back the pick's geometry and the result stored before.

    Parameters
    ----------
    model : SessionModel
    shot_id : str
    geometry : dict
        New values for some of ``circle_a_px``, ``circle_b_px``, ``flight_deg`` (None: as
        measured).
    text : str
        What the Edit menu shows.
    remeasure : callable
        ``remeasure(command)`` starts measuring the shot again after the geometry is saved; the
        window calls ``measured(result)`` when it is done.
    """

    def __init__(self, model: SessionModel, shot_id: str, geometry: dict, text: str,
                 remeasure) -> None:
        super().__init__(text)
        self._model = model
        self.shot_id = shot_id
        pick = model.record(shot_id).pick
        self.before = pick.geometry()
        self.after = {**self.before, **geometry}
        # the decision as it was: the new result may send an accepted pick back to review
        self._decision = {**pick_values(pick), **authorship(pick)}
        self._results = {"before": model.result(shot_id), "after": None}
        self._remeasure = remeasure
        self._applied = False

    def apply(self) -> None:
        """Save the new geometry now (raises ``core.WakelineError`` when refused) and start
        measuring the shot with it."""
        pick = self._model.apply_pick(self.shot_id, **self.after)
        self.after.update(authorship(pick))  # redo keeps this edit's author and time
        self._applied = True
        self._remeasure(self)

    def measured(self, result) -> str | None:
        """The shot measured with this command's geometry: kept when it is still the pick's
        (None when not); returns what became of the decision (``SessionModel.keep_result``)."""
        decision = self._model.keep_result(self.shot_id, result)
        if decision is not None:
            self._results["after"] = result
        return decision

    def redo(self) -> None:
        if self._applied:  # the push right after apply(): already done
            self._applied = False
            return
        self._set("after")

    def undo(self) -> None:
        self._set("before")

    def _set(self, which: str) -> None:
        geometry, result = getattr(self, which), self._results[which]
        decision = ""
        try:
            if which == "before":
                # the result before, then the geometry and the decision before in one edit (the
                # new result may have sent an accepted pick back to review)
                if result is not None:
                    self._model.keep_result(self.shot_id, result, measured=False)
                self._model.apply_pick(self.shot_id, **geometry, **self._decision)
            else:
                self._model.apply_pick(self.shot_id, **geometry)
                if result is not None:  # what it does to the decision, as the first time
                    decision = self._model.keep_result(self.shot_id, result, measured=False)
        except WakelineError as exc:
            self.setObsolete(True)
            self._model.refresh(self.shot_id)
            self._model.edit_refused.emit(str(exc))
            return
        done = "Undone" if which == "before" else "Redone"
        said = f" ({decision})" if decision else ""
        self._model.edit_replayed.emit([self.shot_id], f"{done}: {self.text()}{said}")
        if result is None:
            self._remeasure(self)
