"""The losses the output heads are matched with: value and gradient of each.

Every loss is written as scikit-learn's multilayer perceptron defines it, so that
the engine's ``loss_curve_`` equals ``MLPRegressor``'s / ``MLPClassifier``'s:

- half squared error, the mean over rows *and* outputs of ``(y - p)^2 / 2``
  (``sklearn.metrics.mean_squared_error / 2``);
- half Poisson deviance, per output the mean over rows of
  ``y log(y / p) - y + p``, summed over outputs
  (``sklearn.metrics.mean_poisson_deviance / 2`` for one output);
- log-loss: for one probability per row and label (the logistic head) the binary
  cross-entropy summed over labels; for one distribution per row (the softmax
  head) the multinomial cross-entropy (``sklearn.metrics.log_loss``). Probabilities
  are clipped to ``[eps, 1 - eps]`` first (``eps`` of the array's float type), as
  scikit-learn's MLP does.

``stacked_value(Y, P)`` is ``value`` of each of ``K`` networks trained together
(:mod:`workbench.nets.stacked`): ``Y`` and ``P`` are ``(K, n_rows, n_outputs)``, and the
result, a list of ``K`` floats, is ``[value(Y[j], P[j]) for j in range(K)]`` to the last
bit. The element-wise work runs once on the whole stack (an element-wise operation acts
on each element alone, wherever it sits); the sums are those of the single call: the
squared error's dot product runs on each network's slice (BLAS sums in its own order),
and the means over rows of the Poisson deviance and the log-losses are one
``numpy.mean`` over the rows' axis of the stack, which sums each network's
``(n_rows, n_outputs)`` block as ``numpy.mean(..., axis=0)`` sums it alone (the same
inner loop over the same contiguous rows; ``tests/test_losses_stacked.py`` compares them
bit for bit on every loss, several shapes, float32 and float64).

``gradient(y, p, out=None)`` is the derivative of the *per-row* loss with respect
to the prediction ``p``, the quantity backpropagation starts from. For one
output it is ``n_rows`` times the derivative of ``value``; for several outputs of
the squared error it is ``n_outputs`` times that again, because scikit-learn's MLP
reports the squared error averaged over outputs but backpropagates the sum (its
gradient is ``p - y`` per output). The gradients are those of the unclipped
formulas.

When the head is the loss's canonical link (identity for squared error, exp for
Poisson, logistic / softmax for log-loss; McCullagh & Nelder 1989, section 2.2.4)
the chain rule collapses and the error at the output pre-activation is simply
``p - y``; the engine uses that shortcut (:meth:`workbench.nets.activations.Head.output_delta`).

References
----------
- McCullagh & Nelder (1989), "Generalized Linear Models", 2nd ed. (deviances, canonical links).
- scikit-learn, ``sklearn.neural_network.MLPRegressor`` / ``MLPClassifier`` (loss definitions).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy.special import xlogy


@dataclass(frozen=True)
class Loss:
    """One loss: its name, its label for people, its value and its gradient.

    Attributes
    ----------
    name : str
        The loss family as settings and documents spell it (``squared_error``,
        ``poisson``, ``log_loss``); the binary and multinomial log-losses share it.
    label : str
        The loss in words (tooltips, reports).
    value : callable
        ``value(y, p, residual=None) -> float``, the mean loss of the rows (see the
        module docstring). ``residual``, when given, is ``p - y`` already computed (the
        backward pass has it); a loss that depends on the residual alone uses it.
    gradient : callable
        ``gradient(y, p, out=None) -> ndarray``, the derivative of each row's loss
        with respect to ``p``, written into ``out`` when given.
    stacked_value : callable
        ``stacked_value(Y, P) -> list of float``: ``value`` of each network of a stack
        (see the module docstring).
    """

    name: str
    label: str
    value: Callable
    gradient: Callable
    stacked_value: Callable


def _half_squared_error(y, p, residual=None):
    if residual is None:
        residual = np.subtract(p, y)
    # the dot product is the fastest sum of squares on batch-sized arrays
    return 0.5 * float(np.vdot(residual, residual)) / residual.size


def _half_squared_error_stacked(Y, P):
    residual = np.subtract(P, Y)
    size = residual[0].size if residual.shape[0] else 0
    # the dot product of each network's own (contiguous) block, as the single call takes it
    return [0.5 * float(np.vdot(r, r)) / size for r in residual]


def _half_squared_error_gradient(y, p, out=None):
    return np.subtract(p, y, out=out)


def _half_poisson_deviance(y, p, residual=None):
    return float(np.mean(xlogy(y, y / p) - y + p, axis=0).sum())


def _half_poisson_deviance_stacked(Y, P):
    return _summed_means(xlogy(Y, Y / P) - Y + P, sign=1)


def _summed_means(terms, sign):
    """Per network of a stack ``(K, n_rows, n_outputs)``: the mean over rows of each output,
    summed over outputs, times ``sign`` -- ``float(sign * numpy.mean(t, axis=0).sum())`` of
    each network's block ``t``, from one mean over the rows' axis (see the module
    docstring)."""
    sums = np.mean(terms, axis=1).sum(axis=-1)
    return [float(v) for v in (-sums if sign < 0 else sums)]


def _half_poisson_deviance_gradient(y, p, out=None):
    # d/dp (y log(y / p) - y + p) = 1 - y / p
    out = np.divide(y, p, out=out)
    np.subtract(1.0, out, out=out)
    return out


def _clipped(p):
    """``p`` clipped to ``[eps, 1 - eps]`` (a new array): ``np.clip``'s values, in two
    ufunc calls without its Python wrapper."""
    eps = np.finfo(p.dtype).eps
    q = np.maximum(p, eps)
    return np.minimum(q, 1 - eps, out=q)


def _y_log(y, q):
    """``y * log(q)`` for clipped probabilities ``q``: ``xlogy(y, q)`` without its special
    case (``q >= eps`` keeps ``log q`` finite, so ``y = 0`` gives 0 either way), with
    NumPy's vectorised log -- an order of magnitude faster than ``scipy.special.xlogy``
    on an epoch's predictions."""
    out = np.log(q)
    out *= y
    return out


