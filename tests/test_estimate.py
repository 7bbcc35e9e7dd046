"""The time estimate (workbench.sweep.estimate) and the window's default plan
(workbench.sweep.defaults).

The calibration's arithmetic is checked with a fake clock and a fake trial whose cost is
known exactly (intercept + slope x epochs: a straight line through two points, the
two-point form of a line); the estimate's sum is recomputed by hand from its formula in
the module docstring. No test times anything real: how close the estimates come is a
benchmark figure (``workbench.sweep.estimate.check_estimates``).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from workbench.sweep import estimate as E
from workbench.sweep.defaults import WINDOW_DEFAULTS, default_heads, default_plan, guard_checks
from workbench.sweep.plan import build_plan

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"


@pytest.fixture
def table(tmp_path):
    rng = np.random.default_rng(0)
    n = 120
    x = rng.normal(size=(n, 3))
    df = pd.DataFrame({"a": x[:, 0], "b": x[:, 1], "c": x[:, 2],
                       "y": x[:, 0] - 0.5 * x[:, 1] + 0.1 * rng.normal(size=n)})
    path = tmp_path / "t.csv"
    df.to_csv(path, index=False)
    return path


def _plan(path, hidden=("relu", "tanh"), **kw):
    args = dict(hidden=list(hidden), output=["identity"], layers=["4"],
                learning_rates=[0.01, 0.001], folds=3, repeats=2, epochs=50)
    args.update(kw)
    return build_plan(str(path), "y", **args)


class FakeTrials:
    """run_trial stand-in: advances a fake clock by a known cost per configuration."""

    COST = {"relu": (0.010, 0.002), "tanh": (0.020, 0.003)}  # (intercept s, s per epoch)
    PREP = 0.5
    BASELINE = {"constant": 0.004, "linear": 0.007}

    def __init__(self):
        self.now = 0.0
        self.calls = []
        self.groups = []
        self.folds_seen = set()

    def clock(self):
        return self.now

    def run_trial(self, data, spec):
        cfg = spec["config"]
        self.calls.append((cfg.get("hidden", cfg.get("name")), spec["epochs"]))
        if data.token not in self.folds_seen:
            self.folds_seen.add(data.token)
            self.now += self.PREP
        if cfg.get("kind") == "baseline":
            self.now += self.BASELINE[cfg["name"]]
        else:
            a, b = self.COST[cfg["hidden"]]
            self.now += a + b * spec["epochs"]
        return {}

    def run_trials(self, data, specs):
        """A group (a configuration's folds): here each trial costs what it costs alone."""
        self.groups.append(len(specs))
        return [self.run_trial(data, s) for s in specs]


@pytest.fixture
def fake(monkeypatch):
    f = FakeTrials()
    import workbench.sweep.trials as trials

    monkeypatch.setattr(trials, "run_trial", f.run_trial)
    monkeypatch.setattr(trials, "run_trials", f.run_trials)
    monkeypatch.setattr(E.time, "perf_counter", f.clock)
    return f


def test_calibration_recovers_a_known_cost_line(table, fake):
    plan = _plan(table)
    cal = E.calibrate(plan)
    for hidden, (a, b) in FakeTrials.COST.items():
        key = ("relu" if hidden == "relu" else "tanh", "identity", (4,), "numpy")
        assert cal.per_epoch[key] == pytest.approx(b)
        assert cal.per_trial[key] == pytest.approx(a)
    assert cal.prep == pytest.approx(FakeTrials.PREP)
    assert cal.baseline == pytest.approx(FakeTrials.BASELINE)
    # the learning rates share one timing: two configurations per hidden, timed once each,
    # as the group of a repeat's folds the runner hands out to train in lockstep
    timed = [c for c in fake.calls if c[1] in E.CALIBRATION_EPOCHS]
    assert len(timed) == 2 * 2 * plan.folds  # a group is timed once: K trials long
    assert fake.groups == [plan.folds] * (2 * 2)
    assert cal.covers(plan)


def test_configurations_the_runner_does_not_stack_are_timed_alone(table, fake):
    """scikit-learn's MLP (and a racing plan, whose tasks end at its looks) run one trial
    per task: their calibration times single trials, and recovers the same line."""
    for plan in (_plan(table, engine="sklearn", hidden=("relu", "tanh")),
                 _plan(table, race=True)):
        fake.groups.clear()
        cal = E.calibrate(plan)
        assert fake.groups == []
        for hidden, (a, b) in FakeTrials.COST.items():
            key = next(k for k in cal.per_epoch if k[0] == hidden)
            assert cal.per_epoch[key] == pytest.approx(b)
            assert cal.per_trial[key] == pytest.approx(a)


def test_a_new_activation_is_timed_alone_and_new_data_from_scratch(table, fake):
    cal = E.calibrate(_plan(table, hidden=("relu",)))
    wider = _plan(table)
    assert not cal.covers(wider)
    fake.calls.clear()
    cal2 = E.calibrate(wider, previous=cal)
    assert cal2.covers(wider)
    assert {h for h, e in fake.calls if e in E.CALIBRATION_EPOCHS} == {"tanh"}
    # other folds: another data key, so the earlier numbers do not carry over
    assert not cal2.covers(_plan(table, folds=4))


def test_the_estimate_is_the_documented_sum(table):
    plan = _plan(table)
    keys = {E.cost_key(c) for c in plan.configurations()}
    cal = E.Calibration(E.data_key(plan), per_epoch={k: 0.002 for k in keys},
                        per_trial={k: 0.03 for k in keys},
                        baseline={"constant": 0.01, "linear": 0.02}, prep=0.25)
    est = E.estimate(plan, cal, jobs=2, startup=1.5)
    # by hand: 4 configurations x 6 trials x (0.03 + 0.002 x 50) + 6 x (0.01 + 0.02)
    trials = 4 * 6 * (0.03 + 0.1) + 6 * 0.03
    assert est.trials == pytest.approx(trials)
    # the folds prepared once for both workers (the runner's default): CPU like the trials'
    assert est.seconds == pytest.approx(1.5 + (6 * 0.25 + trials) / 2)
    # one worker: the trials' seconds are not divided
    assert E.estimate(plan, cal, jobs=1, startup=0.0).seconds == pytest.approx(
        6 * 0.25 + trials)
    # the window's sweeps share only a large table's folds: on a small one every worker
    # fits every fold's preprocessing
    assert cal.feature_bytes == 0
    assert E.estimate(plan, cal, jobs=2, startup=1.5, share_folds="large").seconds == \
        pytest.approx(1.5 + 6 * 0.25 + trials / 2)
    from workbench.sweep.fold_files import SHARED_MIN_BYTES

    cal.feature_bytes = SHARED_MIN_BYTES
    assert E.estimate(plan, cal, jobs=2, startup=1.5, share_folds="large").seconds == \
        pytest.approx(est.seconds)


def test_a_calibration_notes_the_tables_size_and_the_window_asks_its_policy(table, fake,
                                                                           monkeypatch):
    """calibrate records the features' bytes (rows x feature columns x 8, what
    fold_files.worth_sharing reads); the window's estimate passes its fold-sharing policy."""
    from workbench.gui import core_adapter
    from workbench.sweep.runner import load_data

    plan = _plan(table)
    cal = E.calibrate(plan)
    data, _ = load_data(plan)
    assert cal.feature_bytes == data.X.shape[0] * data.X.shape[1] * 8 > 0
    asked = {}
    monkeypatch.setattr(E, "estimate", lambda *a, **k: asked.update(k))
    core_adapter.estimate(plan, cal, 2, startup=1.0)
    assert asked["share_folds"] == core_adapter.WINDOW_SHARE_FOLDS


def test_the_check_runs_a_default_plan_and_compares(table):
    rows = E.check_estimates([table], jobs=1, quick=True)
    (r,) = rows
    assert r["state"] == "finished" and r["trials"] == r["configurations"] * 2
    assert r["estimate_s"] > 0 and r["actual_s"] > 0
    assert r["ratio"] == pytest.approx(r["actual_s"] / r["estimate_s"])


# --------------------------------------------------------------------------- defaults


@pytest.mark.parametrize("name, heads", [("kiln_batches.csv", ["logistic", "softmax"]),
                                         ("greenhouse_temp.csv", ["identity"]),
                                         ("trap_catches.csv", ["exp", "softplus"]),
                                         ("seed_germination.csv", ["logistic", "identity"])])
def test_default_plan_ticks_the_advised_head_and_one_accepted_alternative(name, heads):
    plan = default_plan(SAMPLES / name)
    assert sorted(plan.heads) == sorted(heads)
    assert plan.epochs == WINDOW_DEFAULTS["epochs"] and plan.folds == WINDOW_DEFAULTS["folds"]
    assert plan.tune_learning_rate


def test_default_heads_prefers_a_head_without_a_warning():
    from types import SimpleNamespace as N

    advice = N(output_head="a", heads_to_sweep=("a", "b", "c"))
    checks = [("a", N(allowed=True, warning=False)), ("b", N(allowed=True, warning=True)),
              ("c", N(allowed=True, warning=False))]
    assert default_heads(advice, checks) == ["a", "c"]
    checks[2] = ("c", N(allowed=False, warning=False))
    assert default_heads(advice, checks) == ["a", "b"]


def test_guard_checks_agree_with_the_plan_guard():
    from workbench.data.intake import load_table
    from workbench.data.profiling import analyse_target
    from workbench.sweep.plan import resolve_heads

    df, _ = load_table(SAMPLES / "greenhouse_temp.csv")
    info = analyse_target(df, "temp_change_next_hour")
    for head, chk in guard_checks(info):
        try:
            _, refused, warns = resolve_heads(info, [head])
        except Exception:
            refused, warns = {head: ""}, {}
        assert chk.allowed == (head not in refused) and chk.warning == (head in warns)
