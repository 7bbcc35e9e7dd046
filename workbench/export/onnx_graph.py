"""ONNX conversion of fitted pipelines, including the project's own estimators.

scikit-learn pipelines are converted with skl2onnx. skl2onnx knows scikit-learn's
own steps (``ColumnTransformer``, ``SimpleImputer``, ``StandardScaler``,
``OneHotEncoder``, ``MLPRegressor``, ``MLPClassifier``); this module registers
converters (a shape calculator plus a converter) for the steps it does not know:

- :class:`workbench.nets.engine.NetRegressor` and :class:`workbench.nets.engine.NetClassifier`,
  for every hidden activation of :data:`workbench.nets.activations.HIDDEN` and every
  output head of :data:`workbench.nets.activations.HEADS`;
- the target scaler of :mod:`workbench.data.preprocessing` (predictions in user units);
- the datetime-parts transformer of :mod:`workbench.data.preprocessing`;
- scikit-learn's ``MLPRegressor`` too, because skl2onnx's own converter has no
  exponential output (``loss="poisson"``); ``MLPClassifier`` keeps skl2onnx's.

The network graph is the engine's forward pass written with standard ONNX
operators (opset 17 or newer)::

    a = X
    for each hidden layer:  a = f(a @ W + b)
    out = head(a @ W + b)

Each hidden activation and each head is emitted by the ONNX form its registry
entry carries (:attr:`workbench.nets.activations.Activation.onnx`,
:attr:`workbench.nets.activations.Head.onnx`); this module only wires the layers
together. :class:`_Emitter` is the graph builder those forms write into.

Tables are fed as one ONNX input per column (numeric columns as float tensors,
text and category columns as string tensors, datetime columns as int64 seconds
since 1970-01-01 UTC), each of shape ``[N, 1]``; :func:`onnx_feed` builds that
feed from a DataFrame.

References
----------
ONNX operator specification, https://onnx.ai/onnx/operators/ (opset 17).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from workbench.errors import InputError
from workbench.nets.activations import HIDDEN, LEAKY_SLOPE, resolve_head, resolve_hidden_layers

#: the opset every export targets (the issue asks for 17 or newer)
TARGET_OPSET = 17
#: the ai.onnx.ml opset used with it (OneHotEncoder, Imputer, Scaler, ...)
TARGET_ML_OPSET = 3

_FLOAT = 1  # onnx.TensorProto.FLOAT
_DOUBLE = 11  # onnx.TensorProto.DOUBLE
_INT64 = 7
_STRING = 8

_registered = False

#: the ``metadata_props`` keys an export writes: the column list and a classifier's labels
COLUMNS_KEY = "workbench.columns"
CLASSES_KEY = "workbench.classes"


# --------------------------------------------------------------------------- network spec


def network_spec(est, task: str | None = None) -> dict:
    """The pieces of a fitted multilayer network the ONNX graph needs.

    Works for the project's engine (``activation`` may be one name or one per
    hidden layer, ``out_activation_`` any registered head, ``leaky_slope``) and
    for scikit-learn's ``MLPRegressor`` / ``MLPClassifier``.

    Parameters
    ----------
    est : fitted estimator
    task : {"regression", "classification"}, optional
        Whose head ``out_activation_`` names; by default classification when
        ``est`` has ``classes_``.

    Returns
    -------
    dict
        ``coefs`` (list of arrays), ``intercepts``, ``hidden`` (one canonical
        activation name per hidden layer), ``head`` (the output head's registry
        entry, :class:`workbench.nets.activations.Head`) and ``slope`` (leaky ReLU slope).
    """
    coefs = [np.asarray(w) for w in est.coefs_]
    intercepts = [np.asarray(b) for b in est.intercepts_]
    names = getattr(est, "hidden_activations_", None) or est.activation
    hidden = resolve_hidden_layers(names, len(coefs) - 1)
    if task is None:
        task = "classification" if hasattr(est, "classes_") else "regression"
    head = resolve_head(str(est.out_activation_), task)
    slope = float(getattr(est, "leaky_slope", LEAKY_SLOPE))
    return {"coefs": coefs, "intercepts": intercepts, "hidden": hidden, "head": head,
            "slope": slope}


# --------------------------------------------------------------------------- graph pieces


class _Emitter:
    """Small helper that writes nodes and constants into a skl2onnx container."""

    def __init__(self, scope, container, proto_dtype):
        self.scope = scope
        self.container = container
        self.dtype = proto_dtype
        self.np_dtype = np.float64 if proto_dtype == _DOUBLE else np.float32

    def name(self, hint: str) -> str:
        return self.scope.get_unique_variable_name(hint)

    def const(self, hint: str, value, dtype=None) -> str:
        arr = np.asarray(value, dtype=self.np_dtype if dtype is None else dtype)
        n = self.name(hint)
        onnx_type = {np.dtype(np.float32): _FLOAT, np.dtype(np.float64): _DOUBLE,
                     np.dtype(np.int64): _INT64}[arr.dtype]
        self.container.add_initializer(n, onnx_type, list(arr.shape), arr.ravel().tolist())
        return n

    def node(self, op: str, inputs, hint: str | None = None, output: str | None = None,
             domain: str = "", **attrs) -> str:
        out = output or self.name(hint or op.lower())
        kw = {"op_domain": domain} if domain else {}
        self.container.add_node(op, list(inputs) if not isinstance(inputs, str) else [inputs],
                                [out], name=self.scope.get_unique_operator_name(op),
                                **kw, **attrs)
        return out


def _forward(em: _Emitter, spec: dict, x: str, output: str | None = None) -> str:
    a = em.node("Cast", [x], hint="net_input", to=em.dtype)
    n = len(spec["coefs"])
    for i, (w, b) in enumerate(zip(spec["coefs"], spec["intercepts"])):
        wn = em.const(f"W{i}", w)
        bn = em.const(f"b{i}", np.reshape(b, (1, -1)))
        z = em.node("Add", [em.node("MatMul", [a, wn]), bn], hint=f"z{i}")
        if i < n - 1:
            # the activation's ONNX form is its registry entry's
            activation = HIDDEN[spec["hidden"][i]]
            a = activation.onnx(em, z, **activation.with_params(slope=spec["slope"]))
        else:
            return spec["head"].onnx(em, z, output=output)
    raise ValueError("a network needs at least one layer")  # pragma: no cover


def _float_type(input_type):
    from skl2onnx.common.data_types import DoubleTensorType, FloatTensorType

    return DoubleTensorType if isinstance(input_type, DoubleTensorType) else FloatTensorType


def _proto_dtype(input_type) -> int:
    from skl2onnx.common.data_types import DoubleTensorType

    return _DOUBLE if isinstance(input_type, DoubleTensorType) else _FLOAT


# --------------------------------------------------------------------------- regressor


def _net_regressor_shape(operator):
    inp = operator.inputs[0]
    n = inp.get_first_dimension()
    n_out = int(np.asarray(operator.raw_operator.coefs_[-1]).shape[1])
    operator.outputs[0].type = _float_type(inp.type)([n, n_out])


def _net_regressor_convert(scope, operator, container):
    em = _Emitter(scope, container, _proto_dtype(operator.inputs[0].type))
    spec = network_spec(operator.raw_operator, "regression")
    _forward(em, spec, operator.inputs[0].full_name, output=operator.outputs[0].full_name)


# --------------------------------------------------------------------------- classifier


def _label_kind(classes) -> str:
    # integer labels stay int64; everything else (text, booleans, floats) travels as text,
    # spelled as str() spells the label (True, 0.5, ...)
    classes = np.asarray(classes)
    if classes.dtype.kind in "iu":
        return "int"
    return "str"


def _net_classifier_shape(operator):
    from skl2onnx.common.data_types import Int64TensorType, StringTensorType

    inp = operator.inputs[0]
    n = inp.get_first_dimension()
    classes = operator.raw_operator.classes_
    label_t = Int64TensorType if _label_kind(classes) == "int" else StringTensorType
    operator.outputs[0].type = label_t([n])
    operator.outputs[1].type = _float_type(inp.type)([n, len(classes)])


def _net_classifier_convert(scope, operator, container):
    est = operator.raw_operator
    em = _Emitter(scope, container, _proto_dtype(operator.inputs[0].type))
    spec = network_spec(est, "classification")
    classes = np.asarray(est.classes_)
    proba_out = operator.outputs[1].full_name
    width = spec["coefs"][-1].shape[1]
    if width == 1:
        # binary: one logistic unit gives P(classes_[1]); stack [1 - p, p]
        p = _forward(em, spec, operator.inputs[0].full_name)
        q = em.node("Sub", [em.const("one", 1.0), p])
        em.node("Concat", [q, p], output=proba_out, axis=1)
    else:
        _forward(em, spec, operator.inputs[0].full_name, output=proba_out)
    idx = em.node("ArgMax", [proba_out], axis=1, keepdims=0)
    if _label_kind(classes) == "int":
        table = em.const("classes", classes.astype(np.int64), dtype=np.int64)
        em.node("Gather", [table, idx], output=operator.outputs[0].full_name, axis=0)
    else:
        n = em.name("classes")
        container.add_initializer(n, _STRING, [len(classes)],
                                  [str(c).encode("utf-8") for c in classes])
        em.node("Gather", [n, idx], output=operator.outputs[0].full_name, axis=0)


def _classifier_parser_for(alias: str):
    """A skl2onnx parser declaring the classifier's outputs: label, then probabilities."""

    def parse(scope, model, inputs, custom_parsers=None):
        from skl2onnx.common.data_types import FloatTensorType, Int64TensorType

        op = scope.declare_local_operator(alias, model)
        op.inputs = inputs
        op.outputs.append(scope.declare_local_variable("label", Int64TensorType()))
        op.outputs.append(scope.declare_local_variable("probabilities", FloatTensorType()))
        return op.outputs

    return parse


