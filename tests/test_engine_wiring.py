"""The engine reads every fact about an activation from its registry entry.

Each test changes one field of a registry entry (pytest's ``monkeypatch``, undone after
the test) and shows that training, the health measurement or the initialisation
changes exactly as that field says, so a wrong fact in the registry cannot go unseen.
The unchanged behaviour is checked against outside references: plain gradient
descent (theta -= lr * grad, one full batch), NumPy forward passes, the uniform bounds
of Glorot & Bengio (2010) and He et al. (2015).
"""

from __future__ import annotations

import dataclasses
import math
import warnings

import numpy as np
import pytest
from sklearn.exceptions import ConvergenceWarning

from workbench.nets import activations as act
from workbench.nets.engine import NetRegressor
from workbench.nets.health import network_health
from workbench.nets.network import Network, with_ones

HIDDEN = act.hidden_names()

pytestmark = pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")


@pytest.fixture(scope="module")
def data():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(60, 3))
    y = np.sin(X[:, 0]) + 0.5 * X[:, 1]
    return X, y


def _patch(monkeypatch, name, **changes):
    monkeypatch.setitem(act.HIDDEN, name, dataclasses.replace(act.HIDDEN[name], **changes))


def _one_gd_step(X, y, name, lr):
    """One full-batch step of plain gradient descent (sgd, no momentum, no L2), from
    scikit-learn's random output layer (the fair start's zero output layer would send
    no gradient to the first layer on the first step)."""
    return NetRegressor((5,), name, solver="sgd", momentum=0.0, alpha=0.0, batch_size=len(X),
                        learning_rate_init=lr, max_iter=1, shuffle=False, random_state=0,
                        dtype="float64", monitor_health=False, output_init="sklearn").fit(X, y)


@pytest.mark.parametrize("name", HIDDEN)
def test_training_uses_the_registrys_derivative(data, monkeypatch, name):
    """Doubling the registry's derivative doubles the first layer's gradient (the chain
    rule is linear in f') and leaves the output layer's alone: after one gradient-descent
    step from the same initial weights, the first layer moves exactly twice as far."""
    X, y = data
    start = _one_gd_step(X, y, name, 1e-300)  # the initial weights
    honest = _one_gd_step(X, y, name, 0.1)
    entry = act.HIDDEN[name]

    def doubled(z, a, out=None, **params):
        return 2.0 * entry.derivative(z, a, out=out, **params)

    _patch(monkeypatch, name, derivative=doubled)
    broken = _one_gd_step(X, y, name, 0.1)
    honest_move = honest.coefs_[0] - start.coefs_[0]
    assert np.max(np.abs(honest_move)) > 1e-6
    np.testing.assert_allclose(broken.coefs_[0] - start.coefs_[0], 2 * honest_move,
                               rtol=1e-9, atol=1e-15)
    np.testing.assert_allclose(broken.coefs_[1], honest.coefs_[1], rtol=1e-12)


def _saturated_tanh(X):
    """A tanh layer whose weights push most units into the flat tails."""
    rng = np.random.default_rng(1)
    coefs = [rng.normal(scale=20.0, size=(X.shape[1], 6)), rng.normal(size=(6, 1))]
    intercepts = [np.zeros(6), np.zeros(1)]
    return coefs, intercepts


def test_health_reads_the_registrys_saturates_flag(data, monkeypatch):
    """Saturated share: 1 - tanh(z)^2 < 0.05 on most rows, counted by hand with NumPy;
    with the registry saying tanh does not saturate, the share is not measured (0)."""
    X, y = data
    coefs, intercepts = _saturated_tanh(X)
    z = X @ coefs[0] + intercepts[0]
    by_hand = float(np.mean(np.mean(1 - np.tanh(z) ** 2 < 0.05, axis=0) > 0.5))
    assert by_hand > 0.5
    health = network_health(coefs, intercepts, "tanh", "identity", "regression", X, y)
    assert health["saturated"] == [by_hand]
    _patch(monkeypatch, "tanh", saturates=False)
    health = network_health(coefs, intercepts, "tanh", "identity", "regression", X, y)
    assert health["saturated"] == [0.0]


