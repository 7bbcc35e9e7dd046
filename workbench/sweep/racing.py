"""Racing: stop the configurations that are worse than the best beyond doubt.

A racing sweep (``SweepPlan.race``, ``workbench sweep --race``) runs its trials
in the plan's order -- repeat by repeat, fold by fold, every configuration on a
fold before the next fold (:meth:`workbench.sweep.plan.SweepPlan.trials`) -- and
*looks* after each completed block of folds, from the end of the first repeat on.
At a look, each configuration still running is compared with the current best
on the paired fold scores seen so far; one that is practically worse beyond
doubt is *stopped*: none of its remaining trials is started. Its stored trials
(and a trial already running when it was stopped) stay; the results show them
as partial scores, and a stopped configuration is never recommended.

The rule
--------
A look at block ``b`` (the ``J``-th ``(repeat, fold)`` of the plan's order,
``J >= K``) happens once every configuration still running at ``b`` has its
trials of blocks ``1..b`` stored (and, for error scores, every trial of the
constant baseline, which sets the ROPE). Among the configurations still
running whose scores so far are all finite (no diverged or failed trial),
the *current best* has the highest mean over blocks ``1..b`` (lowest index on a
tie, as :func:`workbench.sweep.statistics.rank`). Every other such
configuration ``c`` is compared with it by the Bayesian correlated t-test of
:mod:`workbench.sweep.bayes` (Benavoli et al. 2017; the same test and the same
``rho = n_test / n_total`` as the verdict) with the verdict's region of
practical equivalence (:func:`workbench.sweep.bayes.default_rope`: 0.01 for
unit-free scores, 1 % of the constant baseline's mean for error scores, else 1 %
of the best's mean); ``c`` is stopped when

    P(mu_c - mu_best < -rope | scores so far) >= THRESHOLD = 0.99.

Why it protects the winner
--------------------------
- The current best is never tested, so never stopped; the baselines are not
  raced at all (they are cheap, and the verdict compares them with the best
  network on every fold).
- A configuration is stopped only on stronger evidence than the verdict needs
  to call it *worse* (P >= 0.95, :data:`workbench.sweep.bayes.THRESHOLD`), and
  only for a difference beyond the ROPE: a configuration that the full sweep
  would find practically *equivalent* to the best -- a member of the group the
  recommendation is chosen from -- needs its posterior mass beyond the ROPE to
  be 0.99 at a look, which the full data would then have to overturn.
- The posterior's tail below ``-rope`` is the one-sided p-value of the
  corrected resampled t-test of Nadeau & Bengio (2003) for "worse by more than
  the ROPE", with ``J - 1`` degrees of freedom and the variance inflated by
  ``n_test / n_train`` for the overlapping training sets. At the first look
  (``J = K = 5``, four degrees of freedom) a stop needs the mean difference
  beyond the ROPE by ``t_{0.99, 4} = 3.75`` corrected standard errors
  (``sqrt(1/5 + 1/4) = 0.67`` of the differences' standard deviation each):
  the true winner, whose expected difference from any configuration is >= 0,
  is stopped only by a chance deviation of that size against the current best.
- Looks are at fixed points of the plan (after a block of folds is complete),
  never at the random moment a trial happens to finish, so the decisions are
  the same with one process, two, or a Dask cluster; a resumed sweep replays
  the looks on the stored scores and reaches the same decisions
  (:meth:`Race.look`), and a stopped configuration stays stopped (the store's
  ``stopped`` table).

What racing can save
--------------------
A stopped configuration has run at least the K trials of the first repeat, and
the best runs all K x R, so a racing sweep of C configurations runs at least
``(C K + (K R - K)) / (C K R) = 1/R + (R - 1) / (R C)`` of the trials: with the
default 5 folds x 3 repeats and 5 configurations at least 47 %, and never under
a third however large the grid. A sweep with one repeat has its first look
after its last block: racing then saves nothing. Racing a grid of
near-equivalent configurations saves little (none is worse beyond the ROPE); it
saves most on grids with hopeless corners (a learning rate far too small, a
head that does not suit the target) and with more repeats.

References
----------
- Benavoli, A., Corani, G., Demšar, J. & Zaffalon, M. (2017). Time for a
  change: a tutorial for comparing multiple classifiers through Bayesian
  analysis. JMLR 18(77), 1-36.
- Nadeau, C. & Bengio, Y. (2003). Inference for the generalization error.
  Machine Learning 52(3), 239-281.
- Maron, O. & Moore, A. W. (1997). The racing algorithm: model selection for
  lazy learners. Artificial Intelligence Review 11, 193-225 (the idea of
  racing: drop a candidate as soon as it is clearly beaten).
- Krüger, T., Lehmann, D. & Trepte, K. (2015). Fast cross-validation via
  sequential testing. JMLR 16, 1103-1155.
"""

