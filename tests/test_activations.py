"""The activation registry checked against outside references.

Sources, per test: SciPy (``scipy.special.expit``, ``erf``, ``erfc``, ``softmax``,
``scipy.stats.norm``, ``scipy.integrate.quad``, ``scipy.optimize.minimize_scalar``),
NumPy (``np.log1p``, ``np.logaddexp``, ``np.tanh``, ``np.expm1``), the papers'
definitions and constants (Maas et al. 2013; Clevert et al. 2016; Hendrycks & Gimpel
2016; Klambauer et al. 2017; Elfwing et al. 2018), and central finite differences.
"""

from __future__ import annotations

import contextlib
import math
import warnings

import numpy as np
import pytest
from scipy import integrate, optimize, special, stats

from workbench.nets import activations as act

HIDDEN = act.hidden_names()

# A grid that avoids the kinks of relu / leaky_relu / elu / selu at 0 (finite differences
# are only meaningful away from them) and covers both tails.
_GRID = np.concatenate([np.linspace(-6.0, -0.05, 60), np.linspace(0.05, 6.0, 60)])


def _reference(name, z):
    """Value of each hidden activation from an outside definition (float64)."""
    z = np.asarray(z, dtype=np.float64)
    if name == "identity":
        return z.copy()
    if name == "logistic":  # scipy.special.expit
        return special.expit(z)
    if name == "tanh":
        return np.tanh(z)
    if name == "relu":  # Glorot, Bordes & Bengio 2011
        return np.where(z > 0, z, 0.0)
    if name == "leaky_relu":  # Maas, Hannun & Ng 2013: slope 0.01 below zero
        return np.where(z > 0, z, 0.01 * z)
    if name == "elu":  # Clevert, Unterthiner & Hochreiter 2016, alpha = 1
        return np.where(z > 0, z, 1.0 * np.expm1(np.minimum(z, 0)))
    if name == "selu":  # Klambauer et al. 2017, constants as printed in the paper
        lam = 1.0507009873554804934193349852946
        alpha = 1.6732632423543772848170429916717
        return lam * np.where(z > 0, z, alpha * np.expm1(np.minimum(z, 0)))
    if name == "gelu":  # Hendrycks & Gimpel 2016, exact form x * Phi(x)
        return z * stats.norm.cdf(z)
    if name == "silu":  # Elfwing, Uchibe & Doya 2018: z * sigma(z)
        return z * special.expit(z)
    if name == "softplus":  # log(1 + e^z) via np.log1p, rewritten as z + log1p(e^-z) for z > 0
        return np.where(z > 0, z + np.log1p(np.exp(-np.abs(z))), np.log1p(np.exp(-np.abs(z))))
    raise AssertionError(f"no reference for {name}")


def _reference_derivative(name, z):
    """Closed-form derivative from the same outside definitions (float64)."""
    z = np.asarray(z, dtype=np.float64)
    s = special.expit(z)
    if name == "identity":
        return np.ones_like(z)
    if name == "logistic":
        return s * (1 - s)
    if name == "tanh":
        return 1 - np.tanh(z) ** 2
    if name == "relu":
        return (z > 0).astype(float)
    if name == "leaky_relu":
        return np.where(z > 0, 1.0, 0.01)
    if name == "elu":
        return np.where(z > 0, 1.0, np.exp(np.minimum(z, 0)))
    if name == "selu":
        lam = 1.0507009873554804934193349852946
        alpha = 1.6732632423543772848170429916717
        return lam * np.where(z > 0, 1.0, alpha * np.exp(np.minimum(z, 0)))
    if name == "gelu":  # Phi(z) + z phi(z)
        return stats.norm.cdf(z) + z * stats.norm.pdf(z)
    if name == "silu":  # sigma(z) (1 + z (1 - sigma(z))), Elfwing et al. 2018 eq. 2
        return s * (1 + z * (1 - s))
    if name == "softplus":  # the logistic function
        return s
    raise AssertionError(name)


def _fwd(name, z):
    a = act.get_hidden(name)
    return a.forward(np.array(z, copy=True), **a.params)


