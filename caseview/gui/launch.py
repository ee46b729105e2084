"""Entry point of ``caseview-window``: open the window, optionally on a workspace."""

from __future__ import annotations

import sys


def run_window(workspace=None, case_id=None, as_of=None, screenshot=None, size=(1400, 900), panel: int = 0,
               dialog: str | None = None) -> int:
    """Show the window (or render it to ``screenshot`` offscreen and return)."""
    from .app import create_application

    app = create_application(sys.argv[:1], offscreen=screenshot is not None)
    from .main_window import MainWindow

    window = MainWindow(as_of=as_of)
    window.resize(*size)
    if screenshot is not None:
        return window.render_screenshot(screenshot, workspace, case_id, size, tab=panel, dialog=dialog)
    window.show()
    if workspace:
        window.open_workspace(workspace, case_id=case_id)
    return app.exec()


def main(argv=None) -> int:
    args = list(sys.argv[1:] if argv is None else argv)
    from .app import has_display

    if not has_display():
        print("caseview-window: no display found. Use 'caseview gui WS --screenshot out.png' to render "
              "the window to a file, or the command line: 'caseview score WS --as-of YYYY-MM-DD --out scores.csv'.",
              file=sys.stderr)
        return 2
    return run_window(args[0] if args else None)


if __name__ == "__main__":
    sys.exit(main())
