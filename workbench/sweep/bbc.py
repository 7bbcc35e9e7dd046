"""Bootstrap bias-corrected cross-validation (BBC-CV): the winner's honest score.

The best configuration's mean cross-validated score is optimistic: it is the
maximum of many noisy estimates, so on a table where nothing can be learnt
the best of a grid still scores above chance (Varma & Simon 2006; Cawley &
Talbot 2010). BBC-CV (Tsamardinos, Greasidou & Borboudakis 2018, Algorithm
1) estimates the score of *the whole procedure* "run the grid, keep the best"
from the out-of-fold predictions the cross-validation already made, without
refitting anything:

1. Draw a bootstrap sample of the N rows (N draws with replacement); the rows
   never drawn are *out of bag*.
2. On the in-bag rows (each row weighted by how often it was drawn) score
   every configuration as the cross-validation does -- per test fold, then
   averaged over the K x R folds -- and select the configuration with the
   best score (the first on ties).
3. Score that selected configuration on the out-of-bag rows, again per fold
   and averaged.

Repeated B times, the out-of-bag scores give the bias-corrected estimate and,
their 2.5 % and 97.5 % percentiles (``numpy.percentile``, linear
interpolation), the 95 % interval, as in the paper (section 4).

Choices made here, where the paper leaves room:

- **The median of the out-of-bag scores is the estimate** (the paper takes
  their mean, kept here as ``BBCResult.oob_mean``). An error score is
  unbounded below, so a few samples whose selected configuration diverges on
  out-of-bag rows can drag the mean anywhere: on a pure-noise regression table
  the mean was -392.9 while the 95 % percentile interval ran from -40.2 to
  -0.25 -- a point estimate outside its own interval. The median is the 50th
  percentile of the same scores, so it always lies inside the interval, and
  for well-behaved scores it agrees with the mean within the Monte-Carlo error
  (the tests check both).

- **Per fold, then averaged.** The paper scores the pooled predictions of all
  folds at once. Here a score is computed on each test fold's rows and the
  fold scores are averaged, as the sweep's own cross-validated mean is, so
  that with a single configuration the estimate is close to the sweep's mean
  score (for a metric such as ROC AUC the pooled and the averaged scores
  differ).
- **Repeats share the bootstrap.** With R repeats of K-fold the same N rows
  are out of fold once per repeat; one bootstrap draw of rows serves every
  repeat, and a configuration's in-bag (out-of-bag) score is the mean of its
  K x R fold scores on the in-bag (out-of-bag) rows -- the sweep's selection
  rule, applied to the sample.
- **Undefined fold scores** (an out-of-bag part of a fold with no row, or
  with one class only for ROC AUC, or a constant target for R²) are left out
  of that bootstrap's average over folds; a bootstrap with no defined fold
  score is left out (``n_used`` counts those kept). Whether a fold score is
  defined depends only on the weights and the target, never on the
  configuration, so the selection always compares like with like.
- **Weighted scores** are the scikit-learn scores with ``sample_weight`` equal
  to the draw counts (the tests check each against scikit-learn).
- **Draws.** ``numpy.random.default_rng(seed).integers(0, N, size=(B, N))``,
  row ``b`` the B-th sample's row indices; so a given seed gives the same
  samples on every machine.

Metrics (scikit-learn scorer names, greater is better; :data:`SUPPORTED`):
``accuracy``, ``balanced_accuracy``, ``roc_auc`` (binary), ``neg_log_loss``
for classifiers; ``r2``, ``neg_mean_squared_error``,
``neg_root_mean_squared_error``, ``neg_mean_absolute_error``,
``neg_mean_poisson_deviance`` for regressors.

Speed. Every metric except ROC AUC is a sum of per-row terms (or, for R² and
balanced accuracy, a ratio of such sums), so the scores of all B samples and
C configurations on a fold are one matrix product of the (B x n_fold) weights
with the (n_fold x C) per-row terms. ROC AUC is the weighted Mann-Whitney
statistic: for each configuration the negatives' weights are cumulated in
score order and read off at each positive (ties count one half), which costs
O(B x n_fold) per configuration and fold, the slowest of the metrics. Large
temporary arrays are avoided (fresh ones of tens of MB cost more in page
faults than the arithmetic).

Interface
---------
:func:`bbc_cv` (y, predictions, folds, metric, columns=None, n_boot=1000,
level=0.95, seed=0) -> :class:`BBCResult` (or the same through
:class:`OutOfFold`, which holds y, predictions, folds and metric together,
with ``OutOfFold.bbc(columns, n_boot, level, seed)``); ``BBCResult.to_dict()`` gives
``{estimate, low, high, method, level, n_boot, n_used}`` for the results
document (``corrected_best``). :func:`supports` says whether a metric can be
corrected.

References
----------
- Tsamardinos, I., Greasidou, E. & Borboudakis, G. (2018). Bootstrapping the
  out-of-sample predictions for efficient and accurate cross-validation.
  Machine Learning 107(12), 1895-1922 (the BBC-CV method).
- Varma, S. & Simon, R. (2006). Bias in error estimation when using
  cross-validation for model selection. BMC Bioinformatics 7, 91.
- Cawley, G. C. & Talbot, N. L. C. (2010). On over-fitting in model selection
  and subsequent selection bias in performance evaluation. JMLR 11, 2079-2107.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from threadpoolctl import threadpool_limits

#: the scikit-learn scorer names BBC-CV can score from stored predictions
SUPPORTED = ("accuracy", "balanced_accuracy", "roc_auc", "neg_log_loss", "r2",
             "neg_mean_squared_error", "neg_root_mean_squared_error",
             "neg_mean_absolute_error", "neg_mean_poisson_deviance")

_CLASSIFICATION = {"accuracy", "balanced_accuracy", "roc_auc", "neg_log_loss"}

#: elements of the ROC AUC's working array (16 MB in float32; larger ones run slower,
#: out of cache)
_CHUNK_ELEMENTS = 4_000_000

#: running sums over rows at least this wide use a row loop (vectorised along the
#: row), narrower ones numpy.cumsum (fewer Python steps)
_LOOP_MIN_WIDTH = 2048

#: float32 holds every integer below 2**24, so sums of draw counts and half-counts
#: stay exact while twice the largest possible sum is below this
_EXACT32_LIMIT = 2.0 ** 23


def supports(metric: str) -> bool:
    """Whether :func:`bbc_cv` can score ``metric`` (a scikit-learn scorer name)."""
    return metric in SUPPORTED


@dataclass(frozen=True)
class BBCResult:
    """The outcome of :func:`bbc_cv`.

    Attributes
    ----------
    estimate : float
        Median out-of-bag score of the configuration selected in-bag: the
        selection-corrected estimate of the best configuration's score (the
        median, not the paper's mean: see the module docstring).
    low, high : float
        Percentile interval of the out-of-bag scores at ``level``.
    level : float
        Coverage of the interval (0.95).
    n_boot : int
        Bootstrap samples drawn.
    n_used : int
        Samples with a defined out-of-bag score (the others are left out).
    oob_scores : ndarray of shape (n_boot,)
        Out-of-bag score of each sample (NaN where undefined).
    selected : ndarray of shape (n_boot,)
        The column (index into the predictions' configuration axis) selected
        on each sample's in-bag rows; -1 where undefined.
    columns : ndarray
        The configuration columns taken part, in the order given.
    cv_means : ndarray of shape (len(columns),)
        Each column's plain cross-validated score on all rows (mean of its
        K x R fold scores), in ``columns`` order.
    method : str
        ``"BBC-CV"``.
    """

    estimate: float
    low: float
    high: float
    level: float
    n_boot: int
    n_used: int
    oob_scores: np.ndarray
    selected: np.ndarray
    columns: np.ndarray
    cv_means: np.ndarray
    method: str = "BBC-CV"
    #: the paper's estimate, the mean of the out-of-bag scores (for reference)
    oob_mean: float = float("nan")

    @property
    def best_column(self) -> int:
        """The column with the best plain cross-validated score."""
        return int(self.columns[int(np.argmax(self.cv_means))])

    def to_dict(self) -> dict:
        """``{estimate, low, high, method, level, n_boot, n_used}``, JSON-able."""
        return {"estimate": self.estimate, "low": self.low, "high": self.high,
                "method": self.method, "level": self.level, "n_boot": self.n_boot,
                "n_used": self.n_used}


@dataclass(frozen=True)
class OutOfFold:
    """A sweep's stored out-of-fold predictions: the inputs of :func:`bbc_cv` in one place.

    Attributes
    ----------
    y : ndarray of shape (N,)
        True target (class codes 0..k-1 for classifiers).
    predictions : list of ndarray
        Per repeat, (N, C) values or (N, C, k) probabilities; column c is the
        c-th configuration in the caller's order.
    folds : list of ndarray
        Per repeat, the test fold of each row.
    metric : str
        scikit-learn scorer name (one of :data:`SUPPORTED`).
    """

    y: np.ndarray
    predictions: list
    folds: list
    metric: str

    def bbc(self, columns=None, *, n_boot: int = 1000, level: float = 0.95,
            seed: int = 0) -> BBCResult:
        """:func:`bbc_cv` over these predictions, restricted to ``columns``."""
        return bbc_cv(self.y, self.predictions, self.folds, self.metric, columns=columns,
                      n_boot=n_boot, level=level, seed=seed)


def bootstrap_counts(n_rows: int, n_boot: int, seed: int) -> np.ndarray:
    """How often each row is drawn in each bootstrap sample, shape (n_rows, n_boot).

    The samples are ``default_rng(seed).integers(0, n_rows, size=(n_boot, n_rows))``
    (row ``b`` the indices of sample ``b``); the counts are returned transposed
    (rows first) as float32, the layout the scoring uses.
    """
    rng = np.random.default_rng(seed)
    idx = rng.integers(0, n_rows, size=(n_boot, n_rows), dtype=np.int64)
    counts = np.empty((n_rows, n_boot), dtype=np.float32)
    for b in range(n_boot):  # one sample at a time: no large temporaries
        counts[:, b] = np.bincount(idx[b], minlength=n_rows)
    return counts


# --------------------------------------------------------------------------- folds
class _Fold:
    """One test fold of one repeat: its rows and the per-row terms of the metric."""

    def __init__(self, metric: str, rows: np.ndarray, y: np.ndarray, pred: np.ndarray):
        self.metric = metric
        self.rows = rows
        y = y[rows]
        pred = pred[rows]  # (n_f, C) or (n_f, C, k)
        if metric in ("accuracy", "balanced_accuracy"):
            labels = pred.argmax(axis=2) if pred.ndim == 3 else pred
            self.terms = (labels == y[:, None]).astype(float)
            if metric == "balanced_accuracy":
                classes = np.unique(y)
                self.class_masks = (y[:, None] == classes[None, :]).astype(float)  # (n_f, k)
                self.class_of = np.searchsorted(classes, y)
        elif metric == "neg_log_loss":
            # in float64, clipped to [eps, 1 - eps] as scikit-learn's log_loss does
            # for float64 probabilities (the sweep scored the models' float64 output)
            eps = np.finfo(np.float64).eps
            p_true = np.take_along_axis(pred, y[:, None, None].astype(np.intp), axis=2)[:, :, 0]
            self.terms = -np.log(np.clip(p_true.astype(np.float64), eps, 1 - eps))
        elif metric == "roc_auc":
            score = pred[:, :, 1] if pred.ndim == 3 else pred
            self.score = np.asarray(score, dtype=float)
            self.pos = np.flatnonzero(y == 1)
            self.neg = np.flatnonzero(y != 1)
        else:
            p = np.asarray(pred, dtype=float)
            yy = y.astype(float)[:, None]
            if metric in ("r2", "neg_mean_squared_error", "neg_root_mean_squared_error"):
                self.terms = (yy - p) ** 2
            elif metric == "neg_mean_absolute_error":
                self.terms = np.abs(yy - p)
            elif metric == "neg_mean_poisson_deviance":
                ylogy = np.where(yy > 0, yy * np.log(np.where(yy > 0, yy, 1.0) / p), 0.0)
                self.terms = 2.0 * (ylogy - yy + p)
            if metric == "r2":
                yc = y.astype(float) - y.astype(float).mean()  # centred: no cancellation
                self.yc = yc

    def scores(self, w: np.ndarray, cols: np.ndarray) -> np.ndarray:
        """Fold scores, shape (B', len(cols)), for weights ``w`` (n_f, B') of its rows.

        NaN where the score is undefined for a sample (see the module docstring).
        """
        m = self.metric
        if m == "roc_auc":
            return self._auc(w, cols)
        wf = w.astype(np.float64)  # (n_f, B'); the products below in float64
        wsum = wf.sum(axis=0)  # (B',)
        with np.errstate(invalid="ignore", divide="ignore"):
            if m == "balanced_accuracy":
                support = self.class_masks.T @ wf  # (k, B')
                n_k = support.shape[0]
                # correct predictions per class, all classes in one product: (B', k * c)
                per_class = (self.class_masks[:, :, None] * self.terms[:, None, cols])
                hit = (wf.T @ per_class.reshape(len(self.class_of), -1)).reshape(
                    w.shape[1], n_k, cols.size)
                recall = hit / support.T[:, :, None]
                out = np.where(support.T[:, :, None] > 0, recall, 0.0).sum(axis=1)
                present = (support > 0).sum(axis=0).astype(float)
                return out / present[:, None]
            total = wf.T @ self.terms[:, cols]  # (B', c)
            mean = total / wsum[:, None]
            if m in ("accuracy",):
                return mean
            if m in ("neg_log_loss", "neg_mean_squared_error", "neg_mean_absolute_error",
                     "neg_mean_poisson_deviance"):
                return -mean
            if m == "neg_root_mean_squared_error":
                return -np.sqrt(mean)
            if m == "r2":
                s1 = self.yc @ wf
                sst = (self.yc ** 2) @ wf - s1 ** 2 / wsum
                sst = np.where(sst > 1e-12 * ((self.yc ** 2) @ wf), sst, np.nan)
                return 1.0 - total / sst[:, None]
        raise ValueError(f"unsupported metric {m!r}")

    def _auc(self, w: np.ndarray, cols: np.ndarray) -> np.ndarray:
        """Weighted ROC AUC: the Mann-Whitney statistic with ties counted one half.

        For each configuration the negatives' weights are cumulated in score
        order; a positive's credit is the weight of the negatives below its
        score plus half of those tied with it. Configurations are handled in
        chunks stacked beside the samples, so that the cumulative sum runs
        over long rows.
        """
        wp = w[self.pos]  # (n_pos, B')
        wn = w[self.neg]  # (n_neg, B')
        n_pos, n_neg, n_b = self.pos.size, self.neg.size, w.shape[1]
        w_pos = wp.sum(axis=0, dtype=float)
        w_neg = wn.sum(axis=0, dtype=float)
        out = np.empty((n_b, cols.size))
        if n_pos == 0 or n_neg == 0:
            out.fill(np.nan)
            return out
        # integer (draw-count) weights: float32 sums are exact below 2**23
        exact32 = float((w_pos * w_neg).max()) * 2.0 < _EXACT32_LIMIT and \
            bool(np.all(w == np.floor(w)))
        acc = np.float32 if exact32 else np.float64
        if not exact32:
            wn = wn.astype(np.float64)
            wp = wp.astype(np.float64)
        wn_pad = np.vstack([np.zeros((1, n_b), dtype=wn.dtype), wn])
        score_pos = self.score[self.pos]
        score_neg = self.score[self.neg]
        chunk = max(1, min(cols.size, _CHUNK_ELEMENTS // max(1, (n_neg + 1) * n_b)))
        # working arrays reused across chunks (fresh ones cost page faults)
        cum_buf = np.empty(((n_neg + 1) * chunk, n_b), dtype=wn.dtype)
        credit_buf = np.empty((n_pos * chunk, n_b), dtype=wn.dtype)
        extra_buf = None
        for start in range(0, cols.size, chunk):
            cc = cols[start:start + chunk]
            q = cc.size
            s_neg = score_neg[:, cc]
            order = np.argsort(s_neg, axis=0, kind="stable")  # (n_neg, q)
            sorted_neg = np.take_along_axis(s_neg, order, axis=0)
            s_pos = score_pos[:, cc]
            lo = np.empty((n_pos, q), dtype=np.intp)
            hi = np.empty((n_pos, q), dtype=np.intp)
            for j in range(q):
                lo[:, j] = np.searchsorted(sorted_neg[:, j], s_pos[:, j], side="left")
                hi[:, j] = np.searchsorted(sorted_neg[:, j], s_pos[:, j], side="right")
            # row i * q + j of cum: negative weights of column j in score order, row 0
            # (from the zero row of wn_pad) standing for "no negative below"
            gather = np.vstack([np.zeros((1, q), dtype=np.intp), order + 1]).ravel()
            cum = cum_buf[:gather.size]
            np.take(wn_pad, gather, axis=0, out=cum, mode="clip")
            if q * n_b >= _LOOP_MIN_WIDTH:
                rows = cum.reshape(n_neg + 1, q * n_b)
                for i in range(1, n_neg + 1):  # long rows: the running sum is vectorised
                    np.add(rows[i - 1], rows[i], out=rows[i])
            else:
                cum3 = cum.reshape(n_neg + 1, q, n_b)
                np.cumsum(cum3, axis=0, out=cum3)
            qi = np.arange(q)[None, :]
            credit = credit_buf[:n_pos * q]
            np.take(cum, (lo * q + qi).ravel(), axis=0, out=credit, mode="clip")
            half = 1.0
            if not np.array_equal(lo, hi):  # ties between a positive and negatives
                if extra_buf is None:
                    extra_buf = np.empty_like(credit_buf)
                extra = extra_buf[:n_pos * q]
                np.take(cum, (hi * q + qi).ravel(), axis=0, out=extra, mode="clip")
                credit += extra
                half = 0.5
            num = np.einsum("pqb,pb->bq", credit.reshape(n_pos, q, n_b), wp, dtype=acc)
            out[:, start:start + q] = half * num.astype(float)
        with np.errstate(invalid="ignore", divide="ignore"):
            denom = w_pos * w_neg
            return np.where(denom[:, None] > 0, out / denom[:, None], np.nan)


# --------------------------------------------------------------------------- inputs
def _as_repeats(y, predictions, folds, metric):
    y = np.asarray(y)
    if isinstance(predictions, np.ndarray) and predictions.ndim in (2, 3) and \
            np.asarray(folds).ndim == 1:
        predictions, folds = [predictions], [folds]
    preds = [np.asarray(p) for p in predictions]
    fold_ids = [np.asarray(f) for f in folds]
    if len(preds) != len(fold_ids) or not preds:
        raise ValueError("one prediction array and one fold assignment per repeat are needed")
    n = y.shape[0]
    n_cols = preds[0].shape[1] if preds[0].ndim >= 2 else 0
    for p, f in zip(preds, fold_ids):
        if p.shape[0] != n or f.shape != (n,):
            raise ValueError(f"predictions and folds must have one row per target row ({n})")
        if p.ndim < 2 or p.shape[1] != n_cols or p.shape[1:] != preds[0].shape[1:]:
            raise ValueError("every repeat needs the same configurations and shape")
    if metric in _CLASSIFICATION:
        if not np.issubdtype(y.dtype, np.integer) or y.min() < 0:
            raise ValueError("for a classifier, y must hold class codes 0..k-1 (the "
                             "probability columns' order)")
        if metric == "neg_log_loss" and preds[0].ndim != 3:
            raise ValueError("neg_log_loss needs probabilities of shape (N, C, n_classes)")
        if metric == "roc_auc" and (y.max() > 1):
            raise ValueError("roc_auc here is for a binary target (codes 0 and 1)")
    elif preds[0].ndim != 2:
        raise ValueError(f"{metric} needs one prediction per row and configuration (N, C)")
    if metric == "neg_mean_poisson_deviance" and (np.any(y < 0) or any(np.any(p <= 0)
                                                                       for p in preds)):
        raise ValueError("the Poisson deviance needs y >= 0 and predictions > 0")
    return y, preds, fold_ids


def _cv_scores(folds_: list[_Fold], w_all: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """Mean over the K x R folds of the fold scores, shape (B', len(cols)).

    NaN fold scores are left out of the mean; NaN when none is defined.
    """
    total = np.zeros((w_all.shape[1], cols.size))
    count = np.zeros((w_all.shape[1], 1))
    for fold in folds_:
        s = fold.scores(w_all[fold.rows], cols)
        ok = np.isfinite(s)
        total += np.where(ok, s, 0.0)
        count += ok[:, :1]
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count > 0, total / np.maximum(count, 1), np.nan)


def bbc_cv(y, predictions, folds, metric: str, *, columns=None, n_boot: int = 1000,
           level: float = 0.95, seed: int = 0) -> BBCResult:
    """Bootstrap bias-corrected CV estimate of the best configuration's score.

    Parameters
    ----------
    y : array-like of shape (N,)
        The true target; for classifiers the class codes 0..k-1 in the order
        of the probability columns (for ``roc_auc``, 1 is the positive class).
    predictions : array (N, C) / (N, C, k), or a list of them (one per repeat)
        Out-of-fold predictions of C configurations: values for regressors,
        class probabilities for classifiers (for ``accuracy`` and
        ``balanced_accuracy`` class codes (N, C) also do; for ``roc_auc`` the
        positive class's probability (N, C) also does). float32 is fine.
    folds : array (N,) or a list of them (one per repeat)
        The test fold of each row in that repeat (any integer labels).
    metric : str
        One of :data:`SUPPORTED` (scikit-learn scorer names, greater is better).
    columns : sequence of int, optional
        The configurations (columns) taking part -- e.g. one candidate's
        settings; default all. Only these need finite predictions.
    n_boot : int
        Bootstrap samples B.
    level : float
        Coverage of the percentile interval.
    seed : int
        Seed of the draws (see :func:`bootstrap_counts`).

    Returns
    -------
    BBCResult
    """
    # The matrix products here are thin (samples x fold rows x configurations); a second
    # BLAS thread gains little and, on a machine busy with a sweep, slowed the whole
    # computation about fourfold (measured: balanced accuracy, 10,000 rows x 50 x 1,000).
    with threadpool_limits(limits=1, user_api="blas"):
        return _bbc_cv(y, predictions, folds, metric, columns=columns, n_boot=n_boot,
                       level=level, seed=seed)


def _bbc_cv(y, predictions, folds, metric: str, *, columns=None, n_boot: int = 1000,
            level: float = 0.95, seed: int = 0) -> BBCResult:
    """The body of :func:`bbc_cv` (which limits the BLAS threads)."""
    if not supports(metric):
        raise ValueError(f"BBC-CV cannot score {metric!r}; supported: {', '.join(SUPPORTED)}")
    if int(n_boot) < 1 or not 0 < level < 1:
        raise ValueError("n_boot must be >= 1 and level in (0, 1)")
    y, preds, fold_ids = _as_repeats(y, predictions, folds, metric)
    n_cols = preds[0].shape[1]
    cols = np.arange(n_cols) if columns is None else np.asarray(columns, dtype=np.intp)
    if cols.size == 0 or cols.min() < 0 or cols.max() >= n_cols:
        raise ValueError(f"columns must name configurations 0..{n_cols - 1}")
    if columns is not None:
        preds = [p[:, cols] for p in preds]  # only these take part (others may be NaN)
    for p in preds:
        if not np.all(np.isfinite(p)):
            raise ValueError("out-of-fold predictions must be finite")
    local = np.arange(cols.size)
    folds_ = [_Fold(metric, np.flatnonzero(f == k), y, p)
              for p, f in zip(preds, fold_ids) for k in np.unique(f)]
    n = y.shape[0]
    ones = np.ones((n, 1), dtype=np.float32)
    cv_means = _cv_scores(folds_, ones, local)[0]

    w_in = bootstrap_counts(n, int(n_boot), seed)  # (N, B)
    in_bag = _cv_scores(folds_, w_in, local)  # (B, c)
    defined = np.isfinite(in_bag).all(axis=1)
    pick = np.where(defined, np.argmax(np.where(np.isfinite(in_bag), in_bag, -np.inf), axis=1),
                    -1)
    w_out = (w_in == 0).astype(np.float32)
    del w_in
    oob = np.full(int(n_boot), np.nan)
    for j in np.unique(pick[pick >= 0]):
        bs = np.flatnonzero(pick == j)
        oob[bs] = _cv_scores(folds_, np.ascontiguousarray(w_out[:, bs]), local[j:j + 1])[:, 0]
    selected = np.where(pick >= 0, cols[np.maximum(pick, 0)], -1)
    ok = np.isfinite(oob)
    if ok.any():
        est, low, high = (float(v) for v in np.percentile(
            oob[ok], [50.0, 50 * (1 - level), 50 * (1 + level)]))
        mean = float(oob[ok].mean())
    else:
        est = low = high = mean = float("nan")
    return BBCResult(estimate=est, low=low, high=high, level=float(level), n_boot=int(n_boot),
                     n_used=int(ok.sum()), oob_scores=oob, selected=selected, columns=cols,
                     cv_means=cv_means, oob_mean=mean)
