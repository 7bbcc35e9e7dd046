"""The network engine: a NumPy multilayer perceptron for any hidden activation and head.

:class:`NetRegressor` and :class:`NetClassifier` are scikit-learn estimators. Where
their meaning overlaps with :class:`sklearn.neural_network.MLPRegressor` /
:class:`~sklearn.neural_network.MLPClassifier` they take the same parameters and
follow the same arithmetic (loss definitions, L2 penalty, Glorot initialisation,
Adam bias correction, SGD momentum, early stopping, batch order), so that with the
same ``random_state`` both produce the same ``loss_curve_``. Beyond scikit-learn they
accept every hidden activation of :mod:`workbench.nets.activations` (one for all layers
or one per layer), every output head with its matched loss, and record the health
of each hidden layer per epoch (dead units, saturated units, gradient norms).

How it is fast: all parameters live in one contiguous buffer (``coefs_`` and
``intercepts_`` are views into it), so the optimiser step is a handful of fused
vector operations; each epoch gathers the shuffled rows once into a contiguous
array, so every batch is a contiguous slice; forward and backward passes write
into preallocated buffers (``out=``); float32 throughout by default.

References
----------
- Glorot & Bengio (2010), "Understanding the difficulty of training deep
  feedforward neural networks" (uniform initialisation, bound sqrt(6 / (fan_in + fan_out))).
- He, Zhang, Ren & Sun (2015), "Delving deep into rectifiers" (bound sqrt(6 / fan_in)).
- Kingma & Ba (2015), "Adam: a method for stochastic optimization".
"""

from __future__ import annotations

import math
import numbers
import time
import warnings

import numpy as np
from scipy.special import xlogy
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.exceptions import ConvergenceWarning
from sklearn.metrics import accuracy_score, r2_score
from sklearn.model_selection import train_test_split
from sklearn.preprocessing import LabelBinarizer
from sklearn.utils import check_random_state
from sklearn.utils.multiclass import type_of_target, unique_labels
from sklearn.utils.validation import check_is_fitted, column_or_1d, validate_data

from workbench.nets import activations as act

__all__ = ["NetRegressor", "NetClassifier", "DivergenceWarning", "network_health"]

#: a derivative below this counts as "flat" when measuring saturation (issue text: 0.05)
SATURATION_THRESHOLD = 0.05
LEAKY_SLOPE_DEFAULT = 0.01
#: rows of the training data used to measure layer health when there is no validation split
HEALTH_PROBE_ROWS = 256
#: activations whose derivative is piecewise constant: saturation is not defined for them
_PIECEWISE_LINEAR = {"identity", "relu", "leaky_relu"}
#: hidden activations that init="he" treats as the ReLU family
#: hidden activations with f(1) == 1, which keep the ones column intact
_FIXES_ONE = {"identity", "relu", "leaky_relu", "elu"}
_HE_FAMILY = {"relu", "leaky_relu", "elu", "selu", "gelu", "silu", "softplus"}


class DivergenceWarning(UserWarning):
    """Training stopped because the loss became non-finite."""


# --------------------------------------------------------------------------- validation


class _Interval:
    def __init__(self, kind, low, high, closed="both"):
        self.kind, self.low, self.high, self.closed = kind, low, high, closed

    def ok(self, v):
        if isinstance(v, bool) or not isinstance(v, self.kind):
            return False
        if self.low is not None:
            if v < self.low or (v == self.low and self.closed in ("right", "neither")):
                return False
        if self.high is not None:
            if v > self.high or (v == self.high and self.closed in ("left", "neither")):
                return False
        return True

    def describe(self):
        lo = "-inf" if self.low is None else self.low
        hi = "inf" if self.high is None else self.high
        lb = "[" if self.closed in ("both", "left") and self.low is not None else "("
        rb = "]" if self.closed in ("both", "right") and self.high is not None else ")"
        kind = "an integer" if self.kind is numbers.Integral else "a number"
        return f"{kind} in {lb}{lo}, {hi}{rb}"


_REAL = numbers.Real
_INT = numbers.Integral

_CONSTRAINTS = {
    "solver": {"adam", "sgd"},
    "alpha": _Interval(_REAL, 0, None),
    "learning_rate": {"constant", "invscaling", "adaptive"},
    "learning_rate_init": _Interval(_REAL, 0, None, "neither"),
    "power_t": _Interval(_REAL, 0, None),
    "max_iter": _Interval(_INT, 1, None),
    "tol": _Interval(_REAL, 0, None),
    "momentum": _Interval(_REAL, 0, 1),
    "validation_fraction": _Interval(_REAL, 0, 1, "left"),
    "beta_1": _Interval(_REAL, 0, 1, "left"),
    "beta_2": _Interval(_REAL, 0, 1, "left"),
    "epsilon": _Interval(_REAL, 0, None, "neither"),
    "leaky_slope": _Interval(_REAL, 0, 1, "left"),
    "init": {"glorot", "he"},
    "dtype": {"float32", "float64"},
}
_BOOLS = ("shuffle", "warm_start", "nesterovs_momentum", "early_stopping", "monitor_health")


