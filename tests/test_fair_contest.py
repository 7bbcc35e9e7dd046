"""A fair contest between output heads: the same start and the same stopping rule.

Outside references named per test: SciPy (``scipy.special.logit``, ``softmax``,
``scipy.optimize.brentq``), NumPy's ``log`` / ``logaddexp``, scikit-learn's
``DummyRegressor(strategy="mean")`` / ``DummyClassifier(strategy="prior")``, its
metrics (``mean_squared_error``, ``mean_poisson_deviance``, ``log_loss``), its
``MLPRegressor`` (the no-improvement stopping rule) and its bundled ``load_diabetes``
(Efron, Hastie, Johnstone & Tibshirani 2004), shifted by +10,000 so that the target's
mean is about 130 standard deviations from zero.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, special
from sklearn.datasets import load_diabetes
from sklearn.dummy import DummyClassifier, DummyRegressor
from sklearn.exceptions import ConvergenceWarning
from sklearn.metrics import log_loss, mean_poisson_deviance, mean_squared_error
from sklearn.neural_network import MLPRegressor

from workbench.data.preprocessing import build_pipeline
from workbench.data.profiling import analyse_target, profile_table
from workbench.nets import activations as act
from workbench.nets.engine import NetClassifier, NetRegressor
from workbench.sweep.plan import build_plan
from workbench.sweep.runner import run_sweep
from workbench.sweep.store import Store
from workbench.sweep.trials import estimator_for, make_estimator

pytestmark = pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")

#: an untrained network: one sgd step of a learning rate of 1e-300 (an update of 0 in
#: float32, under 1e-290 in float64)
UNTRAINED = dict(solver="sgd", learning_rate_init=1e-300, momentum=0.0, max_iter=1)


# --------------------------------------------------------------------------- inverse links


def _means(head):
    """Means inside the head's range (float64), one column; class shares for softmax."""
    if head.distribution:
        rng = np.random.default_rng(0)
        shares = rng.dirichlet(np.ones(4), size=6)
        return np.vstack([shares, [[0.97, 0.01, 0.01, 0.01]]])
    hi = 1.0 if head.high == 1.0 else 2000.0
    lo = 0.0 if head.low == 0.0 else -2000.0
    grid = np.array([1e-6, 1e-3, 0.02, 0.3, 0.5, 0.77, 0.999, 1.0 - 1e-6]) if hi == 1.0 else \
        np.array([1e-6, 1e-3, 0.5, 1.0, 7.25, 130.0, 1000.0, 2000.0])
    if lo < 0:
        grid = np.concatenate([-grid, grid])
    return grid.reshape(-1, 1)


@pytest.mark.parametrize("key", list(act.HEADS))
def test_every_heads_inverse_link_undoes_its_forward(key):
    """forward(inverse(m)) == m for every head of the registry (a head added without a
    working inverse fails here), in float64 and to float32 precision in float32."""
    head = act.HEADS[key]
    for dtype, rtol in ((np.float64, 1e-12), (np.float32, 2e-6)):
        m = _means(head).astype(dtype)
        z = np.asarray(head.inverse(m)).astype(dtype)
        assert np.isfinite(z).all()
        back = head.apply_(z.copy())
        np.testing.assert_allclose(back, m, rtol=rtol, atol=1e-12 if dtype == np.float64 else 0)


def test_inverse_links_match_scipy_and_numpy():
    """logit (scipy.special.logit) for both logistic heads, log (numpy.log) for exp, log of
    the shares for softmax (scipy.special.softmax gives them back), the softplus inverse as
    the root SciPy's brentq finds of numpy.logaddexp(0, z) = m, and the mean itself for
    the identity and relu heads."""
    m = np.array([0.001, 0.2, 0.5, 0.93])
    for task in ("regression", "classification"):
        np.testing.assert_allclose(act.HEADS[(task, "logistic")].inverse(m), special.logit(m),
                                   rtol=1e-14)
    big = np.array([1e-4, 0.7, 3.0, 130.0, 1e4])
    np.testing.assert_allclose(act.HEADS[("regression", "exp")].inverse(big), np.log(big),
                               rtol=1e-14)
    np.testing.assert_array_equal(act.HEADS[("regression", "identity")].inverse(big), big)
    np.testing.assert_array_equal(act.HEADS[("regression", "relu")].inverse(big), big)
    roots = [optimize.brentq(lambda z, v=v: np.logaddexp(0.0, z) - v, -50.0, 2e4, xtol=1e-13,
                             rtol=4 * np.finfo(float).eps) for v in big]
    np.testing.assert_allclose(act.HEADS[("regression", "softplus")].inverse(big), roots,
                               rtol=1e-9)
    shares = np.array([[0.1, 0.6, 0.3]])
    z = act.HEADS[("classification", "softmax")].inverse(shares)
    np.testing.assert_allclose(z, np.log(shares), rtol=1e-14)
    np.testing.assert_allclose(special.softmax(z, axis=1), shares, rtol=1e-14)


