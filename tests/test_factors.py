"""Factor shares against statsmodels' ``anova_lm`` (type-II sums of squares).

References: statsmodels ``ols`` + ``anova_lm(typ=2)`` on the main-effects model
(balanced 3 x 2 x 3 x 2 full factorial, and the same grid with configurations
removed); the textbook main-effect sum of squares ``sum n_l (m_l - m)²`` of a
balanced design; statsmodels' two-way (configuration + fold) residual mean
square for the fold noise.
"""

import itertools
import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from statsmodels.stats.anova import anova_lm

from workbench.sweep.factors import (
    factor_shares,
    factors_sentence,
    interaction_noise,
    is_balanced,
)

HIDDEN = ("relu", "tanh", "gelu")
HEADS = ("identity", "softplus")
RATES = (0.001, 0.003, 0.01)
ALPHAS = (0.0001, 0.01)


def _grid(seed=0):
    """A balanced 3 x 2 x 3 x 2 grid with additive effects, interactions and noise."""
    rng = np.random.default_rng(seed)
    eff = {"hidden": dict(zip(HIDDEN, (0.00, 0.02, 0.01))),
           "head": dict(zip(HEADS, (0.0, -0.03))),
           "learning_rate": dict(zip(RATES, (-0.10, 0.0, 0.04))),
           "alpha": dict(zip(ALPHAS, (0.0, 0.005)))}
    configs, means = [], []
    for h, o, lr, a in itertools.product(HIDDEN, HEADS, RATES, ALPHAS):
        configs.append({"hidden": h, "head": o, "layers": [16], "learning_rate": lr,
                        "alpha": a})
        inter = 0.03 if (h == "tanh" and lr == 0.01) else 0.0
        means.append(0.8 + eff["hidden"][h] + eff["head"][o] + eff["learning_rate"][lr]
                     + eff["alpha"][a] + inter + rng.normal(0, 0.005))
    return configs, np.array(means)


def _statsmodels(configs, means):
    df = pd.DataFrame({"score": means,
                       "hidden": [c["hidden"] for c in configs],
                       "head": [c["head"] for c in configs],
                       "lr": [str(c["learning_rate"]) for c in configs],
                       "alpha": [str(c["alpha"]) for c in configs]})
    fit = smf.ols("score ~ C(hidden) + C(head) + C(lr) + C(alpha)", data=df).fit()
    table = anova_lm(fit, typ=2)
    return {"hidden": table.loc["C(hidden)", "sum_sq"], "head": table.loc["C(head)", "sum_sq"],
            "learning_rate": table.loc["C(lr)", "sum_sq"],
            "alpha": table.loc["C(alpha)", "sum_sq"],
            "Residual": table.loc["Residual", "sum_sq"],
            "Residual_df": table.loc["Residual", "df"]}


def test_balanced_grid_equals_statsmodels_type2_and_the_textbook_formula():
    configs, means = _grid()
    out = factor_shares(means, configs)
    ref = _statsmodels(configs, means)
    total = float(((means - means.mean()) ** 2).sum())
    assert out["balanced"] is True
    assert out["total_sum_sq"] == pytest.approx(total, rel=1e-12)
    got = {r["factor"]: r for r in out["factors"]}
    # layers has one level ([16] everywhere): share 0, so not listed
    assert set(got) == {"hidden", "head", "learning_rate", "alpha"}
    for f in got:
        assert got[f]["sum_sq"] == pytest.approx(ref[f], rel=1e-9)
        assert got[f]["share"] == pytest.approx(ref[f] / total, rel=1e-9)
        # balanced design: SS_A = sum_l n_l (mean_l - grand mean)²
        levels = [c[f] for c in configs]
        textbook = sum(levels.count(v) * (means[[x == v for x in levels]].mean() - means.mean()) ** 2
                       for v in set(levels))
        assert got[f]["sum_sq"] == pytest.approx(textbook, rel=1e-9)
    assert out["rest"]["sum_sq"] == pytest.approx(ref["Residual"], rel=1e-9)
    assert out["rest"]["df"] == ref["Residual_df"]
    # on a balanced grid the main effects and the interactions add up to the whole
    assert sum(r["share"] for r in out["factors"]) + out["rest"]["share"] == pytest.approx(1.0)
    # largest first, and the learning rate dominates by construction
    shares = [r["share"] for r in out["factors"]]
    assert shares == sorted(shares, reverse=True)
    assert out["factors"][0]["factor"] == "learning_rate"
    assert got["hidden"]["levels"] == 3 and got["hidden"]["df"] == 2


