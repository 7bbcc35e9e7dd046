"""The optimisers alone: each ``update`` step against the papers' update rules written
out here, and against scikit-learn's own optimiser objects.

Sources: Kingma & Ba (2015), "Adam: a method for stochastic optimization", Algorithm 1
and the efficient order of computation of section 2; Sutskever, Martens, Dahl & Hinton
(2013), "On the importance of initialization and momentum in deep learning", eq. 1-2
(classical momentum) and eq. 3-4 (Nesterov's accelerated gradient);
``sklearn.neural_network._stochastic_optimizers`` (AdamOptimizer, SGDOptimizer), the
optimisers of scikit-learn's MLP.
"""

from __future__ import annotations

import numpy as np
import pytest

from workbench.nets.optimizers import AdamOptimizer, SGDOptimizer

SIZE = 7
_A = np.random.default_rng(0).normal(size=(SIZE, SIZE))
_A = _A @ _A.T / SIZE + np.eye(SIZE)  # positive definite
_B = np.random.default_rng(1).normal(size=SIZE)


def _grad(theta):
    """Gradient of the quadratic 0.5 theta' A theta - b' theta (a deterministic objective)."""
    return _A @ theta - _B


def _theta0():
    return np.random.default_rng(2).normal(size=SIZE)


def _run(optimizer, steps, rows=1):
    """Apply ``steps`` updates, each with the gradient summed over ``rows`` equal rows."""
    theta = _theta0()
    for _ in range(steps):
        optimizer.update(theta, _grad(theta) * rows, rows)
    return theta


# --------------------------------------------------------------------------- Adam


def _adam_algorithm_1(steps, alpha, beta_1, beta_2, eps):
    """Kingma & Ba (2015), Algorithm 1, line by line."""
    theta = _theta0()
    m = np.zeros(SIZE)
    v = np.zeros(SIZE)
    for t in range(1, steps + 1):
        g = _grad(theta)
        m = beta_1 * m + (1 - beta_1) * g
        v = beta_2 * v + (1 - beta_2) * g ** 2
        m_hat = m / (1 - beta_1 ** t)
        v_hat = v / (1 - beta_2 ** t)
        theta = theta - alpha * m_hat / (np.sqrt(v_hat) + eps)
    return theta


def _adam_efficient(steps, alpha, beta_1, beta_2, eps_hat):
    """Kingma & Ba (2015), section 2, the last three lines of the loop reordered:
    alpha_t = alpha sqrt(1 - beta_2^t) / (1 - beta_1^t), theta -= alpha_t m / (sqrt(v) + eps_hat)."""
    theta = _theta0()
    m = np.zeros(SIZE)
    v = np.zeros(SIZE)
    for t in range(1, steps + 1):
        g = _grad(theta)
        m = beta_1 * m + (1 - beta_1) * g
        v = beta_2 * v + (1 - beta_2) * g ** 2
        alpha_t = alpha * np.sqrt(1 - beta_2 ** t) / (1 - beta_1 ** t)
        theta = theta - alpha_t * m / (np.sqrt(v) + eps_hat)
    return theta


@pytest.mark.parametrize("rows", [1, 8])
@pytest.mark.parametrize("steps", [1, 25])
def test_adam_is_algorithm_1(steps, rows):
    """With eps = 0 the two orders of computation are the same arithmetic up to rounding:
    one step and 25 steps, with a plain gradient and with a batch sum of 8 rows."""
    opt = AdamOptimizer(SIZE, np.float64, learning_rate_init=0.05, beta_1=0.8, beta_2=0.99,
                        epsilon=0.0)
    ref = _adam_algorithm_1(steps, 0.05, 0.8, 0.99, 0.0)
    np.testing.assert_allclose(_run(opt, steps, rows), ref, rtol=1e-12, atol=1e-14)
    assert opt.t == steps


@pytest.mark.parametrize("steps", [1, 25])
def test_adam_places_epsilon_as_the_efficient_form(steps):
    """With a visible epsilon (0.1) the step is the efficient form's (eps_hat added to
    sqrt(v_t), as scikit-learn does), which differs from Algorithm 1's placement."""
    opt = AdamOptimizer(SIZE, np.float64, learning_rate_init=0.05, epsilon=0.1)
    got = _run(opt, steps)
    np.testing.assert_allclose(got, _adam_efficient(steps, 0.05, 0.9, 0.999, 0.1),
                               rtol=1e-12, atol=1e-14)
    assert not np.allclose(got, _adam_algorithm_1(steps, 0.05, 0.9, 0.999, 0.1), rtol=1e-6)


def test_adam_first_step_moves_every_parameter_by_alpha():
    """Kingma & Ba (2015), section 2.1: at t = 1 (eps = 0) the effective step is
    alpha * g / |g|, so every coordinate moves by exactly alpha."""
    opt = AdamOptimizer(SIZE, np.float64, learning_rate_init=0.01, epsilon=0.0)
    theta = _theta0()
    before = theta.copy()
    opt.update(theta, _grad(theta))
    np.testing.assert_allclose(np.abs(theta - before), 0.01, rtol=1e-12)


def test_adam_keeps_float32():
    opt = AdamOptimizer(SIZE, np.float32, learning_rate_init=0.01)
    theta = _theta0().astype(np.float32)
    opt.update(theta, _grad(theta).astype(np.float32), 3)
    assert theta.dtype == opt.first_moment.dtype == opt.second_moment.dtype == np.float32


