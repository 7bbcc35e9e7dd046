"""Why a configuration trains badly: a diagnosis per configuration, in plain words.

:func:`diagnose` reads what the sweep stored for one configuration -- each
trial's status, per-epoch training loss (and held-out curves when recorded),
last-epoch layer health, training and test scores, and the out-of-fold
predictions -- and returns the findings, each with a code, a short label and a
sentence that says what to try. :func:`add_diagnoses` does it for every
configuration of a results document (:mod:`workbench.sweep.results`), so the
command line, the window and the report show the same words. Every
configuration gets a line: ``trains normally`` when nothing is found. Qt-free.

Findings, the rule behind each and where its threshold comes from
-----------------------------------------------------------------
Each rule is applied per trial and a configuration gets the finding when at
least half of its trials have it (a majority of the folds: common practice),
except *diverged*, which one trial is enough for.

``diverged``
    a trial's status is ``diverged`` (non-finite loss, see
    :mod:`workbench.sweep.trials`), or its training loss ended at least
    :data:`BLOW_UP` = 10 times above its lowest value (from memory).
``dead_output``
    regression heads with a lower bound (exp, relu, softplus, logistic): more
    than :data:`DEAD_OUTPUT_SHARE` = 0.5 of the test rows (a majority: common
    practice) predicted exactly at the bound, while the target is there for
    less than half that share. A relu output unit whose pre-activation is
    negative for every row passes no gradient and cannot come back (the
    dying-ReLU case of Lu, Shin, Su & Karniadakis 2019).
``constant_output``
    within each fold the predictions' standard deviation is below
    :data:`CONSTANT_SPREAD` = 1 % of the target's (from memory); for a classifier
    every class probability's standard deviation is below 0.01.
``plateau``
    the training loss fell by less than :data:`FLAT_DROP` = 10 % from the first
    epoch to the last (from memory) and the loss is *high* (below).
``stopped_early``
    training stopped before the epoch budget (the engine's no-improvement
    rule, scikit-learn's: no fall by more than ``tol`` = 1e-4 for
    ``n_iter_no_change`` = 10 epochs, or early stopping) at a *high* loss.
``underfit``
    the results document's ``underfit`` flag (the mean training score is below
    the linear baseline's test score by more than the region of practical
    equivalence: the network does not even fit its own training rows), or the
    loss was still falling at the last epoch: the run used the whole epoch
    budget and its last :data:`TAIL` = 10 % of epochs still brought at least
    :data:`STILL_FALLING` = 5 % of the whole fall (from memory; a curve that has
    flattened brings far less, a straight line brings 10 %).
``overfit``
    from the best evidence recorded, named in the sentence:
    (1) held-out loss per epoch (``history["test_loss"]``, the held-out fold's;
    else ``history["val_loss"]``, early stopping's validation rows): its last
    value at least :data:`HELDOUT_RISE` = 10 % above its minimum (from memory)
    while the training loss kept falling after that minimum (the pattern
    early stopping looks for: Prechelt 1998, "Early stopping -- but when?");
    (2) early stopping's validation score per epoch (``history["val_score"]``,
    greater is better): its last value at least :data:`VAL_DROP` = 0.05 below
    its peak while the training loss kept falling (from memory);
    (3) otherwise the train-test gap: mean training score minus mean test score
    at least :data:`GAP_FRACTION` = 0.1 for scores on a fixed scale (R², accuracy,
    ROC AUC...), or at least :data:`GAP_RELATIVE` = 25 % of the test score's size
    for error scores (both from memory).
``dead_units`` / ``saturated_units``
    a hidden layer with at least :data:`WARN_SHARE` = 10 % of its units dead or
    saturated at the last epoch, mean over the trials (from memory: a tenth of a
    layer not learning is worth a look), as the engine measures them
    (:mod:`workbench.nets.health`: dead = zero derivative on every probe row,
    Lu et al. 2019; saturated = derivative below 0.05 on most probe rows, Glorot &
    Bengio 2010). Above :data:`MOSTLY` = 0.5 the sentence says "mostly".
``unstable``
    the fold scores' standard deviation at least :data:`UNSTABLE_RATIO` = 2 times
    the median over the sweep's finished configurations (from memory) and
    larger than the region of practical equivalence (not said of a diverged
    configuration, whose blow-up explains its spread).

*High loss*: the configuration's final training loss (median over its trials)
is at least :data:`HIGH_LOSS_RATIO` = 2 times the lowest among the sweep's
configurations whose losses are comparable (same loss and target scaling,
:func:`loss_kind`; from memory) and the configuration is neither the best nor
practically equivalent to it (a configuration that scores on held-out rows as
well as the best has not stalled anywhere that matters: a lower training loss
elsewhere may be over-fitting), or the ``underfit`` flag is set.

Remedies, with their sources: a smaller learning rate against divergence
(common practice; LeCun, Bottou, Orr & Müller 1998, "Efficient BackProp",
section 4.7); activations that keep a gradient for negative inputs against dead
units -- leaky_relu (Maas, Hannun & Ng 2013), elu (Clevert, Unterthiner &
Hochreiter 2016), softplus (Dugas et al. 2001); scaled inputs, a smaller
learning rate or a non-saturating activation against saturation (Glorot &
Bengio 2010; LeCun et al. 1998); more epochs or a higher learning rate against
underfitting, and a smaller network, a larger L2 strength or early stopping
against over-fitting (common practice).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: above this share of dead or saturated units a layer is called "mostly" so
#: (common practice: a majority of the layer's units)
MOSTLY = 0.5
#: a layer with at least this share of dead or saturated units is worth a warning
#: (from memory)
WARN_SHARE = 0.10
#: activations suggested for dead units: each keeps a gradient for negative inputs
#: (sources in the module docstring); a test checks they are in the registry
DEAD_REMEDIES = ("leaky_relu", "elu", "softplus")
#: a training loss ending this many times above its lowest value has blown up (from memory)
BLOW_UP = 10.0
#: the loss fell by less than this share from the first epoch to the last: flat (from memory)
FLAT_DROP = 0.10
#: the last this share of the epochs ... (from memory)
TAIL = 0.10
#: ... still brought at least this share of the whole fall: still falling (from memory)
STILL_FALLING = 0.05
#: a final loss this many times the lowest comparable one is high (from memory)
HIGH_LOSS_RATIO = 2.0
#: held-out loss this far above its minimum (relative) at the end: rising (from memory)
HELDOUT_RISE = 0.10
#: validation score this far below its peak at the end: falling (from memory)
VAL_DROP = 0.05
#: train-test gap of a score on a fixed scale worth calling over-fitting (from memory)
GAP_FRACTION = 0.10
#: train-test gap of an error score, relative to the test score's size (from memory)
GAP_RELATIVE = 0.25
#: more than this share of rows predicted at the head's lower bound: dead output
#: (common practice: a majority of the rows)
DEAD_OUTPUT_SHARE = 0.5
#: predictions' spread below this share of the target's: constant output (from memory)
CONSTANT_SPREAD = 0.01
#: class probabilities whose standard deviation is below this: constant (from memory)
CONSTANT_PROBABILITY = 0.01
#: fold-score sd this many times the sweep's median: unstable (from memory)
UNSTABLE_RATIO = 2.0

#: every code, in the order findings are listed, with its short label
LABELS = {
    "pending": "no trial finished yet",
    "failed": "failed",
    "diverged": "diverged",
    "dead_output": "dead output",
    "constant_output": "constant output",
    "plateau": "plateau",
    "stopped_early": "stopped early, high loss",
    "underfit": "underfit",
    "overfit": "over-fit",
    "dead_units": "dead units",
    "saturated_units": "saturated units",
    "unstable": "unstable across folds",
    "normal": "trains normally",
}
CODES = tuple(LABELS)


# --------------------------------------------------------------------------- loss kinds


def loss_kind(task: str, head: str) -> tuple[str, str]:
    """``(key, words)`` of the training loss a head's configurations report.

    Two configurations' training losses can be compared only when they share the
    loss (:attr:`workbench.nets.activations.Head.loss`) and the units of the
    scaled target (:func:`workbench.data.preprocessing.target_scaling`): the
    identity head's standardised target and the relu, softplus and exp heads'
    target divided by its sd share the sd as unit; the regression logistic head's
    target is scaled to [0, 1].
    """
    from workbench.nets.activations import LOSS_LABELS, resolve_head

    h = resolve_head(head, task)
    words = LOSS_LABELS[h.loss]
    if task != "regression":
        return h.loss, words
    from workbench.data.preprocessing import target_scaling

    class _Target:  # target_scaling reads only the interval, for the logistic head
        interval = None

    mode = target_scaling(_Target(), h.name).mode
    unit = "interval" if mode == "interval" else "sd"
    suffix = {"sd": "target in sd units", "interval": "target scaled to [0, 1]"}[unit]
    return f"{h.loss}:{unit}", f"{words}, {suffix}"


# --------------------------------------------------------------------------- per trial


def _finite_curve(values) -> np.ndarray:
    return np.asarray([np.nan if v is None else float(v) for v in values or []], float)


@dataclass
class _Curve:
    """What one trial's training-loss curve says."""

    epochs: int
    first: float
    last: float
    lowest: float
    blown_up: bool
    flat: bool
    still_falling: bool
    tail_share: float


