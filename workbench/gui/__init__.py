"""The window (PySide6 widgets + pyqtgraph plots). It presents the core; it computes nothing.

Import it lazily: ``from workbench.gui.app import run_app``. Nothing in the
Qt-free core imports this package.
"""