def _deriv(name, z):
    a = act.get_hidden(name)
    val = a.forward(np.array(z, copy=True), **a.params)
    return a.derivative(np.array(z, copy=True), val, **a.params)


# --------------------------------------------------------------------------- constants


def test_paper_constants():
    """Klambauer et al. 2017 (SELU), Clevert et al. 2016 (ELU alpha = 1), Maas et al. 2013."""
    assert act.SELU_LAMBDA == 1.0507009873554804934193349852946
    assert act.SELU_ALPHA == 1.6732632423543772848170429916717
    assert act.ELU_ALPHA == 1.0
    assert act.LEAKY_SLOPE == 0.01


def test_selu_constants_solve_the_papers_fixed_point_equations():
    """Klambauer et al. 2017, eq. 14: alpha_01 and lambda_01 in closed form (scipy.special.erfc)."""
    e = math.e
    c = special.erfc(1 / math.sqrt(2))
    alpha01 = -math.sqrt(2 / math.pi) / (c * math.exp(0.5) - 1)
    lam01 = ((1 - c * math.sqrt(e)) * math.sqrt(2 * math.pi)
             * (2 * special.erfc(math.sqrt(2)) * e ** 2 + math.pi * c ** 2 * e
                - 2 * (2 + math.pi) * c * math.sqrt(e) + math.pi + 2) ** -0.5)
    assert act.SELU_ALPHA == pytest.approx(alpha01, rel=1e-13)
    assert act.SELU_LAMBDA == pytest.approx(lam01, rel=1e-13)


def test_selu_keeps_standard_normal_input_at_zero_mean_unit_variance():
    """Klambauer et al. 2017: for z ~ N(0, 1) the SELU output has mean 0 and variance 1.

    Integrated with scipy.integrate.quad against scipy.stats.norm.pdf.
    """
    def selu(z):
        return float(_fwd("selu", np.array([z]))[0])

    mean = integrate.quad(lambda z: selu(z) * stats.norm.pdf(z), -np.inf, np.inf)[0]
    second = integrate.quad(lambda z: selu(z) ** 2 * stats.norm.pdf(z), -np.inf, np.inf)[0]
    assert abs(mean) < 1e-7
    assert second == pytest.approx(1.0, abs=1e-7)


# --------------------------------------------------------------------------- values


def test_registry_holds_the_issue_list():
    """Issue 2 section 2: the ten hidden activations."""
    assert set(HIDDEN) == {"identity", "logistic", "tanh", "relu", "leaky_relu", "elu",
                           "selu", "gelu", "silu", "softplus"}


@pytest.mark.parametrize("name", HIDDEN)
def test_value_matches_outside_reference(name):
    """Each activation against SciPy / NumPy / the paper's formula (see _reference)."""
    z = np.concatenate([_GRID, [-30.0, -1e-3, 1e-3, 30.0]])
    got = _fwd(name, z)
    np.testing.assert_allclose(got, _reference(name, z), rtol=1e-12, atol=1e-14)


@pytest.mark.parametrize("name", HIDDEN)
def test_in_place_apply_matches_forward(name):
    """The engine's in-place fast path equals the reference value too (scipy/NumPy refs)."""
    a = act.get_hidden(name)
    for dtype in (np.float32, np.float64):
        z = _GRID.astype(dtype)
        buf = z.copy()
        out = a.apply_(buf, **a.params)
        assert out.dtype == dtype
        np.testing.assert_allclose(out, _reference(name, z.astype(np.float64)),
                                   rtol=1e-5 if dtype == np.float32 else 1e-12, atol=1e-6)


@pytest.mark.parametrize("name", HIDDEN)
def test_float32_stays_float32(name):
    """The engine trains in float32 by default: no silent up-cast (common practice)."""
    z = _GRID.astype(np.float32)
    assert _fwd(name, z).dtype == np.float32
    assert _deriv(name, z).dtype == np.float32