def _check_params(est):
    for name, rule in _CONSTRAINTS.items():
        value = getattr(est, name)
        if isinstance(rule, set):
            if value not in rule:
                raise ValueError(
                    f"{name}={value!r} is not valid; choose one of: {', '.join(sorted(rule))}")
        elif not rule.ok(value):
            raise ValueError(f"{name}={value!r} is not valid; it must be {rule.describe()}")
    for name in _BOOLS:
        if not isinstance(getattr(est, name), bool | np.bool_):
            raise ValueError(f"{name}={getattr(est, name)!r} is not valid; it must be True or False")
    if not (est.batch_size == "auto" or (isinstance(est.batch_size, _INT)
                                          and not isinstance(est.batch_size, bool)
                                          and est.batch_size >= 1)):
        raise ValueError(f"batch_size={est.batch_size!r} is not valid; use 'auto' or an integer >= 1")
    n = est.n_iter_no_change
    if not ((isinstance(n, _INT) and not isinstance(n, bool) and n >= 1) or n == np.inf):
        raise ValueError(f"n_iter_no_change={n!r} is not valid; use an integer >= 1 or inf")
    if not isinstance(est.verbose, bool | _INT):
        raise ValueError(f"verbose={est.verbose!r} is not valid; use True/False or an integer")


def _hidden_sizes(value):
    sizes = list(value) if hasattr(value, "__iter__") else [value]
    for s in sizes:
        if isinstance(s, bool) or not isinstance(s, _INT) or s <= 0:
            raise ValueError(f"hidden_layer_sizes must be positive integers, got {value!r}")
    return [int(s) for s in sizes]


def _hidden_names(activation, n_hidden):
    if isinstance(activation, str):
        return [act.resolve_hidden(activation)] * n_hidden
    names = list(activation) if hasattr(activation, "__iter__") else [activation]
    if len(names) != n_hidden:
        raise ValueError(
            f"activation has {len(names)} entries but there are {n_hidden} hidden layers; "
            "give one name for all layers or one per hidden layer")
    return [act.resolve_hidden(n) for n in names]


# --------------------------------------------------------------------------- the network


