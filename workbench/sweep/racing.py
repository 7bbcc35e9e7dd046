"""Racing: stop the configurations the full sweep would rank below the best, beyond doubt.

A racing sweep (``SweepPlan.race``, ``workbench sweep --race``) runs its trials
in the plan's order -- repeat by repeat, fold by fold, every configuration on a
fold before the next fold (:meth:`workbench.sweep.plan.SweepPlan.trials`) -- and
*looks* after each completed block of folds from the :data:`FIRST_LOOK`-th (2nd)
on, up to the last but one. At a look, each configuration still running is
compared with the current best on the paired fold scores seen so far; one that
the full sweep would rank below the current best, beyond doubt, is *stopped*:
none of its remaining trials is started. Its stored trials (and a trial already
running when it was stopped) stay; the results show them as partial scores, and
a stopped configuration is never recommended.

The rule
--------
A look at block ``b`` (the ``J``-th ``(repeat, fold)`` of the plan's order,
``FIRST_LOOK <= J < N = K R``) happens once every configuration still running at
``b`` has its trials of blocks ``1..b`` stored. Among the configurations still
running whose scores so far are all finite (no diverged or failed trial), the
*current best* has the highest mean over blocks ``1..b`` (lowest index on a tie,
as :func:`workbench.sweep.statistics.rank`). Every other such configuration
``c`` is stopped when

    P( Dbar_N < 0 | d_1..d_J ) >= THRESHOLD = 0.975,

where ``d_j`` are its paired differences from the current best so far and
``Dbar_N`` is the mean difference the *full* sweep would end with, over all ``N``
blocks: the probability that the full sweep ranks it below the current best.
The ``N - J`` differences still to come are predicted from the ``J`` seen as
exchangeable draws of one normal distribution with unknown mean and variance:
the mean of the ``m = N - J`` to come is Student t with location ``dbar`` and
scale ``s sqrt(1/J + 1/m)`` -- the textbook prediction interval for the mean of
m future observations (Hahn, Meeker & Escobar 2017), the posterior predictive
under the reference prior (Gelman et al. 2013) -- so ``Dbar_N`` is t with
location ``dbar`` and scale ``(m/N) s sqrt(1/J + 1/m)`` (:func:`p_full_below`).

Early on, ``s`` rests on one or two degrees of freedom, and a t with so few is
too heavy-tailed to decide anything. The variances of all the configurations'
differences at the same look are therefore *moderated* (:func:`moderated_variances`,
the empirical Bayes of Smyth 2004, limma's ``squeezeVar``): each is pulled towards
the common level by as much as the variances' own spread says they share, and
the t then has ``d0 + J - 1`` degrees of freedom. A configuration whose own
differences are erratic keeps most of its variance.

The verdict states each rule of thumb by the best configuration of the advised
value against the best of the others -- relu against the other activations, the
advised head against the other heads -- and recommends relu with the advised head
when it is practically equivalent to the best. So that those statements compare
complete configurations, the leader (highest mean so far) of each of those groups
is kept at every look, as the best is (:func:`verdict_groups`); the others in
each group race like any configuration.

Why this test: racing must reach the full sweep's answer, and the full sweep
ranks the configurations on these very folds. What is uncertain at a look is
only what the remaining folds of the same table will add, which shrinks to
nothing as ``J`` nears ``N`` (Maron & Moore's races likewise drop a candidate as
soon as it is clearly beaten on the finite set the full evaluation would use).
The verdict's correlated t-test (Benavoli et al. 2017, with Nadeau & Bengio's
correction) answers another question, how the configurations would compare on
new data from the same source; its variance never falls below ``n_test /
n_train`` times the fold variance however many folds are seen, so as a stopping
rule it saves little (it is kept as ``test="correlated"``).

What it protects, and what it does not
--------------------------------------
- The current best and the leaders of the verdict's groups are never tested, so
  never stopped; the baselines are not
  raced at all (they are cheap, and the verdict compares them with the best
  network on every fold); neither is a configuration with a diverged trial.
- A stop is the prediction "the full sweep ranks it below the current best" at
  posterior probability 0.975. For the full sweep's first-ranked configuration
  that prediction is wrong, so a configuration clearly ahead at the end is kept:
  on the nine benchmark tables below the full sweep's first was never stopped.
- Among configurations tied within noise the full sweep's first is a matter of
  chance, and the leader at an early look is picked as the highest of several
  noisy means, so racing can stop the eventual first of a tied group and report
  another member of it. What it keeps is then practically as good: on simulated
  5-fold x 3-repeat grids (ten configurations, a shared fold effect, per
  configuration noise twice the spread of the leading five; 200 grids each) the
  full sweep's first was stopped in 28 of 200 grids of a spread of 0 to 0.3 and
  30 of 200 of ten within 0.009, but the best racing kept was worse than it by
  more than the ROPE in 0 and 2 of them (``tests/test_racing.py``).
- The stricter rule this replaced (P >= 0.999 of being worse *beyond the ROPE*,
  from the 4th block, own variances; still available as ``stop="worse",
  threshold=0.999, first_look=4, moderate=False``) never stopped the first on
  3,000 simulated grids, but ran 48-100 % of the trials of the benchmark tables:
  most configurations on these tables are within the ROPE of the best, and a
  rule that keeps the whole equivalence group running cannot save them.
- Looks are at fixed points of the plan (after a block of folds is complete),
  never at the random moment a trial happens to finish, so the decisions are
  the same with one process, two, or a Dask cluster; a resumed sweep replays
  the looks on the stored scores and reaches the same decisions
  (:meth:`Race.look`), and a stopped configuration stays stopped (the store's
  ``stopped`` table). (A sweep stored under an earlier rule and resumed is
  raced by this one from where it stopped.)

What racing can save
--------------------
A stopped configuration has run at least the ``FIRST_LOOK = 2`` trials of the
first two blocks, and the best runs all ``N = K R``, so a racing sweep of ``C``
configurations runs at least ``(2 C + N - 2) / (C N)`` of the trials: 31 % at the
default 5 folds x 3 repeats with 5 configurations, 15 % with 60. A sweep with
``N <= 2`` blocks never looks and saves nothing. What it saves in practice
depends on the grid. On the wide grid (every hidden activation x the default
heads x ``--learning-rate tune``, 5 folds x 3 repeats, 100 epochs) it ran 22-32 %
of the trials on six of the nine benchmark tables (the six sample sets), 38 % on
breast cancer, 46 % on diabetes and 70 % on wine, and recommended the full
sweep's configuration on all nine; on the window's default grids 24-79 %
(:func:`racing_benchmark` measures both).

References
----------
- Hahn, G. J., Meeker, W. Q. & Escobar, L. A. (2017). Statistical Intervals: a
  guide for practitioners and researchers, 2nd ed. Wiley (prediction interval
  for the mean of m future observations from a normal sample).
- Gelman, A., Carlin, J. B., Stern, H. S., Dunson, D. B., Vehtari, A. & Rubin, D.
  B. (2013). Bayesian Data Analysis, 3rd ed., section 3.2 (the normal model's
  posterior predictive under the reference prior).
- Maron, O. & Moore, A. W. (1997). The racing algorithm: model selection for
  lazy learners. Artificial Intelligence Review 11, 193-225 (the idea of
  racing: drop a candidate as soon as it is clearly beaten on the finite set the
  full evaluation uses).
- Benavoli, A., Corani, G., Demšar, J. & Zaffalon, M. (2017). Time for a
  change: a tutorial for comparing multiple classifiers through Bayesian
  analysis. JMLR 18(77), 1-36.
- Nadeau, C. & Bengio, Y. (2003). Inference for the generalization error.
  Machine Learning 52(3), 239-281.
- Krüger, T., Lehmann, D. & Trepte, K. (2015). Fast cross-validation via
  sequential testing. JMLR 16, 1103-1155.
- Smyth, G. K. (2004). Linear models and empirical Bayes methods for assessing
  differential expression in microarray experiments. Statistical Applications in
  Genetics and Molecular Biology 3(1), article 3 (the moderated variances).
"""