# --------------------------------------------------------------------------- registration


def register_network_estimator(cls, task: str) -> None:
    """Register an estimator class exposing the engine's fitted attributes.

    Parameters
    ----------
    cls : type
        A class whose fitted instances have ``coefs_``, ``intercepts_``,
        ``activation``, ``out_activation_`` (and ``classes_`` for classifiers).
    task : {"regression", "classification"}
    """
    from skl2onnx import update_registered_converter

    alias = f"Workbench{cls.__name__}"
    if task == "regression":
        update_registered_converter(cls, alias, _net_regressor_shape, _net_regressor_convert)
    elif task == "classification":
        update_registered_converter(cls, alias, _net_classifier_shape, _net_classifier_convert,
                                    parser=_classifier_parser_for(alias))
    else:
        raise ValueError(f"task must be 'regression' or 'classification', not {task!r}")


def register_converters() -> None:
    """Register the project's converters with skl2onnx (idempotent).

    Registers the engine's estimators and the preprocessing module's target
    scaler and datetime-parts transformer.
    """
    global _registered
    if _registered:
        return
    from workbench.nets.engine import NetClassifier, NetRegressor

    register_network_estimator(NetRegressor, "regression")
    register_network_estimator(NetClassifier, "classification")
    # skl2onnx's own MLPRegressor converter has no exponential output, which
    # scikit-learn uses with loss="poisson"; the engine's converter covers both
    from sklearn.neural_network import MLPRegressor

    register_network_estimator(MLPRegressor, "regression")
    _register_preprocessing()
    _registered = True


