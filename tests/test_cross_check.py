"""The cross-check of a stored sweep's configuration on scikit-learn's own MLP.

Outside references used here:

- scikit-learn's ``MLPClassifier`` / ``MLPRegressor``, built in the test from the
  configuration's values (not through the project's estimator factory), fitted on
  folds rebuilt with scikit-learn's ``StratifiedKFold`` / ``KFold`` from the plan's
  split seeds and scored with ``sklearn.metrics.get_scorer``: the cross-check's
  scikit-learn column must equal these exactly;
- the parity tolerance of ``tests/test_engine_parity.py`` (relative 1e-6), which
  the cross-check must use;
- the store's own trial rows for the stored scores.
"""

from __future__ import annotations

import itertools
import json
import math

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import make_classification, make_regression
from sklearn.metrics import get_scorer
from sklearn.model_selection import KFold, StratifiedKFold
from sklearn.neural_network import MLPClassifier, MLPRegressor
from test_engine_parity import PARITY, RTOL

from workbench.cli import main
from workbench.data.preprocessing import build_pipeline
from workbench.nets.activations import HEADS, HIDDEN
from workbench.sweep import cross_check as cc_mod
from workbench.sweep.cross_check import (
    PARITY_MODE,
    PARITY_RTOL,
    cross_check,
    not_expressible_reason,
)
from workbench.sweep.plan import build_plan, sklearn_can_express
from workbench.sweep.results import sweep_results
from workbench.sweep.runner import load_data, run_sweep
from workbench.sweep.store import Store

pytestmark = pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")


def _sweep(folder, df, target, **kw):
    table = folder / "t.csv"
    df.to_csv(table, index=False)
    plan = build_plan(table, target, layers=["5"], learning_rates=["0.01"], folds=3,
                      repeats=2, epochs=12, **kw)
    store = folder / "s.sqlite"
    with Store(store) as st:
        sid = run_sweep(plan, store=st, backend="inline").sweep_id
    return {"store": store, "sweep_id": sid, "table": table, "plan": plan}


@pytest.fixture(scope="module")
def binary(tmp_path_factory):
    X, y = make_classification(n_samples=150, n_features=4, n_informative=3, n_redundant=0,
                               random_state=1)
    df = pd.DataFrame(X, columns=["a", "b", "c", "d"]).assign(label=np.where(y, "yes", "no"))
    return _sweep(tmp_path_factory.mktemp("binary"), df, "label", hidden="relu")


@pytest.fixture(scope="module")
def regression(tmp_path_factory):
    X, y = make_regression(n_samples=120, n_features=3, noise=10.0, random_state=2)
    df = pd.DataFrame(X, columns=["a", "b", "c"]).assign(y=y)
    return _sweep(tmp_path_factory.mktemp("regression"), df, "y", hidden="tanh",
                  output="identity")


@pytest.fixture(scope="module")
def gelu(tmp_path_factory):
    X, y = make_classification(n_samples=90, n_features=3, n_informative=2, n_redundant=0,
                               random_state=3)
    df = pd.DataFrame(X, columns=["a", "b", "c"]).assign(label=y)
    return _sweep(tmp_path_factory.mktemp("gelu"), df, "label", hidden="gelu")


def _check(sw, **kw):
    with Store(sw["store"]) as st:
        return cross_check(st, sw["sweep_id"], **kw), sweep_results(st, sw["sweep_id"])


@pytest.fixture(scope="module")
def checked(binary, regression):
    """Each sweep's cross-check, computed once for the tests that only read it."""
    return {"binary": _check(binary), "regression": _check(regression)}


def _reference_scores(sw, chosen):
    """scikit-learn's MLP built here from the configuration's values, on folds rebuilt here."""
    plan = sw["plan"]
    data, _ = load_data(plan)
    y = np.asarray(data.y)
    scorer = get_scorer(plan.metric)
    out = {}
    for r in range(plan.repeats):
        if plan.task == "classification":
            split = StratifiedKFold(plan.folds, shuffle=True, random_state=plan.split_seed(r))
            ys = y.astype(str)
        else:
            split = KFold(plan.folds, shuffle=True, random_state=plan.split_seed(r))
            ys = y
        for f, (tr, te) in enumerate(split.split(np.zeros((len(y), 1)), ys)):
            common = dict(hidden_layer_sizes=tuple(chosen["layers"]),
                          activation=chosen["hidden"], alpha=chosen["alpha"],
                          learning_rate_init=chosen["learning_rate"], max_iter=plan.epochs,
                          random_state=plan.model_seed(r, f))
            mlp = (MLPClassifier(**common) if plan.task == "classification"
                   else MLPRegressor(**common))
            pipe = build_pipeline(data.profile, data.target, mlp, chosen["head"])
            pipe.fit(data.X.iloc[tr], y[tr])
            out[(r, f)] = float(scorer(pipe, data.X.iloc[te], y[te]))
    return out