from __future__ import annotations

import math

import numpy as np

from workbench.sweep import bayes
from workbench.sweep.verdict import USUAL_HIDDEN

#: the predictive probability that stops a configuration: P(the full sweep ranks it below
#: the current best) >= THRESHOLD (see the module docstring for why 0.975)
THRESHOLD = 0.975

#: the first look is after this many blocks of folds (``J = FIRST_LOOK`` paired scores)
FIRST_LOOK = 2

#: what a stop predicts about the full sweep's mean difference from the current best:
#: "below" (below zero: it ranks below the current best; the rule), "worse" (below
#: -ROPE: practically worse) or "not_better" (below +ROPE: not practically better);
#: the last two are kept to measure against
STOP = "below"

#: the margin each kind of stop puts on the full sweep's mean difference, in ROPEs
MARGIN = {"below": 0.0, "worse": -1.0, "not_better": 1.0}

#: moderate each configuration's variance of the differences towards the others' at the
#: same look (empirical Bayes, Smyth 2004; :func:`moderated_variances`)
MODERATE = True

#: the test of a look: "predictive" (the full sweep's mean difference, predicted from
#: the paired scores so far) or "correlated" (the verdict's Bayesian correlated t-test)
TEST = "predictive"


#: the settings of a racing rule a plan records (:func:`current_rule`, ``SweepPlan.race_rule``)
RULE_KEYS = ("threshold", "first_look", "test", "stop", "moderate")


def current_rule() -> dict:
    """This version's racing rule, as a plan records it when it is made (so that a sweep
    resumed later, by a version with another rule, is raced by the rule it began with)."""
    return {"threshold": THRESHOLD, "first_look": FIRST_LOOK, "test": TEST, "stop": STOP,
            "moderate": MODERATE}


