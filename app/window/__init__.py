"""The desktop window (PySide6 + pyqtgraph)."""
