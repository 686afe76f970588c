"""The window's file dialogs: Qt's own dialog (not the desktop's, which takes no filter model),
with the files a session keeps beside itself (journal, pending arrays, lock) hidden, and where a
new session file should go by default.
"""

from __future__ import annotations

import os
from pathlib import Path

from PySide6.QtCore import QSortFilterProxyModel
from PySide6.QtWidgets import QFileDialog, QFileSystemModel

from app.review.model import is_companion_file

SESSION_FILTER = "wakeline sessions (*.h5 *.hdf5);;All files (*)"
#: the program's own folder (a checkout, or where it is installed): no place for the analyst's data
PROGRAM_FOLDER = Path(__file__).resolve().parents[2]


class HideCompanions(QSortFilterProxyModel):
    """Leaves out of a file dialog the files the store keeps beside a session."""

    def filterAcceptsRow(self, source_row: int, source_parent) -> bool:
        model = self.sourceModel()
        index = model.index(source_row, 0, source_parent)
        name = model.fileName(index) if isinstance(model, QFileSystemModel) else ""
        return not is_companion_file(name)


def file_dialog(parent, title: str, start: str, file_filter: str = "",
                mode: str = "open") -> QFileDialog:
    """A file dialog hiding session companions; ``mode`` "open", "save" or "folder"."""
    dialog = QFileDialog(parent, title, str(start), file_filter)
    dialog.setOption(QFileDialog.Option.DontUseNativeDialog)  # the filter model needs Qt's own
    dialog.setProxyModel(HideCompanions(dialog))
    if mode == "save":
        dialog.setAcceptMode(QFileDialog.AcceptMode.AcceptSave)
        dialog.setFileMode(QFileDialog.FileMode.AnyFile)
        if not Path(start).is_dir():
            dialog.setDirectory(str(Path(start).parent))
            dialog.selectFile(Path(start).name)
            dialog.setDefaultSuffix(Path(start).suffix.lstrip("."))
    elif mode == "folder":
        dialog.setFileMode(QFileDialog.FileMode.Directory)
        dialog.setOption(QFileDialog.Option.ShowDirsOnly)
    else:
        dialog.setFileMode(QFileDialog.FileMode.ExistingFile)
    return dialog


def ask_path(parent, title: str, start: str, file_filter: str = "", mode: str = "open") -> str:
    """Run ``file_dialog``; the chosen path, or "" when cancelled."""
    dialog = file_dialog(parent, title, start, file_filter, mode)
    if not dialog.exec():
        return ""
    chosen = dialog.selectedFiles()
    return chosen[0] if chosen else ""


def writable_place(folder: Path) -> bool:
    """A folder the analyst's files may go in: writable, and not the program's own folder."""
    folder = folder.resolve()
    ours = folder == PROGRAM_FOLDER or PROGRAM_FOLDER in folder.parents
    return folder.is_dir() and os.access(folder, os.W_OK) and not ours


def new_session_path(shot_folder, fallbacks) -> Path:
    """Where a session imported from ``shot_folder`` goes by default: beside it, named after it,
    unless that place is read-only or the program's own folder; then the first writable of
    ``fallbacks`` (the last folder used, the home folder)."""
    beside = Path(shot_folder).resolve().with_suffix(".h5")
    for place in (beside.parent, *map(Path, fallbacks)):
        if writable_place(place):
            return place / beside.name
    return beside
