"""The verdict on the rule of thumb: per-candidate view, repeats needed, recommendation.

Pure functions of the configurations' settings and fold scores (and, for the
selection-corrected estimates, their stored out-of-fold predictions);
nothing here reads the store or builds documents.

Inputs shared by the functions
------------------------------
``configs``
    A sequence of mappings, one per configuration, with at least
    ``hidden``, ``head``, ``layers`` (list of widths), ``learning_rate``,
    ``alpha``; ``index`` (the plan's configuration index) and ``rank`` are
    carried into the answers when present (else the position is used).
``scores``
    Array (C, J): row c holds configuration c's J = K x R fold scores
    (greater is better), in the same (repeat, fold) order for every row, so
    that rows are paired.
``oof``
    Optional :class:`workbench.sweep.bbc.OutOfFold` whose prediction column c
    is configuration c; without it no selection-corrected estimate is given.
``rho``, ``rope``
    As in :mod:`workbench.sweep.bayes` (``rho = n_test / n_total``).

What they answer
----------------
:func:`candidate_view` -- each value of a factor (each hidden activation,
each head, each hidden x head pair) "at its own best settings": its best
configuration and raw best mean, its *robustness* (the mean over every
setting it was tried with), and, with ``oof``, its selection-corrected
estimate: BBC-CV (:mod:`workbench.sweep.bbc`) over that candidate's
configurations only, which corrects for having picked its best settings.

:func:`repeats_needed` -- how many repeats of K-fold would make a paired
difference of the observed size decisive, holding the observed mean
difference d̄ and the per-fold variance s² of the differences fixed.
With J = K x R folds the Nadeau & Bengio (2003) corrected variance of the
mean difference is

    v(R) = (1 / (K R) + rho / (1 - rho)) * s²,

so, without a ROPE, R repeats make the difference significant at ``alpha``
when ``|d̄| / sqrt(v(R)) > t_{1 - alpha/2, KR - 1}``, i.e. (ignoring the
change of the t quantile with R, which the function does not ignore)

    R >= 1 / (K * (d̄² / (t² s²) - rho / (1 - rho))),

and no number of repeats suffices when ``d̄² <= t² s² rho / (1 - rho)``:
the correlation between folds puts a floor under the variance. With a ROPE
(what the verdict uses) R repeats are enough when the Bayesian correlated
t-test's posterior, Student t with KR - 1 degrees of freedom, location d̄
and scale ``sqrt(v(R))``, gives one of P(worse), P(equivalent), P(better)
at least the 95 % threshold. The smallest such R from 1 to ``max_repeats``
is searched directly.

:func:`rule_verdict` -- a statement about one rule of thumb: the advised
value of a factor (the advised head; relu in the hidden layers) at its best
configuration against the best configuration of any other value, by the
Bayesian correlated t-test: "holds" (P(better) >= 0.95), "equivalent"
(P(equivalent) >= 0.95), "beaten by X by Δ (low to high), P = …"
(P(worse) >= 0.95), else "undecided: about N more repeats would tell".
Both sides are the best of their settings, so both carry the same kind of
selection optimism; the difference and its 95 % interval (the posterior's
equal-tailed interval, i.e. the Nadeau-Bengio corrected interval) are of
the paired fold scores of those two configurations.

:func:`recommend` -- the configuration to export: the simplest member of
the best's equivalence group (the best and every configuration decided
"equivalent" to it). The rule-of-thumb configuration (hidden ``relu`` and
the advised head) when one is in the group, otherwise the fewest trainable
parameters; ties go to the higher mean.

:func:`verdict` -- all of the above for one sweep, in the shape of the
results document's ``verdict`` entry.

References
----------
- Benavoli, A., Corani, G., Demšar, J. & Zaffalon, M. (2017). Time for a
  change: a tutorial for comparing multiple classifiers through Bayesian
  analysis. JMLR 18(77), 1-36.
- Nadeau, C. & Bengio, Y. (2003). Inference for the generalization error.
  Machine Learning 52(3), 239-281.
- Tsamardinos, I., Greasidou, E. & Borboudakis, G. (2018). Bootstrapping the
  out-of-sample predictions for efficient and accurate cross-validation.
  Machine Learning 107(12), 1895-1922.
"""

from __future__ import annotations