class _Net:
    """Flat parameter buffer with per-layer views, buffers and the fused training step.

    Layer ``i`` is stored as one block ``P[i]`` of shape ``(fan_in + 1, fan_out)``:
    its first ``fan_in`` rows are the weights ``W[i]`` and its last row is the
    intercept ``b[i]``. Training inputs and hidden activations carry a trailing
    column of ones, so one matrix product gives ``a @ W + b`` and, backwards,
    ``a.T @ delta`` gives the weight and intercept gradients together.
    """

    def __init__(self, units, hidden, head, dtype, leaky_slope):
        self.units = units
        self.hidden = [act.HIDDEN[h] for h in hidden]
        self.hidden_names = hidden
        self.head = head
        self.dtype = dtype
        self.hp = [{"slope": leaky_slope} if h == "leaky_relu" else {} for h in hidden]
        shapes = list(zip(units[:-1], units[1:]))
        total = sum((a + 1) * b for a, b in shapes)
        self.theta = np.zeros(total, dtype=dtype)
        # row 0 is the gradient; row 1 is scratch for its square, so that Adam can
        # update both moment vectors with one call per operation
        self.gg = np.zeros((2, total), dtype=dtype)
        self.grad = self.gg[0]
        self.P, self.G, self.W, self.b, self.gW = [], [], [], [], []
        pos = 0
        for a, b in shapes:
            block = self.theta[pos:pos + (a + 1) * b].reshape(a + 1, b)
            gblock = self.grad[pos:pos + (a + 1) * b].reshape(a + 1, b)
            self.P.append(block)
            self.G.append(gblock)
            self.W.append(block[:a])
            self.b.append(block[a])
            self.gW.append(gblock[:a])
            pos += (a + 1) * b
        # 1 on weight entries, 0 on intercepts: the L2 penalty as one fused vector op
        self.coef_mask = np.zeros_like(self.theta)
        pos = 0
        for a, b in shapes:
            self.coef_mask[pos:pos + a * b] = 1
            pos += (a + 1) * b
        self._l2_buf = np.empty_like(self.theta)
        self._l2_alpha = None
        self._keeps_one = [h in _FIXES_ONE for h in hidden]
        self._view_cache = {}
        self._bufs_for = 0

    # buffers ----------------------------------------------------------------
    def _ensure(self, m):
        if self._bufs_for >= m:
            return
        d = self.dtype
        n_hidden = len(self.hidden)
        # hidden activations with a trailing ones column; the output without
        self.Aaug = []
        for i, u in enumerate(self.units[1:]):
            if i < n_hidden:
                buf = np.empty((m, u + 1), dtype=d)
                buf[:, u] = 1
            else:
                buf = np.empty((m, u), dtype=d)
            self.Aaug.append(buf)
        # z copies (for derivatives that need the pre-activation) and deltas are as
        # wide as the activation buffers, so elementwise work runs on contiguous memory
        self.Z = [np.empty_like(self.Aaug[i]) if (i < n_hidden and self.hidden[i].needs_z)
                  or (i == n_hidden and not self.head.canonical) else None
                  for i in range(len(self.units) - 1)]
        self.D = [np.empty_like(buf) for buf in self.Aaug]  # deltas
        self.S = [np.empty_like(buf) for buf in self.Aaug[:-1]]  # scratch per hidden layer
        self._view_cache = {}
        self._bufs_for = m

    def layer_out(self, i, m):
        """View of layer i's activation for m rows (without the ones column)."""
        u = self.units[i + 1]
        return self.Aaug[i][:m, :u]

    # passes -----------------------------------------------------------------
    def _views(self, m):
        """Per-layer views of the buffers for batches of m rows (cached per m)."""
        v = self._view_cache.get(m)
        if v is None:
            self._ensure(m)
            v = []
            for i in range(len(self.P)):
                full = self.Aaug[i][:m]
                z = self.Z[i][:m] if self.Z[i] is not None else None
                d = self.D[i][:m]
                hidden = i < len(self.hidden)
                v.append((self.layer_out(i, m), full, z, d, d[:, :-1] if hidden else d,
                          self.S[i][:m] if hidden else None))
            self._view_cache[m] = v
        return v

    def forward(self, Xaug, m):
        """Every layer's output for the m rows of ``Xaug`` (inputs + ones column)."""
        a = Xaug
        last = len(self.P) - 1
        views = self._views(m)
        for i, P in enumerate(self.P):
            out, full, zbuf, _, _, _ = views[i]
            np.matmul(a, P, out=out)
            if zbuf is not None:
                np.copyto(zbuf, full)
            if i < last:
                # apply on the whole contiguous buffer, then restore the ones column
                # where the activation does not map 1 to 1
                self.hidden[i].apply_(full, **self.hp[i])
                if not self._keeps_one[i]:
                    full[:, -1] = 1
                a = full
            else:
                self.head.apply_(out)
                a = out
        return a

    def predict_raw(self, X, chunk=8192):
        """Forward pass allocating fresh arrays (used for predict / validation)."""
        outs = []
        last = len(self.W) - 1
        for s in range(0, X.shape[0], chunk):
            a = X[s:s + chunk]
            for i, (W, b) in enumerate(zip(self.W, self.b)):
                z = a @ W
                z += b
                if i < last:
                    a = self.hidden[i].apply_(z, **self.hp[i])
                else:
                    a = self.head.apply_(z)
            outs.append(a)
        if not outs:
            return np.empty((0, self.units[-1]), dtype=self.dtype)
        return outs[0] if len(outs) == 1 else np.concatenate(outs)

    def data_loss(self, y, p):
        """The head's matched loss, exactly as scikit-learn's MLP defines it."""
        loss = self.head.loss
        if loss == "squared_error":
            r = y - p
            return 0.5 * float(np.mean(r * r, axis=0).mean())
        if loss == "poisson":
            return float(np.mean(xlogy(y, y / p) - y + p, axis=0).sum())
        eps = np.finfo(p.dtype).eps
        q = np.clip(p, eps, 1 - eps)
        if self.head.name == "logistic":  # binary (and multilabel) log-loss
            return float(-np.mean(xlogy(y, q) + xlogy(1 - y, 1 - q), axis=0).sum())
        return float(-np.mean(xlogy(y, q), axis=0).sum())

    def backward(self, Xaug, y, m, alpha, scale=True):
        """Forward + backward on m rows; fills self.grad; returns the batch loss.

        With ``scale=False`` the gradient is left multiplied by ``m`` (the Adam
        step folds the division into its own scaling, saving one pass).

        ``Xaug`` holds the inputs with a trailing column of ones. The loss is the
        head's data loss plus ``0.5 * alpha * sum ||W||^2 / m`` (scikit-learn's MLP).
        """
        p = self.forward(Xaug, m)
        last = len(self.P) - 1
        views = self._views(m)
        delta = views[last][3]
        np.subtract(p, y, out=delta)
        head = self.head
        if head.loss == "squared_error":
            flat = delta.reshape(-1)
            loss = 0.5 * float(np.dot(flat, flat)) / flat.size
        else:
            loss = self.data_loss(y, p)
        if not head.canonical:
            delta *= head.delta_factor(views[last][2], p)
        if alpha:
            # alpha * W in one pass over the flat buffer (zeros at the intercepts)
            if self._l2_alpha != alpha:
                self._alpha_mask = self.coef_mask * alpha
                self._l2_alpha = alpha
            l2buf = self._l2_buf
            np.multiply(self.theta, self._alpha_mask, out=l2buf)
            loss += 0.5 * float(np.dot(self.theta, l2buf)) / m
        names = self.hidden_names
        for i in range(last, -1, -1):
            a_prev = Xaug if i == 0 else views[i - 1][1]
            np.matmul(a_prev.T, delta, out=self.G[i])
            if i > 0:
                # full width: the column for the ones is computed and then ignored
                _, ai, zi, nd, nd_view, sc = views[i - 1]
                # np.dot, not np.matmul: matmul takes a slow non-BLAS path when the
                # inner dimension is 1 (a single-output layer); dot calls sgemm/dgemm
                np.dot(delta, self.P[i].T, out=nd)
                name = names[i - 1]
                if name == "relu":
                    np.greater(ai, 0, out=sc)  # 1.0 where active (faster than a bool mask)
                    nd *= sc
                elif name == "identity":
                    pass
                elif name == "leaky_relu":
                    # derivative 1 where active, slope elsewhere: 1 - (1 - slope) * [a <= 0]
                    slope = self.hp[i - 1]["slope"]
                    np.greater(ai, 0, out=sc)
                    sc *= 1.0 - slope
                    sc += slope
                    nd *= sc
                elif name == "tanh":
                    # scikit-learn: delta *= 1 - Z**2
                    np.multiply(ai, ai, out=sc)
                    np.subtract(1, sc, out=sc)
                    nd *= sc
                elif name == "logistic":
                    nd *= ai
                    np.subtract(1, ai, out=sc)
                    nd *= sc
                else:
                    nd *= self.hidden[i - 1].derivative(zi, ai, **self.hp[i - 1])
                delta = nd_view
        if alpha:
            self.grad += l2buf
        if scale:
            self.grad /= m
        return loss

    def health(self, Xaug, y):
        """Per hidden layer: dead share, saturated share, data-loss gradient norm."""
        m = Xaug.shape[0]
        self._ensure(m)
        # a full forward/backward on the probe rows, without the L2 term; the gradient
        # buffer is overwritten by the next batch anyway
        self.backward(Xaug, y, m, 0.0)
        gnorm = [float(np.linalg.norm(g)) for g in self.gW]
        dead, sat = [], []
        tiny = np.finfo(self.dtype).tiny * 1e6
        for i, h in enumerate(self.hidden):
            a = self.layer_out(i, m)
            z = self.Z[i][:m, :-1] if self.Z[i] is not None else None
            d = np.abs(h.derivative(z, a, **self.hp[i]))
            dead_units = np.all(d <= tiny, axis=0)
            dead.append(float(dead_units.mean()))
            if self.hidden_names[i] in _PIECEWISE_LINEAR:
                sat.append(0.0)
            else:
                flat = (d < SATURATION_THRESHOLD).mean(axis=0) > 0.5
                sat.append(float((flat & ~dead_units).mean()))
        return dead, sat, gnorm


