"""Leak-free preprocessing, target scaling by head, date parts, pipelines.

Outside references: scikit-learn's ``StandardScaler`` (with and without centring),
``MinMaxScaler`` and ``SimpleImputer`` semantics recomputed with NumPy
(``numpy.nanmedian``, ``numpy.mean``), pandas' ``Series.dt`` calendar accessors
for the date parts, and ``sklearn.model_selection.cross_validate`` /
``KFold`` for the fold splits.
"""

from __future__ import annotations

import pickle
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.base import clone
from sklearn.compose import ColumnTransformer, TransformedTargetRegressor
from sklearn.impute import SimpleImputer
from sklearn.model_selection import KFold, cross_validate
from sklearn.neural_network import MLPClassifier, MLPRegressor
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import MinMaxScaler, StandardScaler

from workbench.data import preprocessing as P
from workbench.data.preprocessing import (
    DateParts,
    ImputeColumnwise,
    TargetScaler,
    build_pipeline,
    build_preprocessor,
    feature_groups,
    fit_median_by_column,
    fitted_estimator,
    target_scaling,
)
from workbench.data.profiling import advise, analyse_target, profile_table, split_xy
from workbench.errors import InputError

pytestmark = pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")


def _table(n=240, seed=0, target="signed"):
    rng = np.random.default_rng(seed)
    x1 = rng.normal(size=n)
    x2 = rng.uniform(0, 10, n)
    colour = rng.choice(["red", "green", "blue"], n)
    df = pd.DataFrame({
        "row_id": np.arange(n),
        "x1": x1,
        "x2": x2,
        "k": rng.integers(0, 5, n),
        "colour": colour,
        "when": pd.Timestamp("2024-01-01") + pd.to_timedelta(rng.integers(0, 400, n), "D"),
        "plant": "P1",
    })
    df.loc[rng.random(n) < 0.1, "x1"] = np.nan
    df.loc[rng.random(n) < 0.1, "colour"] = np.nan
    signal = np.sin(x1 * 2) + 0.3 * x2 + (colour == "red")
    if target == "signed":
        df["y"] = signal - signal.mean() + rng.normal(0, 0.1, n)
    elif target == "non_negative":
        df["y"] = np.maximum(signal, 0) * 3
    elif target == "bounded":
        df["y"] = 1 / (1 + np.exp(-(signal - signal.mean())))
    elif target == "count":
        df["y"] = rng.poisson(np.exp(0.3 * signal))
    elif target == "binary":
        df["y"] = np.where(signal > np.median(signal), "pass", "fail")
    elif target == "multiclass":
        df["y"] = np.array(["a", "b", "c"])[np.digitize(signal, np.quantile(signal, [1 / 3, 2 / 3]))]
    return df


def _setup(target="signed", **kw):
    df = _table(target=target, **kw)
    prof = profile_table(df, target="y")
    t = analyse_target(df, "y")
    X, y = split_xy(df, t)
    return df, prof, t, X, y


# --------------------------------------------------------------------------- column transformer


def test_groups_and_output_width():
    df, prof, t, X, y = _setup()
    g = feature_groups(prof, t)
    assert g == {"numeric": ["x1", "x2", "k"], "categorical": ["colour"], "boolean": [],
                 "datetime": ["when"]}
    ct = build_preprocessor(prof, t)
    assert isinstance(ct, ColumnTransformer) and ct.remainder == "drop"
    Z = ct.fit_transform(X)
    n_dates = len(ct.named_transformers_["datetime"].named_steps["parts"].parts_[0])
    # 3 numeric + 3 colours (NaN imputed, so no extra level) + the varying date parts
    assert Z.shape == (len(X), 3 + 3 + n_dates)
    assert not np.isnan(Z).any()
    names = list(ct.get_feature_names_out())
    assert not any("row_id" in n or "plant" in n for n in names)  # ignored columns dropped
    assert "categorical__colour_red" in names
    # the numeric block equals median imputation + standardisation recomputed with numpy
    raw = X[["x1", "x2", "k"]].to_numpy(float)
    med = np.nanmedian(raw, axis=0)
    filled = np.where(np.isnan(raw), med, raw)
    np.testing.assert_allclose(Z[:, :3], (filled - filled.mean(0)) / filled.std(0), atol=1e-12)
    # most-frequent imputation then one-hot: each row has exactly one colour
    onehot = Z[:, 3:6]
    assert set(np.unique(onehot)) == {0.0, 1.0} and np.all(onehot.sum(1) == 1)


