"""Parity with scikit-learn's own MLP where the two overlap.

Reference: ``sklearn.neural_network.MLPRegressor`` / ``MLPClassifier`` (scikit-learn
>= 1.6). Same ``random_state`` means the same Glorot-uniform initial weights (Glorot &
Bengio 2010, as scikit-learn draws them), same batch order, same loss definitions,
L2 term and Adam bias correction (Kingma & Ba 2015), so ``loss_curve_`` must agree to
a relative 1e-6 in float64 over 10 epochs, for adam and for sgd.

Parity is the engine's ``output_init="sklearn", tol_mode="absolute"`` (:data:`PARITY`):
scikit-learn's draw for the output layer and its absolute stopping rule. The engine's
default, the fair start and the relative rule, is tested in ``tests/test_fair_contest.py``.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from sklearn.datasets import make_classification, make_regression
from sklearn.exceptions import ConvergenceWarning
from sklearn.neural_network import MLPClassifier, MLPRegressor

from workbench.nets.engine import NetClassifier, NetRegressor

HIDDEN = ("identity", "logistic", "tanh", "relu")
TASKS = ("regression", "poisson", "binary", "multiclass")
RTOL = 1e-6
#: the engine's scikit-learn mode: its output-layer draw and its absolute stopping rule
PARITY = dict(output_init="sklearn", tol_mode="absolute")

pytestmark = pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")


def _data(task):
    if task in ("regression", "poisson"):
        X, y = make_regression(n_samples=120, n_features=5, noise=5.0, random_state=0)
        X = (X - X.mean(axis=0)) / X.std(axis=0)
        if task == "poisson":
            rng = np.random.default_rng(0)
            y = rng.poisson(np.exp(0.4 * X[:, 0] - 0.3 * X[:, 1] + 0.5)).astype(float)
        else:
            y = y / y.std()
        return X, y
    n_classes = 2 if task == "binary" else 3
    X, y = make_classification(n_samples=120, n_features=5, n_informative=3, n_redundant=0,
                               n_classes=n_classes, random_state=0)
    return X, y


def _pair(task, hidden, solver, **kw):
    """The engine and scikit-learn's MLP with identical settings."""
    common = dict(hidden_layer_sizes=(6, 4), activation=hidden, solver=solver, alpha=1e-3,
                  batch_size=32, learning_rate_init=0.01, max_iter=10, shuffle=False,
                  random_state=3, n_iter_no_change=1000, tol=0.0, momentum=0.9)
    common.update(kw)
    if task in ("regression", "poisson"):
        loss = "poisson" if task == "poisson" else "squared_error"
        head = "exp" if task == "poisson" else "identity"
        ours = NetRegressor(output_activation=head, dtype="float64", **PARITY, **common)
        ref = MLPRegressor(loss=loss, **common)
    else:
        ours = NetClassifier(dtype="float64", **PARITY, **common)
        ref = MLPClassifier(**common)
    return ours, ref


def _fit_both(ours, ref, X, y):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        ours.fit(X, y)
        ref.fit(X, y)


def _assert_same_predictions(ours, ref, X, task):
    if task in ("regression", "poisson"):
        np.testing.assert_allclose(ours.predict(X), ref.predict(X), rtol=RTOL, atol=1e-9)
    else:
        np.testing.assert_allclose(ours.predict_proba(X), ref.predict_proba(X), rtol=RTOL,
                                   atol=1e-9)
        np.testing.assert_array_equal(ours.predict(X), ref.predict(X))


@pytest.mark.parametrize("solver", ["adam", "sgd"])
@pytest.mark.parametrize("task", TASKS)
@pytest.mark.parametrize("hidden", HIDDEN)
def test_loss_curve_matches_sklearn(hidden, task, solver):
    """10 epochs, shuffle=False, batch 32: loss_curve_ equal to MLPRegressor/MLPClassifier's."""
    X, y = _data(task)
    ours, ref = _pair(task, hidden, solver)
    _fit_both(ours, ref, X, y)
    assert len(ours.loss_curve_) == len(ref.loss_curve_) == 10
    np.testing.assert_allclose(ours.loss_curve_, ref.loss_curve_, rtol=RTOL)
    assert ours.n_iter_ == ref.n_iter_
    assert ours.out_activation_ == ref.out_activation_
    for a, b in zip(ours.coefs_ + ours.intercepts_, ref.coefs_ + ref.intercepts_):
        np.testing.assert_allclose(a, b, rtol=1e-6, atol=1e-9)
    _assert_same_predictions(ours, ref, X, task)