def _register_preprocessing() -> None:
    """Converters for the steps of :mod:`workbench.data.preprocessing` skl2onnx lacks."""
    from skl2onnx import update_registered_converter
    from sklearn.compose import TransformedTargetRegressor

    from workbench.data.preprocessing import DateParts

    update_registered_converter(TransformedTargetRegressor, "WorkbenchTransformedTarget",
                                _ttr_shape, _ttr_convert)
    update_registered_converter(DateParts, "WorkbenchDateParts", _dateparts_shape,
                                _dateparts_convert)


# --------------------------------------------------------------------------- target scaling


def _target_affine(ttr) -> tuple[np.ndarray, np.ndarray]:
    """``(scale, offset)`` with ``prediction = raw * scale + offset`` for a fitted wrapper.

    Knows :class:`workbench.data.preprocessing.TargetScaler` (``offset_``, ``scale_``),
    scikit-learn's ``StandardScaler`` and the identity (no transformer).
    """
    t = getattr(ttr, "transformer_", None)
    if t is None or (type(t).__name__ == "FunctionTransformer" and t.func is None
                     and t.inverse_func is None):
        return np.ones(1), np.zeros(1)
    if hasattr(t, "offset_") and hasattr(t, "scale_"):
        return np.asarray(t.scale_, float), np.asarray(t.offset_, float)
    if type(t).__name__ == "StandardScaler":
        scale = t.scale_ if t.scale_ is not None else np.ones(t.n_features_in_)
        mean = t.mean_ if t.mean_ is not None else np.zeros(t.n_features_in_)
        return np.asarray(scale, float), np.asarray(mean, float)
    raise ValueError(f"no ONNX form for the target transformer {type(t).__name__}")


