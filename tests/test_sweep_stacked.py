"""Trials run together (the folds of one configuration in a stack) give the results of
trials run alone, and the runner groups them without changing what a sweep stores.

Reference: the single fit itself -- :func:`workbench.sweep.trials.run_trial` for one
trial alone, and a sweep with ``runner.STACK = False`` (every trial a task of its own)
-- compared value for value and byte for byte: scores, epochs, every history list, the
health, and the out-of-fold predictions.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pytest

from workbench.nets import stacked as S
from workbench.sweep import runner
from workbench.sweep import trials as T
from workbench.sweep.plan import Trial, build_plan
from workbench.sweep.runner import load_data, run_sweep
from workbench.sweep.store import Store

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"
pytestmark = pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")


def _group(table, target, folds=4, config=0, **options):
    options.setdefault("layers", ["8"])
    plan = build_plan(SAMPLES / table, target, folds=folds, repeats=1, epochs=12, **options)
    data, _ = load_data(plan)
    split = plan.fold_indices(data.y)
    c = (plan.configurations() + plan.baseline_configurations())[config]
    specs = [{"config": c.to_dict(), "repeat": 0, "fold": f,
              "train": split[(0, f)][0].astype(np.int32),
              "test": split[(0, f)][1].astype(np.int32),
              "random_state": plan.model_seed(0, f), "task": plan.task, "metric": plan.metric,
              "epochs": plan.epochs, "early_stopping": plan.early_stopping,
              "batch_size": plan.batch_size, "dtype": plan.dtype} for f in range(folds)]
    return data, specs


def _record(res):
    """Everything a trial stores but its timing and worker."""
    pred = res["predictions"]
    return (res["config_index"], res["repeat"], res["fold"], res["status"], res["error"],
            res["test_score"], res["train_score"], res["epochs"], res["n_train"],
            res["n_test"], {k: v for k, v in res["history"].items()}, res["health"],
            None if pred is None else (pred.shape, hashlib.sha1(pred.tobytes()).hexdigest()))


class _Counting:
    """Counts the epochs trained in stacks and the predictions made in them."""

    def __init__(self, monkeypatch):
        self.counts = []
        real = S.run_in_lockstep

        def counted(functions):
            out, counts = real(functions)
            self.counts.append(counts)
            return out, counts
        monkeypatch.setattr(S, "run_in_lockstep", counted)


@pytest.mark.parametrize("table,target,options", [
    # binary, logistic head, ROC AUC per epoch; 2,500 rows in 4 equal folds
    ("kiln_batches.csv", "passes_inspection", {"hidden": "relu", "alphas": ["0.001"]}),
    # regression (scaled target, R^2 per epoch), two hidden layers, early stopping
    ("seed_germination.csv", "germinated_share",
     {"hidden": "tanh", "layers": ["6,5"], "early_stopping": True}),
    # multiclass softmax, folds of unequal size (some stack, the odd one trains alone)
    ("coffee_roast.csv", "roast_grade", {"hidden": "gelu"}),
])
def test_a_stacked_group_gives_each_trials_own_results(monkeypatch, table, target, options):
    folds = 3 if table == "coffee_roast.csv" else 4
    data, specs = _group(table, target, folds=folds, **options)
    counting = _Counting(monkeypatch)
    together = T.run_trials(data, [dict(s) for s in specs])
    T._FOLD_CACHE.clear()
    alone = [T.run_trial(data, dict(s)) for s in specs]
    assert counting.counts and counting.counts[0]["stacked_epochs"] > 0  # it did stack
    assert counting.counts[0]["predictions_stacked"] > 0  # and predicted held-out rows
    assert counting.counts[0]["losses_stacked"] > 0  # with their losses
    assert counting.counts[0]["health_stacked"] > 0  # and measured layer health
    if table == "kiln_batches.csv":  # equal folds: every epoch on the fits' own rows
        assert counting.counts[0]["epochs_in_place"] == counting.counts[0]["stacked_epochs"]
    assert all(r["status"] == "done" for r in alone), [r["error"] for r in alone]
    assert all(r["history"]["test_score"] for r in alone)
    for a, b in zip(together, alone):
        assert _record(a) == _record(b)


def test_groups_that_cannot_stack_run_alone_with_the_same_results(monkeypatch):
    """scikit-learn's MLP, baselines and a group over the memory budget run one by one."""
    counting = _Counting(monkeypatch)
    for config, options in ((0, {"hidden": "relu", "engine": "sklearn"}),
                            (1, {"hidden": "relu"})):  # config 1: the constant baseline
        data, specs = _group("kiln_batches.csv", "passes_inspection", folds=3,
                             config=config, **options)
        assert not T.stackable(specs[0])
        got = T.run_trials(data, [dict(s) for s in specs])
        assert [_record(r) for r in got] == [_record(T.run_trial(data, dict(s)))
                                             for s in specs]
    data, specs = _group("kiln_batches.csv", "passes_inspection", folds=3, hidden="relu")
    monkeypatch.setattr(T, "STACK_BYTES", 1)
    got = T.run_trials(data, [dict(s) for s in specs])
    assert counting.counts == []  # nothing ran in lockstep
    assert [_record(r) for r in got] == [_record(T.run_trial(data, dict(s))) for s in specs]