from __future__ import annotations

import math

import numpy as np

from workbench.sweep import bayes

#: the posterior probability of "worse by more than the ROPE" that stops a configuration
#: (stricter than the verdict's 0.95; see the module docstring)
THRESHOLD = 0.99


def block_keys(folds: int, repeats: int) -> list[tuple[int, int]]:
    """The plan's blocks of folds in racing order: ``(repeat, fold)``, repeat-major."""
    return [(r, f) for r in range(int(repeats)) for f in range(int(folds))]


class Race:
    """The racing state of one sweep: its scores so far and its stopped configurations.

    Parameters
    ----------
    plan : SweepPlan
        The sweep's plan (folds, repeats, metric, configurations, baselines).
    stopped : dict, optional
        ``{config_index: record}`` already stopped (a resumed sweep: the store's
        :meth:`workbench.sweep.store.Store.stopped`); they stay stopped.

    Feed every stored trial (networks' and baselines') to :meth:`note`, then
    call :meth:`look`: it makes every look whose block is complete and returns
    the new stop records.
    """

    def __init__(self, plan, stopped: dict | None = None):
        self.metric = plan.metric
        self.n_configurations = plan.n_configurations
        self.labels = [c.label for c in plan.configurations()]
        self.blocks = block_keys(plan.folds, plan.repeats)
        self.position = {k: j for j, k in enumerate(self.blocks)}
        self.first = int(plan.folds) - 1  # the first look: the end of the first repeat
        self.next = self.first
        constant = [b.index for b in plan.baseline_configurations() if b.name == "constant"]
        self.constant = constant[0] if constant else None
        self.scores: dict[int, dict[tuple[int, int], float | None]] = {}
        self.sizes: dict[tuple[int, int], tuple[int, int]] = {}
        self.stopped: dict[int, dict] = {int(c): dict(r) for c, r in (stopped or {}).items()}

    # ------------------------------------------------------------------ data
    def note(self, res: dict) -> None:
        """Record one stored trial (a result dict or a store row)."""
        key = (int(res["repeat"]), int(res["fold"]))
        score = res.get("test_score")
        ok = res.get("status") == "done" and score is not None and math.isfinite(float(score))
        self.scores.setdefault(int(res["config_index"]), {})[key] = float(score) if ok else None
        if ok and res.get("n_train") and res.get("n_test"):
            self.sizes.setdefault(key, (int(res["n_train"]), int(res["n_test"])))

    def is_stopped(self, config_index: int) -> bool:
        return int(config_index) in self.stopped

    def _stop_position(self, c: int) -> int:
        r = self.stopped[c]
        return self.position[(int(r["after_repeat"]), int(r["after_fold"]))]

    def live(self, b: int) -> list[int]:
        """The configurations still running at the look after block ``b`` (those stopped
        at that very look included: they were compared there)."""
        return [c for c in range(self.n_configurations)
                if c not in self.stopped or self._stop_position(c) >= b]

    def _complete(self, b: int) -> bool:
        keys = self.blocks[:b + 1]
        for c in self.live(b):
            have = self.scores.get(c, {})
            if any(k not in have for k in keys):
                return False
        if self.constant is not None and bayes.rope_kind(self.metric) == "relative":
            have = self.scores.get(self.constant, {})
            if len(have) < len(self.blocks):
                return False  # the ROPE of an error score waits for the constant baseline
        return True

    def _rope(self, best_mean: float) -> float:
        if bayes.rope_kind(self.metric) == "fraction":
            return bayes.default_rope(self.metric)
        base = None
        if self.constant is not None:
            vals = list(self.scores.get(self.constant, {}).values())
            if vals and all(v is not None for v in vals):
                base = float(np.mean(vals))
        if base is not None and math.isfinite(base) and base != 0:
            return bayes.default_rope(self.metric, base)
        if math.isfinite(best_mean) and best_mean != 0:
            return bayes.default_rope(self.metric, best_mean)
        return 0.0

    # ------------------------------------------------------------------ looks
    def look(self) -> list[dict]:
        """Make every look whose block is complete, in order; return the new stops.

        A resumed race replays its looks from the first: the decisions are
        functions of the stored scores, so those already stored come out again
        (and are kept as stored); one decided but not recorded before an
        interruption is recorded now.
        """
        new = []
        while self.next < len(self.blocks) and self._complete(self.next):
            for rec in self._look_at(self.next):
                if rec["config_index"] not in self.stopped:
                    self.stopped[rec["config_index"]] = rec
                    new.append(rec)
            self.next += 1
        return new

    def _look_at(self, b: int) -> list[dict]:
        keys = self.blocks[:b + 1]
        cands = [c for c in self.live(b)
                 if all(self.scores[c][k] is not None for k in keys)]
        if len(cands) < 2:
            return []
        x = {c: np.array([self.scores[c][k] for k in keys], dtype=float) for c in cands}
        means = {c: float(x[c].mean()) for c in cands}
        best = min(cands, key=lambda c: (-means[c], c))
        sizes = [self.sizes[k] for k in keys if k in self.sizes]
        if not sizes:
            return []
        rho = bayes.rho_from_sizes([s[0] for s in sizes], [s[1] for s in sizes])
        rope = self._rope(means[best])
        out = []
        r, f = keys[-1]
        for c in cands:
            if c == best:
                continue
            cmp = bayes.correlated_ttest(x[c], x[best], rho=rho, rope=rope)
            if not (cmp.p_worse >= THRESHOLD):  # NaN never stops
                continue
            out.append({
                "config_index": c, "after_repeat": r, "after_fold": f, "n_scores": len(keys),
                "best_index": best, "difference": cmp.mean, "p_worse": cmp.p_worse,
                "rope": rope, "threshold": THRESHOLD,
                "reason": (f"practically worse than {self.labels[best]} beyond doubt after "
                           f"{len(keys)} paired fold scores (repeat {r + 1}, fold {f + 1}): "
                           f"mean difference {cmp.mean:.4g}, P(worse by more than the ROPE "
                           f"±{rope:.4g}) = {cmp.p_worse:.4f} >= {THRESHOLD:g} (Bayesian "
                           "correlated t-test)")})
        return out

    def remaining(self, trials) -> list:
        """``trials`` without those of stopped configurations."""
        return [t for t in trials if t.config_index not in self.stopped]


