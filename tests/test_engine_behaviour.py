"""How the estimators behave at the edges: divergence, bad parameters, per-layer
activations, the per-epoch health history, pickling and dtypes.

Outside references named per test: NumPy's ``np.tanh`` / ``np.maximum`` for a
hand-written forward pass, ``scipy.special.expit`` for the logistic head, the
definitions of issue 2 section 3 for dead units (derivative zero on every probe row)
and saturated units (derivative below 0.05 on most rows), Python's ``pickle``.
"""

from __future__ import annotations

import math
import pickle
import warnings

import numpy as np
import pytest
from scipy import special
from sklearn.exceptions import ConvergenceWarning
from sklearn.metrics import mean_squared_error

from workbench.nets import activations as act
from workbench.nets.engine import DivergenceWarning, NetClassifier, NetRegressor

pytestmark = pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")


@pytest.fixture(scope="module")
def data():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(240, 4))
    y = X @ np.array([1.0, -2.0, 0.5, 1.5]) + 0.1 * rng.normal(size=240)
    return X, y


# --------------------------------------------------------------------------- divergence


@pytest.mark.parametrize("kw, target_scale", [
    (dict(solver="sgd", learning_rate_init=10.0), 1.0),
    (dict(solver="sgd", learning_rate_init=10.0, activation="gelu", early_stopping=True), 1.0),
    (dict(solver="adam"), 1e30),  # a huge target overflows the float32 loss at once
    (dict(solver="adam", dtype="float64"), 1e200),
    (dict(solver="sgd", learning_rate_init=10.0, output_activation="exp"), "counts"),
])
def test_divergence_is_flagged_not_crashed(data, kw, target_scale):
    """A non-finite loss stops training, sets diverged_, warns DivergenceWarning, keeps the
    last finite parameters (so predictions are finite)."""
    X, y = data
    y = np.round(np.abs(y)) if target_scale == "counts" else y * target_scale
    model = NetRegressor((8,), max_iter=50, random_state=0, **kw)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        model.fit(X, y)
    kinds = [w.category for w in caught]
    assert model.diverged_ is True
    assert DivergenceWarning in kinds
    assert RuntimeWarning not in kinds  # no raw NumPy overflow noise reaches the user
    assert ConvergenceWarning not in kinds  # it stopped on divergence, not on max_iter
    assert model.n_iter_ < 50
    assert not math.isfinite(model.loss_curve_[-1])
    assert all(math.isfinite(v) for v in model.loss_curve_[:-1])
    assert np.all(np.isfinite(model.predict(X)))
    assert all(np.all(np.isfinite(c)) for c in model.coefs_ + model.intercepts_)


def test_classifier_divergence_keeps_finite_probabilities(data):
    """Log-loss is clipped (so finite), but exploding weights still end as a flagged fit."""
    X, y = data
    clf = NetClassifier((8,), solver="sgd", learning_rate_init=1e6, max_iter=50, random_state=0)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        clf.fit(X, y > 0)
    assert clf.diverged_ is True
    assert any(w.category is DivergenceWarning for w in caught)
    p = clf.predict_proba(X)
    assert np.all(np.isfinite(p))
    np.testing.assert_allclose(p.sum(axis=1), 1.0)


def test_healthy_fit_is_not_flagged(data):
    X, y = data
    model = NetRegressor((8,), max_iter=30, random_state=0).fit(X, y)
    assert model.diverged_ is False
    assert all(math.isfinite(v) for v in model.loss_curve_)


# --------------------------------------------------------------------------- bad parameters


def _message(excinfo):
    return str(excinfo.value)


def test_unknown_activation_lists_all_known(data):
    X, y = data
    with pytest.raises(ValueError) as info:
        NetRegressor(activation="mish", max_iter=2).fit(X, y)
    for name in act.hidden_names():
        assert name in _message(info)


def test_unknown_activation_in_a_tuple(data):
    X, y = data
    with pytest.raises(ValueError, match="unknown hidden activation"):
        NetRegressor((4, 4), activation=("tanh", "cube"), max_iter=2).fit(X, y)