def _curve(loss, budget: int) -> _Curve | None:
    loss = _finite_curve(loss)
    if not len(loss):
        return None
    finite = loss[np.isfinite(loss)]
    if not len(finite):
        return _Curve(len(loss), math.nan, math.nan, math.nan, True, False, False, 0.0)
    first, last, lowest = float(finite[0]), float(finite[-1]), float(np.min(finite))
    # blown up: non-finite, or far above its lowest value after climbing back at least
    # half of its whole fall (a loss near zero that wobbles by a factor is not a blow-up)
    blown = (not np.all(np.isfinite(loss))) or (
        lowest > 0 and last >= BLOW_UP * lowest and last - lowest >= 0.5 * (first - lowest))
    fall = first - last
    flat = first > 0 and fall < FLAT_DROP * first
    n = len(finite)
    k = max(2, math.ceil(TAIL * n))
    share = 0.0
    if n > k and fall > 0:
        share = float((finite[-k - 1] - last) / fall)
    still = n >= budget and fall > 0 and share >= STILL_FALLING
    return _Curve(len(loss), first, last, lowest, bool(blown), bool(flat), bool(still), share)


def _majority(flags) -> bool:
    flags = list(flags)
    return bool(flags) and 2 * sum(bool(f) for f in flags) >= len(flags)


