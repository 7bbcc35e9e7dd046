"""Hidden activations and output heads: one registry, the one place for each fact.

Each hidden activation (:class:`Activation`) carries its function, its derivative,
its range, its ONNX form, the facts the engine and the health measurement read
(whether it saturates, whether it is piecewise linear, whether it maps 1 to 1,
which initialisation family it belongs to, scikit-learn's Glorot factor for it),
its aliases and a formula / one-line description (the window's tooltips read
them). Each output head (:class:`Head`) carries its activation, its derivative
when it is not the canonical link of its loss, the loss it is matched with
(:mod:`workbench.nets.losses`), the task it serves, the range of values it can
produce (the compatibility guard reads it) and its ONNX form.

Nothing else lists these names or facts: the engine, the health measurement, the
ONNX converter and the configuration schema's test all read them here.

ONNX forms are written against a small graph-builder protocol, so this module
needs no ONNX import: ``graph.node(op, inputs, output=None, **attributes)`` adds
one node of the standard ``ai.onnx`` domain and returns its output name,
``graph.const(hint, value)`` adds a constant in the graph's float type and returns
its name, and ``graph.np_dtype`` is that float type
(:class:`workbench.export.onnx_graph._Emitter` implements it).

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
- Glorot & Bengio (2010), "Understanding the difficulty of training deep feedforward
  neural networks" (uniform bound sqrt(6 / (fan_in + fan_out))).
- He, Zhang, Ren & Sun (2015), "Delving deep into rectifiers" (bound sqrt(6 / fan_in)).
- ONNX operator specification, https://onnx.ai/onnx/operators/ (opset 17).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from scipy.special import expit, logit, ndtr

from workbench.nets import losses
from workbench.nets.losses import LOSS_LABELS, Loss

# Klambauer et al. (2017), eq. 14 / section "SELU": the fixed-point constants.
SELU_ALPHA = 1.6732632423543772848170429916717
SELU_LAMBDA = 1.0507009873554804934193349852946
ELU_ALPHA = 1.0  # Clevert et al. (2016) use alpha = 1 throughout
LEAKY_SLOPE = 0.01  # Maas et al. (2013)
#: Glorot & Bengio (2010): uniform bound sqrt(6 / (fan_in + fan_out))
GLOROT_FACTOR = 6.0
#: scikit-learn's MLP uses sqrt(2 / (fan_in + fan_out)) for logistic layers
GLOROT_FACTOR_LOGISTIC = 2.0
#: He et al. (2015): uniform bound sqrt(6 / fan_in) for rectifier layers
HE_FACTOR = 6.0

_SQRT_HALF = 1.0 / math.sqrt(2.0)
_INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)

INF = math.inf

__all__ = ["Activation", "Head", "HIDDEN", "HEADS", "HIDDEN_ALIASES", "HEAD_ALIASES",
           "SKLEARN_HIDDEN", "SKLEARN_HEADS", "LOSS_LABELS", "hidden_names", "head_names",
           "resolve_hidden", "get_hidden", "resolve_hidden_layers", "resolve_head", "glorot_bound"]


# --------------------------------------------------------------------------- hidden


def glorot_bound(fan_in: int, fan_out: int, factor: float = GLOROT_FACTOR) -> float:
    """Half-width ``sqrt(factor / (fan_in + fan_out))`` of Glorot's uniform initialisation."""
    return math.sqrt(factor / (fan_in + fan_out))


