"""The review window's corrections of a shot's ball and flight: dragging the circles in frames A
and B, setting the flight direction, going back to the measured ones. Each is one undoable edit
(``app.qt.commands.GeometryEdit``): the analyst's values are saved with the pick at once, then
the shot is measured again with them on a background job (only what depends on them: flight,
fine field, separation, fields). A part of ``MainWindow`` (``app.qt.window``).
"""

from __future__ import annotations

from PySide6.QtWidgets import QInputDialog

from app.qt.commands import GeometryEdit
from app.qt.workers import BackgroundJob, JobOutcome
from app.review.model import ProcessState
from core import WakelineError


class BallActions:
    """Corrections of the ball's circles and the flight direction (mixed into ``MainWindow``)."""

    def _build_ball_actions(self) -> None:
        a = self._action
        self._remeasure_queue: list[GeometryEdit] = []
        self.act_edit_circles = a(
            "Correct the ball's &circles", self.set_circle_editing, "Ctrl+B",
            "drag the ball's circle in the frame shown (F: frame A, B) to move its centre, its "
            "handle to change its radius; the shot is measured again with it", checkable=True)
        self.act_set_flight = a("Set the &flight direction…", self.ask_flight_direction,
                                tip="the flight direction of this shot, deg (0 = toward +x, "
                                "90 = toward the top); the shot is measured again with it")
        self.act_measured_ball = a("Ball and flight as &measured", self.use_measured_ball,
                                   tip="forget the circles and flight direction set by hand "
                                   "for this shot and measure it again")

    def _build_ball_menu(self) -> None:
        menu = self.menuBar().addMenu("&Ball")
        for action in (self.act_edit_circles, self.act_set_flight, self.act_measured_ball):
            menu.addAction(action)
        self.canvas.circle_moved.connect(self._on_circle_moved)

    def _update_ball_actions(self, editable: bool) -> None:
        """``editable``: a measured shot of a session open for writing is current."""
        record = self.model.record(self.model.current_id) if editable else None
        if self.model.read_only and self.act_edit_circles.isChecked():  # nothing to save into
            self.act_edit_circles.setChecked(False)
            self.canvas.set_circle_editing(False)
        self.act_edit_circles.setEnabled(editable)
        self.act_set_flight.setEnabled(editable)
        self.act_measured_ball.setEnabled(record is not None and record.pick.has_geometry())

    # -- the analyst's edits -----------------------------------------------------------------
    def set_circle_editing(self, on: bool) -> None:
        self.canvas.set_circle_editing(on)
        if on:
            self.statusBar().showMessage(
                "Drag the ball's circle to move it, its handle to resize it; F shows the other "
                "frame's circle. Ctrl+B again ends.", 8000)
        else:
            self.statusBar().clearMessage()  # its how-to no longer applies

    def _on_circle_moved(self, frame: str, cx: float, cy: float, r: float) -> None:
        result = self.model.result(self.model.current_id) if self._ball_editable() else None
        if result is None or result.ball_a is None or result.ball_b is None:
            self._show_current(full=False)
            return
        circles = {f"circle_{f}_px": (*getattr(result, f"ball_{f}").center_px,
                                      getattr(result, f"ball_{f}").radius_px) for f in "ab"}
        circles[f"circle_{frame}_px"] = (cx, cy, r)
        self._edit_geometry(circles, f"Move the ball's circle in frame {frame.upper()}")

    def ask_flight_direction(self) -> None:
        if not self._ball_editable():
            return
        result = self.model.result(self.model.current_id)
        now = result.flight.direction_deg if result is not None and result.flight else 180.0
        value, ok = QInputDialog.getDouble(
            self, "Flight direction", "Flight direction of this shot, deg\n(0 = toward +x, "
            "90 = toward the top of the picture):", round(now % 360.0, 1), 0.0, 360.0, 1)
        if ok:
            self._edit_geometry({"flight_deg": value % 360.0},
                                f"Set the flight direction to {value % 360.0:.1f}°")

    def use_measured_ball(self) -> None:
        if self._ball_editable():
            self._edit_geometry({"circle_a_px": None, "circle_b_px": None, "flight_deg": None},
                                "Ball and flight as measured")

    def _ball_editable(self) -> bool:
        if not self._can_edit():
            return False
        record = self.model.record(self.model.current_id)
        if record.state != ProcessState.PROCESSED:
            self.statusBar().showMessage("Process the shot first: its ball is not measured "
                                         "yet.", 5000)
            return False
        return True

    def _edit_geometry(self, geometry: dict, text: str) -> None:
        if self.job is not None and not self._remeasuring():
            self.statusBar().showMessage("Wait for the running job (or cancel it, Ctrl+.) "
                                         "before correcting the ball.", 6000)
            self._show_current(full=True)
            return
        shot_id = self.model.current_id
        try:
            command = GeometryEdit(self.model, shot_id, geometry, f"{text} of shot {shot_id}",
                                   self._remeasure)
        except WakelineError as exc:  # its stored result cannot be read
            self.show_problem("Edit not saved", str(exc))
            self._show_current(full=True)
            return
        self._push(command)

    # -- measuring again ---------------------------------------------------------------------
    def _remeasure(self, command: GeometryEdit) -> None:
        """Measure the command's shot again now, or after the running job; its marks stay put
        meanwhile (:meth:`measuring_again`)."""
        self._remeasure_queue.append(command)
        if self.job is None:
            self._start_queued()
        self._show_current(full=False)

    def _remeasuring(self) -> bool:
        return getattr(self.job, "remeasuring", None) is not None

    def measuring_again(self, shot_id: str) -> bool:
        """The shot is being measured again (or waits to be) after a correction of its ball.
        Its marks and decisions wait for the result: an edit made meanwhile would be made on
        proposals about to be replaced, and its undo step refused once they are."""
        running = self.job.remeasuring.shot_id if self._remeasuring() else None
        return shot_id == running or any(c.shot_id == shot_id for c in self._remeasure_queue)

    def _start_queued(self) -> None:
        """Start the next waiting measurement (called when a job ends)."""
        if self.model.session is None:
            self._remeasure_queue.clear()
        if self.job is not None or not self._remeasure_queue:
            return
        command = self._remeasure_queue.pop(0)
        try:
            measure = self.model.remeasuring(command.shot_id)
        except (WakelineError, OSError) as exc:  # OSError: a frame's read failing on its share
            self.show_problem("Measuring the shot again", str(exc))
            return
        job = BackgroundJob(lambda _report, _stop: measure(), self)
        job.remeasuring = command
        job.finished.connect(lambda outcome: self._on_remeasured(command, outcome))
        self._start_job(job, f"Measuring shot {command.shot_id} again", 0)

    def _on_remeasured(self, command: GeometryEdit, outcome: JobOutcome) -> None:
        self._end_job()  # and the next one waiting starts
        if outcome.error:
            self.show_problem(f"Measuring shot {command.shot_id} again", outcome.error)
        elif outcome.cancelled or outcome.value is None or self.model.session is None:
            self.statusBar().showMessage(f"Measuring shot {command.shot_id} again stopped; "
                                         "Ctrl+P measures it later.", 8000)
        else:
            try:
                decision = command.measured(outcome.value)
            except WakelineError as exc:
                self.show_problem("Result not saved", str(exc))
            else:
                word = "measured again" if decision is not None else "measured again, then undone"
                said = f": {decision}" if decision else ""
                self.statusBar().showMessage(f"Shot {command.shot_id} {word}{said}.", 8000)
        if self.model.session is not None:
            self._show_current(full=False)  # its marks move again
