"""Racing (``SweepPlan.race``, ``workbench sweep --race``): the rule, the runner, resume, results.

External references: the stopping rule is checked against SciPy's Student t
distribution with the posterior of Benavoli et al. (2017, section 3: location the
mean difference, scale ``sqrt((1/J + rho/(1-rho)) s^2)``, ``J - 1`` degrees of
freedom; ``rho/(1-rho) = n_test/n_train``, Nadeau & Bengio 2003), not against the
project's own :mod:`workbench.sweep.bayes`; the tables are scikit-learn's
``load_diabetes`` and one made here with a known signal.
"""

import json
import threading

import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import load_diabetes

from workbench.sweep import racing
from workbench.sweep.plan import SweepPlan, build_plan
from workbench.sweep.results import STOPPED, sweep_results, verdict_statements
from workbench.sweep.runner import run_sweep
from workbench.sweep.store import Store

K, R = 5, 2


def _plan(n_configs=2, **kw):
    """A plan of ``n_configs`` configurations (activations, then learning rates)."""
    hidden = ["tanh", "gelu", "silu", "elu", "selu"][:n_configs]  # no rule-of-thumb one
    rates = [0.001] if n_configs <= 5 else [0.001, 0.01]
    plan = SweepPlan(table="t.csv", target="y", task="regression", target_kind="signed",
                     hidden=hidden, heads=["identity"],
                     learning_rates=rates, folds=K, repeats=R, baselines=[], race=True, **kw)
    assert plan.n_configurations == n_configs
    return plan


def _feed(race, scores, n_train=400, n_test=100, upto=None):
    """Give ``race`` the scores ``{config: [J scores in (repeat, fold) order]}`` block by
    block, looking after each; return the stop records in order."""
    stops = []
    for j, (r, f) in enumerate(racing.block_keys(K, R)):
        if upto is not None and j >= upto:
            break
        for c, s in scores.items():
            if c in race.stopped:
                continue
            race.note({"config_index": c, "repeat": r, "fold": f, "status": "done",
                       "test_score": s[j], "n_train": n_train, "n_test": n_test})
        stops += race.look()
    return stops


def _scipy_p_worse(d, rope, n_train=400, n_test=100):
    """P(mean difference < -rope) of Benavoli et al.'s posterior, with SciPy's t."""
    d = np.asarray(d, float)
    J = d.size
    scale = np.sqrt((1 / J + n_test / n_train) * d.var(ddof=1))
    return stats.t.cdf(-rope, J - 1, loc=d.mean(), scale=scale)


def _scipy_p_full_worse(d, n_total, rope):
    """P(mean of all n_total differences < -rope | the first J) by the prediction interval
    for the mean of m = n_total - J future observations (Hahn, Meeker & Escobar 2017,
    Statistical Intervals, 2nd ed., section 4.6: xbar +- t_{J-1} s sqrt(1/J + 1/m)), with
    SciPy's t; the full mean is (J dbar + m ebar) / n_total."""
    d = np.asarray(d, float)
    J = d.size
    m = n_total - J
    # full mean < -rope  <=>  ebar < (-rope * n_total - J dbar) / m
    cut = (-rope * n_total - J * d.mean()) / m
    return stats.t.cdf(cut, J - 1, loc=d.mean(), scale=d.std(ddof=1) * np.sqrt(1 / J + 1 / m))


def test_p_full_worse_is_the_prediction_interval_and_the_posterior_predictive():
    """Two outside checks of :func:`racing.p_full_worse`: SciPy's t in the textbook
    prediction-interval form, and a Monte Carlo draw from the normal model's posterior
    predictive under the reference prior (Gelman et al. 2013, BDA3 section 3.2: sigma^2 ~
    scaled inverse chi^2 (J-1, s^2), mu ~ N(dbar, sigma^2/J), then the m future values)."""
    d = np.array([-0.05, -0.12, -0.02, -0.08])
    for n_total, rope in ((10, 0.01), (15, 0.0), (5, 0.02)):
        p, loc, scale = racing.p_full_worse(d, n_total, rope)
        assert p == pytest.approx(_scipy_p_full_worse(d, n_total, rope), abs=1e-12)
        J, m = d.size, n_total - d.size
        assert loc == pytest.approx(d.mean())
        assert scale == pytest.approx(m / n_total * d.std(ddof=1) * np.sqrt(1 / J + 1 / m))
        rng = np.random.default_rng(0)
        n = 400_000
        sigma2 = (J - 1) * d.var(ddof=1) / rng.chisquare(J - 1, n)
        mu = rng.normal(d.mean(), np.sqrt(sigma2 / J))
        ebar = rng.normal(mu, np.sqrt(sigma2 / m))
        full = (J * d.mean() + m * ebar) / n_total
        assert p == pytest.approx(np.mean(full < -rope), abs=3e-3)
    # nothing left to predict, equal differences, too few
    assert racing.p_full_worse([-0.1, -0.2], 2, 0.01)[0] == 1.0
    assert racing.p_full_worse([-0.1, -0.1, -0.1], 10, 0.01)[0] == 1.0
    assert racing.p_full_worse([-0.005, -0.005, -0.005], 10, 0.01)[0] == 0.0
    assert np.isnan(racing.p_full_worse([-0.3], 10, 0.01)[0])