@dataclass(frozen=True)
class Activation:
    """A hidden-layer activation and every fact the program knows about it.

    Attributes
    ----------
    name : str
    forward : callable
        ``forward(z, **params)`` returns ``f(z)`` as a new array.
    apply_ : callable
        ``apply_(z, **params)`` overwrites ``z`` with ``f(z)`` and returns it (the
        engine's fast path).
    derivative : callable
        ``derivative(z, a, out=None, **params)`` returns ``f'(z)`` given the
        pre-activation ``z`` and the activation ``a = f(z)``, written into ``out``
        (shaped like ``a``) when given. When ``needs_z`` is false it reads only
        ``a`` (``z`` may be None), so the engine need not keep ``z``. Training and
        the health measurement both use this function.
    onnx : callable
        ``onnx(graph, z, output=None, **params)`` emits ``f(z)`` with standard ONNX
        operators (see the module docstring) and returns the output's name.
    low, high : float
        The range: infimum and supremum of ``f``.
    formula, description : str
    needs_z : bool
    saturates : bool
        The derivative is smooth and tends to 0 in a tail, so a unit can sit where
        it barely learns; the health measurement counts such units.
    piecewise_linear : bool
        The derivative is piecewise constant (no saturation is defined: a unit is
        either dead or fully active).
    keeps_one : bool
        ``f(1) == 1`` exactly, so applying ``f`` to a buffer with a trailing column
        of ones leaves that column intact.
    he_init : bool
        A rectifier-shaped activation (``f(z) ~ z`` above zero, small below): the
        estimators' ``init="he"`` gives its layers He et al.'s bound.
    glorot_factor : float
        ``factor`` in the Glorot bound ``sqrt(factor / (fan_in + fan_out))``.
    low_attained : bool
        Whether ``f`` reaches ``low`` (closed range) or only approaches it.
    in_sklearn : bool
        scikit-learn's own MLP implements it.
    aliases : tuple of str
        Other names accepted for it.
    params : dict
        The activation's parameters and their defaults (``slope`` of leaky ReLU).
    """

    name: str
    forward: Callable
    apply_: Callable
    derivative: Callable
    onnx: Callable
    low: float
    high: float
    formula: str
    description: str
    needs_z: bool = True
    saturates: bool = False
    piecewise_linear: bool = False
    keeps_one: bool = False
    he_init: bool = False
    glorot_factor: float = GLOROT_FACTOR
    low_attained: bool = True
    in_sklearn: bool = False
    aliases: tuple = ()
    params: dict = field(default_factory=dict)

    def with_params(self, **values) -> dict:
        """The activation's parameters, with the given ``values`` for those it has.

        Values for parameters it does not have are ignored, so a caller can pass
        every setting it knows (e.g. ``slope``) to every activation.
        """
        return {k: values.get(k, v) for k, v in self.params.items()}

    def init_bound(self, fan_in: int, fan_out: int, he: bool = False) -> float:
        """Half-width of the uniform initialisation of a layer with this activation.

        ``sqrt(6 / fan_in)`` (He et al. 2015) when ``he`` is asked for and the
        activation is rectifier-shaped, else ``sqrt(glorot_factor / (fan_in + fan_out))``
        (Glorot & Bengio 2010, with scikit-learn's factor 2 for logistic).
        """
        if he and self.he_init:
            return math.sqrt(HE_FACTOR / fan_in)
        return glorot_bound(fan_in, fan_out, self.glorot_factor)

    @property
    def range_text(self) -> str:
        lo = "-inf" if self.low == -INF else f"{self.low:g}"
        hi = "inf" if self.high == INF else f"{self.high:g}"
        lo_b = "(" if self.low == -INF or not self.low_attained else "["
        hi_b = ")"
        return f"{lo_b}{lo}, {hi}{hi_b}"

    @property
    def tooltip(self) -> str:
        return f"{self.name}: {self.formula}; range {self.range_text}. {self.description}"


# np.where is avoided below: on batch-sized arrays it is about ten times slower than
# the arithmetic forms, which give the same values.


def _as_float(z):
    z = np.asarray(z)
    return z if z.dtype.kind == "f" else z.astype(np.float64)


def _into(out, values, dtype):
    """``values`` in ``out`` when given, else as an array of ``dtype``."""
    if out is None:
        return values.astype(dtype, copy=False)
    np.copyto(out, values, casting="same_kind")
    return out


def _op(op, **attributes):
    """The ONNX form of an activation that is one standard operator."""
    def form(graph, z, output=None, **_):
        return graph.node(op, [z], output=output, **attributes)

    form.__doc__ = f"``{op}``"
    return form


