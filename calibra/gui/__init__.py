"""Qt user interface of calibra: the only package that imports PySide6."""
