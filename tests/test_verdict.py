"""The verdict's pure functions on constructed grids whose answers are worked out here.

References: the Bayesian correlated t-test via baycomp (Benavoli et al. 2017);
the corrected resampled t-test of Nadeau & Bengio (2003), written out with
SciPy's Student t; BBC-CV (Tsamardinos et al. 2018) through
:func:`workbench.sweep.bbc.bbc_cv`, itself checked against the paper's loop in
tests/test_bbc.py; parameter counts of an MLP counted by hand and by
scikit-learn's ``MLPRegressor`` (``coefs_`` and ``intercepts_``).
"""

import itertools
import math

import baycomp
import numpy as np
import pytest
from scipy import stats
from sklearn.neural_network import MLPRegressor

from workbench.sweep.bayes import compare_with_best
from workbench.sweep.bbc import OutOfFold, bbc_cv
from workbench.sweep.verdict import (
    candidate_view,
    n_parameters,
    recommend,
    repeats_needed,
    rule_verdict,
    verdict,
)

K, R = 5, 2
J = K * R
RHO = 1 / K


def _fold_noise(seed, sd=0.004):
    return np.random.default_rng(seed).normal(0, sd, J)


def _cfg(i, hidden, head, lr=0.001, layers=(16,), alpha=1e-4):
    return {"index": i, "rank": None, "hidden": hidden, "head": head, "layers": list(layers),
            "learning_rate": lr, "alpha": alpha}


def _standardised(n):
    v = np.arange(n, dtype=float)
    return (v - v.mean()) / v.std(ddof=1)


# --------------------------------------------------------------------------- candidates

def _lr_grid():
    """2 hidden x 2 heads x 2 learning rates; tanh wants the large rate, relu the small.

    Configuration means (by construction):
        relu/identity: 0.80 (lr 0.001), 0.70 (lr 0.03)
        relu/softplus: 0.78, 0.69
        tanh/identity: 0.60, 0.83
        tanh/softplus: 0.62, 0.81
    """
    table = {("relu", "identity"): (0.80, 0.70), ("relu", "softplus"): (0.78, 0.69),
             ("tanh", "identity"): (0.60, 0.83), ("tanh", "softplus"): (0.62, 0.81)}
    configs, scores = [], []
    base = _standardised(J) * 0.01
    for i, ((h, o), lr) in enumerate(itertools.product(table, (0.001, 0.03))):
        configs.append(_cfg(i, h, o, lr))
        scores.append(table[(h, o)][lr == 0.03] + base)  # every row has the intended mean
    return configs, np.array(scores)


def test_candidate_view_each_value_at_its_own_best_settings():
    configs, scores = _lr_grid()
    view = candidate_view(configs, scores, "hidden")
    by = {v["value"]: v for v in view}
    # tanh at its own best rate (0.03) beats relu at its own (0.001)
    assert [v["value"] for v in view] == ["tanh", "relu"]
    assert by["tanh"]["best_mean"] == pytest.approx(0.83)
    assert configs[by["tanh"]["best_index"]]["learning_rate"] == 0.03
    assert by["relu"]["best_mean"] == pytest.approx(0.80)
    assert configs[by["relu"]["best_index"]]["learning_rate"] == 0.001
    # robustness: the mean over all the settings it was tried with
    assert by["tanh"]["robustness"] == pytest.approx((0.60 + 0.83 + 0.62 + 0.81) / 4)
    assert by["relu"]["robustness"] == pytest.approx((0.80 + 0.70 + 0.78 + 0.69) / 4)
    assert by["relu"]["n_settings"] == 4 and by["relu"]["corrected"] is None
    heads = {v["value"]: v for v in candidate_view(configs, scores, "head")}
    assert heads["identity"]["best_mean"] == pytest.approx(0.83)
    assert heads["softplus"]["best_mean"] == pytest.approx(0.81)
    assert heads["softplus"]["robustness"] == pytest.approx((0.78 + 0.69 + 0.62 + 0.81) / 4)
    pairs = candidate_view(configs, scores, ("hidden", "head"))
    assert len(pairs) == 4 and all(p["n_settings"] == 2 for p in pairs)
    assert pairs[0]["value"] == ["tanh", "identity"] and pairs[0]["label"] == "tanh + identity"
    assert pairs[-1]["value"] == ["relu", "softplus"]
    assert pairs[-1]["best_mean"] == pytest.approx(0.78)