def check_rule(rule: dict) -> dict:
    """A recorded racing rule, checked and completed from :func:`current_rule` (a key it
    lacks); ValueError naming what is wrong."""
    unknown = sorted(set(rule) - set(RULE_KEYS))
    if unknown:
        raise ValueError(f"unknown racing setting {unknown[0]!r}; the settings are "
                         f"{', '.join(RULE_KEYS)}")
    out = {**current_rule(), **rule}
    out["threshold"] = float(out["threshold"])
    if not 0.5 < out["threshold"] < 1:
        raise ValueError(f"the racing threshold is a probability above 0.5 and below 1, "
                         f"not {out['threshold']!r}")
    out["first_look"] = int(out["first_look"])
    if out["first_look"] < 1:
        raise ValueError(f"racing's first look is after block 1 or later, not "
                         f"{out['first_look']!r}")
    if out["test"] not in ("predictive", "correlated"):
        raise ValueError(f"unknown racing test {out['test']!r}")
    if out["stop"] not in MARGIN:
        raise ValueError(f"unknown racing stop {out['stop']!r}")
    out["moderate"] = bool(out["moderate"])
    return out


def plan_rule(plan) -> dict:
    """The racing rule of ``plan``: the one it recorded (``race_rule``), else this version's."""
    return check_rule(dict(getattr(plan, "race_rule", None) or {}))


def advised_heads(plan) -> set[str]:
    """The heads the advice (:func:`workbench.data.profiling.advise`) can give for the
    plan's target kind: one, except for a non-negative target, whose advised head
    depends on the share of zeros, which the plan does not carry (relu or softplus)."""
    from workbench.data.profiling import TargetInfo, advise

    heads = set()
    for zero_share in (0.0, 1.0):
        info = TargetInfo(name=plan.target, kind=plan.target_kind, task=plan.task,
                          evidence={"zero_share": zero_share}, classes=[0, 1],
                          interval=(0.0, 1.0))
        heads.add(advise(info).output_head)
    return heads


def rule_of_thumb_configs(plan) -> set[int]:
    """The rule of thumb's configurations: the usual hidden activation
    (:data:`workbench.sweep.verdict.USUAL_HIDDEN`) with an advised head
    (:func:`advised_heads`)."""
    heads = advised_heads(plan)
    return {c.index for c in plan.configurations()
            if c.hidden == USUAL_HIDDEN and c.head in heads}


def verdict_groups(plan) -> list[set[int]]:
    """The groups of configurations whose leading member racing keeps at every look.

    The verdict (:mod:`workbench.sweep.verdict`) states each rule of thumb by the
    best configuration of the advised value against the best of the other values --
    the output head (advised head against the other heads) and the hidden layers
    (relu against the other activations) -- and recommends the rule of thumb's best
    configuration (relu with the advised head) when it is practically equivalent to
    the best. So that those statements compare complete configurations, the leader
    (highest mean so far) of each group is kept at every look, as the best is: each
    possibly advised head, the other heads together, relu, the other activations,
    and relu with each possibly advised head. Empty groups are left out.
    """
    configs = plan.configurations()
    heads = advised_heads(plan)
    groups = [{c.index for c in configs if c.head == h} for h in sorted(heads)]
    groups.append({c.index for c in configs if c.head not in heads})
    groups.append({c.index for c in configs if c.hidden == USUAL_HIDDEN})
    groups.append({c.index for c in configs if c.hidden != USUAL_HIDDEN})
    groups += [{c.index for c in configs if c.hidden == USUAL_HIDDEN and c.head == h}
               for h in sorted(heads)]
    return [g for g in groups if g]


def rule_text() -> str:
    """The racing rule in one phrase, for messages and help texts."""
    return (f"stopped when P(the full sweep ranks it below the current best) >= "
            f"{THRESHOLD:g}, predicted from the paired fold scores so far (Student t, "
            f"variances moderated across the configurations), at each block of folds from "
            f"the {_ordinal(FIRST_LOOK)} on; the leaders of the verdict's comparisons "
            f"({USUAL_HIDDEN} and the other activations, each head, {USUAL_HIDDEN} with the "
            f"advised head) are kept, as the best is")


def _ordinal(n: int) -> str:
    return f"{n}{'th' if 10 <= n % 100 <= 20 else {1: 'st', 2: 'nd', 3: 'rd'}.get(n % 10, 'th')}"


def p_full_below(differences, n_total: int, margin: float) -> tuple[float, float, float]:
    """P(the mean of all ``n_total`` paired differences < ``margin`` | the first ``J``).

    The ``J`` differences seen so far (configuration minus current best, one per block
    of folds) and the ``m = n_total - J`` still to come are treated as exchangeable
    draws from one normal distribution of unknown mean and variance. The mean of the
    ``m`` to come then has the Student t predictive distribution with ``J - 1``
    degrees of freedom, location ``dbar`` and scale ``s sqrt(1/J + 1/m)`` (the
    prediction interval for the mean of m future observations; Hahn, Meeker &
    Escobar 2017, section 4.6; the posterior predictive under the reference prior,
    Gelman et al. 2013, section 3.2), so the full sweep's mean difference
    ``(J dbar + m ebar) / n_total`` is t with location ``dbar`` and scale
    ``(m / n_total) s sqrt(1/J + 1/m)``.

    Returns ``(p, location, scale)``; ``p`` is NaN for ``J < 2`` and 1 or 0 when every
    difference is equal (scale 0). ``J = n_total`` gives 1 or 0: nothing is left to
    predict.
    """
    d = np.asarray(differences, dtype=float).ravel()
    J = d.size
    if J < 2 or int(n_total) - J < 0:
        return math.nan, math.nan, math.nan
    loc = float(d.mean())
    p, scale = p_full_predicted(loc, float(d.var(ddof=1)), J - 1, J, n_total, margin)
    return p, loc, scale