def _num(v, digits: int = 3) -> str:
    if v is None or not math.isfinite(v):
        return "n/a"
    if v != 0 and (abs(v) >= 1e4 or abs(v) < 1e-3):
        return f"{v:.{digits}g}"
    return f"{v:.{digits}f}"


# --------------------------------------------------------------------------- over-fitting


def _heldout_rise(train, heldout) -> tuple[bool, float, int] | None:
    """(rising while training falls, rise above the minimum, epoch of the minimum)."""
    h = _finite_curve(heldout)
    t = _finite_curve(train)
    if len(h) < 2 or not np.isfinite(h).any():
        return None
    m = int(np.nanargmin(h))
    low, last = float(h[m]), float(h[np.flatnonzero(np.isfinite(h))[-1]])
    rise = (last - low) / abs(low) if low != 0 else (math.inf if last > low else 0.0)
    t_fin = t[np.isfinite(t)]
    falling = len(t_fin) > m + 1 and float(t_fin[-1]) < float(t[m]) if m < len(t) else False
    return bool(rise >= HELDOUT_RISE and falling), float(rise), m + 1


def _val_drop(train, val) -> tuple[bool, float, int] | None:
    v = _finite_curve(val)
    t = _finite_curve(train)
    if len(v) < 2 or not np.isfinite(v).any():
        return None
    m = int(np.nanargmax(v))
    drop = float(v[m] - v[np.flatnonzero(np.isfinite(v))[-1]])
    t_fin = t[np.isfinite(t)]
    falling = len(t_fin) > m + 1 and float(t_fin[-1]) < float(t[m]) if m < len(t) else False
    return bool(drop >= VAL_DROP and falling), drop, m + 1