def test_tuple_of_wrong_length(data):
    X, y = data
    with pytest.raises(ValueError, match="one per hidden layer"):
        NetRegressor((4, 4), activation=("tanh", "relu", "relu"), max_iter=2).fit(X, y)


@pytest.mark.parametrize("cls, task", [(NetRegressor, "regression"),
                                       (NetClassifier, "classification")])
def test_unknown_head_lists_the_tasks_heads(data, cls, task):
    X, y = data
    target = y if task == "regression" else y > 0
    with pytest.raises(ValueError) as info:
        cls((4,), output_activation="cube", max_iter=2).fit(X, target)
    for name in act.head_names(task):
        assert name in _message(info)


def test_softmax_cannot_serve_regression(data):
    X, y = data
    with pytest.raises(ValueError, match="cannot serve regression"):
        NetRegressor((4,), output_activation="softmax", max_iter=2).fit(X, y)


def test_exp_head_cannot_serve_classification(data):
    X, y = data
    with pytest.raises(ValueError, match="cannot serve classification"):
        NetClassifier((4,), output_activation="exp", max_iter=2).fit(X, y > 0)


@pytest.mark.parametrize("head", ["relu", "softplus", "exp"])
def test_non_negative_head_refuses_a_negative_target(data, head):
    X, y = data
    with pytest.raises(ValueError, match="negative") as info:
        NetRegressor((4,), output_activation=head, max_iter=2).fit(X, y)
    assert "identity" in _message(info)  # says what to use instead


def test_bounded_head_refuses_target_above_one(data):
    X, y = data
    with pytest.raises(ValueError, match=r"\[0, 1\]"):
        NetRegressor((4,), output_activation="logistic", max_iter=2).fit(X, np.abs(y))


def test_logistic_head_cannot_serve_three_classes(data):
    X, y = data
    labels = np.digitize(y, [-1.0, 1.0])  # three classes
    assert len(np.unique(labels)) == 3
    with pytest.raises(ValueError, match="3 classes") as info:
        NetClassifier((4,), output_activation="logistic", max_iter=2).fit(X, labels)
    assert "softmax" in _message(info)


def test_softmax_head_for_two_classes_is_two_units(data):
    """A softmax over two units is the logistic unit re-parametrised: p1 = expit(z1 - z0).

    Source: the identity softmax([z0, z1])[1] = scipy.special.expit(z1 - z0).
    """
    from scipy.special import expit

    X, y = data
    labels = y > 0
    clf = NetClassifier((4,), output_activation="softmax", max_iter=5, random_state=0,
                        dtype="float64").fit(X, labels)
    assert clf.n_outputs_ == 2 and clf.out_activation_ == "softmax"
    proba = clf.predict_proba(X)
    assert proba.shape == (len(X), 2)
    np.testing.assert_allclose(proba.sum(axis=1), 1.0, rtol=1e-12)
    # recompute the two output units by hand and compare with the logistic identity
    a = np.maximum(X @ clf.coefs_[0] + clf.intercepts_[0], 0)
    z = a @ clf.coefs_[1] + clf.intercepts_[1]
    np.testing.assert_allclose(proba[:, 1], expit(z[:, 1] - z[:, 0]), rtol=1e-10)
    np.testing.assert_array_equal(clf.predict(X), clf.classes_[(proba[:, 1] > 0.5).astype(int)])


def test_logistic_head_for_three_classes_is_refused():
    X = np.random.default_rng(0).standard_normal((30, 3))
    y = np.repeat([0, 1, 2], 10)
    with pytest.raises(ValueError, match="softmax"):
        NetClassifier((4,), output_activation="logistic", max_iter=2).fit(X, y)