def _ttr_shape(operator):
    inp = operator.inputs[0]
    n_out = len(_target_affine(operator.raw_operator)[0])
    operator.outputs[0].type = _float_type(inp.type)([inp.get_first_dimension(), n_out])


def _ttr_convert(scope, operator, container):
    from skl2onnx.algebra.onnx_operator import OnnxSubEstimator
    from skl2onnx.algebra.onnx_ops import OnnxAdd, OnnxMul

    ttr = operator.raw_operator
    opv = container.target_opset
    np_dtype = np.float64 if _proto_dtype(operator.inputs[0].type) == _DOUBLE else np.float32
    scale, offset = _target_affine(ttr)
    raw = OnnxSubEstimator(ttr.regressor_, operator.inputs[0], op_version=opv)
    out = OnnxAdd(OnnxMul(raw, scale.reshape(1, -1).astype(np_dtype), op_version=opv),
                  offset.reshape(1, -1).astype(np_dtype), op_version=opv,
                  output_names=operator.outputs[:1])
    out.add_to(scope, container)


# --------------------------------------------------------------------------- date parts

#: the missing-date marker :func:`onnx_feed` sends (NaT)
_NAT_SECONDS = np.iinfo(np.int64).min


def _dateparts_shape(operator):
    from skl2onnx.common.data_types import FloatTensorType

    inp = operator.inputs[0]
    width = sum(len(p) for p in operator.raw_operator.parts_)
    operator.outputs[0].type = FloatTensorType([inp.get_first_dimension(), width])


def _dateparts_convert(scope, operator, container):
    """Calendar parts from int64 seconds since 1970-01-01, in float64 arithmetic.

    The civil calendar is computed with H. Hinnant's ``civil_from_days``
    algorithm ("chrono-Compatible Low-Level Date Algorithms", 2013), written
    with floor divisions (exact in float64 for these magnitudes).
    """
    est = operator.raw_operator
    em = _Emitter(scope, container, _DOUBLE)
    inputs = [v.full_name for v in operator.inputs]
    x = inputs[0] if len(inputs) == 1 else em.node("Concat", inputs, axis=1)
    nat = em.node("Equal", [x, em.const("nat", [_NAT_SECONDS], dtype=np.int64)])
    secs = em.node("Cast", [x], to=_DOUBLE)

    def c(v):
        return em.const("k", float(v))

    def fdiv(a, b):  # floor(a / b)
        return em.node("Floor", [em.node("Div", [a, c(b)])])

    def mul(a, b):
        return em.node("Mul", [a, c(b) if not isinstance(b, str) else b])

    def add(a, b):
        return em.node("Add", [a, c(b) if not isinstance(b, str) else b])

    def sub(a, b):
        return em.node("Sub", [a, c(b) if not isinstance(b, str) else b])

    days = fdiv(secs, 86400)
    in_day = sub(secs, mul(days, 86400))
    hour = fdiv(in_day, 3600)
    minute = sub(fdiv(in_day, 60), mul(hour, 60))
    d3 = add(days, 3)  # 1970-01-01 was a Thursday: weekday 3 when Monday is 0
    weekday = sub(d3, mul(fdiv(d3, 7), 7))
    z = add(days, 719468)
    era = fdiv(z, 146097)
    doe = sub(z, mul(era, 146097))
    yoe = fdiv(add(sub(doe, fdiv(doe, 1460)), sub(fdiv(doe, 36524), fdiv(doe, 146096))), 365)
    doy_mar = sub(doe, add(mul(yoe, 365), sub(fdiv(yoe, 4), fdiv(yoe, 100))))
    mp = fdiv(add(mul(doy_mar, 5), 2), 153)
    day = add(sub(doy_mar, fdiv(add(mul(mp, 153), 2), 5)), 1)
    late = em.node("Cast", [em.node("GreaterOrEqual", [mp, c(10)])], to=_DOUBLE)
    month = sub(add(mp, 3), mul(late, 12))
    early = em.node("Cast", [em.node("LessOrEqual", [month, c(2)])], to=_DOUBLE)
    year = add(add(yoe, mul(era, 400)), early)
    # day of year: days since 1 January of the same year (days_from_civil(y, 1, 1))
    yp = sub(year, 1)
    era1 = fdiv(yp, 400)
    yoe1 = sub(yp, mul(era1, 400))
    doe1 = add(add(mul(yoe1, 365), sub(fdiv(yoe1, 4), fdiv(yoe1, 100))), 306)
    jan1 = sub(add(mul(era1, 146097), doe1), 719468)
    dayofyear = add(sub(days, jan1), 1)
    parts = {"year": year, "month": month, "day": day, "weekday": weekday, "hour": hour,
             "minute": minute, "dayofyear": dayofyear}
    nan = c(np.nan)
    columns = []
    for j, names in enumerate(est.parts_):
        idx = em.const("col", [j], dtype=np.int64)
        isnat = em.node("Gather", [nat, idx], axis=1)
        for name in names:
            part = em.node("Gather", [parts[name], idx], axis=1)
            columns.append(em.node("Where", [isnat, nan, part]))
    both = columns[0] if len(columns) == 1 else em.node("Concat", columns, axis=1)
    em.node("Cast", [both], output=operator.outputs[0].full_name, to=_FLOAT)


