"""Tiny stored sweeps for the export, predict and report tests (not a test module).

The tables carry hostile column names and labels on purpose: markup
(``<script>``), a spreadsheet formula (``=HYPERLINK(...)``) and cells starting
with ``+``, ``-`` and ``@``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

SCRIPT_COL = '<script>alert("x")</script>'
FORMULA_COL = '=HYPERLINK("http://evil.example","click")'
REG_TARGET = '=HYPERLINK("http://evil.example","score")'
CLF_TARGET = "@outcome"
#: whole numbers unique per row: profiled as an identifier (type id, ignored) by default
ID_COL = "ticket"


def hostile_table(n: int = 54, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({
        SCRIPT_COL: rng.normal(size=n),
        FORMULA_COL: rng.choice(["=1+2", "+cmd", "@SUM(A1)", "plain"], n),
        "when": pd.date_range("2021-03-01", periods=n, freq="37h").strftime("%Y-%m-%d %H:%M"),
        "size": rng.uniform(1, 5, n).round(2),
    })
    signal = 1.5 * df[SCRIPT_COL] + (df[FORMULA_COL] == "plain") + 0.3 * df["size"]
    df[REG_TARGET] = signal + rng.normal(scale=0.2, size=n)
    df[CLF_TARGET] = np.where(signal > np.median(signal), "-yes", "<b>no</b>")
    df.loc[[3, 11], "size"] = np.nan
    return df


def make_sweep(tmp_path, task: str = "regression", dtype: str = "float64", roles=None,
               with_id: bool = False):
    """Run a tiny sweep inline; return ``(store, sweep_id, table_path)``.

    ``roles`` are the user's column-role changes (as the window's profile table sets them);
    ``with_id`` adds :data:`ID_COL`, an identifier-like column a user may make a feature.
    """
    from workbench.sweep.plan import build_plan
    from workbench.sweep.runner import run_sweep
    from workbench.sweep.store import Store

    df = hostile_table()
    if with_id:
        df[ID_COL] = np.random.default_rng(1).permutation(len(df)) + 1000
    if task == "regression":
        df = df.drop(columns=[CLF_TARGET])
        target, hidden, output = REG_TARGET, "relu,gelu", "identity"
    else:
        df = df.drop(columns=[REG_TARGET])
        target, hidden, output = CLF_TARGET, "tanh,silu", "logistic"
    path = tmp_path / "table=+cmd.csv"
    df.to_csv(path, index=False)
    plan = build_plan(str(path), target, hidden=hidden, output=output, layers=["5"], folds=3,
                      repeats=2, epochs=12, dtype=dtype, seed=3)
    if roles:
        plan.roles = dict(roles)
        plan.validate()
    store = Store(tmp_path / "store.sqlite")
    outcome = run_sweep(plan, store=store, backend="inline")
    return store, outcome.sweep_id, path
