"""The caseview desktop window (PySide6).

Heavy modules (Qt, matplotlib) are imported by the modules of this package only, never by
``caseview`` itself, so the command line stays lean. Entry point: :func:`caseview.gui.launch.main`.
"""