@pytest.mark.parametrize("beyond", [True, False])
def test_the_stop_is_at_p_0975_of_ranking_below_at_the_second_block(beyond):
    """Differences placed just past (or just short of) the 0.975 quantile of the predicted
    full-sweep difference: stopped exactly when SciPy's predictive tail below zero (the
    full sweep ranks it below the best) reaches 0.975, at the first look (J = FIRST_LOOK
    = 2 of K x R = 10 blocks). One configuration besides the best: nothing to moderate
    against, so its own variance (1 degree of freedom) is used."""
    assert (racing.THRESHOLD, racing.FIRST_LOOK, racing.STOP, racing.MODERATE,
            racing.TEST) == (0.975, 2, "below", True, "predictive")
    J, n_total = 2, K * R
    e = np.array([-1.0, 1.0]) * 0.01
    m = n_total - J
    scale = (m / n_total) * e.std(ddof=1) * np.sqrt(1 / J + 1 / m)
    shift = -stats.t.ppf(0.975, J - 1) * scale + (-1e-4 if beyond else 1e-4)
    best = np.full(K * R, 0.8)
    other = np.concatenate([best[:J] + shift + e, best[J:]])
    expected = _scipy_p_full_worse(shift + e, n_total, 0.0)
    assert bool(expected >= 0.975) is beyond
    race = racing.Race(_plan())
    stops = _feed(race, {0: best, 1: other}, upto=J)
    assert [s["config_index"] for s in stops] == ([1] if beyond else [])
    if beyond:
        s = stops[0]
        assert (s["after_repeat"], s["after_fold"], s["n_scores"], s["best_index"]) == \
            (0, J - 1, J, 0)
        assert s["p_worse"] == pytest.approx(expected, abs=1e-12)
        assert s["difference"] == pytest.approx(shift)
        assert s["threshold"] == 0.975 and "0.975" in s["reason"]


def _smyth_posterior_precision(s2, df, d0, s0):
    """E[1 / sigma^2 | s^2] under Smyth's (2004, section 3) model, by numerical
    integration with SciPy: prior 1/sigma^2 ~ chi2_d0 / (d0 s0^2), data s^2 | sigma^2 ~
    sigma^2 chi2_df / df. The conjugate answer is 1 / the moderated variance."""
    from scipy import integrate

    prior = stats.gamma(a=d0 / 2, scale=2 / (d0 * s0))  # of the precision 1/sigma^2

    def like(prec):
        return stats.chi2.pdf(df * s2 * prec, df) * df * prec

    top = integrate.quad(lambda t: t * prior.pdf(t) * like(t), 0, np.inf, limit=200)[0]
    bottom = integrate.quad(lambda t: prior.pdf(t) * like(t), 0, np.inf, limit=200)[0]
    return top / bottom


def test_moderated_variances_follow_smyths_model():
    """:func:`racing.moderated_variances` against Smyth (2004), "Linear models and
    empirical Bayes methods for assessing differential expression in microarray
    experiments", Stat. Appl. Genet. Mol. Biol. 3(1), sections 3 and 6.2: variances drawn
    from the model (prior d0 = 8, s0^2 = 0.3; 3 degrees of freedom each) give back the
    prior, and each moderated variance is the posterior's, checked by integrating the
    posterior with SciPy."""
    rng = np.random.default_rng(0)
    sigma2 = 8 * 0.3 / rng.chisquare(8, 40_000)
    s2 = sigma2 * rng.chisquare(3, sigma2.size) / 3
    post, df, prior = racing.moderated_variances(s2, 3)
    assert prior["d0"] == pytest.approx(8, rel=0.1)
    assert prior["s0_squared"] == pytest.approx(0.3, rel=0.03)
    assert df == pytest.approx(prior["d0"] + 3)
    for g in (0, 1, 2):
        assert 1 / post[g] == pytest.approx(
            _smyth_posterior_precision(s2[g], 3, prior["d0"], prior["s0_squared"]), rel=1e-6)
    # fewer than three: nothing to moderate against
    few, df, _ = racing.moderated_variances([0.1, 0.4], 1)
    assert list(few) == [0.1, 0.4] and df == 1
    # variances that vary less than sampling alone makes them: infinite prior df
    even = np.full(50, 0.2) * np.array([0.99, 1.01] * 25)
    out, df, prior = racing.moderated_variances(even, 4)
    assert np.isinf(df) and np.allclose(out, prior["s0_squared"])
    # an exactly zero variance (alike on every fold) is floored, not a -inf logarithm
    out, df, _ = racing.moderated_variances([0.0, 0.1, 0.3, 0.05, 0.2], 1)
    assert np.all(np.isfinite(out)) and out[0] > 0 and np.isfinite(df)


def test_a_look_moderates_the_variances_across_the_configurations():
    """Five configurations, the best (0) and four behind it by different amounts and
    spreads: at the first look each one's probability is SciPy's t with the moderated
    variance and degrees of freedom of the four differences' variances, and exactly those
    at or above 0.975 are stopped, with that probability recorded."""
    best = np.full(K * R, 0.8)
    shifts = {1: (-0.004, 0.002), 2: (-0.03, 0.01), 3: (-0.08, 0.03), 4: (-0.2, 0.002)}
    scores = {0: best}
    for c, (mu, half) in shifts.items():
        scores[c] = best + mu + np.resize([-half, half], K * R)
    J, n_total = 2, K * R
    d = np.array([scores[c][:J] - best[:J] for c in (1, 2, 3, 4)])
    post, df, _ = racing.moderated_variances(d.var(axis=1, ddof=1), J - 1)
    m = n_total - J
    want = {}
    for i, c in enumerate((1, 2, 3, 4)):
        scale = (m / n_total) * np.sqrt(post[i] * (1 / J + 1 / m))
        want[c] = stats.t.cdf((0 - d[i].mean()) / scale, df)
    assert any(p >= 0.975 for p in want.values()) and any(p < 0.975 for p in want.values())
    race = racing.Race(_plan(5))
    stops = _feed(race, scores, upto=J)
    assert {s["config_index"] for s in stops} == {c for c, p in want.items() if p >= 0.975}
    for s in stops:
        assert s["p_worse"] == pytest.approx(want[s["config_index"]], abs=1e-9)
    # without moderation each uses its own variance and one degree of freedom
    own = racing.Race(_plan(5), moderate=False)
    _feed(own, scores, upto=J)
    for i, c in enumerate((1, 2, 3, 4)):
        scale = (m / n_total) * d[i].std(ddof=1) * np.sqrt(1 / J + 1 / m)
        p = stats.t.cdf(-d[i].mean() / scale, J - 1)
        assert (c in own.stopped) is bool(p >= 0.975)


