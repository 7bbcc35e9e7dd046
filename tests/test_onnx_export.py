"""ONNX export: onnxruntime agrees with the in-memory pipeline.

Reference: onnxruntime (the ONNX reference runtime's production sibling) executing
the graph versus scikit-learn's ``Pipeline.predict`` / ``predict_proba`` on the
same rows; tolerance 1e-4 in float32 as the export issue requires.
"""

from __future__ import annotations

import warnings

import numpy as np
import onnx
import onnx.numpy_helper
import pandas as pd
import pytest
from sklearn.compose import ColumnTransformer
from sklearn.exceptions import ConvergenceWarning
from sklearn.impute import SimpleImputer
from sklearn.neural_network import MLPClassifier, MLPRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler

from workbench.errors import InputError
from workbench.export import onnx_graph as ox
from workbench.nets.activations import HEADS, HIDDEN
from workbench.nets.engine import NetClassifier, NetRegressor

TOL = 1e-4

_rng = np.random.default_rng(7)
N = 48
TABLE = pd.DataFrame({
    "x1": _rng.normal(size=N) * 3 + 1,
    "x2": _rng.normal(size=N),
    "colour": _rng.choice(["red", "green", "blue"], N),
})
TABLE.loc[[2, 9], "x1"] = np.nan
TABLE.loc[[4], "colour"] = np.nan
_signal = np.nan_to_num(TABLE["x1"].to_numpy()) / 3 + np.sin(TABLE["x2"].to_numpy()) \
    + (TABLE["colour"] == "red").to_numpy()

#: a target that suits each regression head (the engine refuses out-of-range targets)
REG_TARGETS = {
    "identity": _signal,
    "exp": np.round(np.exp(_signal / 2)),
    "relu": _signal - _signal.min(),
    "softplus": _signal - _signal.min(),
    "logistic": (_signal - _signal.min()) / np.ptp(_signal),
}
BINARY = np.where(_signal > np.median(_signal), "high", "low")
MULTI = np.digitize(_signal, np.quantile(_signal, [1 / 3, 2 / 3]))


def _preprocessor():
    # the shape of workbench.data.preprocessing's ColumnTransformer: median + scaling for
    # numbers, most frequent + one-hot for categories
    return ColumnTransformer([
        ("num", make_pipeline(SimpleImputer(strategy="median"), StandardScaler()), ["x1", "x2"]),
        ("cat", make_pipeline(SimpleImputer(strategy="most_frequent"),
                              OneHotEncoder(handle_unknown="ignore")), ["colour"]),
    ])


def _fit(est, y):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        return make_pipeline(_preprocessor(), est).fit(TABLE, y)


REG_CASES = [(h, head) for h in HIDDEN for (task, head) in HEADS if task == "regression"]
CLF_CASES = [(h, head) for h in HIDDEN for (task, head) in HEADS if task == "classification"]


def test_cases_cover_every_activation_and_head():
    assert {h for h, _ in REG_CASES} == set(HIDDEN)
    assert {hd for _, hd in REG_CASES} | {hd for _, hd in CLF_CASES} == {n for _, n in HEADS}


@pytest.mark.parametrize(("hidden", "head"), REG_CASES)
def test_regressor_agrees_with_pipeline(hidden, head):
    # two hidden layers, the second with a different activation: per-layer names are honoured
    net = NetRegressor((7, 5), (hidden, "tanh" if hidden != "tanh" else "relu"),
                       output_activation=head, max_iter=15, random_state=0)
    pipe = _fit(net, REG_TARGETS[head])
    model = ox.pipeline_to_onnx(pipe, TABLE)
    assert {o.domain: o.version for o in model.opset_import}[""] >= 17
    out = ox.run_onnx(model, TABLE)
    np.testing.assert_allclose(out["variable"].ravel(), pipe.predict(TABLE), rtol=TOL, atol=TOL)


@pytest.mark.parametrize(("hidden", "head"), CLF_CASES)
def test_classifier_agrees_with_pipeline(hidden, head):
    y = BINARY if head == "logistic" else MULTI
    pipe = _fit(NetClassifier((6,), hidden, output_activation=head, max_iter=15,
                              random_state=1), y)
    out = ox.run_onnx(ox.pipeline_to_onnx(pipe, TABLE), TABLE)
    np.testing.assert_allclose(out["probabilities"], pipe.predict_proba(TABLE), atol=TOL)
    np.testing.assert_array_equal(out["label"].ravel(), pipe.predict(TABLE))


