"""Full-network gradients of the engine checked by central finite differences.

For every hidden activation x output head pair the analytic gradient that
``workbench.nets.network.Network.backward`` writes into ``net.grad`` is compared with
``(L(theta + h e_i) - L(theta - h e_i)) / 2h`` in float64 (central finite differences,
the same kind of check scikit-learn's own MLP test suite runs on its backpropagation).
The loss values are compared with
``sklearn.metrics`` (``mean_squared_error``, ``mean_poisson_deviance``, ``log_loss``).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special
from sklearn.metrics import log_loss, mean_poisson_deviance, mean_squared_error

from workbench.nets import activations as act
from workbench.nets.network import Network, with_ones

HIDDEN = act.hidden_names()
HEAD_KEYS = list(act.HEADS)  # (task, name) for all seven heads
N_FEATURES, LAYERS, N_ROWS = 3, (4, 3), 12
KINK_MARGIN = 1e-4  # no pre-activation this close to 0 (relu, leaky_relu, selu kinks)
H = 1e-6


def _n_out(key):
    return 3 if key == ("classification", "softmax") else 1


def _targets(key, rng, m):
    task, name = key
    if key == ("classification", "softmax"):
        labels = np.arange(m) % 3
        return np.eye(3)[labels]
    if task == "classification":
        return (np.arange(m) % 2).reshape(-1, 1).astype(float)
    if name == "identity":
        return rng.normal(size=(m, 1))
    if name == "exp":
        return rng.poisson(1.5, size=(m, 1)).astype(float)
    if name in ("relu", "softplus"):
        return rng.uniform(0.0, 2.0, size=(m, 1))
    return rng.uniform(0.05, 0.95, size=(m, 1))  # bounded regression in [0, 1]


def _batch(X):
    """The rows as ``Network.backward`` takes them: a trailing ones column for the intercepts."""
    return with_ones(X)


def _pre_activations(net, X, hidden, slope=0.01):
    """Every layer's z = a W + b, with the registry's forward functions (tested elsewhere
    against SciPy)."""
    zs, a = [], X
    for i, (W, b) in enumerate(zip(net.weights, net.intercepts)):
        z = a @ W + b
        zs.append(z)
        if i < len(net.weights) - 1:
            fn = act.HIDDEN[hidden[i]]
            params = {"slope": slope} if fn.name == "leaky_relu" else {}
            a = fn.forward(z.copy(), **params)
    return zs


def _ready(net, m):
    """Buffers for m rows (the engine preallocates them)."""
    net.ensure(m)


def _build(hidden, key, seed, leaky_slope=0.01):
    """A tiny float64 net and data where no pre-activation sits near a kink."""
    head = act.resolve_head(key[1], key[0])
    units = [N_FEATURES, *LAYERS, _n_out(key)]
    for attempt in range(200):
        rng = np.random.default_rng(1000 * seed + attempt)
        net = Network(units, list(hidden), head, np.dtype(np.float64), leaky_slope)
        net.theta[...] = rng.normal(scale=0.8, size=net.theta.size)
        X = rng.normal(size=(N_ROWS, N_FEATURES))
        zs = _pre_activations(net, X, hidden, leaky_slope)
        active = float(np.mean(zs[-1] > 0))
        if key == ("regression", "relu") and not 0.4 <= active <= 0.85:
            continue  # the relu head must pass many rows and block some, so both halves count
        if min(float(np.min(np.abs(z))) for z in zs) > KINK_MARGIN:
            y = _targets(key, rng, N_ROWS)
            _ready(net, N_ROWS)
            return net, X, y
    raise AssertionError("could not draw data away from the kinks")


def _loss(net, X, y, alpha, theta):
    net.theta[...] = theta
    return net.backward(_batch(X), y, X.shape[0], alpha)


def _analytic_and_numeric(net, X, y, alpha):
    theta0 = net.theta.copy()
    loss0 = _loss(net, X, y, alpha, theta0)
    grad = net.grad.copy()
    fd = np.empty_like(theta0)
    for i in range(theta0.size):
        e = np.zeros_like(theta0)
        e[i] = H
        fd[i] = (_loss(net, X, y, alpha, theta0 + e) - _loss(net, X, y, alpha, theta0 - e)) / (2 * H)
    net.theta[...] = theta0
    return loss0, grad, fd


def _assert_same_gradient(grad, fd):
    scale = float(np.max(np.abs(fd)))
    assert scale > 1e-6  # a real gradient, not a dead network
    np.testing.assert_allclose(grad, fd, rtol=1e-5, atol=1e-6 * scale)


def _head_reference(key, z):
    """Output of each head from its outside definition (NumPy / scipy.special)."""
    task, name = key
    if name == "identity":
        return z
    if name == "exp":
        return np.exp(z)
    if name == "relu":
        return np.maximum(z, 0)
    if name == "softplus":
        return np.logaddexp(0, z)
    if name == "softmax":
        return special.softmax(z, axis=1)
    return special.expit(z)


@pytest.mark.parametrize("alpha", [0.0, 0.3])
@pytest.mark.parametrize("key", HEAD_KEYS, ids=lambda k: f"{k[0]}-{k[1]}")
@pytest.mark.parametrize("hidden", HIDDEN)
def test_gradient_matches_finite_differences(hidden, key, alpha):
    """Every hidden activation x every head, with and without the L2 term (float64)."""
    net, X, y = _build((hidden, hidden), key, seed=HIDDEN.index(hidden))
    _, grad, fd = _analytic_and_numeric(net, X, y, alpha)
    _assert_same_gradient(grad, fd)


@pytest.mark.parametrize("hidden", [("tanh", "relu"), ("gelu", "selu"), ("leaky_relu", "silu"),
                                    ("softplus", "elu")])
def test_gradient_with_one_activation_per_layer(hidden):
    """Mixed per-layer activations (issue 2: a tuple, one per hidden layer)."""
    net, X, y = _build(hidden, ("regression", "softplus"), seed=7, leaky_slope=0.05)
    _, grad, fd = _analytic_and_numeric(net, X, y, 0.1)
    _assert_same_gradient(grad, fd)


@pytest.mark.parametrize("name", ["relu", "softplus", "logistic"])
def test_non_canonical_heads_need_their_derivative(name):
    """Squared error through a non-canonical head: dL/dz = (p - y) * head'(z).

    The finite-difference gradient disagrees with the canonical shortcut delta = p - y,
    so the check above would catch an engine that forgot the head's derivative.
    """
    key = ("regression", name)
    net, X, y = _build(("tanh", "tanh"), key, seed=3)
    _, grad, fd = _analytic_and_numeric(net, X, y, 0.0)
    # output-layer bias gradient under the canonical shortcut: mean(p - y)
    zs = _pre_activations(net, X, ("tanh", "tanh"))
    p = _head_reference(key, zs[-1])
    shortcut = np.mean(p - y, axis=0)
    fd_out_bias = fd[-1:]
    np.testing.assert_allclose(grad[-1:], fd_out_bias, rtol=1e-5, atol=1e-8)
    assert not np.allclose(shortcut, fd_out_bias, rtol=1e-3, atol=1e-6)


@pytest.mark.parametrize("alpha", [0.0, 0.5])
@pytest.mark.parametrize("key", HEAD_KEYS, ids=lambda k: f"{k[0]}-{k[1]}")
def test_loss_matches_sklearn_metrics(key, alpha):
    """The matched losses, as scikit-learn's MLP defines them:
    half squared error = sklearn.metrics.mean_squared_error / 2; half Poisson deviance =
    mean_poisson_deviance / 2; log-loss = sklearn.metrics.log_loss; plus the L2 term
    0.5 * alpha * ||W||^2 / n_samples (weights only, not the biases)."""
    net, X, y = _build(("tanh", "gelu"), key, seed=11)
    loss = net.backward(_batch(X), y, N_ROWS, alpha)
    p = _head_reference(key, _pre_activations(net, X, ("tanh", "gelu"))[-1])
    task, name = key
    head = act.resolve_head(name, task)
    if head.loss == "squared_error":
        ref = mean_squared_error(y, p) / 2
    elif head.loss == "poisson":
        ref = mean_poisson_deviance(y.ravel(), p.ravel()) / 2
    elif name == "softmax":
        ref = log_loss(y.argmax(axis=1), p, labels=[0, 1, 2])
    else:
        ref = log_loss(y.ravel(), p.ravel())
    ref += 0.5 * alpha * sum(float(np.sum(W * W)) for W in net.weights) / N_ROWS
    assert loss == pytest.approx(ref, rel=1e-12)


def test_log_loss_is_clipped_as_sklearn_does():
    """A confident wrong prediction: probabilities clipped to [eps, 1 - eps] (float64 eps),
    the clipping scikit-learn's MLP applies before sklearn.metrics.log_loss-style averaging."""
    head = act.resolve_head("logistic", "classification")
    net = Network([1, 1, 1], ["identity"], head, np.dtype(np.float64), 0.01)
    _ready(net, 2)
    net.weights[0][...] = 1.0
    net.weights[1][...] = 1000.0
    X = np.array([[1.0], [-1.0]])
    y = np.array([[0.0], [1.0]])
    loss = net.backward(_batch(X), y, 2, 0.0)
    eps = np.finfo(np.float64).eps
    assert np.isfinite(loss)
    assert loss == pytest.approx(-np.log(eps), rel=1e-12)
