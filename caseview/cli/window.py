"""``caseview gui``: the desktop window, or a screenshot of it rendered offscreen."""

from __future__ import annotations

import sys

from .options import add_as_of_option, as_of_date


def register(subparsers) -> None:
    p = subparsers.add_parser("gui", help="open the desktop window (or render it to a PNG with --screenshot)",
                              description="Open the caseview window. Everything it shows is advisory.")
    p.add_argument("workspace", nargs="?", metavar="WS", help="workspace file to open")
    p.add_argument("--demo", action="store_true",
                   help="open the invented demo caseload (created on first use in your user data folder)")
    p.add_argument("--case", metavar="ID", help="select this case")
    add_as_of_option(p, required=False, help="as-of date YYYY-MM-DD (default today)", metavar="DATE")
    p.add_argument("--screenshot", metavar="PNG", help="render the window offscreen to this PNG and exit")
    p.add_argument("--panel", choices=("caseload", "queue", "model", "outlook"), default="caseload",
                   help="panel to show in the screenshot (default caseload)")
    p.add_argument("--dialog", choices=("glossary",),
                   help="with --screenshot: render this dialog over the window instead (Help > Glossary)")
    p.add_argument("--size", metavar="WxH", default="1400x900", help="window size for --screenshot (default 1400x900)")
    p.set_defaults(run=run)


def run(args) -> int:
    from caseview.errors import InputError

    as_of = as_of_date(args)
    try:
        width, height = (int(v) for v in args.size.lower().split("x"))
    except ValueError:
        raise InputError(f"--size: expected WIDTHxHEIGHT such as 1400x900, got {args.size!r}") from None
    if width < 1400 or height < 900:
        raise InputError(f"--size: the window needs at least 1400x900, got {args.size}")
    if args.demo:
        if args.workspace:
            raise InputError("give either a workspace or --demo, not both")
        args.workspace = str(_demo_workspace(args))
    if args.screenshot is None:
        from caseview.gui.app import has_display

        if not has_display():
            ws = args.workspace or "WS"
            print(f"caseview: no display found, so the window cannot open here. Render it to a file with "
                  f"'caseview gui {ws} --screenshot out.png', or use the command line: "
                  f"'caseview score {ws} --as-of YYYY-MM-DD --out scores.csv'.", file=sys.stderr)
            return 2
    from caseview.gui.launch import run_window

    return run_window(args.workspace, case_id=args.case, as_of=as_of, screenshot=args.screenshot,
                      size=(width, height), panel=("caseload", "queue", "model", "outlook").index(args.panel),
                      dialog=args.dialog)


def _demo_workspace(args):
    """The demo workspace in the user's data folder, created from demo_cases/ on first use."""
    import os
    from pathlib import Path

    from caseview.attribution import os_user

    from .basic import create_demo_workspace

    base = Path(os.environ.get("XDG_DATA_HOME") or Path.home() / ".local" / "share") / "caseview"
    path = base / "demo.cvw"
    if not path.exists():
        base.mkdir(parents=True, exist_ok=True)
        create_demo_workspace(path, os_user())
        print(f"created the invented demo workspace at {path}", file=sys.stderr)
    return path