def _fixed_scale(metric: str | None) -> bool:
    if metric is None:
        return True
    from workbench.sweep.bayes import rope_kind

    return rope_kind(metric) == "fraction"


def _overfit(done: list[dict], metric: str | None) -> dict | None:
    """The over-fitting finding (or None) from the best evidence the trials recorded."""
    hists = [t.get("history") or {} for t in done]
    for key, words in (("test_loss", "the held-out fold's loss per epoch"),
                       ("val_loss", "the validation loss per epoch (early stopping's rows)")):
        found = [_heldout_rise(h.get("loss"), h.get(key)) for h in hists if h.get(key)]
        found = [f for f in found if f is not None]
        if found:
            if not _majority(f[0] for f in found):
                return None
            rise = float(np.median([f[1] for f in found]))
            at = int(np.median([f[2] for f in found]))
            return {"code": "overfit", "evidence": key, "text": (
                f"over-fits: the held-out loss was lowest at about epoch {at}, then rose "
                f"{rise:.0%} above that minimum while the training loss kept falling (from "
                f"{words}); a smaller network, a larger L2 strength (alpha) or early "
                "stopping usually helps.")}
    found = [_val_drop(h.get("loss"), h.get("val_score")) for h in hists if h.get("val_score")]
    found = [f for f in found if f is not None]
    if found:
        if not _majority(f[0] for f in found):
            return None
        drop = float(np.median([f[1] for f in found]))
        at = int(np.median([f[2] for f in found]))
        return {"code": "overfit", "evidence": "val_score", "text": (
            f"over-fits: the validation score peaked at about epoch {at} and ended {_num(drop)} "
            "below its peak while the training loss kept falling (from early stopping's "
            "validation score per epoch; the weights of the best epoch were kept); a smaller "
            "network or a larger L2 strength (alpha) usually helps.")}
    pairs = [(t["train_score"], t["test_score"]) for t in done
             if t.get("train_score") is not None and t.get("test_score") is not None
             and math.isfinite(t["train_score"]) and math.isfinite(t["test_score"])]
    if not pairs:
        return None
    gaps = [a - b for a, b in pairs]
    gap = float(np.mean(gaps))
    test = float(np.mean([b for _, b in pairs]))
    if _fixed_scale(metric):
        large, limit = gap >= GAP_FRACTION, f"{GAP_FRACTION:g}"
    else:
        large, limit = gap >= GAP_RELATIVE * abs(test), f"{GAP_RELATIVE:.0%} of the test score"
    if not large:
        return None
    return {"code": "overfit", "evidence": "gap", "text": (
        f"over-fits: the training score is {_num(gap)} above the test score (mean over folds; "
        f"at least {limit} counts as large). Judged from the train-test gap: no held-out "
        "curve per epoch was recorded. A smaller network, a larger L2 strength (alpha) or "
        "early stopping usually helps.")}


# --------------------------------------------------------------------------- output unit