def test_gelu_exact_erf_form():
    """Hendrycks & Gimpel 2016: GELU(x) = x/2 (1 + erf(x / sqrt 2)) (scipy.special.erf)."""
    z = np.linspace(-8, 8, 201)
    np.testing.assert_allclose(_fwd("gelu", z), 0.5 * z * (1 + special.erf(z / np.sqrt(2))),
                               rtol=1e-13, atol=1e-15)
    # not the tanh approximation: they differ by about 1e-4 near |x| = 2
    approx = 0.5 * z * (1 + np.tanh(np.sqrt(2 / np.pi) * (z + 0.044715 * z ** 3)))
    assert np.max(np.abs(_fwd("gelu", z) - approx)) > 1e-5


def test_leaky_slope_parameter():
    """Maas et al. 2013 leaky ReLU: f(z) = a z below zero, for any slope a."""
    a = act.get_hidden("leaky_relu")
    z = np.array([-2.0, -0.5, 0.5, 2.0])
    np.testing.assert_allclose(a.forward(z.copy(), slope=0.2), np.where(z > 0, z, 0.2 * z))
    np.testing.assert_allclose(a.derivative(z, a.forward(z.copy(), slope=0.2), slope=0.2),
                               np.where(z > 0, 1.0, 0.2))


# --------------------------------------------------------------------------- derivatives


@pytest.mark.parametrize("name", HIDDEN)
def test_derivative_matches_closed_form(name):
    """Derivative against the closed forms of the same references (scipy.stats.norm for GELU)."""
    np.testing.assert_allclose(_deriv(name, _GRID), _reference_derivative(name, _GRID),
                               rtol=1e-12, atol=1e-14)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("name", HIDDEN)
def test_derivative_into_a_buffer(name, dtype):
    """``derivative(z, a, out=buf)`` (the engine's form) writes f'(z) into ``buf`` and returns
    it; same closed-form references as above, float32 to float32 precision."""
    a = act.get_hidden(name)
    z = _GRID.astype(dtype)
    value = a.forward(z.copy(), **a.params)
    buf = np.full_like(z, np.nan)
    got = a.derivative(z.copy() if a.needs_z else None, value, out=buf, **a.params)
    assert got is buf
    np.testing.assert_allclose(buf, _reference_derivative(name, _GRID),
                               rtol=1e-5 if dtype == np.float32 else 1e-12, atol=1e-6)


@pytest.mark.parametrize("name", HIDDEN)
def test_derivative_matches_central_finite_differences(name):
    """f'(z) ~ (f(z+h) - f(z-h)) / 2h, float64, away from the kinks (h = 1e-6)."""
    h = 1e-6
    fd = (_fwd(name, _GRID + h) - _fwd(name, _GRID - h)) / (2 * h)
    np.testing.assert_allclose(_deriv(name, _GRID), fd, rtol=1e-6, atol=1e-8)


@pytest.mark.parametrize("name", HIDDEN)
def test_range_is_what_the_function_reaches(name):
    """The registered range holds on a wide grid; for GELU and SiLU the finite lower bound is
    the true minimum (found with scipy.optimize.minimize_scalar)."""
    a = act.get_hidden(name)
    z = np.linspace(-50, 50, 20001)
    if name in ("gelu", "silu"):  # include the neighbourhood of the minimum densely
        z = np.concatenate([z, np.linspace(-1.5, -0.5, 100001)])
    v = _fwd(name, z)
    assert np.all(v >= a.low) and np.all(v <= a.high)
    if math.isfinite(a.low) and name in ("gelu", "silu"):
        res = optimize.minimize_scalar(lambda t: float(_reference(name, np.array([t]))[0]),
                                       bounds=(-5, 0), method="bounded",
                                       options={"xatol": 1e-10})
        assert a.low == pytest.approx(res.fun, abs=1e-12)
    elif math.isfinite(a.low) and name in ("elu", "selu", "logistic", "tanh"):
        # asymptotic infimum: reached in the limit z -> -inf
        assert float(_reference(name, np.array([-40.0]))[0]) == pytest.approx(a.low, abs=1e-9)
    assert a.description and a.formula and a.name in a.tooltip