def moderated_variances(s2, df: float, floor: float = 1e-5) -> tuple[np.ndarray, float, dict]:
    """Empirical-Bayes moderated variances (Smyth 2004, section 6.2; limma's
    ``squeezeVar`` without covariates).

    Each of the ``G`` sample variances ``s2[g]`` (``df`` degrees of freedom) is taken
    as drawn, given its true variance, from ``sigma2 chi2_df / df``, and the true
    variances as drawn from a scaled inverse chi-square prior, ``d0 s0^2 / chi2_d0``.
    The prior is estimated from the ``G`` variances by the method of moments on their
    logarithms: with ``e = log s2 - digamma(df/2) + log(df/2)``, ``d0`` solves
    ``trigamma(d0/2) = var(e) - trigamma(df/2)`` and ``s0^2 = exp(mean(e) +
    digamma(d0/2) - log(d0/2))`` (``d0`` infinite when the right side is not
    positive: the variances vary no more than sampling alone makes them). The
    posterior variance of each is ``(d0 s0^2 + df s2) / (d0 + df)`` with ``d0 + df``
    degrees of freedom, and a mean's posterior (and predictive) distribution is
    Student t with those degrees of freedom (the normal model with a conjugate
    prior on the variance; Gelman et al. 2013, section 3.3).

    Variances below ``floor`` times their median are raised to it first (as limma
    does, so that an exactly zero variance -- two configurations scoring alike on
    every fold so far -- does not swamp the logarithms); non-finite ones are left
    out of the estimate and left as they are. With fewer than three usable
    variances nothing is moderated.

    Returns ``(posterior_variances, posterior_df, {"d0", "s0_squared"})``.
    """
    from scipy import optimize, special

    v = np.asarray(s2, dtype=float).ravel()
    ok = np.isfinite(v)
    if ok.sum() < 3 or not df > 0:
        return v.copy(), float(df), {"d0": 0.0, "s0_squared": math.nan}
    med = float(np.median(v[ok]))
    low = floor * med if med > 0 else floor
    x = np.where(ok, np.maximum(v, low), v)
    e = np.log(x[ok]) - special.digamma(df / 2) + math.log(df / 2)
    e_mean = float(e.mean())
    e_var = float(e.var(ddof=1)) - float(special.polygamma(1, df / 2))
    if e_var > 0:
        # trigamma is decreasing from +inf to 0 on (0, inf): one root
        half = optimize.brentq(lambda y: float(special.polygamma(1, y)) - e_var, 1e-10, 1e10,
                               xtol=1e-12, rtol=1e-12)
        d0 = 2 * half
        s0 = math.exp(e_mean + float(special.digamma(half)) - math.log(half))
        post = np.where(ok, (d0 * s0 + df * x) / (d0 + df), v)
        return post, d0 + df, {"d0": d0, "s0_squared": s0}
    s0 = math.exp(e_mean)
    return np.where(ok, s0, v), math.inf, {"d0": math.inf, "s0_squared": s0}


def p_full_predicted(mean: float, variance: float, df: float, J: int, n_total: int,
                     margin: float) -> tuple[float, float]:
    """P(the full sweep's mean difference < ``margin``) from ``J`` paired differences of
    mean ``mean`` and (posterior) variance ``variance`` with ``df`` degrees of
    freedom: Student t with location ``mean`` and scale ``(m / n_total) sqrt(variance
    (1/J + 1/m))``, ``m = n_total - J`` (:func:`p_full_below`; ``df`` may be
    infinite: normal). Returns ``(p, scale)``."""
    m = int(n_total) - int(J)
    scale = 0.0 if m <= 0 else (m / n_total) * math.sqrt(variance * (1 / J + 1 / m))
    if not scale > 0:
        return float(mean < margin), 0.0
    from scipy import stats

    dist = stats.norm if math.isinf(df) else stats.t(df)
    return float(dist.cdf((margin - mean) / scale)), scale


def p_full_worse(differences, n_total: int, rope: float) -> tuple[float, float, float]:
    """P(the full sweep's mean difference < -rope): practically worse
    (:func:`p_full_below` at ``-rope``)."""
    return p_full_below(differences, n_total, -rope)


def block_keys(folds: int, repeats: int) -> list[tuple[int, int]]:
    """The plan's blocks of folds in racing order: ``(repeat, fold)``, repeat-major."""
    return [(r, f) for r in range(int(repeats)) for f in range(int(folds))]


def look_positions(plan) -> set[int]:
    """The positions (in :func:`block_keys` order) of the blocks after which a racing
    sweep looks: from the :data:`FIRST_LOOK`-th block to the last but one (none
    without racing). The runner ends its groups of trials there
    (:func:`workbench.sweep.runner.look_positions`)."""
    if not getattr(plan, "race", False):
        return set()
    n = int(plan.folds) * int(plan.repeats)
    return set(range(max(1, min(plan_rule(plan)["first_look"], n)) - 1, n - 1))