def test_candidate_corrected_estimate_is_bbc_over_that_candidates_configurations():
    configs, scores = _lr_grid()
    rng = np.random.default_rng(0)
    n = 120
    y = rng.normal(0, 1, n)
    preds = [y[:, None] * np.linspace(0.2, 0.9, len(configs))[None, :]
             + rng.normal(0, 0.6, (n, len(configs))) for _ in range(R)]
    folds = [rng.permutation(np.arange(n) % K) for _ in range(R)]
    oof = OutOfFold(y, preds, folds, "r2")
    view = {v["value"]: v for v in candidate_view(configs, scores, "hidden", oof=oof,
                                                  n_boot=50, seed=4)}
    tanh_cols = [c for c, cfg in enumerate(configs) if cfg["hidden"] == "tanh"]
    ref = bbc_cv(y, preds, folds, "r2", columns=tanh_cols, n_boot=50, seed=4)
    assert view["tanh"]["corrected"]["estimate"] == ref.estimate
    assert (view["tanh"]["corrected"]["low"], view["tanh"]["corrected"]["high"]) == \
        (ref.low, ref.high)
    relu_cols = [c for c, cfg in enumerate(configs) if cfg["hidden"] == "relu"]
    assert view["relu"]["corrected"]["estimate"] == \
        bbc_cv(y, preds, folds, "r2", columns=relu_cols, n_boot=50, seed=4).estimate


# --------------------------------------------------------------------------- repeats

def _nb_p(mean, sd, k, r, rho):
    """Two-sided p of the Nadeau-Bengio corrected t-test, written out with SciPy."""
    n = k * r
    t = mean / math.sqrt((1 / n + rho / (1 - rho)) * sd ** 2)
    return 2 * stats.t.sf(abs(t), n - 1)


def test_repeats_needed_for_significance_matches_the_corrected_t_test():
    # mean/sd = 1.2 with K = 5 and rho = 1/5 (so rho/(1-rho) = 0.25), worked by hand:
    # R = 3: t_{.975,14} = 2.145 -> needs 1/(5R) <= 1.44/2.145² - 0.25 = 0.063 -> no
    # R = 4: t_{.975,19} = 2.093 -> 1.44/2.093² - 0.25 = 0.0787 >= 1/20 -> yes
    mean, sd = 0.012, 0.010
    d = mean + sd * _standardised(J)
    got = repeats_needed(d, folds=K, repeats=R, rho=RHO, alpha=0.05)
    assert got == {"repeats": 4, "more": 2, "reachable": True}
    assert _nb_p(mean, sd, K, 4, RHO) < 0.05 <= _nb_p(mean, sd, K, 3, RHO)
    # the closed form of the docstring, at the t quantile of the answer
    t = stats.t.ppf(0.975, K * 4 - 1)
    assert 1 / (K * (mean ** 2 / (t ** 2 * sd ** 2) - 0.25)) <= 4


def test_repeats_needed_unreachable_when_the_correlation_floor_is_too_high():
    # d̄²/s² = 0.04 is below t² rho/(1-rho) ~ 1.96² x 0.25 = 0.96 for every R
    d = 0.002 + 0.010 * _standardised(J)
    assert repeats_needed(d, folds=K, repeats=R, rho=RHO) == \
        {"repeats": None, "more": None, "reachable": False}
    # already significant: no more repeats
    d = 0.05 + 0.01 * _standardised(J)
    assert repeats_needed(d, folds=K, repeats=R, rho=RHO)["more"] == 0


def test_repeats_needed_with_a_rope_matches_baycomp_on_longer_runs():
    mean, sd, rope = 0.02, 0.012, 0.01
    d = mean + sd * _standardised(J)
    got = repeats_needed(d, folds=K, repeats=R, rho=RHO, rope=rope)

    def decisive(r):
        # the same mean and sd over r repeats, tested by baycomp
        dd = mean + sd * _standardised(K * r)
        probs = baycomp.CorrelatedTTest(np.zeros(K * r), dd, rope=rope, runs=r).probs()
        return max(probs) >= 0.95

    r_star = next(r for r in range(1, 200) if decisive(r))
    assert r_star > R  # undecided now
    assert got == {"repeats": r_star, "more": r_star - R, "reachable": True}


