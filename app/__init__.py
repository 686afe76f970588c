"""wakeline application layer: the `wakeline` command and the PySide6 review window."""