class Race:
    """The racing state of one sweep: its scores so far and its stopped configurations.

    Parameters
    ----------
    plan : SweepPlan
        The sweep's plan (folds, repeats, metric, configurations, baselines) and its
        racing rule (:func:`plan_rule`); the keyword settings, when given, override it
        (the benchmark's replays of other rules).
    stopped : dict, optional
        ``{config_index: record}`` already stopped (a resumed sweep: the store's
        :meth:`workbench.sweep.store.Store.stopped`); they stay stopped.

    Feed every stored trial (networks' and baselines') to :meth:`note`, then
    call :meth:`look`: it makes every look whose block is complete and returns
    the new stop records.
    """

    def __init__(self, plan, stopped: dict | None = None, *, threshold: float | None = None,
                 first_look: int | None = None, test: str | None = None,
                 stop: str | None = None, moderate: bool | None = None):
        given = {"threshold": threshold, "first_look": first_look, "test": test, "stop": stop,
                 "moderate": moderate}
        rule = check_rule({**plan_rule(plan), **{k: v for k, v in given.items()
                                                  if v is not None}})
        self.rule = rule
        self.test = rule["test"]
        self.stop = rule["stop"]
        self.moderate = rule["moderate"]
        self.groups = verdict_groups(plan)
        self.threshold = rule["threshold"]
        # the ROPE counts only when the stop puts a margin on the difference
        self.use_rope = MARGIN[self.stop] != 0.0 or self.test == "correlated"
        self.metric = plan.metric
        self.n_configurations = plan.n_configurations
        self.labels = [c.label for c in plan.configurations()]
        self.blocks = block_keys(plan.folds, plan.repeats)
        self.position = {k: j for j, k in enumerate(self.blocks)}
        look = rule["first_look"]
        self.first = max(1, min(look, len(self.blocks))) - 1  # position of the first look
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
        if (self.use_rope and self.constant is not None
                and bayes.rope_kind(self.metric) == "relative"):
            have = self.scores.get(self.constant, {})
            if len(have) < len(self.blocks):
                return False  # the ROPE of an error score waits for the constant baseline
        return True

    def _rope(self, best_mean: float) -> float:
        if not self.use_rope:
            return 0.0
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
        # no look after the last block: nothing is left to save
        while self.next < len(self.blocks) - 1 and self._complete(self.next):
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
        rope = self._rope(means[best])
        margin = MARGIN[self.stop] * rope
        others = [c for c in cands if c != best]
        J, n = len(keys), len(self.blocks)
        diffs = np.array([x[c] - x[best] for c in others])
        if self.test == "predictive":
            s2 = diffs.var(axis=1, ddof=1)
            if self.moderate:
                s2, df, _ = moderated_variances(s2, J - 1)
            else:
                df = J - 1
            probs = [p_full_predicted(float(d.mean()), float(v), df, J, n, margin)[0]
                     for d, v in zip(diffs, s2)]
        else:
            rho = bayes.rho_from_sizes([s[0] for s in sizes], [s[1] for s in sizes])
            # the posterior tail below the margin: P(worse) with a ROPE of |margin|, plus
            # the ROPE's mass when the margin is above zero
            cmps = [bayes.correlated_ttest(x[c], x[best], rho=rho, rope=abs(margin))
                    for c in others]
            probs = [t.p_worse + (t.p_equivalent if margin > 0 else 0.0) for t in cmps]
        # the leaders of the verdict's comparisons are kept, as the best is
        kept = {min(live, key=lambda c: (-means[c], c))
                for live in ([c for c in cands if c in g] for g in self.groups) if live}
        out = []
        r, f = keys[-1]
        for c, d, p in zip(others, diffs, probs):
            if c in kept or not (p >= self.threshold):  # NaN never stops
                continue
            diff = float(d.mean())
            out.append({
                "config_index": c, "after_repeat": r, "after_fold": f, "n_scores": J,
                "best_index": best, "difference": diff, "p_worse": p,
                "rope": rope, "threshold": self.threshold,
                "reason": self._reason(best, keys, diff, rope, p)})
        return out

    def _reason(self, best, keys, diff, rope, p) -> str:
        r, f = keys[-1]
        pred = self.test == "predictive"
        how = ("predicted from the paired scores so far, Student t" if pred
               else "Bayesian correlated t-test")
        what = {"below": "ranks below", "worse": f"is worse by more than the ROPE ±{rope:.4g} than",
                "not_better": f"is no better by more than the ROPE ±{rope:.4g} than"}[self.stop]
        said = {"below": "behind", "worse": "practically worse than",
                "not_better": "not practically better than"}[self.stop]
        return (f"{said} {self.labels[best]} beyond doubt after {len(keys)} paired fold "
                f"scores (repeat {r + 1}, fold {f + 1}): mean difference {diff:.4g}, "
                f"P(the full sweep {what} it) = {p:.4f} >= {self.threshold:g} ({how})")

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


def replay(plan, trials, baseline_trials=(), **rule) -> dict:
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
    race = Race(plan, **rule)
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