# --------------------------------------------------------------------------- whole pipelines


def _walk(est):
    todo, seen = [est], []
    while todo:
        e = todo.pop()
        seen.append(e)
        todo.extend(_fitted_children(e))
    return seen


def required_column_kinds(pipeline) -> dict[str, str] | None:
    """The columns a fitted pipeline reads, with their ONNX input kind.

    Taken from the first fitted ColumnTransformer: columns of a group holding
    :class:`~workbench.data.preprocessing.DateParts` are ``"datetime"``, of a group
    with a one-hot encoder ``"string"``, the others ``"float"``; dropped columns
    are not listed. Ordered as the table the pipeline was fitted on. None when
    the pipeline has no fitted ColumnTransformer with column names.
    """
    from sklearn.compose import ColumnTransformer
    from sklearn.preprocessing import OneHotEncoder

    cts = [e for e in _walk(pipeline) if isinstance(e, ColumnTransformer)]
    if not cts or not hasattr(cts[0], "transformers_"):
        return None
    ct = cts[0]
    names = [str(c) for c in getattr(ct, "feature_names_in_", [])]
    wanted = {}
    for _, trans, cols in ct.transformers_:
        if isinstance(trans, str) and trans == "drop":
            continue
        cols = list(np.atleast_1d(cols))
        if cols and not isinstance(cols[0], str):
            if not names:
                return None
            cols = [names[int(i)] for i in cols]
        if isinstance(trans, str):  # passthrough: numbers
            kind = "float"
        else:
            steps = _walk(trans)
            if any(type(e).__name__ == "DateParts" for e in steps):
                kind = "datetime"
            elif any(isinstance(e, OneHotEncoder) for e in steps):
                kind = "string"
            else:
                kind = "float"
        for c in cols:
            wanted[str(c)] = kind
    order = names or list(wanted)
    return {c: wanted[c] for c in order if c in wanted}


def pipeline_column_kinds(pipeline, X) -> dict[str, str]:
    """ONNX input kind of each column the pipeline reads (see :func:`required_column_kinds`);
    without a ColumnTransformer, from the dtypes of ``X`` (:func:`column_kinds`)."""
    kinds = required_column_kinds(pipeline)
    return column_kinds(X) if kinds is None else kinds


def column_kinds(df) -> dict[str, str]:
    """ONNX input kind per column: ``"float"``, ``"string"`` or ``"datetime"``."""
    import pandas as pd

    kinds = {}
    for col in df.columns:
        s = df[col]
        if pd.api.types.is_datetime64_any_dtype(s):
            kinds[str(col)] = "datetime"
        elif pd.api.types.is_bool_dtype(s) or pd.api.types.is_numeric_dtype(s):
            kinds[str(col)] = "float"
        else:
            kinds[str(col)] = "string"
    return kinds


def _initial_types(kinds: dict[str, str], dtype: str):
    from skl2onnx.common.data_types import (
        DoubleTensorType,
        FloatTensorType,
        Int64TensorType,
        StringTensorType,
    )

    num = DoubleTensorType if dtype == "float64" else FloatTensorType
    table = {"float": num, "string": StringTensorType, "datetime": Int64TensorType}
    return [(name, table[k]([None, 1])) for name, k in kinds.items()]


