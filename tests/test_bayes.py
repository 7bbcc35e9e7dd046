"""The Bayesian correlated t-test against baycomp (Benavoli et al.'s own package).

References: Benavoli, Corani, Demšar & Zaffalon (2017), JMLR 18(77) -- the
posterior Student t; baycomp 1.0 (``CorrelatedTTest``, ``two_on_single``) --
the reference implementation; Nadeau & Bengio (2003) -- the corrected
variance, checked through SciPy's Student t.
"""

import math

import baycomp
import numpy as np
import pytest
from scipy import stats
from sklearn.metrics import mean_squared_error, r2_score

from workbench.errors import InputError
from workbench.sweep.bayes import (
    Comparison,
    check_rope,
    compare_with_best,
    correlated_ttest,
    decide,
    default_rope,
    posterior,
    rho_from_sizes,
)
from workbench.sweep.statistics import corrected_ttest


def _scores(rng, J, shift, noise=0.02):
    b = 0.8 + rng.normal(0, 0.03, J)
    a = b + shift + rng.normal(0, noise, J)
    return a, b


@pytest.mark.parametrize("folds,repeats,shift,rope", [
    (5, 2, 0.015, 0.01), (10, 1, -0.02, 0.01), (3, 4, 0.002, 0.01),
    (5, 3, 0.0, 0.05), (2, 5, 0.03, 0.001), (10, 10, -0.004, 0.01),
])
def test_probabilities_and_posterior_equal_baycomp(folds, repeats, shift, rope):
    rng = np.random.default_rng(folds * 100 + repeats)
    a, b = _scores(rng, folds * repeats, shift)
    ours = correlated_ttest(a, b, rho=1.0 / folds, rope=rope)
    # baycomp's differences are y - x and its p_right is "y better": x = b, y = a
    ref = baycomp.CorrelatedTTest(b, a, rope=rope, runs=repeats)
    pl, pr_, pr = ref.probs()
    assert ours.p_worse == pytest.approx(pl, abs=1e-9)
    assert ours.p_equivalent == pytest.approx(pr_, abs=1e-9)
    assert ours.p_better == pytest.approx(pr, abs=1e-9)
    assert ours.mean == pytest.approx(ref.mean, abs=1e-12)
    assert ours.scale == pytest.approx(math.sqrt(ref.var), rel=1e-12)
    assert ours.df == ref.df
    # the shortcut function gives the same three numbers
    assert np.allclose((ours.p_worse, ours.p_equivalent, ours.p_better),
                       baycomp.two_on_single(b, a, rope=rope, runs=repeats), atol=1e-9)


def test_rope_zero_has_no_equivalence_and_matches_baycomp_two_outcomes():
    rng = np.random.default_rng(3)
    a, b = _scores(rng, 10, 0.01)
    ours = correlated_ttest(a, b, rho=0.2, rope=0.0)
    pl, pr = baycomp.two_on_single(b, a, rope=0, runs=2)
    assert ours.p_equivalent == 0.0
    assert (ours.p_worse, ours.p_better) == pytest.approx((pl, pr), abs=1e-9)


@pytest.mark.parametrize("diff,rope", [
    (0.0, 0.01), (0.005, 0.01), (-0.005, 0.01), (0.02, 0.01), (-0.02, 0.01),
    (0.01, 0.01), (-0.01, 0.01), (0.0, 0.0), (0.02, 0.0), (-0.02, 0.0),
    (0.25, 0.25), (-0.25, 0.25),  # exactly on the edge of the (closed) ROPE
])
def test_zero_variance_is_a_point_mass_like_baycomp(diff, rope):
    # equal fold scores per configuration, so every fold's difference is the same float
    b = np.full(10, 0.75)
    a = b + diff
    ours = correlated_ttest(a, b, rho=0.2, rope=rope)
    assert ours.scale == 0.0
    ref = baycomp.two_on_single(b, a, rope=rope, runs=2)
    if rope > 0:
        assert (ours.p_worse, ours.p_equivalent, ours.p_better) == pytest.approx(ref, abs=1e-12)
    else:
        assert ours.p_equivalent == 0.0
        assert (ours.p_worse, ours.p_better) == pytest.approx(ref, abs=1e-12)
    assert ours.interval() == (ours.mean, ours.mean)