import math

import numpy as np

from workbench.sweep.bayes import THRESHOLD, compare_with_best, correlated_ttest, decide

#: the usual default hidden activation the hidden-layer verdict tests
USUAL_HIDDEN = "relu"

#: the rule verdict's outcomes, by the Bayesian decision of advised vs best other
OUTCOMES = {"better": "holds", "equivalent": "equivalent", "worse": "beaten",
            "undecided": "undecided"}

_NOUN = {"head": "head", "hidden": "hidden activation"}


# --------------------------------------------------------------------------- helpers
def _scores(scores, configs) -> np.ndarray:
    x = np.asarray(scores, dtype=float)
    if x.ndim != 2 or x.shape[0] != len(configs):
        raise ValueError(f"scores must be (configurations, folds); got {x.shape} for "
                         f"{len(configs)} configurations")
    if not np.all(np.isfinite(x)):
        raise ValueError("fold scores must be finite")
    return x


def _index(configs, c: int) -> int:
    return int(configs[c].get("index", c))


def _value(config, factor):
    if isinstance(factor, tuple | list):
        return tuple(config[f] for f in factor)
    return config[factor]


def _label(value) -> str:
    return " + ".join(str(v) for v in value) if isinstance(value, tuple) else str(value)


def _fmt(x: float, rope: float) -> str:
    """A number to the precision that resolves a hundredth of the ROPE."""
    if not math.isfinite(x):
        return "n/a"
    if rope > 0:
        decimals = max(0, 2 - math.floor(math.log10(rope)))
        return f"{x:.{decimals}f}"
    return f"{x:.4g}"


def _p(p: float) -> str:
    """"P = 0.97", or "P > 0.99" / "P < 0.01" where two decimals would round to 1 or 0."""
    if p >= 0.995:
        return "P > 0.99"
    if p < 0.005:
        return "P < 0.01"
    return f"P = {p:.2f}"


def n_parameters(layers, n_inputs: int, n_outputs: int) -> int:
    """Trainable weights and biases of an MLP: sum over layers of (fan_in + 1) * fan_out."""
    sizes = [int(n_inputs)] + [int(s) for s in layers] + [int(n_outputs)]
    return sum((a + 1) * b for a, b in zip(sizes[:-1], sizes[1:]))


# --------------------------------------------------------------------------- (a) candidates
def candidate_view(configs, scores, factor, *, oof=None, n_boot: int = 1000,
                   seed: int = 0) -> list[dict]:
    """Each value of a factor at its own best settings (the per-candidate view).

    Parameters
    ----------
    configs, scores, oof
        See the module docstring.
    factor : str or tuple of str
        ``"hidden"``, ``"head"`` or ``("hidden", "head")`` (pairs); any
        configuration key works.
    n_boot, seed
        For the BBC-CV estimate (see :func:`workbench.sweep.bbc.bbc_cv`).

    Returns
    -------
    list of dict, best raw mean first
        ``{factor, value, label, best_index, best_mean, robustness,
        n_settings, corrected}``: ``value`` the factor's value (a list for
        pairs), ``best_index`` the index of its best configuration,
        ``best_mean`` that configuration's mean score, ``robustness`` the
        mean of the means of all its ``n_settings`` configurations,
        ``corrected`` ``{estimate, low, high, method, ...}`` from BBC-CV over
        its configurations, or None without ``oof``.
    """
    x = _scores(scores, configs)
    means = x.mean(axis=1)
    groups: dict = {}
    for c, cfg in enumerate(configs):
        groups.setdefault(_value(cfg, factor), []).append(c)
    out = []
    for value, members in groups.items():
        best = members[int(np.argmax(means[members]))]
        corrected = None
        if oof is not None:
            corrected = oof.bbc(members, n_boot=n_boot, seed=seed).to_dict()
        out.append({
            "factor": "+".join(factor) if isinstance(factor, tuple | list) else factor,
            "value": list(value) if isinstance(value, tuple) else value,
            "label": _label(value),
            "best_index": _index(configs, best),
            "best_mean": float(means[best]),
            "robustness": float(means[members].mean()),
            "n_settings": len(members),
            "corrected": corrected,
        })
    out.sort(key=lambda d: -d["best_mean"])
    return out