def _output_finding(outputs, head: str, task: str, target_sd: float | None) -> dict | None:
    """Dead or constant output from the test rows' predictions of each trial."""
    if not outputs:
        return None
    from workbench.nets.activations import resolve_head

    h = resolve_head(head, task)
    if task == "regression" and math.isfinite(h.low):
        at_bound = [float(np.mean(np.asarray(p, float) <= h.low)) for _, p in outputs if len(p)]
        target_at = [float(np.mean(np.asarray(y, float) <= h.low)) for y, p in outputs if len(p)]
        if at_bound:
            share, tshare = float(np.mean(at_bound)), float(np.mean(target_at))
            if share > DEAD_OUTPUT_SHARE and tshare < share / 2:
                return {"code": "dead_output", "text": (
                    f"dead output: the {h.name} output sits at its lower bound {h.low:g} for "
                    f"{share:.0%} of the test rows (the target is there for {tshare:.0%}), so "
                    "the output unit passes no gradient and cannot recover; a head without a "
                    "flat part (softplus, or identity for a signed target) or a smaller "
                    "learning rate usually helps.")}
    spreads = []  # per trial: the predictions' spread as a share of its limit
    for _, p in outputs:
        p = np.asarray(p, float)
        if len(p) < 2:
            continue
        if p.ndim == 2:
            spreads.append(float(np.max(np.std(p, axis=0))) / CONSTANT_PROBABILITY)
        elif target_sd:
            spreads.append(float(np.std(p)) / target_sd / CONSTANT_SPREAD)
    if spreads and _majority(s < 1.0 for s in spreads):
        spread = float(np.median(spreads))
        if task == "classification":
            what = (f"the same class probabilities for every row of a fold (their sd is "
                    f"{spread * CONSTANT_PROBABILITY:.2g}, below {CONSTANT_PROBABILITY:g})")
        else:
            what = (f"nearly the same value for every row of a fold (spread "
                    f"{spread * CONSTANT_SPREAD:.2%} of the target's, below "
                    f"{CONSTANT_SPREAD:.0%})")
        return {"code": "constant_output", "text": (
            f"constant output: it predicts {what}, so it has learnt nothing beyond the "
            "average; look at the learning rate and the hidden layers' health.")}
    return None


# --------------------------------------------------------------------------- health


def _layer_shares(trials: list[dict], key: str) -> list[float]:
    """Mean over trials of each hidden layer's last-epoch share (NaN where unmeasured)."""
    rows = [(t.get("health") or {}).get(key) or [] for t in trials]
    n = max((len(r) for r in rows), default=0)
    out = []
    for k in range(n):
        vals = [float(r[k]) for r in rows if len(r) > k and r[k] is not None
                and math.isfinite(float(r[k]))]
        out.append(float(np.mean(vals)) if vals else math.nan)
    return out


def _layers(found) -> list[dict]:
    return [{"layer": int(k), "share": float(v)} for k, v in found]


def _health_findings(hidden: str, health: dict, threshold: float = WARN_SHARE) -> list[dict]:
    out = []
    remedies = ", ".join(DEAD_REMEDIES)
    dead = [(k, s) for k, s in enumerate(health.get("dead") or [], start=1)
            if s is not None and math.isfinite(s) and s >= threshold]
    if dead:
        parts = "; ".join(f"layer {k}: {s:.0%}{' (mostly dead)' if s > MOSTLY else ''}"
                          for k, s in dead)
        out.append({"code": "dead_units", "layers": _layers(dead), "text": (
            f"dead hidden units ({parts} of the units never switch on, so they pass no signal "
            f"and get no gradient); a leaky or smooth activation ({remedies}) or a smaller "
            "learning rate usually helps.")})
    sat = [(k, s) for k, s in enumerate(health.get("saturated") or [], start=1)
           if s is not None and math.isfinite(s) and s >= threshold]
    if sat:
        parts = "; ".join(f"layer {k}: {s:.0%}{' (mostly saturated)' if s > MOSTLY else ''}"
                          for k, s in sat)
        out.append({"code": "saturated_units", "layers": _layers(sat), "text": (
            f"saturated hidden units ({parts} of the units sit on the flat ends of {hidden}, "
            "so their gradients vanish); scaled inputs, a smaller learning rate or a "
            "non-saturating activation usually help.")})
    return out