# --------------------------------------------------------------------------- measuring

#: the tables :func:`racing_benchmark` measures: the six sample sets (file, target) and
#: three of scikit-learn's bundled data sets (loader name, its target column "target")
SAMPLE_TABLES = (("orchard_water.csv", "water_drawn_litres"),
                 ("greenhouse_temp.csv", "temp_change_next_hour"),
                 ("kiln_batches.csv", "passes_inspection"),
                 ("coffee_roast.csv", "roast_grade"),
                 ("seed_germination.csv", "germinated_share"),
                 ("trap_catches.csv", "moths_caught"))
SKLEARN_TABLES = ("load_breast_cancer", "load_wine", "load_diabetes")


def replay(plan, trials, baseline_trials=()) -> dict:
    """The race a plan would run on given stored scores, without running anything.

    A trial is a pure function of the table, its fold and its seed, so a racing
    sweep gets exactly the scores a full sweep of the same plan stored for the
    trials it runs, and its looks (at fixed blocks) decide alike. Feeding the
    full sweep's trials block by block in the plan's order gives the racing
    sweep's decisions; the trials it needs are every trial up to each stopped
    configuration's last block (a real racing sweep may also finish the few
    trials of a stopped configuration already running at the decision).

    Returns
    -------
    dict
        ``stopped`` ``{config_index: record}`` and ``n_trials_needed``.
    """
    race = Race(plan)
    by_key = {(int(t["config_index"]), int(t["repeat"]), int(t["fold"])): t
              for t in list(trials) + list(baseline_trials)}
    for t in baseline_trials:
        race.note(t)
    for r, f in race.blocks:
        for c in range(plan.n_configurations):
            if c in race.stopped:
                continue
            t = by_key.get((c, r, f))
            if t is not None:
                race.note(t)
        race.look()
    needed = 0
    for c in range(plan.n_configurations):
        last = race._stop_position(c) if c in race.stopped else len(race.blocks) - 1
        needed += last + 1
    return {"stopped": race.stopped, "n_trials_needed": needed}