def test_health_reads_the_registrys_derivative(data, monkeypatch):
    """A unit is dead when the derivative is 0 on every probe row: with a registry
    derivative of zero everywhere, every unit counts as dead."""
    X, y = data
    coefs, intercepts = _saturated_tanh(X)
    assert network_health(coefs, intercepts, "tanh", "identity", "regression", X, y)["dead"] == [0.0]

    def flat(z, a, out=None, **_):
        return np.zeros_like(a)

    _patch(monkeypatch, "tanh", derivative=flat)
    assert network_health(coefs, intercepts, "tanh", "identity", "regression", X, y)["dead"] == [1.0]


def _net(names, seed=0):
    units = [3, 4, 5, 1]
    net = Network(units, names, act.resolve_head("identity", "regression"), np.dtype(np.float64))
    net.theta[...] = np.random.default_rng(seed).normal(size=net.theta.size)
    return net


def _numpy_forward(net, X, names):
    """The forward pass written with NumPy and the registry's (SciPy-checked) forward functions."""
    a = X
    for i, (W, b) in enumerate(zip(net.weights, net.intercepts)):
        z = a @ W + b
        a = act.HIDDEN[names[i]].forward(z) if i < len(names) else z
    return a


@pytest.mark.parametrize("name", HIDDEN)
def test_training_forward_equals_the_plain_forward(data, name):
    """The training pass (ones column inside the buffers, restored unless the activation
    keeps it) computes what a plain NumPy forward pass computes."""
    X, _ = data
    names = [name, "tanh" if name != "tanh" else "relu"]
    net = _net(names)
    net.ensure(len(X))
    got = net.forward(with_ones(X), len(X))
    np.testing.assert_allclose(got, _numpy_forward(net, X, names), rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(net.predict_raw(X), got, rtol=1e-12, atol=1e-12)


def test_forward_reads_the_registrys_keeps_one_flag(data, monkeypatch):
    """Claiming tanh maps 1 to 1 leaves tanh(1) in the ones column: the intercepts are
    scaled by 0.76 and the training pass no longer equals the plain forward pass."""
    X, _ = data
    _patch(monkeypatch, "tanh", keeps_one=True)
    net = _net(["tanh", "tanh"])
    net.ensure(len(X))
    got = net.forward(with_ones(X), len(X))
    assert not np.allclose(got, _numpy_forward(net, X, ["tanh", "tanh"]), rtol=1e-6)


def _max_first_weight(X, y, name):
    m = NetRegressor((400,), name, init="he", solver="sgd", learning_rate_init=1e-300,
                     momentum=0.0, max_iter=1, random_state=0, dtype="float64",
                     monitor_health=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        m.fit(X, y)
    return float(np.max(np.abs(m.coefs_[0])))


@pytest.mark.parametrize("name", HIDDEN)
def test_init_follows_the_registry(data, name):
    """init="he": sqrt(6 / fan_in) (He et al. 2015) for the entries marked he_init,
    else Glorot's sqrt(factor / (fan_in + fan_out)) with the entry's factor."""
    X, y = data
    entry = act.HIDDEN[name]
    bound = (math.sqrt(6 / 3) if entry.he_init
             else math.sqrt(entry.glorot_factor / (3 + 400)))
    assert 0.95 * bound < _max_first_weight(X, y, name) <= bound


def test_init_reads_the_registrys_he_flag(data, monkeypatch):
    X, y = data
    glorot = _max_first_weight(X, y, "tanh")
    _patch(monkeypatch, "tanh", he_init=True)
    he = _max_first_weight(X, y, "tanh")
    assert he == pytest.approx(glorot * math.sqrt(6 / 3) / math.sqrt(6 / 403), rel=1e-12)


def test_leaky_slope_reaches_the_registrys_parameter(data):
    """The estimator's leaky_slope is the registry's ``slope`` parameter: predict equals
    a NumPy forward pass with max(z, slope * z) (Maas et al. 2013) for slope 0.3."""
    X, y = data
    m = NetRegressor((4,), "leaky_relu", leaky_slope=0.3, max_iter=3, random_state=0,
                     dtype="float64").fit(X, y)
    z = X @ m.coefs_[0] + m.intercepts_[0]
    ref = np.maximum(z, 0.3 * z) @ m.coefs_[1] + m.intercepts_[1]
    np.testing.assert_allclose(m.predict(X), ref.ravel(), rtol=1e-12)