def health_hints(label: str, hidden: str, health: dict) -> list[str]:
    """Sentences for the layers that are *mostly* (more than :data:`MOSTLY`) dead or saturated.

    Parameters
    ----------
    label : str
        How the configuration is named in the sentences.
    hidden : str
        Its hidden activation.
    health : dict
        ``{"dead": [share per hidden layer], "saturated": [...]}``; ``None``/NaN ignored.
    """
    out = []
    remedies = ", ".join(DEAD_REMEDIES)
    for k, share in enumerate(health.get("dead") or [], start=1):
        if share is not None and math.isfinite(share) and share > MOSTLY:
            out.append(f"{label}: layer {k} is mostly dead ({share:.0%} of its units never "
                       "switch on), so it passes little signal; a leaky or smooth activation "
                       f"({remedies}) or a smaller learning rate usually helps.")
    for k, share in enumerate(health.get("saturated") or [], start=1):
        if share is not None and math.isfinite(share) and share > MOSTLY:
            out.append(f"{label}: layer {k} is mostly saturated ({share:.0%} of its units sit "
                       f"on the flat ends of {hidden}), so its gradients vanish; scaled inputs, "
                       "a smaller learning rate or a non-saturating activation usually help.")
    return out


# --------------------------------------------------------------------------- one configuration