# --------------------------------------------------------------------------- rule verdicts

def _two_head_grid(diff, noise_sd, seed=0, advised="relu"):
    """Heads relu (advised) and softplus, two learning rates each; hidden relu and tanh.

    The advised head's best configuration is 0, relu/relu lr 0.01 (mean 0.85 + diff);
    the best other is 3, relu/softplus lr 0.01 (mean 0.85), listed after a weaker
    softplus configuration; the rest are far below, tanh's best being 5.
    """
    base = 0.85 + 0.02 * _standardised(J)
    noise = _fold_noise(seed, noise_sd)
    noise -= noise.mean()  # the mean difference is exactly ``diff``
    configs = [_cfg(0, "relu", "relu", 0.01), _cfg(1, "relu", "softplus", 0.001),
               _cfg(2, "relu", "relu", 0.001), _cfg(3, "relu", "softplus", 0.01),
               _cfg(4, "tanh", "relu", 0.01), _cfg(5, "tanh", "softplus", 0.01)]
    scores = np.array([base + diff + noise, base - 0.2, base - 0.2, base,
                       base - 0.3, base - 0.25])
    return configs, scores


def _expected(scores, a, b, rope):
    c = baycomp.CorrelatedTTest(scores[b], scores[a], rope=rope, runs=R)
    pw, pe, pb = c.probs()
    d = scores[a] - scores[b]
    scale = math.sqrt((1 / J + RHO / (1 - RHO)) * d.var(ddof=1))
    q = stats.t.ppf(0.975, J - 1)
    return d.mean(), (d.mean() - q * scale, d.mean() + q * scale), (pw, pe, pb)


def test_output_rule_holds():
    configs, scores = _two_head_grid(diff=0.05, noise_sd=0.004)
    v = rule_verdict(configs, scores, factor="head", advised="relu", rho=RHO, rope=0.01,
                     folds=K, repeats=R)
    mean, (low, high), (pw, pe, pb) = _expected(scores, 0, 3, 0.01)
    assert pb >= 0.95
    assert v["outcome"] == "holds" and v["best_other"] == "softplus"
    assert (v["advised_index"], v["best_other_index"]) == (0, 3)
    assert v["difference"] == pytest.approx(0.05) == pytest.approx(mean)
    assert v["interval"] == pytest.approx([low, high])
    assert (v["p_worse"], v["p_equivalent"], v["p_better"]) == pytest.approx((pw, pe, pb))
    assert v["words"] == (f"holds: relu beats the best other head, softplus, by 0.0500 "
                          f"({low:.4f} to {high:.4f}), P > 0.99")


def test_output_rule_beaten_names_the_winner_and_its_margin():
    configs, scores = _two_head_grid(diff=-0.03, noise_sd=0.004)
    v = rule_verdict(configs, scores, factor="head", advised="relu", rho=RHO, rope=0.01,
                     folds=K, repeats=R)
    mean, (low, high), (pw, _, _) = _expected(scores, 0, 3, 0.01)
    assert pw >= 0.95 and v["outcome"] == "beaten"
    # the margin is the winner's lead: minus the difference, interval flipped
    assert v["words"] == f"beaten by softplus by 0.0300 ({-high:.4f} to {-low:.4f}), P > 0.99"


def test_output_rule_equivalent():
    configs, scores = _two_head_grid(diff=0.001, noise_sd=0.0005)
    v = rule_verdict(configs, scores, factor="head", advised="relu", rho=RHO, rope=0.01,
                     folds=K, repeats=R)
    _, (low, high), (_, pe, _) = _expected(scores, 0, 3, 0.01)
    assert pe >= 0.95 and v["outcome"] == "equivalent"
    assert v["words"] == (f"equivalent: relu and softplus differ by 0.0010 "
                          f"({low:.4f} to {high:.4f}), within ±0.0100, P > 0.99")