def test_unknown_category_is_ignored_at_predict():
    df, prof, t, X, y = _setup()
    ct = build_preprocessor(prof, t).fit(X)
    X2 = X.head(3).copy()
    X2["colour"] = ["purple", "red", "purple"]
    Z = ct.transform(X2)
    names = list(ct.get_feature_names_out())
    cols = [i for i, n in enumerate(names) if n.startswith("categorical__colour_")]
    np.testing.assert_array_equal(Z[:, cols].sum(1), [0, 1, 0])


def test_no_features_is_an_input_error():
    df = pd.DataFrame({"row_id": np.arange(20), "y": np.linspace(-1, 1, 20)})
    prof = profile_table(df, target="y")
    with pytest.raises(InputError, match="no column can be used as a feature"):
        build_preprocessor(prof, analyse_target(df, "y"))


# --------------------------------------------------------------------------- leakage


def test_fold_fitted_pipeline_never_sees_held_out_rows():
    df, prof, t, X, y = _setup()
    pipe = build_pipeline(prof, t, MLPRegressor(hidden_layer_sizes=(4,), max_iter=20,
                                                random_state=0), "identity")
    cv = KFold(n_splits=4, shuffle=True, random_state=1)
    res = cross_validate(pipe, X, y, cv=cv, return_estimator=True, return_indices=True)
    full = X[["x1", "x2", "k"]].to_numpy(float)
    for est, train, test in zip(res["estimator"], res["indices"]["train"],
                                res["indices"]["test"]):
        part = full[train]
        num = est.named_steps["prep"].named_transformers_["numeric"]
        med = np.nanmedian(part, axis=0)
        np.testing.assert_allclose(num.named_steps["impute"].statistics_, med)
        filled = np.where(np.isnan(part), med, part)
        np.testing.assert_allclose(num.named_steps["scale"].mean_, filled.mean(0), rtol=1e-12)
        np.testing.assert_allclose(num.named_steps["scale"].scale_, filled.std(0), rtol=1e-12)
        # and it differs from what the whole table would give
        all_filled = np.where(np.isnan(full), np.nanmedian(full, 0), full)
        assert not np.allclose(num.named_steps["scale"].mean_, all_filled.mean(0))
        # the target scaler is fitted on the training part's targets only
        ts = est.named_steps["model"].transformer_
        assert ts.offset_[0] == pytest.approx(y[train].mean())
        assert ts.scale_[0] == pytest.approx(y[train].std())
        assert len(np.intersect1d(train, test)) == 0


def test_category_seen_only_in_held_out_rows_is_not_learned():
    df, prof, t, X, y = _setup()
    X = X.copy()
    X.loc[X.index[-10:], "colour"] = "violet"
    train = np.arange(len(X) - 10)
    pipe = build_pipeline(prof, t, MLPRegressor(hidden_layer_sizes=(3,), max_iter=5,
                                                random_state=0), "identity")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipe.fit(X.iloc[train], y[train])
    enc = pipe.named_steps["prep"].named_transformers_["categorical"].named_steps["onehot"]
    assert "violet" not in set(enc.categories_[0])
    assert np.isfinite(pipe.predict(X.tail(10))).all()


# --------------------------------------------------------------------------- target scaling