# identity -------------------------------------------------------------------------


def _identity(z, **_):
    return np.array(z, copy=True)


def _identity_(z, **_):
    return z


def _identity_d(z, a, out=None, **_):
    if out is None:
        return np.ones_like(a)
    out.fill(1)
    return out


def _identity_onnx(graph, z, output=None, **_):
    # a hidden identity layer needs no node; an output must still be produced by one
    return z if output is None else graph.node("Identity", [z], output=output)


# logistic, tanh --------------------------------------------------------------------


def _logistic(z, **_):
    return expit(z)


def _logistic_(z, **_):
    return expit(z, out=z)


def _logistic_d(z, a, out=None, **_):
    out = np.subtract(1.0, a, out=out)
    out *= a
    return out


def _tanh(z, **_):
    return np.tanh(z)


def _tanh_(z, **_):
    return np.tanh(z, out=z)


def _tanh_d(z, a, out=None, **_):
    out = np.multiply(a, a, out=out)
    np.subtract(1.0, out, out=out)
    return out


# relu, leaky relu -------------------------------------------------------------------


def _relu(z, **_):
    return np.maximum(z, 0)


def _relu_(z, **_):
    return np.maximum(z, 0, out=z)


def _relu_d(z, a, out=None, **_):
    # scikit-learn's convention: the derivative at 0 is 0 (it tests a == 0).
    if out is None:
        out = np.empty_like(a)
    np.greater(a, 0, out=out)  # 1.0 where active (faster than a boolean mask)
    return out


def _leaky(z, slope=LEAKY_SLOPE, **_):
    z = _as_float(z)
    # for 0 <= slope < 1, leaky_relu(z) = max(z, slope*z)
    return np.maximum(z, z * slope)


def _leaky_(z, slope=LEAKY_SLOPE, **_):
    return np.maximum(z, z * slope, out=z)


def _leaky_d(z, a, out=None, slope=LEAKY_SLOPE, **_):
    # 1 where active, slope elsewhere: slope + (1 - slope) * [a > 0]
    out = _relu_d(z, a, out)
    out *= 1.0 - slope
    out += slope
    return out


def _leaky_onnx(graph, z, output=None, slope=LEAKY_SLOPE, **_):
    return graph.node("LeakyRelu", [z], output=output, alpha=float(slope))


# elu, selu ----------------------------------------------------------------------------


def _step(z):
    """1.0 where z > 0, else 0.0, in z's float type."""
    return np.greater(z, 0).astype(z.dtype)


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


def _elu_d(z, a, out=None, alpha=ELU_ALPHA, **_):
    # for z <= 0: d/dz alpha*(e^z - 1) = alpha*e^z; 1 above zero
    return _into(out, _elu_gate(z, alpha, 1.0), a.dtype)


def _elu_onnx(graph, z, output=None, alpha=ELU_ALPHA, **_):
    return graph.node("Elu", [z], output=output, alpha=float(alpha))


def _selu(z, **_):
    out = _elu_core(z, SELU_ALPHA)
    out *= SELU_LAMBDA
    return out


def _selu_(z, **_):
    z[...] = _selu(z)
    return z


def _selu_d(z, a, out=None, **_):
    # lambda*alpha*e^z for z <= 0, lambda above zero
    return _into(out, _elu_gate(z, SELU_ALPHA, SELU_LAMBDA), a.dtype)


# gelu, silu, softplus -------------------------------------------------------------------


