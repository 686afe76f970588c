"""The review window's widgets (PySide6 + pyqtgraph): thin views over ``app.review.model``."""
