"""The engine's shortcuts for small fits give the results of the general path, bit for bit.

Reference: the engine's own general path, forced on by a module constant (the gather that
casts each epoch's rows again, :data:`workbench.nets.engine.CAST_ONCE_BYTES` = 0), and
scikit-learn's shuffle order (``sklearn.utils.shuffle``); compared byte for byte on whole
sweep trials (scores, every history list, health, out-of-fold predictions), alone and in
lockstep stacks.
"""

from __future__ import annotations

import hashlib
import warnings
from pathlib import Path

import numpy as np
import pytest

from workbench.nets import engine as E
from workbench.sweep import trials as T
from workbench.sweep.plan import build_plan
from workbench.sweep.runner import load_data

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"
pytestmark = pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")


@pytest.mark.parametrize("rows_given", [False, True])
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_cast_once_epoch_rows_equal_the_gathered_rows(monkeypatch, rows_given, dtype):
    """Each epoch's rows taken from the copy cast once equal those gathered and cast every
    epoch (the general path) and scikit-learn's order: ``sklearn.utils.shuffle`` of the
    previous order, once per epoch; with and without row positions (early stopping)."""
    from sklearn.utils import shuffle as sk_shuffle

    rng = np.random.default_rng(2)
    X = rng.standard_normal((400, 6)) * 1e3
    rows = rng.permutation(400)[:300] if rows_given else None
    n = 300 if rows_given else 400
    y = rng.standard_normal((n, 2)).astype(dtype)
    def epochs(limit):  # the generator reads the constant when its first epoch is drawn
        monkeypatch.setattr(E, "CAST_ONCE_BYTES", limit)
        got = E._epoch_rows(X, rows, y, dtype, True, np.random.RandomState(11))
        out = []
        for _ in range(4):  # each epoch reuses the arrays: keep copies
            a, ya = next(got)
            assert a.dtype == dtype and a.flags.c_contiguous
            out.append((a.copy(), ya.copy()))
        return out

    fast, slow = epochs(2**30), epochs(0)
    ref = np.hstack([X.astype(dtype), np.ones((len(X), 1), dtype)])
    ref = ref if rows is None else ref[rows]
    rs, order = np.random.RandomState(11), np.arange(n)
    for (a, ya), (b, yb) in zip(fast, slow):
        order = sk_shuffle(order, random_state=rs)
        np.testing.assert_array_equal(a, ref[order])
        np.testing.assert_array_equal(a, b)
        np.testing.assert_array_equal(ya, y[order])
        np.testing.assert_array_equal(ya, yb)


def _specs(table, target, folds=3, **options):
    options.setdefault("layers", ["8"])
    plan = build_plan(SAMPLES / table, target, folds=folds, repeats=1, epochs=15, seed=0,
                      baselines=[], **options)
    data, _ = load_data(plan)
    split = plan.fold_indices(data.y)
    groups = []
    for c in plan.configurations():
        groups.append([{"config": c.to_dict(), "repeat": 0, "fold": f,
                        "train": split[(0, f)][0].astype(np.int32),
                        "test": split[(0, f)][1].astype(np.int32),
                        "random_state": plan.model_seed(0, f), "task": plan.task,
                        "metric": plan.metric, "epochs": plan.epochs,
                        "early_stopping": plan.early_stopping, "batch_size": plan.batch_size,
                        "dtype": plan.dtype} for f in range(folds)])
    return data, groups


def _record(res):
    """Everything a trial stores but its timing and worker."""
    pred = res["predictions"]
    return (res["status"], res["error"], res["test_score"], res["train_score"], res["epochs"],
            res["history"], res["health"],
            None if pred is None else hashlib.sha1(pred.tobytes()).hexdigest())


@pytest.mark.parametrize("table,target,options", [
    # the kiln grid's table (binary, ROC AUC), two activations
    ("kiln_batches.csv", "passes_inspection", {"hidden": "relu,logistic"}),
    # regression with early stopping (row positions into the fit's array)
    ("seed_germination.csv", "germinated_share", {"hidden": "tanh", "early_stopping": True}),
])
def test_sweep_trials_are_unchanged_by_the_cast_once_rows(monkeypatch, table, target, options):
    """Whole trials (preprocessing, fit with held-out curves and health, scores, out-of-fold
    predictions) alone and in lockstep stacks: every stored value is the same with the
    rows cast once as with the general path."""
    data, groups = _specs(table, target, **options)
    T._FOLD_CACHE.clear()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fast = [[_record(r) for r in T.run_trials(data, g)] for g in groups]
        alone = [[_record(T.run_trial(data, s)) for s in g] for g in groups]
        monkeypatch.setattr(E, "CAST_ONCE_BYTES", 0)
        slow = [[_record(r) for r in T.run_trials(data, g)] for g in groups]
    assert all(r[0] == "done" for g in fast for r in g)
    assert fast == slow
    assert fast == alone


