"""``workbench open [FILE] [--target COL] [--run] [--snapshot PNG]``: the window.

Plain ``workbench`` runs this command with no arguments. With ``--run`` the
window runs the default sweep (the advice's hidden activations and heads) to
completion; with ``--snapshot`` it saves a PNG of the whole window and exits,
which serves the README's screenshot and reviewers.
"""

from __future__ import annotations

import os
import sys

NAME = "open"
HELP = "Open the window (optionally load a table, run the default sweep, save a PNG)."


def add_arguments(parser):
    parser.add_argument("file", nargs="?", default=None, help="a table to load (CSV, Excel, Parquet)")
    parser.add_argument("--target", metavar="COL", default=None,
                        help="target column (default: the profile's suggested target)")
    parser.add_argument("--run", action="store_true",
                        help="run the default sweep to completion after loading")
    parser.add_argument("--snapshot", metavar="PNG", default=None,
                        help="save a PNG of the window (after the sweep with --run) and exit")
    parser.add_argument("--store", metavar="PATH", default=None,
                        help="the sweep store (default: the user's data folder)")
    parser.add_argument("--size", metavar="WxH", default="1280x800",
                        help="window size for --snapshot (default 1280x800)")


def run(args) -> int:
    from workbench.errors import InputError

    try:
        w, h = (int(v) for v in str(args.size).lower().split("x"))
    except ValueError:
        raise InputError(f"--size {args.size!r} is not WIDTHxHEIGHT, e.g. 1280x800") from None
    if args.file is None and (args.run or args.target):
        raise InputError("--run and --target need a FILE to load")
    if (sys.platform.startswith("linux") and args.snapshot is None
            and not any(os.environ.get(v) for v in ("DISPLAY", "WAYLAND_DISPLAY",
                                                    "QT_QPA_PLATFORM"))):
        # Qt would abort with a page of plugin messages
        raise InputError("there is no display to open the window on (DISPLAY and "
                         "WAYLAND_DISPLAY are unset); run it on a desktop, add --snapshot PNG, "
                         "or use the commands: workbench --help")
    from workbench.gui.app import run_app  # lazy: the core never imports Qt

    return run_app(args.file, target=args.target, run=args.run, snapshot=args.snapshot,
                   size=(w, h), store=args.store)
