"""The ranking statistics, checked against their published definitions.

- Nadeau & Bengio (2003), "Inference for the generalization error", Machine
  Learning 52: the corrected resampled t statistic
  t = mean(d) / sqrt((1/J + n2/n1) * var(d)), J - 1 degrees of freedom,
  evaluated by hand with scipy.stats.t.
- scipy.stats.ttest_rel: the ordinary paired t-test, which the corrected test
  becomes when the correction term n2/n1 is zero.
- Holm (1979), "A simple sequentially rejective multiple test procedure":
  adjusted p_(i) = max_{j <= i} min(1, (m - j + 1) p_(j)).
"""

import math

import numpy as np
import pytest
from scipy import stats

from workbench.sweep import statistics
from workbench.sweep.statistics import ALPHA, corrected_ttest, holm, is_tied, rank

# ten paired fold scores (K=5 folds x R=2 repeats) of two configurations
A = np.array([0.91, 0.93, 0.90, 0.94, 0.92, 0.95, 0.90, 0.93, 0.91, 0.94])
B = np.array([0.89, 0.92, 0.90, 0.91, 0.90, 0.93, 0.89, 0.90, 0.90, 0.92])


def test_corrected_ttest_matches_the_paper_formula_by_hand():
    n_train, n_test = 400.0, 100.0  # 5-fold CV on 500 rows
    d = A - B
    J = len(d)
    mean = sum(d) / J
    var = sum((x - mean) ** 2 for x in d) / (J - 1)
    t_hand = mean / math.sqrt((1.0 / J + n_test / n_train) * var)
    p_hand = 2.0 * (1.0 - stats.t.cdf(abs(t_hand), df=J - 1))
    t, p = corrected_ttest(A, B, n_train, n_test)
    assert t == pytest.approx(t_hand, rel=1e-12)
    assert p == pytest.approx(p_hand, rel=1e-9)
    # worked by hand: d = .02 .01 0 .03 .02 .02 .01 .03 .01 .02, mean .017, var 90e-6,
    # (1/10 + 100/400) * 90e-6 = 31.5e-6, t = .017 / sqrt(31.5e-6) = 3.0290
    assert t_hand == pytest.approx(3.0290, abs=1e-4)


def test_without_the_correction_term_it_is_scipys_paired_ttest():
    t, p = corrected_ttest(A, B, n_train=1.0, n_test=0.0)
    ref = stats.ttest_rel(A, B)
    assert t == pytest.approx(ref.statistic, rel=1e-12)
    assert p == pytest.approx(ref.pvalue, rel=1e-9)


def test_correction_makes_the_test_more_conservative():
    _, p_naive = corrected_ttest(A, B, 1.0, 0.0)
    _, p_corr = corrected_ttest(A, B, 400.0, 100.0)
    assert p_corr > p_naive


def test_degenerate_differences():
    assert corrected_ttest(A, A, 4, 1) == (0.0, 1.0)
    t, p = corrected_ttest(A + 0.01, A, 4, 1)  # constant non-zero difference
    assert p == 0.0 and t == math.inf
    t, p = corrected_ttest(A[:1], B[:1], 4, 1)
    assert math.isnan(t) and math.isnan(p)


def test_holm_matches_the_step_down_definition():
    p = np.array([0.01, 0.04, 0.03, 0.005])
    m = len(p)
    order = np.argsort(p)
    hand = np.empty(m)
    running = 0.0
    for j, i in enumerate(order, start=1):
        running = max(running, min(1.0, (m - j + 1) * p[i]))
        hand[i] = running
    np.testing.assert_allclose(holm(p), hand)
    # worked values: sorted 0.005, 0.01, 0.03, 0.04 -> 0.02, 0.03, 0.06, 0.06
    np.testing.assert_allclose(holm(p), [0.03, 0.06, 0.06, 0.02])
    assert holm([]).size == 0


def _scores(values):
    return {(r, f): v for (r, f), v in zip([(r, f) for r in range(2) for f in range(5)], values)}