def _objects(values):
    out = np.empty(len(values), dtype=object)
    out[:] = list(values)
    return out


@pytest.mark.parametrize("labels", [
    ["yes", "no", "no", "yes", "no"],
    ["b", "a", "c", "a", "c", "b", "b"],
    ["only", "only", "only"],
    ["Zebra", "apple", "Äpfel", "", "apple", "zebra", "10", "9"],
])
def test_text_classes_are_numpy_unique_and_keep_scikit_learns_kind(labels):
    """Reference: ``numpy.unique(y, return_inverse=True)`` and scikit-learn's
    ``type_of_target`` on every row, for object arrays of text labels (two classes,
    several, one, mixed case, non-ASCII, empty and digit strings)."""
    from sklearn.utils.multiclass import type_of_target

    y = _objects(labels)
    classes, codes = E._text_classes(y)
    want_classes, want_codes = np.unique(y, return_inverse=True)
    assert classes.dtype == object and classes.tolist() == want_classes.tolist()
    np.testing.assert_array_equal(codes, want_codes.reshape(-1))
    assert type_of_target(classes) == type_of_target(y)


def test_text_classes_leave_other_arrays_to_numpy():
    """Anything but a 1-D object array of Python strings takes ``numpy.unique``'s path."""
    assert E._text_classes(np.array(["a", "b"])) is None  # fixed-width strings
    assert E._text_classes(_objects(["a", 1])) is None  # mixed
    assert E._text_classes(_objects([np.str_("a"), np.str_("b")])) is None
    assert E._text_classes(_objects([])) is None
    assert E._text_classes(np.array([0, 1, 1])) is None


def test_a_classifier_fits_text_labels_as_before():
    """The same fit (classes, loss curve, parameters, probabilities, bit for bit) whether the
    labels come as Python strings in an object array (the shortcut) or as NumPy strings
    (``numpy.unique``'s path)."""
    rng = np.random.default_rng(4)
    X = rng.standard_normal((160, 3))
    words = np.array(["high", "low", "mid"])[(X[:, 0] > 0).astype(int) + (X[:, 1] > 1)]
    fits = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for y in (words, _objects(words.tolist())):
            fits.append(E.NetClassifier((6,), "tanh", max_iter=8, random_state=3).fit(X, y))
    a, b = fits
    assert a.classes_.tolist() == b.classes_.tolist() == ["high", "low", "mid"]
    assert a.loss_curve_ == b.loss_curve_
    for u, v in zip(a.coefs_ + a.intercepts_, b.coefs_ + b.intercepts_):
        np.testing.assert_array_equal(u, v)
    np.testing.assert_array_equal(a.predict_proba(X), b.predict_proba(X))
    assert b.predict(X).tolist() == a.predict(X).tolist()


def test_stack_into_is_numpy_stack_in_a_kept_array():
    """Reference: ``numpy.stack``. The lockstep's epoch inputs are copied into an array kept
    from one round to the next (the same array object while the shape holds), with
    ``numpy.stack``'s values and its refusal of unequal shapes."""
    from workbench.nets.stacked import _stack_into

    rng = np.random.default_rng(5)
    kept = [None, None]
    first = [rng.standard_normal((7, 3)).astype(np.float32) for _ in range(4)]
    a = _stack_into(kept, 0, first)
    np.testing.assert_array_equal(a, np.stack(first))
    second = [rng.standard_normal((7, 3)).astype(np.float32) for _ in range(4)]
    b = _stack_into(kept, 0, second)
    assert b is a and b.dtype == np.float32
    np.testing.assert_array_equal(b, np.stack(second))
    wider = [rng.standard_normal((7, 4)) for _ in range(4)]
    np.testing.assert_array_equal(_stack_into(kept, 0, wider), np.stack(wider))
    assert kept[0].shape == (4, 7, 4) and kept[1] is None
    with pytest.raises(ValueError):
        _stack_into(kept, 1, [np.zeros((7, 3)), np.zeros((7, 1))])  # broadcasting would accept it