def test_the_leading_rule_of_thumb_configuration_is_kept():
    """relu with the advised head (identity for a signed target) at two learning rates:
    the leading one is kept however far behind the best it is -- the verdict tests the
    rule of thumb at its best configuration -- and the one behind it is stopped like any
    other. :func:`racing.rule_of_thumb_configs` takes the head from the advice."""
    plan = SweepPlan(table="t.csv", target="y", task="regression", target_kind="signed",
                     hidden=["tanh", "relu"], heads=["identity"], learning_rates=[0.01, 0.001],
                     folds=K, repeats=R, baselines=[], race=True)
    labels = {c.index: (c.hidden, c.learning_rate) for c in plan.configurations()}
    relu = {c for c, (h, _) in labels.items() if h == "relu"}
    assert racing.rule_of_thumb_configs(plan) == relu
    (lead, behind) = sorted(relu, key=lambda c: labels[c][1], reverse=True)
    tanh = [c for c in labels if c not in relu]
    best = np.full(K * R, 0.8) + np.resize([-0.001, 0.001], K * R)
    scores = {tanh[0]: best, tanh[1]: best - 0.5, lead: best - 0.3, behind: best - 0.4}
    race = racing.Race(plan)
    _feed(race, scores)
    assert set(race.stopped) == {tanh[1], behind}
    # a count target's advice is exp; a non-negative one's relu or softplus by its zeros
    count = SweepPlan.from_dict(dict(plan.to_dict(), target_kind="count",
                                     heads=["exp", "identity"], hidden=["relu"]))
    assert {c.head for c in count.configurations()
            if c.index in racing.rule_of_thumb_configs(count)} == {"exp"}
    nonneg = SweepPlan.from_dict(dict(plan.to_dict(), target_kind="non_negative",
                                      heads=["relu", "softplus", "identity"], hidden=["relu"]))
    assert {c.head for c in nonneg.configurations()
            if c.index in racing.rule_of_thumb_configs(nonneg)} == {"relu", "softplus"}


@pytest.mark.parametrize("beyond", [True, False])
def test_the_correlated_variant_stops_at_scipys_posterior_tail(beyond):
    """``test="correlated"`` (the verdict's Bayesian correlated t-test, kept for
    comparison) with ``stop="worse"``: stopped exactly when SciPy's posterior tail below -ROPE reaches the
    threshold (0.99 here), at a first look after K blocks."""
    u, rope = 0.01, 0.01
    e = np.array([-2, -1, 0, 1, 2]) * u
    scale = np.sqrt((1 / K + 1 / (K - 1)) * e.var(ddof=1))
    m = -rope - stats.t.ppf(0.99, K - 1) * scale + (-1e-4 if beyond else 1e-4)
    best = np.full(K * R, 0.8)
    other = np.concatenate([best[:K] + m + e, best[K:]])
    assert bool(_scipy_p_worse(m + e, rope) >= 0.99) is beyond
    race = racing.Race(_plan(), test="correlated", threshold=0.99, first_look=K, stop="worse")
    stops = _feed(race, {0: best, 1: other}, upto=K)
    assert [s["config_index"] for s in stops] == ([1] if beyond else [])
    if beyond:
        assert stops[0]["p_worse"] == pytest.approx(_scipy_p_worse(m + e, rope), abs=1e-9)
        assert stops[0]["n_scores"] == K


def test_no_look_before_the_second_block_nor_after_the_last():
    """A hopeless configuration is not stopped on one score however bad it is; it is on
    two. One that only becomes clearly worse in the last block is not stopped there:
    every trial has run, nothing is left to save."""
    best = np.full(K * R, 0.8) + np.linspace(0, 0.01, K * R)
    hopeless = best - 0.7 + np.linspace(0, 0.001, K * R)
    race = racing.Race(_plan())
    assert _feed(race, {0: best, 1: hopeless}, upto=1) == []
    assert _feed(racing.Race(_plan()), {0: best, 1: hopeless}, upto=2)[0]["config_index"] == 1
    assert racing.look_positions(_plan()) == set(range(1, K * R - 1))
    assert racing.look_positions(SweepPlan.from_dict(dict(_plan().to_dict(), race=False))) \
        == set()
    late = best.copy()
    late[-1] -= 5.0
    race = racing.Race(_plan())
    assert _feed(race, {0: best, 1: late}) == [] and race.stopped == {}