# --------------------------------------------------------------------------- (b) repeats
def repeats_needed(differences, *, folds: int, repeats: int, rho: float,
                   alpha: float = 0.05, rope: float | None = None,
                   threshold: float = THRESHOLD, max_repeats: int = 1000) -> dict:
    """Repeats of K-fold that would make a paired difference of this size decisive.

    Parameters
    ----------
    differences : array-like of shape (K * repeats,)
        The observed paired fold-score differences.
    folds, repeats : int
        K and the current R.
    rho : float
        ``n_test / n_total``.
    alpha : float
        Significance level of the corrected t-test (used when ``rope`` is None).
    rope : float, optional
        With a ROPE: decisive when the Bayesian posterior gives P(worse),
        P(equivalent) or P(better) >= ``threshold``.
    max_repeats : int
        Largest R searched.

    Returns
    -------
    dict
        ``{repeats, more, reachable}``: the smallest total R (from 1) at
        which the difference would be decisive, the repeats beyond the
        current ones (0 when already decisive), and False (with ``repeats``
        and ``more`` None) when no R up to ``max_repeats`` is enough.
    """
    from scipy import stats  # here, not at the top: scipy.stats takes ~0.5 s to import

    d = np.asarray(differences, dtype=float).ravel()
    K = int(folds)
    if d.size < 2 or K < 2:
        return {"repeats": None, "more": None, "reachable": False}
    mean = float(d.mean())
    s2 = float(d.var(ddof=1))
    R = np.arange(1, int(max_repeats) + 1)
    J = K * R
    var = (1.0 / J + rho / (1.0 - rho)) * s2
    df = J - 1
    with np.errstate(divide="ignore", invalid="ignore"):
        if rope is None:
            if s2 == 0.0:
                ok = np.full(R.shape, mean != 0.0)
            else:
                p = 2.0 * stats.t.sf(abs(mean) / np.sqrt(var), df)
                ok = p < alpha
        else:
            if s2 == 0.0:
                ok = np.full(R.shape, not (rope == 0.0 and mean == 0.0))
            else:
                scale = np.sqrt(var)
                pw = stats.t.cdf(-rope, df, loc=mean, scale=scale)
                pb = stats.t.sf(rope, df, loc=mean, scale=scale)
                pe = np.maximum(0.0, 1.0 - pw - pb) if rope > 0 else np.zeros_like(pw)
                ok = np.maximum(np.maximum(pw, pb), pe) >= threshold
    hits = np.flatnonzero(ok)
    if hits.size == 0:
        return {"repeats": None, "more": None, "reachable": False}
    total = int(R[hits[0]])
    return {"repeats": total, "more": max(0, total - int(repeats)), "reachable": True}