def test_output_rule_undecided_says_how_many_more_repeats():
    configs, scores = _two_head_grid(diff=0.02, noise_sd=0.010, seed=2)
    v = rule_verdict(configs, scores, factor="head", advised="relu", rho=RHO, rope=0.01,
                     folds=K, repeats=R)
    mean, _, probs = _expected(scores, 0, 3, 0.01)
    assert max(probs) < 0.95 and v["outcome"] == "undecided"
    sd = float((scores[0] - scores[3]).std(ddof=1))
    more = next(r for r in range(1, 500) if max(baycomp.CorrelatedTTest(
        np.zeros(K * r), mean + sd * _standardised(K * r), rope=0.01, runs=r).probs()) >= 0.95) - R
    assert v["repeats_more"] == more > 1
    assert v["words"].startswith(f"undecided: about {more} more repeats would tell (relu vs "
                                 f"softplus: {mean:.4f} (")
    # the same difference with more fold-to-fold spread: the correlation floor of the
    # corrected variance keeps the posterior too wide for any number of repeats
    configs, scores = _two_head_grid(diff=0.02, noise_sd=0.010, seed=3)
    v = rule_verdict(configs, scores, factor="head", advised="relu", rho=RHO, rope=0.01,
                     folds=K, repeats=R)
    sd = float((scores[0] - scores[3]).std(ddof=1))
    floor = math.sqrt(RHO / (1 - RHO)) * sd  # the posterior scale as R grows without bound
    assert stats.norm.sf((0.01 - 0.02) / floor) < 0.95  # P(better) stays below 0.95
    assert v["outcome"] == "undecided" and v["repeats_more"] is None
    assert v["words"].startswith("undecided: more repeats alone would not tell")


def test_hidden_rule_compares_relu_with_the_best_other_activation():
    configs, scores = _two_head_grid(diff=0.05, noise_sd=0.004)
    v = rule_verdict(configs, scores, factor="hidden", advised="relu", rho=RHO, rope=0.01,
                     folds=K, repeats=R)
    # relu's best is config 0; the best other hidden activation is tanh, best at 5
    assert (v["advised_index"], v["best_other"], v["best_other_index"]) == (0, "tanh", 5)
    assert v["outcome"] == "holds"
    assert v["rule"] == "relu in the hidden layers"


def test_rules_that_cannot_be_tested():
    configs, scores = _two_head_grid(diff=0.05, noise_sd=0.004)
    v = rule_verdict(configs, scores, factor="head", advised="exp", rho=RHO, rope=0.01,
                     folds=K, repeats=R)
    assert v["outcome"] == "not_tested" and v["words"] == "not tested: exp was not in the grid"
    only = [c for c in configs if c["head"] == "relu"]
    v = rule_verdict(only, scores[[0, 2, 4]], factor="head", advised="relu", rho=RHO,
                     rope=0.01, folds=K, repeats=R)
    assert v["words"] == "not tested: no other head was tried" and v["difference"] is None


# --------------------------------------------------------------------------- recommendation

@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")
def test_parameter_count_matches_scikit_learn():
    X = np.random.default_rng(0).normal(size=(20, 10))
    for layers in ((16,), (64,), (16, 8)):
        m = MLPRegressor(hidden_layer_sizes=layers, max_iter=1).fit(X, X[:, 0])
        sk = sum(w.size for w in m.coefs_) + sum(b.size for b in m.intercepts_)
        assert n_parameters(layers, 10, 1) == sk
    assert n_parameters((16,), 10, 1) == 11 * 16 + 17 * 1 == 193


def _group_grid():
    configs = [_cfg(0, "gelu", "softplus", layers=(64,)),    # the best
               _cfg(1, "relu", "relu", layers=(64,)),        # rule of thumb, equivalent
               _cfg(2, "tanh", "softplus", layers=(16,)),    # equivalent, fewest parameters
               _cfg(3, "relu", "relu", layers=(16, 8)),      # rule of thumb, undecided
               _cfg(4, "gelu", "relu", layers=(8,)),         # worse
               _cfg(5, "relu", "softplus", layers=(8,))]     # relu hidden, other head
    scores = np.array([0.90, 0.895, 0.894, 0.89, 0.80, 0.893])[:, None] + \
        _standardised(J)[None, :] * 0.01
    return configs, scores