def test_the_tolerance_and_mode_are_the_parity_tests():
    assert PARITY_RTOL == RTOL
    assert {k: PARITY_MODE[k] for k in PARITY} == PARITY


@pytest.mark.parametrize("case", ["binary", "regression"])
def test_scikit_learn_column_is_its_own_mlp_on_the_sweeps_folds_and_seeds(case, request,
                                                                          checked):
    sw = request.getfixturevalue(case)
    cc, res = checked[case]
    chosen = res["configurations"][cc.rank - 1]
    assert cc.rank == res["verdict"]["recommended"]["rank"]
    assert cc.expressible and cc.reason is None
    assert cc.estimator == ("MLPClassifier" if case == "binary" else "MLPRegressor")
    ref = _reference_scores(sw, chosen)
    assert [(f.repeat, f.fold) for f in cc.folds] == sorted(ref)
    for f in cc.folds:
        assert f.sklearn_score == ref[(f.repeat, f.fold)]
        assert f.sklearn_epochs == sw["plan"].epochs  # no early stop in 12 epochs
    # the engine in scikit-learn's mode agrees within the parity tolerance, fold by fold
    for f in cc.folds:
        assert f.agree and math.isclose(f.engine_score, f.sklearn_score, rel_tol=RTOL)
        assert f.engine_epochs == f.sklearn_epochs
    assert cc.all_agree is True
    assert f"On all {len(cc.folds)} folds" in cc.sentence() and "agree" in cc.sentence()


def test_stored_scores_are_the_stored_trials(binary, checked):
    cc, _ = checked["binary"]
    with Store(binary["store"]) as st:
        stored = {(t["repeat"], t["fold"]): t["test_score"]
                  for t in st.trials(binary["sweep_id"], with_history=False)
                  if t["config_index"] == cc.configuration["index"]}
    assert {(f.repeat, f.fold): f.stored_score for f in cc.folds} == stored
    mean = sum(stored.values()) / len(stored)
    assert f"mean {mean:.4f} stored" in cc.sentence()


def test_the_check_fails_when_the_engine_is_not_in_scikit_learns_mode(binary, monkeypatch):
    """With the fair start instead of scikit-learn's output-layer draw the two networks
    differ, and the cross-check must say so (it can fail)."""
    monkeypatch.setitem(cc_mod.PARITY_MODE, "output_init", "mean")
    cc, _ = _check(binary, repeats=1)
    assert cc.all_agree is False
    assert "differ by more than the parity tolerance" in cc.sentence()


def test_repeats_limits_the_folds_and_progress_is_reported(binary):
    seen = []
    cc, _ = _check(binary, repeats=1, on_fold=lambda done, total: seen.append((done, total)))
    assert [(f.repeat, f.fold) for f in cc.folds] == [(0, 0), (0, 1), (0, 2)]
    assert seen == [(1, 3), (2, 3), (3, 3)]


def test_a_configuration_scikit_learn_cannot_express_says_why_without_fitting(gelu, monkeypatch):
    def no_table(*a, **k):
        raise AssertionError("nothing is loaded or fitted for a configuration sklearn lacks")

    monkeypatch.setattr(cc_mod, "_sweep_data", no_table)
    cc, _ = _check(gelu)
    assert not cc.expressible and cc.folds == [] and cc.all_agree is None
    assert "gelu" in cc.reason and "relu" in cc.reason
    line = cc.sentence()
    assert "\n" not in line and "cannot be cross-checked" in line and "gelu" in line


@pytest.mark.parametrize("kind", [None, "binary", "multiclass"])
def test_reasons_match_what_the_plan_lets_scikit_learn_run(kind):
    for hidden, (task, head) in itertools.product(HIDDEN, HEADS):
        if kind is not None and task != "classification":
            continue
        reason = not_expressible_reason(task, hidden, head, kind)
        assert (reason is None) == sklearn_can_express(task, hidden, head, kind), \
            (task, hidden, head, kind, reason)


def test_show_cross_check_prints_a_table_and_the_sentence(binary, checked, capsys):
    assert main(["show", binary["sweep_id"], "--store", str(binary["store"]),
                 "--cross-check"]) == 0
    out = capsys.readouterr().out
    lines = out.splitlines()
    header = next(i for i, line in enumerate(lines) if line.startswith("repeat"))
    rows = lines[header + 2:header + 8]
    assert len(rows) == 6 and all(r.split()[4] == "yes" for r in rows)
    cc, _ = checked["binary"]
    first = rows[0].split()
    assert first[:4] == ["1", "1", f"{cc.folds[0].engine_score:.6f}",
                         f"{cc.folds[0].sklearn_score:.6f}"]
    assert first[6] == f"{cc.folds[0].stored_score:.4f}"
    assert " ".join(cc.sentence().split()) in " ".join(out.split())
    assert max(len(line) for line in lines) <= 100