# --------------------------------------------------------------------------- (c) statements
def rule_verdict(configs, scores, *, factor: str, advised: str, rho: float, rope: float,
                 folds: int, repeats: int, rule: str | None = None,
                 threshold: float = THRESHOLD, max_repeats: int = 1000) -> dict:
    """One rule of thumb on this table: the advised value against the best other value.

    Parameters
    ----------
    configs, scores, rho, rope
        See the module docstring.
    factor : {"head", "hidden"}
        The factor the rule is about.
    advised : str
        The rule's value (the advised head; ``"relu"`` for the hidden layers).
    folds, repeats : int
        K and R of the sweep (for :func:`repeats_needed`).
    rule : str, optional
        The rule in words; a default names the factor and the value.

    Returns
    -------
    dict
        ``rule``, ``factor``, ``advised``, ``best_other`` (the other value
        whose best configuration has the highest mean), ``advised_index``,
        ``best_other_index``, ``advised_mean``, ``best_other_mean``,
        ``difference`` (advised minus best other, mean of the paired fold
        differences), ``interval`` ([low, high], 95 %), ``p_better``,
        ``p_equivalent``, ``p_worse`` (of the advised), ``outcome`` (holds,
        equivalent, beaten, undecided, or not_tested), ``repeats_more``
        (for undecided: None when unreachable) and ``words``. Numbers are
        None when the rule could not be tested (advised value not in the
        grid, or no other value tried).
    """
    x = _scores(scores, configs)
    means = x.mean(axis=1)
    noun = _NOUN.get(factor, factor)
    rule = rule or (f"{advised} as the output head" if factor == "head"
                    else f"{advised} in the hidden layers")
    out = {"rule": rule, "factor": factor, "advised": advised, "best_other": None,
           "advised_index": None, "best_other_index": None, "advised_mean": None,
           "best_other_mean": None, "difference": None, "interval": None,
           "p_better": None, "p_equivalent": None, "p_worse": None,
           "outcome": "not_tested", "repeats_more": None}
    mine = [c for c, cfg in enumerate(configs) if cfg[factor] == advised]
    others = [c for c, cfg in enumerate(configs) if cfg[factor] != advised]
    if not mine:
        out["words"] = f"not tested: {advised} was not in the grid"
        return out
    if not others:
        out["words"] = f"not tested: no other {noun} was tried"
        return out
    a = mine[int(np.argmax(means[mine]))]
    b = others[int(np.argmax(means[others]))]
    other = configs[b][factor]
    cmp = correlated_ttest(x[a], x[b], rho=rho, rope=rope)
    low, high = cmp.interval(0.95)
    decision = decide(cmp, threshold=threshold)
    outcome = OUTCOMES[decision]
    out.update({"best_other": other, "advised_index": _index(configs, a),
                "best_other_index": _index(configs, b), "advised_mean": float(means[a]),
                "best_other_mean": float(means[b]), "difference": cmp.mean,
                "interval": [low, high], "p_better": cmp.p_better,
                "p_equivalent": cmp.p_equivalent, "p_worse": cmp.p_worse,
                "outcome": outcome})
    f = lambda v: _fmt(v, rope)  # noqa: E731
    if outcome == "holds":
        words = (f"holds: {advised} beats the best other {noun}, {other}, by "
                 f"{f(cmp.mean)} ({f(low)} to {f(high)}), {_p(cmp.p_better)}")
    elif outcome == "equivalent":
        words = (f"equivalent: {advised} and {other} differ by {f(cmp.mean)} "
                 f"({f(low)} to {f(high)}), within ±{f(rope)}, {_p(cmp.p_equivalent)}")
    elif outcome == "beaten":
        words = (f"beaten by {other} by {f(-cmp.mean)} ({f(-high)} to {f(-low)}), "
                 f"{_p(cmp.p_worse)}")
    else:
        need = repeats_needed(x[a] - x[b], folds=folds, repeats=repeats, rho=rho, rope=rope,
                              threshold=threshold, max_repeats=max_repeats)
        out["repeats_more"] = need["more"]
        detail = (f"{advised} vs {other}: {f(cmp.mean)} ({f(low)} to {f(high)}); "
                  f"P better {cmp.p_better:.2f}, equivalent {cmp.p_equivalent:.2f}, "
                  f"worse {cmp.p_worse:.2f}")
        if need["reachable"] and need["more"]:
            plural = "s" if need["more"] != 1 else ""
            words = (f"undecided: about {need['more']} more repeat{plural} would tell "
                     f"({detail})")
        else:
            words = (f"undecided: more repeats alone would not tell at this difference "
                     f"({detail})")
    out["words"] = words
    return out