def test_target_scaler_modes_match_scikit_learn_scalers():
    rng = np.random.default_rng(4)
    y = rng.gamma(2.0, 3.0, 300)
    y2 = y.reshape(-1, 1)
    std = TargetScaler("standard").fit(y2)
    ref = StandardScaler().fit(y2)
    np.testing.assert_allclose(std.transform(y2), ref.transform(y2), rtol=1e-12)
    np.testing.assert_allclose(std.inverse_transform(ref.transform(y2)), y2, rtol=1e-12)

    sc = TargetScaler("scale").fit(y2)
    ref = StandardScaler(with_mean=False).fit(y2)
    np.testing.assert_allclose(sc.transform(y2), ref.transform(y2), rtol=1e-12)
    assert sc.offset_[0] == 0.0
    assert np.all(sc.transform(y2) >= 0)  # no centring: the sign is kept, zero stays zero
    assert sc.transform(np.zeros((1, 1)))[0, 0] == 0.0
    np.testing.assert_allclose(sc.inverse_transform(sc.transform(y2)), y2, rtol=1e-12)

    share = rng.uniform(0.1, 0.7, 300).reshape(-1, 1)
    iv = TargetScaler("interval", low=0.0, high=1.0).fit(share)
    ref = MinMaxScaler().fit(np.array([[0.0], [1.0]]))
    np.testing.assert_allclose(iv.transform(share), ref.transform(share), rtol=1e-12)
    pct = share * 100
    iv = TargetScaler("interval", low=0.0, high=100.0).fit(pct)
    ref = MinMaxScaler().fit(np.array([[0.0], [100.0]]))
    np.testing.assert_allclose(iv.transform(pct), ref.transform(pct), rtol=1e-12)
    np.testing.assert_allclose(iv.inverse_transform(ref.transform(pct)), pct, rtol=1e-12)
    free = TargetScaler("interval").fit(pct)  # no interval: the training range, as MinMaxScaler
    np.testing.assert_allclose(free.transform(pct), MinMaxScaler().fit_transform(pct),
                               rtol=1e-12, atol=1e-15)
    # 1-D in, 1-D out
    assert std.transform(y).shape == y.shape and std.inverse_transform(y).shape == y.shape


def test_target_scaler_constant_target_and_bad_mode():
    c = np.full((5, 1), 4.0)
    ts = TargetScaler("standard").fit(c)
    assert ts.scale_[0] == 1.0  # as StandardScaler: zero variance -> scale 1
    assert StandardScaler().fit(c).scale_[0] == 1.0
    with pytest.raises(ValueError, match="mode must be"):
        TargetScaler("log").fit(c)


@pytest.mark.parametrize("head,mode", [("identity", "standard"), ("linear", "standard"),
                                       ("relu", "scale"), ("softplus", "scale"),
                                       ("exp", "scale"), ("logistic", "interval")])
def test_scaling_follows_the_head(head, mode):
    df, prof, t, X, y = _setup("bounded")
    ts = target_scaling(t, head)
    assert ts.mode == mode
    if mode == "interval":
        assert (ts.low, ts.high) == t.interval == (0.0, 1.0)


# --------------------------------------------------------------------------- pipelines


def test_sklearn_regressor_predictions_come_back_in_user_units():
    df, prof, t, X, y = _setup("non_negative")
    y = y * 1000.0  # large units: the network itself sees y / std
    pipe = build_pipeline(prof, t, MLPRegressor(hidden_layer_sizes=(8,), max_iter=200,
                                                random_state=0), "identity")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipe.fit(X, y)
    model = pipe.named_steps["model"]
    assert isinstance(model, TransformedTargetRegressor)
    raw = fitted_estimator(pipe).predict(pipe.named_steps["prep"].transform(X))
    np.testing.assert_allclose(pipe.predict(X), raw * y.std() + y.mean(), rtol=1e-10)
    assert abs(np.mean(pipe.predict(X)) - y.mean()) < 0.2 * y.std()


def test_sklearn_estimators_get_only_heads_they_have():
    df, prof, t, X, y = _setup("count")
    pipe = build_pipeline(prof, t, MLPRegressor(), "exp")
    assert fitted_estimator(pipe).get_params()["loss"] == "poisson"
    assert pipe.named_steps["model"].transformer.mode == "scale"
    with pytest.raises(InputError, match="has no relu output head"):
        build_pipeline(prof, t, MLPRegressor(), "relu")
    df, prof, t, X, y = _setup("binary")
    build_pipeline(prof, t, MLPClassifier(), "logistic")
    with pytest.raises(InputError, match="always uses the logistic head"):
        build_pipeline(prof, t, MLPClassifier(), "softmax")


def test_refused_head_raises_the_guard_reason():
    df, prof, t, X, y = _setup("signed")
    with pytest.raises(InputError, match="never goes below 0"):
        build_pipeline(prof, t, MLPRegressor(), "relu")