# --------------------------------------------------------------------------- the registry's facts
# Each flag the engine, the health measurement or the initialisation reads is checked
# here against the outside definitions above (_reference, _reference_derivative).

_WIDE = np.linspace(-50.0, 50.0, 2001)


@pytest.mark.parametrize("name", HIDDEN)
def test_piecewise_linear_flag(name):
    """piecewise_linear: the closed-form derivative takes at most two values (one per
    side of the kink) on a grid that avoids the kink."""
    values = np.unique(np.round(_reference_derivative(name, _GRID), 12))
    assert act.HIDDEN[name].piecewise_linear == (len(values) <= 2)


@pytest.mark.parametrize("name", HIDDEN)
def test_saturates_flag(name):
    """saturates: a smooth derivative that falls below the health threshold in a tail
    (Glorot & Bengio 2010, section 3: saturated units learn slowly). ReLU's derivative
    is 0 below zero too, but that is a dead unit, not a saturated one."""
    from workbench.nets.health import SATURATION_THRESHOLD

    tails = np.abs(_reference_derivative(name, np.array([-50.0, 50.0])))
    smooth = not act.HIDDEN[name].piecewise_linear
    assert act.HIDDEN[name].saturates == (smooth and tails.min() < SATURATION_THRESHOLD)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("name", HIDDEN)
def test_keeps_one_flag(name, dtype):
    """keeps_one: f(1) == 1 exactly, from the outside definition, and the in-place form
    leaves a column of ones intact in both float types (the engine relies on it)."""
    a = act.HIDDEN[name]
    assert a.keeps_one == (float(_reference(name, np.array([1.0]))[0]) == 1.0)
    ones = np.ones((4, 3), dtype=dtype)
    assert a.keeps_one == bool(np.all(a.apply_(ones, **a.params) == 1))


@pytest.mark.parametrize("name", HIDDEN)
def test_he_init_flag(name):
    """he_init marks the rectifier-shaped activations He et al. (2015, section 2.2) derive
    their bound for: f(z) ~ z far above zero and |f(z)| << |z| far below zero. Applying
    it to the smooth rectifiers (ELU, SELU, GELU, SiLU, softplus) is common practice."""
    z = np.array([-50.0, 50.0])
    below, above = _reference(name, z) / z
    assert act.HIDDEN[name].he_init == (abs(above - 1) < 0.1 and abs(below) < 0.1)


def test_init_bounds():
    """Glorot & Bengio 2010, eq. 16: sqrt(6 / (fan_in + fan_out)); scikit-learn's MLP uses
    factor 2 for logistic (checked against its draws in test_engine_parity); He et al.
    2015: sqrt(6 / fan_in), only for he_init activations."""
    for a in act.HIDDEN.values():
        factor = 2.0 if a.name == "logistic" else 6.0
        assert a.init_bound(30, 10) == pytest.approx(math.sqrt(factor / 40), rel=1e-15)
        he = math.sqrt(6 / 30) if a.he_init else math.sqrt(factor / 40)
        assert a.init_bound(30, 10, he=True) == pytest.approx(he, rel=1e-15)


@pytest.mark.parametrize("name", HIDDEN)
def test_low_attained_flag(name):
    """low_attained: the finite infimum is reached at a finite z (a minimum, for ReLU, GELU
    and SiLU) rather than only approached as z -> -inf (logistic, tanh, ELU, SELU, softplus)."""
    a = act.HIDDEN[name]
    if not math.isfinite(a.low):
        assert a.range_text.startswith("(")
        return
    lowest = float(np.min(_reference(name, np.linspace(-5.0, 0.0, 500_001))))
    assert a.low_attained == (lowest <= a.low + 1e-9)
    assert a.range_text.startswith("[" if a.low_attained else "(")


def test_with_params_passes_only_an_activations_own_parameters():
    """The engine hands its leaky slope to every layer; only leaky ReLU takes it."""
    for a in act.HIDDEN.values():
        got = a.with_params(slope=0.3)
        assert set(got) == set(a.params)
        if "slope" in a.params:
            assert got["slope"] == 0.3