def _fast_expit(z, out=None):
    """The logistic function as 0.5 * (1 + tanh(z / 2)), an exact identity.

    NumPy's tanh is vectorised; scipy.special.expit is several times slower on the
    batch-sized arrays the engine uses. Never overflows; for very negative z the
    value underflows to 0 where expit would give a tiny positive number.
    """
    z = np.asarray(z)
    s = np.multiply(z, 0.5, out=out)
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
    # the plain division everywhere, then 1/2 where |z| <= 1e-30 (rare): the values of
    # a division masked by where=, which takes NumPy's much slower masked loop
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        g = np.divide(a, z)
    if not safe.all():
        g[~safe] = 0.5
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
    np.divide(1.0, t, out=t)  # 1 / t: np.reciprocal's value, in NumPy's vectorised loop
    p = np.empty_like(t)
    p.fill(_ERFC_COEF[-1])
    for c in _ERFC_COEF[-2::-1]:
        p *= t
        p += c
    u *= u
    p -= u
    np.exp(p, out=p)
    p *= t
    p *= 0.5  # c = Phi(-|z|) = erfc(|z| / sqrt 2) / 2, accurate in the tail
    # Phi(z) = c for z < 0 and 1 - c for z >= 0
    flip = np.greater_equal(z, 0, out=u)  # 1.0 / 0.0 into the spent buffer
    out = np.multiply(p, -2.0, out=t)
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
    return np.multiply(z, _normal_cdf(z), out=z)


def _gelu_d(z, a, out=None, **_):
    # d/dz z*Phi(z) = Phi(z) + z*phi(z); Phi(z) = a / z from the forward pass
    cdf = _gate_from_output(z, a)
    pdf = np.multiply(z, -0.5)  # -0.5 z^2, phi(z) = e^(-z^2 / 2) / sqrt(2 pi)
    pdf *= z
    np.exp(pdf, out=pdf)
    pdf *= _INV_SQRT_2PI
    pdf *= z
    if out is None or out.dtype != a.dtype:
        return _into(out, np.add(cdf, pdf), a.dtype)
    return np.add(cdf, pdf, out=out)


def _gelu_onnx(graph, z, output=None, **_):
    # Hendrycks & Gimpel (2016): z * Phi(z), Phi(z) = (1 + erf(z / sqrt 2)) / 2
    scaled = graph.node("Mul", [z, graph.const("inv_sqrt2", _SQRT_HALF)])
    one_plus = graph.node("Add", [graph.node("Erf", [scaled]), graph.const("one", 1.0)])
    half_z = graph.node("Mul", [z, graph.const("half", 0.5)])
    return graph.node("Mul", [half_z, one_plus], output=output)


def _silu(z, **_):
    z = np.asarray(z)
    return z * _fast_expit(z)


def _silu_(z, **_):
    z *= _fast_expit(z)
    return z


def _silu_d(z, a, out=None, **_):
    # d/dz z*s(z) = s + z*s*(1 - s) = s*(1 + z*(1 - s)), with s = sigmoid(z) = a / z
    s = _gate_from_output(z, a)
    out = np.subtract(1.0, s, out=out)
    out *= z
    out += 1.0
    out *= s
    return out


def _silu_onnx(graph, z, output=None, **_):
    return graph.node("Mul", [z, graph.node("Sigmoid", [z])], output=output)


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


def _softplus_d(z, a, out=None, **_):
    if out is None:
        return _fast_expit(z).astype(a.dtype, copy=False)
    return _fast_expit(z, out=out)


# the registry --------------------------------------------------------------------------

HIDDEN: dict[str, Activation] = {}


def _register(act: Activation):
    HIDDEN[act.name] = act


_register(Activation(
    "identity", _identity, _identity_, _identity_d, _identity_onnx, -INF, INF, "f(z) = z",
    "No non-linearity: the network stays a linear model.", needs_z=False,
    piecewise_linear=True, keeps_one=True, in_sklearn=True, aliases=("linear",)))
_register(Activation(
    "logistic", _logistic, _logistic_, _logistic_d, _op("Sigmoid"), 0.0, 1.0,
    "f(z) = 1 / (1 + e^-z)",
    "Smooth and bounded; saturates for large |z| so gradients can vanish.",
    needs_z=False, saturates=True, glorot_factor=GLOROT_FACTOR_LOGISTIC, low_attained=False,
    in_sklearn=True, aliases=("sigmoid",)))
