"""The network engine: scikit-learn estimators around the NumPy multilayer perceptron.

:class:`NetRegressor` and :class:`NetClassifier` are scikit-learn estimators. Where
their meaning overlaps with :class:`sklearn.neural_network.MLPRegressor` /
:class:`~sklearn.neural_network.MLPClassifier` they take the same parameters and
follow the same arithmetic (loss definitions, L2 penalty, Glorot initialisation,
Adam bias correction, SGD momentum, early stopping, batch order), so that with the
same ``random_state`` and ``output_init="sklearn", tol_mode="absolute"`` both produce
the same ``loss_curve_``. By default every head gets a fair start instead (the
untrained network predicts the training mean, see ``_BaseNet._start_at_the_mean``)
and the stopping rule reads the loss relative to that constant predictor's loss,
so that heads whose losses differ in scale stop alike. Beyond scikit-learn they
accept every hidden activation of :mod:`workbench.nets.activations` (one for all layers
or one per layer), every output head with its matched loss, record the health
of each hidden layer during training (dead units, saturated units, gradient norms)
and, given held-out rows at fit time, their loss and score after every epoch.

The parts live beside this module: the registry of activations and heads
(:mod:`~workbench.nets.activations`), the losses (:mod:`~workbench.nets.losses`),
the forward and backward passes (:mod:`~workbench.nets.network`), the optimisers
(:mod:`~workbench.nets.optimizers`) and the health measurement
(:mod:`~workbench.nets.health`). This module validates parameters, initialises
the weights and runs the training loop.

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
- Prechelt (1998), "Early stopping - but when?" (stopping on a held-out score).
"""

from __future__ import annotations

import math
import numbers
import time
import warnings
from typing import NamedTuple

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.exceptions import ConvergenceWarning
from sklearn.metrics import accuracy_score, r2_score
from sklearn.model_selection import train_test_split
from sklearn.preprocessing import LabelBinarizer
from sklearn.utils import check_random_state
from sklearn.utils.multiclass import type_of_target, unique_labels
from sklearn.utils.validation import check_is_fitted, column_or_1d, validate_data

from workbench.nets import activations as act
from workbench.nets.health import PROBE_ROWS, measure, network_health
from workbench.nets.network import PREDICT_CHUNK, Network, epoch_array, with_ones
from workbench.nets.optimizers import AdamOptimizer, SGDOptimizer

__all__ = ["NetRegressor", "NetClassifier", "DivergenceWarning", "network_health", "health_due"]


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
    "output_init": {"mean", "sklearn"},
    "tol_mode": {"relative", "absolute"},
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


# --------------------------------------------------------------------------- training


class _TrainingData(NamedTuple):
    """The rows one fit trains on, validates on and measures health on."""

    X: np.ndarray  # the rows given to fit, as validated (float64 or float32, not copied)
    rows: np.ndarray | None  # positions in X of the training rows (early stopping), else None
    y: np.ndarray  # the training rows' targets, in the network's dtype
    X_val: np.ndarray | None  # validation rows (early stopping), without the ones
    y_val: np.ndarray | None
    probe_X: np.ndarray  # health probe rows, with the ones
    probe_y: np.ndarray
    batch_size: int


class _HeldOut(NamedTuple):
    """Rows the network never trains on, watched after every epoch for display only."""

    X: np.ndarray  # features in the network's dtype, without the ones
    y: np.ndarray  # targets as the network sees them (scaled target, 0/1 label columns)
    score: object  # callable(predictions) -> float, or None


#: layer health is measured after each of the first this many epochs ...
HEALTH_EVERY_EPOCH_UNTIL = 10
#: ... then after every this many-th epoch, and always after the last (a schedule that
#: keeps the curves drawable at a fifth of the cost; a choice, not from a source)
HEALTH_STRIDE = 5


def health_due(epoch: int) -> bool:
    """Whether layer health is measured after ``epoch`` (1-based, counted over the whole
    history, warm starts included); the last epoch of a fit is measured in any case.

    >>> [e for e in range(1, 31) if health_due(e)]
    [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 15, 20, 25, 30]
    """
    return epoch <= HEALTH_EVERY_EPOCH_UNTIL or epoch % HEALTH_STRIDE == 0


#: rows cast at a time when the training rows are taken from the caller's array
GATHER_ROWS = 4096
#: training rows whose cast copy (with the ones column, in the network's dtype) takes at
#: most this many bytes are cast once per fit, and each epoch takes its shuffled rows
#: from that copy in one call, instead of gathering and casting them again every epoch.
#: Above it a fit holds no cast copy beside the epoch's rows (the memory bound of
#: :func:`_epoch_rows`). A choice: a kiln fold (2,000 rows x 16) is 136 kB, and 1 MiB
#: (about 15,000 rows of 16 features) keeps the copy small next to a worker's base, where
#: the per-epoch gather is a noticeable share of a fit; on larger fits the arithmetic
#: dominates and the one-copy bound holds (``tests/test_worker_memory.py``).
CAST_ONCE_BYTES = 2**20


