"""``workbench history [--store PATH] [--json]``.

Lists the stored sweeps, newest first, with their state (running, finished,
interrupted: a sweep whose process is gone counts as interrupted and can be
finished with ``workbench sweep --resume SWEEP_ID``), table, target, metric,
and how many of their trials are stored. ``--json`` prints a JSON list of
objects with ``sweep_id, state, created, updated, finished, table, target,
metric, n_configurations, n_trials, n_stored``.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

NAME = "history"
HELP = "List the stored sweeps with their state (running, finished, interrupted)."


def add_arguments(parser):
    parser.add_argument("--store", metavar="PATH", default=None,
                        help="the store file (default: the user's data folder)")
    parser.add_argument("--json", action="store_true", help="print a JSON list")


def _minute(iso: str | None) -> str:
    """``2026-12-01T23:12:47+00:00`` -> ``2026-12-01 23:12`` (the store's times are UTC)."""
    return "-" if not iso else iso[:16].replace("T", " ")


def run(args) -> int:
    from workbench.sweep.store import Store, default_store_path

    path = Path(args.store) if args.store is not None else default_store_path()
    if not path.exists():  # listing must not create a store (nor its folders)
        if args.json:
            print("[]")
        else:
            print(f"no sweeps stored in {path} (no store file there yet)")
        return 0
    with Store(args.store) as store:
        rows = store.sweep_summaries()
        path = store.path
    if args.json:
        json.dump(rows, sys.stdout, indent=2)
        sys.stdout.write("\n")
        return 0
    if not rows:
        print(f"no sweeps stored in {path}")
        return 0
    head = ["sweep", "state", "created (UTC)", "trials", "metric", "target", "table"]
    table = [[r["sweep_id"], r["state"], _minute(r["created"]), f"{r['n_stored']}/{r['n_trials']}",
              r["metric"], r["target"], r["table"]] for r in rows]
    widths = [max(len(h), *(len(t[i]) for t in table)) for i, h in enumerate(head)]
    for t in [head, *table]:
        print("  ".join(v.ljust(w) for v, w in zip(t, widths)).rstrip())
    return 0
