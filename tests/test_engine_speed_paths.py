"""The engine's fast training paths give the answers of the plain ones.

``Network.train_epoch`` (one epoch in batches, its loss taken once per epoch from
the batch predictions it keeps) is checked against scikit-learn's own MLP doing one
epoch from the same weights (``MLPRegressor`` / ``MLPClassifier`` with
``warm_start=True``, ``shuffle=False``: a fresh optimiser and the batches in order,
its ``loss_curve_`` entry the row-weighted mean of the batch losses plus each
batch's L2 term) and against the per-batch loop written out here (forward +
backward + optimiser step per batch, the loss summed batch by batch), for heads
and activations scikit-learn does not have.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from sklearn.exceptions import ConvergenceWarning
from sklearn.neural_network import MLPClassifier, MLPRegressor

from workbench.nets import activations as act
from workbench.nets.network import Network, with_ones
from workbench.nets.optimizers import AdamOptimizer, SGDOptimizer

ROWS, FEATURES, BATCH = 130, 4, 32  # 130 rows: four full batches and one of 2


def _data(task, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(ROWS, FEATURES))
    if task == "regression":
        y = (X[:, 0] - 0.5 * X[:, 1] ** 2 + 0.1 * rng.normal(size=ROWS)).reshape(-1, 1)
    elif task == "poisson":
        y = rng.poisson(np.exp(0.3 * X[:, 0] + 0.2)).astype(float).reshape(-1, 1)
    elif task == "binary":
        y = (X[:, 0] + X[:, 1] * X[:, 2] > 0).astype(float).reshape(-1, 1)
    else:  # multiclass, one-hot
        y = np.eye(3)[np.digitize(X[:, 0] + 0.5 * X[:, 3], [-0.5, 0.5])]
    return X, y


def _net(hidden, key, n_out, seed=1, dtype=np.float64):
    head = act.resolve_head(key[1], key[0])
    net = Network([FEATURES, 6, 5, n_out], [hidden, hidden], head, np.dtype(dtype), 0.01)
    net.theta[...] = np.random.default_rng(seed).uniform(-0.5, 0.5, net.theta.size)
    net.ensure(BATCH)
    return net


def _optimizer(solver, net):
    if solver == "adam":
        return AdamOptimizer(net.theta.size, net.dtype, 0.01)
    return SGDOptimizer(net.theta.size, net.dtype, 0.05, momentum=0.9, nesterov=True)


def _per_batch_epoch(net, optimizer, X_ones, y, alpha):
    """The plain loop: the loss of each batch before its step, weighted by its rows."""
    n, total = X_ones.shape[0], 0.0
    for start in range(0, n, BATCH):
        stop = min(start + BATCH, n)
        rows = stop - start
        total += net.backward(X_ones[start:stop], y[start:stop], rows, alpha, scale=False) * rows
        optimizer.update(net.theta, net.grad, rows)
    return total / n


SKLEARN_CASES = [  # (task, head key, scikit-learn loss)
    ("regression", ("regression", "identity"), "squared_error"),
    ("poisson", ("regression", "exp"), "poisson"),
    ("binary", ("classification", "logistic"), None),
    ("multiclass", ("classification", "softmax"), None),
]


@pytest.mark.parametrize("solver", ["adam", "sgd"])
@pytest.mark.parametrize("hidden", ["relu", "tanh", "logistic"])
@pytest.mark.parametrize("case", SKLEARN_CASES, ids=lambda c: c[0])
def test_train_epoch_is_one_sklearn_epoch(case, hidden, solver):
    """One epoch from the same weights: scikit-learn's loss_curve_ entry and weights."""
    task, key, loss = case
    X, y = _data(task)
    alpha = 0.01
    common = dict(hidden_layer_sizes=(6, 5), activation=hidden, solver=solver, alpha=alpha,
                  batch_size=BATCH, max_iter=1, shuffle=False, random_state=0,
                  learning_rate_init=0.01 if solver == "adam" else 0.05, momentum=0.9,
                  nesterovs_momentum=True, tol=0.0, n_iter_no_change=1000)
    ref = (MLPRegressor(loss=loss, **common) if key[0] == "regression"
           else MLPClassifier(**common))
    target = y.ravel() if y.shape[1] == 1 else y.argmax(axis=1)
    net = _net(hidden, key, y.shape[1])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        ref.fit(X, target)  # builds its layers; then our weights, and one more epoch
        ref.coefs_ = [w.copy() for w in net.weights]
        ref.intercepts_ = [b.copy() for b in net.intercepts]
        ref.set_params(warm_start=True)
        ref.fit(X, target)
    ours = net.train_epoch(_optimizer(solver, net), with_ones(X), y, BATCH, alpha)
    assert ours == pytest.approx(ref.loss_curve_[-1], rel=1e-12)
    for mine, theirs in zip(net.weights + net.intercepts, ref.coefs_ + ref.intercepts_):
        np.testing.assert_allclose(mine, theirs, rtol=1e-12, atol=1e-15)