def _binary_log_terms(y, p):
    """``y log q + (1 - y) log(1 - q)`` element by element, ``q`` the clipped ``p``."""
    q = _clipped(p)
    terms = _y_log(y, q)
    np.subtract(1, q, out=q)
    terms += _y_log(1 - y, q)
    return terms


def _binary_log_loss(y, p, residual=None):
    return float(-np.mean(_binary_log_terms(y, p), axis=0).sum())


def _binary_log_loss_stacked(Y, P):
    return _summed_means(_binary_log_terms(Y, P), sign=-1)


def _binary_log_loss_gradient(y, p, out=None):
    # d/dp -(y log p + (1 - y) log(1 - p)) = (p - y) / (p (1 - p))
    out = np.subtract(p, y, out=out)
    out /= p
    out /= 1.0 - p
    return out


def _multinomial_log_loss(y, p, residual=None):
    return float(-np.mean(_y_log(y, _clipped(p)), axis=0).sum())


def _multinomial_log_loss_stacked(Y, P):
    return _summed_means(_y_log(Y, _clipped(P)), sign=-1)


def _multinomial_log_loss_gradient(y, p, out=None):
    # d/dp_k -sum_j y_j log p_j = -y_k / p_k
    out = np.divide(y, p, out=out)
    np.negative(out, out=out)
    return out


SQUARED_ERROR = Loss("squared_error", "half squared error", _half_squared_error,
                     _half_squared_error_gradient, _half_squared_error_stacked)
POISSON = Loss("poisson", "half Poisson deviance", _half_poisson_deviance,
               _half_poisson_deviance_gradient, _half_poisson_deviance_stacked)
BINARY_LOG_LOSS = Loss("log_loss", "log-loss (cross-entropy)", _binary_log_loss,
                       _binary_log_loss_gradient, _binary_log_loss_stacked)
LOG_LOSS = Loss("log_loss", "log-loss (cross-entropy)", _multinomial_log_loss,
                _multinomial_log_loss_gradient, _multinomial_log_loss_stacked)

#: every loss a head may be matched with
ALL = (SQUARED_ERROR, POISSON, BINARY_LOG_LOSS, LOG_LOSS)

#: loss name -> label, for documents and tooltips
LOSS_LABELS = {loss.name: loss.label for loss in ALL}