def test_inverse_links_stay_finite_at_the_ends_of_the_range():
    """A mean on the edge of the head's range (all-zero counts, a label column that is all
    ones) gives a finite pre-activation just inside the range."""
    for key, edge in [(("regression", "exp"), 0.0), (("regression", "softplus"), 0.0),
                      (("regression", "logistic"), 0.0), (("regression", "logistic"), 1.0),
                      (("classification", "logistic"), 1.0),
                      (("classification", "softmax"), 0.0)]:
        for dtype in (np.float32, np.float64):
            z = act.HEADS[key].inverse(np.array([[edge, 1.0 - edge]], dtype=dtype))
            assert np.isfinite(z).all(), (key, edge, dtype)


# --------------------------------------------------------------------------- the fair start


@pytest.fixture(scope="module")
def thousand():
    """A positive target with mean about 1,000 (sd about 40) and three features."""
    rng = np.random.default_rng(7)
    X = rng.standard_normal((240, 3))
    y = 1000.0 + 30.0 * X[:, 0] - 20.0 * X[:, 1] + rng.normal(scale=10.0, size=240)
    df = pd.DataFrame(X, columns=["a", "b", "c"]).assign(amount=y)
    return df, analyse_target(df, "amount"), profile_table(df, target="amount")


@pytest.mark.parametrize("head", ["identity", "relu", "softplus", "exp", "logistic"])
@pytest.mark.parametrize("dtype", ["float32", "float64"])
def test_untrained_network_predicts_the_training_mean_for_every_head(thousand, head, dtype):
    """Reference: scikit-learn's DummyRegressor(strategy="mean"). Through the sweep's own
    pipeline (target scaling by head, predictions back in user units), the untrained
    network predicts the training rows' mean for every row, seen or new, to float32
    precision; scikit-learn's initialisation does not."""
    df, target, profile = thousand
    train, new = df.iloc[:200], df.iloc[200:]
    mean = DummyRegressor(strategy="mean").fit(train, train["amount"]).predict(new)
    assert mean[0] == pytest.approx(1000.0, abs=10.0)
    for output_init in ("mean", "sklearn"):
        net = NetRegressor((8,), "tanh", dtype=dtype, random_state=0, output_init=output_init,
                           **UNTRAINED)
        pipe = build_pipeline(profile, target, net, head).fit(train, train["amount"])
        for rows, expected in ((train, np.full(len(train), mean[0])), (new, mean)):
            p = pipe.predict(rows)
            if output_init == "mean":
                np.testing.assert_allclose(p, expected, rtol=2e-7 if dtype == "float32" else 1e-12)
            else:  # scikit-learn's random output layer starts elsewhere
                assert np.max(np.abs(p - expected)) > 1.0


def test_fair_start_sets_only_the_output_layer(thousand):
    """The hidden layers keep scikit-learn's draws (the same numbers as output_init="sklearn");
    the output layer starts with weights 0 and the intercept at the inverse link."""
    df, _, _ = thousand
    X, y = df[["a", "b", "c"]].to_numpy(), df["amount"].to_numpy() / 40.0
    fair = NetRegressor((5, 4), "relu", output_activation="softplus", random_state=3,
                        dtype="float64", **UNTRAINED).fit(X, y)
    ref = NetRegressor((5, 4), "relu", output_activation="softplus", random_state=3,
                       dtype="float64", output_init="sklearn", **UNTRAINED).fit(X, y)
    for a, b in zip(fair.coefs_[:-1] + fair.intercepts_[:-1],
                    ref.coefs_[:-1] + ref.intercepts_[:-1]):
        np.testing.assert_array_equal(a, b)
    # (a step of 1e-300 leaves float64 weights within 1e-290 of where they started)
    assert np.max(np.abs(fair.coefs_[-1])) < 1e-290 < np.max(np.abs(ref.coefs_[-1]))
    np.testing.assert_allclose(fair.intercepts_[-1], np.log(np.expm1(y.mean())), rtol=1e-12)