def test_a_late_winner_behind_at_the_first_look_is_not_stopped_and_ranks_first():
    """The full sweep's first-ranked configuration (0) trails the early leader (1) over the
    first repeat by more than the ROPE, but noisily: racing keeps it, and a hopeless one
    (2) is stopped. The full ranking (means over every fold) puts 0 first."""
    rng = np.random.default_rng(3)
    base = 0.7 + rng.normal(0, 0.02, K * R)
    winner = base + np.concatenate([[-0.05, 0.04, -0.06, 0.03, -0.07],
                                    [0.08, 0.06, 0.09, 0.07, 0.08]])
    leader = base + 0.01
    hopeless = base - 0.5 + rng.normal(0, 0.005, K * R)
    scores = {0: winner, 1: leader, 2: hopeless}
    assert max(scores, key=lambda c: scores[c].mean()) == 0  # first in the full sweep
    assert winner[:K].mean() < leader[:K].mean() - 0.01  # behind beyond the ROPE at first
    race = racing.Race(_plan(3))
    stops = _feed(race, scores)
    assert [s["config_index"] for s in stops] == [2]
    assert 0 not in race.stopped


def _simulate(true, seeds, k, r, fold_sd=0.03, noise=0.02, rope=0.01, **rule):
    """Race simulated k x r grids of ``true.size`` configurations: each fold adds a shared
    effect (sd ``fold_sd``, as overlapping training sets do) and each configuration its
    own noise (sd ``noise``). Returns (grids whose full first -- the best mean over all
    folds -- was stopped, grids whose racing best is worse than the full first by more
    than ``rope`` over all folds, share of the trials run)."""
    plan = SweepPlan(table="t.csv", target="y", task="regression", target_kind="signed",
                     hidden=["tanh", "gelu", "silu", "elu", "selu"], heads=["identity"],
                     learning_rates=[0.001, 0.01], folds=k, repeats=r, baselines=[],
                     race=True)
    assert plan.n_configurations == true.size == 10
    n = k * r
    lost, worse, run = 0, 0, 0
    for seed in seeds:
        rng = np.random.default_rng(seed)
        x = true[:, None] + rng.normal(0, fold_sd, n)[None, :] + \
            rng.normal(0, noise, (true.size, n))
        race = racing.Race(plan, **rule)
        for j, (rr, f) in enumerate(racing.block_keys(k, r)):
            for c in range(true.size):
                if c not in race.stopped:
                    race.note({"config_index": c, "repeat": rr, "fold": f, "status": "done",
                               "test_score": x[c, j], "n_train": 400, "n_test": 100})
            race.look()
        means = x.mean(axis=1)
        first = int(np.argmax(means))
        kept = [c for c in range(true.size) if c not in race.stopped]
        lost += first in race.stopped
        worse += bool(means[kept].max() < means[first] - rope)
        run += sum(race._stop_position(c) + 1 if c in race.stopped else n
                   for c in range(true.size))
    return lost, worse, run / (len(seeds) * true.size * n)


SPREAD = np.array([0.80, 0.798, 0.796, 0.794, 0.792, 0.77, 0.74, 0.70, 0.60, 0.50])


def test_on_simulated_grids_racing_keeps_a_best_as_good_as_the_full_sweeps():
    """Simulated grids of ten configurations: five within 0.01 (the ROPE) of each other
    and five worse by 0.03 to 0.3 (200 grids of 5 folds x 3 repeats, 100 of 5 x 2), and
    ten within 0.009 of each other (200 grids of 5 x 3). In almost every grid the best
    configuration racing keeps is practically as good as the full sweep's first (within
    the ROPE over all folds), while racing runs well under the trials of the hopeless
    ones. Among configurations this close the full sweep's first is a matter of noise,
    and racing may stop it (then it reports another of the near-equal ones): the counts
    are pinned so that a looser rule shows (at P >= 0.95 the first is stopped in 48 of
    the 200 spread grids, 60 of the 200 close ones). The stricter rule this replaced (P >= 0.999
    of being worse beyond the ROPE, from the 4th block) never stopped the first, but ran
    far more of the trials."""
    lost, worse, share = _simulate(SPREAD, range(200), 5, 3)
    assert worse <= 1 and lost <= 40 and share < 0.45
    lost, worse, share = _simulate(SPREAD, range(100), 5, 2)
    assert worse <= 1 and lost <= 10 and share < 0.5
    lost, worse, share = _simulate(0.8 - 0.001 * np.arange(10), range(1000, 1200), 5, 3)
    assert worse <= 2 and lost <= 45 and share > 0.4
    # the stricter rule, for scale (and to keep its options working)
    lost, worse, strict = _simulate(SPREAD, range(50), 5, 3, stop="worse", threshold=0.999,
                                    first_look=4, moderate=False)
    assert lost == 0 and worse == 0 and strict > 0.6


def test_the_current_best_and_a_diverged_configuration_are_never_stopped():
    best = np.full(K * R, 0.8)
    race = racing.Race(_plan(3))
    for j, (r, f) in enumerate(racing.block_keys(K, R)):
        race.note({"config_index": 0, "repeat": r, "fold": f, "status": "done",
                   "test_score": best[j], "n_train": 400, "n_test": 100})
        race.note({"config_index": 1, "repeat": r, "fold": f, "status": "diverged",
                   "test_score": None})
        race.note({"config_index": 2, "repeat": r, "fold": f, "status": "done",
                   "test_score": 0.8 - 0.3 + 0.001 * j, "n_train": 400, "n_test": 100})
    stops = race.look()
    assert [s["config_index"] for s in stops] == [2] and stops[0]["best_index"] == 0


