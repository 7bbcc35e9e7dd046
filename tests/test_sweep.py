"""The sweep: plan grid, trials, runner (processes, Dask), determinism, divergence, parity.

External references used here: scikit-learn's bundled breast-cancer and
diabetes data (``sklearn.datasets``), scikit-learn's ``StratifiedKFold`` /
``KFold`` (the folds), ``sklearn.metrics.get_scorer`` (the scores), and
scikit-learn's ``MLPRegressor`` / ``MLPClassifier`` as the reference for the
NumPy engine at sweep level (same fold scores to 1e-6 in float64).
"""

import json
import threading
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer, load_diabetes
from sklearn.metrics import get_scorer
from sklearn.model_selection import StratifiedKFold
from sklearn.neural_network import MLPClassifier
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from workbench.errors import InputError
from workbench.sweep.plan import (
    SweepPlan,
    build_plan,
    choose_engine,
    default_metric,
)
from workbench.sweep.results import sweep_results
from workbench.sweep.runner import run_sweep
from workbench.sweep.store import Store

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"


@pytest.fixture(scope="module")
def bundled(tmp_path_factory):
    d = tmp_path_factory.mktemp("bundled")
    bc = load_breast_cancer(as_frame=True).frame
    bc.to_csv(d / "breast_cancer.csv", index=False)
    db = load_diabetes(as_frame=True).frame
    db.to_csv(d / "diabetes.csv", index=False)
    return d


def _scores(store, sweep_id):
    return {(t["config_index"], t["repeat"], t["fold"]): (t["status"], t["test_score"],
                                                          t["train_score"], t["epochs"])
            for t in store.trials(sweep_id, with_history=False)
            + store.baseline_trials(sweep_id)}


def _same_predictions(store, a, b):
    """Two sweeps' out-of-fold predictions (baselines included) are bit for bit equal."""
    pa, pb = store.out_of_fold(a, baselines=True), store.out_of_fold(b, baselines=True)
    assert pa.complete.all() and pb.complete.all() and len(pa.columns) == len(pb.columns)
    np.testing.assert_array_equal(pa.y, pb.y)
    for x, y in zip(pa.folds + pa.predictions, pb.folds + pb.predictions, strict=True):
        assert x.tobytes() == y.tobytes()


# --------------------------------------------------------------------------- the plan


def test_plan_grid_counts_engines_and_json_round_trip():
    plan = SweepPlan(table="t.csv", target="y", task="regression", target_kind="count",
                     hidden=["relu", "gelu", "tanh"], heads=["exp", "softplus"],
                     layers=["64", (64, 32)], learning_rates=[0.001, 0.01], alphas=[0.0001],
                     folds=3, repeats=2)
    cfgs = plan.configurations()
    assert len(cfgs) == plan.n_configurations == 3 * 2 * 2 * 2
    assert plan.n_trials == 24 * 3 * 2 == len(plan.trials())
    assert len({t.key for t in plan.trials()}) == plan.n_trials
    # the default engine (auto) is the NumPy engine for every configuration (issue 14)
    assert {c.engine for c in cfgs} == {"numpy"}
    asked = SweepPlan.from_dict({**plan.to_dict(), "engine": "sklearn",
                                 "hidden": ["relu", "tanh"], "heads": ["exp"]})
    assert {c.engine for c in asked.configurations()} == {"sklearn"}  # MLPRegressor(poisson)
    # a count target whose heads are not all positive falls back from the Poisson deviance
    assert plan.metric == "r2"
    again = SweepPlan.from_dict(json.loads(json.dumps(plan.to_dict())))
    assert again == plan and again.configurations() == cfgs