def test_estimator_is_not_modified_and_pipeline_clones_and_pickles():
    df, prof, t, X, y = _setup("multiclass")
    est = MLPClassifier(hidden_layer_sizes=(6,), max_iter=30, random_state=0)
    pipe = build_pipeline(prof, t, est, "softmax")
    assert pipe.named_steps["model"] is not est
    assert isinstance(pipe, Pipeline) and list(pipe.named_steps) == ["prep", "model"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipe.fit(X, y)
        again = clone(pipe).fit(X, y)
    assert not hasattr(est, "coefs_")
    restored = pickle.loads(pickle.dumps(pipe))
    np.testing.assert_array_equal(restored.predict(X), pipe.predict(X))
    np.testing.assert_array_equal(again.predict(X), pipe.predict(X))
    assert set(pipe.predict(X)) <= {"a", "b", "c"}


@pytest.mark.parametrize("kind,head", [("signed", "identity"), ("non_negative", "relu"),
                                       ("non_negative", "softplus"), ("count", "exp"),
                                       ("bounded", "logistic"), ("binary", "logistic"),
                                       ("multiclass", "softmax")])
def test_engine_networks_in_pipelines(kind, head):
    engine = pytest.importorskip("workbench.nets.engine")
    df, prof, t, X, y = _setup(kind)
    cls = engine.NetClassifier if t.task == "classification" else engine.NetRegressor
    pipe = build_pipeline(prof, t, cls(hidden_layer_sizes=(8,), max_iter=30, random_state=0),
                          head)
    assert fitted_estimator(pipe).get_params()["output_activation"] == head
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipe.fit(X, y)
    net = fitted_estimator(pipe)
    assert net.out_activation_ == head
    pred = pipe.predict(X)
    if kind in ("non_negative", "count"):
        assert pred.min() >= 0.0  # the head's range survives the positive-only scaling
    if kind == "bounded":
        assert 0.0 <= pred.min() and pred.max() <= 1.0
    if t.task == "classification":
        assert set(pred) <= set(t.classes)
    restored = pickle.loads(pickle.dumps(pipe))
    np.testing.assert_allclose(restored.predict(X).astype(object) == pred, True)
    clone(pipe)


# --------------------------------------------------------------------------- date parts


def test_date_parts_match_pandas_calendar():
    s = pd.Series(pd.to_datetime(["2024-02-29 13:45", "1999-12-31 23:59", None,
                                  "2026-01-05 00:00", "1969-07-20 20:17"]), name="when")
    X = s.to_frame()
    dp = DateParts().fit(X)
    assert dp.parts_ == [["year", "month", "day", "weekday", "hour", "minute", "dayofyear"]]
    Z = dp.transform(X)
    ok = s.notna().to_numpy()
    ref = np.column_stack([s.dt.year, s.dt.month, s.dt.day, s.dt.day_of_week, s.dt.hour,
                           s.dt.minute, s.dt.day_of_year]).astype(float)
    np.testing.assert_array_equal(Z[ok], ref[ok])
    assert np.isnan(Z[~ok]).all()
    assert list(dp.get_feature_names_out()) == [f"when_{p}" for p in dp.parts_[0]]


def test_date_parts_drop_parts_constant_in_training():
    X = pd.DataFrame({"d": pd.date_range("2024-03-01", periods=40, freq="D")})
    dp = DateParts().fit(X)
    assert "hour" not in dp.parts_[0] and "minute" not in dp.parts_[0]
    assert "year" not in dp.parts_[0]  # every training date is in 2024
    assert dp.transform(X).shape == (40, len(dp.parts_[0]))
    with pytest.raises(ValueError, match="unknown date parts"):
        DateParts(parts=("century",)).fit(X)


def test_date_parts_far_from_1970_match_python_datetime():
    import datetime as dt

    days = [dt.datetime(1500, 3, 1, 10, 5), dt.datetime(9999, 12, 31, 23, 59),
            dt.datetime(1900, 2, 28, 0, 0), dt.datetime(2000, 2, 29, 12, 30)]
    X = pd.DataFrame({"d": np.array(days, dtype="datetime64[s]")})
    Z = DateParts().fit(X).transform(X)
    # outside reference: Python's proleptic Gregorian calendar
    ref = [[d.year, d.month, d.day, d.weekday(), d.hour, d.minute, d.timetuple().tm_yday]
           for d in days]
    np.testing.assert_array_equal(Z, np.asarray(ref, dtype=float))


def test_boolean_column_with_gaps_is_imputed_and_one_hot_encoded():
    rng = np.random.default_rng(0)
    n = 60
    flag = pd.Series(rng.random(n) < 0.5, dtype=object)
    flag[::7] = np.nan
    df = pd.DataFrame({"flag": flag, "x": rng.normal(size=n), "y": rng.normal(size=n)})
    prof = profile_table(df, target="y")
    assert prof.column("flag").type == "boolean"
    t = analyse_target(df, "y")
    X, y = split_xy(df, t)
    ct = build_preprocessor(prof, t).fit(X)
    Z = ct.transform(X)
    assert list(ct.get_feature_names_out()) == ["numeric__x", "categorical__flag_False",
                                                "categorical__flag_True"]
    most = flag.dropna().astype(bool).value_counts().idxmax()
    gaps = flag.isna().to_numpy()
    col = 2 if most else 1
    assert np.all(Z[gaps, col] == 1.0)  # gaps filled with the most frequent value


def test_bool_column_without_gaps_is_one_hot_encoded():
    rng = np.random.default_rng(1)
    n = 40
    df = pd.DataFrame({"flag": rng.random(n) < 0.5, "x": rng.normal(size=n),
                       "y": rng.normal(size=n)})
    prof = profile_table(df, target="y")
    t = analyse_target(df, "y")
    assert feature_groups(prof, t)["boolean"] == ["flag"]
    X, y = split_xy(df, t)
    ct = build_preprocessor(prof, t).fit(X)
    Z = ct.transform(X)
    np.testing.assert_array_equal(Z[:, 2], df["flag"].to_numpy(float))  # the True column


def test_two_valued_float_target_is_regression():
    df = pd.DataFrame({"x": np.arange(20.0), "y": [0.25, 1.75] * 10})
    t = analyse_target(df, "y")
    assert t.task == "regression" and t.kind == "non_negative"
    df2 = pd.DataFrame({"x": np.arange(20.0), "y": [0.0, 1.0] * 10})
    assert analyse_target(df2, "y").kind == "binary"  # whole numbers: class labels


_KINDS = ["float", "int", "text", "bool", "date", "free", "empty"]


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10**6), n=st.integers(2, 50),
       kinds=st.lists(st.sampled_from(_KINDS), min_size=1, max_size=5),
       target=st.sampled_from(["float", "int", "text", "bool", "positive", "share"]))