def test_identical_configurations_are_equivalent():
    b = np.array([0.81, 0.84, 0.79, 0.83, 0.80, 0.82])
    c = correlated_ttest(b, b.copy(), rho=1 / 3, rope=0.01)
    assert (c.p_worse, c.p_equivalent, c.p_better) == (0.0, 1.0, 0.0)
    assert decide(c) == "equivalent"


def test_general_rho_follows_the_paper_formula_and_nadeau_bengio():
    # unequal folds: rho from the mean fold sizes, not 1/K; check the posterior
    # against Benavoli et al. (2017) eq. for the scale, written out with SciPy
    rng = np.random.default_rng(7)
    a, b = _scores(rng, 12, 0.01)
    n_train, n_test = [70, 70, 71] * 4, [36, 36, 35] * 4
    rho = rho_from_sizes(n_train, n_test)
    assert rho == pytest.approx(np.mean(n_test) / (np.mean(n_train) + np.mean(n_test)))
    c = correlated_ttest(a, b, rho=rho, rope=0.005)
    d = a - b
    scale = math.sqrt((1 / 12 + rho / (1 - rho)) * d.var(ddof=1))
    assert c.scale == pytest.approx(scale, rel=1e-12)
    assert c.p_worse == pytest.approx(stats.t.cdf((-0.005 - d.mean()) / scale, 11), abs=1e-12)
    assert c.p_better == pytest.approx(stats.t.sf((0.005 - d.mean()) / scale, 11), abs=1e-12)
    # rho/(1-rho) = n_test/n_train: with rope 0 the posterior tail is the one-sided
    # p-value of the corrected resampled t-test (Nadeau & Bengio 2003)
    c0 = correlated_ttest(a, b, rho=rho, rope=0.0)
    t, p = corrected_ttest(a, b, np.mean(n_train), np.mean(n_test))
    tail = c0.p_worse if t > 0 else c0.p_better
    assert tail == pytest.approx(p / 2, rel=1e-9)
    low, high = c.interval(0.95)
    q = stats.t.ppf(0.975, 11)
    assert (low, high) == pytest.approx((d.mean() - q * scale, d.mean() + q * scale), rel=1e-12)


def test_direction_a_better_than_b():
    rng = np.random.default_rng(11)
    a, b = _scores(rng, 10, 0.05, noise=0.005)
    c = correlated_ttest(a, b, rho=0.2, rope=0.01)
    assert c.mean > 0 and c.p_better > 0.95 and decide(c) == "better"
    r = correlated_ttest(b, a, rho=0.2, rope=0.01)
    assert r.p_worse == pytest.approx(c.p_better) and decide(r) == "worse"


def test_one_fold_cannot_decide():
    c = correlated_ttest([0.9], [0.8], rho=0.5, rope=0.01)
    assert math.isnan(c.p_better) and math.isnan(c.scale)
    assert decide(c) == "undecided"
    assert all(math.isnan(v) for v in c.interval())
    assert posterior([0.1], 0.5)[2] == 0


def _cmp(pw, pe, pb):
    return Comparison(mean=0.0, scale=1.0, df=9, rho=0.2, rope=0.01,
                      p_worse=pw, p_equivalent=pe, p_better=pb, n=10)


@pytest.mark.parametrize("probs,expected", [
    ((0.0, 0.95, 0.05), "equivalent"),      # exactly at the 95 % threshold
    ((0.05, 0.9499, 0.0001), "undecided"),
    ((0.95, 0.05, 0.0), "worse"),
    ((0.0, 0.04, 0.96), "better"),
    ((0.5, 0.0, 0.5), "undecided"),
    ((0.94, 0.06, 0.0), "undecided"),
])
def test_decision_rule(probs, expected):
    assert decide(_cmp(*probs)) == expected
    assert decide(_cmp(*probs), is_best=True) == "best"