def _with_ones(X):
    """``X`` with a trailing column of ones (C-contiguous)."""
    out = np.empty((X.shape[0], X.shape[1] + 1), dtype=X.dtype)
    out[:, :-1] = X
    out[:, -1] = 1
    return out


def network_health(coefs, intercepts, hidden, head, task, X, Y, *, leaky_slope=LEAKY_SLOPE_DEFAULT):
    """Dead share, saturated share and data-loss gradient norm of every hidden layer.

    The engine's own definitions (see :class:`NetRegressor`), for any fitted
    multilayer perceptron given as weight and intercept lists, e.g. a scikit-learn
    ``MLPRegressor``/``MLPClassifier`` after training.

    Parameters
    ----------
    coefs, intercepts : list of ndarray
    hidden : str or sequence of str
        Hidden activation(s).
    head : str
        Output head name; ``task`` is "regression" or "classification".
    X : ndarray (n_samples, n_features)
        Probe rows as the network sees them (after preprocessing).
    Y : ndarray (n_samples, n_outputs)
        Targets as the network sees them (scaled target; one-hot / 0-1 labels).

    Returns
    -------
    dict with lists ``dead``, ``saturated`` and ``grad_norm``, one value per hidden layer.
    """
    units = [coefs[0].shape[0]] + [c.shape[1] for c in coefs]
    names = _hidden_names(hidden, len(units) - 2)
    dtype = np.dtype(np.float64)
    net = _Net(units, names, act.resolve_head(head, task), dtype, float(leaky_slope))
    for w, c in zip(net.W, coefs):
        w[...] = c
    for b, c in zip(net.b, intercepts):
        b[...] = c
    k = min(HEALTH_PROBE_ROWS, len(X))
    Xp = _with_ones(np.asarray(X, dtype=dtype)[:k])
    Yp = np.asarray(Y, dtype=dtype)[:k]
    if Yp.ndim == 1:
        Yp = Yp.reshape(-1, 1)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
        dead, sat, gn = net.health(Xp, Yp)
    return {"dead": dead, "saturated": sat, "grad_norm": gn}


# --------------------------------------------------------------------------- estimators


