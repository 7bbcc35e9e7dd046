"""scikit-learn's estimator contract for NetRegressor and NetClassifier.

Source: ``sklearn.utils.estimator_checks.parametrize_with_checks`` (the checks every
scikit-learn estimator passes: get_params/set_params/clone, fitted attributes ending in
``_``, input validation messages, n_features_in_, pickling, list / float32 / read-only
memory-mapped input, training scores on simple data, ...). No check is expected to fail.

Settings: a small hidden layer and ``max_iter=100`` keep the file fast while still
reaching the scores ``check_regressors_train`` (R^2 > 0.5) and ``check_classifiers_train``
(accuracy > 0.83) demand; ``learning_rate_init=0.01`` is common practice for short runs.
"""

from __future__ import annotations

import pytest
from sklearn.utils.estimator_checks import parametrize_with_checks

from workbench.nets.engine import NetClassifier, NetRegressor

_FAST = dict(max_iter=100, learning_rate_init=0.01, random_state=0)

ESTIMATORS = [
    NetRegressor(hidden_layer_sizes=(10,), **_FAST),
    NetClassifier(hidden_layer_sizes=(10,), **_FAST),
    # beyond scikit-learn: per-layer activations and float64
    NetRegressor(hidden_layer_sizes=(8, 6), activation=("selu", "gelu"), dtype="float64",
                 **_FAST),
    NetClassifier(hidden_layer_sizes=(8, 6), activation=("silu", "elu"), **_FAST),
]

# Every check passes today; a check that must fail goes here with its reason, e.g.
# {"check_name": "why it cannot pass"}. Keep it empty unless it cannot be fixed.
EXPECTED_FAILED: dict[str, str] = {}


@parametrize_with_checks(ESTIMATORS, expected_failed_checks=lambda est: EXPECTED_FAILED)
@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")
def test_sklearn_estimator_contract(estimator, check):
    """sklearn.utils.estimator_checks: the estimator contract."""
    check(estimator)
