"""Taking the canvas's picture out of the window: to the clipboard, or as a PNG or SVG file at a
chosen size, with the legend, the colour bar and the scale bar (``ShotCanvas.render_picture``).

``install_picture_actions(window)`` adds Edit > Copy picture (Ctrl+Shift+C) and File > Export >
Picture (PNG / SVG); the canvas's right-click menu offers the same three. Files are written whole
or not at all (``QSaveFile``).
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import QRect, QSaveFile, QSize
from PySide6.QtGui import QAction, QGuiApplication, QKeySequence
from PySide6.QtSvg import QSvgGenerator
from PySide6.QtWidgets import (
    QCheckBox,
    QDialog,
    QDialogButtonBox,
    QFormLayout,
    QSpinBox,
)

from app.qt.file_dialogs import ask_path
from core import WakelineError

MAX_SIDE_PX = 20000
SVG_DPI = 96  # a CSS pixel: the SVG's size in mm then reads as the size asked for in px


class PictureSizeDialog(QDialog):
    """Width and height of the exported picture, px (proportions kept unless unticked)."""

    def __init__(self, size: QSize, aspect: float, parent=None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Picture size")
        self._aspect = aspect  # width / height of the canvas on screen
        self.width_box, self.height_box = QSpinBox(self), QSpinBox(self)
        for box, value in ((self.width_box, size.width()), (self.height_box, size.height())):
            box.setRange(16, MAX_SIDE_PX)
            box.setSuffix(" px")
            box.setValue(value)
        self.keep = QCheckBox("keep the canvas's proportions", self)
        self.keep.setChecked(True)
        self.width_box.valueChanged.connect(lambda w: self._follow(self.height_box, w / aspect))
        self.height_box.valueChanged.connect(lambda h: self._follow(self.width_box, h * aspect))
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Ok
                                   | QDialogButtonBox.StandardButton.Cancel, parent=self)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        form = QFormLayout(self)
        form.addRow("width", self.width_box)
        form.addRow("height", self.height_box)
        form.addRow(self.keep)
        form.addRow(buttons)

    def _follow(self, other: QSpinBox, value: float) -> None:
        if self.keep.isChecked():
            other.blockSignals(True)
            other.setValue(round(value))
            other.blockSignals(False)

    def chosen(self) -> QSize:
        return QSize(self.width_box.value(), self.height_box.value())


def install_picture_actions(window) -> list[QAction]:
    """The copy and export actions of the canvas's picture, in the menus and on right-click."""
    copy = QAction("&Copy picture", window)
    copy.setShortcut(QKeySequence("Ctrl+Shift+C"))
    copy.setStatusTip("the canvas as shown, with its legend, to the clipboard")
    copy.triggered.connect(lambda: copy_picture(window))
    png = QAction("Picture (P&NG)…", window)
    png.setStatusTip("the canvas at a size you choose, with its legend and scale")
    png.triggered.connect(lambda: export_picture_dialog(window, "png"))
    svg = QAction("Picture (S&VG)…", window)
    svg.setStatusTip("the canvas as a vector drawing (frames and vorticity embedded as images)")
    svg.triggered.connect(lambda: export_picture_dialog(window, "svg"))
    window.addAction(copy)
    window.edit_menu.addSeparator()
    window.edit_menu.addAction(copy)
    window.export_menu.addSeparator()
    window.export_menu.addAction(png)
    window.export_menu.addAction(svg)
    window.canvas.context_actions = [copy, png, svg]
    window.act_copy_picture, window.act_export_png, window.act_export_svg = copy, png, svg
    return [copy, png, svg]


def copy_picture(window) -> None:
    """The canvas as shown, with its legend, to the clipboard."""
    if window.canvas.shot is None:
        return
    QGuiApplication.clipboard().setImage(window.canvas.picture_image())
    window.statusBar().showMessage("Picture copied.", 4000)


def export_picture_dialog(window, kind: str) -> None:
    """Ask the size, then where to write, then write the picture."""
    canvas = window.canvas
    if canvas.shot is None:
        return
    screen = canvas.picture_size()
    saved = window.settings.value("picture/size")
    size = saved if isinstance(saved, QSize) else QSize(screen.width() * 2, screen.height() * 2)
    dialog = PictureSizeDialog(size, screen.width() / max(1, screen.height()), window)
    if not dialog.exec():
        return
    size = dialog.chosen()
    window.settings.setValue("picture/size", size)
    shots = "_".join(s.shot_id for s in (canvas.shot, canvas.reference) if s is not None)
    folder = window.model.path.parent if window.model.path is not None else Path.home()
    path = ask_path(window, f"Write the picture ({kind.upper()})",
                    str(folder / f"{window.model.name or 'shot'}_{shots}.{kind}"),
                    f"{kind.upper()} files (*.{kind})", mode="save")
    if path:
        export_picture(window, path, size.width(), size.height())


def export_picture(window, path, width: int, height: int) -> bool:
    """Write the canvas's picture to ``path`` (SVG when it ends in .svg, else PNG)."""
    try:
        write_picture(window.canvas, path, width, height)
    except (WakelineError, OSError) as exc:
        window.show_problem("Picture", str(exc))
        return False
    window.statusBar().showMessage(f"Picture written: {path} ({width} x {height} px)", 8000)
    return True


def write_picture(canvas, path, width: int, height: int) -> None:
    """The picture as PNG, or SVG when ``path`` ends in .svg, written whole or not at all."""
    path = Path(path)
    out = QSaveFile(str(path))
    if not out.open(QSaveFile.OpenModeFlag.WriteOnly):
        raise WakelineError(f"{path}: cannot write here ({out.errorString()})")
    if path.suffix.lower() == ".svg":
        svg = QSvgGenerator()
        svg.setOutputDevice(out)
        svg.setSize(QSize(width, height))
        svg.setResolution(SVG_DPI)  # so its width and height are the px asked for
        svg.setViewBox(QRect(0, 0, width, height))
        svg.setTitle(f"wakeline: {canvas.legend_title()}")
        canvas.render_picture(svg, width, height)
    elif not canvas.picture_image(width, height).save(out, "PNG"):
        out.cancelWriting()
        raise WakelineError(f"{path}: the picture could not be encoded")
    if not out.commit():
        raise WakelineError(f"{path}: cannot write ({out.errorString()})")