# --------------------------------------------------------------------------- (d) recommend
def recommend(configs, scores, decisions, *, advised_head: str, n_inputs: int, n_outputs,
              usual_hidden: str = USUAL_HIDDEN, p_equivalent=None) -> dict:
    """The simplest member of the best's equivalence group, with a one-line reason.

    Parameters
    ----------
    configs, scores
        See the module docstring.
    decisions : sequence of str
        Per configuration, its decision against the best ("best",
        "equivalent", "undecided", "worse"; :func:`workbench.sweep.bayes.compare_with_best`).
    advised_head : str
        The head the rule of thumb advises for this target.
    n_inputs : int
        Input columns after preprocessing.
    n_outputs : int or mapping
        Output units, or ``{head: units}`` when it depends on the head
        (softmax on two classes: 2; logistic: 1).
    usual_hidden : str
        The rule of thumb's hidden activation (relu).
    p_equivalent : sequence of float, optional
        Per configuration P(equivalent to the best), quoted in the reason.

    Returns
    -------
    dict
        ``{index, rank, reason, rule_of_thumb, n_parameters}`` (``rank`` None
        when the configurations carry none).
    """
    x = _scores(scores, configs)
    means = x.mean(axis=1)
    if len(decisions) != len(configs):
        raise ValueError("one decision per configuration is needed")
    group = [c for c, d in enumerate(decisions) if d in ("best", "equivalent")]
    best = [c for c, d in enumerate(decisions) if d == "best"]
    if not best:
        raise ValueError("no configuration is marked best")
    best = best[0]

    def params(c):
        cfg = configs[c]
        outs = n_outputs[cfg["head"]] if isinstance(n_outputs, dict) else n_outputs
        return n_parameters(cfg["layers"], n_inputs, outs)

    def pick(cands):
        return min(cands, key=lambda c: (params(c), -means[c], c))

    rot = [c for c in group if configs[c]["hidden"] == usual_hidden
           and configs[c]["head"] == advised_head]
    rule_words = f"{usual_hidden} hidden layers with the advised {advised_head} head"
    if rot:
        chosen = pick(rot)
        if chosen == best:
            reason = f"the best configuration, and it follows the rule of thumb ({rule_words})"
        else:
            pe = "" if p_equivalent is None else f", {_p(p_equivalent[chosen])}"
            reason = (f"follows the rule of thumb ({rule_words}) and is practically "
                      f"equivalent to the best{pe}")
    else:
        chosen = pick(group)
        if len(group) == 1:
            reason = ("the best configuration; no other is shown practically equivalent to it, "
                      "and the rule of thumb's is not among the equivalent ones")
        elif chosen == best:
            reason = (f"the best configuration, with the fewest parameters "
                      f"({params(chosen):,}) among the {len(group)} practically equivalent "
                      f"ones; none follows the rule of thumb")
        else:
            reason = (f"the fewest parameters ({params(chosen):,}) among the {len(group)} "
                      f"configurations practically equivalent to the best; none follows the "
                      f"rule of thumb")
    return {"index": _index(configs, chosen), "rank": configs[chosen].get("rank"),
            "reason": reason, "rule_of_thumb": bool(rot), "n_parameters": params(chosen)}


# --------------------------------------------------------------------------- all together
def verdict(configs, scores, *, advised_head: str, rho: float, rope: float, folds: int,
            repeats: int, n_inputs: int, n_outputs, usual_hidden: str = USUAL_HIDDEN,
            oof=None, n_boot: int = 1000, seed: int = 0,
            threshold: float = THRESHOLD) -> dict:
    """The verdict of one sweep: both rule statements, the recommendation and their inputs.

    Returns
    -------
    dict
        ``output`` and ``hidden`` (:func:`rule_verdict`), ``recommended``
        (:func:`recommend`), ``comparisons`` (per configuration, in input
        order: :func:`workbench.sweep.bayes.compare_with_best`),
        ``candidates`` (``{"hidden": [...], "head": [...], "hidden_head":
        [...]}`` from :func:`candidate_view`) and ``corrected_best``
        (BBC-CV over every configuration, ``{estimate, low, high, method,
        ...}``, or None without ``oof``).
    """
    x = _scores(scores, configs)
    comparisons = compare_with_best(x, rho=rho, rope=rope, threshold=threshold)
    decisions = [r["decision"] for r in comparisons]
    common = dict(rho=rho, rope=rope, folds=folds, repeats=repeats, threshold=threshold)
    return {
        "output": rule_verdict(configs, x, factor="head", advised=advised_head, **common),
        "hidden": rule_verdict(configs, x, factor="hidden", advised=usual_hidden, **common),
        "recommended": recommend(configs, x, decisions, advised_head=advised_head,
                                 n_inputs=n_inputs, n_outputs=n_outputs,
                                 usual_hidden=usual_hidden,
                                 p_equivalent=[r["p_equivalent"] for r in comparisons]),
        "comparisons": comparisons,
        "candidates": {
            "hidden": candidate_view(configs, x, "hidden", oof=oof, n_boot=n_boot, seed=seed),
            "head": candidate_view(configs, x, "head", oof=oof, n_boot=n_boot, seed=seed),
            "hidden_head": candidate_view(configs, x, ("hidden", "head"), oof=oof,
                                          n_boot=n_boot, seed=seed),
        },
        "corrected_best": (oof.bbc(None, n_boot=n_boot, seed=seed).to_dict()
                           if oof is not None else None),
    }