def test_show_cross_check_json(binary, capsys):
    assert main(["show", binary["sweep_id"], "--store", str(binary["store"]), "--json",
                 "--cross-check"]) == 0
    doc = json.loads(capsys.readouterr().out)
    c = doc["cross_check"]
    assert c["all_agree"] is True and c["expressible"] is True and len(c["folds"]) == 6
    assert c["rank"] == doc["verdict"]["recommended"]["rank"]
    assert c["sentence"].startswith("On all 6 folds")


def test_show_cross_check_of_a_gelu_sweep_is_one_line(gelu, capsys):
    assert main(["show", gelu["sweep_id"], "--store", str(gelu["store"]), "--cross-check"]) == 0
    out = capsys.readouterr().out.strip()
    assert "\n" not in " ".join(out.split("\n")).strip() and "cannot be cross-checked" in out


def test_show_cross_check_bad_input_is_one_line_with_status_2(binary, tmp_path, capsys):
    assert main(["show", "no-such-sweep", "--store", str(binary["store"]),
                 "--cross-check"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("workbench: no sweep 'no-such-sweep'") and "\n" not in err
    changed = tmp_path / "t.csv"
    changed.write_text(binary["table"].read_text().replace("yes", "maybe", 1))
    assert main(["show", binary["sweep_id"], "--store", str(binary["store"]), "--cross-check",
                 "--table", str(changed)]) == 2
    err = capsys.readouterr().err.strip()
    assert "changed since" in err and "--table" in err and "Traceback" not in err


def test_a_fold_without_a_score_is_not_agreement_and_stays_valid_json():
    from workbench.sweep.cross_check import CrossCheck, FoldCheck

    folds = [FoldCheck(0, 0, 0.9, 0.9, 0.88, True, 5, 5, 0.1, 0.2),
             FoldCheck(0, 1, math.nan, 0.8, 0.81, False, 3, 5, 0.1, 0.2)]
    cc = CrossCheck("S", 1, {"dtype": "float32"}, "relu/logistic [5]", "accuracy", True,
                    estimator="MLPClassifier", folds=folds)
    assert cc.all_agree is False and cc.largest_difference == math.inf
    doc = json.loads(json.dumps(cc.to_dict(), allow_nan=False))
    assert doc["folds"][1]["engine_score"] is None and doc["largest_difference"] is None
    assert doc["sentence"].startswith("On 1 of 2 folds") and "difference inf" in doc["sentence"]


def test_a_sweep_run_on_scikit_learn_stored_exactly_its_column(tmp_path):
    """Multiclass (softmax) sweep run with --engine sklearn: the stored scores are scikit-learn's
    own fits on the same folds and seeds, so they equal the cross-check's scikit-learn column."""
    X, y = make_classification(n_samples=120, n_features=4, n_informative=3, n_redundant=0,
                               n_classes=3, random_state=4)
    df = pd.DataFrame(X, columns=["a", "b", "c", "d"]).assign(label=y)
    sw = _sweep(tmp_path, df, "label", hidden="relu", engine="sklearn")
    cc, _ = _check(sw, repeats=1)
    assert cc.stored_engine == "sklearn" and cc.estimator == "MLPClassifier"
    assert cc.configuration["head"] == "softmax" and cc.all_agree is True
    assert [f.stored_score for f in cc.folds] == [f.sklearn_score for f in cc.folds]
    assert "The sweep itself ran scikit-learn's MLP" in cc.sentence()


def test_the_stored_form_picks_by_index_reports_each_fold_and_equals_the_direct_call(
        binary, checked, tmp_path):
    """:func:`cross_check_stored` (what the window runs in its own process): the configuration
    is found by its plan index, not its rank; progress is written after every fold; the
    answer is the direct call's, to the bit."""
    from workbench.errors import InputError
    from workbench.sweep.cross_check import cross_check_stored

    cc, res = checked["binary"]
    rec = res["configurations"][cc.rank - 1]
    progress = tmp_path / "progress.txt"
    got = cross_check_stored(binary["store"], binary["sweep_id"], config_index=rec["index"],
                             progress_path=str(progress))
    want = cc.to_dict()
    for d in (got, want):
        for f in d["folds"]:
            f.pop("engine_seconds"), f.pop("sklearn_seconds")
    assert got == want
    n = len(want["folds"])
    assert progress.read_text() == f"{n} {n}"
    with pytest.raises(InputError, match="no configuration 999"):
        cross_check_stored(binary["store"], binary["sweep_id"], config_index=999)