def diagnose(trials: list[dict], *, hidden: str, head: str, task: str, epochs: int,
             metric: str | None = None, outputs=None, target_sd: float | None = None,
             underfit: bool | None = None, reference_loss: float | None = None,
             fold_sd: float | None = None, typical_sd: float | None = None,
             rope: float | None = None, decision: str | None = None) -> dict:
    """The diagnosis of one configuration.

    Parameters
    ----------
    trials : list of dict
        Its stored trials (:meth:`workbench.sweep.store.Store.trials` with history):
        ``status``, ``history`` (``loss`` per epoch; ``test_loss``, ``val_loss``,
        ``val_score`` when recorded), ``health`` (last epoch's ``dead`` and
        ``saturated`` per hidden layer), ``train_score``, ``test_score``, ``error``.
    hidden, head, task : str
        Hidden activation, output head, "regression" or "classification".
    epochs : int
        The epoch budget (the plan's ``epochs``).
    metric : str, optional
        The sweep's metric (fixed-scale or error score, for the train-test gap).
    outputs : list of (actual, predicted), optional
        Per done trial its test rows' targets and predictions (values for a
        regressor, class probabilities for a classifier).
    target_sd : float, optional
        The target's standard deviation (regression; for the constant-output rule).
    underfit : bool, optional
        The results document's flag (training score below the linear baseline's).
    reference_loss : float, optional
        The lowest final training loss among comparable configurations.
    fold_sd, typical_sd, rope : float, optional
        This configuration's fold-score sd, the sweep's median, the ROPE.
    decision : str, optional
        Its decision against the best (``best``, ``equivalent``, ...): the best and
        its equivalents are never said to stop or stall at a high loss.

    Returns
    -------
    dict
        ``{"codes": [...], "text": "short labels", "findings": [{"code", "label",
        "text"}]}`` in :data:`CODES` order (dead and saturated units add ``layers``:
        ``[{"layer", "share"}]``); ``codes == ["normal"]`` when nothing is found.
    """
    findings: list[dict] = []
    stored = [t for t in trials if t.get("status") in ("done", "diverged", "failed")]
    if not stored:
        return _result([{"code": "pending", "text": "no trial of this configuration has "
                                                    "finished yet."}])
    failed = [t for t in stored if t.get("status") == "failed"]
    if failed:
        msg = next((t.get("error") for t in failed if t.get("error")), "")
        findings.append({"code": "failed", "text": (
            f"failed in {len(failed)} of {len(stored)} trials" + (f": {msg}" if msg else "")
            + ".")})
    runs = [t for t in stored if t.get("status") in ("done", "diverged")]
    curves = {id(t): _curve((t.get("history") or {}).get("loss"), epochs) for t in runs}
    blown = [t for t in runs if t.get("status") == "diverged"
             or (curves[id(t)] is not None and curves[id(t)].blown_up)]
    if blown:
        nonfinite = sum(1 for t in blown if t.get("status") == "diverged")
        how = ("its training loss became non-finite" if nonfinite == len(blown) else
               f"its training loss blew up (ended at least {BLOW_UP:g} times above its lowest"
               " value" + (", or became non-finite" if nonfinite else "") + ")")
        findings.append({"code": "diverged", "text": (
            f"diverged in {len(blown)} of {len(runs)} trials: {how}; a smaller learning rate "
            "usually helps.")})
    done = [t for t in stored if t.get("status") == "done"]
    good = [curves[id(t)] for t in done if curves.get(id(t)) is not None
            and not curves[id(t)].blown_up]
    out = _output_finding(outputs, head, task, target_sd)
    if out is not None:
        findings.append(out)
    final = float(np.median([c.last for c in good])) if good else None
    ratio = (final / reference_loss if final is not None and reference_loss
             and reference_loss > 0 else None)
    far = (ratio is not None and ratio >= HIGH_LOSS_RATIO
           and decision not in ("best", "equivalent"))
    high = bool(underfit) or far
    versus = f", {ratio:.1f} times the lowest comparable configuration's" if far else ""
    if good and not blown:
        # flat and no longer falling: stuck; flat but still falling: slow (underfit below)
        flat = _majority(c.flat and not c.still_falling for c in good)
        if flat and high:
            drop = float(np.median([(c.first - c.last) / c.first for c in good if c.first > 0]
                                   or [0.0]))
            findings.append({"code": "plateau", "text": (
                f"plateau: the training loss fell only {max(drop, 0.0):.0%} from the first "
                f"epoch to the last and stays high ({_num(final)}{versus}); the network is "
                "stuck: a higher learning rate, another hidden activation or scaled inputs "
                "may get it moving.")})
        stopped = _majority(c.epochs < epochs for c in good)
        if stopped and high and not flat:
            ran = float(np.median([c.epochs for c in good]))
            findings.append({"code": "stopped_early", "text": (
                f"stopped early at a high loss: training ended after about {ran:.0f} of "
                f"{epochs} epochs because the loss stopped improving, at {_num(final)}"
                f"{versus}; a higher learning rate or another hidden activation may get past "
                "where it stalled.")})
        still = _majority(c.still_falling for c in good)
        if underfit or still:
            why = []
            if underfit:
                why.append("its training score is below what the linear baseline scores on "
                           "rows it never saw")
            if still:
                share = float(np.median([c.tail_share for c in good]))
                why.append(f"the training loss was still falling at the last epoch (the last "
                           f"{TAIL:.0%} of the epochs brought {share:.0%} of the whole fall)")
            findings.append({"code": "underfit", "text": (
                f"underfit: {' and '.join(why)}; more epochs or a higher learning rate "
                "usually helps.")})
    if done and not blown and not high:  # a poor training score says nothing of over-fitting
        over = _overfit(done, metric)
        if over is not None:
            findings.append({"code": "overfit", "text": over["text"],
                             "evidence": over["evidence"]})
    health = {"dead": _layer_shares(done or runs, "dead"),
              "saturated": _layer_shares(done or runs, "saturated")}
    findings.extend(_health_findings(hidden, health))
    if (not blown and fold_sd is not None and typical_sd and math.isfinite(fold_sd)
            and fold_sd >= UNSTABLE_RATIO * typical_sd and fold_sd > (rope or 0.0)):
        findings.append({"code": "unstable", "text": (
            f"unstable across folds: the fold scores' sd is {_num(fold_sd)}, "
            f"{fold_sd / typical_sd:.1f} times the sweep's typical {_num(typical_sd)}; the "
            "result depends on the split or the starting weights: more repeats tell which.")})
    return _result(findings)


