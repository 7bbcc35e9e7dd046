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
from scipy.special import expit, ndtr

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


# np.where is avoided below: on batch-sized arrays it is about ten times slower than
# the arithmetic forms, which give the same values.


def _as_float(z):
    z = np.asarray(z)
    return z if z.dtype.kind == "f" else z.astype(np.float64)


def _step(z):
    """1.0 where z > 0, else 0.0, in z's float type."""
    return np.greater(z, 0).astype(z.dtype)


def _leaky(z, slope=LEAKY_SLOPE, **_):
    z = _as_float(z)
    # for 0 <= slope < 1, leaky_relu(z) = max(z, slope*z)
    return np.maximum(z, z * slope)


def _leaky_(z, slope=LEAKY_SLOPE, **_):
    return np.maximum(z, z * slope, out=z)


def _leaky_d(z, a, slope=LEAKY_SLOPE, **_):
    d = _step(a)
    d *= 1.0 - slope
    d += slope
    return d


def _elu_core(z, alpha):
    z = _as_float(z)
    # max(z, 0) + alpha*expm1(min(z, 0)): expm1 only sees z <= 0, so it never overflows
    out = np.minimum(z, 0)
    np.expm1(out, out=out)
    out *= alpha
    out += np.maximum(z, 0)
    return out


def _elu(z, alpha=ELU_ALPHA, **_):
    return _elu_core(z, alpha)


def _elu_(z, alpha=ELU_ALPHA, **_):
    z[...] = _elu_core(z, alpha)
    return z


def _elu_gate(z, alpha, scale):
    # scale * (alpha*e^z for z <= 0, 1 for z > 0) = scale*(alpha*e^min(z,0) + (1-alpha)*[z>0])
    z = _as_float(z)
    d = np.minimum(z, 0)
    np.exp(d, out=d)
    d *= alpha * scale
    if alpha != 1.0:  # with alpha = 1, e^min(z, 0) is already 1 above zero
        d += (1.0 - alpha) * scale * _step(z)
    return d


def _elu_d(z, a, alpha=ELU_ALPHA, **_):
    # for z <= 0: d/dz alpha*(e^z - 1) = alpha*e^z; 1 above zero
    return _elu_gate(z, alpha, 1.0).astype(a.dtype, copy=False)


def _selu(z, **_):
    out = _elu_core(z, SELU_ALPHA)
    out *= SELU_LAMBDA
    return out


def _selu_(z, **_):
    z[...] = _selu(z)
    return z


def _selu_d(z, a, **_):
    # lambda*alpha*e^z for z <= 0, lambda above zero
    return _elu_gate(z, SELU_ALPHA, SELU_LAMBDA).astype(a.dtype, copy=False)


def _fast_expit(z):
    """The logistic function as 0.5 * (1 + tanh(z / 2)), an exact identity.

    NumPy's tanh is vectorised; scipy.special.expit is several times slower on the
    batch-sized arrays the engine uses. Never overflows; for very negative z the
    value underflows to 0 where expit would give a tiny positive number.
    """
    z = np.asarray(z)
    s = np.multiply(z, 0.5)
    np.tanh(s, out=s)
    s += 1
    s *= 0.5
    return s


def _gate_from_output(z, a):
    """g = a / z for gated activations a = z * g(z), with g(0) = 1/2.

    Recovers GELU's Phi(z) or SiLU's sigmoid(z) from the forward pass's output, so
    the derivative needs no second erf / exp. Exact to a few ulp where |z| > 1e-30.
    """
    z = np.asarray(z)
    a = np.asarray(a)
    safe = np.abs(z) > 1e-30
    g = np.divide(a, z, out=np.full_like(a, 0.5), where=safe)
    return g


# Chebyshev fit of erfc with fractional error below 1.2e-7 everywhere (Press, Teukolsky,
# Vetterling & Flannery, "Numerical Recipes", 2nd ed. 1992, section 6.2, erfcc):
# erfc(x) = t * exp(-x^2 + P(t)), t = 1 / (1 + x/2), x >= 0.
_ERFC_COEF = (-1.26551223, 1.00002368, 0.37409196, 0.09678418, -0.18628806, 0.27886807,
              -1.13520398, 1.48851587, -0.82215223, 0.17087277)


def _normal_cdf_f32(z):
    """Phi(z) for a float32 array, to float32 precision (relative error ~1e-7).

    scipy.special.erf evaluates in double precision without vectorisation; on the
    engine's batch arrays this form is about three times faster. float64 arrays use
    scipy.special.ndtr (see :func:`_normal_cdf`).
    """
    u = np.abs(z)
    u *= _SQRT_HALF
    t = u * 0.5
    t += 1
    np.reciprocal(t, out=t)
    p = np.full_like(t, _ERFC_COEF[-1])
    for c in _ERFC_COEF[-2::-1]:
        p *= t
        p += c
    u *= u
    p -= u
    np.exp(p, out=p)
    p *= t
    p *= 0.5  # c = Phi(-|z|) = erfc(|z| / sqrt 2) / 2, accurate in the tail
    # Phi(z) = c for z < 0 and 1 - c for z >= 0
    flip = np.greater_equal(z, 0).astype(z.dtype)
    out = np.multiply(p, -2.0)
    out += 1
    out *= flip
    out += p
    return out


def _normal_cdf(z):
    z = np.asarray(z)
    if z.dtype == np.float32:
        return _normal_cdf_f32(z)
    # scipy's ndtr is 0.5 * erfc(-z / sqrt 2): the exact erf form, without the
    # cancellation 1 + erf(z / sqrt 2) suffers in the left tail
    return ndtr(z)


def _gelu(z, **_):
    z = np.asarray(z)
    return z * _normal_cdf(z)


def _gelu_(z, **_):
    z[...] = _gelu(z)
    return z


def _gelu_d(z, a, **_):
    # d/dz z*Phi(z) = Phi(z) + z*phi(z); Phi(z) = a / z from the forward pass
    cdf = _gate_from_output(z, a)
    pdf = _INV_SQRT_2PI * np.exp(-0.5 * z * z)
    return (cdf + z * pdf).astype(a.dtype, copy=False)


def _silu(z, **_):
    z = np.asarray(z)
    return z * _fast_expit(z)


def _silu_(z, **_):
    z *= _fast_expit(z)
    return z


def _silu_d(z, a, **_):
    # d/dz z*s(z) = s + z*s*(1 - s), with s = sigmoid(z) = a / z from the forward pass
    s = _gate_from_output(z, a)
    return (s * (1.0 + z * (1.0 - s))).astype(a.dtype, copy=False)


def _softplus(z, **_):
    # log(1 + e^z) = max(z, 0) + log1p(e^-|z|): never overflows, and these vectorised
    # NumPy calls are an order of magnitude faster than np.logaddexp on batch arrays
    z = np.asarray(z)
    t = np.abs(z)
    np.negative(t, out=t)
    np.exp(t, out=t)
    np.log1p(t, out=t)
    t += np.maximum(z, 0)
    return t


def _softplus_(z, **_):
    z[...] = _softplus(z)
    return z


def _softplus_d(z, a, **_):
    return _fast_expit(z).astype(a.dtype, copy=False)


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
                    _softplus_, 0.0, INF, "y = log(1 + e^z)",
                    "Smooth non-negative output that never goes flat.",
                    serves="non-negative regression",
                    delta_factor=lambda z, a: _fast_expit(z).astype(a.dtype, copy=False)))
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