ALL_HEADS = list(act.HEADS)


def _target_for(key, seed=0):
    task, name = key
    if key == ("classification", "softmax"):
        return _data("multiclass", seed)
    if task == "classification":
        return _data("binary", seed)
    X, y = _data("regression", seed)
    if name == "exp":
        return _data("poisson", seed)
    if name in ("relu", "softplus"):
        return X, np.abs(y)
    if name == "logistic":
        return X, 1.0 / (1.0 + np.exp(-y))
    return X, y


@pytest.mark.parametrize("alpha", [0.0, 0.02])
@pytest.mark.parametrize("key", ALL_HEADS, ids=lambda k: f"{k[0]}-{k[1]}")
@pytest.mark.parametrize("hidden", ["gelu", "leaky_relu", "softplus"])
def test_train_epoch_matches_the_per_batch_loop(hidden, key, alpha):
    """Every head, activations scikit-learn lacks: the same weights to the last bit (the
    same arithmetic per batch) and the same loss up to the rounding of a sum taken in
    another order, over three epochs."""
    X, y = _target_for(key)
    X_ones = with_ones(X)
    a, b = _net(hidden, key, y.shape[1]), _net(hidden, key, y.shape[1])
    opt_a, opt_b = _optimizer("adam", a), _optimizer("adam", b)
    for _ in range(3):
        fast = a.train_epoch(opt_a, X_ones, y, BATCH, alpha)
        plain = _per_batch_epoch(b, opt_b, X_ones, y, alpha)
        assert fast == pytest.approx(plain, rel=1e-13)
        np.testing.assert_array_equal(a.theta, b.theta)


def test_train_epoch_in_float32_tracks_the_per_batch_loss():
    """float32: the epoch's loss from one sum over all rows agrees with the per-batch sum
    to float32 precision."""
    X, y = _data("binary")
    X_ones = with_ones(X.astype(np.float32))
    y = y.astype(np.float32)
    key = ("classification", "logistic")
    a, b = (_net("relu", key, 1, dtype=np.float32) for _ in range(2))
    opt_a, opt_b = _optimizer("adam", a), _optimizer("adam", b)
    for _ in range(3):
        fast = a.train_epoch(opt_a, X_ones, y, BATCH, 1e-3)
        plain = _per_batch_epoch(b, opt_b, X_ones, y, 1e-3)
        assert fast == pytest.approx(plain, rel=1e-5)
        np.testing.assert_array_equal(a.theta, b.theta)


def test_train_epoch_is_deterministic():
    X, y = _data("multiclass")
    key = ("classification", "softmax")
    runs = []
    for _ in range(2):
        net = _net("tanh", key, 3)
        opt = _optimizer("adam", net)
        losses = [net.train_epoch(opt, with_ones(X), y, BATCH, 1e-3) for _ in range(3)]
        runs.append((losses, net.theta.copy()))
    assert runs[0][0] == runs[1][0]
    np.testing.assert_array_equal(runs[0][1], runs[1][1])