@pytest.mark.parametrize("case", ["binary", "multiclass", "binary_softmax", "multilabel"])
def test_untrained_classifier_predicts_the_class_priors(case):
    """Reference: scikit-learn's DummyClassifier(strategy="prior"): the untrained network's
    probabilities are the training class shares for every row (log prior odds for the
    logistic head, log shares for softmax); multilabel: each label's share."""
    rng = np.random.default_rng(1)
    X = rng.standard_normal((300, 4))
    head = "auto"
    if case == "multilabel":
        y = (rng.random((300, 3)) < [0.1, 0.5, 0.8]).astype(int)
    elif case == "multiclass":
        y = rng.choice(["a", "b", "c"], size=300, p=[0.6, 0.3, 0.1])
    else:
        y = (rng.random(300) < 0.2).astype(int)
        head = "softmax" if case == "binary_softmax" else "auto"
    for dtype in ("float32", "float64"):
        net = NetClassifier((6,), "relu", output_activation=head, random_state=0, dtype=dtype,
                            **UNTRAINED).fit(X, y)
        new = rng.standard_normal((50, 4))
        if case == "multilabel":
            expected = np.broadcast_to(y.mean(axis=0), (50, 3))
            got = net._forward(new)
        else:
            expected = DummyClassifier(strategy="prior").fit(X, y).predict_proba(new)
            got = net.predict_proba(new)
        np.testing.assert_allclose(got, expected, rtol=2e-6 if dtype == "float32" else 1e-12)


# --------------------------------------------------------------------------- stopping alike


def _constant_loss_reference(head, y):
    """The constant predictor's loss by scikit-learn's metrics."""
    if head in ("identity", "relu", "softplus", "logistic"):
        return mean_squared_error(y, np.full_like(y, y.mean())) / 2
    return mean_poisson_deviance(y, np.full_like(y, y.mean())) / 2


@pytest.mark.parametrize("head", ["identity", "relu", "softplus", "logistic", "exp"])
def test_constant_loss_is_the_dummy_predictors_loss(head):
    """constant_loss_ = the head's loss of DummyRegressor(strategy="mean") by scikit-learn's
    metrics: half the mean squared error, half the mean Poisson deviance."""
    rng = np.random.default_rng(2)
    X = rng.standard_normal((150, 3))
    y = rng.poisson(np.exp(0.5 * X[:, 0] + 1.0)).astype(float)
    if head == "logistic":
        y = y / y.max()
    net = NetRegressor((4,), output_activation=head, max_iter=2, random_state=0,
                       dtype="float64").fit(X, y)
    assert net.constant_loss_ == pytest.approx(_constant_loss_reference(head, y), rel=1e-12)


def test_classifier_constant_loss_is_the_prior_log_loss():
    """Reference: sklearn.metrics.log_loss of DummyClassifier(strategy="prior")."""
    rng = np.random.default_rng(4)
    X = rng.standard_normal((200, 3))
    for y in (rng.choice([0, 1], 200, p=[0.7, 0.3]), rng.choice([0, 1, 2], 200, p=[.5, .3, .2])):
        net = NetClassifier((4,), max_iter=2, random_state=0, dtype="float64").fit(X, y)
        prior = DummyClassifier(strategy="prior").fit(X, y).predict_proba(X)
        assert net.constant_loss_ == pytest.approx(log_loss(y, prior), rel=1e-12)


def test_relative_rule_is_scikit_learns_rule_with_tol_times_the_constant_loss():
    """Reference: scikit-learn's MLPRegressor stops after n_iter_no_change epochs without a
    `tol` fall of the training loss. The relative rule is that rule with
    tol * constant_loss_: the same stop epoch and loss curve as MLPRegressor given that
    tolerance (scikit-learn's initialisation on both sides)."""
    rng = np.random.default_rng(0)
    X = rng.standard_normal((120, 5))
    y = (X[:, 0] - 0.5 * X[:, 1] + 0.1 * rng.standard_normal(120)) * 0.05 + 0.5  # in [0, 1]
    kw = dict(hidden_layer_sizes=(6, 4), activation="tanh", solver="sgd", alpha=1e-3,
              batch_size=32, learning_rate_init=0.05, max_iter=300, shuffle=False,
              random_state=3, n_iter_no_change=3, tol=1e-2, momentum=0.9)
    ours = NetRegressor(dtype="float64", output_init="sklearn", tol_mode="relative", **kw)
    ours.fit(X, y)
    assert 0 < ours.constant_loss_ < 0.01  # a small loss: where an absolute tol stops early
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        ref = MLPRegressor(**{**kw, "tol": kw["tol"] * ours.constant_loss_}).fit(X, y)
        absolute = MLPRegressor(**kw).fit(X, y)
    assert ours.n_iter_ == ref.n_iter_ < 300
    np.testing.assert_allclose(ours.loss_curve_, ref.loss_curve_, rtol=1e-6)
    assert absolute.n_iter_ < ours.n_iter_  # scikit-learn's absolute tol stops sooner