def pipeline_to_onnx(pipeline, X, *, dtype: str = "float32", opset: int = TARGET_OPSET,
                     name: str = "workbench_pipeline"):
    """Convert a fitted pipeline to an ONNX model.

    Parameters
    ----------
    pipeline : sklearn Pipeline (or a single fitted estimator)
        Preprocessing plus network; the last step may be a classifier, a
        regressor or the target scaler wrapping one.
    X : pandas.DataFrame
        A few rows with the columns the pipeline was fitted on (their dtypes
        decide the ONNX inputs).
    dtype : {"float32", "float64"}
        Numeric type of the graph inputs. onnxruntime runs the ai.onnx.ml
        preprocessing operators (``Imputer``, ``Scaler``) in float32 only, so
        pipelines with those steps need the default.
    opset : int
        ONNX opset; at least 17.

    Returns
    -------
    onnx.ModelProto
        Inputs: one per column, ``[N, 1]``. Outputs: ``variable`` (predictions,
        ``[N, n_outputs]``) for regressors; ``label`` and ``probabilities`` for
        classifiers. ``metadata_props``: :data:`COLUMNS_KEY` (which input takes
        which column, and its kind) and, for classifiers, :data:`CLASSES_KEY`
        (the class labels in the order of the probability columns, JSON).
    """
    from skl2onnx import convert_sklearn

    if opset < 17:
        raise ValueError("ONNX exports use opset 17 or newer")
    register_converters()
    kinds = pipeline_column_kinds(pipeline, X)
    pipeline = _conversion_copy(pipeline)
    options = {}
    from sklearn.base import is_classifier

    last = pipeline.steps[-1][1] if hasattr(pipeline, "steps") else pipeline
    if is_classifier(last) and not _is_own(last):
        options[id(last)] = {"zipmap": False}
    model = convert_sklearn(pipeline, name=name, initial_types=_initial_types(kinds, dtype),
                            target_opset={"": opset, "ai.onnx.ml": TARGET_ML_OPSET},
                            options=options or None)
    _rename_outputs(model, ["label", "probabilities"] if len(model.graph.output) == 2
                    else ["variable"])
    # skl2onnx turns column names into valid identifiers; record which graph
    # input takes which column (in order) so that a reader can build the feed
    import json

    inputs = [i.name for i in model.graph.input]
    columns = [{"column": c, "input": n, "kind": k} for (c, k), n in zip(kinds.items(), inputs)]
    meta = model.metadata_props.add()
    meta.key = COLUMNS_KEY
    meta.value = json.dumps(columns)
    if is_classifier(last):
        # the labels of the probability columns travel inside the model they describe
        meta = model.metadata_props.add()
        meta.key = CLASSES_KEY
        meta.value = json.dumps([c.item() if isinstance(c, np.generic) else c
                                 for c in last.classes_])
    return model


def _rename_outputs(model, names: list[str]) -> None:
    """Give the graph outputs fixed names (skl2onnx's depend on the converter)."""
    graph = model.graph

    def used():
        names = {n for node in graph.node for n in (*node.input, *node.output)}
        return names | {i.name for i in graph.initializer} | {i.name for i in graph.input}

    def rename(old, new):
        for node in graph.node:
            for i, name in enumerate(node.output):
                if name == old:
                    node.output[i] = new
            for i, name in enumerate(node.input):
                if name == old:
                    node.input[i] = new
        for vi in (*graph.output, *graph.value_info):
            if vi.name == old:
                vi.name = new

    for out, new in zip(list(graph.output), names):
        old = out.name
        if old == new:
            continue
        if new in used():  # an inner value already has the name: move it aside
            taken, k = used(), 0
            while f"{new}_inner{k}" in taken:
                k += 1
            rename(new, f"{new}_inner{k}")
        rename(old, new)


def _fitted_children(est):
    """The fitted sub-estimators of ``est`` (pipeline steps, column transformers, ...)."""
    if hasattr(est, "steps"):
        return [step for _, step in est.steps]
    if hasattr(est, "transformers_"):
        return [t for _, t, _ in est.transformers_ if not isinstance(t, str)]
    for attr in ("regressor_", "estimator_", "classifier_"):
        if hasattr(est, attr):
            return [getattr(est, attr)]
    return []