def test_initial_weights_are_sklearns():
    """Glorot-uniform draws in scikit-learn's order (factor 2 for logistic): after a single
    sgd step of learning rate ~0 both hold the initial weights."""
    X, y = _data("binary")
    for hidden in HIDDEN:
        ours, ref = _pair("binary", hidden, "sgd", max_iter=1, learning_rate_init=1e-300,
                          momentum=0.0)
        _fit_both(ours, ref, X, y)
        for a, b in zip(ours.coefs_ + ours.intercepts_, ref.coefs_ + ref.intercepts_):
            np.testing.assert_array_equal(a, b)


@pytest.mark.parametrize("solver", ["adam", "sgd"])
@pytest.mark.parametrize("task", TASKS)
def test_shuffled_batches_match_sklearn(task, solver):
    """shuffle=True: the same row order each epoch (sklearn.utils.shuffle on the indices)."""
    X, y = _data(task)
    ours, ref = _pair(task, "tanh", solver, shuffle=True)
    _fit_both(ours, ref, X, y)
    np.testing.assert_allclose(ours.loss_curve_, ref.loss_curve_, rtol=RTOL)
    _assert_same_predictions(ours, ref, X, task)


@pytest.mark.parametrize("task", TASKS)
def test_early_stopping_matches_sklearn(task):
    """early_stopping=True: same validation split (train_test_split, stratified for one-output
    classification), same validation_scores_ (r2_score / accuracy_score), same stop epoch
    and the best weights restored."""
    X, y = _data(task)
    ours, ref = _pair(task, "relu", "adam", shuffle=True, early_stopping=True,
                      validation_fraction=0.2, max_iter=60, n_iter_no_change=4, tol=1e-4)
    _fit_both(ours, ref, X, y)
    assert ours.n_iter_ == ref.n_iter_
    np.testing.assert_allclose(ours.validation_scores_, ref.validation_scores_, rtol=RTOL,
                               atol=1e-12)
    assert ours.best_validation_score_ == pytest.approx(ref.best_validation_score_, rel=RTOL)
    np.testing.assert_allclose(ours.loss_curve_, ref.loss_curve_, rtol=RTOL)
    assert ours.best_loss_ is None and ref.best_loss_ is None
    _assert_same_predictions(ours, ref, X, task)


def test_no_improvement_stop_matches_sklearn():
    """Without early stopping: stop after n_iter_no_change epochs without a tol gain in the
    training loss, exactly where scikit-learn stops; best_loss_ equal."""
    X, y = _data("regression")
    ours, ref = _pair("regression", "tanh", "sgd", max_iter=300, n_iter_no_change=3, tol=1e-2,
                      learning_rate_init=0.05)
    _fit_both(ours, ref, X, y)
    assert ours.n_iter_ == ref.n_iter_ < 300
    assert ours.best_loss_ == pytest.approx(ref.best_loss_, rel=RTOL)


@pytest.mark.parametrize("learning_rate", ["invscaling", "adaptive"])
def test_sgd_learning_rate_schedules_match_sklearn(learning_rate):
    """SGD schedules of scikit-learn's SGDOptimizer: invscaling lr0 / (t + 1)^power_t and
    adaptive (divide by 5 after n_iter_no_change epochs without improvement)."""
    X, y = _data("regression")
    ours, ref = _pair("regression", "relu", "sgd", learning_rate=learning_rate, max_iter=40,
                      n_iter_no_change=2, tol=1e-3, nesterovs_momentum=False,
                      learning_rate_init=0.05, power_t=0.25)
    _fit_both(ours, ref, X, y)
    assert ours.n_iter_ == ref.n_iter_
    np.testing.assert_allclose(ours.loss_curve_, ref.loss_curve_, rtol=RTOL)


@pytest.mark.parametrize("task", TASKS)
def test_warm_start_continues_like_sklearn(task):
    """warm_start=True: a second fit continues from the fitted coefs_ (fresh optimiser,
    loss_curve_ appended), as scikit-learn's MLP does."""
    X, y = _data(task)
    ours, ref = _pair(task, "logistic", "adam", warm_start=True, max_iter=4)
    _fit_both(ours, ref, X, y)
    _fit_both(ours, ref, X, y)
    assert len(ours.loss_curve_) == len(ref.loss_curve_) == 8
    assert ours.n_iter_ == ref.n_iter_
    np.testing.assert_allclose(ours.loss_curve_, ref.loss_curve_, rtol=RTOL)
    _assert_same_predictions(ours, ref, X, task)