def test_a_stacked_sweep_stores_what_an_unstacked_sweep_stores(tmp_path, monkeypatch):
    """The whole runner (two processes, groups of folds, the first trial per worker alone,
    baselines between): the same stored trials, histories and out-of-fold predictions
    as with every trial sent alone."""
    plan = build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection", hidden="relu,tanh",
                      layers=["8"], folds=3, repeats=2, epochs=6)
    sent = []
    real_submit = runner._LokyExecutor.submit

    def submit(self, specs):
        sent.append(len(specs))
        return real_submit(self, specs)
    monkeypatch.setattr(runner._LokyExecutor, "submit", submit)
    results = {}
    for stack in (True, False):
        monkeypatch.setattr(runner, "STACK", stack)
        path = tmp_path / f"s{stack}.sqlite"
        with Store(path) as st:
            out = run_sweep(plan, store=st, jobs=2)
            assert out.state == "finished" and out.n_finished == plan.n_trials
            trials = st.trials(out.sweep_id, with_history=True)
            oof = {(t["config_index"], t["repeat"], t["fold"]): hashlib.sha1(
                st.trial_predictions(out.sweep_id, t["config_index"], t["repeat"],
                                     t["fold"])[1].tobytes()).hexdigest() for t in trials}
        keep = ("config_index", "repeat", "fold", "status", "test_score", "train_score",
                "epochs", "history", "health", "n_train", "n_test")
        results[stack] = (sorted(tuple(repr(t[k]) for k in keep) for t in trials), oof)
        if stack:
            assert max(sent) == plan.folds  # the folds of one repeat went out together
            sent.clear()
        else:
            assert set(sent) == {1}
    assert results[True][0] == results[False][0]
    assert results[True][1] == results[False][1]
    assert len(results[True][1]) == plan.n_trials


def test_groups_never_straddle_a_racing_look():
    from workbench.sweep import racing

    plan = build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection", hidden="relu,tanh",
                      layers=["8"], folds=3, repeats=3, epochs=3)
    trials = plan.trials()
    every = set(range(plan.n_configurations))
    plain = runner.group_trials(plan, trials, every)
    assert sorted(t.key for task in plain for t in task) == sorted(t.key for t in trials)
    assert all(len({(t.config_index, t.repeat) for t in task}) == 1 for task in plain)
    assert [len(task) for task in plain] == [plan.folds] * (plan.n_configurations * plan.repeats)
    assert runner.look_positions(plan) == set()  # no racing, no looks
    plan.race = True
    looks = runner.look_positions(plan)
    n = plan.folds * plan.repeats
    if not hasattr(racing, "look_positions"):  # racing's rule: every block from its first look
        assert looks == set(range(racing.Race(plan).first, n))
    assert looks and looks <= set(range(n))
    raced = runner.group_trials(plan, trials, every)
    assert sorted(t.key for task in raced for t in task) == sorted(t.key for t in trials)
    last = {}
    for task in raced:
        c, r = task[0].config_index, task[0].repeat
        assert all((t.config_index, t.repeat) == (c, r) for t in task)
        positions = [t.repeat * plan.folds + t.fold for t in task]
        assert positions == list(range(positions[0], positions[0] + len(task)))
        assert not any(p in looks for p in positions[:-1])  # a look only after its last
        if (c, r) in last:  # a task ends early only at a look
            assert last[(c, r)] in looks
        last[(c, r)] = positions[-1]
    # not stackable: one trial per task, in the plan's order
    assert runner.group_trials(plan, trials, set()) == [(t,) for t in trials]