def test_the_sweep_trains_with_the_fair_start_and_the_relative_rule():
    """The wiring: the NumPy engine of the sweep (make_estimator, estimator_for) is built
    with the fair start and the relative rule; scikit-learn's MLP keeps its own."""
    plan = dict(task="regression", epochs=5, early_stopping=False, batch_size="auto",
                dtype="float32")
    cfg = dict(index=0, hidden="relu", head="identity", layers=[4], learning_rate=0.01,
               alpha=1e-4, engine="numpy")
    for est in (estimator_for(plan, cfg, 3),
                make_estimator({"config": cfg, "random_state": 3, **plan})):
        assert isinstance(est, NetRegressor)
        assert est.output_init == "mean" and est.tol_mode == "relative"
    sk = estimator_for(plan, {**cfg, "engine": "sklearn"}, 3)
    assert isinstance(sk, MLPRegressor)


# --------------------------------------------------------------------------- the sweep


HEADS = ("identity", "relu", "softplus", "exp", "logistic")


@pytest.fixture(scope="module")
def diabetes_far_from_zero(tmp_path_factory):
    """scikit-learn's load_diabetes with its target + 10,000 (mean/sd about 130), through
    the real sweep (run_sweep, backend inline): hidden relu [16], the five regression
    heads, 5 folds x 2 repeats, 200 epochs, early stopping off (the defaults)."""
    folder = tmp_path_factory.mktemp("diabetes")
    df = load_diabetes(as_frame=True).frame
    df["target"] = df["target"] + 10_000
    assert df["target"].mean() / df["target"].std() == pytest.approx(131.7, abs=0.1)
    path = folder / "diabetes_10k.csv"
    df.to_csv(path, index=False)
    plan = build_plan(str(path), "target", hidden="relu", output=",".join(HEADS), layers=["16"],
                      folds=5, repeats=2, epochs=200, baselines=[])
    assert plan.metric == "r2" and not plan.early_stopping and plan.engine == "auto"
    with Store(folder / "s.sqlite") as store:
        out = run_sweep(plan, store=store, backend="inline")
        trials = store.trials(out.sweep_id, with_history=False)
    assert out.state == "finished"
    head_of = {c.index: c.head for c in plan.configurations()}
    rows = pd.DataFrame([{"head": head_of[t["config_index"]], "repeat": t["repeat"],
                          "fold": t["fold"], "status": t["status"], "test": t["test_score"],
                          "train": t["train_score"], "epochs": t["epochs"]} for t in trials])
    assert len(rows) == 5 * 10 and (rows["status"] == "done").all()
    return rows, plan


def test_relu_and_softplus_heads_learn_a_target_far_from_zero(diabetes_far_from_zero):
    """The relu and softplus heads score within 0.03 R^2 of the identity head, and every
    head's training R^2 is at least its test R^2 (no head underfits below its test score)."""
    rows, _ = diabetes_far_from_zero
    means = rows.groupby("head")[["test", "train"]].mean()
    assert means.loc["identity", "test"] > 0.4  # the identity head learns the table
    for head in ("relu", "softplus"):
        assert abs(means.loc[head, "test"] - means.loc["identity", "test"]) <= 0.03, means
    for head in HEADS:
        assert means.loc[head, "train"] >= means.loc[head, "test"], means


def test_bounded_head_runs_as_many_epochs_as_the_identity_head(diabetes_far_from_zero):
    """Early stopping off: on every fold of every repeat the logistic head (target mapped to
    [0, 1], a squared error ~20x smaller) runs the identity head's number of epochs, give
    or take the patience (n_iter_no_change, scikit-learn's default 10)."""
    rows, plan = diabetes_far_from_zero
    patience = NetRegressor().n_iter_no_change
    epochs = rows.pivot_table(index=["repeat", "fold"], columns="head", values="epochs")
    gap = (epochs["logistic"] - epochs["identity"]).abs()
    assert gap.max() <= patience, epochs
    assert epochs["identity"].min() > plan.epochs / 2