def test_float64_engine_exports_to_float32_graph():
    # onnxruntime's ai.onnx.ml operators (Imputer, Scaler) compute in float32, so a
    # float64 network is exported as a float32 graph, still within the tolerance
    net = NetRegressor((6,), "gelu", max_iter=10, random_state=0, dtype="float64")
    pipe = _fit(net, REG_TARGETS["identity"])
    model = ox.pipeline_to_onnx(pipe, TABLE)
    out = ox.run_onnx(model, TABLE)
    assert out["variable"].dtype == np.float32
    np.testing.assert_allclose(out["variable"].ravel(), pipe.predict(TABLE), rtol=TOL, atol=TOL)


def test_leaky_slope_is_carried():
    net = NetRegressor((6,), "leaky_relu", leaky_slope=0.3, max_iter=10, random_state=0)
    pipe = _fit(net, REG_TARGETS["identity"])
    model = ox.pipeline_to_onnx(pipe, TABLE)
    alphas = [a.f for n in model.graph.node if n.op_type == "LeakyRelu" for a in n.attribute]
    assert alphas and np.allclose(alphas, 0.3)
    out = ox.run_onnx(model, TABLE)
    np.testing.assert_allclose(out["variable"].ravel(), pipe.predict(TABLE), rtol=TOL, atol=TOL)


@pytest.mark.parametrize("hidden", ["identity", "logistic", "tanh", "relu"])
def test_sklearn_mlp_is_converted_natively(hidden):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        reg = make_pipeline(_preprocessor(), MLPRegressor(hidden_layer_sizes=(5,), activation=hidden, max_iter=20,
                                                          random_state=0)).fit(TABLE, _signal)
        clf = make_pipeline(_preprocessor(), MLPClassifier(hidden_layer_sizes=(5,), activation=hidden, max_iter=20,
                                                           random_state=0)).fit(TABLE, MULTI)
    out = ox.run_onnx(ox.pipeline_to_onnx(reg, TABLE), TABLE)
    np.testing.assert_allclose(out["variable"].ravel(), reg.predict(TABLE), rtol=TOL, atol=TOL)
    out = ox.run_onnx(ox.pipeline_to_onnx(clf, TABLE), TABLE)
    np.testing.assert_allclose(out["probabilities"], clf.predict_proba(TABLE), atol=TOL)