def test_an_error_score_waits_for_the_constant_baseline_and_takes_its_rope():
    """neg_root_mean_squared_error with a stop that uses the ROPE (``stop="worse"``): the
    ROPE is 1 % of the constant baseline's mean score (Benavoli et al.'s relative ROPE as
    the verdict uses it); no look before its trials. The rule's own stop (ranked below
    the best) needs no ROPE and does not wait."""
    plan = SweepPlan(table="t.csv", target="y", task="regression", target_kind="signed",
                     hidden=["tanh", "gelu"], heads=["identity"], folds=K, repeats=R,
                     baselines=["constant"], metric="neg_root_mean_squared_error", race=True)
    best = np.full(K * R, -10.0) + np.linspace(0, 0.1, K * R)
    plain = racing.Race(plan)
    assert [s["config_index"] for s in _feed(plain, {0: best, 1: best - 5}, upto=2)] == [1]
    race = racing.Race(plan, stop="worse", first_look=4)
    _feed(race, {0: best, 1: best - 5})
    assert race.stopped == {}  # the constant baseline (index 2) has no trial yet
    for r, f in racing.block_keys(K, R):
        race.note({"config_index": 2, "repeat": r, "fold": f, "status": "done",
                   "test_score": -20.0, "n_train": 400, "n_test": 100})
    (stop,) = race.look()
    assert stop["config_index"] == 1 and stop["rope"] == pytest.approx(0.2)
    assert (stop["after_repeat"], stop["after_fold"]) == (0, 3)  # at the first look


# --------------------------------------------------------------------------- real sweeps


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    """A regression table with a strong signal: lr 0.03 learns it, lr 1e-6 cannot."""
    d = tmp_path_factory.mktemp("racing")
    load_diabetes(as_frame=True).frame.iloc[:240].to_csv(d / "d.csv", index=False)
    return d / "d.csv"


def _race_plan(table, race=True, **kw):
    opts = dict(hidden="relu,tanh", output="identity", layers=["8"],
                learning_rates=["0.03", "0.000001"], folds=3, repeats=3, epochs=15,
                baselines=["constant"])
    opts.update(kw)
    return build_plan(table, "target", race=race, **opts)


def _stored(st, sweep_id):
    return {(t["config_index"], t["repeat"], t["fold"]): t["test_score"]
            for t in st.trials(sweep_id, with_history=False)}


@pytest.fixture(scope="module")
def full_and_raced(table, tmp_path_factory):
    path = tmp_path_factory.mktemp("racing_store") / "s.sqlite"
    events = []
    with Store(path) as st:
        full = run_sweep(_race_plan(table, race=False), store=st, backend="inline")
        raced = run_sweep(_race_plan(table), store=st, backend="inline",
                          on_event=events.append)
        yield {"store": path, "full": full.sweep_id, "raced": raced.sweep_id,
               "events": events, "full_res": sweep_results(st, full.sweep_id),
               "raced_res": sweep_results(st, raced.sweep_id),
               "full_scores": _stored(st, full.sweep_id),
               "raced_scores": _stored(st, raced.sweep_id),
               "stopped": st.stopped(raced.sweep_id), "outcome": raced}


def test_hopeless_learning_rates_are_stopped_and_their_trials_saved(full_and_raced):
    """lr 1e-6 (configurations 1 and 3: relu and tanh) cannot fit the target in 15 epochs:
    both are stopped within the first two repeats, their later trials are never run, and
    the racing sweep stores exactly the full sweep's scores for the trials it ran (same
    folds, same seeds)."""
    fr = full_and_raced
    assert set(fr["stopped"]) == {1, 3}
    blocks = racing.block_keys(3, 3)
    saved = 0
    for c in (1, 3):
        s = fr["stopped"][c]
        j = blocks.index((s["after_repeat"], s["after_fold"]))
        assert 1 <= j < 6 and s["n_scores"] == j + 1  # from the first look, before repeat 3
        assert {k for k in fr["raced_scores"] if k[0] == c} == \
            {(c, r, f) for r, f in blocks[:j + 1]}
        saved += 9 - (j + 1)
    assert len(fr["raced_scores"]) == 4 * 9 - saved
    assert all(fr["raced_scores"][k] == fr["full_scores"][k] for k in fr["raced_scores"])
    stops = [e for e in fr["events"] if e["type"] == "configuration_stopped"]
    assert sorted(e["config_index"] for e in stops) == [1, 3]
    assert sum(e["n_skipped"] for e in stops) == saved
    n = 36 - saved
    assert fr["outcome"].n_todo == fr["outcome"].n_finished == n
    last = [e for e in fr["events"] if e["type"] == "trial_finished"][-1]
    assert last["n_todo"] == last["n_finished"] == n


def test_the_full_sweeps_first_is_kept_and_recommended_alike(full_and_raced):
    fr = full_and_raced
    first = fr["full_res"]["configurations"][0]["index"]
    assert first not in fr["stopped"]
    assert fr["raced_res"]["verdict"]["recommended"]["index"] == \
        fr["full_res"]["verdict"]["recommended"]["index"]
    assert fr["raced_res"]["configurations"][0]["index"] == first


def test_results_mark_stopped_configurations_as_partial(full_and_raced):
    res = full_and_raced["raced_res"]
    json.dumps(res, allow_nan=False)
    by = {c["index"]: c for c in res["configurations"]}
    for c in (1, 3):
        cfg = by[c]
        assert cfg["status"] == STOPPED == "stopped (racing)"
        n = cfg["stopped"]["n_scores"]
        assert n < 9 and "beyond doubt" in cfg["stopped"]["reason"]
        assert cfg["n_scores"] == n and len(cfg["trials"]) == n  # partial
        assert cfg["p_value"] is None and cfg["decision"] is None  # not ranked or judged
        assert cfg["mean"] == pytest.approx(np.mean([t["test_score"] for t in cfg["trials"]]))
    assert [c["index"] for c in res["configurations"][-2:]] in ([1, 3], [3, 1])
    for c in (0, 2):
        assert by[c]["stopped"] is None and by[c]["status"] == "done"
    assert res["verdict"]["recommended"]["index"] in (0, 2)
    assert res["racing"]["n_stopped"] == 2 and res["racing"]["race"] is True
    statements = {s["key"]: s["text"] for s in verdict_statements(res)}
    assert "2 configurations stopped (racing)" in statements["racing"]
    saved = 36 - len(full_and_raced["raced_scores"])
    assert f"{saved} trials not run" in statements["racing"]
    # the baselines ran fully: the verdict's comparison with them has every fold
    assert len(res["baselines"][0]["scores"]) == 9