def test_sklearn_lists_match_sklearn():
    """SKLEARN_HIDDEN / SKLEARN_HEADS against scikit-learn itself: the activations its MLP
    accepts (its parameter constraints) and the output activations it picks per task."""
    import warnings

    from sklearn.exceptions import ConvergenceWarning
    from sklearn.neural_network import MLPClassifier, MLPRegressor

    options = set(MLPRegressor._parameter_constraints["activation"][0].options)
    assert set(act.SKLEARN_HIDDEN) == options
    rng = np.random.default_rng(0)
    X = rng.normal(size=(30, 2))
    heads = set()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        for loss in ("squared_error", "poisson"):
            m = MLPRegressor(hidden_layer_sizes=(3,), loss=loss, max_iter=2).fit(X, rng.poisson(2.0, 30))
            heads.add(("regression", m.out_activation_))
        for n_classes in (2, 3):
            m = MLPClassifier(hidden_layer_sizes=(3,), max_iter=2).fit(X, np.arange(30) % n_classes)
            heads.add(("classification", m.out_activation_))
    assert act.SKLEARN_HEADS == heads


def test_schema_enums_are_the_registrys_names():
    """The exported configuration's JSON schema lists exactly the registry's hidden
    activations, heads and losses (so a new entry cannot be left out of it)."""
    import json
    from pathlib import Path

    import workbench.export

    path = Path(workbench.export.__file__).parent / "schemas" / "configuration.schema.json"
    model = json.loads(path.read_text(encoding="utf-8"))["properties"]["model"]["properties"]
    assert set(model["hidden_activation"]["enum"]) == set(act.HIDDEN)
    assert set(model["output_head"]["enum"]) == set(act.head_names())
    assert set(model["loss"]["enum"]) == {h.loss for h in act.HEADS.values()}
    assert set(act.LOSS_LABELS) == {h.loss for h in act.HEADS.values()}


# --------------------------------------------------------------------------- aliases / errors


@pytest.mark.parametrize("alias, canonical", [("sigmoid", "logistic"), ("swish", "silu"),
                                              ("linear", "identity"), ("ReLU", "relu"),
                                              (" tanh ", "tanh")])
def test_hidden_aliases(alias, canonical):
    """Common names: sigmoid = logistic, swish = SiLU (Ramachandran et al. 2017)."""
    assert act.resolve_hidden(alias) == canonical
    assert act.get_hidden(alias) is act.HIDDEN[canonical]


@pytest.mark.parametrize("task, alias, canonical", [("regression", "linear", "identity"),
                                                    ("classification", "sigmoid", "logistic")])
def test_head_aliases(task, alias, canonical):
    assert act.resolve_head(alias, task).name == canonical


def test_unknown_hidden_lists_valid_choices():
    with pytest.raises(ValueError) as info:
        act.resolve_hidden("mish")
    msg = str(info.value)
    assert "mish" in msg
    for name in HIDDEN:
        assert name in msg
    with pytest.raises(ValueError):
        act.resolve_hidden(3)


@pytest.mark.parametrize("task", ["regression", "classification"])
def test_unknown_head_lists_valid_choices(task):
    with pytest.raises(ValueError) as info:
        act.resolve_head("cube", task)
    for name in act.head_names(task):
        assert name in str(info.value)


def test_head_for_the_wrong_task_says_why():
    with pytest.raises(ValueError, match="cannot serve regression"):
        act.resolve_head("softmax", "regression")
    with pytest.raises(ValueError, match="cannot serve classification"):
        act.resolve_head("exp", "classification")


# --------------------------------------------------------------------------- heads


def _head_out(task, name, z):
    return act.resolve_head(name, task).apply_(np.array(z, dtype=np.float64, copy=True))