@pytest.mark.parametrize("task", TASKS)
def test_warm_start_from_someone_elses_coefs(task):
    """warm_start continues from whatever coefs_/intercepts_ hold: hand scikit-learn's fitted
    weights to the engine and both continue along the same trajectory."""
    X, y = _data(task)
    ours, ref = _pair(task, "tanh", "sgd", warm_start=True, max_iter=3)
    _fit_both(ours, ref, X, y)
    # perturb the reference weights, then give the same weights to both
    rng = np.random.default_rng(5)
    ref.coefs_ = [c + rng.normal(scale=0.1, size=c.shape) for c in ref.coefs_]
    ref.intercepts_ = [b + rng.normal(scale=0.1, size=b.shape) for b in ref.intercepts_]
    ours.coefs_ = [c.copy() for c in ref.coefs_]
    ours.intercepts_ = [b.copy() for b in ref.intercepts_]
    _assert_same_predictions(ours, ref, X, task)  # predict reads the new weights
    n_before = len(ref.loss_curve_)
    _fit_both(ours, ref, X, y)
    np.testing.assert_allclose(ours.loss_curve_[n_before:], ref.loss_curve_[n_before:],
                               rtol=RTOL)
    _assert_same_predictions(ours, ref, X, task)


def test_float32_tracks_float64():
    """The float32 default stays within float32 round-off of the float64 trajectory
    (common practice tolerance, 1e-3 relative over 10 epochs)."""
    X, y = _data("regression")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        kw = dict(hidden_layer_sizes=(6, 4), activation="tanh", batch_size=32, max_iter=10,
                  shuffle=False, random_state=3, learning_rate_init=0.01)
        a = NetRegressor(dtype="float32", **PARITY, **kw).fit(X, y)
        b = MLPRegressor(**kw).fit(X, y)
    assert a.coefs_[0].dtype == np.float32
    np.testing.assert_allclose(a.loss_curve_, b.loss_curve_, rtol=1e-3)


@pytest.mark.parametrize("solver", ["adam", "sgd"])
def test_multi_output_regression_matches_sklearn(solver):
    """Two regression targets: squared error averaged over outputs as MLPRegressor does."""
    X, y = _data("regression")
    Y = np.column_stack([y, np.sin(y)])
    ours, ref = _pair("regression", "relu", solver)
    _fit_both(ours, ref, X, Y)
    np.testing.assert_allclose(ours.loss_curve_, ref.loss_curve_, rtol=RTOL)
    assert ours.predict(X).shape == ref.predict(X).shape == (X.shape[0], 2)
    np.testing.assert_allclose(ours.predict(X), ref.predict(X), rtol=RTOL, atol=1e-9)


def test_multilabel_classification_matches_sklearn():
    """Multilabel indicator target: one logistic output per label, log-loss summed over
    labels, as MLPClassifier does."""
    X, y = _data("multiclass")
    Y = np.column_stack([y == 0, y == 1, X[:, 0] > 0]).astype(int)
    ours, ref = _pair("binary", "tanh", "adam")
    _fit_both(ours, ref, X, Y)
    np.testing.assert_allclose(ours.loss_curve_, ref.loss_curve_, rtol=RTOL)
    np.testing.assert_allclose(ours.predict_proba(X), ref.predict_proba(X), rtol=RTOL,
                               atol=1e-9)
    np.testing.assert_array_equal(ours.predict(X), ref.predict(X))


def test_warm_start_with_early_stopping_matches_sklearn():
    """warm_start + early_stopping: the validation history and best score carry over."""
    X, y = _data("binary")
    ours, ref = _pair("binary", "relu", "adam", warm_start=True, early_stopping=True,
                      shuffle=True, max_iter=5, n_iter_no_change=3, tol=1e-4)
    _fit_both(ours, ref, X, y)
    _fit_both(ours, ref, X, y)
    np.testing.assert_allclose(ours.validation_scores_, ref.validation_scores_, rtol=RTOL)
    np.testing.assert_allclose(ours.loss_curve_, ref.loss_curve_, rtol=RTOL)
    assert ours.n_iter_ == ref.n_iter_


def test_batch_larger_than_the_data_is_clipped_like_sklearn():
    """batch_size > n_samples: both warn and use the whole set as one batch."""
    X, y = _data("regression")
    ours, ref = _pair("regression", "tanh", "adam", batch_size=500)
    with pytest.warns(UserWarning, match="clipped"):
        ours.fit(X, y)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref.fit(X, y)
    np.testing.assert_allclose(ours.loss_curve_, ref.loss_curve_, rtol=RTOL)


@pytest.mark.parametrize("hidden", ["relu", "logistic"])
@pytest.mark.parametrize("task", TASKS)
def test_no_hidden_layer_matches_sklearn(task, hidden):
    """hidden_layer_sizes=(): a generalised linear model trained by adam, as scikit-learn's
    MLP allows (its Glorot factor still follows `activation`: 2 for logistic)."""
    X, y = _data(task)
    ours, ref = _pair(task, hidden, "adam", hidden_layer_sizes=())
    _fit_both(ours, ref, X, y)
    np.testing.assert_allclose(ours.loss_curve_, ref.loss_curve_, rtol=RTOL)
    _assert_same_predictions(ours, ref, X, task)
    assert ours.health_["dead"] == [] and len(ours.health_["grad_norm"]) == 1