def test_resume_keeps_the_race(table, tmp_path, full_and_raced):
    """Interrupted right after the first stop: the resumed sweep keeps it stopped, runs
    none of its trials, stops the other hopeless one too and ends with the uninterrupted
    racing sweep's trials and scores. Then, a stop decided but not recorded before an
    interruption (its row deleted) is recorded again by the resume's replay."""
    cancel = threading.Event()

    def stop_at_first(ev):
        if ev["type"] == "configuration_stopped":
            cancel.set()

    with Store(tmp_path / "r.sqlite") as st:
        first = run_sweep(_race_plan(table), store=st, backend="inline", cancel=cancel,
                          on_event=stop_at_first)
        assert first.state == "interrupted"
        before = st.stopped(first.sweep_id)
        assert 1 <= len(before) <= 2
        again = run_sweep(store=st, resume=first.sweep_id, backend="inline")
        assert again.state == "finished"
        after = st.stopped(first.sweep_id)
        assert {c: after[c] for c in before} == before and set(after) == {1, 3}
        assert _stored(st, first.sweep_id) == full_and_raced["raced_scores"]
        from workbench.errors import InputError

        with pytest.raises(InputError, match="nothing left to run"):
            run_sweep(store=st, resume=first.sweep_id, backend="inline")

    cancel2 = threading.Event()
    with Store(tmp_path / "u.sqlite") as st:
        out = run_sweep(_race_plan(table), store=st, backend="inline", cancel=cancel2,
                        on_event=lambda ev: cancel2.set()
                        if ev["type"] == "configuration_stopped" else None)
        st._tx([("DELETE FROM stopped WHERE sweep_id=?", (out.sweep_id,))])
        events = []
        run_sweep(store=st, resume=out.sweep_id, backend="inline", on_event=events.append)
        assert set(st.stopped(out.sweep_id)) == {1, 3}
        assert _stored(st, out.sweep_id) == full_and_raced["raced_scores"]
        assert sorted(e["config_index"] for e in events
                      if e["type"] == "configuration_stopped") == [1, 3]


def test_racing_on_two_processes_and_dask_stops_alike(table, tmp_path, full_and_raced):
    """The looks are at fixed blocks, so the decisions do not depend on when trials finish:
    the same stops with 2 worker processes and on a Dask cluster; the stored scores of
    every trial run equal the full sweep's."""
    from distributed import LocalCluster

    with Store(tmp_path / "p.sqlite") as st:
        two = run_sweep(_race_plan(table), store=st, jobs=2)
        with LocalCluster(n_workers=1, threads_per_worker=2, processes=False, protocol="tcp",
                          dashboard_address=None) as cluster:
            dask = run_sweep(_race_plan(table), store=st, cluster=cluster.scheduler_address)
        for out in (two, dask):
            stopped = st.stopped(out.sweep_id)
            assert {c: (s["after_repeat"], s["after_fold"]) for c, s in stopped.items()} == \
                {c: (s["after_repeat"], s["after_fold"])
                 for c, s in full_and_raced["stopped"].items()}
            scores = _stored(st, out.sweep_id)
            assert all(scores[k] == full_and_raced["full_scores"][k] for k in scores)
            # a trial of a stopped configuration already running may finish: at most one
            # per worker beyond the uninterrupted inline race
            n = len(full_and_raced["raced_scores"])
            assert n <= len(scores) <= n + 2 * 2


def test_replay_gives_the_racing_sweeps_decisions(full_and_raced):
    """:func:`racing.replay` on the full sweep's stored scores stops what the racing sweep
    stopped, after the same block, and needs the trials the inline racing sweep ran."""
    fr = full_and_raced
    with Store(fr["store"]) as st:
        plan = SweepPlan.from_dict(st.get_sweep(fr["full"])["plan"])
        plan.race = True
        out = racing.replay(plan, st.trials(fr["full"], with_history=False),
                            st.baseline_trials(fr["full"]))
    assert {c: (s["after_repeat"], s["after_fold"]) for c, s in out["stopped"].items()} == \
        {c: (s["after_repeat"], s["after_fold"]) for c, s in fr["stopped"].items()}
    assert out["n_trials_needed"] == len(fr["raced_scores"])


def test_plan_race_is_a_plain_bool_kept_in_the_plan(table):
    plan = _race_plan(table)
    assert SweepPlan.from_dict(json.loads(json.dumps(plan.to_dict()))).race is True
    old = plan.to_dict()
    old.pop("race")
    assert SweepPlan.from_dict(old).race is False  # a plan stored before racing existed
    from workbench.errors import InputError

    with pytest.raises(InputError, match="racing is on or off"):
        SweepPlan.from_dict(dict(plan.to_dict(), race="yes"))