@pytest.mark.parametrize("param, value, choices", [
    ("solver", "lbfgs", ["adam", "sgd"]),
    ("learning_rate", "cosine", ["adaptive", "constant", "invscaling"]),
    ("dtype", "float16", ["float32", "float64"]),
    ("init", "xavier", ["glorot", "he"]),
    ("alpha", -1.0, ["[0, inf"]),
    ("momentum", 1.5, ["[0, 1]"]),
    ("batch_size", 0, ["auto"]),
])
def test_invalid_parameters_name_the_valid_choices(data, param, value, choices):
    X, y = data
    with pytest.raises(ValueError) as info:
        NetRegressor((4,), max_iter=2, **{param: value}).fit(X, y)
    assert param in _message(info)
    for c in choices:
        assert c in _message(info)


def test_aliases_are_accepted(data):
    X, y = data
    m = NetRegressor((4, 3), activation=("sigmoid", "swish"), output_activation="linear",
                     max_iter=2).fit(X, y)
    assert m.hidden_activations_ == ("logistic", "silu")
    assert m.out_activation_ == "identity"


# --------------------------------------------------------------------------- per-layer activations


def test_tuple_activations_are_used_layer_by_layer(data):
    """predict equals a hand-written forward pass: np.tanh, then np.maximum (ReLU), then the
    logistic head (scipy.special.expit) for a bounded target."""
    X, y = data
    target = special.expit(y)  # in (0, 1)
    m = NetRegressor((5, 4), activation=("tanh", "relu"), output_activation="logistic",
                     dtype="float64", max_iter=20, random_state=0).fit(X, target)
    assert m.hidden_activations_ == ("tanh", "relu")
    W, b = m.coefs_, m.intercepts_
    h1 = np.tanh(X @ W[0] + b[0])
    h2 = np.maximum(h1 @ W[1] + b[1], 0)
    ref = special.expit(h2 @ W[2] + b[2]).ravel()
    np.testing.assert_allclose(m.predict(X), ref, rtol=1e-12)


# --------------------------------------------------------------------------- history and health


def test_history_has_one_entry_per_epoch(data):
    X, y = data
    m = NetRegressor((6, 5), activation=("relu", "tanh"), max_iter=7, random_state=0).fit(X, y)
    h = m.history_
    assert m.n_iter_ == 7
    assert h["loss"] == m.loss_curve_
    for key in ("dead", "saturated", "grad_norm"):
        assert len(h[key]) == 7  # the first ten epochs are all measured
    assert h["health_epoch"] == [1, 2, 3, 4, 5, 6, 7]
    assert h["test_loss"] == h["test_score"] == []  # no held-out rows given
    for dead, sat, gn in zip(h["dead"], h["saturated"], h["grad_norm"]):
        assert len(dead) == len(sat) == 2  # one share per hidden layer
        assert all(0.0 <= v <= 1.0 for v in dead + sat)
        assert len(gn) >= 2 and all(math.isfinite(g) and g >= 0 for g in gn)
    assert h["val_score"] == []
    assert m.health_ == {"dead": h["dead"][-1], "saturated": h["saturated"][-1],
                         "grad_norm": h["grad_norm"][-1]}


def test_history_with_early_stopping_records_validation_scores(data):
    X, y = data
    m = NetRegressor((6,), early_stopping=True, max_iter=15, random_state=0).fit(X, y)
    assert len(m.history_["val_score"]) == m.n_iter_ == len(m.history_["loss"])
    assert m.history_["val_score"] == m.validation_scores_
    assert len(m.history_["dead"]) == len(m.history_["health_epoch"])


def test_health_schedule_measures_the_first_epochs_every_fifth_and_the_last(data):
    """Health on a schedule (issue 14): epochs 1-10, then every fifth, and the last one,
    whatever stopped the fit; ``health_epoch`` names them and ``health_`` is the last."""
    X, y = data
    m = NetRegressor((6,), max_iter=23, random_state=0).fit(X, y)
    h = m.history_
    assert h["health_epoch"] == [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 15, 20, 23]
    assert len(h["dead"]) == len(h["saturated"]) == len(h["grad_norm"]) == 13
    assert m.health_["grad_norm"] == h["grad_norm"][-1]
    # the last epoch's health is what measure() gives for the parameters fit returns
    from workbench.nets.engine import health_due
    from workbench.nets.health import PROBE_ROWS, network_health

    got = network_health(m.coefs_, m.intercepts_, "relu", "identity", "regression",
                         X[:PROBE_ROWS], y[:PROBE_ROWS].reshape(-1, 1))
    np.testing.assert_allclose(h["grad_norm"][-1], got["grad_norm"], rtol=1e-4)
    assert [e for e in range(1, 31) if health_due(e)] == [*range(1, 11), 15, 20, 25, 30]
    # a warm start goes on counting: epoch 24 is not due but is the last of that fit
    m.set_params(warm_start=True, max_iter=2)
    m.fit(X, y)
    assert m.history_["health_epoch"][-2:] == [23, 25]