# --------------------------------------------------------------------------- SGD


def _classical_momentum(steps, lr, mu):
    """Sutskever et al. (2013), eq. 1-2: v = mu v - lr grad(theta); theta = theta + v."""
    theta, v = _theta0(), np.zeros(SIZE)
    for _ in range(steps):
        v = mu * v - lr * _grad(theta)
        theta = theta + v
    return theta


def _nesterov(steps, lr, mu):
    """Sutskever et al. (2013), eq. 3-4: v = mu v - lr grad(theta + mu v); theta = theta + v.

    Returns the look-ahead point theta + mu v, the point the re-parametrised form tracks
    (Bengio, Boulanger-Lewandowski & Pascanu 2013, eq. 7).
    """
    theta, v = _theta0(), np.zeros(SIZE)
    for _ in range(steps):
        v = mu * v - lr * _grad(theta + mu * v)
        theta = theta + v
    return theta + mu * v


@pytest.mark.parametrize("rows", [1, 5])
@pytest.mark.parametrize("steps", [1, 30])
def test_sgd_classical_momentum(steps, rows):
    opt = SGDOptimizer(SIZE, np.float64, learning_rate_init=0.05, momentum=0.9, nesterov=False)
    np.testing.assert_allclose(_run(opt, steps, rows), _classical_momentum(steps, 0.05, 0.9),
                               rtol=1e-12, atol=1e-14)


@pytest.mark.parametrize("rows", [1, 5])
@pytest.mark.parametrize("steps", [1, 30])
def test_sgd_nesterov_momentum(steps, rows):
    opt = SGDOptimizer(SIZE, np.float64, learning_rate_init=0.05, momentum=0.9, nesterov=True)
    np.testing.assert_allclose(_run(opt, steps, rows), _nesterov(steps, 0.05, 0.9),
                               rtol=1e-12, atol=1e-14)


def test_sgd_without_momentum_is_gradient_descent():
    """mu = 0: theta = theta - lr grad(theta), with or without Nesterov."""
    for nesterov in (False, True):
        opt = SGDOptimizer(SIZE, np.float64, learning_rate_init=0.1, momentum=0.0,
                           nesterov=nesterov)
        theta = _theta0()
        expected = theta - 0.1 * _grad(theta)
        opt.update(theta, _grad(theta))
        np.testing.assert_allclose(theta, expected, rtol=1e-15)


def test_schedules():
    """scikit-learn's schedules: invscaling lr0 / (t + 1)^power_t after each epoch (t = rows
    seen); adaptive divides by 5 when training stops improving, until lr <= 1e-6."""
    inv = SGDOptimizer(SIZE, np.float64, learning_rate_init=0.2, lr_schedule="invscaling",
                       power_t=0.25)
    inv.iteration_ends(99)
    assert inv.learning_rate == pytest.approx(0.2 / 100 ** 0.25, rel=1e-15)
    assert inv.trigger_stopping()
    ada = SGDOptimizer(SIZE, np.float64, learning_rate_init=1e-5, lr_schedule="adaptive")
    ada.iteration_ends(99)
    assert ada.learning_rate == 1e-5
    assert not ada.trigger_stopping() and ada.learning_rate == pytest.approx(2e-6)
    assert not ada.trigger_stopping() and ada.learning_rate == pytest.approx(4e-7)
    assert ada.trigger_stopping()
    assert AdamOptimizer(SIZE, np.float64).trigger_stopping()


# --------------------------------------------------------------------------- scikit-learn


def _sklearn_steps(ref, steps, split):
    """scikit-learn's optimiser on the same parameters, split into two arrays as its MLP
    splits them into layers."""
    theta = _theta0()
    params = [theta[:split], theta[split:]]  # views: updates land in theta
    for _ in range(steps):
        g = _grad(theta)
        ref.update_params(params, [g[:split], g[split:]])
    return theta


@pytest.mark.parametrize("nesterov", [False, True])
def test_sgd_matches_sklearns_sgd_optimizer(nesterov):
    from sklearn.neural_network._stochastic_optimizers import SGDOptimizer as Reference

    theta = _theta0()
    ref = Reference([theta[:3], theta[3:]], learning_rate_init=0.05, lr_schedule="constant",
                    momentum=0.8, nesterov=nesterov)
    expected = _sklearn_steps(ref, 20, 3)
    opt = SGDOptimizer(SIZE, np.float64, learning_rate_init=0.05, momentum=0.8, nesterov=nesterov)
    np.testing.assert_allclose(_run(opt, 20), expected, rtol=1e-13, atol=1e-15)


def test_adam_matches_sklearns_adam_optimizer():
    from sklearn.neural_network._stochastic_optimizers import AdamOptimizer as Reference

    theta = _theta0()
    ref = Reference([theta[:3], theta[3:]], learning_rate_init=0.05, beta_1=0.85,
                    beta_2=0.995, epsilon=1e-3)
    expected = _sklearn_steps(ref, 20, 3)
    opt = AdamOptimizer(SIZE, np.float64, learning_rate_init=0.05, beta_1=0.85, beta_2=0.995,
                        epsilon=1e-3)
    np.testing.assert_allclose(_run(opt, 20), expected, rtol=1e-13, atol=1e-15)
    assert opt.learning_rate == pytest.approx(ref.learning_rate, rel=1e-15)