@pytest.mark.parametrize("task, name, reference", [
    ("regression", "identity", lambda z: z),
    ("regression", "exp", np.exp),
    ("regression", "relu", lambda z: np.maximum(z, 0)),
    ("regression", "softplus", lambda z: np.logaddexp(0, z)),  # np.logaddexp
    ("regression", "logistic", special.expit),
    ("classification", "logistic", special.expit),
    ("classification", "softmax", lambda z: special.softmax(z, axis=1)),
])
def test_head_values(task, name, reference):
    """Heads against numpy.exp / np.logaddexp / scipy.special.expit / scipy.special.softmax."""
    rng = np.random.default_rng(0)
    z = rng.normal(scale=4.0, size=(50, 3 if name == "softmax" else 1))
    np.testing.assert_allclose(_head_out(task, name, z), reference(z), rtol=1e-12, atol=1e-15)


def test_softplus_head_matches_log1p_where_that_is_safe():
    """np.log1p(np.exp(z)) is the textbook form; it agrees on moderate z."""
    z = np.linspace(-30, 30, 121).reshape(-1, 1)
    np.testing.assert_allclose(_head_out("regression", "softplus", z), np.log1p(np.exp(z)),
                               rtol=1e-13)


def test_softmax_rows_sum_to_one():
    z = np.array([[1000.0, 1000.0, -1000.0], [-5.0, 0.0, 5.0]])
    p = _head_out("classification", "softmax", z)
    np.testing.assert_allclose(p.sum(axis=1), 1.0)
    np.testing.assert_allclose(p, special.softmax(z, axis=1))


def test_canonical_links():
    """The canonical link of each loss needs no extra factor in the output delta
    (McCullagh & Nelder 1989: identity for Gaussian, log for Poisson, logit for Bernoulli,
    softmax for the multinomial); every other head must carry its derivative."""
    canonical = {("regression", "identity"), ("regression", "exp"),
                 ("classification", "logistic"), ("classification", "softmax")}
    for key, head in act.HEADS.items():
        assert head.canonical == (key in canonical), key
    assert act.HEADS[("regression", "exp")].loss == "poisson"
    for key in [("regression", "identity"), ("regression", "relu"), ("regression", "softplus"),
                ("regression", "logistic")]:
        assert act.HEADS[key].loss == "squared_error"
    assert act.HEADS[("classification", "logistic")].loss == "log_loss"
    assert act.HEADS[("classification", "softmax")].loss == "log_loss"


@pytest.mark.parametrize("name", ["relu", "softplus", "logistic"])
def test_non_canonical_head_derivative_by_finite_differences(name):
    """Head.derivative(z, a) = d head / dz, checked by central finite differences (float64)."""
    head = act.resolve_head(name, "regression")
    z = _GRID.reshape(-1, 1)
    h = 1e-6
    fd = (_head_out("regression", name, z + h) - _head_out("regression", name, z - h)) / (2 * h)
    a = _head_out("regression", name, z)
    np.testing.assert_allclose(head.derivative(z.copy(), a), fd, rtol=1e-6, atol=1e-8)


# --------------------------------------------------------------------------- numerical safety

_EXTREME = np.concatenate([-np.logspace(-3, 4, 40)[::-1], [0.0], np.logspace(-3, 4, 40)])