def test_unbalanced_grid_uses_type2_sums_of_squares_like_statsmodels():
    configs, means = _grid(seed=1)
    keep = [i for i in range(len(configs)) if i not in (0, 7, 8, 20, 33)]
    configs = [configs[i] for i in keep]
    means = means[keep]
    out = factor_shares(means, configs)
    ref = _statsmodels(configs, means)
    assert out["balanced"] is False
    for r in out["factors"]:
        assert r["sum_sq"] == pytest.approx(ref[r["factor"]], rel=1e-9)
    assert out["rest"]["sum_sq"] == pytest.approx(ref["Residual"], rel=1e-9)
    assert out["rest"]["df"] == ref["Residual_df"]


def test_noise_is_the_configuration_by_fold_interaction_like_statsmodels():
    rng = np.random.default_rng(3)
    configs, means = _grid(seed=2)
    n_cfg, J = len(configs), 10  # (not C: patsy would see it instead of its C())
    fold_effect = rng.normal(0, 0.05, J)
    scores = means[:, None] + fold_effect[None, :] + rng.normal(0, 0.01, (n_cfg, J))
    ms, df = interaction_noise(scores)
    long = pd.DataFrame({"score": scores.ravel(), "config": np.repeat(np.arange(n_cfg), J),
                         "fold": np.tile(np.arange(J), n_cfg)})
    table = anova_lm(smf.ols("score ~ C(config) + C(fold)", data=long).fit(), typ=2)
    assert ms == pytest.approx(table.loc["Residual", "sum_sq"] / table.loc["Residual", "df"],
                               rel=1e-9)
    assert df == table.loc["Residual", "df"]
    out = factor_shares(scores.mean(axis=1), configs, fold_scores=scores,
                        n_train=[90] * J, n_test=[10] * J)
    var_mean = ms * (1 / J + 10 / 90)  # Nadeau & Bengio's corrected variance of a mean
    assert out["noise"]["sd"] == pytest.approx(math.sqrt(var_mean), rel=1e-12)
    assert out["noise"]["share"] == pytest.approx((n_cfg - 1) * var_mean / out["total_sum_sq"])
    naive = factor_shares(scores.mean(axis=1), configs, fold_scores=scores)
    assert naive["noise"]["sd"] == pytest.approx(math.sqrt(ms / J), rel=1e-12)


def test_single_level_factors_are_not_listed_and_no_spread_is_no_share():
    configs = [{"hidden": "relu", "head": o, "layers": (8,), "learning_rate": 0.01,
                "alpha": 0.0} for o in ("identity", "softplus", "relu")]
    out = factor_shares([0.5, 0.6, 0.7], configs)
    assert [r["factor"] for r in out["factors"]] == ["head"]
    assert out["factors"][0]["share"] == pytest.approx(1.0)
    assert out["rest"]["df"] == 0
    flat = factor_shares([0.5, 0.5, 0.5], configs)
    assert flat["factors"][0]["share"] == 0.0
    assert "no factor made a difference" in factors_sentence(flat)
    single = factor_shares([0.5], configs[:1])
    assert single["factors"] == [] and "Only one setting" in factors_sentence(single)


def test_sentence_names_the_factors_in_order_with_rounded_shares():
    configs, means = _grid()
    out = factor_shares(means, configs)
    text = factors_sentence(out)
    got = {r["factor"]: r["share"] for r in out["factors"]}
    assert text.startswith(f"On this table the learning rate explains "
                           f"{100 * got['learning_rate']:.0f}% of the spread")
    assert text.index("the learning rate") < text.index("the output head") < \
        text.index("the hidden activation")
    assert f"interactions {100 * out['rest']['share']:.0f}%" in text


def test_balance_check():
    assert is_balanced({"a": [1, 1, 2, 2], "b": ["x", "y", "x", "y"]})
    assert not is_balanced({"a": [1, 1, 2], "b": ["x", "y", "x"]})
    assert is_balanced({"a": [1, 1, 2, 2, 1, 1, 2, 2], "b": ["x", "y"] * 4})
    assert not is_balanced({"a": [1, 1, 1, 2], "b": ["x", "y", "x", "y"]})


def test_bad_inputs():
    configs, means = _grid()
    with pytest.raises(ValueError):
        factor_shares(means[:-1], configs)
    with pytest.raises(ValueError):
        factor_shares(np.where(np.arange(means.size) == 0, np.nan, means), configs)
    with pytest.raises(ValueError):
        factor_shares(means[:2], [{"hidden": "relu"}, {"head": "identity"}])