_register(Activation(
    "tanh", _tanh, _tanh_, _tanh_d, _op("Tanh"), -1.0, 1.0, "f(z) = tanh(z)",
    "Zero-centred and bounded; saturates for large |z|.", needs_z=False, saturates=True,
    low_attained=False, in_sklearn=True))
_register(Activation(
    "relu", _relu, _relu_, _relu_d, _op("Relu"), 0.0, INF, "f(z) = max(0, z)",
    "The usual default; units stuck below zero stop learning (dead units).",
    needs_z=False, piecewise_linear=True, keeps_one=True, he_init=True, in_sklearn=True))
_register(Activation(
    "leaky_relu", _leaky, _leaky_, _leaky_d, _leaky_onnx, -INF, INF,
    "f(z) = z if z > 0 else a*z (a = 0.01)",
    "ReLU with a small slope below zero, so units cannot die completely.",
    needs_z=False, piecewise_linear=True, keeps_one=True, he_init=True,
    params={"slope": LEAKY_SLOPE}))
_register(Activation(
    "elu", _elu, _elu_, _elu_d, _elu_onnx, -ELU_ALPHA, INF,
    "f(z) = z if z > 0 else a*(e^z - 1) (a = 1)",
    "Smooth below zero with a negative floor; mean activations nearer zero.",
    saturates=True, keeps_one=True, he_init=True, low_attained=False,
    params={"alpha": ELU_ALPHA}))
_register(Activation(
    "selu", _selu, _selu_, _selu_d,
    _op("Selu", alpha=float(SELU_ALPHA), gamma=float(SELU_LAMBDA)),
    -SELU_LAMBDA * SELU_ALPHA, INF,
    "f(z) = l*z if z > 0 else l*a*(e^z - 1) (l = 1.0507, a = 1.6733)",
    "Scaled ELU whose constants keep activations near zero mean, unit variance.",
    saturates=True, he_init=True, low_attained=False))
_register(Activation(
    "gelu", _gelu, _gelu_, _gelu_d, _gelu_onnx, -0.16997120747990, INF,
    "f(z) = z * Phi(z) (Phi = standard normal CDF, exact erf form)",
    "Smooth ReLU-like gate weighted by the normal CDF.", saturates=True, he_init=True))
_register(Activation(
    "silu", _silu, _silu_, _silu_d, _silu_onnx, -0.27846454276107, INF,
    "f(z) = z / (1 + e^-z)",
    "Smooth, non-monotonic ReLU-like gate (also called swish).", saturates=True,
    he_init=True, aliases=("swish",)))
_register(Activation(
    "softplus", _softplus, _softplus_, _softplus_d, _op("Softplus"), 0.0, INF,
    "f(z) = log(1 + e^z)",
    "A smooth ReLU that is never exactly flat, so never dead.", saturates=True,
    he_init=True, low_attained=False))

#: alias -> canonical name of a hidden activation
HIDDEN_ALIASES = {alias: a.name for a in HIDDEN.values() for alias in a.aliases}

#: hidden activations scikit-learn's own MLP implements
SKLEARN_HIDDEN = tuple(a.name for a in HIDDEN.values() if a.in_sklearn)


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
        raise ValueError(f"the hidden activation must be a name, got {name!r}")
    key = name.strip().lower()
    key = HIDDEN_ALIASES.get(key, key)
    if key not in HIDDEN:
        choices = ", ".join(list(HIDDEN) + [f"{a} (= {b})" for a, b in HIDDEN_ALIASES.items()])
        raise ValueError(f"unknown hidden activation {name!r}; choose one of: {choices}")
    return key


def get_hidden(name: str) -> Activation:
    return HIDDEN[resolve_hidden(name)]


def resolve_hidden_layers(activation, n_hidden: int) -> list[str]:
    """Canonical activation name per hidden layer, from one name or one name per layer.

    Raises
    ------
    ValueError
        for an unknown name, or when the number of names is not the number of layers.
    """
    if isinstance(activation, str):
        return [resolve_hidden(activation)] * n_hidden
    names = list(activation) if hasattr(activation, "__iter__") else [activation]
    if len(names) != n_hidden:
        raise ValueError(
            f"{len(names)} hidden activations are given but there are {n_hidden} hidden "
            "layers; give one name for all layers or one per hidden layer")
    return [resolve_hidden(n) for n in names]


