"""The window's default plan: what ``workbench open FILE --run`` runs.

One place for the defaults the window's set-up column starts from
(:data:`WINDOW_DEFAULTS`) and for the heads it ticks (:func:`default_heads`), so the
window, its one-command run and the time-estimate check
(:func:`workbench.sweep.estimate.check_estimates`) run the same plan.
"""

from __future__ import annotations

#: the set-up column's starting values (layers as the window writes them, learning rates
#: "tune": every activation and head at the core's grid of rates, an equal budget)
WINDOW_DEFAULTS = {"layers": ["32"], "learning_rates": ["tune"], "alphas": [0.0001],
                   "folds": 5, "repeats": 2, "epochs": 100, "early_stopping": False,
                   "race": False}


def default_heads(advice, checks) -> list[str]:
    """The output heads a default sweep ticks: the advised head and one alternative.

    The alternative is the first head of the advice's ``heads_to_sweep`` that the
    sweep's guard accepts (one without a warning first), so that the verdict can test
    the output rule ("logistic for a binary target", ...) against something. One
    alternative, not all, keeps the default sweep at twice one head's trials. Kinds
    with no accepted alternative (signed, multiclass) get the advised head alone.

    Parameters
    ----------
    advice : workbench.data.profiling.Advice
    checks : iterable of (head, verdict)
        The guard's verdict on each head of the task; a verdict has ``allowed`` and
        ``warning`` (:class:`workbench.data.profiling.HeadCheck` or the window's).
    """
    allowed = {name: chk for name, chk in checks if chk.allowed}
    heads = [advice.output_head] if advice.output_head in allowed else []
    others = [h for h in advice.heads_to_sweep if h in allowed and h not in heads]
    others.sort(key=lambda h: bool(allowed[h].warning))  # stable: the advice's order
    heads += others[:1]
    return heads or list(allowed)[:1]


def guard_checks(target) -> list[tuple[str, object]]:
    """The sweep's guard on every head of the target's task: ``(head, verdict)`` with the
    verdict's ``allowed`` and ``warning`` as :func:`workbench.sweep.plan.resolve_heads`
    decides them."""
    from types import SimpleNamespace

    from workbench.errors import InputError
    from workbench.nets.activations import head_names
    from workbench.sweep.plan import resolve_heads

    out = []
    for h in head_names(target.task):
        try:
            _, refused, warns = resolve_heads(target, [h])
        except InputError:
            refused, warns = {h: ""}, {}
        out.append((h, SimpleNamespace(allowed=h not in refused, warning=h in warns)))
    return out


def default_plan(path, target: str | None = None, **overrides):
    """The plan ``workbench open FILE --run`` runs on ``path`` (``overrides``: any
    :func:`workbench.sweep.plan.build_plan` argument to change, e.g. ``epochs``)."""
    from workbench.data.intake import load_table
    from workbench.data.profiling import advise, analyse_target, profile_table
    from workbench.sweep.plan import build_plan

    df, _ = load_table(path)
    profile = profile_table(df)
    name = target or profile.suggested_target
    info = analyse_target(df, name)
    adv = advise(info)
    d = WINDOW_DEFAULTS
    args = dict(hidden=list(adv.hidden_to_sweep),
                output=default_heads(adv, guard_checks(info)), layers=list(d["layers"]),
                learning_rates=list(d["learning_rates"]), alphas=list(d["alphas"]),
                folds=d["folds"], repeats=d["repeats"], epochs=d["epochs"],
                early_stopping=d["early_stopping"], race=d["race"], df=df, target_info=info,
                profile=profile)
    args.update(overrides)
    return build_plan(str(path), name, **args)