def test_any_profiled_table_builds_and_fits_or_gives_an_input_error(seed, n, kinds, target):
    rng = np.random.default_rng(seed)
    cols = {}
    for j, k in enumerate(kinds):
        if k == "float":
            v = pd.Series(rng.normal(size=n))
        elif k == "int":
            v = pd.Series(rng.integers(0, 5, n))
        elif k == "text":
            v = pd.Series(rng.choice(["a", "b", "c"], n).astype(object))
        elif k == "bool":
            v = pd.Series(rng.random(n) < 0.5)
        elif k == "date":
            v = pd.Series(pd.Timestamp("2020-01-01")
                          + pd.to_timedelta(rng.integers(0, 900, n), "D"))
        elif k == "free":
            v = pd.Series([f"words {i} of a long remark" for i in rng.integers(0, 10**6, n)])
        else:
            v = pd.Series(np.full(n, np.nan))
        if k in ("float", "text") and n > 3:
            v[rng.random(n) < 0.2] = np.nan
        cols[f"c{j}"] = v
    cols["target"] = {"float": rng.normal(size=n), "int": rng.integers(0, 4, n),
                      "text": rng.choice(["x", "y", "z"], n), "bool": rng.random(n) < 0.5,
                      "positive": rng.gamma(1.0, 1.0, n), "share": rng.uniform(0, 1, n)}[target]
    df = pd.DataFrame(cols)
    try:
        prof = profile_table(df, target="target")
        t = analyse_target(df, "target")
        head = advise(t).output_head
        X, y = split_xy(df, t)
        est = MLPClassifier if t.task == "classification" else MLPRegressor
        if t.task == "regression" and head not in ("identity", "exp"):
            head = "identity"  # scikit-learn's MLPRegressor has no other heads
        pipe = build_pipeline(prof, t, est(hidden_layer_sizes=(2,), max_iter=2), head)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            pipe.fit(X, y)
        assert len(pipe.predict(X)) == len(X)
    except InputError as exc:
        assert "\n" not in str(exc)