def _gather(X, index, out):
    """``out[:, :-1] = X[index]`` (all rows of ``X`` in order when ``index`` is None),
    cast to ``out``'s dtype ``GATHER_ROWS`` rows at a time; the last column is left alone.

    The values are those of casting ``X`` whole and then taking the rows (a cast is
    element by element), without holding a cast copy of ``X`` beside ``out``.
    """
    n = out.shape[0]
    buf = np.empty((min(GATHER_ROWS, n), X.shape[1]), dtype=X.dtype) if index is not None \
        else None
    with np.errstate(over="ignore"):
        for start in range(0, n, GATHER_ROWS):
            stop = min(n, start + GATHER_ROWS)
            if index is None:
                part = X[start:stop]
            else:
                part = buf[:stop - start]
                # mode="wrap": the positions are valid, and an unchecked take writes
                # straight into ``out`` (with the default "raise" NumPy buffers it)
                np.take(X, index[start:stop], axis=0, out=part, mode="wrap")
            out[start:stop, :-1] = part
    return out


def _epoch_rows(X, rows, y, dtype, shuffle, random_state):
    """Each epoch's rows in order, with a trailing column of ones, in ``dtype``:
    contiguous arrays reused every epoch.

    ``X`` is the array given to ``fit`` (float64 or float32) and ``rows`` the positions
    of the training rows in it (None: every row, in order); the rows are gathered and
    cast straight into the epoch's array (:func:`_gather`), so a fit holds one array of
    the training rows in ``dtype``, not a cast copy and a shuffled copy besides -- unless
    that copy is small (:data:`CAST_ONCE_BYTES`): then the rows are cast once and each
    epoch takes its order from the cast copy (one call instead of a gather and a cast).

    The order is scikit-learn's: its MLP shuffles the row indices every epoch with
    ``sklearn.utils.shuffle(indices, random_state=rs)``, which draws one permutation
    ``rs.shuffle(np.arange(n))`` and applies it to the indices.
    """
    n = y.shape[0]
    X_epoch = epoch_array((n, X.shape[1] + 1), dtype)
    X_epoch[:, -1] = 1
    if not shuffle:
        _gather(X, rows, X_epoch)
        while True:
            yield X_epoch, y
    cast = None
    if X_epoch.nbytes <= CAST_ONCE_BYTES:  # small: cast once, take from the cast rows
        cast = np.empty_like(X_epoch)
        cast[:, -1] = 1
        _gather(X, rows, cast)
    index = np.arange(n, dtype=int)
    y_epoch = epoch_array(y.shape, y.dtype)
    while True:
        perm = np.arange(n)
        random_state.shuffle(perm)
        index = index[perm]
        if cast is not None:
            # the same values: a cast acts on each element alone, so taking rows of the
            # cast copy equals casting the taken rows. mode="wrap" (the positions are a
            # permutation, all valid): NumPy then writes straight into the epoch's array
            np.take(cast, index, axis=0, out=X_epoch, mode="wrap")
        else:
            _gather(X, index if rows is None else rows[index], X_epoch)
        np.take(y, index, axis=0, out=y_epoch, mode="wrap")
        yield X_epoch, y_epoch


def _run_epoch(net, optimizer, X, y, batch_size, alpha, probe=None):
    """One pass over the rows in batches: backward pass and optimiser step per batch.

    Returns the epoch's loss, the row-weighted mean of the batch losses (as
    scikit-learn's MLP reports it), taken once per epoch from the kept batch
    predictions (:meth:`workbench.nets.network.Network.train_epoch`). ``probe``: the
    health probe's rows when health is measured after this epoch (a lockstep group
    measures it in its stack).
    """
    return net.train_epoch(optimizer, X, y, batch_size, alpha, probe)


def _constant_loss(net, y) -> float:
    """The head's data loss when every row is predicted by the column means of ``y``.

    The mean is the constant that minimises the squared error, the Poisson deviance
    and the log-loss alike (for 0/1 label columns it is the class shares), so this is
    the loss of scikit-learn's ``DummyRegressor(strategy="mean")`` /
    ``DummyClassifier(strategy="prior")`` in the network's own units: where the fair
    start begins and the scale the relative stopping rule reads.
    """
    mean = y.mean(axis=0, dtype=np.float64).astype(y.dtype)
    with np.errstate(divide="ignore", invalid="ignore"):
        return float(net.data_loss(y, np.broadcast_to(mean, y.shape)))


