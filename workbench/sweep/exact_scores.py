"""A trial's scores from predictions already made, equal to scikit-learn's scorers bit for bit.

A trial stores its test score, its training score and the test rows' predictions
(:mod:`workbench.sweep.trials`). scikit-learn's scorer (``get_scorer(metric)(model, X,
y)``) predicts the rows again and then validates the labels (``type_of_target``,
``numpy.unique`` and ``label_binarize`` of string labels), which on a small trial costs
more than the prediction itself: for ``roc_auc`` about 4 ms on 500 string labels and
7 ms on 2,000, against under a millisecond for the arithmetic.

:func:`trial_score` returns exactly what the scorer returns:

- for ``roc_auc`` on a binary classifier scored through ``predict_proba`` (no
  ``decision_function``), with both classes among the labels, every label one of the
  model's classes and finite probabilities, it computes scikit-learn's own arithmetic
  (:func:`binary_roc_auc`) from the probabilities, which the caller may pass when it has
  them (the out-of-fold predictions);
- in every other case it calls the scorer itself (so its errors, warnings and NaNs are
  the scorer's).

Reference: scikit-learn 1.9, ``sklearn.metrics.roc_auc_score`` for a binary target:
``roc_curve`` (``confusion_matrix_at_thresholds``: scores sorted in decreasing order,
one threshold per distinct score, true and false positives counted cumulatively in
float64; collinear points dropped where the second difference of both counts is 0; a
first point (0, 0); rates divided by the last counts) and ``auc`` (the trapezoidal rule,
``scipy.integrate.trapezoid``). The counts are whole numbers, exact in float64 whatever
the summation order, so the rates and the area are the same floating-point numbers.
``tests/test_exact_scores.py`` compares both with ``roc_auc_score`` and ``get_scorer``.
"""

from __future__ import annotations

import numpy as np

__all__ = ["binary_roc_auc", "trial_score"]


def binary_roc_auc(positive, score) -> float:
    """The area under the ROC curve of ``score`` for the 0/1 labels ``positive``, computed
    as ``sklearn.metrics.roc_auc_score`` computes it (see the module docstring).

    Parameters
    ----------
    positive : array of bool (n,)
        True for the positive class; both classes must be present.
    score : array of float (n,)
        Finite scores, greater for the positive class.
    """
    from scipy.integrate import trapezoid

    score = np.asarray(score).reshape(-1)
    positive = np.asarray(positive, dtype=bool).reshape(-1)
    # decreasing scores (scikit-learn sorts with mergesort; the order within a run of equal
    # scores changes no count below, since only each run's last row is read)
    order = np.argsort(score)[::-1]
    ranked = score[order]
    last = np.flatnonzero(np.diff(ranked))  # the last row of each run of equal scores
    thresholds = np.append(last, ranked.size - 1)
    tps = np.cumsum(positive[order], dtype=np.float64)[thresholds]
    fps = 1 + thresholds.astype(np.float64) - tps
    if fps.shape[0] > 2:  # drop the points collinear with their neighbours
        corner = np.logical_or(np.diff(fps, 2), np.diff(tps, 2))
        keep = np.flatnonzero(np.concatenate([[True], corner, [True]]))
        fps, tps = fps[keep], tps[keep]
    fps = np.concatenate([[0.0], fps])
    tps = np.concatenate([[0.0], tps])
    return float(trapezoid(tps / tps[-1], fps / fps[-1]))


def _binary_positive(model, y):
    """``y == classes_[1]`` when ``model`` is a two-class classifier, ``y`` holds both of
    its classes and nothing else; else None."""
    classes = getattr(model, "classes_", None)
    if classes is None or len(classes) != 2:
        return None
    y = np.asarray(y)
    if y.ndim != 1:
        return None
    positive = y == classes[1]
    negative = y == classes[0]
    if not isinstance(positive, np.ndarray) or positive.shape != y.shape:
        return None  # a comparison NumPy could not make element by element
    n_pos = int(np.count_nonzero(positive))
    if n_pos == 0 or n_pos == y.size or n_pos + int(np.count_nonzero(negative)) != y.size:
        return None
    return positive


def trial_score(metric: str, model, X, y, proba=None, scorer=None) -> float:
    """``get_scorer(metric)(model, X, y)``, bit for bit (see the module docstring).

    Parameters
    ----------
    metric : str
        A scikit-learn scorer name.
    model : fitted estimator
    X, y : the rows to score and their labels / targets
    proba : array, optional
        ``model.predict_proba(X)`` when the caller already has it (not recomputed).
    scorer : callable, optional
        ``get_scorer(metric)`` when the caller already has it (the one called when the
        fast path does not apply).
    """
    if metric == "roc_auc" and hasattr(model, "predict_proba") \
            and not hasattr(model, "decision_function"):
        positive = _binary_positive(model, y)
        if positive is not None:
            p = model.predict_proba(X) if proba is None else proba
            p = np.asarray(p)
            if p.ndim == 2 and p.shape == (positive.size, 2) and np.isfinite(p).all():
                return binary_roc_auc(positive, p[:, 1])
    if scorer is None:
        from sklearn.metrics import get_scorer

        scorer = get_scorer(metric)
    return float(scorer(model, X, y))