def replay_sweep(store, sweep_id: str, new_id: str | None = None) -> str:
    """Store, beside a full sweep, the racing sweep its plan would have run (no training).

    The new sweep (id ``new_id``, default ``<sweep_id>-raced``) has the same plan with
    ``race`` on, the full sweep's rows, baselines' trials and, of the networks' trials,
    those :func:`replay` says racing runs (each with its stored out-of-fold
    predictions), and the stopped configurations. Its results
    (:func:`workbench.sweep.results.sweep_results`) are those of a racing sweep that
    finished no trial of a stopped configuration beyond its last block. Returns its id.
    """
    sweep = store.get_sweep(sweep_id)
    from workbench.sweep.plan import SweepPlan

    plan = SweepPlan.from_dict(sweep["plan"])
    plan.race = True
    trials = store.trials(sweep_id, with_history=True)
    baseline_trials = store.baseline_trials(sweep_id)
    out = replay(plan, trials, baseline_trials)
    race = Race(plan, out["stopped"])
    keep_upto = {c: race._stop_position(c) for c in out["stopped"]}
    new_id = new_id or f"{sweep_id}-raced"
    rows = store.sweep_rows(sweep_id)
    store.create_sweep(new_id, plan.to_dict(), sweep["fingerprint"],
                       [c.to_dict() for c in plan.configurations()], versions=sweep["versions"],
                       baselines=store.baselines(sweep_id), rows=rows)
    position = {k: j for j, k in enumerate(race.blocks)}
    for t in trials + baseline_trials:
        c = int(t["config_index"])
        if c in keep_upto and position[(t["repeat"], t["fold"])] > keep_upto[c]:
            continue
        found = store.trial_predictions(sweep_id, c, t["repeat"], t["fold"])
        copy = dict(t, predictions=None if found is None else found[1])
        store.add_trial(new_id, copy)
    for rec in out["stopped"].values():
        store.add_stopped(new_id, rec)
    store.set_state(new_id, sweep["state"])
    return new_id


