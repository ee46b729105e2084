"""The QApplication: names for QSettings, icon, high-DPI, light/dark style."""

from __future__ import annotations

import os
import sys


def has_display() -> bool:
    """True when Qt can show a window here (a display server, or a platform chosen explicitly)."""
    if os.environ.get("QT_QPA_PLATFORM"):
        return True
    if sys.platform in ("win32", "darwin"):
        return True
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))


def _pin_none() -> None:
    """Work around a reference-count error in PySide6 6.12 on CPython < 3.12.

    Converting an empty QVariant to Python ``None`` (``QModelIndex.data()``,
    ``QComboBox.currentData()``, ``QSettings.value()``, and some item-view painting paths)
    drops one reference to ``None`` without taking it, so after enough repaints CPython aborts
    with "deallocating None". CPython 3.12 made ``None`` immortal (PEP 683); on older versions
    we give ``None`` the same huge reference count. ``None`` is never freed anyway.
    """
    import platform

    if platform.python_implementation() != "CPython" or sys.version_info >= (3, 12):
        return
    import ctypes

    count = ctypes.c_ssize_t.from_address(id(None))
    if count.value < (1 << 40):
        count.value += 1 << 40


def create_application(argv=None, offscreen: bool = False):
    """Return the running QApplication or make one (``offscreen`` renders without a display)."""
    if offscreen:
        os.environ["QT_QPA_PLATFORM"] = "offscreen"
    from PySide6.QtCore import QCoreApplication
    from PySide6.QtWidgets import QApplication

    _pin_none()
    app = QApplication.instance()
    if app is None:
        QCoreApplication.setOrganizationName("caseview")
        QCoreApplication.setApplicationName("caseview")
        app = QApplication(list(argv or ["caseview"]))
        app.setApplicationDisplayName("caseview")
        app.setStyle("Fusion")  # follows the system palette (light or dark) on every platform
        from . import theme

        app.setWindowIcon(theme.icon("app"))
    return app
