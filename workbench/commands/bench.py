"""``workbench bench``: speed figures measured side by side in one run."""

from __future__ import annotations

import importlib
import json
import os
import sys

NAME = "bench"
HELP = ("Measure speed: the engine vs scikit-learn and the product floor, a whole sweep vs "
        "GridSearchCV, start-up, memory (default); table loading, the fixed sweep, the window.")

#: part name -> module with run(quick=False) -> {"title", "lines", "figures"}
PARTS = {
    "engine": "workbench.benchmarks.engine",
    "kiln": "workbench.benchmarks.kiln",
    "load": "workbench.benchmarks.load",
    "sweep": "workbench.benchmarks.sweep",
    "gui": "workbench.gui.bench_gui",
    "estimates": "workbench.sweep.estimate",
}
#: the parts a plain ``workbench bench`` runs
DEFAULT_PARTS = ("engine", "kiln")


def add_arguments(parser):
    parser.add_argument("--json", action="store_true", help="print the figures as one JSON object")
    parser.add_argument("--sweep", action="store_true", help="also time the fixed sweep: 1 vs 2 "
                        "jobs, and scikit-learn's GridSearchCV on the same configurations")
    parser.add_argument("--load", action="store_true", help="also time loading a 1,000,000-row CSV")
    parser.add_argument("--gui", action="store_true", help="also time the window: sorting "
                        "10,000 result rows, event-loop stalls during a sweep")
    parser.add_argument("--estimates", action="store_true", help="also run the six sample "
                        "sets' default plans and set each time estimate beside the measured "
                        "time (several minutes)")
    parser.add_argument("--all", action="store_true", help="every part")
    parser.add_argument("--no-engine", action="store_true", help="skip the engine workloads")
    parser.add_argument("--no-kiln", action="store_true", help="skip the kiln sweep, start-up "
                        "and memory figures")
    parser.add_argument("--quick", action="store_true", help="small workloads (a smoke test, "
                        "about two minutes)")


def load_average() -> str:
    """``uptime``'s load average (1, 5, 15 minutes), or why it is not known."""
    try:
        return "load average {:.2f}, {:.2f}, {:.2f}".format(*os.getloadavg())
    except (AttributeError, OSError):
        return "load average not available on this system"


def run(args) -> int:
    from workbench.errors import InputError

    wanted = [part for part in DEFAULT_PARTS if not getattr(args, f"no_{part}")]
    for part in ("load", "sweep", "gui", "estimates"):
        if args.all or getattr(args, part):
            wanted.append(part)
    if not wanted:
        raise InputError("nothing to measure; drop --no-engine / --no-kiln or add --sweep, "
                         "--load or --gui")
    results = {}
    start = load_average()
    if not args.json:
        print(f"at start: {start}")
        sys.stdout.flush()
    for part in wanted:
        try:
            mod = importlib.import_module(PARTS[part])
        except ImportError as exc:
            raise InputError(f"the {part} benchmark is not available ({exc}); "
                             "reinstall the project with its dependencies") from None
        res = mod.run(quick=args.quick)
        results[part] = res
        if not args.json:
            print(f"== {res.get('title', part)}")
            for line in res.get("lines", []):
                print(line)
            sys.stdout.flush()
    end = load_average()
    if args.json:
        out = {k: v.get("figures", {}) for k, v in results.items()}
        out["load_average"] = {"start": start, "end": end}
        print(json.dumps(out, indent=2))
    else:
        print(f"at end: {end}")
    return 0
