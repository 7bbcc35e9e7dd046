"""The losses matched with the heads: values against scikit-learn's metrics, gradients
against central finite differences, and the output delta each head hands to the
backward pass.

Sources, per test: ``sklearn.metrics.mean_squared_error``, ``mean_poisson_deviance``
and ``log_loss``; McCullagh & Nelder (1989), "Generalized Linear Models", section
2.2.4 (with the canonical link the derivative at the linear predictor is p - y);
central finite differences in float64.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import log_loss, mean_poisson_deviance, mean_squared_error

from workbench.nets import activations as act
from workbench.nets import losses

H = 1e-6


def _rng():
    return np.random.default_rng(42)


def _pairs(loss, rows=20, outputs=1):
    """Targets and predictions of the kind each loss meets (probabilities inside (0, 1))."""
    rng = _rng()
    if loss is losses.SQUARED_ERROR:
        return rng.normal(size=(rows, outputs)), rng.normal(size=(rows, outputs))
    if loss is losses.POISSON:
        return (rng.poisson(2.0, size=(rows, outputs)).astype(float),
                rng.uniform(0.3, 4.0, size=(rows, outputs)))
    if loss is losses.BINARY_LOG_LOSS:
        return (rng.integers(0, 2, size=(rows, outputs)).astype(float),
                rng.uniform(0.05, 0.95, size=(rows, outputs)))
    labels = np.arange(rows) % outputs
    p = rng.uniform(0.1, 1.0, size=(rows, outputs))
    return np.eye(outputs)[labels], p / p.sum(axis=1, keepdims=True)


@pytest.mark.parametrize("outputs", [1, 3])
def test_half_squared_error_is_sklearns_mean_squared_error_halved(outputs):
    """sklearn.metrics.mean_squared_error averages over rows and outputs, as the MLP does."""
    y, p = _pairs(losses.SQUARED_ERROR, outputs=outputs)
    assert losses.SQUARED_ERROR.value(y, p) == pytest.approx(mean_squared_error(y, p) / 2,
                                                             rel=1e-13)


@pytest.mark.parametrize("outputs", [1, 2])
def test_half_poisson_deviance_is_sklearns_halved(outputs):
    """sklearn.metrics.mean_poisson_deviance / 2 per output, summed over outputs."""
    y, p = _pairs(losses.POISSON, outputs=outputs)
    ref = sum(mean_poisson_deviance(y[:, k], p[:, k]) / 2 for k in range(outputs))
    assert losses.POISSON.value(y, p) == pytest.approx(ref, rel=1e-13)


@pytest.mark.parametrize("outputs", [1, 3])
def test_binary_log_loss_is_sklearns_log_loss_per_label(outputs):
    """One probability per label (logistic head, binary or multilabel): sklearn.metrics.log_loss
    of each label, summed over labels."""
    y, p = _pairs(losses.BINARY_LOG_LOSS, outputs=outputs)
    ref = sum(log_loss(y[:, k], p[:, k], labels=[0, 1]) for k in range(outputs))
    assert losses.BINARY_LOG_LOSS.value(y, p) == pytest.approx(ref, rel=1e-13)


def test_multinomial_log_loss_is_sklearns_log_loss():
    y, p = _pairs(losses.LOG_LOSS, outputs=4)
    ref = log_loss(y.argmax(axis=1), p, labels=[0, 1, 2, 3])
    assert losses.LOG_LOSS.value(y, p) == pytest.approx(ref, rel=1e-13)


@pytest.mark.parametrize("loss", [losses.BINARY_LOG_LOSS, losses.LOG_LOSS])
def test_log_losses_clip_as_sklearns_mlp(loss):
    """A probability of exactly 0 for the true class costs -log(eps), eps of the float type
    (sklearn.neural_network's log-loss clips to [eps, 1 - eps]); finite, not inf."""
    for dtype in (np.float32, np.float64):
        y = np.array([[1.0, 0.0]], dtype=dtype)
        p = np.array([[0.0, 1.0]], dtype=dtype)
        if loss is losses.BINARY_LOG_LOSS:
            y, p = y[:, :1], p[:, :1]
        eps = np.finfo(dtype).eps
        assert loss.value(y, p) == pytest.approx(-np.log(eps), rel=1e-6)


@pytest.mark.parametrize("loss", losses.ALL, ids=lambda loss: loss.value.__name__)
def test_a_given_residual_gives_the_same_value(loss):
    """The backward pass hands its residual p - y to the loss; the value must not change."""
    y, p = _pairs(loss, outputs=2)
    assert loss.value(y, p, p - y) == pytest.approx(loss.value(y, p), rel=1e-14)


@pytest.mark.parametrize("loss", losses.ALL, ids=lambda loss: loss.value.__name__)
def test_gradient_is_the_per_row_derivative(loss):
    """gradient(y, p) = n_rows * d value / d p, by central finite differences; for several
    outputs of the squared error n_rows * n_outputs times (scikit-learn backpropagates the
    sum over outputs but reports the mean)."""
    outputs = 3
    y, p = _pairs(loss, rows=6, outputs=outputs)
    grad = loss.gradient(y, p)
    fd = np.empty_like(p)
    for idx in np.ndindex(p.shape):
        up, down = p.copy(), p.copy()
        up[idx] += H
        down[idx] -= H
        fd[idx] = (loss.value(y, up) - loss.value(y, down)) / (2 * H)
    factor = p.shape[0] * (outputs if loss is losses.SQUARED_ERROR else 1)
    np.testing.assert_allclose(grad, factor * fd, rtol=1e-6, atol=1e-8)
    buf = np.full_like(p, np.nan)
    assert loss.gradient(y, p, out=buf) is buf
    np.testing.assert_array_equal(buf, grad)


@pytest.mark.parametrize("key", list(act.HEADS), ids=lambda k: f"{k[0]}-{k[1]}")
def test_output_delta_is_the_loss_derivative_at_the_pre_activation(key):
    """Head.output_delta = d(row loss)/dz through the head, by central finite differences of
    the matched loss's value on each row (p - y for the canonical links, McCullagh &
    Nelder 1989; the loss gradient times the head's derivative otherwise)."""
    head = act.HEADS[key]
    rng = _rng()
    outputs = 3 if head.distribution else 1
    z = rng.normal(scale=1.5, size=(8, outputs))
    z[np.abs(z) < 1e-3] = 0.5  # away from the relu head's kink
    y, _ = _pairs(head.loss_fn, rows=8, outputs=outputs)
    if head.high == 1.0 and head.task == "regression":
        y = rng.uniform(0.05, 0.95, size=y.shape)
    elif head.low == 0.0 and head.task == "regression":
        y = np.abs(y)

    def row_loss(i, zi):
        return head.loss_fn.value(y[i:i + 1], head.apply_(zi.copy().reshape(1, -1)))

    fd = np.empty_like(z)
    for i, k in np.ndindex(z.shape):
        up, down = z[i].copy(), z[i].copy()
        up[k] += H
        down[k] -= H
        fd[i, k] = (row_loss(i, up) - row_loss(i, down)) / (2 * H)
    p = head.apply_(z.copy())
    delta = np.empty_like(z)
    head.output_delta(y, p, z.copy(), delta)
    np.testing.assert_allclose(delta, fd, rtol=1e-6, atol=1e-8)
    if head.canonical:
        np.testing.assert_allclose(delta, p - y, rtol=1e-15)


def test_each_head_names_its_loss_and_label():
    """Loss names are what documents store; labels what tooltips show."""
    for head in act.HEADS.values():
        assert head.loss == head.loss_fn.name
        assert act.LOSS_LABELS[head.loss] == head.loss_fn.label
        assert head.loss_fn.label in head.tooltip
