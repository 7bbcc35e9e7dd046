"""``workbench bench``: speed figures measured side by side in one run."""

from __future__ import annotations

import importlib
import json
import sys

NAME = "bench"
HELP = "Measure speed: the engine vs scikit-learn (default), table loading, sweeps, the window."

#: part name -> module with run(quick=False) -> {"title", "lines", "figures"}
PARTS = {
    "engine": "workbench.benchmarks.engine",
    "load": "workbench.benchmarks.load",
    "sweep": "workbench.benchmarks.sweep",
    "gui": "workbench.gui.bench_gui",
}


def add_arguments(parser):
    parser.add_argument("--json", action="store_true", help="print the figures as one JSON object")
    parser.add_argument("--sweep", action="store_true", help="also time a sweep: 1 vs 2 jobs, "
                        "and scikit-learn's GridSearchCV on the same configurations")
    parser.add_argument("--load", action="store_true", help="also time loading a 1,000,000-row CSV")
    parser.add_argument("--gui", action="store_true", help="also time the window: sorting "
                        "10,000 result rows, event-loop stalls during a sweep")
    parser.add_argument("--all", action="store_true", help="every part")
    parser.add_argument("--no-engine", action="store_true", help="skip the engine workload")
    parser.add_argument("--quick", action="store_true", help="small workloads (a smoke test)")


def run(args) -> int:
    from workbench.errors import InputError

    wanted = [] if args.no_engine else ["engine"]
    for part in ("load", "sweep", "gui"):
        if args.all or getattr(args, part):
            wanted.append(part)
    if not wanted:
        raise InputError("nothing to measure; drop --no-engine or add --sweep, --load or --gui")
    results = {}
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
    if args.json:
        print(json.dumps({k: v.get("figures", {}) for k, v in results.items()}, indent=2))
    return 0
