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
    hidden = ["relu", "tanh", "gelu", "silu", "elu"][:n_configs]
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
def test_the_stop_is_at_p_0999_beyond_the_rope_at_the_fourth_block(beyond):
    """Differences placed just past (or just short of) the 0.999 quantile of the predicted
    full-sweep difference: stopped exactly when SciPy's predictive tail below -ROPE reaches
    0.999, at the first look (J = FIRST_LOOK = 4 of K x R = 10 blocks)."""
    assert (racing.THRESHOLD, racing.FIRST_LOOK, racing.USE_ROPE, racing.TEST) == \
        (0.999, 4, True, "predictive")
    J, n_total, rope = 4, K * R, 0.01  # r2: the ROPE is 0.01
    e = np.array([-1.5, -0.5, 0.5, 1.5]) * 0.01
    m = n_total - J
    scale = (m / n_total) * e.std(ddof=1) * np.sqrt(1 / J + 1 / m)
    shift = -rope - stats.t.ppf(0.999, J - 1) * scale + (-1e-4 if beyond else 1e-4)
    best = np.full(K * R, 0.8)
    other = np.concatenate([best[:J] + shift + e, best[J:]])
    assert bool(_scipy_p_full_worse(shift + e, n_total, rope) >= 0.999) is beyond
    race = racing.Race(_plan())
    stops = _feed(race, {0: best, 1: other}, upto=J)
    assert [s["config_index"] for s in stops] == ([1] if beyond else [])
    if beyond:
        s = stops[0]
        assert (s["after_repeat"], s["after_fold"], s["n_scores"], s["best_index"]) == \
            (0, J - 1, J, 0)
        assert s["p_worse"] == pytest.approx(_scipy_p_full_worse(shift + e, n_total, rope),
                                             abs=1e-12)
        assert s["rope"] == rope and s["difference"] == pytest.approx(shift)
        assert s["threshold"] == 0.999 and "0.999" in s["reason"]


@pytest.mark.parametrize("beyond", [True, False])
def test_the_correlated_variant_stops_at_scipys_posterior_tail(beyond):
    """``test="correlated"`` (the verdict's Bayesian correlated t-test, kept for
    comparison): stopped exactly when SciPy's posterior tail below -ROPE reaches the
    threshold (0.99 here), at a first look after K blocks."""
    u, rope = 0.01, 0.01
    e = np.array([-2, -1, 0, 1, 2]) * u
    scale = np.sqrt((1 / K + 1 / (K - 1)) * e.var(ddof=1))
    m = -rope - stats.t.ppf(0.99, K - 1) * scale + (-1e-4 if beyond else 1e-4)
    best = np.full(K * R, 0.8)
    other = np.concatenate([best[:K] + m + e, best[K:]])
    assert bool(_scipy_p_worse(m + e, rope) >= 0.99) is beyond
    race = racing.Race(_plan(), test="correlated", threshold=0.99, first_look=K)
    stops = _feed(race, {0: best, 1: other}, upto=K)
    assert [s["config_index"] for s in stops] == ([1] if beyond else [])
    if beyond:
        assert stops[0]["p_worse"] == pytest.approx(_scipy_p_worse(m + e, rope), abs=1e-9)
        assert stops[0]["n_scores"] == K


def test_no_look_before_the_fourth_block_nor_after_the_last():
    """A hopeless configuration is not stopped on three scores however bad it is; it is on
    four. One that only becomes clearly worse in the last block is not stopped there:
    every trial has run, nothing is left to save."""
    best = np.full(K * R, 0.8) + np.linspace(0, 0.01, K * R)
    hopeless = best - 0.7 + np.linspace(0, 0.001, K * R)
    race = racing.Race(_plan())
    assert _feed(race, {0: best, 1: hopeless}, upto=3) == []
    assert _feed(racing.Race(_plan()), {0: best, 1: hopeless}, upto=4)[0]["config_index"] == 1
    assert racing.look_positions(_plan()) == set(range(3, K * R - 1))
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