def test_the_first_task_of_each_worker_is_one_trial():
    a, b = (Trial(0, 0, 0), Trial(0, 0, 1)), (Trial(1, 0, 0), Trial(1, 0, 1))
    head, rest = runner.first_trials([a, b, (Trial(2, 0, 0),)], 2)
    assert head == [(Trial(0, 0, 0),), (Trial(1, 0, 0),)]
    assert rest == [(Trial(0, 0, 1),), (Trial(1, 0, 1),), (Trial(2, 0, 0),)]
    head, rest = runner.first_trials([(Trial(0, 0, 0),), b], 2)
    assert head == [(Trial(0, 0, 0),), (Trial(1, 0, 0),)] and rest == [(Trial(1, 0, 1),)]
    # one task, two workers: each worker still starts with one trial of it
    head, rest = runner.first_trials([b], 2)
    assert head == [(Trial(1, 0, 0),), (Trial(1, 0, 1),)] and rest == []


def test_lockstep_predictions_follow_changed_rows_and_parameters():
    """A prediction made in the stack is handed out only for the same rows (same values)
    and the same parameters; after either changes, the network's own pass is used."""
    from workbench.nets import activations as act
    from workbench.nets.network import Network, with_ones
    from workbench.nets.optimizers import AdamOptimizer

    head = act.resolve_head("identity", "regression")

    def job(i):
        def run():
            net = Network([3, 5, 1], ["tanh"], head, np.dtype(np.float64))
            net.theta[...] = np.random.default_rng(i).uniform(-0.5, 0.5, net.theta.size)
            opt = AdamOptimizer(net.theta.size, net.dtype, 0.01)
            r = np.random.default_rng(10 + i)
            X, y, held = r.normal(size=(40, 3)), r.normal(size=(40, 1)), r.normal(size=(7, 3))
            out = []
            for epoch in range(5):
                net.train_epoch(opt, with_ones(X), y, 10, 1e-3)
                out.append(net.predict_raw(held).copy())
                if epoch == 1:
                    held[0, 0] += 1.0  # the same array, new values
                if epoch == 2:
                    net.theta[0] += 0.1  # parameters changed after the epoch
                out.append(net.predict_raw(held).copy())
            return out
        return run

    alone = [job(i)() for i in range(3)]
    together, counts = S.run_in_lockstep([job(i) for i in range(3)])
    assert counts["stacked_epochs"] == 15 and counts["predictions_stacked"] > 0
    for a, b in zip(alone, together):
        for pa, pb in zip(a, b):
            np.testing.assert_array_equal(pa, pb)


@pytest.mark.parametrize("head_name,task", [("identity", "regression"),
                                            ("logistic", "classification")])