def test_a_replayed_sweep_stores_what_the_racing_sweep_stored(full_and_raced):
    """:func:`racing.replay_sweep` copies, beside the full sweep, the trials the race runs:
    the same trials and scores, the same stops and the same recommendation as the real
    (inline) racing sweep, without training anything."""
    fr = full_and_raced
    with Store(fr["store"]) as st:
        sid = racing.replay_sweep(st, fr["full"])
        assert sid == fr["full"] + "-raced"
        assert _stored(st, sid) == fr["raced_scores"]
        assert {c: (s["after_repeat"], s["after_fold"]) for c, s in st.stopped(sid).items()} \
            == {c: (s["after_repeat"], s["after_fold"]) for c, s in fr["stopped"].items()}
        res = sweep_results(st, sid)
    assert res["verdict"]["recommended"]["index"] == \
        fr["raced_res"]["verdict"]["recommended"]["index"]
    assert res["corrected_best"]["estimate"] == fr["raced_res"]["corrected_best"]["estimate"]


def test_benchmark_helpers_reuse_the_full_sweep_and_subset_it(table, full_and_raced):
    """:func:`racing.measure_racing` finds the stored full sweep of the same plan and
    replays the race on it (nothing trained: the full sweep's id comes back); its figures
    count the trials the racing sweep ran. :func:`racing.subset_sweep` stores the grid
    of one hidden activation from the same trials: each score lands on the configuration
    of the same activation and learning rate, and the baselines come along."""
    fr = full_and_raced
    out = racing.measure_racing(table, "target", store=fr["store"], rerun=False,
                                plan=_race_plan(table, race=False))
    assert out["full_id"] == fr["full"] and out["full"]["seconds"] is None
    assert out["race"]["trials_run"] == len(fr["raced_scores"]) == out["replay_trials"]
    assert out["share"] == pytest.approx(len(fr["raced_scores"]) / 36)
    assert {s["index"] for s in out["stopped"]} == {1, 3} and out["replay_agrees"]
    assert out["same_recommendation"] and out["same_group"] and out["first_kept"]
    with Store(fr["store"]) as st:
        sid = racing.subset_sweep(st, fr["full"], ["tanh"], "only-tanh")
        sub = SweepPlan.from_dict(st.get_sweep(sid)["plan"])
        big = SweepPlan.from_dict(st.get_sweep(fr["full"])["plan"])
        assert sub.hidden == ["tanh"] and sub.n_configurations == 2
        by = {(c.hidden, c.learning_rate): c.index for c in big.configurations()}
        for c in sub.configurations():
            old = by[(c.hidden, c.learning_rate)]
            for r, f in racing.block_keys(3, 3):
                assert _stored(st, sid)[(c.index, r, f)] == fr["full_scores"][(old, r, f)]
        assert len(st.baseline_trials(sid)) == len(st.baseline_trials(fr["full"]))
        assert {t["config_index"] for t in st.baseline_trials(sid)} == \
            {b.index for b in sub.baseline_configurations()}


def test_the_words_of_the_rule_follow_its_constants():
    """The ``--race`` help (written out, so that ``--help`` imports nothing heavy) and the
    results' racing statement state the threshold and the first look of the module."""
    import argparse

    from workbench.commands import sweep as sweep_cmd
    from workbench.sweep import racing
    from workbench.sweep.results import racing_text

    parser = argparse.ArgumentParser()
    sweep_cmd.add_arguments(parser)
    help_text = " ".join(next(a.help for a in parser._actions if "--race" in a.option_strings)
                         .split())
    assert f"P >= {racing.THRESHOLD:g}" in help_text
    assert f"from the {racing._ordinal(racing.FIRST_LOOK)} on" in help_text
    assert racing._ordinal(2) == "2nd" and racing._ordinal(11) == "11th"
    res = {"configurations": [{"rank": 2, "hidden": "tanh", "head": "logistic",
                               "layers": [4], "learning_rate": 0.01, "alpha": 1e-4,
                               "stopped": {"after_repeat": 0, "after_fold": 3,
                                           "n_scores": 4}, "trials": [{}] * 4}],
           "racing": {"n_trials": 30, "n_stored": 19}}
    assert racing.rule_text() in racing_text(res)


def test_the_windows_racing_box_states_the_rule(qtbot):
    """The set-up column's racing box says the module's rule (its threshold and first
    look), not a copy of it."""
    from workbench.gui.setup_pane import SetupPane

    pane = SetupPane()
    qtbot.addWidget(pane)
    tip = pane.race_check.toolTip()
    assert racing.rule_text() in tip
    assert f">= {racing.THRESHOLD:g}" in tip and f"from the {racing._ordinal(racing.FIRST_LOOK)} on" in tip


def test_the_leaders_of_the_verdicts_comparisons_are_kept():
    """Near-identical configurations whose differences are tiny but consistent, as
    closely related activations give (the kiln sample set showed it): every one but the
    best would be stopped at the first look. The verdict compares relu with the other
    activations, the advised head (logistic, binary target) with the other heads, and
    recommends relu with the advised head when it is equivalent to the best; the
    leader of each of those groups is kept, so that its statements are about complete
    configurations, and everything else is stopped."""
    plan = SweepPlan(table="t.csv", target="y", task="classification", target_kind="binary",
                     hidden=["tanh", "relu", "gelu"], heads=["logistic", "softmax"],
                     folds=K, repeats=R, baselines=[], race=True)
    cfg = {c.index: (c.hidden, c.head) for c in plan.configurations()}
    assert racing.advised_heads(plan) == {"logistic"}
    base = 0.85 + np.resize([0.004, -0.004, 0.002, -0.002, 0.0], K * R)
    # a fixed order of merit, 0.003 apart, with a little noise of each configuration's own
    order = [("gelu", "softmax"), ("tanh", "softmax"), ("gelu", "logistic"),
             ("tanh", "logistic"), ("relu", "softmax"), ("relu", "logistic")]
    index = {v: k for k, v in cfg.items()}
    rng = np.random.default_rng(1)
    scores = {index[o]: base - 0.003 * i + rng.normal(0, 0.0003, K * R)
              for i, o in enumerate(order)}
    race = racing.Race(plan)
    _feed(race, scores, upto=2)
    kept = {cfg[c] for c in cfg if c not in race.stopped}
    # the best (also the best softmax and non-relu one), the best logistic, relu's best,
    # relu with the advised head
    assert kept == {("gelu", "softmax"), ("gelu", "logistic"), ("relu", "softmax"),
                    ("relu", "logistic")}
    groups = racing.verdict_groups(plan)
    assert {frozenset(cfg[c] for c in g) for g in groups} == {
        frozenset(v for v in cfg.values() if v[1] == "logistic"),
        frozenset(v for v in cfg.values() if v[1] != "logistic"),
        frozenset(v for v in cfg.values() if v[0] == "relu"),
        frozenset(v for v in cfg.values() if v[0] != "relu"),
        frozenset({("relu", "logistic")})}