def test_rank_orders_by_mean_and_forms_the_tie_group():
    keys = [(r, f) for r in range(2) for f in range(5)]
    n_train = dict.fromkeys(keys, 400)
    n_test = dict.fromkeys(keys, 100)
    rng = np.random.default_rng(0)
    base = 0.9 + 0.02 * rng.standard_normal(10)
    scores = {
        0: _scores(base - 0.10),                                 # clearly worse
        1: _scores(base),                                        # the best
        2: _scores(base - 0.002 + 0.01 * rng.standard_normal(10)),  # noise-level behind
    }
    out = rank(scores, n_train, n_test)
    assert out["order"][0] == 1 and out["best"] == 1
    assert out["n_comparisons"] == 2
    st = out["stats"]
    assert st[1]["tied_with_best"] and st[1]["p_value"] is None
    assert st[2]["tied_with_best"] and st[2]["p_value"] >= 0.05
    assert not st[0]["tied_with_best"] and st[0]["p_value"] < 0.05
    # the p-value is the corrected test of the best minus the configuration
    _, p = corrected_ttest(list(scores[1].values()), list(scores[2].values()), 400, 100)
    assert st[2]["p_value"] == pytest.approx(p)
    assert st[0]["mean"] == pytest.approx(np.mean(base - 0.10))
    assert st[0]["sd"] == pytest.approx(np.std(base - 0.10, ddof=1))
    # Holm multiplies the smaller p-value by m = 2
    assert st[0]["p_value_holm"] == pytest.approx(min(1.0, 2 * st[0]["p_value"]))


def test_holm_option_can_widen_the_tie_group():
    keys = [(r, f) for r in range(2) for f in range(5)]
    n = dict.fromkeys(keys, 400)
    t = dict.fromkeys(keys, 100)
    rng = np.random.default_rng(3)
    base = 0.8 + 0.02 * rng.standard_normal(10)
    noise = 0.01 * rng.standard_normal(10)
    # search a shift whose raw p-value falls between 0.025 and 0.05
    for shift in np.linspace(0.001, 0.05, 400):
        _, p = corrected_ttest(base, base - shift + noise, 400, 100)
        if 0.026 < p < 0.049:
            break
    # the other comparison is at noise level, so config 1 holds the smallest p-value
    # and Holm multiplies it by m = 2
    z = rng.standard_normal(10)
    other = base - 0.001 + 0.004 * (z - z.mean())
    scores = {0: _scores(base), 1: _scores(base - shift + noise), 2: _scores(other)}
    plain = rank(scores, n, t)
    assert plain["best"] == 0 and plain["stats"][2]["p_value"] > p
    corrected = rank(scores, n, t, use_holm=True)
    assert not plain["stats"][1]["tied_with_best"]
    assert corrected["stats"][1]["tied_with_best"]


def test_tie_rule_is_p_at_least_alpha():
    """The documented rule: tied with the best when p >= alpha (p = alpha does not reject)."""
    assert is_tied(ALPHA) and is_tied(0.5)
    assert not is_tied(np.nextafter(ALPHA, 0.0))
    assert not is_tied(None)
    assert is_tied(0.1, alpha=0.1) and not is_tied(0.0999, alpha=0.1)


@pytest.mark.parametrize("use_holm", [False, True])
def test_rank_ties_a_comparison_whose_p_value_is_exactly_alpha(monkeypatch, use_holm):
    keys = [(r, f) for r in range(2) for f in range(5)]
    sizes = dict.fromkeys(keys, 400), dict.fromkeys(keys, 100)
    scores = {0: _scores(A), 1: _scores(B)}  # one comparison: Holm's p equals the raw p
    for p, tied in ((ALPHA, True), (np.nextafter(ALPHA, 0.0), False)):
        monkeypatch.setattr(statistics, "corrected_ttest", lambda a, b, ntr, nte, p=p: (2.0, p))
        st = rank(scores, *sizes, use_holm=use_holm)["stats"][1]
        assert st["p_value"] == st["p_value_holm"] == p
        assert st["tied_with_best"] is tied