def _warm_continue(model, X, y, **changes):
    model.set_params(warm_start=True, max_iter=1, learning_rate_init=1e-9, **changes)
    model.fit(X, y)
    return model.history_


def test_forced_dead_relu_layer_reports_dead_share_one(data):
    """Huge negative biases: ReLU outputs 0 on every row, derivative 0, so every unit is dead
    (Lu et al. 2019, "Dying ReLU and initialization": the dead-unit definition)."""
    X, y = data
    m = NetRegressor((10, 6), activation="relu", max_iter=3, random_state=0).fit(X, y)
    m.intercepts_[0] = m.intercepts_[0] - 1e3
    hist = _warm_continue(m, X, y)
    assert hist["dead"][-1][0] == 1.0
    assert hist["saturated"][-1][0] == 0.0  # saturation is not defined for ReLU
    assert hist["grad_norm"][-1][0] == 0.0  # no gradient reaches a dead layer
    assert len(hist["dead"]) == 4  # warm start appends to the history


def test_saturated_tanh_layer_reports_high_saturation(data):
    """Huge weights push tanh into its flat tails: 1 - tanh(z)^2 < 0.05 on most rows
    (saturation as in Glorot & Bengio 2010, section 3)."""
    X, y = data
    m = NetRegressor((10,), activation="tanh", max_iter=3, random_state=0).fit(X, y)
    before = m.history_["saturated"][-1][0]
    m.coefs_[0] = m.coefs_[0] * 30.0
    hist = _warm_continue(m, X, y)
    sat = hist["saturated"][-1][0]
    # the same share computed by hand on the training rows
    z = X @ m.coefs_[0] + m.intercepts_[0]
    by_hand = float(np.mean(np.mean(1 - np.tanh(z) ** 2 < 0.05, axis=0) > 0.5))
    assert sat >= 0.9 and by_hand >= 0.9
    assert before < 0.5
    assert hist["dead"][-1][0] == 0.0


def test_health_shares_match_a_hand_count(data):
    """Dead share (ReLU output 0 on every training row) and saturated share (tanh derivative
    1 - tanh(z)^2 below 0.05 on more than half the rows), counted by hand with NumPy."""
    X, y = data
    m = NetRegressor((8, 10), activation=("relu", "tanh"), max_iter=3, random_state=0,
                     dtype="float64").fit(X, y)
    m.intercepts_[0][:3] -= 50.0  # three of eight ReLU units dead
    m.coefs_[1][:, :4] *= 40.0  # four of ten tanh units pushed into their tails
    hist = _warm_continue(m, X, y)
    z1 = X @ m.coefs_[0] + m.intercepts_[0]
    a1 = np.maximum(z1, 0)
    dead_by_hand = float(np.mean(np.all(a1 <= 0, axis=0)))
    z2 = a1 @ m.coefs_[1] + m.intercepts_[1]
    flat = np.mean(1 - np.tanh(z2) ** 2 < 0.05, axis=0) > 0.5
    sat_by_hand = float(np.mean(flat))
    assert dead_by_hand == 3 / 8
    assert 0.2 <= sat_by_hand <= 0.6
    assert hist["dead"][-1] == [dead_by_hand, 0.0]
    assert hist["saturated"][-1] == [0.0, sat_by_hand]