def test_the_text_table_gives_a_stopped_configuration_its_paired_difference(full_and_raced):
    """A stopped configuration's mean is over its first folds only, so the text table's
    decision column shows the paired difference of its stop record (marked *) and a
    line says so; complete configurations keep their decision."""
    from workbench.commands.show import format_results

    res = full_and_raced["raced_res"]
    text = format_results(res, width=160)
    by = {c["index"]: c for c in res["configurations"]}
    rows = [line for line in text.splitlines() if line[:1].isdigit()]
    for c in (1, 3):
        cell = f"{full_and_raced['stopped'][c]['difference']:+.4f}*"
        assert sum(cell in line and "stopped (racing)" in line for line in rows) >= 1, cell
    assert "* stopped by racing" in text
    assert by[0]["decision"] in {"best", "equivalent", "undecided", "worse"}


def test_the_window_gives_a_stopped_configuration_its_paired_difference(qtbot, full_and_raced):
    """The window's results table says a stopped configuration's decision as its stop's
    paired difference from the leader (as ``show`` does), and its tooltip says why its
    mean does not compare with the best's."""
    from PySide6.QtCore import Qt

    from workbench.gui.core_adapter import ranked_rows
    from workbench.gui.models import COLUMN_KEYS, ResultsModel

    fr = full_and_raced
    rows = ranked_rows(str(fr["store"]), fr["raced"])["rows"]
    model = ResultsModel()
    model.set_rows(rows)
    col = COLUMN_KEYS.index("decision")
    seen = {}
    for v in range(model.rowCount()):
        row = model.row_at(v)
        if row.get("kind") == "network":
            seen[row["index"]] = (model.index(v, col).data(),
                                  model.index(v, col).data(Qt.ToolTipRole))
    for c in (1, 3):
        text, tip = seen[c]
        assert text == f"stopped {fr['stopped'][c]['difference']:+.4f}"
        assert "stopped by racing" in tip and fr["stopped"][c]["reason"] in tip
    assert not seen[0][0].startswith("stopped")


def test_a_plan_records_its_racing_rule_and_keeps_it_when_the_rule_changes(table, monkeypatch):
    """A racing plan records the rule it was made with (racing.current_rule); read back
    from its JSON by a version whose constants say otherwise (monkeypatched here), the
    race and its looks follow the recorded rule, not the new one. A plan without racing
    records none; a wrong setting is refused in one line."""
    from workbench.errors import InputError

    plan = _race_plan(table)
    assert plan.race_rule == racing.current_rule()
    assert _race_plan(table, race=False).race_rule == {}
    stored = json.loads(json.dumps(plan.to_dict()))
    monkeypatch.setattr(racing, "THRESHOLD", 0.9)
    monkeypatch.setattr(racing, "FIRST_LOOK", 4)
    again = SweepPlan.from_dict(stored)
    assert again.race_rule == plan.race_rule != racing.current_rule()
    race = racing.Race(again)
    n = again.folds * again.repeats
    assert race.threshold == plan.race_rule["threshold"] != 0.9
    assert race.first == plan.race_rule["first_look"] - 1
    assert racing.look_positions(again) == set(range(plan.race_rule["first_look"] - 1, n - 1))
    new = _race_plan(table)  # made now: the rule of this (patched) version
    assert new.race_rule["threshold"] == 0.9 and racing.look_positions(new) == \
        set(range(3, n - 1))
    with pytest.raises(InputError, match="racing rule: the racing threshold") as bad:
        SweepPlan.from_dict(dict(stored, race_rule=dict(stored["race_rule"], threshold=2)))
    assert "\n" not in str(bad.value)


def test_a_sweep_is_raced_by_the_first_look_its_plan_recorded(table, tmp_path,
                                                              full_and_raced):
    """The runner's race reads the plan's rule: with a first look recorded after the 5th
    block of 9, nothing is stopped before it, where the default rule (the fixture's sweep)
    stopped the hopeless learning rate after the 2nd."""
    fr = full_and_raced
    blocks = racing.block_keys(3, 3)
    early = [blocks.index((s["after_repeat"], s["after_fold"])) for s in fr["stopped"].values()]
    assert early and min(early) < 4
    plan = _race_plan(table)
    plan.race_rule = dict(plan.race_rule, first_look=5)
    with Store(tmp_path / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline")
        stopped = st.stopped(out.sweep_id)
        assert st.get_sweep(out.sweep_id)["plan"]["race_rule"]["first_look"] == 5
    late = [blocks.index((s["after_repeat"], s["after_fold"])) for s in stopped.values()]
    assert late and min(late) >= 4