def replay_sweep(store, sweep_id: str, new_id: str | None = None, **rule) -> str:
    """Store, beside a full sweep, the racing sweep its plan would have run (no training).

    The new sweep (id ``new_id``, default ``<sweep_id>-raced``) has the same plan with
    ``race`` on, the full sweep's rows, baselines' trials and, of the networks' trials,
    those :func:`replay` says racing runs (each with its stored out-of-fold
    predictions), and the stopped configurations. Its results
    (:func:`workbench.sweep.results.sweep_results`) are those of a racing sweep that
    finished no trial of a stopped configuration beyond its last block. ``rule``:
    :class:`Race`'s keyword options (default: the module's rule). Returns its id.
    """
    sweep = store.get_sweep(sweep_id)
    from workbench.sweep.plan import SweepPlan

    plan = SweepPlan.from_dict(sweep["plan"])
    plan.race = True
    trials = store.trials(sweep_id, with_history=True)
    baseline_trials = store.baseline_trials(sweep_id)
    out = replay(plan, trials, baseline_trials, **rule)
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


def _grid_key(c) -> tuple:
    d = c if isinstance(c, dict) else c.to_dict()
    return (d["hidden"], d["head"], tuple(int(n) for n in d["layers"]),
            float(d["learning_rate"]), float(d["alpha"]))


def subset_sweep(store, sweep_id: str, hidden, new_id: str) -> str:
    """Store the full sweep of a smaller grid -- ``sweep_id``'s plan with only the hidden
    activations ``hidden`` -- from ``sweep_id``'s own trials (no training).

    Every trial's folds and seeds depend on its repeat and fold only
    (:meth:`workbench.sweep.plan.SweepPlan.model_seed`), never on the grid, so the
    smaller grid's sweep would store exactly these scores. Returns ``new_id``.
    """
    from workbench.sweep.plan import SweepPlan

    sweep = store.get_sweep(sweep_id)
    big = SweepPlan.from_dict(sweep["plan"])
    plan = SweepPlan.from_dict(dict(sweep["plan"], hidden=list(hidden)))
    index = {_grid_key(c): c.index for c in big.configurations()}
    mapping = {index[_grid_key(c)]: c.index for c in plan.configurations()}
    base_old = {b.name: b.index for b in big.baseline_configurations()}
    for b in plan.baseline_configurations():
        mapping[base_old[b.name]] = b.index
    store.create_sweep(new_id, plan.to_dict(), sweep["fingerprint"],
                       [c.to_dict() for c in plan.configurations()], versions=sweep["versions"],
                       baselines=[dict(b, index=mapping[int(b["index"])])
                                  for b in store.baselines(sweep_id)
                                  if int(b["index"]) in mapping],
                       rows=store.sweep_rows(sweep_id))
    for t in store.trials(sweep_id, with_history=True) + store.baseline_trials(sweep_id):
        c = int(t["config_index"])
        if c not in mapping:
            continue
        found = store.trial_predictions(sweep_id, c, t["repeat"], t["fold"])
        store.add_trial(new_id, dict(t, config_index=mapping[c],
                                     predictions=None if found is None else found[1]))
    store.set_state(new_id, sweep["state"])
    return new_id


def wide_plan(table, target: str, **options):
    """The wide grid racing is measured on: every hidden activation x the default plan's
    heads (:func:`workbench.sweep.defaults.default_heads`: the advised head and one
    alternative the guard accepts) x ``--learning-rate tune``, the window's other
    defaults (one layer of 32, 100 epochs); ``options`` override
    (:func:`workbench.sweep.plan.build_plan` arguments, e.g. ``repeats``)."""
    from workbench.sweep.defaults import default_plan

    return default_plan(table, target, **dict({"hidden": "all"}, **options))


def _label(c: dict) -> str:
    return f"{c['hidden']}/{c['head']} lr {c['learning_rate']:g}"


def compare_sweeps(store, full_id: str, raced_id: str) -> dict:
    """A full sweep and a racing sweep of the same plan, side by side.

    Returns ``n_configurations, n_trials``; ``full`` and ``race`` (``sweep_id,
    trials_run, recommended, recommended_label``); ``share`` (the racing sweep's
    trials over the full sweep's); ``same_recommendation``; ``same_group`` (the racing
    sweep's recommendation is the full sweep's best or one the verdict calls
    practically equivalent to it); ``first_kept`` (the full sweep's first-ranked
    configuration was not stopped); ``stopped`` (``[{index, label, after_repeat,
    after_fold, n_scores}]``).
    """
    from workbench.sweep.results import sweep_results

    res = {}
    for key, sid in (("full", full_id), ("race", raced_id)):
        r = sweep_results(store, sid)
        rec = (r.get("verdict") or {}).get("recommended") or {}
        res[key] = {"doc": r, "summary": {
            "sweep_id": sid, "trials_run": r["n_stored"], "recommended": rec.get("index"),
            "recommended_label": next((_label(c) for c in r["configurations"]
                                       if c["index"] == rec.get("index")), None)}}
    full, raced = res["full"], res["race"]
    group = {c["index"] for c in full["doc"]["configurations"]
             if c.get("decision") in ("best", "equivalent")}
    first = full["doc"]["configurations"][0]["index"]
    stopped = raced["doc"]["racing"]["stopped"]
    labels = {c["index"]: _label(c) for c in raced["doc"]["configurations"]}
    return {
        "n_configurations": full["doc"]["n_configurations"],
        "n_trials": full["doc"]["n_trials"],
        "full": full["summary"], "race": raced["summary"],
        "share": raced["summary"]["trials_run"] / full["summary"]["trials_run"],
        "same_recommendation": raced["summary"]["recommended"] == full["summary"]["recommended"],
        "same_group": raced["summary"]["recommended"] in group,
        "group_size": len(group),
        "first_kept": first not in {s["config_index"] for s in stopped},
        "stopped": [{"index": s["config_index"], "label": labels.get(s["config_index"]),
                     "after_repeat": s["after_repeat"], "after_fold": s["after_fold"],
                     "n_scores": s["n_scores"]} for s in stopped]}