# --------------------------------------------------------------------------- median imputation


def _same_fitted_imputer(ours, ref):
    """Every attribute of two fitted SimpleImputers equal (values, dtypes, shapes)."""
    assert type(ours) is SimpleImputer and ours.__dict__.keys() == ref.__dict__.keys()
    for key, want in ref.__dict__.items():
        got = ours.__dict__[key]
        if isinstance(want, np.ndarray):
            assert got.dtype == want.dtype and got.shape == want.shape, key
            np.testing.assert_array_equal(got, want, err_msg=key)
        elif isinstance(want, float) and np.isnan(want):
            assert np.isnan(got), key
        else:
            assert got == want, key


def _gappy(rng, n, m, share=0.3):
    X = rng.normal(size=(n, m)).round(1)  # rounded: ties, so even counts take two middles
    X[rng.random((n, m)) < share] = np.nan
    return X


@pytest.mark.parametrize("n", [1, 2, 5, 6, 101])
@pytest.mark.parametrize("keep_empty", [False, True])
def test_median_by_column_is_scikit_learns_simple_imputer(n, keep_empty):
    """Reference: scikit-learn's ``SimpleImputer(strategy="median").fit`` on the whole
    array: the same statistics (an all-NaN column gives NaN, or 0 with
    ``keep_empty_features``), attributes and dtypes, and the same imputed output, for
    float64 and float32 arrays with gaps, integer arrays and DataFrames of mixed
    integer and float columns; odd and even row counts."""
    rng = np.random.default_rng(n)
    X = _gappy(rng, n, 5)
    X[:, 2] = np.nan  # a column without any value
    ints = rng.integers(-3, 4, size=(n, 3))
    frame = pd.DataFrame({"i": ints[:, 0], "f": X[:, 0], "empty": X[:, 2], "j": ints[:, 1]})
    # integers beyond float64's 53 bits beside a float column (the whole fit takes them
    # as float64)
    big = pd.DataFrame({"big": 2**60 + 3 * ints[:, 2], "f": X[:, 1]})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # "Skipping features without any ..."
        for data in (X, X.astype(np.float32), ints, frame, big, np.asfortranarray(X)):
            ref = SimpleImputer(strategy="median", keep_empty_features=keep_empty).fit(data)
            ours = fit_median_by_column(
                SimpleImputer(strategy="median", keep_empty_features=keep_empty), data)
            _same_fitted_imputer(ours, ref)
            got, want = ours.transform(data), ref.transform(data)
            assert got.dtype == want.dtype
            np.testing.assert_array_equal(got, want)
    # and NumPy's numpy.nanmedian of each column that has a value
    full = X[:, [0, 1, 3, 4]]
    has = ~np.isnan(full).all(axis=0)
    np.testing.assert_array_equal(
        fit_median_by_column(SimpleImputer(strategy="median"), full).statistics_[has],
        np.nanmedian(full[:, has], axis=0))


@settings(max_examples=40, deadline=None)
@given(st.integers(1, 40), st.integers(1, 4), st.floats(0.0, 1.0), st.integers(0, 2**16))
def test_median_by_column_equals_scikit_learn_on_any_gappy_array(n, m, share, seed):
    """Reference: scikit-learn's ``SimpleImputer(strategy="median")`` (hypothesis draws
    shapes and shares of gaps, all-NaN columns included)."""
    X = _gappy(np.random.default_rng(seed), n, m, share)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        _same_fitted_imputer(fit_median_by_column(SimpleImputer(strategy="median"), X),
                             SimpleImputer(strategy="median").fit(X))


def test_median_by_column_leaves_other_imputers_to_scikit_learn(monkeypatch):
    """Text, another strategy or the missing indicator: scikit-learn's own fit runs."""
    calls = []
    real = SimpleImputer.fit

    def spy(self, X, y=None):
        calls.append(len(X))
        return real(self, X, y)

    monkeypatch.setattr(SimpleImputer, "fit", spy)
    X = _gappy(np.random.default_rng(0), 30, 3)
    texts = np.array([["a"], ["b"], ["a"], [np.nan]], dtype=object)
    fit_median_by_column(SimpleImputer(strategy="most_frequent"), texts)
    fit_median_by_column(SimpleImputer(strategy="mean"), X)
    fit_median_by_column(SimpleImputer(strategy="median", add_indicator=True), X)
    assert calls == [4, 30, 30]  # each fitted whole, once
    calls.clear()
    fit_median_by_column(SimpleImputer(strategy="median"), X)
    assert calls == [1, 30, 30, 30]  # the first row, then each column