def test_grad_norm_is_the_data_loss_gradient_norm(data):
    """grad_norm per layer = ||dL/dW|| of the half squared error (sklearn.metrics.
    mean_squared_error / 2) on the training rows, by central finite differences."""
    X, y = data
    m = NetRegressor((3,), activation="tanh", max_iter=3, random_state=0,
                     dtype="float64").fit(X, y)
    hist = _warm_continue(m, X, y)
    W = [c.copy() for c in m.coefs_]
    b = [c.copy() for c in m.intercepts_]

    def loss():
        p = np.tanh(X @ W[0] + b[0]) @ W[1] + b[1]
        return mean_squared_error(y, p.ravel()) / 2

    h = 1e-6
    norms = []
    for layer in W:
        g = np.empty_like(layer)
        for idx in np.ndindex(layer.shape):
            keep = layer[idx]
            layer[idx] = keep + h
            up = loss()
            layer[idx] = keep - h
            down = loss()
            layer[idx] = keep
            g[idx] = (up - down) / (2 * h)
        norms.append(float(np.linalg.norm(g)))
    np.testing.assert_allclose(hist["grad_norm"][-1], norms, rtol=1e-6)


def test_healthy_layer_reports_no_dead_units(data):
    X, y = data
    m = NetRegressor((10,), activation="leaky_relu", max_iter=5, random_state=0).fit(X, y)
    assert m.health_["dead"] == [0.0]  # leaky ReLU never has a zero derivative


# --------------------------------------------------------------------------- pickling, dtypes


@pytest.mark.parametrize("cls", [NetRegressor, NetClassifier])
def test_pickle_round_trip_predicts_the_same(data, cls):
    X, y = data
    target = y if cls is NetRegressor else np.digitize(y, [-1.0, 1.0])
    m = cls((6,), activation="gelu", max_iter=5, random_state=0).fit(X, target)
    clone = pickle.loads(pickle.dumps(m))
    np.testing.assert_array_equal(clone.predict(X), m.predict(X))
    if cls is NetClassifier:
        np.testing.assert_array_equal(clone.predict_proba(X), m.predict_proba(X))
        np.testing.assert_array_equal(clone.classes_, m.classes_)
    assert clone.history_ == m.history_
    # a reloaded model can keep training (n_iter_ counts the last fit, as in scikit-learn)
    clone.set_params(warm_start=True, max_iter=2)
    clone.fit(X, target)
    assert clone.n_iter_ == 2 and len(clone.loss_curve_) == len(m.loss_curve_) + 2


def test_float32_is_the_default(data):
    X, y = data
    m = NetRegressor((6,), max_iter=3, random_state=0).fit(X, y)
    assert m.get_params()["dtype"] == "float32"
    assert all(c.dtype == np.float32 for c in m.coefs_ + m.intercepts_)
    assert m.predict(X).dtype == np.float32


def test_float64_on_request(data):
    X, y = data
    m = NetClassifier((6,), max_iter=3, random_state=0, dtype="float64").fit(X, y > 0)
    assert all(c.dtype == np.float64 for c in m.coefs_ + m.intercepts_)
    assert m.predict_proba(X).dtype == np.float64


def test_he_init_bound(data):
    """init="he": uniform bound sqrt(6 / fan_in) for ReLU layers (He et al. 2015); the output
    layer keeps scikit-learn's Glorot bound sqrt(6 / (fan_in + fan_out)) (output_init="sklearn";
    the fair start's zero output layer is tested in tests/test_fair_contest.py)."""
    X, y = data
    m = NetRegressor((400,), activation="relu", init="he", solver="sgd", learning_rate_init=1e-300,
                     momentum=0.0, max_iter=1, random_state=0, dtype="float64",
                     output_init="sklearn").fit(X, y)
    w0, w1 = m.coefs_
    bound0 = math.sqrt(6 / 4)
    assert np.max(np.abs(w0)) <= bound0 and np.max(np.abs(w0)) > 0.95 * bound0
    bound1 = math.sqrt(6 / 401)
    assert np.max(np.abs(w1)) <= bound1 and np.max(np.abs(w1)) > 0.95 * bound1