class _BaseNet(BaseEstimator):
    """Shared fitting logic; see :class:`NetRegressor` for the parameters."""

    _task = "regression"

    def __init__(
        self,
        hidden_layer_sizes=(100,),
        activation="relu",
        *,
        output_activation="auto",
        solver="adam",
        alpha=0.0001,
        batch_size="auto",
        learning_rate="constant",
        learning_rate_init=0.001,
        power_t=0.5,
        max_iter=200,
        shuffle=True,
        random_state=None,
        tol=1e-4,
        verbose=False,
        warm_start=False,
        momentum=0.9,
        nesterovs_momentum=True,
        early_stopping=False,
        validation_fraction=0.1,
        beta_1=0.9,
        beta_2=0.999,
        epsilon=1e-8,
        n_iter_no_change=10,
        leaky_slope=0.01,
        init="glorot",
        dtype="float32",
        monitor_health=True,
    ):
        self.hidden_layer_sizes = hidden_layer_sizes
        self.activation = activation
        self.output_activation = output_activation
        self.solver = solver
        self.alpha = alpha
        self.batch_size = batch_size
        self.learning_rate = learning_rate
        self.learning_rate_init = learning_rate_init
        self.power_t = power_t
        self.max_iter = max_iter
        self.shuffle = shuffle
        self.random_state = random_state
        self.tol = tol
        self.verbose = verbose
        self.warm_start = warm_start
        self.momentum = momentum
        self.nesterovs_momentum = nesterovs_momentum
        self.early_stopping = early_stopping
        self.validation_fraction = validation_fraction
        self.beta_1 = beta_1
        self.beta_2 = beta_2
        self.epsilon = epsilon
        self.n_iter_no_change = n_iter_no_change
        self.leaky_slope = leaky_slope
        self.init = init
        self.dtype = dtype
        self.monitor_health = monitor_health

    # -- hooks for the two tasks ------------------------------------------------
    def _prepare_y(self, y, first_pass):  # pragma: no cover - overridden
        raise NotImplementedError

    def _resolve_head(self, y2d):  # pragma: no cover - overridden
        raise NotImplementedError

    def _score_val(self, X, y):  # pragma: no cover - overridden
        raise NotImplementedError

    def _adapt_y(self, y, head):
        return y

    # -- fit ----------------------------------------------------------------------
    def fit(self, X, y):
        """Fit the network to ``X`` and ``y``.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,) or (n_samples, n_outputs)

        Returns
        -------
        self
        """
        return self._fit(X, y)

    def _fit(self, X, y):
        _check_params(self)
        sizes = _hidden_sizes(self.hidden_layer_sizes)
        hidden = _hidden_names(self.activation, len(sizes))
        dtype = np.dtype(self.dtype)
        first_pass = not hasattr(self, "coefs_") or not self.warm_start
        X, y = validate_data(self, X, y, multi_output=True, y_numeric=self._task == "regression",
                             dtype=(np.float64, np.float32), reset=first_pass)
        with np.errstate(over="ignore"):
            X = np.ascontiguousarray(X, dtype=dtype)
            y = self._prepare_y(y, first_pass)
            y = np.asarray(y, dtype=dtype)
        if not (np.isfinite(X).all() and np.isfinite(y).all()):
            raise ValueError(f"X or y has values too large for dtype={self.dtype!r}; rescale the "
                             "data (or use dtype='float64')")
        if y.ndim == 1:
            y = y.reshape(-1, 1)
        head = self._resolve_head(y)
        y = self._adapt_y(y, head)
        n_samples, n_features = X.shape
        units = [n_features, *sizes, y.shape[1]]
        self._random_state = check_random_state(self.random_state)

        net = _Net(units, hidden, head, dtype, float(self.leaky_slope))
        if first_pass:
            self.n_iter_ = 0
            self.t_ = 0
            self._init_weights(net, units, hidden)
            self.loss_curve_ = []
            self._no_improvement_count = 0
            self.history_ = {"loss": [], "val_loss": [], "val_score": [], "dead": [],
                             "saturated": [], "grad_norm": [], "seconds": []}
            if self.early_stopping:
                self.validation_scores_ = []
                self.best_validation_score_ = -np.inf
                self.best_loss_ = None
            else:
                self.best_loss_ = np.inf
                self.validation_scores_ = None
                self.best_validation_score_ = None
        else:
            if [c.shape for c in self.coefs_] != [w.shape for w in net.W]:
                raise ValueError("warm_start needs the same layer shapes as the previous fit")
            for w, c in zip(net.W, self.coefs_):
                w[...] = c
            for b, c in zip(net.b, self.intercepts_):
                b[...] = c
        self.diverged_ = False
        self._publish(net)
        self.n_outputs_ = y.shape[1]
        self.n_layers_ = len(units)
        self.out_activation_ = head.name
        self.hidden_activations_ = tuple(hidden)
        self.loss_function_ = head.loss
        with np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
            self._fit_stochastic(net, X, y, head)
        self._publish(net)
        return self

    def _init_weights(self, net, units, hidden):
        rng = self._random_state
        for i, (fan_in, fan_out) in enumerate(zip(units[:-1], units[1:])):
            # scikit-learn applies its rule by the hidden activation to every layer, the
            # output layer included; with one activation per layer, the output layer
            # follows the last hidden layer.
            if hidden:
                layer_act = hidden[min(i, len(hidden) - 1)]
            else:  # no hidden layer: scikit-learn still picks the rule by `activation`
                layer_act = (act.resolve_hidden(self.activation)
                             if isinstance(self.activation, str) else "")
            if self.init == "he" and i < len(hidden) and layer_act in _HE_FAMILY:
                bound = math.sqrt(6.0 / fan_in)
            else:
                factor = 2.0 if layer_act == "logistic" else 6.0  # scikit-learn's rule
                bound = math.sqrt(factor / (fan_in + fan_out))
            w = rng.uniform(-bound, bound, (fan_in, fan_out))
            b = rng.uniform(-bound, bound, fan_out)
            net.W[i][...] = w
            net.b[i][...] = b

    def _publish(self, net):
        self.coefs_ = [w for w in net.W]
        self.intercepts_ = [b for b in net.b]
        self._net = net

    def _fit_stochastic(self, net, X, y, head):
        early = self.early_stopping
        if early:
            stratify = y if (self._task == "classification" and y.shape[1] == 1) else None
            X_tr, X_val, y_tr, y_val = train_test_split(
                X, y, random_state=self._random_state, test_size=self.validation_fraction,
                stratify=stratify)
            if X_val.shape[0] < 2:
                raise ValueError("the validation set is too small; increase validation_fraction "
                                 "or use more rows")
            y_tr = np.ascontiguousarray(y_tr)
        else:
            X_tr, y_tr, X_val, y_val = X, y, None, None
        n = X_tr.shape[0]
        bs = min(200, n) if self.batch_size == "auto" else int(np.clip(self.batch_size, 1, n))
        if self.batch_size != "auto" and self.batch_size > n:
            warnings.warn("Got `batch_size` less than 1 or larger than sample size. "
                          "It is going to be clipped", stacklevel=3)
        net._ensure(bs)
        X_tr = _with_ones(X_tr)
        if early:
            k = min(HEALTH_PROBE_ROWS, X_val.shape[0])
            probe_X, probe_y = _with_ones(X_val[:k]), np.ascontiguousarray(y_val[:k])
        else:
            k = min(HEALTH_PROBE_ROWS, n)
            probe_X, probe_y = X_tr[:k], y_tr[:k]

        theta, grad = net.theta, net.grad
        tmp = np.empty_like(theta)
        solver = self.solver
        if solver == "adam":
            mv = np.zeros((2, theta.size), dtype=theta.dtype)  # first and second moments
            m_buf, v_buf = mv[0], mv[1]
            gg = net.gg
            t_adam = 0
            b1, b2, eps = self.beta_1, self.beta_2, self.epsilon
            betas = np.array([[b1], [b2]], dtype=theta.dtype)
            coef = np.empty((2, 1), dtype=theta.dtype)
            coef_for = 0
        else:
            vel = np.zeros_like(theta)
            lr = float(self.learning_rate_init)
            mom = self.momentum
        lr0 = float(self.learning_rate_init)
        alpha = float(self.alpha)

        sample_idx = np.arange(n, dtype=int)
        if self.shuffle:
            Xs = np.empty_like(X_tr)
            ys = np.empty_like(y_tr)
        else:
            Xs, ys = X_tr, y_tr
        last_good = theta.copy()
        self.n_iter_ = 0
        hist = self.history_
        for _ in range(self.max_iter):
            t0 = time.perf_counter()
            if self.shuffle:
                # same draw as sklearn.utils.shuffle(sample_idx, random_state=rs)
                perm = np.arange(n)
                self._random_state.shuffle(perm)
                sample_idx = sample_idx[perm]
                np.take(X_tr, sample_idx, axis=0, out=Xs)
                np.take(y_tr, sample_idx, axis=0, out=ys)
            acc = 0.0
            for s in range(0, n, bs):
                e = min(s + bs, n)
                mb = e - s
                if solver == "adam":
                    # m = b1*m + (1-b1)*g and v = b2*v + (1-b2)*g^2 (Kingma & Ba 2015,
                    # as scikit-learn's AdamOptimizer), with g = grad/mb folded in
                    loss = net.backward(Xs[s:e], ys[s:e], mb, alpha, scale=False)
                    acc += loss * mb
                    t_adam += 1
                    if coef_for != mb:
                        coef[0, 0] = (1 - b1) / mb
                        coef[1, 0] = (1 - b2) / (mb * mb)
                        coef_for = mb
                    np.multiply(grad, grad, out=gg[1])
                    gg *= coef
                    mv *= betas
                    mv += gg
                    step = lr0 * math.sqrt(1 - b2 ** t_adam) / (1 - b1 ** t_adam)
                    np.sqrt(v_buf, out=tmp)
                    tmp += eps
                    np.divide(m_buf, tmp, out=tmp)
                    tmp *= -step
                    theta += tmp
                else:
                    loss = net.backward(Xs[s:e], ys[s:e], mb, alpha)
                    acc += loss * mb
                    # sklearn's SGDOptimizer: v = mom*v - lr*g; nesterov: upd = mom*v - lr*g
                    vel *= mom
                    np.multiply(grad, lr, out=tmp)
                    vel -= tmp
                    if self.nesterovs_momentum:
                        np.multiply(vel, mom, out=tmp)
                        tmp -= grad * lr
                        theta += tmp
                    else:
                        theta += vel
            self.n_iter_ += 1
            epoch_loss = acc / n
            self.loss_ = epoch_loss
            self.t_ += n
            if not math.isfinite(epoch_loss) or not np.isfinite(theta).all():
                theta[...] = last_good
                self.diverged_ = True
                self.loss_curve_.append(float(epoch_loss))
                hist["loss"].append(float(epoch_loss))
                if self.monitor_health:  # health of the parameters that are kept
                    dead, sat, gn = net.health(probe_X, probe_y)
                    hist["dead"].append(dead)
                    hist["saturated"].append(sat)
                    hist["grad_norm"].append(gn)
                hist["seconds"].append(time.perf_counter() - t0)
                warnings.warn(
                    f"training diverged at epoch {self.n_iter_} (non-finite loss); the "
                    "parameters of the last finite epoch are kept. Lower learning_rate_init.",
                    DivergenceWarning, stacklevel=3)
                break
            last_good[...] = theta
            self.loss_curve_.append(epoch_loss)
            hist["loss"].append(epoch_loss)
            if self.monitor_health:
                dead, sat, gn = net.health(probe_X, probe_y)
                hist["dead"].append(dead)
                hist["saturated"].append(sat)
                hist["grad_norm"].append(gn)
            # early stopping / no-improvement bookkeeping, as scikit-learn does it
            if early:
                p_val = net.predict_raw(X_val)
                val_score = self._score_val(p_val, y_val)
                self.validation_scores_.append(val_score)
                hist["val_score"].append(val_score)
                hist["val_loss"].append(net.data_loss(y_val, p_val))
                if val_score < self.best_validation_score_ + self.tol:
                    self._no_improvement_count += 1
                else:
                    self._no_improvement_count = 0
                if val_score > self.best_validation_score_:
                    self.best_validation_score_ = val_score
                    best_theta = theta.copy()
            else:
                if self.loss_curve_[-1] > self.best_loss_ - self.tol:
                    self._no_improvement_count += 1
                else:
                    self._no_improvement_count = 0
                if self.loss_curve_[-1] < self.best_loss_:
                    self.best_loss_ = self.loss_curve_[-1]
            hist["seconds"].append(time.perf_counter() - t0)
            if self.verbose:
                print(f"Iteration {self.n_iter_}, loss = {epoch_loss:.8f}")
            if solver == "sgd" and self.learning_rate == "invscaling":
                lr = lr0 / (self.t_ + 1) ** self.power_t
            if self._no_improvement_count > self.n_iter_no_change:
                if solver == "sgd" and self.learning_rate == "adaptive" and lr > 1e-6:
                    lr /= 5.0
                    self._no_improvement_count = 0
                else:
                    break
            if self.n_iter_ == self.max_iter:
                warnings.warn(
                    f"Stochastic Optimizer: Maximum iterations ({self.max_iter}) reached and "
                    "the optimization hasn't converged yet.", ConvergenceWarning, stacklevel=3)
        if early and "best_theta" in locals():
            theta[...] = best_theta
        if hist["dead"]:
            self.health_ = {"dead": hist["dead"][-1], "saturated": hist["saturated"][-1],
                            "grad_norm": hist["grad_norm"][-1]}
        else:
            self.health_ = {"dead": [], "saturated": [], "grad_norm": []}

    # -- predict ------------------------------------------------------------------
    def _forward(self, X):
        check_is_fitted(self, "coefs_")
        X = validate_data(self, X, reset=False, dtype=(np.float64, np.float32))
        X = np.ascontiguousarray(X, dtype=np.dtype(self.dtype))
        net = self._net_for_predict()
        with np.errstate(over="ignore", invalid="ignore", under="ignore"):
            return net.predict_raw(X)

    def _net_for_predict(self):
        # coefs_/intercepts_ may have been replaced by the user: rebuild the flat net if so
        net = getattr(self, "_net", None)
        if net is None or any(w is not c for w, c in zip(net.W, self.coefs_)) or any(
                b is not c for b, c in zip(net.b, self.intercepts_)):
            units = [self.coefs_[0].shape[0]] + [c.shape[1] for c in self.coefs_]
            head = act.resolve_head(self.out_activation_, self._task)
            net = _Net(units, list(self.hidden_activations_), head,
                       np.dtype(self.dtype), float(self.leaky_slope))
            for w, c in zip(net.W, self.coefs_):
                w[...] = c
            for b, c in zip(net.b, self.intercepts_):
                b[...] = c
        return net

    def __getstate__(self):
        # the flat training network and the head (which holds functions) are rebuilt
        # on demand, so a saved model holds only plain arrays and scikit-learn types
        state = super().__getstate__() if hasattr(super(), "__getstate__") else dict(self.__dict__)
        state = dict(state)
        state.pop("_net", None)
        state.pop("_head", None)
        return state