def _conversion_copy(pipeline):
    """A copy of ``pipeline`` adjusted for the graph, with identical predictions.

    ONNX string tensors cannot hold NaN, so :func:`onnx_feed` sends a missing
    text value as ``""``; a most-frequent imputer fitted on text (which treats
    NaN as missing) is told that ``""`` is its missing marker in the copy.
    """
    import copy

    from sklearn.impute import SimpleImputer
    from sklearn.preprocessing import OneHotEncoder

    pipeline = copy.deepcopy(pipeline)
    groups = [t for ct in _walk(pipeline) if hasattr(ct, "transformers_")
              for _, t, _ in ct.transformers_ if not isinstance(t, str)]
    for group in groups:
        steps = _walk(group)
        if any(isinstance(e, OneHotEncoder) for e in steps):
            # a categorical group is fed as strings: make its fitted values strings too
            for e in steps:
                if isinstance(e, SimpleImputer):
                    e.statistics_ = _as_text(e.statistics_)
                if isinstance(e, OneHotEncoder):
                    e.categories_ = [_as_text(cats) for cats in e.categories_]
    for est in _walk(pipeline):
        if isinstance(est, SimpleImputer) and getattr(est, "statistics_", None) is not None \
                and np.asarray(est.statistics_).dtype == object \
                and not isinstance(est.missing_values, str):
            est.missing_values = ""
    return pipeline


def category_text(v) -> str:
    """The text of one category value as both the graph and :func:`onnx_feed` spell it.

    Numbers are spelled by value, so that ``2``, ``2.0`` and ``np.int64(2)``
    (equal for scikit-learn's encoder) are the same string ``"2"``.
    """
    if isinstance(v, str):
        return v
    if isinstance(v, bool | np.bool_):
        return "True" if v else "False"
    if isinstance(v, int | np.integer):
        return str(int(v))
    if isinstance(v, float | np.floating):
        f = float(v)
        return str(int(f)) if f.is_integer() else repr(f)
    return str(v)


def _as_text(values) -> np.ndarray:
    """Category values as text (:func:`category_text`); missing values stay missing."""
    import pandas as pd

    return np.array([v if isinstance(v, str) or pd.isna(v) else category_text(v)
                     for v in values], dtype=object)


def _is_own(est) -> bool:
    return type(est).__module__.startswith("workbench.")


def onnx_feed(df, columns: list[dict], dtype: str = "float32") -> dict[str, np.ndarray]:
    """The onnxruntime input dict for ``df``: one ``[N, 1]`` array per column.

    Numeric columns become float (missing values stay NaN, which the graph's
    imputer handles); datetime columns become int64 seconds since the Unix
    epoch (missing: the smallest int64); text columns become strings. ONNX
    string tensors cannot hold a missing value, so a missing text value is sent
    as ``""``, which the exported string imputer treats as missing.
    """
    import pandas as pd

    num = np.float64 if dtype == "float64" else np.float32
    missing = [c["column"] for c in columns if c["column"] not in df.columns]
    if missing:
        raise InputError(f"the table lacks column(s) the model needs: "
                         f"{', '.join(map(repr, missing))}")
    feed = {}
    for col in columns:
        kind = col["kind"]
        s = df[col["column"]]
        if kind == "float":
            arr = pd.to_numeric(s, errors="coerce").to_numpy(dtype=num, na_value=np.nan)
        elif kind == "datetime":
            t = pd.to_datetime(s, errors="coerce")
            if getattr(t.dt, "tz", None) is not None:
                t = t.dt.tz_convert("UTC").dt.tz_localize(None)
            secs = (t - pd.Timestamp("1970-01-01")) // pd.Timedelta(seconds=1)
            arr = secs.fillna(np.iinfo(np.int64).min).to_numpy(dtype=np.int64)
        else:
            arr = np.array(["" if pd.isna(v) else category_text(v) for v in s], dtype=object)
        feed[col["input"]] = arr.reshape(-1, 1)
    return feed


def _metadata(model, key: str):
    """The JSON value stored under ``key`` in the model's ``metadata_props``, or None."""
    import json

    for prop in model.metadata_props:
        if prop.key == key:
            try:
                return json.loads(prop.value)
            except (ValueError, RecursionError):
                raise InputError(f"the ONNX file's {key} entry is damaged; re-export the model") \
                    from None
    return None