def _stored_full(store, plan) -> str | None:
    """The id of a finished full sweep of exactly ``plan`` in ``store`` (else None)."""
    want = dict(plan.to_dict(), race=False)
    for s in store.list_sweeps():
        got = s["plan"]
        if (s["state"] == "finished" and not got.get("race") and dict(got, race=False) == want
                and s["n_stored"] == s["n_trials"]):
            return s["id"]
    return None


def measure_racing(table, target, *, store=None, jobs=None, folds=5, repeats=3,
                   rerun: bool = True, plan=None, **plan_options) -> dict:
    """Run a plan twice on one table -- every trial, then racing -- and compare.

    Parameters
    ----------
    table : path
        The table file.
    target : str
        Its target column.
    store : path, optional
        The store file both sweeps go to (default: a temporary one, removed after).
        A finished full sweep of the same plan already in it is reused, not run again.
    jobs : int, optional
        Worker processes (default: the runner's).
    folds, repeats : int
        The plan's K and R (default 5 x 3).
    rerun : bool
        Run the racing sweep for real (default); False stores the race replayed on
        the full sweep's scores instead (:func:`replay_sweep`: the same decisions, half
        the time; a real racing sweep may also finish a trial of a stopped
        configuration that was running when it was stopped, at most one per worker).
    plan : SweepPlan, optional
        The plan to measure (then ``folds``, ``repeats`` and ``plan_options`` are not
        used); default :func:`workbench.sweep.plan.build_plan` with ``plan_options``.
    **plan_options
        Other options of :func:`workbench.sweep.plan.build_plan` (default: its
        defaults, the default plan of ``workbench sweep``).

    Returns
    -------
    dict
        :func:`compare_sweeps`' answer with ``table``, ``target``, the seconds of each
        sweep run here (``full["seconds"]``, ``race["seconds"]``; None when reused or
        replayed) and ``replay_agrees`` (the race replayed on the full sweep's
        scores, :func:`replay`, stops the same configurations), ``replay_trials``.
    """
    import copy
    import tempfile
    from pathlib import Path

    from workbench.sweep.plan import build_plan
    from workbench.sweep.runner import run_sweep
    from workbench.sweep.store import Store

    if plan is None:
        plan = build_plan(table, target, folds=folds, repeats=repeats, **plan_options)
    full_plan = copy.deepcopy(plan)
    full_plan.race = False
    tmp = None
    if store is None:
        tmp = tempfile.TemporaryDirectory(prefix="workbench-racing-")
        store = Path(tmp.name) / "racing.sqlite"
    try:
        with Store(store) as st:
            full_id, full_s = _stored_full(st, full_plan), None
            if full_id is None:
                outcome = run_sweep(full_plan, store=st, jobs=jobs)
                full_id, full_s = outcome.sweep_id, outcome.seconds
            if rerun:
                race_plan = copy.deepcopy(full_plan)
                race_plan.race = True
                outcome = run_sweep(race_plan, store=st, jobs=jobs)
                race_id, race_s = outcome.sweep_id, outcome.seconds
            else:
                race_id, race_s = replay_sweep(st, full_id, f"{full_id}-raced-{_rule_tag()}"), None
            out = dict(compare_sweeps(st, full_id, race_id), table=str(table), target=target)
            out["full"]["seconds"], out["race"]["seconds"] = full_s, race_s
            replayed = replay(full_plan, st.trials(full_id, with_history=False),
                              st.baseline_trials(full_id))
            out["replay_agrees"] = set(replayed["stopped"]) == {s["index"] for s in out["stopped"]}
            out["replay_trials"] = replayed["n_trials_needed"]
            out["full_id"] = full_id
        return out
    finally:
        if tmp is not None:
            tmp.cleanup()


def _rule_tag() -> str:
    """The rule in a sweep id: threshold, first look, kind of stop, moderated or not."""
    import uuid

    return (f"p{THRESHOLD:g}-j{FIRST_LOOK}-{STOP}-{'mod' if MODERATE else 'own'}-"
            f"{uuid.uuid4().hex[:6]}")


def benchmark_tables(folder) -> list[tuple[str, object, str]]:
    """The nine tables of :func:`racing_benchmark`: ``(name, path, target)``; the
    scikit-learn data sets are written as CSV files into ``folder``."""
    from pathlib import Path

    import sklearn.datasets

    samples = Path(__file__).resolve().parents[2] / "sample_sets"
    todo = [(name, samples / name, target) for name, target in SAMPLE_TABLES]
    for loader in SKLEARN_TABLES:
        path = Path(folder) / f"{loader[5:]}.csv"
        if not path.exists():
            getattr(sklearn.datasets, loader)(as_frame=True).frame.to_csv(path, index=False)
        todo.append((loader, path, "target"))
    return todo