@contextlib.contextmanager
def _strict():
    """Every warning an error; overflow / invalid / divide-by-zero raise.

    Underflow to zero is the correct answer for e^-10000, so it stays allowed.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with np.errstate(over="raise", invalid="raise", divide="raise", under="ignore"):
            yield


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("name", HIDDEN)
def test_hidden_safe_for_large_inputs(name, dtype):
    """|z| up to 1e4: no warnings, finite value and derivative, in float32 and float64
    (issue 2 section 2: numerically safe)."""
    a = act.get_hidden(name)
    z = _EXTREME.astype(dtype)
    with _strict():
        v = a.forward(z.copy(), **a.params)
        d = a.derivative(z.copy(), v, **a.params)
        v2 = a.apply_(z.copy(), **a.params)
    assert np.all(np.isfinite(v)) and np.all(np.isfinite(d)) and np.all(np.isfinite(v2))
    np.testing.assert_array_equal(v, v2)
    # the limits are the right ones
    ref = _reference(name, np.array([-1e4, 1e4]))
    np.testing.assert_allclose(v[[0, -1]].astype(np.float64), ref, rtol=1e-6)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("key", list(act.HEADS))
def test_heads_safe_for_large_inputs(key, dtype):
    """exp / softplus / logistic / softmax heads: |z| up to 1e4 gives finite output and no
    overflow warning (issue 2 section 2), float32 and float64."""
    head = act.HEADS[key]
    z = _EXTREME.astype(dtype).reshape(-1, 1)
    if head.name == "softmax":
        z = np.hstack([z, -z, np.zeros_like(z)])
    with _strict():
        out = head.apply_(z.copy())
        if not head.canonical:
            fac = head.derivative(z.copy(), out)
            assert np.all(np.isfinite(fac))
    assert out.dtype == dtype
    assert np.all(np.isfinite(out))
    assert np.all(out >= head.low) and np.all(out <= head.high)


def test_softplus_tail_is_accurate():
    """np.logaddexp(0, z) reference: softplus(1e4) = 1e4, softplus(-50) = e^-50."""
    with _strict():
        v = _fwd("softplus", np.array([1e4, -50.0]))
    assert v[0] == 1e4
    assert v[1] == pytest.approx(np.exp(-50.0), rel=1e-12)


def test_float32_normal_cdf_matches_scipy_ndtr():
    """GELU's Phi(z) in float32 uses the erfc Chebyshev fit of Numerical Recipes
    (Press et al. 1992, section 6.2; fractional error < 1.2e-7 in exact arithmetic).
    Reference: scipy.special.ndtr in float64. In float32 the error stays within a few
    float32 ulps of 1 near the centre, and within 5e-6 relative in the tail (Phi >= 1e-10).
    """
    from scipy.special import ndtr

    from workbench.nets.activations import _normal_cdf

    z = np.linspace(-12, 12, 200_001).astype(np.float32)
    ref = ndtr(z.astype(np.float64))
    got = _normal_cdf(z)
    assert got.dtype == np.float32
    got = got.astype(np.float64)
    assert np.max(np.abs(got - ref)) < 3e-7
    tail = ref >= 1e-10
    assert np.max(np.abs(got[tail] - ref[tail]) / ref[tail]) < 5e-6
    # float64: the exact form Phi(z) = erfc(-z / sqrt 2) / 2 (Hendrycks & Gimpel 2016),
    # checked against scipy.special.erfc
    from scipy.special import erfc

    z64 = z.astype(np.float64)
    np.testing.assert_allclose(_normal_cdf(z64), 0.5 * erfc(-z64 / np.sqrt(2)), rtol=1e-12,
                               atol=1e-300)


@pytest.mark.parametrize("name", ["gelu", "silu"])
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_gated_derivative_at_and_near_zero_is_one_half(name, dtype):
    """GELU'(z) = Phi(z) + z phi(z) and SiLU'(z) = s(z)(1 + z(1 - s(z))) are 1/2 at z = 0
    (Phi(0) = s(0) = 1/2, scipy.special.ndtr(0) = expit(0) = 0.5); the derivative recovers
    the gate as a / z, so z = 0 and |z| <= 1e-30 take the gate's value at 0, and the result
    is finite (warning-free) there and matches scipy a little further out."""
    a = act.HIDDEN[name]
    z = np.array([0.0, -0.0, 1e-35, -1e-35, 1e-31, 1e-3, -1e-3], dtype=dtype)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        got = a.derivative(z, a.forward(z.copy()))
    assert got.dtype == dtype
    np.testing.assert_array_equal(got[:5], 0.5)
    zz = z[5:].astype(np.float64)
    s = special.expit(zz)
    ref = (special.ndtr(zz) + zz * np.exp(-zz * zz / 2) / math.sqrt(2 * math.pi)
           if name == "gelu" else s * (1 + zz * (1 - s)))
    np.testing.assert_allclose(got[5:], ref, rtol=1e-6)