# --------------------------------------------------------------------------- output heads


def _softmax_(z):
    z -= z.max(axis=-1, keepdims=True)
    np.exp(z, out=z)
    z /= z.sum(axis=-1, keepdims=True)
    return z


def _softmax_onnx(graph, z, output=None, **_):
    return graph.node("Softmax", [z], output=output, axis=1)


def _exp_clip(dtype) -> float:
    """The largest z whose e^z stays finite (with a margin) in ``dtype``."""
    return float(np.log(np.finfo(dtype).max) - 1.0)


def _exp_(z):
    # clip so that e^z stays finite in the array's precision (no overflow warnings)
    np.minimum(z, _exp_clip(z.dtype), out=z)
    return np.exp(z, out=z)


def _exp_onnx(graph, z, output=None, **_):
    clipped = graph.node("Min", [z, graph.const("exp_clip", _exp_clip(graph.np_dtype))])
    return graph.node("Exp", [clipped], output=output)


def _open_range(m, low, high):
    """``m`` as a float array, moved into the open interval ``(low, high)`` by the
    smallest step its float type resolves (``eps`` of the type; ``low``/``high`` may
    be infinite), so that an inverse link never returns an infinite pre-activation."""
    m = _as_float(np.asarray(m))
    eps = np.finfo(m.dtype).eps
    lo = -INF if low == -INF else low + eps
    hi = INF if high == INF else high - eps
    return np.clip(m, lo, hi)


def _identity_inverse(m):
    return np.array(_as_float(np.asarray(m)), copy=True)


def _relu_inverse(m):
    # relu(z) = z for z >= 0: a mean >= 0 is its own pre-activation
    return np.maximum(_as_float(np.asarray(m)), 0)


def _softplus_inverse(m):
    # softplus^-1(m) = log(e^m - 1) = log(expm1(m)), written m + log(-expm1(-m)) so that
    # e^m never overflows for a large mean
    m = _open_range(m, 0.0, INF)
    return m + np.log(-np.expm1(-m))


def _exp_inverse(m):
    return np.log(_open_range(m, 0.0, INF))


def _logit_inverse(m):
    # logit(m) = log(m / (1 - m)): the log odds of a mean (or class share) in (0, 1)
    return logit(_open_range(m, 0.0, 1.0))


def _softmax_inverse(m):
    # softmax(log m) = m / sum(m) = m for class shares summing to one; any constant
    # added to every class gives the same distribution, log m is the one without it
    return np.log(_open_range(m, 0.0, INF))


@dataclass(frozen=True)
class Head:
    """An output head: output activation + matched loss + the task it serves.

    Attributes
    ----------
    name, task : str
        ``task`` is "regression" or "classification".
    loss_fn : :class:`workbench.nets.losses.Loss`
        The loss the head is matched with (``loss`` is its name).
    apply_ : callable
        ``apply_(z)`` overwrites the output pre-activation with the prediction.
    onnx : callable
        The head's ONNX form (see :class:`Activation`).
    low, high : float
        The values the head can produce (the compatibility guard reads them).
    formula, description, serves : str
    derivative : callable or None
        ``derivative(z, a, out=None)``, d head / dz, which the output delta must
        carry when the head is *not* the canonical link of its loss; None when it
        is (then the delta is prediction - target).
    distribution : bool
        The outputs form one probability distribution over the classes (softmax),
        so two classes need two output units.
    in_sklearn : bool
        scikit-learn's own MLP uses this head for the task.
    aliases : tuple of str
    """

    name: str
    task: str
    loss_fn: Loss
    apply_: Callable
    onnx: Callable
    low: float
    high: float
    formula: str
    description: str
    serves: str
    inverse: Callable
    derivative: Callable | None = None
    distribution: bool = False
    in_sklearn: bool = False
    aliases: tuple = ()

    @property
    def loss(self) -> str:
        """The matched loss's name (``squared_error``, ``poisson``, ``log_loss``)."""
        return self.loss_fn.name

    @property
    def canonical(self) -> bool:
        return self.derivative is None

    @property
    def key(self) -> tuple[str, str]:
        return (self.task, self.name)

    @property
    def tooltip(self) -> str:
        lo = "-inf" if self.low == -INF else f"{self.low:g}"
        hi = "inf" if self.high == INF else f"{self.high:g}"
        return (f"{self.name}: {self.formula}, range [{lo}, {hi}], loss {self.loss_fn.label}. "
                f"{self.description}")

    def output_delta(self, y, p, z, out):
        """The error at the output pre-activation ``z``, per row, into ``out``.

        ``dl/dz = dl/dp * dp/dz``: for a canonical link this is ``p - y``
        (McCullagh & Nelder 1989); otherwise the loss's gradient times the head's
        derivative (``z`` must then be the pre-activation, ``p`` the prediction).
        """
        if self.derivative is None:
            return np.subtract(p, y, out=out)
        self.loss_fn.gradient(y, p, out=out)
        out *= self.derivative(z, p)
        return out