def racing_benchmark(*, folds=5, repeats=3, jobs=2, tables=None, on_result=print,
                     rerun: bool = False, store_dir=None, grid: str = "wide",
                     **plan_options) -> dict:
    """Racing measured on the six sample sets and scikit-learn's breast cancer, wine and
    diabetes tables (:data:`SAMPLE_TABLES`, :data:`SKLEARN_TABLES`), in one command.

    Per table: the full sweep of the grid (``grid="wide"``: :func:`wide_plan`, every
    hidden activation x the default heads x the tuned learning rates; ``"default"``:
    the window's default plan, :func:`workbench.sweep.defaults.default_plan`), then
    the racing sweep of the same plan, compared (:func:`measure_racing`). With the
    wide grid, the default grid's figures come too, from the same trials
    (:func:`subset_sweep`: the default grid is the wide one's advised hidden
    activations, and trials do not depend on the grid).

    Parameters
    ----------
    folds, repeats, jobs, **plan_options
        The plan's K, R (default 5 x 3), worker processes (default 2) and other
        :func:`workbench.sweep.plan.build_plan` options (e.g. ``epochs``).
    tables : sequence of str, optional
        Names (file names or loader names) to measure; default all nine.
    on_result : callable
        Called with one line per table as it is ready, and with the summary
        (default ``print``; None for silence).
    rerun : bool
        Run the racing sweep for real; default False: replay the race on the full
        sweep's stored scores (:func:`replay_sweep`, the same decisions -- tested --
        at half the cost).
    store_dir : path, optional
        Keep one store per table there (a finished full sweep of the same plan is
        reused; default: temporary stores).

    Returns
    -------
    dict
        ``rows`` (per table :func:`measure_racing`'s answer with ``name`` and, for the
        wide grid, ``default``: the default grid's comparison), ``n_tables``,
        ``n_third`` (tables whose racing share is <= 1/3), ``n_agree`` (racing's
        recommendation in the full sweep's equivalence group), ``rule`` and the same
        counts for the default grid (``default_n_third``, ``default_n_agree``).
    """
    import tempfile
    from pathlib import Path

    from workbench.data.intake import load_table
    from workbench.data.profiling import advise, analyse_target
    from workbench.sweep.defaults import default_plan
    from workbench.sweep.store import Store

    say = on_result or (lambda *_: None)
    rule = {"threshold": THRESHOLD, "first_look": FIRST_LOOK, "stop": STOP,
            "moderate": MODERATE}
    rows = []
    with tempfile.TemporaryDirectory(prefix="workbench-racing-tables-") as tmp:
        keep = Path(store_dir) if store_dir is not None else Path(tmp)
        keep.mkdir(parents=True, exist_ok=True)
        for name, path, target in benchmark_tables(keep):
            if tables is not None and name not in tables:
                continue
            opts = dict(plan_options, folds=folds, repeats=repeats)
            plan = (wide_plan(path, target, **opts) if grid == "wide"
                    else default_plan(path, target, **opts))
            db = keep / f"{name}.sqlite"
            res = dict(measure_racing(path, target, store=db, jobs=jobs, rerun=rerun,
                                      plan=plan), name=name)
            line = _benchmark_line(name, res)
            if grid == "wide":
                advised = advise(analyse_target(load_table(path)[0], target)).hidden_to_sweep
                with Store(db) as st:
                    sub = subset_sweep(st, res["full_id"], advised,
                                       f"{res['full_id']}-default-{_rule_tag()}")
                    raced = replay_sweep(st, sub, f"{sub}-raced")
                    res["default"] = compare_sweeps(st, sub, raced)
                line += "; default grid: " + _benchmark_line(None, res["default"])
            rows.append(res)
            say(line)
    out = {"rows": rows, "n_tables": len(rows), "rule": rule,
           "n_third": sum(r["share"] <= 1 / 3 for r in rows),
           "n_agree": sum(bool(r["same_group"]) for r in rows)}
    if grid == "wide":
        out["default_n_third"] = sum(r["default"]["share"] <= 1 / 3 for r in rows)
        out["default_n_agree"] = sum(bool(r["default"]["same_group"]) for r in rows)
    say(f"racing ({rule_text()}), {grid} grid, {folds} folds x "
        f"{repeats} repeats: <= 1/3 of the trials on {out['n_third']} of {len(rows)} tables; "
        f"recommendation in the full sweep's equivalence group on {out['n_agree']} of "
        f"{len(rows)}" + (f"; default grid: <= 1/3 on {out['default_n_third']}, group on "
                          f"{out['default_n_agree']}" if grid == "wide" else ""))
    return out


def _benchmark_line(name, r: dict) -> str:
    agree = ("same" if r["same_recommendation"] else
             "same group" if r["same_group"] else "DIFFERENT")
    return ((f"{name}: " if name else "") +
            f"{r['race']['trials_run']}/{r['full']['trials_run']} trials "
            f"({r['share']:.0%}, {r['n_configurations']} configurations, "
            f"{len(r['stopped'])} stopped), recommendation {agree} "
            f"({r['race']['recommended_label']} vs {r['full']['recommended_label']}; "
            f"group of {r['group_size']})")
