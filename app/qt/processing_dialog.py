"""Processing settings of the open session (PIV passes, outlier test, ball) and of this computer
(worker processes), edited in one dialog.

The session's settings decide every result, so they live in the session file; shots processed
with other settings then count as needing processing again. The number of worker processes only
changes how fast, so it is kept per computer in QSettings.
"""

from __future__ import annotations

import os

from PySide6.QtWidgets import (
    QCheckBox,
    QComboBox,
    QDialog,
    QDialogButtonBox,
    QDoubleSpinBox,
    QFormLayout,
    QLabel,
    QLineEdit,
    QSpinBox,
    QVBoxLayout,
    QWidget,
)

from core import WakelineError
from core.settings import PivPass, PivSettings
from core.shot_result import ShotSettings


def passes_text(passes: tuple[PivPass, ...], overlap: float) -> str:
    """``"64, 32, 32"``; a pass whose overlap differs from ``overlap`` is written ``48/75``."""
    return ", ".join(
        f"{p.window_px}" if abs(p.overlap - overlap) < 1e-9 else f"{p.window_px}/{p.overlap * 100:g}"
        for p in passes
    )


def parse_passes(text: str, overlap: float) -> tuple[PivPass, ...]:
    """Passes from ``"64, 32, 32"`` (each ``window`` or ``window/overlap %``).

    Raises
    ------
    WakelineError
        One line naming the entry that is not a pass.
    """
    passes = []
    for entry in (e.strip() for e in text.replace(";", ",").split(",")):
        if not entry:
            continue
        window, _, own = entry.partition("/")
        try:
            size = int(window)
            share = float(own) / 100.0 if own else overlap
        except ValueError:
            raise WakelineError(f"passes: '{entry}' is not a window size in px "
                                "(e.g. 64 or 64/50 for 50 % overlap)") from None
        passes.append(PivPass(size, share))
    if not passes:
        raise WakelineError("passes: give at least one window size, e.g. 64, 32, 32")
    return tuple(passes)


#: Background choices: the words shown and the stored setting.
BACKGROUNDS = (("none", None), ("per-pixel minimum of the session's frames", "min"),
               ("per-pixel median of the session's frames", "median"))