def test_default_rope_fractions_and_error_scores():
    for name in ("accuracy", "balanced_accuracy", "roc_auc", "roc_auc_ovr", "f1_macro",
                 "precision", "r2", "matthews_corrcoef"):
        assert default_rope(name) == 0.01
    assert default_rope("neg_root_mean_squared_error", baseline_score=-250.0) == pytest.approx(2.5)
    assert default_rope("neg_log_loss", baseline_score=-0.6931) == pytest.approx(0.006931)
    with pytest.raises(InputError) as err:
        default_rope("neg_mean_absolute_error")
    assert err.value.setting == "rope"
    with pytest.raises(InputError):
        default_rope("neg_mean_poisson_deviance", baseline_score=0.0)


def test_one_percent_of_the_constant_mse_is_0_01_r2():
    # the reason given for deviance-type scores: on a test set whose constant
    # prediction is its own mean, MSE0 = var(y), and R² = 1 - MSE/MSE0 (scikit-learn)
    rng = np.random.default_rng(5)
    y = rng.normal(10, 3, 200)
    p1 = y + rng.normal(0, 1.5, 200)
    mse0 = mean_squared_error(y, np.full_like(y, y.mean()))
    rope = default_rope("neg_mean_squared_error", baseline_score=-mse0)
    # a second prediction whose MSE is larger by exactly the rope
    e = p1 - y
    target = mean_squared_error(y, p1) + rope
    p2 = y + e * math.sqrt(target / np.mean(e ** 2))
    assert mean_squared_error(y, p2) - mean_squared_error(y, p1) == pytest.approx(rope)
    assert r2_score(y, p1) - r2_score(y, p2) == pytest.approx(0.01, rel=1e-9)


def test_check_rope():
    assert check_rope("0.02") == 0.02
    for bad in (-0.1, "x", float("nan"), None):
        with pytest.raises(InputError) as err:
            check_rope(bad)
        assert err.value.setting == "rope"


def test_bad_inputs():
    with pytest.raises(ValueError):
        correlated_ttest([0.1, 0.2], [0.1], rho=0.2, rope=0.01)
    with pytest.raises(ValueError):
        correlated_ttest([0.1, 0.2], [0.1, 0.3], rho=1.0, rope=0.01)
    with pytest.raises(ValueError):
        correlated_ttest([0.1, 0.2], [0.1, 0.3], rho=0.2, rope=-0.01)
    with pytest.raises(ValueError):
        correlated_ttest([0.1, np.nan], [0.1, 0.3], rho=0.2, rope=0.01)


def test_to_dict_is_plain():
    c = correlated_ttest([0.9, 0.8, 0.85], [0.8, 0.8, 0.8], rho=1 / 3, rope=0.01)
    d = c.to_dict()
    assert set(d) >= {"mean", "scale", "df", "rope", "p_worse", "p_equivalent", "p_better",
                      "interval"}
    assert d["interval"] == list(c.interval())


def test_compare_with_best_tests_every_row_against_the_highest_mean():
    rng = np.random.default_rng(21)
    base = 0.8 + rng.normal(0, 0.02, 10)
    scores = np.vstack([base - 0.05 + rng.normal(0, 0.003, 10),   # clearly worse
                        base + 0.01,                               # the best
                        base + 0.0095 + rng.normal(0, 0.0005, 10),  # equivalent
                        base + rng.normal(0, 0.02, 10)])           # noisy
    rows = compare_with_best(scores, rho=0.2, rope=0.01)
    assert [r["decision"] for r in rows][:3] == ["worse", "best", "equivalent"]
    assert rows[1]["p_better"] is None and rows[1]["difference"] == 0.0
    for c in (0, 2, 3):
        ref = baycomp.CorrelatedTTest(scores[1], scores[c], rope=0.01, runs=2).probs()
        got = rows[c]
        assert (got["p_worse"], got["p_equivalent"], got["p_better"]) == \
            pytest.approx(ref, abs=1e-9)
        assert got["difference"] == pytest.approx(scores[c].mean() - scores[1].mean())