def test_on_100_simulated_grids_the_full_sweeps_first_is_never_stopped():
    """Simulated 5-fold x 2-repeat scores of 10 configurations: five within 0.01 of each
    other (the ROPE), five worse by 0.03 to 0.3; each fold adds a shared effect (sd 0.03,
    as overlapping training sets do) and each configuration its own noise (sd 0.02). On
    every one of 100 seeded grids the configuration with the best mean over all folds --
    the full sweep's first -- is never stopped, while racing saves trials overall."""
    true = np.array([0.80, 0.798, 0.796, 0.794, 0.792, 0.77, 0.74, 0.70, 0.60, 0.50])
    saved = 0
    for seed in range(100):
        rng = np.random.default_rng(seed)
        fold = rng.normal(0, 0.03, K * R)
        x = true[:, None] + fold[None, :] + rng.normal(0, 0.02, (true.size, K * R))
        race = racing.Race(_plan(10))
        _feed(race, {c: x[c] for c in range(true.size)})
        first = int(np.argmax(x.mean(axis=1)))
        assert first not in race.stopped, seed
        saved += sum(K * R - (race._stop_position(c) + 1) for c in race.stopped)
    assert saved > 0.2 * 100 * 5 * K  # most of the hopeless ones stop well before the end


def _simulate(true, seeds, k, r, fold_sd=0.03, noise=0.02):
    """Race simulated k x r grids; return (grids whose full first was stopped, share run)."""
    plan = SweepPlan(table="t.csv", target="y", task="regression", target_kind="signed",
                     hidden=["relu", "tanh", "gelu", "silu", "elu"], heads=["identity"],
                     learning_rates=[0.001, 0.01], folds=k, repeats=r, baselines=[],
                     race=True)
    n = k * r
    lost, run = 0, 0
    for seed in seeds:
        rng = np.random.default_rng(seed)
        x = true[:, None] + rng.normal(0, fold_sd, n)[None, :] + \
            rng.normal(0, noise, (true.size, n))
        race = racing.Race(plan)
        for j, (rr, f) in enumerate(racing.block_keys(k, r)):
            for c in range(true.size):
                if c not in race.stopped:
                    race.note({"config_index": c, "repeat": rr, "fold": f, "status": "done",
                               "test_score": x[c, j], "n_train": 400, "n_test": 100})
            race.look()
        lost += int(np.argmax(x.mean(axis=1))) in race.stopped
        run += sum(race._stop_position(c) + 1 if c in race.stopped else n
                   for c in range(true.size))
    return lost, run / (len(seeds) * true.size * n)


def test_on_simulated_5x3_grids_the_first_is_never_stopped_and_hopeless_ones_are():
    """The default 5 folds x 3 repeats on 300 simulated grids each: (a) five
    configurations within the ROPE of each other and five worse by 0.03 to 0.3, (b) ten
    practically equal ones (all within 0.009). The configuration with the best mean over
    all 15 folds -- the full sweep's first -- is never stopped; on (a) racing runs at most
    three quarters of the trials, on (b) it stops almost nothing (there is nothing
    worse beyond the ROPE to stop)."""
    spread = np.array([0.80, 0.798, 0.796, 0.794, 0.792, 0.77, 0.74, 0.70, 0.60, 0.50])
    lost, share = _simulate(spread, range(300), 5, 3)
    assert lost == 0 and share < 0.75
    lost, share = _simulate(0.8 - 0.001 * np.arange(10), range(1000, 1300), 5, 3)
    assert lost == 0 and share > 0.95


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
    """neg_root_mean_squared_error: the ROPE is 1 % of the constant baseline's mean score
    (Benavoli et al.'s relative ROPE as the verdict uses it); no look before its trials."""
    plan = SweepPlan(table="t.csv", target="y", task="regression", target_kind="signed",
                     hidden=["relu", "tanh"], heads=["identity"], folds=K, repeats=R,
                     baselines=["constant"], metric="neg_root_mean_squared_error", race=True)
    race = racing.Race(plan)
    best = np.full(K * R, -10.0) + np.linspace(0, 0.1, K * R)
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
        assert 2 <= j < 6 and s["n_scores"] == j + 1  # from the first look, before repeat 3
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
    assert f"from the {racing.FIRST_LOOK}th on" in help_text
    res = {"configurations": [{"rank": 2, "hidden": "tanh", "head": "logistic",
                               "layers": [4], "learning_rate": 0.01, "alpha": 1e-4,
                               "stopped": {"after_repeat": 0, "after_fold": 3,
                                           "n_scores": 4}, "trials": [{}] * 4}],
           "racing": {"n_trials": 30, "n_stored": 19}}
    assert racing.rule_text() in racing_text(res)