HEADS: dict[tuple[str, str], Head] = {}


def _register_head(h: Head):
    HEADS[h.key] = h


_register_head(Head(
    "identity", "regression", losses.SQUARED_ERROR, _identity_, _identity_onnx, -INF, INF,
    "y = z", "Linear output for a signed (or any real) target.", serves="signed regression",
    inverse=_identity_inverse, in_sklearn=True, aliases=("linear",)))
_register_head(Head(
    "exp", "regression", losses.POISSON, _exp_, _exp_onnx, 0.0, INF, "y = e^z",
    "Positive output matched with the Poisson deviance, for counts.",
    serves="count regression", inverse=_exp_inverse, in_sklearn=True))
_register_head(Head(
    "relu", "regression", losses.SQUARED_ERROR, _relu_, _op("Relu"), 0.0, INF,
    "y = max(0, z)", "Non-negative output; exact zeros are reachable.",
    serves="non-negative regression", inverse=_relu_inverse,
    derivative=_relu_d))
_register_head(Head(
    "softplus", "regression", losses.SQUARED_ERROR, _softplus_, _op("Softplus"), 0.0, INF,
    "y = log(1 + e^z)", "Smooth non-negative output that never goes flat.",
    serves="non-negative regression", inverse=_softplus_inverse,
    derivative=_softplus_d))
_register_head(Head(
    "logistic", "regression", losses.SQUARED_ERROR, _logistic_, _op("Sigmoid"), 0.0, 1.0,
    "y = 1 / (1 + e^-z)",
    "Output bounded in [0, 1], for a target scaled to its known interval.",
    serves="bounded regression", inverse=_logit_inverse, derivative=_logistic_d,
    aliases=("sigmoid",)))
_register_head(Head(
    "logistic", "classification", losses.BINARY_LOG_LOSS, _logistic_, _op("Sigmoid"),
    0.0, 1.0, "p = 1 / (1 + e^-z)",
    "Probability of the positive class, matched with log-loss.",
    serves="binary classification", inverse=_logit_inverse, in_sklearn=True,
    aliases=("sigmoid",)))
_register_head(Head(
    "softmax", "classification", losses.LOG_LOSS, _softmax_, _softmax_onnx, 0.0, 1.0,
    "p_k = e^z_k / sum_j e^z_j",
    "One probability per class, summing to one, matched with log-loss.",
    serves="multiclass classification", inverse=_softmax_inverse, distribution=True,
    in_sklearn=True))

#: alias -> canonical name of an output head
HEAD_ALIASES = {alias: h.name for h in HEADS.values() for alias in h.aliases}

#: the heads scikit-learn's own MLP uses, as (task, name)
SKLEARN_HEADS = {h.key for h in HEADS.values() if h.in_sklearn}


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
        raise ValueError(f"the output head must be a name, got {name!r}")
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