class ProcessingDialog(QDialog):
    """Edit ``settings`` (a session's processing settings dict) and ``workers`` (None: all
    cores). ``locked``: why the session's settings cannot change (no session, read-only), or
    "". After ``accept()``, :meth:`settings` and :meth:`worker_count` hold the new values."""

    def __init__(self, settings: dict, workers: int | None, locked: str = "",
                 parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Processing settings")
        current = ShotSettings.from_dict(settings)
        piv = current.piv
        overlap = piv.passes[-1].overlap
        self._base = dict(settings)
        self._result: dict = dict(settings)

        self.overlap = QSpinBox(self)
        self.overlap.setRange(0, 90)
        self.overlap.setSuffix(" %")
        self.overlap.setValue(round(overlap * 100))
        self.passes = QLineEdit(passes_text(piv.passes, overlap), self)
        self.passes.setToolTip("interrogation window of each pass, px, first to last; "
                               "48/75 gives one pass its own overlap")
        self.threshold = self._number(piv.median_threshold, 0.5, 10.0, 2, 0.1)
        self.eps = self._number(piv.median_eps_px, 0.0, 1.0, 2, 0.05, " px")
        self.masked = QSpinBox(self)
        self.masked.setRange(0, 100)
        self.masked.setSuffix(" %")
        self.masked.setValue(round(piv.max_masked_fraction * 100))
        self.deform = self._number(piv.deform_min_change_px, 0.0, 2.0, 2, 0.05, " px")
        self.deform.setToolTip("windows whose predicted displacement changes by more than this "
                               "across the window are deformed pixel by pixel; 0: all of them")
        self.find_ball = QCheckBox("find the ball in each frame and mask it", self)
        self.find_ball.setChecked(current.find_ball)
        self.glare = QCheckBox("leave saturated glare out of the correlation", self)
        self.glare.setChecked(current.mask_glare)
        self.normalise = self._number(current.normalise_spacings or 0.0, 0.0, 20.0, 1, 0.5,
                                      " spacings")
        self.normalise.setSpecialValueText("off")
        self.background = QComboBox(self)
        for text, value in BACKGROUNDS:
            self.background.addItem(text, value)
        self.background.setCurrentIndex(
            max(0, self.background.findData(current.background)))
        self.background.setToolTip("subtract a background taken from the session's frames at "
                                   "the same camera position (the manifest's camera column)")
        self.normalise.setToolTip("local intensity normalisation window, in mean particle "
                                  "spacings (skipped on sparse seeding); off: none")
        self.flight = QLineEdit("" if current.flight_deg is None else f"{current.flight_deg:g}",
                                self)
        self.flight.setPlaceholderText("from the ball's displacement")
        self.flight.setToolTip("flight direction for every shot without its own, deg "
                               "(0 = to the right, 90 = up the picture); empty: measured")
        self.workers = QSpinBox(self)
        self.workers.setRange(0, max(64, os.cpu_count() or 1))
        self.workers.setSpecialValueText("all cores")
        self.workers.setValue(workers or 0)

        form = QFormLayout()
        form.addRow("Passes (window px)", self.passes)
        form.addRow("Window overlap", self.overlap)
        form.addRow("Outlier test threshold", self.threshold)
        form.addRow("Outlier test noise level", self.eps)
        form.addRow("Largest masked share of a window", self.masked)
        form.addRow("Deform pixel by pixel above", self.deform)
        form.addRow("Ball", self.find_ball)
        form.addRow("Glare", self.glare)
        form.addRow("Local normalisation", self.normalise)
        form.addRow("Background", self.background)
        form.addRow("Flight direction (deg)", self.flight)
        form.addRow("Processes on this computer", self.workers)
        self.problem = QLabel("", self)
        self.problem.setWordWrap(True)
        self.problem.setStyleSheet("color: #b3261e")
        note = QLabel("Saved in the session: shots processed with other settings are processed "
                      "again. The number of processes only changes how fast.", self)
        note.setWordWrap(True)
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Ok
                                   | QDialogButtonBox.StandardButton.Cancel, self)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addLayout(form)
        layout.addWidget(note)
        layout.addWidget(self.problem)
        layout.addWidget(buttons)
        if locked:
            for widget in (self.passes, self.overlap, self.threshold, self.eps, self.masked,
                           self.deform, self.find_ball, self.glare, self.normalise,
                           self.background, self.flight):
                widget.setEnabled(False)
            note.setText(f"{locked}: only the number of processes can change.")

    def _number(self, value, low, high, decimals, step, suffix="") -> QDoubleSpinBox:
        box = QDoubleSpinBox(self)
        box.setRange(low, high)
        box.setDecimals(decimals)
        box.setSingleStep(step)
        box.setSuffix(suffix)
        box.setValue(value)
        return box

    def accept(self) -> None:
        """Keep the values if they make valid settings; else say why and stay open."""
        try:
            self._result = self._read()
        except WakelineError as exc:
            self.problem.setText(str(exc))
            return
        super().accept()

    def _read(self) -> dict:
        overlap = self.overlap.value() / 100.0
        piv = PivSettings(
            passes=parse_passes(self.passes.text(), overlap),
            median_threshold=self.threshold.value(),
            median_eps_px=self.eps.value(),
            max_masked_fraction=self.masked.value() / 100.0,
            deform_min_change_px=self.deform.value(),
            workers=PivSettings.from_dict(self._base.get("piv", {})).workers,
        )
        flight = self.flight.text().strip()
        try:
            flight_deg = float(flight) if flight else None
        except ValueError:
            raise WakelineError(f"flight direction: '{flight}' is not a number of degrees") \
                from None
        result = dict(self._base)
        result.update(piv=piv.to_dict(), find_ball=self.find_ball.isChecked(),
                      mask_glare=self.glare.isChecked(),
                      normalise_spacings=self.normalise.value() or None,
                      background=self.background.currentData())
        if flight_deg is None:
            result.pop("flight_deg", None)
        else:
            result["flight_deg"] = flight_deg
        return result

    def settings(self) -> dict:
        """The session's processing settings as edited."""
        return self._result

    def worker_count(self) -> int | None:
        """Worker processes (None: all cores)."""
        return self.workers.value() or None
