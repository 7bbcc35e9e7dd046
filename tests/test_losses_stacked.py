"""Each loss's value for a stack of networks (``Loss.stacked_value``, used by
:mod:`workbench.nets.stacked`) is the single call's value of each network, bit for bit,
and the loss formula scikit-learn's metrics define.

Sources: the single call ``Loss.value`` on each network's block (compared with ``==``,
not approximately, on float32 and float64 and shapes around NumPy's summation blocks:
pairwise sums of 8 and 128 values, buffers of 8,192); ``sklearn.metrics.log_loss``,
``mean_squared_error`` and ``mean_poisson_deviance`` for the values themselves.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import log_loss, mean_poisson_deviance, mean_squared_error

from workbench.nets import losses

SHAPES = [(1, 1, 1), (2, 7, 1), (3, 9, 2), (5, 200, 1), (4, 129, 3), (5, 500, 1),
          (3, 2000, 1), (2, 1999, 4), (2, 8193, 1), (2, 10_000, 3)]


def _stack(loss, k, n, c, dtype, seed=0):
    """Targets and predictions of the kind each loss meets, ``(k, n, c)`` in ``dtype``."""
    rng = np.random.default_rng(seed)
    if loss is losses.SQUARED_ERROR:
        y, p = rng.normal(size=(k, n, c)), rng.normal(size=(k, n, c)) * 3
    elif loss is losses.POISSON:
        y, p = rng.poisson(2.0, size=(k, n, c)).astype(float), rng.uniform(0.1, 5, (k, n, c))
    elif loss is losses.BINARY_LOG_LOSS:
        y = rng.integers(0, 2, size=(k, n, c)).astype(float)
        p = rng.uniform(0, 1, size=(k, n, c))
        p[..., 0][rng.random((k, n)) < 0.05] = 1.0  # clipped ends, as a saturated head gives
        p[..., 0][rng.random((k, n)) < 0.05] = 0.0
    else:
        y = np.eye(c)[rng.integers(0, c, size=(k, n))]
        p = rng.uniform(0, 1, size=(k, n, c))
        p /= p.sum(axis=-1, keepdims=True)
    return y.astype(dtype), p.astype(dtype)


ALL = [losses.SQUARED_ERROR, losses.POISSON, losses.BINARY_LOG_LOSS, losses.LOG_LOSS]


@pytest.mark.parametrize("loss", ALL, ids=lambda f: f.value.__name__)
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_stacked_value_is_each_networks_single_value_bit_for_bit(loss, dtype):
    for shape in SHAPES:
        if loss is losses.LOG_LOSS and shape[2] == 1:
            shape = (*shape[:2], 2)  # a distribution needs two columns at least
        Y, P = _stack(loss, *shape, dtype, seed=sum(shape))
        got = loss.stacked_value(Y, P)
        want = [loss.value(Y[j], P[j]) for j in range(shape[0])]
        assert isinstance(got, list) and all(type(v) is float for v in got)
        assert got == want, (shape, dtype)
        # the stack's epoch predictions are a slice of a longer buffer (not contiguous)
        buffer = np.zeros((shape[0], shape[1] + 5, shape[2]), dtype=dtype)
        buffer[:, :shape[1]] = P
        assert loss.stacked_value(Y, buffer[:, :shape[1]]) == want, (shape, dtype)


@pytest.mark.parametrize("loss", ALL, ids=lambda f: f.value.__name__)
def test_stacked_value_keeps_each_network_to_its_own_block(loss):
    """Wiring: changing one network's rows changes its value alone."""
    Y, P = _stack(loss, 4, 50, 2, np.float64, seed=3)
    before = loss.stacked_value(Y, P)
    P2 = P.copy()
    P2[2] = P[1]  # network 2 gets network 1's predictions
    after = loss.stacked_value(Y, P2)
    assert after[:2] == before[:2] and after[3] == before[3]
    assert after[2] == loss.value(Y[2], P[1]) != before[2]


def test_stacked_values_are_sklearns_metrics():
    """The formulas: sklearn.metrics.mean_squared_error / 2, mean_poisson_deviance / 2,
    log_loss per label (logistic head) and log_loss (softmax head), network by network."""
    k, n = 3, 300
    Y, P = _stack(losses.SQUARED_ERROR, k, n, 2, np.float64)
    for j, v in enumerate(losses.SQUARED_ERROR.stacked_value(Y, P)):
        assert v == pytest.approx(mean_squared_error(Y[j], P[j]) / 2, rel=1e-12)
    Y, P = _stack(losses.POISSON, k, n, 1, np.float64)
    for j, v in enumerate(losses.POISSON.stacked_value(Y, P)):
        assert v == pytest.approx(mean_poisson_deviance(Y[j, :, 0], P[j, :, 0]) / 2, rel=1e-12)
    Y, P = _stack(losses.BINARY_LOG_LOSS, k, n, 2, np.float64)
    P = np.clip(P, 0.01, 0.99)
    for j, v in enumerate(losses.BINARY_LOG_LOSS.stacked_value(Y, P)):
        ref = sum(log_loss(Y[j, :, c], P[j, :, c], labels=[0, 1]) for c in range(2))
        assert v == pytest.approx(ref, rel=1e-12)
    Y, P = _stack(losses.LOG_LOSS, k, n, 4, np.float64)
    for j, v in enumerate(losses.LOG_LOSS.stacked_value(Y, P)):
        assert v == pytest.approx(log_loss(Y[j].argmax(axis=1), P[j], labels=[0, 1, 2, 3]),
                                  rel=1e-12)
