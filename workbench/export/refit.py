"""Refitting the chosen configuration on every row of the table (the exported model).

The cross-validation scores describe models fitted on part of the table; the
model a colleague uses is the same configuration fitted once on every row. It
is built exactly as the sweep built each fold's model: the estimator from
:func:`workbench.sweep.trials.estimator_for` and the pipeline from
:func:`workbench.data.preprocessing.build_pipeline`, on the data
:func:`workbench.sweep.runner.load_data` gives (the user's column roles applied
there, through :meth:`workbench.data.profiling.TableProfile.with_roles`).
"""

from __future__ import annotations

import warnings


def final_fit_seed(plan) -> int:
    """Seed of the refit on every row: that of repeat 0, fold 0 (recorded in the export)."""
    return plan.model_seed(0, 0)


def final_estimator(plan, chosen: dict):
    """The unfitted estimator of the chosen configuration, seeded for the refit."""
    from workbench.sweep.trials import estimator_for

    return estimator_for(plan, chosen, random_state=final_fit_seed(plan))


def fit_final_pipeline(plan, chosen: dict, data):
    """The chosen configuration's pipeline, refitted on every row of the table.

    Parameters
    ----------
    plan : workbench.sweep.plan.SweepPlan
    chosen : dict
        One configuration of the sweep's results document.
    data : workbench.sweep.runner.TrialData
        The table as the sweep saw it (``X``, ``y``, ``profile``, ``target``).
    """
    import numpy as np
    from threadpoolctl import threadpool_limits

    from workbench.data.preprocessing import build_pipeline

    pipe = build_pipeline(data.profile, data.target, final_estimator(plan, chosen),
                          chosen["head"])
    with threadpool_limits(limits=1), warnings.catch_warnings(), \
            np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
        warnings.simplefilter("ignore")
        pipe.fit(data.X, data.y)
    return pipe
