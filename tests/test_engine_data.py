"""The engine on real data that ships inside scikit-learn.

Sources: ``sklearn.datasets.load_breast_cancer`` (Street, Wolberg & Mangasarian 1993,
569 rows, 30 features, binary) and ``sklearn.datasets.load_diabetes`` (Efron, Hastie,
Johnstone & Tibshirani 2004, 442 rows, 10 features, target 25-346); scores by
``sklearn.model_selection.cross_val_score`` with plain 5-fold splits; reference model
``sklearn.neural_network.MLPClassifier`` in the same setting. Thresholds are those of
issue 2 (breast cancer >= 0.95 accuracy; diabetes R^2 >= 0.38, where scikit-learn's own
MLP measures 0.41-0.48 and ordinary least squares 0.49).
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.compose import TransformedTargetRegressor
from sklearn.datasets import load_breast_cancer, load_diabetes
from sklearn.model_selection import cross_val_score, cross_validate
from sklearn.neural_network import MLPClassifier
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from workbench.nets.engine import NetClassifier, NetRegressor

pytestmark = pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")


def test_breast_cancer_relu_logistic_head():
    """ReLU hidden layer + logistic head + log-loss: mean 5-fold accuracy >= 0.95, and not
    worse than scikit-learn's MLPClassifier in the same setting by more than 0.02."""
    X, y = load_breast_cancer(return_X_y=True)
    ours = make_pipeline(StandardScaler(), NetClassifier((16,), "relu", output_activation="logistic",
                                                         max_iter=200, random_state=0))
    acc = cross_val_score(ours, X, y, cv=5, scoring="accuracy")
    ref = make_pipeline(StandardScaler(), MLPClassifier(hidden_layer_sizes=(16,), activation="relu",
                                                        max_iter=200, random_state=0))
    acc_ref = cross_val_score(ref, X, y, cv=5, scoring="accuracy")
    assert acc.mean() >= 0.95, acc
    assert acc.mean() >= acc_ref.mean() - 0.02, (acc.mean(), acc_ref.mean())


def test_diabetes_relu_head_scale_only_target():
    """Non-negative target (25-346) with a relu head: the target is divided by its scale but
    not centred (StandardScaler(with_mean=False) inside TransformedTargetRegressor, fitted per
    fold, so the target stays >= 0 for the head), early stopping, 16 hidden units:
    mean 5-fold R^2 >= 0.38."""
    X, y = load_diabetes(return_X_y=True)
    assert y.min() == 25 and y.max() == 346
    net = NetRegressor((16,), "relu", output_activation="relu", early_stopping=True,
                       learning_rate_init=0.01, n_iter_no_change=20, max_iter=1000,
                       random_state=0)
    model = TransformedTargetRegressor(make_pipeline(StandardScaler(), net),
                                       transformer=StandardScaler(with_mean=False))
    res = cross_validate(model, X, y, cv=5, scoring="r2", return_estimator=True)
    assert res["test_score"].mean() >= 0.38, res["test_score"]
    fitted = res["estimator"][0]
    inner = fitted.regressor_[-1]
    assert inner.out_activation_ == "relu"
    assert inner.validation_scores_ and not inner.diverged_
    assert inner.n_iter_ < 1000  # early stopping, not the iteration cap, ended training
    # the scale-only transform keeps the training target non-negative
    scaled = fitted.transformer_.transform(y.reshape(-1, 1)).ravel()
    np.testing.assert_allclose(scaled, y / fitted.transformer_.scale_[0])
    assert scaled.min() > 0
    assert np.all(fitted.predict(X) >= 0)


@pytest.mark.parametrize("labels", [
    np.array(["no", "yes", "yes", "no", "yes"], dtype=object),
    np.array(["b", "a", "c", "a", "c", "b"]),
    np.array([3, 1, 2, 2, 3, 1, 7]),
    np.array([0.0, 1.0, 1.0, 0.0]),
])
def test_label_columns_equal_scikit_learns_label_binarizer(labels):
    """The classifier's 0/1 label columns are sklearn.preprocessing.LabelBinarizer's, for
    binary, multiclass, integer and float labels, and for labels it never saw (zeros)."""
    from sklearn.preprocessing import LabelBinarizer

    from workbench.nets.engine import NetClassifier

    X = np.arange(2.0 * len(labels)).reshape(len(labels), 2)
    clf = NetClassifier((3,), max_iter=1, random_state=0).fit(X, labels)
    ref = LabelBinarizer().fit(labels)
    assert clf.classes_.tolist() == ref.classes_.tolist()
    np.testing.assert_array_equal(clf._binarize(labels), ref.transform(labels))
    unseen = {"O": "zzz", "U": "zzz", "i": 99, "f": 9.0}[labels.dtype.kind]
    other = np.array([labels[0], unseen, labels[0]], dtype=labels.dtype)
    np.testing.assert_array_equal(clf._binarize(other), ref.transform(other))