def test_lockstep_losses_follow_changed_targets_rows_and_parameters(head_name, task):
    """The loss of a prediction made in the stack (Network.predict_with_loss) is handed out
    only for the same targets (same array, same values), rows and parameters; after any
    of them changes, the network's own pass and loss are used: the same values as alone,
    each epoch (reference: the single network's predict_raw and data_loss)."""
    from workbench.nets import activations as act
    from workbench.nets.network import Network, with_ones
    from workbench.nets.optimizers import AdamOptimizer

    head = act.resolve_head(head_name, task)

    def job(i):
        def run():
            net = Network([3, 5, 1], ["tanh"], head, np.dtype(np.float64))
            net.theta[...] = np.random.default_rng(i).uniform(-0.5, 0.5, net.theta.size)
            opt = AdamOptimizer(net.theta.size, net.dtype, 0.01)
            r = np.random.default_rng(10 + i)
            X, held = r.normal(size=(40, 3)), r.normal(size=(7, 3))
            y = (r.random((40, 1)) < 0.5).astype(float)
            y_held = (r.random((7, 1)) < 0.5).astype(float)
            out = []

            def change(step):
                nonlocal y_held
                if step == 1:
                    y_held[0, 0] = 1 - y_held[0, 0]  # the same targets array, new values
                if step == 2:
                    y_held = y_held.copy()  # another array, the same values
                if step == 3:
                    y_held[1, 0] = 1 - y_held[1, 0]
                if step == 4:
                    held[0, 0] += 1.0  # the rows changed
                if step == 5:
                    net.theta[0] += 0.1  # the parameters changed after the epoch

            group = S.LOCKSTEP.__dict__.get("group")
            for epoch in range(14):
                net.train_epoch(opt, with_ones(X), y, 10, 1e-3)
                change(epoch - 5)  # between the stack's prediction and the member's call
                before = group.handed_out if group else 0
                p, loss = net.predict_with_loss(held, y_held)
                assert loss == net.data_loss(y_held, net.predict_raw_alone(held))
                if group and epoch >= 12:  # after the last change: from the stack again
                    assert group.handed_out == before + 2  # the prediction and its loss
                out.append((p.copy(), loss))
                change(epoch)  # between the member's call and the next epoch
                out.append(net.predict_with_loss(held, y_held)[1])
            return out
        return run

    alone = [job(i)() for i in range(3)]
    together, counts = S.run_in_lockstep([job(i) for i in range(3)])
    assert counts["stacked_epochs"] == 42 and counts["losses_stacked"] > 0
    for a, b in zip(alone, together):
        assert len(a) == len(b)
        for va, vb in zip(a, b):
            if isinstance(va, tuple):
                np.testing.assert_array_equal(va[0], vb[0])
                assert va[1] == vb[1]
            else:
                assert va == vb


def test_lockstep_trains_on_the_fits_own_epoch_rows_only_when_they_line_up():
    """Epoch rows from Network.epoch_array (slices of one array of the group) are trained on
    in place while the stack's members hold consecutive slices; once a fit has left (here
    the middle one, after two epochs) the others' rows are copied into the stack as
    before. Reference: the same fits run alone, value for value."""
    from workbench.nets import activations as act
    from workbench.nets.network import Network, epoch_array
    from workbench.nets.optimizers import AdamOptimizer

    head = act.resolve_head("identity", "regression")

    def job(i):
        def run():
            net = Network([3, 4, 1], ["relu"], head, np.dtype(np.float64))
            net.theta[...] = np.random.default_rng(i).uniform(-0.5, 0.5, net.theta.size)
            opt = AdamOptimizer(net.theta.size, net.dtype, 0.01)
            r = np.random.default_rng(30 + i)
            X, y = r.normal(size=(40, 3)), r.normal(size=(40, 1))
            X_epoch, y_epoch = epoch_array((40, 4), np.float64), epoch_array((40, 1), np.float64)
            X_epoch[:, -1] = 1
            losses = []
            for _ in range(2 if i == 1 else 5):
                order = r.permutation(40)
                X_epoch[:, :-1], y_epoch[...] = X[order], y[order]
                losses.append(net.train_epoch(opt, X_epoch, y_epoch, 10, 1e-3))
            return losses, net.theta.copy()
        return run

    alone = [job(i)() for i in range(3)]
    together, counts = S.run_in_lockstep([job(i) for i in range(3)])
    assert counts["stacked_epochs"] == 3 * 2 + 2 * 3
    assert counts["epochs_in_place"] == 3 * 2  # members 0 and 2 after 1 left: copied
    for (la, ta), (lb, tb) in zip(alone, together):
        assert la == lb
        np.testing.assert_array_equal(ta, tb)