def _result(findings: list[dict]) -> dict:
    if not findings:
        findings = [{"code": "normal", "text": (
            "trains normally: the loss fell and flattened, and no dead or saturated layer, "
            "stuck output, over-fitting or unstable folds were found.")}]
    findings.sort(key=lambda f: CODES.index(f["code"]))
    for f in findings:
        f.setdefault("label", LABELS[f["code"]])
    codes = [f["code"] for f in findings]
    return {"codes": codes, "text": ", ".join(LABELS[c] for c in codes),
            "findings": findings}


# --------------------------------------------------------------------------- a results document


def _outputs(oof, j: int) -> list[tuple[np.ndarray, np.ndarray]]:
    """Per (repeat, fold) the test rows' targets and column ``j``'s finite predictions."""
    out = []
    for r, pred in enumerate(oof.predictions):
        folds = oof.folds[r]
        for f in np.unique(folds):
            rows = np.flatnonzero(folds == f)
            p = np.asarray(pred[rows, j], dtype=np.float64)
            ok = np.isfinite(p) if p.ndim == 1 else np.isfinite(p).all(axis=1)
            if ok.any():
                out.append((np.asarray(oof.y)[rows][ok], p[ok]))
    return out


def add_diagnoses(doc: dict, store) -> None:
    """Add ``diagnosis`` (:func:`diagnose`) to every configuration of a results document.

    Reads the trials' histories and the out-of-fold predictions from ``store``;
    the ``underfit`` flags, fold-score sds and ROPE from ``doc`` (so it runs after
    the judgement). Comparable losses: :func:`loss_kind`.
    """
    cfgs = doc["configurations"]
    plan = doc["plan"]
    task = doc["task"]
    by_cfg: dict[int, list[dict]] = {}
    for t in store.trials(doc["sweep_id"], with_history=True):
        by_cfg.setdefault(t["config_index"], []).append(t)
    indices = [c["index"] for c in cfgs]
    # the epoch budget; a plan that does not say (made by hand) is taken to have allowed the
    # most epochs any trial ran
    budget = plan.get("epochs") or max((t.get("epochs") or 0 for ts in by_cfg.values()
                                        for t in ts), default=0)
    budget = int(budget)
    oof = store.out_of_fold(doc["sweep_id"], configurations=indices) if indices else None
    target_sd = (float(np.std(oof.y)) if oof is not None and oof.classes is None
                 and len(oof.y) else None)
    finals: dict[int, float] = {}
    for c in cfgs:
        lasts = [cv.last for t in by_cfg.get(c["index"], []) if t["status"] == "done"
                 for cv in [_curve((t.get("history") or {}).get("loss"), budget)]
                 if cv is not None and not cv.blown_up]
        if lasts:
            finals[c["index"]] = float(np.median(lasts))
    kinds = {c["index"]: loss_kind(task, c["head"])[0] for c in cfgs}
    reference: dict[str, float] = {}
    for i, v in finals.items():
        reference[kinds[i]] = min(v, reference.get(kinds[i], math.inf))
    sds = [c["sd"] for c in cfgs if c["status"] == "done" and c.get("sd") is not None
           and math.isfinite(c["sd"])]
    typical = float(np.median(sds)) if len(sds) >= 3 else None
    for j, c in enumerate(cfgs):
        c["diagnosis"] = diagnose(
            by_cfg.get(c["index"], []), hidden=c["hidden"], head=c["head"], task=task,
            epochs=budget, metric=doc.get("metric"),
            outputs=_outputs(oof, j) if oof is not None else None, target_sd=target_sd,
            underfit=c.get("underfit"), reference_loss=reference.get(kinds[c["index"]]),
            fold_sd=c.get("sd") if c["status"] == "done" else None, typical_sd=typical,
            rope=doc.get("rope"), decision=c.get("decision"))
