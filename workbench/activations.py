"""Hidden activations and output heads: one registry, used everywhere.

Each hidden activation carries its function, its derivative, its range and a
formula / one-line description (the window's tooltips read them). Each output
head carries its activation, the loss it is matched with, the task it serves
and the range of values it can produce (the compatibility guard reads it).

The engine never branches on names: it looks functions up here.

References
----------
- Glorot, Bordes & Bengio (2011), "Deep sparse rectifier neural networks" (ReLU).
- Maas, Hannun & Ng (2013), "Rectifier nonlinearities improve neural network
  acoustic models" (leaky ReLU, slope 0.01).
- Clevert, Unterthiner & Hochreiter (2016), "Fast and accurate deep network
  learning by exponential linear units (ELUs)" (ELU, alpha = 1).
- Klambauer, Unterthiner, Mayr & Hochreiter (2017), "Self-normalizing neural
  networks" (SELU constants lambda and alpha).
- Hendrycks & Gimpel (2016), "Gaussian error linear units (GELUs)" (exact erf form).
- Elfwing, Uchibe & Doya (2018), "Sigmoid-weighted linear units for neural network
  function approximation" (SiLU); Ramachandran, Zoph & Le (2017) call it swish.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from scipy.special import erf, expit

# Klambauer et al. (2017), eq. 14 / section "SELU": the fixed-point constants.
SELU_ALPHA = 1.6732632423543772848170429916717
SELU_LAMBDA = 1.0507009873554804934193349852946
ELU_ALPHA = 1.0  # Clevert et al. (2016) use alpha = 1 throughout
LEAKY_SLOPE = 0.01  # Maas et al. (2013)

_SQRT_HALF = 1.0 / math.sqrt(2.0)
_INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)

INF = math.inf


# --------------------------------------------------------------------------- hidden


@dataclass(frozen=True)
class Activation:
    """A hidden-layer activation.

    ``forward(z, **params)`` returns ``f(z)`` as a new array; ``apply_(z, **params)``
    overwrites ``z`` with ``f(z)`` and returns it (the engine's fast path).
    ``derivative(z, a, **params)`` returns ``f'(z)`` given both the
    pre-activation ``z`` and the activation ``a = f(z)``; when
    ``needs_z`` is false it only reads ``a``, so the engine need not keep ``z``.
    """

    name: str
    forward: Callable
    apply_: Callable
    derivative: Callable
    low: float
    high: float
    formula: str
    description: str
    needs_z: bool = True
    saturates: bool = False
    params: dict = field(default_factory=dict)

    @property
    def range_text(self) -> str:
        lo = "-inf" if self.low == -INF else f"{self.low:g}"
        hi = "inf" if self.high == INF else f"{self.high:g}"
        lo_b = "(" if self.low == -INF or self.name in _OPEN_LOW else "["
        hi_b = ")"
        return f"{lo_b}{lo}, {hi}{hi_b}"

    @property
    def tooltip(self) -> str:
        return f"{self.name}: {self.formula}; range {self.range_text}. {self.description}"


_OPEN_LOW = {"logistic", "tanh", "softplus", "elu", "selu"}


def _identity(z, **_):
    return np.array(z, copy=True)


def _identity_(z, **_):
    return z


def _identity_d(z, a, **_):
    return np.ones_like(a)


def _logistic(z, **_):
    return expit(z)


def _logistic_(z, **_):
    return expit(z, out=z)


def _logistic_d(z, a, **_):
    return a * (1.0 - a)


def _tanh(z, **_):
    return np.tanh(z)


def _tanh_(z, **_):
    return np.tanh(z, out=z)


def _tanh_d(z, a, **_):
    return 1.0 - a * a


def _relu(z, **_):
    return np.maximum(z, 0)


def _relu_(z, **_):
    return np.maximum(z, 0, out=z)


def _relu_d(z, a, **_):
    # scikit-learn's convention: the derivative at 0 is 0 (it tests a == 0).
    return (a > 0).astype(a.dtype)


def _leaky(z, slope=LEAKY_SLOPE, **_):
    z = np.asarray(z)
    return np.where(z > 0, z, z * slope)


def _leaky_(z, slope=LEAKY_SLOPE, **_):
    neg = z < 0
    z[neg] *= slope
    return z


def _leaky_d(z, a, slope=LEAKY_SLOPE, **_):
    d = np.ones_like(a)
    d[a <= 0] = slope
    return d


def _elu_core(z, alpha):
    z = np.asarray(z)
    # expm1 only on the non-positive part, so large z never overflows
    return np.where(z > 0, z, alpha * np.expm1(np.minimum(z, 0)))


def _elu(z, alpha=ELU_ALPHA, **_):
    return _elu_core(z, alpha).astype(np.result_type(z, np.float32), copy=False)


def _elu_(z, alpha=ELU_ALPHA, **_):
    z[...] = _elu_core(z, alpha)
    return z


def _elu_d(z, a, alpha=ELU_ALPHA, **_):
    # for z <= 0: d/dz alpha*(e^z - 1) = alpha*e^z = a + alpha
    return np.where(z > 0, 1.0, a + alpha).astype(a.dtype, copy=False)


def _selu(z, **_):
    return (SELU_LAMBDA * _elu_core(z, SELU_ALPHA)).astype(np.result_type(z, np.float32), copy=False)


def _selu_(z, **_):
    z[...] = SELU_LAMBDA * _elu_core(z, SELU_ALPHA)
    return z


def _selu_d(z, a, **_):
    # for z <= 0: lambda*alpha*e^z = a + lambda*alpha
    return np.where(z > 0, SELU_LAMBDA, a + SELU_LAMBDA * SELU_ALPHA).astype(a.dtype, copy=False)


def _gelu(z, **_):
    z = np.asarray(z)
    return 0.5 * z * (1.0 + erf(z * _SQRT_HALF))


def _gelu_(z, **_):
    z[...] = _gelu(z)
    return z


def _gelu_d(z, a, **_):
    # d/dz z*Phi(z) = Phi(z) + z*phi(z)
    cdf = 0.5 * (1.0 + erf(z * _SQRT_HALF))
    pdf = _INV_SQRT_2PI * np.exp(-0.5 * z * z)
    return (cdf + z * pdf).astype(a.dtype, copy=False)


def _silu(z, **_):
    z = np.asarray(z)
    return z * expit(z)


def _silu_(z, **_):
    z *= expit(z)
    return z


def _silu_d(z, a, **_):
    s = expit(z)
    return (s * (1.0 + z * (1.0 - s))).astype(a.dtype, copy=False)


def _softplus(z, **_):
    # log(1 + e^z) without overflow: logaddexp(0, z)
    return np.logaddexp(0, z)


def _softplus_(z, **_):
    return np.logaddexp(0, z, out=z)


def _softplus_d(z, a, **_):
    return expit(z)


HIDDEN: dict[str, Activation] = {}


def _register(act: Activation):
    HIDDEN[act.name] = act


_register(Activation("identity", _identity, _identity_, _identity_d, -INF, INF, "f(z) = z",
                     "No non-linearity: the network stays a linear model.", needs_z=False))
_register(Activation("logistic", _logistic, _logistic_, _logistic_d, 0.0, 1.0,
                     "f(z) = 1 / (1 + e^-z)",
                     "Smooth and bounded; saturates for large |z| so gradients can vanish.",
                     needs_z=False, saturates=True))
_register(Activation("tanh", _tanh, _tanh_, _tanh_d, -1.0, 1.0, "f(z) = tanh(z)",
                     "Zero-centred and bounded; saturates for large |z|.", needs_z=False,
                     saturates=True))
_register(Activation("relu", _relu, _relu_, _relu_d, 0.0, INF, "f(z) = max(0, z)",
                     "The usual default; units stuck below zero stop learning (dead units).",
                     needs_z=False))
_register(Activation("leaky_relu", _leaky, _leaky_, _leaky_d, -INF, INF,
                     "f(z) = z if z > 0 else a*z (a = 0.01)",
                     "ReLU with a small slope below zero, so units cannot die completely.",
                     needs_z=False, params={"slope": LEAKY_SLOPE}))
_register(Activation("elu", _elu, _elu_, _elu_d, -ELU_ALPHA, INF,
                     "f(z) = z if z > 0 else a*(e^z - 1) (a = 1)",
                     "Smooth below zero with a negative floor; mean activations nearer zero.",
                     params={"alpha": ELU_ALPHA}))
_register(Activation("selu", _selu, _selu_, _selu_d, -SELU_LAMBDA * SELU_ALPHA, INF,
                     "f(z) = l*z if z > 0 else l*a*(e^z - 1) (l = 1.0507, a = 1.6733)",
                     "Scaled ELU whose constants keep activations near zero mean, unit variance."))
_register(Activation("gelu", _gelu, _gelu_, _gelu_d, -0.16997120747990, INF,
                     "f(z) = z * Phi(z) (Phi = standard normal CDF, exact erf form)",
                     "Smooth ReLU-like gate weighted by the normal CDF."))
_register(Activation("silu", _silu, _silu_, _silu_d, -0.27846454276107, INF,
                     "f(z) = z / (1 + e^-z)",
                     "Smooth, non-monotonic ReLU-like gate (also called swish)."))
_register(Activation("softplus", _softplus, _softplus_, _softplus_d, 0.0, INF,
                     "f(z) = log(1 + e^z)",
                     "A smooth ReLU that is never exactly flat, so never dead."))

HIDDEN_ALIASES = {"sigmoid": "logistic", "swish": "silu", "linear": "identity"}

#: hidden activations scikit-learn's own MLP implements
SKLEARN_HIDDEN = ("identity", "logistic", "tanh", "relu")


def hidden_names() -> list[str]:
    return list(HIDDEN)


def resolve_hidden(name: str) -> str:
    """Canonical name of a hidden activation, accepting aliases.

    Raises
    ------
    ValueError
        naming every valid choice when ``name`` is unknown.
    """
    if not isinstance(name, str):
        raise ValueError(f"activation must be a string, got {name!r}")
    key = name.strip().lower()
    key = HIDDEN_ALIASES.get(key, key)
    if key not in HIDDEN:
        choices = ", ".join(list(HIDDEN) + [f"{a} (= {b})" for a, b in HIDDEN_ALIASES.items()])
        raise ValueError(f"unknown hidden activation {name!r}; choose one of: {choices}")
    return key


def get_hidden(name: str) -> Activation:
    return HIDDEN[resolve_hidden(name)]


# --------------------------------------------------------------------------- output heads


def _softmax_(z):
    z -= z.max(axis=1, keepdims=True)
    np.exp(z, out=z)
    z /= z.sum(axis=1, keepdims=True)
    return z


def _exp_(z):
    # clip so that e^z stays finite in the array's precision (no overflow warnings)
    hi = np.log(np.finfo(z.dtype).max) - 1.0
    np.minimum(z, hi, out=z)
    return np.exp(z, out=z)


@dataclass(frozen=True)
class Head:
    """An output head: output activation + matched loss + the task it serves.

    ``apply_(z)`` overwrites the output pre-activation with the prediction.
    ``delta_factor(z, a)`` is the head's derivative that the output delta must
    carry when the head is *not* the canonical link of its loss (None when it
    is canonical, so that delta = prediction - target).
    """

    name: str
    task: str  # "regression" or "classification"
    loss: str  # "squared_error", "poisson", "log_loss"
    apply_: Callable
    low: float
    high: float
    formula: str
    description: str
    serves: str
    delta_factor: Callable | None = None

    @property
    def canonical(self) -> bool:
        return self.delta_factor is None

    @property
    def key(self) -> tuple[str, str]:
        return (self.task, self.name)

    @property
    def tooltip(self) -> str:
        lo = "-inf" if self.low == -INF else f"{self.low:g}"
        hi = "inf" if self.high == INF else f"{self.high:g}"
        return (f"{self.name}: {self.formula}, range [{lo}, {hi}], loss {LOSS_LABELS[self.loss]}. "
                f"{self.description}")


LOSS_LABELS = {
    "squared_error": "half squared error",
    "poisson": "half Poisson deviance",
    "log_loss": "log-loss (cross-entropy)",
}

HEADS: dict[tuple[str, str], Head] = {}


def _register_head(h: Head):
    HEADS[h.key] = h


_register_head(Head("identity", "regression", "squared_error", lambda z: z, -INF, INF,
                    "y = z", "Linear output for a signed (or any real) target.",
                    serves="signed regression"))
_register_head(Head("exp", "regression", "poisson", _exp_, 0.0, INF, "y = e^z",
                    "Positive output matched with the Poisson deviance, for counts.",
                    serves="count regression"))
_register_head(Head("relu", "regression", "squared_error", lambda z: np.maximum(z, 0, out=z),
                    0.0, INF, "y = max(0, z)",
                    "Non-negative output; exact zeros are reachable.",
                    serves="non-negative regression",
                    delta_factor=lambda z, a: (a > 0).astype(a.dtype)))
_register_head(Head("softplus", "regression", "squared_error",
                    lambda z: np.logaddexp(0, z, out=z), 0.0, INF, "y = log(1 + e^z)",
                    "Smooth non-negative output that never goes flat.",
                    serves="non-negative regression",
                    delta_factor=lambda z, a: expit(z)))
_register_head(Head("logistic", "regression", "squared_error", lambda z: expit(z, out=z),
                    0.0, 1.0, "y = 1 / (1 + e^-z)",
                    "Output bounded in [0, 1], for a target scaled to its known interval.",
                    serves="bounded regression",
                    delta_factor=lambda z, a: a * (1.0 - a)))
_register_head(Head("logistic", "classification", "log_loss", lambda z: expit(z, out=z),
                    0.0, 1.0, "p = 1 / (1 + e^-z)",
                    "Probability of the positive class, matched with log-loss.",
                    serves="binary classification"))
_register_head(Head("softmax", "classification", "log_loss", _softmax_, 0.0, 1.0,
                    "p_k = e^z_k / sum_j e^z_j",
                    "One probability per class, summing to one, matched with log-loss.",
                    serves="multiclass classification"))

HEAD_ALIASES = {"linear": "identity", "sigmoid": "logistic"}

#: the head scikit-learn's own MLP uses, per (task, loss)
SKLEARN_HEADS = {("regression", "identity"), ("regression", "exp"),
                 ("classification", "logistic"), ("classification", "softmax")}


def head_names(task: str | None = None) -> list[str]:
    names = []
    for (t, n) in HEADS:
        if (task is None or t == task) and n not in names:
            names.append(n)
    return names


def resolve_head(name: str, task: str) -> Head:
    """The head called ``name`` for ``task`` ("regression" or "classification").

    Raises
    ------
    ValueError
        naming the valid heads for the task, or saying why a head cannot serve it.
    """
    if not isinstance(name, str):
        raise ValueError(f"output_activation must be a string, got {name!r}")
    key = name.strip().lower()
    key = HEAD_ALIASES.get(key, key)
    if (task, key) in HEADS:
        return HEADS[(task, key)]
    valid = ", ".join(head_names(task))
    other = [t for (t, n) in HEADS if n == key]
    if other:
        raise ValueError(
            f"output head {name!r} cannot serve {task}: it is a head for {other[0]} "
            f"({HEADS[(other[0], key)].serves}); for {task} choose one of: {valid}")
    raise ValueError(f"unknown output head {name!r}; for {task} choose one of: {valid}")
