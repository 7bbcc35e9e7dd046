"""Column profile, target kinds, advice and the head compatibility guard.

Outside references: scikit-learn's bundled datasets (``load_breast_cancer`` is a
binary problem, ``load_iris`` / ``load_wine`` have three classes, ``load_diabetes``'s
target lies in [25, 346]); NumPy / ``numpy.unique`` recompute every piece of
evidence; ``scipy.stats.poisson`` draws a count target; the head ranges come from
:mod:`workbench.nets.activations`, itself checked against SciPy.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn import datasets

from workbench.data.profiling import (
    HIDDEN_TO_SWEEP,
    KINDS,
    TASK_OF_KIND,
    advise,
    analyse_target,
    check_head,
    profile_column,
    profile_table,
    split_xy,
)
from workbench.errors import InputError
from workbench.nets.activations import HEADS


def _bundled(name):
    return getattr(datasets, name)(as_frame=True).frame


# --------------------------------------------------------------------------- bundled data


@pytest.mark.parametrize("loader,kind,n_classes", [("load_breast_cancer", "binary", 2),
                                                   ("load_iris", "multiclass", 3),
                                                   ("load_wine", "multiclass", 3)])
def test_bundled_classification_targets(loader, kind, n_classes):
    df = _bundled(loader)
    prof = profile_table(df)
    assert prof.suggested_target == "target"
    t = analyse_target(df, "target")
    assert t.kind == kind and t.task == "classification"
    # evidence recomputed with numpy
    values, counts = np.unique(df["target"].to_numpy(), return_counts=True)
    assert t.classes == values.tolist() and len(t.classes) == n_classes
    assert t.evidence["distinct"] == n_classes
    assert t.evidence["class_counts"] == {str(v): int(c) for v, c in zip(values, counts)}
    assert t.evidence["min"] == values.min() and t.evidence["max"] == values.max()
    a = advise(t)
    assert a.output_head == ("logistic" if kind == "binary" else "softmax")
    assert a.loss == "log_loss"


def test_diabetes_is_non_negative_and_its_centred_copy_signed():
    df = _bundled("load_diabetes")
    y = df["target"].to_numpy()
    t = analyse_target(df, "target")
    assert t.kind == "non_negative" and t.task == "regression"
    # scikit-learn's documentation: the target lies between 25 and 346
    assert t.evidence["min"] == 25.0 == y.min() and t.evidence["max"] == 346.0 == y.max()
    assert t.evidence["distinct"] == np.unique(y).size
    assert t.evidence["zero_share"] == 0.0
    assert t.evidence["mean"] == pytest.approx(y.mean())
    assert t.evidence["std"] == pytest.approx(y.std())
    assert advise(t).output_head in ("relu", "softplus")
    centred = df.assign(target=y - y.mean())
    ts = analyse_target(centred, "target")
    assert ts.kind == "signed"
    assert ts.evidence["negative_share"] == pytest.approx(np.mean(y - y.mean() < 0))
    assert advise(ts).output_head == "identity" and advise(ts).loss == "squared_error"


# --------------------------------------------------------------------------- other kinds


def test_count_bounded_percentage_and_text_labels():
    rng = np.random.default_rng(3)
    n = 400
    base = pd.DataFrame({"x": rng.normal(size=n)})
    counts = stats.poisson.rvs(mu=np.exp(1 + base["x"]), random_state=rng)
    t = analyse_target(base.assign(c=counts), "c")
    assert t.kind == "count"
    assert t.evidence["zero_share"] == pytest.approx(np.mean(counts == 0))
    assert t.evidence["integer_valued"] is True
    assert (advise(t).output_head, advise(t).loss) == ("exp", "poisson")

    share = rng.beta(2, 3, n)
    t = analyse_target(base.assign(share=share), "share")
    assert t.kind == "bounded" and t.interval == (0.0, 1.0)
    assert (advise(t).output_head, advise(t).loss) == ("logistic", "squared_error")

    pct = rng.uniform(0, 100, n)
    t = analyse_target(base.assign(moisture_pct=pct), "moisture_pct")
    assert t.kind == "bounded" and t.interval == (0.0, 100.0)
    t = analyse_target(base.assign(moisture=pct), "moisture")
    assert t.kind == "non_negative"  # no percentage in the name: no known interval

    t = analyse_target(base.assign(ok=rng.choice(["yes", "no"], n)), "ok")
    assert t.kind == "binary" and t.classes == ["no", "yes"]
    t = analyse_target(base.assign(ok=rng.random(n) < 0.3), "ok")
    assert t.kind == "binary" and t.classes == [False, True]
    t = analyse_target(base.assign(g=rng.choice(list("abcd"), n)), "g")
    assert t.kind == "multiclass" and t.classes == list("abcd")
    assert advise(t).reason.startswith("4 classes")

    # whole numbers that do not start near zero are a quantity, not a count
    t = analyse_target(base.assign(q=rng.integers(20, 400, n)), "q")
    assert t.kind == "non_negative"


def test_small_integer_codes_versus_counts():
    # balanced codes 0..2 are classes (like load_iris); a thin tail makes it a count
    codes = np.repeat([0, 1, 2], 30)
    assert _target(codes).kind == "multiclass"
    assert _target(codes, name="n_defects").kind == "count"  # the name says it counts
    tail = np.concatenate([np.repeat([0, 1, 2, 3], [40, 30, 20, 8]), [4, 5]])
    t = _target(tail)
    assert t.kind == "count" and t.evidence["zero_share"] == pytest.approx(0.4)


def test_non_negative_advice_depends_on_zero_share():
    rng = np.random.default_rng(0)
    y = rng.gamma(2.0, 3.0, 500)
    df = pd.DataFrame({"y": y})
    assert advise(analyse_target(df, "y")).output_head == "softplus"
    y2 = np.where(rng.random(500) < 0.3, 0.0, y)
    t = analyse_target(pd.DataFrame({"y": y2}), "y")
    assert t.kind == "non_negative" and t.evidence["zero_share"] == pytest.approx(np.mean(y2 == 0))
    assert advise(t).output_head == "relu"


def test_missing_target_rows_are_dropped_and_reported():
    df = pd.DataFrame({"x": np.arange(10.0), "y": [1.5, np.nan, -2, 3, np.nan, 4, 5, 6, 7, 8]})
    t = analyse_target(df, "y")
    assert t.rows_dropped == 2 and t.rows == 8
    assert t.evidence["missing"] == 2 and t.evidence["missing_share"] == 0.2
    X, y = split_xy(df, t)
    assert list(X.columns) == ["x"] and len(X) == len(y) == 8
    np.testing.assert_array_equal(y, df["y"].dropna().to_numpy())
    assert y.dtype == np.float64
    np.testing.assert_array_equal(X["x"].to_numpy(), df.loc[df["y"].notna(), "x"].to_numpy())


@pytest.mark.parametrize("values,fragment", [
    ([3.0] * 6, r"single value \(3.0\)"),
    (["a"] * 5 + [None], r"single value \(a\)"),
    ([np.nan] * 6, "no values"),
    (pd.date_range("2024-01-01", periods=6), "holds dates"),
    ([f"id-{i}" for i in range(6)], "identifier or free text"),
    ([1.0, 2.0, np.inf, 3.0, 4.0, 5.0], "infinite"),
])
def test_unusable_targets_are_refused(values, fragment):
    df = pd.DataFrame({"x": np.arange(6), "t": values})
    with pytest.raises(InputError, match=fragment) as info:
        analyse_target(df, "t")
    assert "\n" not in str(info.value)


def test_unknown_column_and_forced_kinds():
    df = pd.DataFrame({"a": [1, 2, 3, 4], "b": [-1.0, 0.5, 0.2, 0.9]})
    with pytest.raises(InputError, match="no column named 'zz'; the columns are: a, b"):
        analyse_target(df, "zz")
    with pytest.raises(InputError, match="negative values"):
        analyse_target(df, "b", kind="non_negative")
    with pytest.raises(InputError, match="unknown target kind"):
        analyse_target(df, "b", kind="weird")
    with pytest.raises(InputError, match="outside"):
        analyse_target(df, "b", interval=(0, 1))
    t = analyse_target(df, "b", interval=(-1, 1))
    assert t.kind == "bounded" and t.interval == (-1.0, 1.0)
    t = analyse_target(df, "a", kind="count")
    assert t.kind == "count" and "set by the user" in t.evidence["rule"]


def test_kind_and_task_tables_are_consistent():
    assert set(KINDS) == set(TASK_OF_KIND)
    for kind, task in TASK_OF_KIND.items():
        assert task == ("classification" if kind in ("binary", "multiclass") else "regression")


# --------------------------------------------------------------------------- columns


def test_column_types_roles_and_suggested_target():
    rng = np.random.default_rng(1)
    n = 200
    df = pd.DataFrame({
        "row_id": np.arange(1, n + 1),
        "code": [f"C{i:04d}" for i in range(n)],
        "temp": rng.normal(20, 3, n),
        "count_in": rng.integers(0, 12, n),
        "flag": rng.random(n) < 0.5,
        "colour": rng.choice(["red", "green", "blue"], n),
        "when": pd.date_range("2024-01-01", periods=n, freq="h"),
        "comment": [f"the operator wrote note number {i} about batch {i % 7}" for i in range(n)],
        "plant": "P1",
        "sparse": np.where(rng.random(n) < 0.8, np.nan, 1.0),
        "many": rng.choice([f"k{i}" for i in range(90)], n),
        "yield_kg": rng.gamma(2, 2, n),
    })
    df.loc[:9, "temp"] = np.nan
    prof = profile_table(df)
    types = {c.name: c.type for c in prof.columns}
    assert types == {"row_id": "id", "code": "id", "temp": "numeric", "count_in": "integer",
                     "flag": "boolean", "colour": "categorical", "when": "datetime",
                     "comment": "text", "plant": "constant", "sparse": "missing",
                     "many": "categorical", "yield_kg": "numeric"}
    roles = {c.name: c.role for c in prof.columns}
    for name in ("row_id", "code", "comment", "plant", "sparse", "many"):
        assert roles[name] == "ignore" and prof.column(name).reason
    assert prof.column("many").distinct == df["many"].nunique() > 50 and "categories" in prof.column("many").reason
    assert prof.column("colour").distinct == 3
    assert set(prof.column("colour").top) == {"red", "green", "blue"}
    assert prof.column("temp").missing == 10 and prof.column("temp").missing_share == 0.05
    assert prof.column("temp").min == pytest.approx(np.nanmin(df["temp"]))
    assert prof.column("temp").max == pytest.approx(np.nanmax(df["temp"]))
    assert prof.suggested_target == "yield_kg" and roles["yield_kg"] == "target"
    feats = [c.name for c in prof.feature_columns()]
    assert feats == ["temp", "count_in", "flag", "colour", "when"]
    # choosing another target makes the suggested one a feature
    prof2 = profile_table(df, target="temp")
    assert prof2.column("temp").role == "target" and prof2.target == "temp"
    assert "yield_kg" in [c.name for c in prof2.feature_columns()]
    assert "temp" not in [c.name for c in prof2.feature_columns()]
    d = prof.to_dict()
    assert d["suggested_target"] == "yield_kg" and len(d["columns"]) == df.shape[1]


def test_integer_unique_column_without_id_name_or_sequence_is_a_feature():
    rng = np.random.default_rng(2)
    s = pd.Series(rng.permutation(10_000)[:300] * 7, name="weight_g")
    assert profile_column(s).type == "integer"
    assert profile_column(pd.Series(np.arange(300) + 5, name="serial")).type == "id"


# --------------------------------------------------------------------------- advice & guard


def _target(values, name="y"):
    return analyse_target(pd.DataFrame({name: values}), name)


def test_advice_matches_the_head_registry_and_is_marked_common_practice():
    rng = np.random.default_rng(5)
    cases = {
        "binary": rng.choice(["a", "b"], 50),
        "multiclass": rng.choice(["a", "b", "c"], 50),
        "signed": rng.normal(size=50),
        "non_negative": rng.gamma(2, 2, 50),
        "count": rng.poisson(6, 200),
        "bounded": rng.uniform(0, 1, 50),
    }
    for kind, values in cases.items():
        t = _target(values)
        assert t.kind == kind
        a = advise(t)
        head = HEADS[(t.task, a.output_head)]
        assert a.loss == head.loss  # the loss matched with the head in the registry
        assert a.basis == "common practice" and "common practice" in a.reason
        assert a.hidden == "relu" and a.hidden_to_sweep == HIDDEN_TO_SWEEP
        assert set(a.hidden_to_sweep) >= {"relu", "tanh", "leaky_relu", "gelu", "silu"}
        assert a.heads_to_sweep[0] == a.output_head
        chk = check_head(t, a.output_head)
        assert chk.allowed and not chk.warning  # the advice always passes its own guard
        assert a.to_dict()["output_head"] == a.output_head


def test_guard_refuses_heads_whose_range_cannot_cover_the_target():
    signed = _target(np.linspace(-2, 3, 40))
    for head in ("relu", "softplus", "exp"):
        chk = check_head(signed, head)
        assert not chk.allowed and "negative values (min -2)" in chk.reason
        # the range in the registry is what makes the refusal right
        assert HEADS[("regression", head)].low == 0.0
    share = analyse_target(pd.DataFrame({"y": np.linspace(0.1, 0.9, 40)}), "y")
    assert check_head(share, "logistic").allowed
    wide = analyse_target(pd.DataFrame({"y": np.linspace(0.1, 0.9, 40)}), "y",
                          kind="bounded", interval=(0.0, 1.0))
    assert check_head(wide, "logistic").allowed
    outside = wide.__class__(**{**wide.__dict__, "interval": (0.2, 0.8)})
    chk = check_head(outside, "logistic")
    assert not chk.allowed and "outside" in chk.reason
    chk = check_head(signed, "softmax")
    assert not chk.allowed and "cannot serve regression" in chk.reason
    multi = _target(np.repeat(["a", "b", "c"], 10))
    chk = check_head(multi, "logistic")
    assert not chk.allowed and "3 classes" in chk.reason
    chk = check_head(multi, "identity")
    assert not chk.allowed
    chk = check_head(signed, "nonsense")
    assert not chk.allowed and "unknown output head" in chk.reason


def test_guard_warns_for_unusual_but_possible_heads():
    nonneg = _target(np.linspace(0, 10, 40))
    chk = check_head(nonneg, "linear")  # alias of identity
    assert chk.allowed and chk.warning and chk.head == "identity"
    assert "unusual for a non_negative target" in chk.reason
    chk = check_head(nonneg, "logistic")
    assert chk.allowed and chk.warning and "no known interval" in chk.reason
    binary = _target(np.repeat(["no", "yes"], 10))
    chk = check_head(binary, "softmax")
    assert chk.allowed and chk.warning and chk.loss == "log_loss"
    count = _target(np.arange(40) % 7, name="defect_count")
    assert count.kind == "count"
    for head in ("exp", "relu", "softplus"):
        chk = check_head(count, head)
        assert chk.allowed and not chk.warning and chk.reason == ""


def test_user_role_changes():
    rng = np.random.default_rng(0)
    n = 100
    df = pd.DataFrame({"serial": np.arange(n), "x": rng.normal(size=n),
                       "note": [f"a long free text remark number {i}" for i in range(n)],
                       "y": rng.normal(size=n)})
    prof = profile_table(df, target="y")
    assert [c.name for c in prof.feature_columns()] == ["x"]
    p2 = prof.with_roles({"serial": "feature", "x": "ignore"})
    assert p2.column("serial").type == "integer" and p2.column("serial").role == "feature"
    assert [c.name for c in p2.feature_columns()] == ["serial"]
    assert prof.column("serial").role == "ignore"  # the original is unchanged
    with pytest.raises(InputError, match="free text"):
        prof.with_roles({"note": "feature"})
    with pytest.raises(InputError, match="no column named"):
        prof.with_roles({"zz": "ignore"})
    with pytest.raises(InputError, match="not valid") as info:
        prof.with_roles({"x": "target"})
    assert info.value.setting == "roles"
    with pytest.raises(InputError, match="'y' is the target") as info:
        prof.with_roles({"y": "ignore"})
    assert info.value.setting == "roles"
    # ignoring a column the profile already ignores keeps the profile's reason
    assert prof.with_roles({"serial": "ignore"}).column("serial").reason == \
        prof.column("serial").reason


def test_an_id_column_made_a_feature_gets_its_base_type_and_reaches_the_pipeline():
    """The user turns an identifier into a feature: the fitted preprocessing must use it.

    Reference: scikit-learn's ``StandardScaler`` on the column itself (the numeric group
    is median-imputed, then standardised; there is nothing to impute here).
    """
    from sklearn.neural_network import MLPRegressor
    from sklearn.preprocessing import StandardScaler

    from workbench.data.preprocessing import build_pipeline, feature_groups

    rng = np.random.default_rng(3)
    n = 60
    df = pd.DataFrame({"serial": np.arange(100, 100 + n), "x": rng.normal(size=n),
                       "plot_code": [f"P{i:03d}" for i in range(n)],
                       "y": rng.normal(size=n)})
    prof = profile_table(df, target="y")
    assert prof.column("serial").type == "id" and prof.column("serial").base_type == "integer"
    assert prof.column("plot_code").type == "id"
    assert "serial" not in feature_groups(prof, "y")["numeric"]
    user = prof.with_roles({"serial": "feature", "plot_code": "feature"})
    assert user.column("serial").type == "integer" and user.column("serial").role == "feature"
    assert user.column("plot_code").type == "categorical"
    assert feature_groups(user, "y")["numeric"] == ["serial", "x"]
    assert feature_groups(user, "y")["categorical"] == ["plot_code"]

    target = analyse_target(df, "y")
    X, y = split_xy(df, target)
    pipe = build_pipeline(user, target, MLPRegressor(hidden_layer_sizes=(3,), max_iter=5,
                                                     random_state=0), "identity")
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipe.fit(X, y)
    prep = pipe.named_steps["prep"]
    names = list(prep.get_feature_names_out())
    assert "numeric__serial" in names
    assert sum(n.startswith("categorical__plot_code_") for n in names) == n
    got = prep.transform(X)[:, names.index("numeric__serial")]
    want = StandardScaler().fit_transform(df[["serial"]].to_numpy(float))[:, 0]
    np.testing.assert_allclose(got, want, rtol=1e-12)


def test_suggested_target_prefers_strong_names_then_the_last_column():
    rng = np.random.default_rng(0)
    n = 80
    base = {"age": rng.integers(20, 80, n), "heart_rate": rng.normal(70, 8, n),
            "bmi": rng.normal(25, 3, n)}
    df = pd.DataFrame({**base, "risk": rng.normal(size=n)})
    assert profile_table(df).suggested_target == "risk"  # last column beats a word match
    df = pd.DataFrame({"label": rng.choice(["a", "b"], n), **base})
    assert profile_table(df).suggested_target == "label"  # a strong name beats position
    # an identifier last: no column is clearly the target, so none is suggested (the window
    # asks) rather than the last column that is not ignored
    df = pd.DataFrame({**base, "row_id": np.arange(n)})
    prof = profile_table(df)
    assert prof.suggested_target is None
    assert "'row_id'" in prof.suggestion_reason and "identifier" in prof.suggestion_reason