def test_tune_is_a_log_scale_grid_given_to_every_activation_and_head():
    from sklearn.neural_network import MLPRegressor

    from workbench.sweep.plan import LEARNING_RATE_GRID

    # three values evenly spaced on a log scale from 1e-3 to 3e-2 (numpy.geomspace), the
    # middle one rounded to two significant figures; the low end is Adam's default step
    # (Kingma & Ba 2015), which is also scikit-learn's learning_rate_init default
    np.testing.assert_allclose(LEARNING_RATE_GRID, np.geomspace(1e-3, 3e-2, 3), rtol=0.005)
    assert LEARNING_RATE_GRID[0] == MLPRegressor().learning_rate_init
    plan = build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection",
                      hidden="relu,tanh,gelu", output="all", learning_rates="tune")
    assert plan.tune_learning_rate and plan.learning_rates == list(LEARNING_RATE_GRID)
    per_candidate = {}
    for c in plan.configurations():
        per_candidate.setdefault((c.hidden, c.head), []).append(c.learning_rate)
    assert len(per_candidate) == 3 * len(plan.heads) >= 6
    assert all(sorted(v) == list(LEARNING_RATE_GRID) for v in per_candidate.values())
    assert SweepPlan.from_dict(json.loads(json.dumps(plan.to_dict()))) == plan
    # the window's switch: the plan field replaces the rates it was given
    direct = SweepPlan(table="t.csv", target="y", task="regression", target_kind="signed",
                       hidden=["relu"], heads=["identity"], learning_rates=[0.2],
                       tune_learning_rate=True)
    assert direct.learning_rates == list(LEARNING_RATE_GRID)
    # explicit lists still work, and "tune" is not mixed with numbers
    listed = build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection", hidden="relu",
                        learning_rates=["0.002,0.02"])
    assert listed.learning_rates == [0.002, 0.02] and not listed.tune_learning_rate
    with pytest.raises(InputError, match="either 'tune' or a list") as info:
        build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection", learning_rates="tune,0.1")
    assert info.value.setting == "learning_rate"


def test_the_command_line_tune_option_reaches_the_plan(tmp_path, capsys):
    from workbench.cli import main
    from workbench.sweep.plan import LEARNING_RATE_GRID

    out = tmp_path / "r.json"
    assert main(["sweep", str(SAMPLES / "kiln_batches.csv"), "--target", "passes_inspection",
                 "--hidden", "relu", "--layers", "2", "--folds", "2", "--repeats", "1",
                 "--epochs", "1", "--learning-rate", "tune", "--jobs", "1", "--quiet",
                 "--store", str(tmp_path / "s.sqlite"), "--json", str(out)]) == 0
    res = json.loads(out.read_text())
    assert res["plan"]["tune_learning_rate"] is True
    assert sorted(c["learning_rate"] for c in res["configurations"]) == list(LEARNING_RATE_GRID)
    import argparse

    from workbench.commands.sweep import add_arguments

    parser = argparse.ArgumentParser()
    add_arguments(parser)
    helptext = " ".join(parser.format_help().split())
    assert all(f"{v:g}" in helptext for v in LEARNING_RATE_GRID)  # the help states the grid


def test_engine_choice_follows_what_scikit_learn_can_express():
    # auto is the NumPy engine everywhere, even where scikit-learn's MLP could run it
    assert choose_engine("auto", "classification", "relu", "logistic", "binary") == "numpy"
    assert choose_engine("auto", "classification", "relu", "softmax", "multiclass") == "numpy"
    assert choose_engine("auto", "regression", "identity", "identity") == "numpy"
    assert choose_engine("auto", "regression", "relu", "exp") == "numpy"
    assert choose_engine("numpy", "regression", "relu", "identity") == "numpy"
    # sklearn where scikit-learn's MLP has the combination, refused elsewhere
    assert choose_engine("sklearn", "classification", "relu", "logistic", "binary") == "sklearn"
    assert choose_engine("sklearn", "classification", "tanh", "softmax", "multiclass") == "sklearn"
    assert choose_engine("sklearn", "regression", "identity", "identity") == "sklearn"
    assert choose_engine("sklearn", "regression", "logistic", "exp") == "sklearn"
    for hidden, head, kind in (("silu", "identity", None), ("relu", "softmax", "binary"),
                               ("relu", "logistic", None), ("tanh", "relu", None)):
        task = "classification" if kind else "regression"
        with pytest.raises(InputError, match="cannot express"):
            choose_engine("sklearn", task, hidden, head, kind)


