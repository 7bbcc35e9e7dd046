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


# --------------------------------------------------------------------------- stacks


def _stack_case(hidden, key, dtype, k=3, seed=0):
    """``k`` networks of one shape with their own weights and rows."""
    n_out = 3 if key == ("classification", "softmax") else 1
    data = [_target_for(key, seed + i) for i in range(k)]
    Xs = np.stack([with_ones(X.astype(dtype)) for X, _ in data])
    ys = np.stack([y.astype(dtype) for _, y in data])
    nets = [_net(hidden, key, n_out, seed=10 + i, dtype=dtype) for i in range(k)]
    return nets, Xs, ys


@pytest.mark.parametrize("dtype", [np.float64, np.float32], ids=["float64", "float32"])
@pytest.mark.parametrize("key", ALL_HEADS, ids=lambda k: f"{k[0]}-{k[1]}")
@pytest.mark.parametrize("hidden", act.hidden_names())
def test_a_stack_trains_each_network_as_alone(hidden, key, dtype):
    """NetworkStack.train_epoch against each network's own train_epoch: the same losses
    and weights to the last bit, over three epochs (every activation and head)."""
    from workbench.nets.stacked import NetworkStack

    alone, Xs, ys = _stack_case(hidden, key, dtype)
    stacked, _, _ = _stack_case(hidden, key, dtype)
    opts_a = [_optimizer("adam", n) for n in alone]
    opts_s = [_optimizer("adam", n) for n in stacked]
    stack = NetworkStack(stacked[0], len(stacked), BATCH)
    with np.errstate(all="ignore"):
        for _ in range(3):
            want = [net.train_epoch(o, X, y, BATCH, 0.01)
                    for net, o, X, y in zip(alone, opts_a, Xs, ys)]
            got = stack.train_epoch(stacked, opts_s, Xs, ys, BATCH, 0.01)
            assert got == want
            for a, s in zip(alone, stacked):
                np.testing.assert_array_equal(s.theta, a.theta)


def test_a_stack_keeps_each_optimizers_state():
    """SGD (Nesterov) in a stack: the velocities and the weights end as alone, and a stack
    refuses networks whose optimisers are at different steps."""
    from workbench.nets.stacked import NetworkStack

    key = ("regression", "identity")
    alone, Xs, ys = _stack_case("tanh", key, np.float64)
    stacked, _, _ = _stack_case("tanh", key, np.float64)
    opts_a = [_optimizer("sgd", n) for n in alone]
    opts_s = [_optimizer("sgd", n) for n in stacked]
    stack = NetworkStack(stacked[0], 3, BATCH)
    for _ in range(2):
        want = [n.train_epoch(o, X, y, BATCH, 0.0) for n, o, X, y in zip(alone, opts_a, Xs, ys)]
        assert stack.train_epoch(stacked, opts_s, Xs, ys, BATCH, 0.0) == want
    for a, b in zip(opts_a, opts_s):
        np.testing.assert_array_equal(a.velocity, b.velocity)
    adams = [_optimizer("adam", n) for n in stacked]
    adams[1].t = 5
    with pytest.raises(ValueError, match="cannot train in one stack"):
        stack.train_epoch(stacked, adams, Xs, ys, BATCH, 0.0)


def _hand_fit(net, X_ones, y, epochs):
    """A minimal fit: ``epochs`` epochs of Network.train_epoch with Adam."""
    opt = _optimizer("adam", net)
    return [net.train_epoch(opt, X_ones, y, BATCH, 1e-3) for _ in range(epochs)], net.theta.copy()


def test_lockstep_fits_give_the_results_of_separate_fits():
    """run_in_lockstep: fits of two shapes and different lengths (so members leave early
    and groups form by shape) return what they return alone, and were stacked."""
    from workbench.nets.stacked import run_in_lockstep

    key = ("classification", "logistic")
    jobs = []
    for i, (hidden, epochs) in enumerate([("relu", 4), ("relu", 2), ("relu", 3), ("tanh", 3),
                                          ("tanh", 1)]):
        X, y = _data("binary", seed=i)
        jobs.append((hidden, with_ones(X), y, epochs, i))

    def fit(job):
        hidden, X_ones, y, epochs, i = job
        return _hand_fit(_net(hidden, key, 1, seed=i), X_ones, y, epochs)

    want = [fit(job) for job in jobs]
    got, counts = run_in_lockstep([lambda job=job: fit(job) for job in jobs])
    for (losses_w, theta_w), (losses_g, theta_g) in zip(want, got):
        assert losses_g == losses_w
        np.testing.assert_array_equal(theta_g, theta_w)
    assert counts["stacked_epochs"] + counts["single_epochs"] == 4 + 2 + 3 + 3 + 1
    assert counts["stacked_epochs"] >= 3 + 2  # two relu + two tanh fits shared the first epoch


def test_lockstep_engine_fits_match_separate_fits():
    """Whole NetClassifier fits (shuffling, stopping rule, health probe) in lockstep give
    the loss curves, weights and health of separate fits."""
    from workbench.nets.engine import NetClassifier
    from workbench.nets.stacked import run_in_lockstep

    X, y = _data("binary")

    def fit(i):
        rows = np.random.default_rng(i).permutation(ROWS)[:100]
        return NetClassifier((6,), "tanh", batch_size=BATCH, max_iter=8, random_state=i,
                             learning_rate_init=0.01).fit(X[rows], y.ravel()[rows])

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        want = [fit(i) for i in range(3)]
        got, _ = run_in_lockstep([lambda i=i: fit(i) for i in range(3)])
    for a, b in zip(want, got):
        assert b.loss_curve_ == a.loss_curve_
        assert b.history_["grad_norm"] == a.history_["grad_norm"]
        for u, v in zip(a.coefs_, b.coefs_):
            np.testing.assert_array_equal(u, v)


def test_lockstep_raises_a_members_error_after_all_end():
    from workbench.nets.stacked import run_in_lockstep

    X, y = _data("binary")
    key = ("classification", "logistic")
    done = []

    def good():
        done.append(_hand_fit(_net("relu", key, 1), with_ones(X), y, 3))

    def bad():
        _hand_fit(_net("relu", key, 1), with_ones(X), y, 1)
        raise RuntimeError("member failed")

    with pytest.raises(RuntimeError, match="member failed"):
        run_in_lockstep([good, bad])
    assert len(done) == 1 and len(done[0][0]) == 3


@pytest.mark.parametrize("key", ALL_HEADS, ids=lambda k: f"{k[0]}-{k[1]}")
def test_data_gradient_is_backwards_gradient_without_the_loss(key):
    """Network.data_gradient leaves in net.grad exactly what backward(alpha=0) leaves."""
    X, y = _target_for(key)
    a, b = (_net("gelu", key, y.shape[1]) for _ in range(2))
    for net in (a, b):
        net.ensure(ROWS)
    a.backward(with_ones(X), y, ROWS, 0.0)
    b.data_gradient(with_ones(X), y, ROWS)
    np.testing.assert_array_equal(b.grad, a.grad)
    assert np.any(b.grad != 0)