def measure_racing(table, target, *, store=None, jobs=None, folds=5, repeats=3,
                   rerun: bool = True, **plan_options) -> dict:
    """Run a plan twice on one table -- every trial, then racing -- and compare.

    Parameters
    ----------
    table : path
        The table file.
    target : str
        Its target column.
    store : path, optional
        The store file both sweeps go to (default: a temporary one, removed after).
    jobs : int, optional
        Worker processes (default: the runner's).
    folds, repeats : int
        The plan's K and R (default 5 x 3).
    rerun : bool
        Run the racing sweep for real (default); False stores the race replayed on
        the full sweep's scores instead (:func:`replay_sweep`: the same decisions, half
        the time; a real racing sweep may also finish a trial of a stopped
        configuration that was running when it was stopped, at most one per worker).
    **plan_options
        Other options of :func:`workbench.sweep.plan.build_plan` (default: its
        defaults, the default plan of ``workbench sweep``).

    Returns
    -------
    dict
        ``table, n_configurations, n_trials``; ``full`` and ``race``, each
        ``{sweep_id, trials_run, seconds, recommended, recommended_label}``;
        ``share`` (the racing sweep's trials over the full sweep's),
        ``same_recommendation`` (the same configuration recommended),
        ``same_group`` (the racing sweep's recommendation is in the full sweep's
        group of the best and the configurations practically equivalent to it),
        ``first_kept`` (the full sweep's first-ranked configuration was not
        stopped), ``stopped`` (``[{index, label, after_repeat, after_fold,
        n_scores}]``) and ``replay_agrees`` (the race replayed on the full
        sweep's scores, :func:`replay`, stops the same configurations).
    """
    import tempfile
    from pathlib import Path
    from types import SimpleNamespace

    from workbench.sweep.plan import build_plan
    from workbench.sweep.results import sweep_results
    from workbench.sweep.runner import run_sweep
    from workbench.sweep.store import Store

    tmp = None
    if store is None:
        tmp = tempfile.TemporaryDirectory(prefix="workbench-racing-")
        store = Path(tmp.name) / "racing.sqlite"
    try:
        out = {"table": str(table), "target": target}
        runs = {}
        with Store(store) as st:
            for race in (False, True):
                plan = build_plan(table, target, folds=folds, repeats=repeats, race=race,
                                  **plan_options)
                if race and not rerun:
                    outcome = SimpleNamespace(sweep_id=replay_sweep(st, runs[False]["sweep_id"]),
                                              seconds=None)
                else:
                    outcome = run_sweep(plan, store=st, jobs=jobs)
                res = sweep_results(st, outcome.sweep_id)
                rec = (res.get("verdict") or {}).get("recommended") or {}
                label = next((f"{c['hidden']}/{c['head']} lr {c['learning_rate']:g}"
                              for c in res["configurations"] if c["index"] == rec.get("index")),
                             None)
                runs[race] = {"sweep_id": outcome.sweep_id, "plan": plan, "res": res,
                              "summary": {"sweep_id": outcome.sweep_id,
                                          "trials_run": res["n_stored"],
                                          "seconds": outcome.seconds,
                                          "recommended": rec.get("index"),
                                          "recommended_label": label}}
            full, raced = runs[False], runs[True]
            replayed = replay(full["plan"], st.trials(full["sweep_id"], with_history=False),
                              st.baseline_trials(full["sweep_id"]))
        group = {c["index"] for c in full["res"]["configurations"]
                 if c.get("decision") in ("best", "equivalent")}
        first = full["res"]["configurations"][0]["index"]
        stopped = raced["res"]["racing"]["stopped"]
        labels = {c["index"]: f"{c['hidden']}/{c['head']} lr {c['learning_rate']:g}"
                  for c in raced["res"]["configurations"]}
        out.update(
            n_configurations=full["plan"].n_configurations, n_trials=full["plan"].n_trials,
            full=full["summary"], race=raced["summary"],
            share=raced["summary"]["trials_run"] / full["summary"]["trials_run"],
            same_recommendation=(raced["summary"]["recommended"]
                                 == full["summary"]["recommended"]),
            same_group=raced["summary"]["recommended"] in group,
            first_kept=first not in {s["config_index"] for s in stopped},
            stopped=[{"index": s["config_index"], "label": labels.get(s["config_index"]),
                      "after_repeat": s["after_repeat"], "after_fold": s["after_fold"],
                      "n_scores": s["n_scores"]} for s in stopped],
            replay_agrees=(set(replayed["stopped"]) == {s["config_index"] for s in stopped}),
            replay_trials=replayed["n_trials_needed"])
        return out
    finally:
        if tmp is not None:
            tmp.cleanup()


def racing_benchmark(*, folds=5, repeats=3, jobs=None, tables=None, on_result=None,
                     rerun: bool = True, **plan_options) -> list[dict]:
    """:func:`measure_racing` on the six sample sets and scikit-learn's breast cancer,
    wine and diabetes tables (:data:`SAMPLE_TABLES`, :data:`SKLEARN_TABLES`).

    Parameters
    ----------
    folds, repeats, jobs, rerun, **plan_options
        As :func:`measure_racing` takes them (default: the default plan, 5 x 3, the
        racing sweep run for real).
    tables : sequence of str, optional
        Names (file names or loader names) to measure; default all nine.
    on_result : callable, optional
        Called with each table's result as it is ready (for a progress line).

    Returns
    -------
    list of dict
        :func:`measure_racing`'s answer per table, with ``name``.
    """
    import tempfile
    from pathlib import Path

    import sklearn.datasets

    samples = Path(__file__).resolve().parents[2] / "sample_sets"
    out = []
    with tempfile.TemporaryDirectory(prefix="workbench-racing-tables-") as tmp:
        todo = []
        for name, target in SAMPLE_TABLES:
            todo.append((name, samples / name, target))
        for loader in SKLEARN_TABLES:
            path = Path(tmp) / f"{loader[5:]}.csv"
            getattr(sklearn.datasets, loader)(as_frame=True).frame.to_csv(path, index=False)
            todo.append((loader, path, "target"))
        for name, path, target in todo:
            if tables is not None and name not in tables:
                continue
            res = dict(measure_racing(path, target, folds=folds, repeats=repeats, jobs=jobs,
                                      rerun=rerun, **plan_options), name=name)
            out.append(res)
            if on_result is not None:
                on_result(res)
    return out