def test_default_metrics_and_bad_plans():
    assert default_metric("binary") == "roc_auc"
    assert default_metric("multiclass") == "balanced_accuracy"
    assert default_metric("signed") == "r2"
    assert default_metric("count", ["exp"]) == "neg_mean_poisson_deviance"
    base = dict(table="t.csv", target="y", task="classification", target_kind="binary",
                hidden=["relu"], heads=["logistic"])
    with pytest.raises(InputError, match="for regression"):
        SweepPlan(**base, metric="r2")
    with pytest.raises(InputError, match="unknown metric"):
        SweepPlan(**base, metric="accuracy_please")
    with pytest.raises(InputError, match="unknown hidden activation"):
        SweepPlan(**{**base, "hidden": ["relux"]})
    with pytest.raises(InputError, match="folds"):
        SweepPlan(**base, folds=1)
    with pytest.raises(InputError, match="learning rates"):
        SweepPlan(**base, learning_rates=[-1])


def test_folds_are_scikit_learns_stratified_folds_with_the_repeat_seed():
    y = np.array([0] * 30 + [1] * 12)
    plan = SweepPlan(table="t.csv", target="y", task="classification", target_kind="binary",
                     hidden=["relu"], heads=["logistic"], folds=3, repeats=2, seed=7)
    folds = plan.fold_indices(y)
    ref = StratifiedKFold(3, shuffle=True, random_state=plan.split_seed(1))
    for f, (tr, te) in enumerate(ref.split(np.zeros((42, 1)), y)):
        np.testing.assert_array_equal(folds[(1, f)][0], tr)
        np.testing.assert_array_equal(folds[(1, f)][1], te)
    assert plan.split_seed(0) != plan.split_seed(1)
    assert plan.model_seed(0, 0) != plan.model_seed(0, 1)
    with pytest.raises(InputError, match="rarest class"):
        plan.fold_indices(np.array([0] * 30 + [1] * 2))


def test_every_head_refused_is_an_input_error_naming_why():
    path = SAMPLES / "greenhouse_temp.csv"  # a signed target
    with pytest.raises(InputError, match="every requested output head is refused.*relu"):
        build_plan(path, "temp_change_next_hour", hidden="relu", output="relu,exp")


# --------------------------------------------------------------------------- complete sweeps

SAMPLE_CASES = [
    ("orchard_water.csv", "water_drawn_litres", "non_negative", "r2"),
    ("greenhouse_temp.csv", "temp_change_next_hour", "signed", "r2"),
    ("kiln_batches.csv", "passes_inspection", "binary", "roc_auc"),
    ("coffee_roast.csv", "roast_grade", "multiclass", "balanced_accuracy"),
    ("seed_germination.csv", "germinated_share", "bounded", "r2"),
    ("trap_catches.csv", "moths_caught", "count", "neg_mean_poisson_deviance"),
]