def test_imputer_fit_holds_one_column_at_a_time():
    """The structural memory claim, measured with :mod:`tracemalloc` (allocations, not
    timings): fitting column by column allocates at most a fraction of the array, while
    scikit-learn's whole-array fit (masked arrays, sorted copies) allocates several
    times its size -- the bound separates the two."""
    import tracemalloc

    X = _gappy(np.random.default_rng(1), 20_000, 20, 0.1)

    def peak(fit):
        tracemalloc.start()
        try:
            fit()
            return tracemalloc.get_traced_memory()[1]
        finally:
            tracemalloc.stop()

    ours = peak(lambda: fit_median_by_column(SimpleImputer(strategy="median"), X))
    whole = peak(lambda: SimpleImputer(strategy="median").fit(X))
    assert ours < 0.5 * X.nbytes < 2 * X.nbytes < whole


def test_columnwise_preprocessor_gives_scikit_learns_numbers():
    """``columnwise_medians=True`` (the sweep's trials): the numeric and date groups are
    :class:`ImputeColumnwise`. Reference: the default preprocessor (plain scikit-learn
    ``Pipeline`` groups) fitted by scikit-learn -- the same output bit for bit, on the
    training rows and on new rows, and the same fitted imputers and scalers."""
    df, prof, t, X, y = _setup()
    X.loc[X.index[:7], "k"] = np.nan
    ct = build_preprocessor(prof, t, columnwise_medians=True)
    ref = build_preprocessor(prof, t)
    groups = {n: g for n, g, _ in ct.transformers}
    assert type(groups["numeric"]) is type(groups["datetime"]) is ImputeColumnwise
    assert {type(g) for n, g, _ in ref.transformers if n in ("numeric", "datetime")} == {Pipeline}
    np.testing.assert_array_equal(ct.fit_transform(X.iloc[:150]), ref.fit_transform(X.iloc[:150]))
    np.testing.assert_array_equal(ct.transform(X.iloc[150:]), ref.transform(X.iloc[150:]))
    for (name, group, _), (_, want, _) in zip(ct.transformers_, ref.transformers_):
        if name in ("numeric", "datetime"):
            for (_, a), (_, b) in zip(group.steps, want.steps):
                assert type(a) is type(b)
                if isinstance(b, SimpleImputer):
                    _same_fitted_imputer(a, b)
                if isinstance(b, StandardScaler):
                    np.testing.assert_array_equal(a.mean_, b.mean_)
                    np.testing.assert_array_equal(a.scale_, b.scale_)
    pipe = build_pipeline(prof, t, MLPRegressor(max_iter=5), "identity", columnwise_medians=True)
    assert type(pipe.named_steps["prep"].transformers[0][1]) is ImputeColumnwise
    # what an export builds keeps scikit-learn's classes and prints its steps as before
    plain = build_pipeline(prof, t, MLPRegressor(max_iter=5), "identity")
    assert b"ImputeColumnwise" not in pickle.dumps(plain.fit(X, y))
    assert [repr(s) for _, s in ref.transformers[0][1].steps] == \
        ["SimpleImputer(strategy='median')", "StandardScaler()"]


def test_columnwise_fit_is_what_the_preprocessor_runs(monkeypatch):
    """Wiring: with ``columnwise_medians=True`` the numeric and the date groups' imputers
    are fitted by :func:`fit_median_by_column` (3 numeric columns, then the date parts);
    by default never."""
    seen = []
    real = P.fit_median_by_column

    def spy(imputer, X):
        seen.append(X.shape[1])
        return real(imputer, X)

    monkeypatch.setattr(P, "fit_median_by_column", spy)
    df, prof, t, X, y = _setup()
    build_preprocessor(prof, t).fit(X)
    assert seen == []
    ct = build_preprocessor(prof, t, columnwise_medians=True).fit(X)
    n_dates = len(ct.named_transformers_["datetime"].named_steps["parts"].parts_[0])
    assert seen == [3, n_dates]