class NetRegressor(RegressorMixin, _BaseNet):
    """Multilayer perceptron regressor with any hidden activation and output head.

    Parameters
    ----------
    hidden_layer_sizes : int or tuple of int, default=(100,)
        Units per hidden layer.
    activation : str or tuple of str, default="relu"
        Hidden activation, one for all layers or one per hidden layer; any name in
        :data:`workbench.nets.activations.HIDDEN` (aliases ``sigmoid``, ``swish``).
    output_activation : str, default="auto"
        Output head: ``identity`` (squared error), ``exp`` (Poisson deviance),
        ``relu``, ``softplus`` (squared error, non-negative targets) or ``logistic``
        (squared error, targets in [0, 1]). ``auto`` is ``identity``.
    solver : {"adam", "sgd"}, default="adam"
    alpha : float, default=1e-4
        L2 penalty, applied as scikit-learn's MLP does: ``0.5 * alpha * ||W||^2 / n_batch``.
    batch_size, learning_rate, learning_rate_init, power_t, max_iter, shuffle,
    random_state, tol, verbose, warm_start, momentum, nesterovs_momentum,
    early_stopping, validation_fraction, beta_1, beta_2, epsilon, n_iter_no_change
        As in :class:`sklearn.neural_network.MLPRegressor`.
    leaky_slope : float, default=0.01
        Slope of ``leaky_relu`` below zero (Maas et al. 2013).
    init : {"glorot", "he"}, default="glorot"
        ``glorot`` is scikit-learn's uniform Glorot rule; ``he`` uses
        ``sqrt(6 / fan_in)`` for ReLU-family hidden layers (He et al. 2015).
    dtype : {"float32", "float64"}, default="float32"
    monitor_health : bool, default=True
        Measure dead / saturated units and gradient norms after every epoch.

    Attributes
    ----------
    coefs_, intercepts_ : list of ndarray
    loss_ : float
    loss_curve_ : list of float
    n_iter_ : int
    best_loss_ : float or None
    validation_scores_ : list of float or None
    best_validation_score_ : float or None
    out_activation_ : str
    hidden_activations_ : tuple of str
    loss_function_ : str
    diverged_ : bool
        True when training stopped on a non-finite loss (the last finite
        parameters are kept and a :class:`DivergenceWarning` is issued).
    history_ : dict
        Per-epoch ``loss``, ``val_loss``, ``val_score``, ``dead``, ``saturated``,
        ``grad_norm`` (one value per hidden layer) and ``seconds``.
    health_ : dict
        The last epoch's ``dead``, ``saturated`` and ``grad_norm`` per hidden layer.

    Examples
    --------
    >>> from sklearn.datasets import load_diabetes
    >>> from workbench.nets.engine import NetRegressor
    >>> X, y = load_diabetes(return_X_y=True)
    >>> net = NetRegressor((16,), "tanh", output_activation="relu", max_iter=5,
    ...                    random_state=0).fit(X, y / y.std())
    >>> net.predict(X[:2]).shape
    (2,)
    """

    _task = "regression"

    def _prepare_y(self, y, first_pass):
        if y.ndim == 2 and y.shape[1] == 1:
            y = column_or_1d(y, warn=True)
        return y

    def _resolve_head(self, y2d):
        name = "identity" if self.output_activation == "auto" else self.output_activation
        head = act.resolve_head(name, "regression")
        if head.low >= 0 and y2d.size and float(np.min(y2d)) < 0:
            raise ValueError(
                f"output head {head.name!r} can only produce values >= 0 but the target has "
                f"negative values (min {float(np.min(y2d)):g}); use 'identity' for a signed target")
        if head.high == 1.0 and y2d.size and float(np.max(y2d)) > 1:
            raise ValueError(
                f"output head {head.name!r} produces values in [0, 1] but the target reaches "
                f"{float(np.max(y2d)):g}; scale the target to its interval first")
        return head

    def _score_val(self, p, y):
        return float(r2_score(y, p)) if np.isfinite(p).all() else float("nan")

    def predict(self, X):
        """Predict targets for ``X`` (in the units the network was trained on)."""
        p = self._forward(X)
        return p.ravel() if p.shape[1] == 1 else p