def onnx_columns(model) -> list[dict]:
    """The columns recorded by :func:`pipeline_to_onnx`: ``column``, ``input``, ``kind``.

    Raises
    ------
    InputError
        when the list is missing, damaged or names inputs the graph does not have.
    """
    columns = _metadata(model, COLUMNS_KEY)
    if columns is None:
        raise InputError("this ONNX file was not written by workbench export; "
                         "it lacks the column list")
    inputs = [i.name for i in model.graph.input]
    ok = isinstance(columns, list) and all(
        isinstance(c, dict) and isinstance(c.get("column"), str)
        and c.get("kind") in ("float", "string", "datetime") and c.get("input") in inputs
        for c in columns) and sorted(c["input"] for c in columns) == sorted(inputs)
    if not ok:
        raise InputError("the ONNX file's column list does not match its graph inputs "
                         "(the file is damaged or was changed); re-export the model")
    return columns


def onnx_classes(model) -> list | None:
    """The class labels :func:`pipeline_to_onnx` stored in a classifier's model, in the
    order of its probability columns; None for a model that records none.

    Raises
    ------
    InputError
        when the entry is not a list of distinct labels (text, numbers, true/false).
    """
    classes = _metadata(model, CLASSES_KEY)
    if classes is None:
        return None
    if not isinstance(classes, list) or not classes or not all(
            isinstance(c, str | int | float | bool) for c in classes) \
            or len({(type(c), c) for c in classes}) != len(classes):
        raise InputError("the ONNX file's class list is damaged; re-export the model")
    return classes


def _all_tensors(graph):
    """Every tensor of a graph and of the graphs nested in its nodes' attributes."""
    graphs, tensors = [graph], []
    while graphs:
        g = graphs.pop()
        tensors.extend(g.initializer)
        for sparse in g.sparse_initializer:
            tensors.extend((sparse.values, sparse.indices))
        for node in g.node:
            for a in node.attribute:
                if a.HasField("t"):
                    tensors.append(a.t)
                tensors.extend(a.tensors)
                if a.HasField("g"):
                    graphs.append(a.g)
                graphs.extend(a.graphs)
    return tensors


def load_onnx(path):
    """Read an ONNX file, refusing damaged ones and any that reaches for outside data.

    The file is parsed without loading external data: an exported model keeps
    every tensor inside the file, and a tensor that points elsewhere could make
    the runtime read a file of the attacker's choosing.

    Raises
    ------
    InputError
        when the bytes are not a readable ONNX model or a tensor is stored outside the file.
    """
    import onnx

    try:
        model = onnx.load(str(path), load_external_data=False)
    except Exception as exc:  # protobuf's DecodeError and friends: one line, never a traceback
        raise InputError(f"{path} is not a readable ONNX model ({type(exc).__name__}); "
                         "re-export the model") from None
    external = onnx.TensorProto.EXTERNAL
    if any(t.data_location == external for t in _all_tensors(model.graph)):
        raise InputError(f"{path} refers to tensor data outside the file, which no export "
                         "writes; refusing to run it")
    return model


def run_onnx(model_or_path, df, dtype: str | None = None) -> dict[str, np.ndarray]:
    """Predict with onnxruntime; returns ``{output_name: array}``.

    Raises
    ------
    InputError
        when the file is damaged or onnxruntime cannot build or run the graph.
    """
    import onnxruntime as ort

    if isinstance(model_or_path, (str, bytes)) or hasattr(model_or_path, "__fspath__"):
        model = load_onnx(model_or_path)
    else:
        model = model_or_path
    columns = onnx_columns(model)
    if dtype is None:
        dtype = "float32"
        for inp in model.graph.input:
            if inp.type.tensor_type.elem_type == _DOUBLE:
                dtype = "float64"
    feed = onnx_feed(df, columns, dtype)
    try:
        sess = ort.InferenceSession(model.SerializeToString(), providers=["CPUExecutionProvider"])
        names = [o.name for o in sess.get_outputs()]
        outs = sess.run(None, feed)
    except Exception as exc:  # onnxruntime's errors on a damaged or changed graph
        first = str(exc).strip().splitlines()[0][:160] if str(exc).strip() else ""
        raise InputError(f"onnxruntime cannot run this ONNX model ({type(exc).__name__}: "
                         f"{first}); the file is damaged or was changed, re-export the model") \
            from None
    return dict(zip(names, outs))


__all__: Sequence[str] = (
    "TARGET_OPSET", "network_spec", "register_converters", "pipeline_to_onnx",
    "onnx_feed", "column_kinds", "onnx_columns", "onnx_classes", "load_onnx", "run_onnx",
)