@pytest.mark.parametrize("name,target,kind,metric", SAMPLE_CASES)
def test_complete_small_sweep_on_each_sample_set(tmp_path, name, target, kind, metric):
    path = SAMPLES / name
    if not path.exists():
        pytest.skip(f"{name} not generated")
    plan = build_plan(path, target, hidden="relu,gelu", output="auto", layers=["8"], folds=2,
                      repeats=1, epochs=8, learning_rates=["0.01"])
    assert plan.target_kind == kind and plan.metric == metric
    assert plan.n_configurations == 2 and plan.n_trials == 4
    events = []
    with Store(tmp_path / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline", on_event=events.append)
        res = sweep_results(st, out.sweep_id)
    assert out.state == "finished" and out.n_finished == 4
    assert [c["status"] for c in res["configurations"]] == ["done", "done"]
    assert sum(len(c["trials"]) for c in res["configurations"]) == 4
    # the default engine trains every configuration on the NumPy engine
    assert {c["engine"] for c in res["configurations"]} == {"numpy"}
    best = res["configurations"][0]
    assert best["rank"] == 1 and best["tied_with_best"] and np.isfinite(best["mean"])
    if metric in ("roc_auc", "balanced_accuracy"):
        assert best["mean"] > 0.55  # better than chance
    elif metric == "r2":
        assert best["mean"] > 0.0  # better than predicting the mean
    types = [e["type"] for e in events]
    assert types[0] == "sweep_started" and types[-1] == "sweep_finished"
    assert types.count("trial_started") == 4 and types.count("trial_finished") == 4


@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")
def test_breast_cancer_reaches_095_accuracy(bundled, tmp_path):
    plan = build_plan(bundled / "breast_cancer.csv", "target", hidden="relu,tanh",
                      layers=["16"], folds=3, repeats=1, epochs=60, learning_rates=["0.01"],
                      metric="accuracy")
    assert plan.n_configurations == 2 and plan.n_trials == 6
    with Store(tmp_path / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline")
        res = sweep_results(st, out.sweep_id)
    assert len(res["configurations"]) == 2
    assert res["configurations"][0]["mean"] >= 0.95
    # the stored test score is scikit-learn's accuracy scorer on the fold
    X, y = load_breast_cancer(return_X_y=True)
    tr, te = plan.fold_indices(y)[(0, 0)]
    cfg = next(c for c in res["configurations"] if c["hidden"] == "relu")
    ref = make_pipeline(StandardScaler(), MLPClassifier(
        hidden_layer_sizes=(16,), activation="relu", learning_rate_init=0.01, max_iter=60,
        alpha=0.0001, random_state=plan.model_seed(0, 0))).fit(X[tr], y[tr])
    acc = get_scorer("accuracy")(ref, X[te], y[te])
    assert cfg["trials"][0]["test_score"] == pytest.approx(acc, abs=1e-12)


@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")
def test_diabetes_sweep(bundled, tmp_path):
    plan = build_plan(bundled / "diabetes.csv", "target", hidden="relu,silu", output="identity",
                      layers=["16"], folds=3, repeats=1, epochs=60, learning_rates=["0.01"],
                      alphas=["0.0001", "0.1"])
    assert plan.n_configurations == 4 and plan.n_trials == 12
    with Store(tmp_path / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline")
        res = sweep_results(st, out.sweep_id)
    assert all(c["status"] == "done" for c in res["configurations"])
    assert res["configurations"][0]["mean"] > 0.3  # r2 of a linear model is about 0.5 here
    assert res["n_comparisons"] == 3
    # refitting a stored configuration by hand reproduces its trial's score exactly
    from workbench.data.preprocessing import build_pipeline
    from workbench.sweep.runner import load_data
    from workbench.sweep.trials import estimator_for

    best = res["configurations"][0]
    data, _ = load_data(plan)
    tr, te = plan.fold_indices(data.y)[(0, 1)]
    pipe = build_pipeline(data.profile, data.target,
                          estimator_for(plan, best | {"index": best["index"]},
                                        plan.model_seed(0, 1)), best["head"])
    pipe.fit(data.X.iloc[tr], data.y[tr])
    r2 = get_scorer("r2")(pipe, data.X.iloc[te], data.y[te])
    assert r2 == next(t["test_score"] for t in best["trials"] if t["fold"] == 1)
    # epochs run: the fitted network's n_iter_, and their mean per configuration
    from workbench.data.preprocessing import fitted_estimator

    assert fitted_estimator(pipe).n_iter_ == next(t["epochs"] for t in best["trials"]
                                                  if t["fold"] == 1)
    for c in res["configurations"]:
        assert c["mean_epochs"] == pytest.approx(np.mean([t["epochs"] for t in c["trials"]]))


# --------------------------------------------------------------------------- determinism


# the in-process Dask worker trains in a thread, where warning filters are process-wide
@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")
def test_same_scores_with_1_or_2_jobs_and_on_a_dask_local_cluster(tmp_path):
    from distributed import LocalCluster

    path = SAMPLES / "kiln_batches.csv"
    plan = build_plan(path, "passes_inspection", hidden="relu,gelu", layers=["8"], folds=2,
                      repeats=2, epochs=5, seed=3)
    with Store(tmp_path / "s.sqlite") as st:
        one = run_sweep(plan, store=st, jobs=1)
        two = run_sweep(plan, store=st, jobs=2)
        # a scheduler on 127.0.0.1 over TCP, its one worker in this process (light)
        with LocalCluster(n_workers=1, threads_per_worker=2, processes=False, protocol="tcp",
                          host="127.0.0.1", dashboard_address=None) as cluster:
            assert cluster.scheduler_address.startswith("tcp://127.0.0.1:")
            dask = run_sweep(plan, store=st, cluster=cluster.scheduler_address)
        s1, s2, s3 = (_scores(st, o.sweep_id) for o in (one, two, dask))
        _same_predictions(st, one.sweep_id, two.sweep_id)
        _same_predictions(st, one.sweep_id, dask.sweep_id)
    assert len(s1) == plan.n_trials + len(plan.baseline_trials())
    assert s1 == s2 == s3  # exactly equal, not approximately
    # the sweep's warm pool is its own: joblib (scikit-learn's n_jobs) still works beside it
    from joblib import Parallel, delayed

    assert Parallel(n_jobs=2)(delayed(abs)(-i) for i in range(3)) == [0, 1, 2]


# --------------------------------------------------------------------------- failures


def test_a_diverging_configuration_ends_diverged_and_the_rest_completes(tmp_path):
    plan = build_plan(SAMPLES / "trap_catches.csv", "moths_caught", hidden="relu,gelu",
                      output="exp", layers=["32,32"], folds=2, repeats=1, epochs=10,
                      learning_rates=["10", "0.01"])
    with Store(tmp_path / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline")
        res = sweep_results(st, out.sweep_id)
    assert out.state == "finished"
    by = {(c["hidden"], c["learning_rate"]): c for c in res["configurations"]}
    for h in ("relu", "gelu"):
        assert by[(h, 10.0)]["status"] == "diverged"
        assert all(t["status"] == "diverged" for t in by[(h, 10.0)]["trials"])
        assert by[(h, 0.01)]["status"] == "done"
    # diverged configurations are ranked after every complete one
    assert [c["status"] for c in res["configurations"]] == ["done", "done", "diverged",
                                                             "diverged"]


def test_a_dead_worker_costs_only_its_trial(tmp_path):
    """Kill worker processes mid-sweep: lost trials are retried alone, then failed."""
    import psutil

    plan = build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection", hidden="relu,tanh",
                      layers=["8"], folds=2, repeats=1, epochs=5)
    me = psutil.Process()
    kills = []

    def workers():
        out = []
        for p in me.children(recursive=True):
            try:
                cmd = " ".join(p.cmdline())
            except psutil.Error:  # a process that ended while the list was read
                continue
            if "loky" in cmd and "resource_tracker" not in cmd:
                out.append(p)
        return out

    def on_event(ev):
        # kill the pool under the first trial, and again under the first retry
        if ev["type"] == "trial_started" and (len(kills) == 0 or
                                              (len(kills) == 1 and ev["attempt"] == 2)):
            procs = workers()
            for p in procs:
                try:
                    p.kill()
                except psutil.Error:
                    pass
            kills.append((ev["config_index"], ev["repeat"], ev["fold"], len(procs)))

    with Store(tmp_path / "s.sqlite") as st:
        out = run_sweep(plan, store=st, jobs=2, on_event=on_event)
        trials = st.trials(out.sweep_id, with_history=False)
    assert out.state == "finished" and len(trials) == plan.n_trials
    assert len(kills) == 2 and all(k[3] >= 1 for k in kills)
    failed = [t for t in trials if t["status"] == "failed"]
    # the trial killed twice failed, with a message; every other trial completed
    assert [(t["config_index"], t["repeat"], t["fold"]) for t in failed] == [kills[1][:3]]
    assert "died 2 times" in failed[0]["error"]
    assert all(t["status"] == "done" for t in trials if t not in failed)


def test_a_lost_dask_worker_costs_only_its_trial(tmp_path):
    """Kill the only worker process of a LocalCluster mid-sweep: the scattered table is sent
    again to its replacement, the lost trial is retried, and the sweep completes."""
    import psutil
    from distributed import LocalCluster

    plan = build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection", hidden="relu,tanh",
                      layers=["8"], folds=2, repeats=1, epochs=5)
    me = psutil.Process()
    before = {p.pid for p in me.children(recursive=True)}
    killed = []
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as cluster:
        def on_event(ev):
            if ev["type"] == "trial_started" and ev["config_index"] == 1 and not killed:
                for p in me.children(recursive=True):
                    if p.pid not in before and "spawn_main" in " ".join(p.cmdline()):
                        p.kill()
                        killed.append(p.pid)

        with Store(tmp_path / "s.sqlite") as st:
            out = run_sweep(plan, store=st, cluster=cluster.scheduler_address,
                            on_event=on_event)
            trials = st.trials(out.sweep_id, with_history=False)
    assert killed and out.state == "finished"
    assert len(trials) == plan.n_trials and all(t["status"] == "done" for t in trials)
    assert max(t["attempts"] for t in trials) == 2  # the killed trial ran twice


def test_cancel_keeps_finished_trials_and_resume_runs_exactly_the_rest(tmp_path):
    plan = build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection", hidden="relu,gelu",
                      layers=["8"], folds=3, repeats=1, epochs=4)
    cancel = threading.Event()
    seen = []

    def on_event(ev):
        if ev["type"] == "trial_finished" and ev["status"] != "cancelled":
            seen.append(ev)
            if len(seen) == 2:
                cancel.set()

    with Store(tmp_path / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline", cancel=cancel, on_event=on_event)
        assert out.state == "interrupted"
        kept = st.finished_keys(out.sweep_id)
        # the cancel is seen between tasks: a group of folds run together (runner.STACK)
        # is stored whole, every trial it finished announced
        assert len(kept) == len(seen) >= 2 and len(kept) < plan.n_trials
        assert st.get_sweep(out.sweep_id)["state"] == "interrupted"
        assert sweep_results(st, out.sweep_id)["state"] == "interrupted"
        started = []
        again = run_sweep(store=st, resume=out.sweep_id, backend="inline",
                          on_event=lambda e: started.append(e) if e["type"] == "trial_started"
                          else None)
        assert again.state == "finished" and again.n_todo == plan.n_trials - len(kept)
        run_keys = {(e["config_index"], e["repeat"], e["fold"]) for e in started}
        assert not run_keys & kept and len(run_keys) == plan.n_trials - len(kept)
        fresh = run_sweep(plan, store=st, backend="inline")
        assert _scores(st, again.sweep_id) == _scores(st, fresh.sweep_id)
        _same_predictions(st, again.sweep_id, fresh.sweep_id)
        with pytest.raises(InputError, match="already finished"):
            run_sweep(store=st, resume=out.sweep_id)


def test_resume_refuses_a_changed_table(tmp_path):
    src = SAMPLES / "kiln_batches.csv"
    table = tmp_path / "kiln.csv"
    table.write_bytes(src.read_bytes())
    plan = build_plan(table, "passes_inspection", hidden="relu", layers=["4"], folds=2,
                      repeats=1, epochs=2)
    cancel = threading.Event()
    cancel.set()
    with Store(tmp_path / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline", cancel=cancel)
        assert out.state == "interrupted"
        df = pd.read_csv(table)
        df.iloc[:10].to_csv(table, index=False)
        with pytest.raises(InputError, match="fingerprint no longer matches"):
            run_sweep(store=st, resume=out.sweep_id)


# --------------------------------------------------------------------------- parity


@pytest.mark.parametrize("table,target,output,metric", [
    ("diabetes.csv", "target", "identity", "r2"),
    ("breast_cancer.csv", "target", "auto", "neg_log_loss"),
])
def test_numpy_engine_matches_scikit_learn_at_sweep_level(bundled, tmp_path, table, target,
                                                          output, metric, monkeypatch):
    """Reference: scikit-learn's MLP through the same sweep. The NumPy engine in its
    scikit-learn mode (output_init="sklearn", tol_mode="absolute", put in by wrapping the
    sweep's make_estimator) gives the same fold scores and epochs."""
    from workbench.nets.engine import NetClassifier, NetRegressor
    from workbench.sweep import trials

    made = trials.make_estimator

    def scikit_learn_mode(spec):
        est = made(spec)
        if isinstance(est, NetRegressor | NetClassifier):
            assert est.output_init == "mean" and est.tol_mode == "relative"  # the sweep's
            est.set_params(output_init="sklearn", tol_mode="absolute")
        return est

    monkeypatch.setattr(trials, "make_estimator", scikit_learn_mode)
    scores = {}
    with Store(tmp_path / "s.sqlite") as st:
        for engine in ("sklearn", "numpy"):
            plan = build_plan(bundled / table, target, hidden="relu,tanh", output=output,
                              layers=["8"], folds=2, repeats=1, epochs=15, engine=engine,
                              dtype="float64", learning_rates=["0.01"], metric=metric)
            out = run_sweep(plan, store=st, backend="inline")
            res = sweep_results(st, out.sweep_id)
            assert {c["engine"] for c in res["configurations"]} == {engine}
            scores[engine] = {(c["hidden"], t["fold"]): (t["test_score"], t["epochs"])
                              for c in res["configurations"] for t in c["trials"]}
    assert scores["sklearn"].keys() == scores["numpy"].keys()
    for k, (s_ref, ep_ref) in scores["sklearn"].items():
        s, ep = scores["numpy"][k]
        assert ep == ep_ref
        assert s == pytest.approx(s_ref, abs=1e-6)


def test_trials_record_history_health_and_validation_scores(tmp_path):
    """Per-epoch loss, validation score (early stopping) and per-layer health are stored."""
    plan = build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection", hidden="relu,gelu",
                      layers=["8,4"], folds=2, repeats=1, epochs=6, early_stopping=True)
    with Store(tmp_path / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline")
        trials = st.trials(out.sweep_id)
    assert len(trials) == 4
    for t in trials:
        h = t["history"]
        assert t["status"] == "done" and len(h["loss"]) == t["epochs"] >= 1
        assert len(h["val_score"]) == t["epochs"]  # early stopping scores every epoch
        assert len(t["health"]["dead"]) == 2 and len(t["health"]["saturated"]) == 2
        assert all(0.0 <= v <= 1.0 for v in t["health"]["dead"] + t["health"]["saturated"])
        if t["engine"] == "numpy":  # the NumPy engine records health every epoch
            assert len(h["dead"]) == len(h["grad_norm"]) == t["epochs"]
            # one gradient norm per weight matrix: two hidden layers and the output layer
            assert all(len(layer) == 3 for layer in h["grad_norm"])
        assert t["fit_seconds"] > 0 and t["n_train"] + t["n_test"] == 2500