def test_awkward_column_names_and_saved_file(tmp_path):
    names = {"x1": "<script>alert(1)</script>", "x2": '=HYPERLINK("http://x")',
             "colour": "colour name"}
    table = TABLE.rename(columns=names)
    pre = ColumnTransformer([
        ("num", make_pipeline(SimpleImputer(strategy="median"), StandardScaler()),
         [names["x1"], names["x2"]]),
        ("cat", make_pipeline(SimpleImputer(strategy="most_frequent"),
                              OneHotEncoder(handle_unknown="ignore")), [names["colour"]]),
    ])
    pipe = make_pipeline(pre, NetRegressor((4,), "silu", max_iter=10, random_state=0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        pipe.fit(table, _signal)
    path = tmp_path / "m.onnx"
    onnx.save(ox.pipeline_to_onnx(pipe, table), str(path))
    onnx.checker.check_model(onnx.load(str(path)), full_check=True)
    out = ox.run_onnx(path, table)
    np.testing.assert_allclose(out["variable"].ravel(), pipe.predict(table), rtol=TOL, atol=TOL)
    # columns are found by name, so the order of the table does not matter
    out2 = ox.run_onnx(path, table[table.columns[::-1]])
    np.testing.assert_array_equal(out["variable"], out2["variable"])
    with pytest.raises(InputError, match="colour name"):
        ox.run_onnx(path, table.drop(columns=[names["colour"]]))


# --------------------------------------------------------------------------- the registry's forms


class _Graph:
    """A minimal graph builder with the protocol the registry's ONNX forms write into
    (``node``, ``const``, ``np_dtype``), built with ``onnx.helper``."""

    def __init__(self, np_dtype):
        self.np_dtype = np_dtype
        self.nodes, self.inits, self._n = [], [], 0

    def _name(self, hint):
        self._n += 1
        return f"{hint}_{self._n}"

    def node(self, op, inputs, output=None, **attributes):
        out = output or self._name(op.lower())
        self.nodes.append(onnx.helper.make_node(op, list(inputs), [out], **attributes))
        return out

    def const(self, hint, value):
        name = self._name(hint)
        self.inits.append(onnx.numpy_helper.from_array(np.asarray(value, self.np_dtype), name))
        return name

    def run(self, form, z, **params):
        import onnxruntime as ort

        elem = onnx.helper.np_dtype_to_tensor_dtype(np.dtype(self.np_dtype))
        out = form(self, "z", output="y", **params)
        assert out == "y"
        graph = onnx.helper.make_graph(
            self.nodes, "form", [onnx.helper.make_tensor_value_info("z", elem, list(z.shape))],
            [onnx.helper.make_tensor_value_info("y", elem, list(z.shape))], self.inits)
        model = onnx.helper.make_model(graph, opset_imports=[onnx.helper.make_opsetid("", 17)])
        sess = ort.InferenceSession(model.SerializeToString(), providers=["CPUExecutionProvider"])
        return sess.run(None, {"z": z})[0]


_Z = np.linspace(-6, 6, 49, dtype=np.float32).reshape(-1, 1)


@pytest.mark.parametrize("name", list(HIDDEN))
def test_every_hidden_activation_has_an_onnx_form(name):
    """The registry entry's ONNX form, run alone by onnxruntime, computes the entry's own
    forward function (itself checked against SciPy in test_activations)."""
    entry = HIDDEN[name]
    params = entry.with_params(slope=0.2)
    got = _Graph(np.float32).run(entry.onnx, _Z, **params)
    np.testing.assert_allclose(got, entry.forward(_Z.astype(np.float64), **params), rtol=2e-6,
                               atol=2e-6)


@pytest.mark.parametrize("key", list(HEADS), ids=lambda k: f"{k[0]}-{k[1]}")
def test_every_head_has_an_onnx_form(key):
    head = HEADS[key]
    z = np.hstack([_Z, -_Z, 0.5 * _Z]) if head.distribution else _Z
    got = _Graph(np.float32).run(head.onnx, z)
    np.testing.assert_allclose(got, head.apply_(z.astype(np.float64)), rtol=2e-6, atol=2e-6)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_exp_head_form_clips_as_the_engine_in_each_float_type(dtype):
    """e^z is clipped below the float type's overflow in the graph as in the engine."""
    head = HEADS[("regression", "exp")]
    z = np.array([[-5.0], [1.0], [1e4]], dtype=dtype)
    got = _Graph(dtype).run(head.onnx, z)
    assert np.all(np.isfinite(got))
    np.testing.assert_allclose(got, head.apply_(z.copy()), rtol=1e-6)


def test_the_converter_emits_the_registrys_form(monkeypatch):
    """The graph is built from the registry entry's form: replace tanh's form and the
    exported graph changes with it (and no longer agrees with the pipeline)."""
    import dataclasses

    from workbench.nets import activations as act

    def cubic(graph, z, output=None, **_):
        return graph.node("Mul", [z, graph.node("Mul", [z, z])], output=output)

    pipe = _fit(NetRegressor((4,), "tanh", max_iter=5, random_state=0), _signal)
    ops = {n.op_type for n in ox.pipeline_to_onnx(pipe, TABLE).graph.node}
    assert "Tanh" in ops
    monkeypatch.setitem(act.HIDDEN, "tanh", dataclasses.replace(act.HIDDEN["tanh"], onnx=cubic))
    model = ox.pipeline_to_onnx(pipe, TABLE)
    assert "Tanh" not in {n.op_type for n in model.graph.node}
    assert not np.allclose(ox.run_onnx(model, TABLE)["variable"].ravel(), pipe.predict(TABLE),
                           rtol=TOL, atol=TOL)


def test_opset_below_17_is_refused():
    pipe = _fit(NetRegressor((3,), max_iter=3, random_state=0), _signal)
    with pytest.raises(ValueError, match="17"):
        ox.pipeline_to_onnx(pipe, TABLE, opset=15)


# --------------------------------------------------------------------------- the real pipeline


def _mixed_table(n=80, seed=0):
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({
        "num": rng.normal(size=n),
        "count": rng.integers(0, 100, n),
        "shade": rng.choice(["pale", "mid", "dark"], n),
        "flag": rng.choice([True, False], n),
        # dates on both sides of 1970 and across leap days, with times of day
        "when": pd.to_datetime("1955-02-27") + pd.to_timedelta(rng.integers(0, 30000, n), "D")
        + pd.to_timedelta(rng.integers(0, 86400, n), "s"),
    })
    df.loc[3, "when"] = pd.NaT
    df.loc[5, "shade"] = np.nan
    df.loc[6, "num"] = np.nan
    signal = df["num"].fillna(0) * 2 + (df["shade"] == "dark") + df["when"].dt.month.fillna(6) / 6
    return df, signal.to_numpy()


@pytest.mark.parametrize("head", ["identity", "relu", "logistic", "exp"])
def test_build_pipeline_regression_with_target_scaling(head):
    from workbench.data.preprocessing import build_pipeline
    from workbench.data.profiling import analyse_target, profile_table, split_xy

    df, signal = _mixed_table()
    target = {"identity": signal, "relu": signal - signal.min(),
              "logistic": (signal - signal.min()) / np.ptp(signal),
              "exp": np.round(np.exp(signal / 1.5) * 5)}[head]
    df["y"] = target
    prof = profile_table(df, target="y")
    info = analyse_target(df, "y")
    X, y = split_xy(df, info)
    pipe = build_pipeline(prof, info, NetRegressor((6,), "softplus", max_iter=15,
                                                   random_state=0), head)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        pipe.fit(X, y)
    out = ox.run_onnx(ox.pipeline_to_onnx(pipe, X), X)
    # predictions are in the user's units (the target scaler is inverted inside the graph)
    np.testing.assert_allclose(out["variable"].ravel(), pipe.predict(X), rtol=TOL, atol=TOL)


def test_build_pipeline_classification_with_dates_and_booleans():
    from workbench.data.preprocessing import build_pipeline
    from workbench.data.profiling import analyse_target, profile_table, split_xy

    df, signal = _mixed_table(seed=3)
    df["grade"] = np.digitize(signal, np.quantile(signal, [0.33, 0.66])).astype(str)
    prof = profile_table(df, target="grade")
    info = analyse_target(df, "grade")
    X, y = split_xy(df, info)
    pipe = build_pipeline(prof, info, NetClassifier((6,), "gelu", max_iter=15,
                                                    random_state=0), "softmax")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        pipe.fit(X, y)
    out = ox.run_onnx(ox.pipeline_to_onnx(pipe, X), X)
    np.testing.assert_allclose(out["probabilities"], pipe.predict_proba(X), atol=TOL)
    np.testing.assert_array_equal(out["label"].ravel(), pipe.predict(X))


def test_date_parts_graph_matches_pandas_calendar():
    # reference: pandas' own calendar accessors (.dt.year, .dt.month, ...)
    from workbench.data.preprocessing import DateParts

    when = pd.Series(pd.to_datetime([
        "1900-03-01 00:00", "1969-12-31 23:59:59", "1970-01-01", "2000-02-29 12:30",
        "2024-12-31 06:07", "2100-02-28 23:00", "1700-01-01", None, "2023-07-15 18:45"],
        format="ISO8601"))
    df = pd.DataFrame({"when": when})
    parts = DateParts().fit(df)
    out = ox.run_onnx(ox.pipeline_to_onnx(parts, df), df)["variable"]
    ref = pd.DataFrame({"year": when.dt.year, "month": when.dt.month, "day": when.dt.day,
                        "weekday": when.dt.day_of_week, "hour": when.dt.hour,
                        "minute": when.dt.minute, "dayofyear": when.dt.day_of_year})
    ref = ref[parts.parts_[0]].to_numpy(dtype=float)
    np.testing.assert_array_equal(out, ref.astype(np.float32))
    np.testing.assert_array_equal(out, parts.transform(df).astype(np.float32))


@pytest.mark.parametrize(("task", "head"), [("regression", "identity"), ("regression", "exp"),
                                            ("classification", "logistic"),
                                            ("classification", "softmax")])
def test_build_pipeline_with_sklearn_engine(task, head):
    # the configurations a sweep trains with scikit-learn's own MLP (plan engine "sklearn")
    from workbench.data.preprocessing import build_pipeline
    from workbench.data.profiling import analyse_target, profile_table, split_xy

    df, signal = _mixed_table(seed=5)
    if task == "regression":
        df["y"] = signal if head == "identity" else np.round(np.exp(signal / 1.5) * 5)
        est = MLPRegressor(hidden_layer_sizes=(5,), activation="tanh", max_iter=30,
                           random_state=0)
    else:
        q = [0.5] if head == "logistic" else [0.33, 0.66]
        df["y"] = np.array(["lo", "mid", "hi"])[np.digitize(signal, np.quantile(signal, q))]
        est = MLPClassifier(hidden_layer_sizes=(5,), activation="relu", max_iter=30,
                            random_state=0)
    prof, info = profile_table(df, target="y"), analyse_target(df, "y")
    X, y = split_xy(df, info)
    pipe = build_pipeline(prof, info, est, head)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        pipe.fit(X, y)
    out = ox.run_onnx(ox.pipeline_to_onnx(pipe, X), X)
    if task == "regression":
        np.testing.assert_allclose(out["variable"].ravel(), pipe.predict(X), rtol=TOL, atol=TOL)
    else:
        np.testing.assert_allclose(out["probabilities"], pipe.predict_proba(X), atol=TOL)
        np.testing.assert_array_equal(out["label"].ravel(), pipe.predict(X))


def test_numeric_category_codes_match_with_and_without_missing_values():
    # scikit-learn's one-hot encoder treats 2 and 2.0 as the same category; so must the graph
    rng = np.random.default_rng(2)
    df = pd.DataFrame({"code": rng.integers(1, 5, 60), "x": rng.normal(size=60)})
    pre = ColumnTransformer([
        ("num", make_pipeline(SimpleImputer(strategy="median"), StandardScaler()), ["x"]),
        ("cat", make_pipeline(SimpleImputer(strategy="most_frequent"),
                              OneHotEncoder(handle_unknown="ignore")), ["code"]),
    ])
    pipe = make_pipeline(pre, NetRegressor((4,), "elu", max_iter=10, random_state=0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        pipe.fit(df, df["code"] * 0.5 + df["x"])
    model = ox.pipeline_to_onnx(pipe, df)
    later = df.astype({"code": float})
    later.loc[[0, 5], "code"] = np.nan  # new rows with gaps: the column turns float
    for table in (df, later):
        out = ox.run_onnx(model, table)
        np.testing.assert_allclose(out["variable"].ravel(), pipe.predict(table), rtol=TOL,
                                   atol=TOL)


def test_unseen_category_and_new_gaps_at_prediction_time():
    # handle_unknown="ignore": an unseen category is all zeros in scikit-learn and in the graph
    pipe = _fit(NetRegressor((4,), "relu", max_iter=5, random_state=0), _signal)
    model = ox.pipeline_to_onnx(pipe, TABLE)
    later = TABLE.copy()
    later.loc[0, "colour"] = "purple"
    later.loc[1, "x2"] = np.nan
    np.testing.assert_allclose(ox.run_onnx(model, later)["variable"].ravel(),
                               pipe.predict(later), rtol=TOL, atol=TOL)


def test_boolean_labels_travel_as_text():
    pipe = _fit(NetClassifier((4,), "relu", max_iter=5, random_state=0), BINARY == "high")
    out = ox.run_onnx(ox.pipeline_to_onnx(pipe, TABLE), TABLE)
    np.testing.assert_array_equal(out["label"].ravel(), pipe.predict(TABLE).astype(str))


@pytest.mark.parametrize("hidden", ["relu", "gelu"])
def test_binary_target_under_a_softmax_head(hidden):
    """Two classes with a two-unit softmax head: onnxruntime agrees with predict_proba."""
    pipe = _fit(NetClassifier((6,), hidden, output_activation="softmax", max_iter=15,
                              random_state=1), BINARY)
    assert pipe[-1].n_outputs_ == 2
    out = ox.run_onnx(ox.pipeline_to_onnx(pipe, TABLE), TABLE)
    np.testing.assert_allclose(out["probabilities"], pipe.predict_proba(TABLE), atol=TOL)
    np.testing.assert_array_equal(out["label"].ravel(), pipe.predict(TABLE))