class NetClassifier(ClassifierMixin, _BaseNet):
    """Multilayer perceptron classifier with any hidden activation.

    Parameters are those of :class:`NetRegressor`; ``output_activation`` is
    ``auto`` (``logistic`` for two classes or multilabel targets, ``softmax`` for
    more classes), ``logistic`` or ``softmax``; both are trained with log-loss,
    clipped to [eps, 1 - eps] as scikit-learn does.

    Attributes
    ----------
    classes_ : ndarray
        Class labels. Other attributes as in :class:`NetRegressor`.

    Examples
    --------
    >>> from sklearn.datasets import load_iris
    >>> from workbench.nets.engine import NetClassifier
    >>> X, y = load_iris(return_X_y=True)
    >>> clf = NetClassifier((8,), "gelu", max_iter=5, random_state=0).fit(X, y)
    >>> clf.predict_proba(X[:1]).shape
    (1, 3)
    """

    _task = "classification"

    def _prepare_y(self, y, first_pass):
        if y.ndim == 2 and y.shape[1] == 1:
            y = column_or_1d(y, warn=True)
        if first_pass or not hasattr(self, "classes_"):
            kind = type_of_target(y)
            if kind not in ("binary", "multiclass", "multilabel-indicator"):
                raise ValueError(f"Unknown label type: {kind!r}; NetClassifier needs class labels")
            self._label_binarizer = LabelBinarizer()
            self._label_binarizer.fit(y)
            self.classes_ = self._label_binarizer.classes_
        else:
            classes = unique_labels(y)
            if set(classes) != set(self.classes_):
                raise ValueError(
                    "warm_start can only be used where `y` has the same classes as in the "
                    f"previous call to fit. Previously got {self.classes_}, `y` has {classes}")
        return self._label_binarizer.transform(y)

    def _resolve_head(self, y2d):
        kind = self._label_binarizer.y_type_
        auto = "softmax" if kind == "multiclass" else "logistic"
        name = auto if self.output_activation == "auto" else self.output_activation
        head = act.resolve_head(name, "classification")
        # a softmax over two units is a valid (if unusual) head for two classes;
        # a logistic unit per class cannot give one distribution over 3+ classes
        if head.name != auto and not (head.name == "softmax" and kind == "binary"):
            n = len(self.classes_)
            raise ValueError(
                f"output head {head.name!r} cannot serve a target with {n} classes: use "
                f"{auto!r} ('logistic' is for two classes, 'softmax' for two or more)")
        return head

    def _adapt_y(self, y, head):
        # two classes under a softmax head: one unit per class, [1 - y, y]
        if head.name == "softmax" and y.shape[1] == 1:
            return np.ascontiguousarray(np.hstack([1 - y, y]))
        return y

    def _score_val(self, p, y):
        return float(accuracy_score(self._decode(y), self._decode(p)))

    def _decode(self, p):
        if p.shape[1] == 2 and self._label_binarizer.y_type_ == "binary":
            p = p[:, 1]  # softmax over two units: the positive class's probability
        elif p.shape[1] == 1:
            p = p.ravel()
        return self._label_binarizer.inverse_transform(p)

    def predict(self, X):
        """Predict class labels for ``X``."""
        return self._decode(self._forward(X))

    def predict_proba(self, X):
        """Class probabilities, shape (n_samples, n_classes)."""
        p = self._forward(X)
        if p.shape[1] == 1:
            p = p.ravel()
            return np.vstack([1 - p, p]).T
        return p

    def predict_log_proba(self, X):
        """Logarithm of :meth:`predict_proba`."""
        with np.errstate(divide="ignore"):
            return np.log(self.predict_proba(X))
