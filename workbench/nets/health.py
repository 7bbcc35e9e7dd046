"""Layer health: dead units, saturated units and gradient norms of each hidden layer.

Measured on a probe of rows (the engine uses the validation rows when it has
them, at most :data:`PROBE_ROWS`, else the first training rows):

- a unit is *dead* when its activation's derivative is zero on every probe row
  (Lu, Shin, Su & Karniadakis 2019, "Dying ReLU and initialization");
- a unit is *saturated* when its derivative is below :data:`SATURATION_THRESHOLD`
  on more than half of the probe rows and it is not dead (Glorot & Bengio 2010,
  section 3, on saturated sigmoid and tanh units). Only activations whose registry
  entry says they saturate (:attr:`workbench.nets.activations.Activation.saturates`)
  are measured; the others report 0;
- the gradient norm of a layer is the L2 norm of the data loss's gradient with
  respect to its weights (no L2 term), as the backward pass computes it.

The derivative is the registry's, the same function training uses.
"""

from __future__ import annotations

import numpy as np

from workbench.nets import activations as act
from workbench.nets.network import LOCKSTEP, Network, with_ones

#: a derivative below this counts as "flat" when measuring saturation (the value the
#: engine's specification, issue 2, sets)
SATURATION_THRESHOLD = 0.05
#: at most this many rows are used to measure layer health (the standard error of a
#: share measured on 256 rows is at most sqrt(0.25 / 256) = 0.031)
PROBE_ROWS = 256

__all__ = ["SATURATION_THRESHOLD", "PROBE_ROWS", "measure", "network_health"]


def measure(net: Network, X_ones, y):
    """Per hidden layer: dead share, saturated share; per layer: data-loss gradient norm.

    Parameters
    ----------
    net : Network
    X_ones : ndarray (n_rows, n_features + 1)
        Probe rows with a trailing column of ones.
    y : ndarray (n_rows, n_outputs)

    Returns
    -------
    dead, saturated : list of float
        One share per hidden layer.
    grad_norm : list of float
        One norm per layer, the output layer included.

    Overwrites ``net.grad`` (training recomputes it on the next batch).

    Inside :func:`workbench.nets.stacked.run_in_lockstep`, when the fit announced the
    probe with its epoch (``Network.train_epoch(..., probe=)``), the health of every
    network of the stack was measured there at once, with the same arithmetic on each
    network's slice (``NetworkStack.measure_health``); it is handed out for the same
    rows, targets and parameters.
    """
    group = getattr(LOCKSTEP, "group", None)
    if group is not None:
        hit = group.measured(net, X_ones, y)
        if hit is not None:
            return hit
    rows = X_ones.shape[0]
    net.data_gradient(X_ones, y, rows)
    grad_norm = [float(np.linalg.norm(g)) for g in net.weight_grads]
    dead, saturated = [], []
    tiny = np.finfo(net.dtype).tiny * 1e6
    for layer, buf in zip(net.layers, net.buffers(rows)):
        activation = layer.activation
        if activation is None:
            break
        pre = None if buf.pre is None else buf.pre[:, :-1]
        slope = np.abs(activation.derivative(pre, buf.output, **layer.params))
        dead_units = np.all(slope <= tiny, axis=0)
        dead.append(float(dead_units.mean()))
        if activation.saturates:
            flat = (slope < SATURATION_THRESHOLD).mean(axis=0) > 0.5
            saturated.append(float((flat & ~dead_units).mean()))
        else:
            saturated.append(0.0)
    return dead, saturated, grad_norm


def network_health(coefs, intercepts, hidden, head, task, X, Y, *, leaky_slope=act.LEAKY_SLOPE):
    """Dead share, saturated share and data-loss gradient norm of every hidden layer.

    The engine's own definitions (see the module docstring), for any fitted
    multilayer perceptron given as weight and intercept lists, e.g. a scikit-learn
    ``MLPRegressor``/``MLPClassifier`` after training.

    Parameters
    ----------
    coefs, intercepts : list of ndarray
    hidden : str or sequence of str
        Hidden activation(s): one name for every layer or one per hidden layer.
    head : str
        Output head name; ``task`` is "regression" or "classification".
    X : ndarray (n_samples, n_features)
        Probe rows as the network sees them (after preprocessing); the first
        :data:`PROBE_ROWS` are used.
    Y : ndarray (n_samples, n_outputs)
        Targets as the network sees them (scaled target; one-hot / 0-1 labels).

    Returns
    -------
    dict with lists ``dead``, ``saturated`` and ``grad_norm``.
    """
    units = [coefs[0].shape[0]] + [c.shape[1] for c in coefs]
    names = act.resolve_hidden_layers(hidden, len(units) - 2)
    dtype = np.dtype(np.float64)
    net = Network(units, names, act.resolve_head(head, task), dtype, float(leaky_slope))
    for w, c in zip(net.weights, coefs):
        w[...] = c
    for b, c in zip(net.intercepts, intercepts):
        b[...] = c
    k = min(PROBE_ROWS, len(X))
    X_probe = with_ones(np.asarray(X, dtype=dtype)[:k])
    Y_probe = np.asarray(Y, dtype=dtype)[:k]
    if Y_probe.ndim == 1:
        Y_probe = Y_probe.reshape(-1, 1)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
        dead, saturated, grad_norm = measure(net, X_probe, Y_probe)
    return {"dead": dead, "saturated": saturated, "grad_norm": grad_norm}
