"""Table loading speed and memory: :func:`workbench.data.intake.load_table` on a large CSV.

The workload (issue "Data intake", section 1): a 1,000,000-row x 20-column CSV of
numbers (18 real-valued columns with four decimals, 2 integer columns), written
to a temporary folder with pyarrow's CSV writer. Each run loads it in a fresh
Python process, so that the peak resident memory of the load can be read
(``resource.getrusage(...).ru_maxrss`` minus the process's resident size just
before the load) and no page of an earlier run is reused. The reported time is the
median of the runs; the memory figure is the largest peak over the runs, divided
by the numeric payload (rows x numeric columns x 8 bytes, the float64/int64 frame).

The budget the issue sets: under 5 s and under 3 x the numeric payload.
"""

from __future__ import annotations

import json
import os
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

ROWS, COLUMNS, INT_COLUMNS = 1_000_000, 20, 2
QUICK_ROWS = 100_000
SECONDS_BUDGET, MEMORY_BUDGET = 5.0, 3.0

_CHILD = r"""
import json, os, resource, sys, time
from workbench.data.intake import load_table

def rss():
    with open("/proc/self/statm") as fh:
        return int(fh.read().split()[1]) * resource.getpagesize()

before = rss()
c0 = os.times()
t = time.perf_counter()
df, report = load_table(sys.argv[1])
seconds = time.perf_counter() - t
c1 = os.times()
cpu = (c1.user - c0.user) + (c1.system - c0.system)
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
numeric = df.select_dtypes("number")
print(json.dumps({"seconds": seconds, "cpu": cpu, "peak_extra": peak - before, "rows": int(df.shape[0]),
                  "columns": int(df.shape[1]), "payload": int(numeric.memory_usage(index=False).sum()),
                  "engine": report.engine}))
"""


def write_csv(path: Path, rows: int, seed: int = 0) -> Path:
    """Write the benchmark table (see the module docstring) to ``path``."""
    import pyarrow as pa
    import pyarrow.csv as pacsv

    rng = np.random.default_rng(seed)
    cols = {}
    for j in range(COLUMNS - INT_COLUMNS):
        cols[f"x{j + 1:02d}"] = np.round(rng.normal(0, 10 ** (j % 4), rows), 4)
    for j in range(INT_COLUMNS):
        cols[f"n{j + 1}"] = rng.integers(0, 10 ** (3 + j), rows)
    pacsv.write_csv(pa.table(cols), path)
    return path


def _one_run(path: Path) -> dict:
    env = dict(os.environ)
    root = str(Path(__file__).resolve().parents[2])
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    out = subprocess.run([sys.executable, "-c", _CHILD, str(path)], capture_output=True,
                         text=True, env=env, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def run(quick: bool = False) -> dict:
    """Measure :func:`load_table` on the benchmark CSV.

    Parameters
    ----------
    quick : bool
        Use 100,000 rows instead of 1,000,000 (the budget check then does not apply).

    Returns
    -------
    dict
        ``{"title", "lines", "figures"}``; figures: ``rows``, ``columns``, ``file_mb``,
        ``seconds`` (median wall time), ``seconds_min``, ``seconds_max``, ``cpu_seconds`` (median),
        ``load_average`` (1-minute load before the runs: other work slows the wall time), ``rows_per_second``, ``payload_mb``,
        ``peak_mb``, ``memory_over_payload``, ``seconds_over_budget`` (seconds / 5 s),
        ``memory_over_budget`` (ratio / 3).
    """
    rows = QUICK_ROWS if quick else ROWS
    repeats = 3
    with tempfile.TemporaryDirectory(prefix="workbench-bench-load-") as tmp:
        path = write_csv(Path(tmp) / "large.csv", rows)
        file_mb = path.stat().st_size / 1e6
        load_before = os.getloadavg()[0]
        runs = [_one_run(path) for _ in range(repeats)]
    secs = [r["seconds"] for r in runs]
    med = statistics.median(secs)
    cpu = statistics.median(r["cpu"] for r in runs)
    payload = runs[0]["payload"]
    peak = max(r["peak_extra"] for r in runs)
    ratio = peak / payload if payload else float("nan")
    figures = {
        "rows": rows, "columns": runs[0]["columns"], "file_mb": round(file_mb, 1),
        "seconds": round(med, 3), "seconds_min": round(min(secs), 3),
        "seconds_max": round(max(secs), 3),
        "cpu_seconds": round(cpu, 3), "load_average": round(load_before, 2),
        "rows_per_second": round(rows / med), "payload_mb": round(payload / 1e6, 1),
        "peak_mb": round(peak / 1e6, 1), "memory_over_payload": round(ratio, 2),
        "seconds_over_budget": round(med / SECONDS_BUDGET, 3),
        "memory_over_budget": round(ratio / MEMORY_BUDGET, 3),
    }
    verdict = ""
    if not quick:
        ok = med < SECONDS_BUDGET and ratio < MEMORY_BUDGET
        verdict = " - within budget" if ok else " - OVER BUDGET"
    lines = [
        f"load_table on a {rows:,}-row x {figures['columns']}-column CSV ({file_mb:.0f} MB, "
        f"engine {runs[0]['engine']}): median {med:.2f} s over {repeats} fresh processes "
        f"({', '.join(f'{s:.2f}' for s in secs)} s), {rows / med / 1e6:.2f} M rows/s; "
        f"CPU time {cpu:.2f} s (user + system, all threads); machine load average "
        f"{load_before:.1f} on {os.cpu_count()} cores when it started",
        f"peak memory of the load {peak / 1e6:.0f} MB = {ratio:.2f} x the numeric payload "
        f"({payload / 1e6:.0f} MB); budget {SECONDS_BUDGET:g} s and {MEMORY_BUDGET:g} x"
        f"{verdict}",
    ]
    return {"title": "Loading a large CSV (workbench.data.intake.load_table)", "lines": lines,
            "figures": figures}


if __name__ == "__main__":  # pragma: no cover
    res = run(quick="--quick" in sys.argv)
    print(res["title"])
    for line in res["lines"]:
        print("  " + line)
