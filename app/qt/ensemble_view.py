"""The ensemble view of a condition in a window of its own, drawn like a shot: the first shot's
frames in the common ball-centred frame, the condition's mean flow (vectors, vorticity), the
ball and flight axis, and two marks per side: the ensemble's proposal (round) and the mean of
the single-shot picks (diamond), with their numbers beside.
"""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QDialog, QLabel, QVBoxLayout

from app.qt.canvas import CanvasShot, ShotCanvas
from app.qt.canvas_controls import FrameOfReference
from app.review.conditions import ensemble_lines
from app.review.text import uncertainty_meaning


class EnsembleDialog(QDialog):
    """A canvas (not editable) and the condition's numbers; one per window, reused."""

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Ensemble view")
        self.canvas = ShotCanvas(self)
        self.numbers = QLabel(self)
        self.numbers.setWordWrap(True)
        self.numbers.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        box = QVBoxLayout(self)
        box.addWidget(self.canvas, 1)
        box.addWidget(self.numbers)
        self.resize(980, 760)

    def show_view(self, condition, view) -> None:
        self.setWindowTitle(f"Ensemble view: {condition.label}")
        proposed = {side: condition.sides[side].mean for side in ("upper", "lower")}
        final = {side: getattr(view.separation, side).angle_deg for side in ("upper", "lower")}
        self.canvas.show_shot(CanvasShot(
            shot_id=condition.label, frame_a=view.frame_a, frame_b=view.frame_b,
            result=view.result, proposed_deg=proposed, final_deg=final, editable=False))
        self.numbers.setText("\n".join([
            *ensemble_lines(condition, view),
            ("Ball frame (the ball at rest), common to the shots; round mark: the ensemble's "
             "proposal, diamond: the mean of the shots' final angles.")]))
        # what the ensemble's ± is made of, largest first (the same tip as a shot's ±)
        self.numbers.setToolTip("\n\n".join(
            f"{side}: {uncertainty_meaning(getattr(view.separation, side))}"
            for side in ("upper", "lower") if getattr(view.separation, side).uncertainty_deg))


def show_ensemble(window, condition, view) -> EnsembleDialog:
    dialog = getattr(window, "ensemble_dialog", None)
    if dialog is None:
        dialog = window.ensemble_dialog = EnsembleDialog(window)
        dialog.canvas.restore_layers(window.canvas.layer_state())
        # the shots are aligned on the ball: its field is in the ball frame, and only there
        # (it has no flight to add back); nothing in it is dragged
        frame = dialog.canvas.frame_box
        frame.setCurrentText(FrameOfReference.BALL)
        frame.setEnabled(False)
        frame.setToolTip("The ensemble's shots are aligned on the ball: its velocities are in "
                         "the ball frame")
        dialog.canvas.hover_label.setText("Point for flow values (ball frame).")
    # the ensemble's grid is finer than a shot's: as many vectors as fit the zoom
    dialog.canvas.stride_box.setValue(0)
    dialog.show_view(condition, view)
    dialog.show()
    dialog.raise_()
    dialog.canvas.view.autoRange(padding=0.02)  # now that the dialog has its size
    return dialog