def _text_classes(y):
    """``numpy.unique(y, return_inverse=True)`` of a 1-D object array whose labels are all
    Python ``str`` (a table's text labels), or None for any other array.

    The distinct labels are collected in a set and sorted (``sorted`` and NumPy's object
    sort both order by ``<``, a total order on strings; a set and ``unique`` both merge
    equal strings), and each row's position found by binary search, instead of sorting
    every row's string: about a tenth of the time on a fold's 2,000 labels. The kind
    scikit-learn's ``type_of_target`` gives such an array (``binary`` for at most two
    distinct labels, else ``multiclass``: its only other tests are on the first label's
    type, the dimensions and floats) is the same for its distinct labels; a test compares
    both with scikit-learn's answers.
    """
    if y.ndim != 1 or y.dtype != object or y.size == 0:
        return None
    distinct = set(y.tolist())
    if not all(type(v) is str for v in distinct):
        return None
    classes = np.empty(len(distinct), dtype=object)
    classes[:] = sorted(distinct)
    return classes, np.searchsorted(classes, y)


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
        leaky_slope=act.LEAKY_SLOPE,
        init="glorot",
        output_init="mean",
        tol_mode="relative",
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
        self.output_init = output_init
        self.tol_mode = tol_mode
        self.dtype = dtype
        self.monitor_health = monitor_health

    # -- hooks for the two tasks ------------------------------------------------
    def _prepare_y(self, y, first_pass):  # pragma: no cover - overridden
        raise NotImplementedError

    def _resolve_head(self, y2d):  # pragma: no cover - overridden
        raise NotImplementedError

    def _score_val(self, p, y):  # pragma: no cover - overridden
        raise NotImplementedError

    def _adapt_y(self, y, head):
        return y

    # -- fit ----------------------------------------------------------------------
    def fit(self, X, y, *, held_out=None, held_out_score=None):
        """Fit the network to ``X`` and ``y``.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,) or (n_samples, n_outputs)
        held_out : tuple (X_held_out, y_held_out), optional
            Rows the network never trains on, in the form of ``X`` and ``y`` (class
            labels for a classifier, the target in the network's units for a
            regressor). After every epoch the head's matched loss on them (the
            training loss's definition and units, without the L2 term) is appended
            to ``history_["test_loss"]``. For display only: nothing in training,
            stopping or early stopping reads it, so the fitted parameters are the
            same with or without it.
        held_out_score : callable, optional
            With ``held_out``: called after every epoch with what :meth:`predict`
            (regressor) or ``predict_proba`` (classifier) would return for the
            held-out rows at that point; its result (a float) is appended to
            ``history_["test_score"]``.

        Returns
        -------
        self
        """
        return self._fit(X, y, held_out, held_out_score)

    def _fit(self, X, y, held_out=None, held_out_score=None):
        _check_params(self)
        sizes = _hidden_sizes(self.hidden_layer_sizes)
        hidden = act.resolve_hidden_layers(self.activation, len(sizes))
        dtype = np.dtype(self.dtype)
        first_pass = not hasattr(self, "coefs_") or not self.warm_start
        X, y = self._validated(X, y, dtype, first_pass)
        head = self._resolve_head(y)
        y = self._adapt_y(y, head)
        watch = self._held_out(held_out, held_out_score, dtype, head, y.shape[1])
        units = [X.shape[1], *sizes, y.shape[1]]
        self._random_state = check_random_state(self.random_state)
        net = Network(units, hidden, head, dtype, float(self.leaky_slope))
        if first_pass:
            self._start_fresh(net, units, hidden, y)
        else:
            self._continue_from_fitted(net)
        self.diverged_ = False
        self._publish(net)
        self.n_outputs_ = y.shape[1]
        self.n_layers_ = len(units)
        self.out_activation_ = head.name
        self.hidden_activations_ = tuple(hidden)
        self.loss_function_ = head.loss
        with np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
            self._fit_stochastic(net, X, y, watch)
        self._publish(net)
        return self

    def _held_out(self, held_out, score, dtype, head, n_outputs):
        """The held-out rows checked and in the network's form (None without them)."""
        if held_out is None:
            if score is not None:
                raise ValueError("held_out_score needs held_out=(X_held_out, y_held_out)")
            return None
        X_ho, y_ho = held_out
        X_ho = validate_data(self, X_ho, reset=False, dtype=(np.float64, np.float32))
        X_ho = np.ascontiguousarray(X_ho, dtype=dtype)
        y_ho = np.asarray(y_ho)
        if y_ho.ndim == 2 and y_ho.shape[1] == 1:
            y_ho = y_ho.ravel()
        if self._task == "classification":
            y_ho = self._binarize(y_ho)
        y_ho = np.asarray(y_ho, dtype=dtype)
        y_ho = y_ho.reshape(-1, 1) if y_ho.ndim == 1 else y_ho
        y_ho = self._adapt_y(y_ho, head)
        if y_ho.shape != (X_ho.shape[0], n_outputs):
            raise ValueError(f"held_out has {X_ho.shape[0]} rows and targets of shape "
                             f"{y_ho.shape}; expected {n_outputs} output(s) per row")
        return _HeldOut(X_ho, np.ascontiguousarray(y_ho), score)

    def _validated(self, X, y, dtype, first_pass):
        """``X`` and ``y`` checked, ``y`` in ``dtype`` and two-dimensional.

        ``X`` stays as validated (float64 or float32, not copied): each epoch's rows are
        gathered from it and cast to ``dtype`` as the column of ones is added
        (:func:`_epoch_rows`), so a fit holds one array of the rows in ``dtype``."""
        X, y = validate_data(self, X, y, multi_output=True, y_numeric=self._task == "regression",
                             dtype=(np.float64, np.float32), reset=first_pass)
        with np.errstate(over="ignore"):
            y = self._prepare_y(y, first_pass)
            y = np.asarray(y, dtype=dtype)
        if not np.isfinite(y).all():
            self._too_large()
        return X, (y.reshape(-1, 1) if y.ndim == 1 else y)

    def _too_large(self):
        raise ValueError(f"X or y has values too large for dtype={self.dtype!r}; rescale the "
                         "data (or use dtype='float64')")

    def _check_fits(self, X, dtype):
        """Refuse ``X`` when a value does not fit ``dtype`` (checked ``GATHER_ROWS`` rows at
        a time, so no cast copy of ``X`` is held)."""
        with np.errstate(over="ignore"):
            for start in range(0, X.shape[0], GATHER_ROWS):
                if not np.isfinite(X[start:start + GATHER_ROWS].astype(dtype, copy=False)).all():
                    self._too_large()

    def _rows_as(self, X, dtype, ones):
        """``X`` in ``dtype``, C-contiguous, with a trailing column of ones when ``ones``;
        refused when a value does not fit the dtype."""
        with np.errstate(over="ignore"):
            if ones:
                out = np.empty((X.shape[0], X.shape[1] + 1), dtype=dtype)
                out[:, :-1] = X
                out[:, -1] = 1
            else:
                out = np.ascontiguousarray(X, dtype=dtype)
        if not np.isfinite(out).all():
            self._too_large()
        return out

    def _start_fresh(self, net, units, hidden, y):
        self.n_iter_ = 0
        self.t_ = 0
        self._init_weights(net, units, hidden)
        if self.output_init == "mean":
            self._start_at_the_mean(net, y)
        self.loss_curve_ = []
        self._no_improvement_count = 0
        self.history_ = {"loss": [], "val_loss": [], "val_score": [], "test_loss": [],
                         "test_score": [], "dead": [], "saturated": [], "grad_norm": [],
                         "health_epoch": [], "seconds": []}
        if self.early_stopping:
            self.validation_scores_ = []
            self.best_validation_score_ = -np.inf
            self.best_loss_ = None
        else:
            self.best_loss_ = np.inf
            self.validation_scores_ = None
            self.best_validation_score_ = None

    def _continue_from_fitted(self, net):
        if [c.shape for c in self.coefs_] != [w.shape for w in net.weights]:
            raise ValueError("warm_start needs the same layer shapes as the previous fit")
        for w, c in zip(net.weights, self.coefs_):
            w[...] = c
        for b, c in zip(net.intercepts, self.intercepts_):
            b[...] = c

    def _init_weights(self, net, units, hidden):
        rng = self._random_state
        for i, (fan_in, fan_out) in enumerate(zip(units[:-1], units[1:])):
            # scikit-learn applies its rule by the hidden activation to every layer, the
            # output layer included; with one activation per layer, the output layer
            # follows the last hidden layer. He's bound is for hidden layers only.
            if hidden:
                bound = act.HIDDEN[hidden[min(i, len(hidden) - 1)]].init_bound(
                    fan_in, fan_out, he=self.init == "he" and i < len(hidden))
            elif isinstance(self.activation, str):
                # no hidden layer: scikit-learn still picks the rule by `activation`
                bound = act.get_hidden(self.activation).init_bound(fan_in, fan_out)
            else:
                bound = act.glorot_bound(fan_in, fan_out)
            net.weights[i][...] = rng.uniform(-bound, bound, (fan_in, fan_out))
            net.intercepts[i][...] = rng.uniform(-bound, bound, fan_out)

    def _start_at_the_mean(self, net, y):
        """The fair start: the untrained network predicts the training mean for every row.

        The output layer's weights start at zero and its intercept at the head's
        inverse link of the column means of ``y`` as the network sees it (the scaled
        target; the 0/1 label columns of a classifier, whose means are the class
        shares): identity -> mean, relu -> mean, softplus -> log(expm1(mean)),
        exp -> log(mean), logistic -> logit(mean) (the log prior odds for a
        classifier), softmax -> log(class shares). Every head thus starts as the
        constant predictor -- scikit-learn's ``DummyRegressor(strategy="mean")`` /
        ``DummyClassifier(strategy="prior")`` -- at the loss of
        :attr:`constant_loss_`, whatever its range or link; no head begins far from
        the target or with an output unit stuck at zero. The hidden layers keep the
        draws of :meth:`_init_weights` (the same random numbers as ``"sklearn"``).

        Setting the output bias to the target's mean (and the logits to the class
        priors) is common practice (Karpathy 2019, "A recipe for training neural
        networks", "init well"); a zero output layer, so that the network starts as
        that constant, follows Zhang, Dauphin & Ma (2019), "Fixup initialization"
        (its first rule: the classification layer and the last layer of each residual
        branch start at 0). Adam's first steps move the output weights away from zero
        at once; the hidden layers learn from the second batch on. The mean is that
        of every row given to ``fit`` (with early stopping, before the validation
        rows are split off).
        """
        mean = np.asarray(y, dtype=np.float64).mean(axis=0)
        net.weights[-1][...] = 0
        net.intercepts[-1][...] = net.head.inverse(mean)

    def _publish(self, net):
        self.coefs_ = list(net.weights)
        self.intercepts_ = list(net.intercepts)
        self._net = net

    def _training_data(self, X, y) -> _TrainingData:
        """Split off the validation rows (early stopping), choose the batch size and probe.

        The training rows stay in ``X`` (their positions in ``rows``): each epoch gathers
        them (:func:`_epoch_rows`). Early stopping splits the row positions as
        ``train_test_split(X, y, ...)`` splits the rows (the split depends only on the
        number of rows, the stratification and the random state), so the rows and their
        order are the same as on a split copy of ``X``."""
        self._check_fits(X, y.dtype)
        if self.early_stopping:
            stratify = y if (self._task == "classification" and y.shape[1] == 1) else None
            rows, val_rows, y, y_val = train_test_split(
                np.arange(X.shape[0]), y, random_state=self._random_state,
                test_size=self.validation_fraction, stratify=stratify)
            if val_rows.shape[0] < 2:
                raise ValueError("the validation set is too small; increase validation_fraction "
                                 "or use more rows")
            y = np.ascontiguousarray(y)
            X_val = X[val_rows]
        else:
            rows = X_val = y_val = None
        n = y.shape[0]
        if self.batch_size == "auto":
            batch_size = min(200, n)
        else:
            if self.batch_size > n:
                warnings.warn("Got `batch_size` less than 1 or larger than sample size. "
                              "It is going to be clipped", stacklevel=4)
            batch_size = int(np.clip(self.batch_size, 1, n))
        if X_val is not None:
            X_val = self._rows_as(X_val, y.dtype, ones=False)
            k = min(PROBE_ROWS, X_val.shape[0])
            probe_X, probe_y = with_ones(X_val[:k]), np.ascontiguousarray(y_val[:k])
        else:
            k = min(PROBE_ROWS, n)
            probe_X, probe_y = self._rows_as(X[:k], y.dtype, ones=True), y[:k]
        return _TrainingData(X, rows, y, X_val, y_val, probe_X, probe_y, batch_size)

    def _optimizer(self, net):
        """A fresh optimiser for this fit (scikit-learn builds one per fit too)."""
        if self.solver == "adam":
            return AdamOptimizer(net.theta.size, net.dtype, self.learning_rate_init,
                                 self.beta_1, self.beta_2, self.epsilon)
        return SGDOptimizer(net.theta.size, net.dtype, self.learning_rate_init,
                            self.learning_rate, self.momentum, self.nesterovs_momentum,
                            self.power_t)

    def _fit_stochastic(self, net, X, y, watch=None):
        data = self._training_data(X, y)
        net.ensure(data.batch_size)
        optimizer = self._optimizer(net)
        epochs = _epoch_rows(data.X, data.rows, data.y, data.y.dtype, self.shuffle,
                             self._random_state)
        alpha = float(self.alpha)
        self.constant_loss_ = _constant_loss(net, data.y)
        self._loss_tol = self._loss_tolerance()
        last_good = net.theta.copy()
        best = None  # the parameters of the best validation score (early stopping)
        self.n_iter_ = 0
        for _ in range(self.max_iter):
            started = time.perf_counter()
            X_epoch, y_epoch = next(epochs)
            probe = (data.probe_X, data.probe_y) if self.monitor_health and health_due(
                len(self.history_["loss"]) + 1) else None
            loss = _run_epoch(net, optimizer, X_epoch, y_epoch, data.batch_size, alpha, probe)
            self.n_iter_ += 1
            self.loss_ = loss
            self.t_ += data.y.shape[0]
            if not (math.isfinite(loss) and np.isfinite(net.theta).all()):
                net.theta[...] = last_good
                self._record_epoch(net, data, loss, started, watch)
                self._warn_diverged()
                break
            last_good[...] = net.theta
            if self._track_improvement(net, data, loss):
                best = net.theta.copy()
            self._record_epoch(net, data, loss, started, watch)
            optimizer.iteration_ends(self.t_)
            if self._no_improvement_count > self.n_iter_no_change:
                if optimizer.trigger_stopping():
                    break
                self._no_improvement_count = 0
            if self.n_iter_ == self.max_iter:
                warnings.warn(
                    f"Stochastic Optimizer: Maximum iterations ({self.max_iter}) reached and "
                    "the optimization hasn't converged yet.", ConvergenceWarning, stacklevel=3)
        hist = self.history_
        if self.monitor_health and hist["loss"] and (
                not hist["health_epoch"] or hist["health_epoch"][-1] != len(hist["loss"])):
            self._measure_health(net, data)  # the last epoch is always measured
        if best is not None:
            net.theta[...] = best
            if watch is not None and hist["test_loss"]:
                # the last held-out point is of the parameters fit returns (the best epoch's)
                self._watch(net, watch, replace=True)
        self.health_ = {key: self.history_[key][-1] if self.history_[key] else []
                        for key in ("dead", "saturated", "grad_norm")}

    def _loss_tolerance(self) -> float:
        """The improvement of the training loss that counts as progress.

        ``tol_mode="absolute"``: ``tol`` itself (scikit-learn's rule). ``"relative"``:
        ``tol * constant_loss_``, a share of the loss of predicting the training mean,
        so that the rule reads every head's loss on its own scale: a head whose
        loss is numerically small (the squared error of a target mapped to [0, 1] is
        about a twentieth of a standardised target's) does not stop early for it.
        A constant target (``constant_loss_`` 0) keeps ``tol``.
        """
        if self.tol_mode == "relative" and math.isfinite(self.constant_loss_) \
                and self.constant_loss_ > 0:
            return float(self.tol) * self.constant_loss_
        return float(self.tol)

    def _track_improvement(self, net, data, loss) -> bool:
        """scikit-learn's no-improvement count after an epoch, on the validation score
        (early stopping) or the training loss. True when the validation score is a new best.

        The training loss must fall by :meth:`_loss_tolerance`; the validation score
        (R^2 or accuracy, already free of the target's scale) by ``tol`` in both modes."""
        if data.X_val is None:
            if loss > self.best_loss_ - self._loss_tol:
                self._no_improvement_count += 1
            else:
                self._no_improvement_count = 0
            self.best_loss_ = min(self.best_loss_, loss)
            return False
        p_val, val_loss = net.predict_with_loss(data.X_val, data.y_val)
        score = self._score_val(p_val, data.y_val)
        self.validation_scores_.append(score)
        self.history_["val_score"].append(score)
        self.history_["val_loss"].append(val_loss)
        if score < self.best_validation_score_ + self.tol:
            self._no_improvement_count += 1
        else:
            self._no_improvement_count = 0
        if score > self.best_validation_score_:
            self.best_validation_score_ = score
            return True
        return False

    def _record_epoch(self, net, data, loss, started, watch=None):
        """The epoch's loss, the held-out loss and score, the health (on its schedule,
        :func:`health_due`) and the epoch's wall time."""
        self.loss_curve_.append(loss)
        hist = self.history_
        hist["loss"].append(loss)
        if watch is not None:
            self._watch(net, watch)
        if self.monitor_health and health_due(len(hist["loss"])):
            self._measure_health(net, data)
        hist["seconds"].append(time.perf_counter() - started)
        if self.verbose:
            print(f"Iteration {self.n_iter_}, loss = {loss:.8f}")

    def _measure_health(self, net, data):
        hist = self.history_
        dead, saturated, grad_norm = measure(net, data.probe_X, data.probe_y)
        hist["dead"].append(dead)
        hist["saturated"].append(saturated)
        hist["grad_norm"].append(grad_norm)
        hist["health_epoch"].append(len(hist["loss"]))

    def _watch(self, net, watch, replace=False):
        """The held-out rows' loss (and score) for the parameters as they stand."""
        raw, loss = net.predict_with_loss(watch.X, watch.y)
        hist = self.history_
        values = [("test_loss", float(loss))]
        if watch.score is not None:
            values.append(("test_score", float(watch.score(self._output(raw)))))
        for key, value in values:
            if replace:
                hist[key][-1] = value
            else:
                hist[key].append(value)

    def _warn_diverged(self):
        self.diverged_ = True
        warnings.warn(
            f"training diverged at epoch {self.n_iter_} (non-finite loss); the parameters of "
            "the last finite epoch are kept. Lower the learning rate (learning_rate_init).",
            DivergenceWarning, stacklevel=4)

    # -- predict ------------------------------------------------------------------
    def _forward(self, X):
        check_is_fitted(self, "coefs_")
        X = validate_data(self, X, reset=False, dtype=(np.float64, np.float32))
        dtype = np.dtype(self.dtype)
        net = self._net_for_predict()
        with np.errstate(over="ignore", invalid="ignore", under="ignore"):
            if X.dtype == dtype or X.shape[0] <= PREDICT_CHUNK:
                return net.predict_raw(np.ascontiguousarray(X, dtype=dtype))
            # cast one chunk at a time (the chunks predict_raw computes in), not all rows
            return np.concatenate([
                net.predict_raw(np.ascontiguousarray(X[start:start + PREDICT_CHUNK], dtype))
                for start in range(0, X.shape[0], PREDICT_CHUNK)])

    def _net_for_predict(self):
        # coefs_/intercepts_ may have been replaced by the user: rebuild the flat net if so
        net = getattr(self, "_net", None)
        if net is None or any(w is not c for w, c in zip(net.weights, self.coefs_)) or any(
                b is not c for b, c in zip(net.intercepts, self.intercepts_)):
            units = [self.coefs_[0].shape[0]] + [c.shape[1] for c in self.coefs_]
            head = act.resolve_head(self.out_activation_, self._task)
            net = Network(units, list(self.hidden_activations_), head,
                          np.dtype(self.dtype), float(self.leaky_slope))
            for w, c in zip(net.weights, self.coefs_):
                w[...] = c
            for b, c in zip(net.intercepts, self.intercepts_):
                b[...] = c
        return net

    def __getstate__(self):
        # the flat training network (which holds the registry's functions) is rebuilt
        # on demand, so a saved model holds only plain arrays and scikit-learn types
        state = dict(super().__getstate__())
        state.pop("_net", None)
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
    output_init : {"mean", "sklearn"}, default="mean"
        ``mean``: the fair start -- output weights 0 and output intercept at the
        head's inverse link of the training mean, so the untrained network predicts
        the mean (class shares for a classifier) for every row, whatever the head.
        ``sklearn``: scikit-learn's draw for the output layer too (with ``tol_mode=
        "absolute"`` the fit then follows ``MLPRegressor``/``MLPClassifier`` exactly).
        The hidden layers get the same draws either way.
    tol_mode : {"relative", "absolute"}, default="relative"
        Without early stopping, training stops once the loss has not fallen by
        ``tol * constant_loss_`` (``relative``) or by ``tol`` (``absolute``,
        scikit-learn's rule) for ``n_iter_no_change`` epochs. With early stopping the
        validation score must rise by ``tol`` in both modes.
    dtype : {"float32", "float64"}, default="float32"
    monitor_health : bool, default=True
        Measure dead / saturated units and gradient norms after each of the first
        :data:`HEALTH_EVERY_EPOCH_UNTIL` epochs, then every :data:`HEALTH_STRIDE`-th
        and always after the last (:func:`health_due`).

    Attributes
    ----------
    coefs_, intercepts_ : list of ndarray
    loss_ : float
    loss_curve_ : list of float
    constant_loss_ : float
        The data loss of predicting the training mean (class shares) for every
        row, in the network's units: where the fair start begins, and the scale of
        the relative stopping rule.
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
        Lists, one entry per epoch unless said otherwise (a warm start appends):

        - ``loss``: the training loss (the head's matched loss plus the L2 term,
          as ``loss_curve_``);
        - ``val_loss``, ``val_score``: early stopping's validation rows, the head's
          loss and R^2 / accuracy (empty without early stopping);
        - ``test_loss``: with ``fit(..., held_out=...)``, the held-out rows' data
          loss, the training loss's definition and units without the L2 term;
          ``test_score``: with ``held_out_score``, its value per epoch. Both are
          of the parameters after that epoch, except that with early stopping
          the last entry is of the best epoch's parameters, which fit returns
          (empty without held-out rows);
        - ``dead``, ``saturated`` (one share per hidden layer) and ``grad_norm``
          (one per weight matrix), measured on the schedule of :func:`health_due`;
          ``health_epoch``: the epochs they were measured after (1-based positions
          in ``loss``; the last epoch is always among them);
        - ``seconds``: each epoch's wall time.
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

    def _output(self, p):
        return p.ravel() if p.shape[1] == 1 else p

    def predict(self, X):
        """Predict targets for ``X`` (in the units the network was trained on)."""
        return self._output(self._forward(X))


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
            found = _text_classes(y)
            # the kind of a 1-D array of text labels is that of its distinct labels (see
            # _text_classes), found without sorting every row's string again
            kind = type_of_target(y if found is None else found[0])
            if kind not in ("binary", "multiclass", "multilabel-indicator"):
                raise ValueError(f"Unknown label type: {kind!r}; NetClassifier needs class labels")
            # fitted on the classes alone (the same classes_ and y_type_ as on every row,
            # at a fraction of the cost for string labels); _binarize does the rows
            self._label_binarizer = LabelBinarizer()
            if y.ndim == 1:
                classes, codes = np.unique(y, return_inverse=True) if found is None else found
                self._label_binarizer.fit(classes)
                self.classes_ = self._label_binarizer.classes_
                return self._binarize(y, codes.reshape(-1))
            self._label_binarizer.fit(y)
            self.classes_ = self._label_binarizer.classes_
        else:
            classes = unique_labels(y)
            if set(classes) != set(self.classes_):
                raise ValueError(
                    "warm_start can only be used where `y` has the same classes as in the "
                    f"previous call to fit. Previously got {self.classes_}, `y` has {classes}")
        return self._binarize(y)

    def _binarize(self, y, codes=None):
        """``LabelBinarizer.transform(y)`` for class labels: one 0/1 column per class (one
        column, the second class, for two classes or fewer); a label outside ``classes_``
        gets zeros. ``codes``: each row's position in ``classes_`` when known (fit finds them
        with the classes, ``numpy.unique``); else located by binary search rather than through
        ``label_binarize``'s checks, whose cost for string labels was a noticeable share of
        a short fit (a test compares both on binary, multiclass and unseen labels)."""
        lb = self._label_binarizer
        if y.ndim != 1 or lb.y_type_ not in ("binary", "multiclass"):
            return lb.transform(y)
        classes = lb.classes_
        if codes is None:  # positions in classes_; given when y made classes_
            codes = np.searchsorted(classes, y)
            known = (codes < classes.size) & (classes[np.minimum(codes, classes.size - 1)] == y)
        else:
            known = np.ones(y.shape[0], dtype=bool)
        pos = codes
        if lb.y_type_ == "binary":
            if classes.size < 2:
                return np.zeros((y.shape[0], 1), dtype=int)
            return (known & (pos == 1)).astype(int).reshape(-1, 1)
        out = np.zeros((y.shape[0], classes.size), dtype=int)
        out[np.flatnonzero(known), pos[known]] = 1
        return out

    def _resolve_head(self, y2d):
        kind = self._label_binarizer.y_type_
        auto = "softmax" if kind == "multiclass" else "logistic"
        name = auto if self.output_activation == "auto" else self.output_activation
        head = act.resolve_head(name, "classification")
        # a distribution over two units (softmax) is a valid, if unusual, head for two
        # classes; a logistic unit per class cannot give one distribution over 3+ classes
        if head.name != auto and not (head.distribution and kind == "binary"):
            n = len(self.classes_)
            raise ValueError(
                f"output head {head.name!r} cannot serve a target with {n} classes: use "
                f"{auto!r} ('logistic' is for two classes, 'softmax' for two or more)")
        return head

    def _adapt_y(self, y, head):
        # two classes under a distribution head (softmax): one unit per class, [1 - y, y]
        if head.distribution and y.shape[1] == 1:
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
        return self._output(self._forward(X))

    def _output(self, p):
        # what predict_proba returns for the network's raw output p
        if p.shape[1] == 1:
            out = np.empty((p.shape[0], 2), dtype=p.dtype)
            np.subtract(1, p[:, 0], out=out[:, 0])
            out[:, 1] = p[:, 0]
            return out
        return p

    def predict_log_proba(self, X):
        """Logarithm of :meth:`predict_proba`."""
        with np.errstate(divide="ignore"):
            return np.log(self.predict_proba(X))
