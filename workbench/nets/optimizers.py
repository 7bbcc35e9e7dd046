"""Stochastic optimisers: Adam and SGD with momentum, each an object with ``update``.

The split follows scikit-learn's MLP (an optimiser object per fit, updated once
per batch, told when an epoch ends and asked whether to stop), written here for
the engine's flat parameter vector: ``update(params, grad, rows)`` changes
``params`` in place, given ``grad``, the gradient summed over a batch of ``rows``
rows (the mean gradient times ``rows``). Folding the division by ``rows`` into
the step saves a pass over the gradient; ``rows=1`` takes a plain gradient.

References
----------
- Kingma & Ba (2015), "Adam: a method for stochastic optimization", ICLR,
  Algorithm 1 and the more efficient order of computation given after it
  (section 2): ``alpha_t = alpha * sqrt(1 - beta_2^t) / (1 - beta_1^t)`` and
  ``theta_t = theta_{t-1} - alpha_t * m_t / (sqrt(v_t) + eps_hat)``, the form
  scikit-learn's MLP uses.
- Sutskever, Martens, Dahl & Hinton (2013), "On the importance of initialization
  and momentum in deep learning", ICML, eq. 1-2 (classical momentum) and eq. 3-4
  (Nesterov's accelerated gradient); the Nesterov step is taken in the
  re-parametrised form of Bengio, Boulanger-Lewandowski & Pascanu (2013),
  "Advances in optimizing recurrent networks", eq. 7, which tracks the look-ahead
  point ``theta + mu * v`` (as scikit-learn's MLP does).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["AdamOptimizer", "SGDOptimizer"]


class AdamOptimizer:
    """Adam with bias correction (Kingma & Ba 2015).

    Parameters
    ----------
    size : int
        Number of parameters.
    dtype : numpy dtype
    learning_rate_init : float
        ``alpha``.
    beta_1, beta_2 : float
        Decay rates of the first and second moment estimates.
    epsilon : float
        ``eps_hat`` of the efficient form (added to ``sqrt(v_t)``).
    """

    def __init__(self, size, dtype, learning_rate_init=0.001, beta_1=0.9, beta_2=0.999,
                 epsilon=1e-8):
        self.learning_rate_init = float(learning_rate_init)
        self.learning_rate = self.learning_rate_init
        self.beta_1, self.beta_2, self.epsilon = beta_1, beta_2, epsilon
        self.t = 0
        # both moments in one (2, size) array, and beside it the weighted gradient and
        # its square: each moment update is then one operation on both rows
        self._moments = np.zeros((2, size), dtype=dtype)
        self.first_moment, self.second_moment = self._moments
        self._increments = np.empty((2, size), dtype=dtype)
        self._grad_part, self._square_part = self._increments
        self._betas = np.array([[beta_1], [beta_2]], dtype=dtype)
        self._rows = None
        self._weights = (0.0, 0.0)
        self._work = np.empty(size, dtype=dtype)

    def update(self, params, grad, rows=1):
        """One Adam step on ``params`` (in place) for ``grad`` summed over ``rows`` rows."""
        b1, b2 = self.beta_1, self.beta_2
        if rows != self._rows:
            # g = grad / rows, folded into the weights of the moment updates
            self._weights = ((1 - b1) / rows, (1 - b2) / (rows * rows))
            self._rows = rows
        self.t = t = self.t + 1
        # m_t = beta_1 m_{t-1} + (1 - beta_1) g_t and v_t = beta_2 v_{t-1} + (1 - beta_2) g_t^2
        weight_grad, weight_square = self._weights
        np.multiply(grad, weight_grad, out=self._grad_part)
        square = np.multiply(grad, grad, out=self._square_part)
        square *= weight_square
        moments = self._moments
        moments *= self._betas
        moments += self._increments
        # theta_t = theta_{t-1} - alpha_t m_t / (sqrt(v_t) + eps_hat)
        self.learning_rate = lr = (self.learning_rate_init * math.sqrt(1 - b2 ** t)
                                   / (1 - b1 ** t))
        work = self._work
        np.sqrt(self.second_moment, out=work)
        work += self.epsilon
        np.divide(self.first_moment, work, out=work)
        work *= -lr
        params += work

    def iteration_ends(self, time_step):
        """Called after each epoch with the number of rows seen; Adam has no schedule."""

    def trigger_stopping(self) -> bool:
        """Training stops when it no longer improves (Adam has no rate to lower)."""
        return True


class SGDOptimizer:
    """Stochastic gradient descent with momentum, optionally Nesterov's (Sutskever et al. 2013).

    Parameters
    ----------
    size : int
    dtype : numpy dtype
    learning_rate_init : float
    lr_schedule : {"constant", "invscaling", "adaptive"}
        ``invscaling``: after each epoch the rate becomes
        ``learning_rate_init / (t + 1) ** power_t`` with ``t`` the rows seen so far;
        ``adaptive``: when training stops improving, the rate is divided by 5
        instead of stopping, until it is 1e-6 or less (scikit-learn's schedules).
    momentum : float
        ``mu``.
    nesterov : bool
    power_t : float
    """

    def __init__(self, size, dtype, learning_rate_init=0.1, lr_schedule="constant",
                 momentum=0.9, nesterov=True, power_t=0.5):
        self.learning_rate_init = float(learning_rate_init)
        self.learning_rate = self.learning_rate_init
        self.lr_schedule = lr_schedule
        self.momentum = momentum
        self.nesterov = nesterov
        self.power_t = power_t
        self.velocity = np.zeros(size, dtype=dtype)
        self._work = np.empty(size, dtype=dtype)

    def update(self, params, grad, rows=1):
        """One step on ``params`` (in place) for ``grad`` summed over ``rows`` rows.

        ``grad`` is divided by ``rows`` in place (it is the network's scratch).
        """
        if rows != 1:
            grad /= rows
        lr, mu, v, work = self.learning_rate, self.momentum, self.velocity, self._work
        # v_{t+1} = mu v_t - lr g
        v *= mu
        np.multiply(grad, lr, out=work)
        v -= work
        if self.nesterov:
            # the look-ahead point moves by mu v_{t+1} - lr g
            np.multiply(v, mu, out=work)
            work -= grad * lr
            params += work
        else:
            params += v

    def iteration_ends(self, time_step):
        """After each epoch: the inverse-scaling schedule, given the rows seen so far."""
        if self.lr_schedule == "invscaling":
            self.learning_rate = self.learning_rate_init / (time_step + 1) ** self.power_t

    def trigger_stopping(self) -> bool:
        """Training stopped improving: stop (True), or lower the adaptive rate and go on."""
        if self.lr_schedule != "adaptive" or self.learning_rate <= 1e-6:
            return True
        self.learning_rate /= 5.0
        return False