@pytest.mark.parametrize("dtype", ["float32", "float64"])
@pytest.mark.parametrize("head", ["exp", "softplus", "relu", "logistic"])
def test_extreme_inputs_give_finite_predictions_without_warnings(data, head, dtype):
    """Issue 2 section 2 (numerically safe), at the estimator level: rows 1e4 times larger
    than the training rows give finite predictions and no warning at all."""
    X, y = data
    target = special.expit(y) if head == "logistic" else np.round(np.abs(y))
    m = NetRegressor((6,), activation="softplus", output_activation=head, max_iter=5,
                     random_state=0, dtype=dtype).fit(X, target)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        p = m.predict(np.vstack([X * 1e4, -X * 1e4]))
    assert np.all(np.isfinite(p)) and np.all(p >= 0)
    if head == "logistic":
        assert np.all(p <= 1)


@pytest.mark.parametrize("n_classes", [2, 3])
def test_extreme_inputs_give_finite_probabilities(data, n_classes):
    X, y = data
    labels = np.digitize(y, [-1.0, 1.0]) if n_classes == 3 else (y > 0).astype(int)
    m = NetClassifier((6,), activation="selu", max_iter=5, random_state=0).fit(X, labels)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        p = m.predict_proba(X * 1e4)
    assert np.all(np.isfinite(p))
    np.testing.assert_allclose(p.sum(axis=1), 1.0, rtol=1e-5)


@pytest.mark.parametrize("hidden, factor", [("gelu", 6.0), ("selu", 6.0), ("logistic", 2.0),
                                            ("softplus", 6.0)])
def test_glorot_bound_for_every_activation(data, hidden, factor):
    """init="glorot" (default): uniform in +-sqrt(factor / (fan_in + fan_out)), factor 6
    (Glorot & Bengio 2010) and 2 for logistic, scikit-learn's rule, applied to every layer
    (the output layer too with output_init="sklearn")."""
    X, y = data
    m = NetRegressor((300, 200), activation=hidden, solver="sgd", learning_rate_init=1e-300,
                     momentum=0.0, max_iter=1, random_state=0, dtype="float64",
                     output_init="sklearn").fit(X, y)
    for c, (fan_in, fan_out) in zip(m.coefs_, [(4, 300), (300, 200), (200, 1)]):
        bound = math.sqrt(factor / (fan_in + fan_out))
        assert np.max(np.abs(c)) <= bound
        assert np.max(np.abs(c)) > 0.9 * bound
        # uniform: the variance is bound^2 / 3
        assert np.var(c) == pytest.approx(bound ** 2 / 3, rel=0.35 if c.size < 300 else 0.1)


def test_network_health_of_a_scikit_learn_mlp_matches_the_engine():
    """The same weights give the same health whichever estimator trained them.

    Reference: scikit-learn's MLPRegressor trains the weights; the engine trained
    with the same random_state follows the same trajectory (parity tests), so its
    last-epoch ``health_`` (itself checked against finite differences above) must
    equal :func:`workbench.nets.engine.network_health` on scikit-learn's final weights.
    """
    from sklearn.neural_network import MLPRegressor

    from workbench.nets.engine import network_health

    rng = np.random.default_rng(3)
    X = rng.standard_normal((300, 5))
    y = np.tanh(X[:, 0]) + 0.5 * X[:, 1] ** 2
    kw = dict(hidden_layer_sizes=(9, 6), activation="tanh", max_iter=8, random_state=0,
              shuffle=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        ref = MLPRegressor(**kw).fit(X, y)
        ours = NetRegressor(**kw, dtype="float64", output_init="sklearn",
                            tol_mode="absolute").fit(X, y)
    got = network_health(ref.coefs_, ref.intercepts_, "tanh", "identity", "regression", X, y)
    for key in ("dead", "saturated", "grad_norm"):
        np.testing.assert_allclose(got[key], ours.health_[key], rtol=1e-6, atol=1e-12)
    assert len(got["grad_norm"]) == 3  # two hidden layers and the output layer