def test_recommend_prefers_the_rule_of_thumb_in_the_group():
    configs, scores = _group_grid()
    # config 5 (relu hidden, softplus head) is simpler but is not the rule of thumb
    decisions = ["best", "equivalent", "equivalent", "undecided", "worse", "equivalent"]
    rec = recommend(configs, scores, decisions, advised_head="relu", n_inputs=10, n_outputs=1,
                    p_equivalent=[None, 0.97, 0.96, 0.5, 0.0, 0.96])
    assert rec["index"] == 1 and rec["rule_of_thumb"] is True
    assert rec["n_parameters"] == 11 * 64 + 65
    assert rec["reason"] == ("follows the rule of thumb (relu hidden layers with the advised relu "
                             "head) and is practically equivalent to the best, P = 0.97")


def test_recommend_fewest_parameters_when_no_rule_of_thumb_is_equivalent():
    configs, scores = _group_grid()
    decisions = ["best", "undecided", "equivalent", "undecided", "worse", "undecided"]
    rec = recommend(configs, scores, decisions, advised_head="relu", n_inputs=10, n_outputs=1)
    # config 2: (10+1)*16 + (16+1)*1 = 193 parameters against 769 for the best
    assert rec["index"] == 2 and rec["n_parameters"] == 193 and not rec["rule_of_thumb"]
    assert rec["reason"] == ("the fewest parameters (193) among the 2 configurations "
                             "practically equivalent to the best; none follows the rule of thumb")
    alone = recommend(configs, scores, ["best", "worse", "worse", "undecided", "worse", "worse"],
                      advised_head="relu", n_inputs=10, n_outputs=1)
    assert alone["index"] == 0 and alone["reason"].startswith("the best configuration; no other")


def test_recommend_counts_outputs_per_head():
    # softmax on 3 classes has 3 output units, logistic 1: (4+1)*8 + 9*3 = 67 vs 49
    configs = [_cfg(0, "tanh", "softmax", layers=(8,)), _cfg(1, "tanh", "logistic", layers=(8,))]
    scores = np.array([[0.9] * J, [0.9] * J])
    rec = recommend(configs, scores, ["best", "equivalent"], advised_head="sigmoid",
                    n_inputs=4, n_outputs={"softmax": 3, "logistic": 1})
    assert rec["index"] == 1 and rec["n_parameters"] == 49


# --------------------------------------------------------------------------- all together

def test_verdict_puts_each_piece_in_its_place():
    configs, scores = _two_head_grid(diff=-0.03, noise_sd=0.004)
    rng = np.random.default_rng(1)
    n = 60
    y = rng.normal(0, 1, n)
    preds = [y[:, None] * np.linspace(0.3, 0.8, 6)[None, :] + rng.normal(0, 0.5, (n, 6))
             for _ in range(R)]
    folds = [rng.permutation(np.arange(n) % K) for _ in range(R)]
    oof = OutOfFold(y, preds, folds, "r2")
    out = verdict(configs, scores, advised_head="relu", rho=RHO, rope=0.01, folds=K, repeats=R,
                  n_inputs=10, n_outputs=1, oof=oof, n_boot=40, seed=2)
    assert out["output"]["factor"] == "head" and out["output"]["advised"] == "relu"
    assert out["output"]["outcome"] == "beaten" and out["output"]["best_other"] == "softplus"
    assert out["hidden"]["factor"] == "hidden" and out["hidden"]["advised"] == "relu"
    assert out["hidden"]["best_other"] == "tanh"
    assert out["comparisons"] == compare_with_best(scores, rho=RHO, rope=0.01)
    assert out["comparisons"][3]["decision"] == "best"  # softplus is the best overall here
    assert out["corrected_best"]["estimate"] == bbc_cv(y, preds, folds, "r2", n_boot=40,
                                                       seed=2).estimate
    assert [v["value"] for v in out["candidates"]["head"]] == ["softplus", "relu"]
    assert len(out["candidates"]["hidden_head"]) == 4
    assert out["recommended"]["index"] in (0, 3)
    no_oof = verdict(configs, scores, advised_head="relu", rho=RHO, rope=0.01, folds=K,
                     repeats=R, n_inputs=10, n_outputs=1)
    assert no_oof["corrected_best"] is None
    assert no_oof["candidates"]["hidden"][0]["corrected"] is None
