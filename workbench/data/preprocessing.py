"""Leak-free preprocessing: the profile becomes a ColumnTransformer inside a Pipeline.

:func:`build_preprocessor(profile, target) <build_preprocessor>` returns a
:class:`sklearn.compose.ColumnTransformer` named steps:

- ``"numeric"``: numeric, integer columns -> ``SimpleImputer(strategy="median")`` then
  ``StandardScaler()``;
- ``"categorical"``: categorical columns and boolean columns with gaps (object dtype) ->
  ``SimpleImputer(strategy="most_frequent")`` then ``OneHotEncoder(handle_unknown="ignore",
  sparse_output=False)``;
- ``"boolean"``: boolean columns of NumPy ``bool`` dtype (no gaps possible) ->
  ``OneHotEncoder(handle_unknown="ignore", sparse_output=False)``;
- ``"datetime"``: datetime columns -> :class:`DateParts` (numeric parts) then median
  imputation and ``StandardScaler()``;
- every other column (role ``ignore``, and the target) is dropped (``remainder="drop"``).

The transformer is unfitted, so inside a :class:`~sklearn.pipeline.Pipeline` every
cross-validation fold fits imputers, scalers and encoders on its own training part.
With ``columnwise_medians=True`` the numeric and date groups are
:class:`ImputeColumnwise`, which fits their median imputers one column at a time
(:func:`fit_median_by_column`): the same numbers as scikit-learn's
``SimpleImputer(strategy="median")`` without its whole-array masked copies, for fits
that are never saved (a saved pipeline keeps scikit-learn's classes only).

:func:`build_pipeline(profile, target, estimator, head) <build_pipeline>` returns
``Pipeline([("prep", ColumnTransformer), ("model", model)])``. For classification
``model`` is a clone of ``estimator``; for regression it is
``TransformedTargetRegressor(regressor=clone(estimator), transformer=TargetScaler(...),
check_inverse=False)`` so that the network learns a target scaled to suit the head and
predictions come back in the user's units. When the estimator has an
``output_activation`` parameter (the workbench engine) it is set to the head;
scikit-learn's ``MLPRegressor`` gets ``loss="poisson"`` for the exp head and refuses
heads it does not have. :func:`build_model` returns that ``model`` step alone (for
features preprocessed elsewhere: a sweep's shared fold features).
:func:`fitted_estimator` returns the fitted network inside a fitted pipeline.

Target scaling (:class:`TargetScaler`, chosen by :func:`target_scaling`):

- ``identity`` head -> ``mode="standard"``: ``(y - mean) / std`` (as ``StandardScaler``);
- ``relu`` / ``softplus`` / ``exp`` heads -> ``mode="scale"``: ``y / std``, no centring,
  so zero stays zero and the sign is kept (as ``StandardScaler(with_mean=False)``);
- regression ``logistic`` head -> ``mode="interval"``: ``(y - low) / (high - low)``
  with the target's known interval (or its training range when it has none), as
  ``MinMaxScaler`` fitted on ``[low, high]``.

A zero standard deviation is replaced by 1. Only NumPy operations are used in the
two custom transformers, so an ONNX converter can express them.

Why the non-negative heads divide by the standard deviation, not by the mean: the
network's fair start (:mod:`workbench.nets.engine`, ``output_init="mean"``) puts the
output bias at the head's inverse link of the scaled target's mean, so a positive
target far from zero (``load_diabetes`` + 10,000, mean/sd about 130: scaled mean 130)
starts where it should, and the part the network must learn -- the variation around
the mean -- is then in units of one standard deviation for every head, as for the
standardised identity head: Adam's steps, about the learning rate per parameter
whatever the gradient's scale, move every head's predictions alike. Dividing by the
mean instead (scaled mean 1, spread 1/130) would make the same steps 130 times larger
relative to what must be learnt: measured on ``load_diabetes`` + 10,000 (5 folds x
2 repeats, hidden relu [16], 200 epochs), y / sd gives the relu and softplus heads the
identity head's test R^2 (0.490), y / mean 0.400 and 0.408. Zero stays zero and the
sign is kept, so each head's range still holds. In float32 the scaled target keeps a
resolution of about ``mean/sd * 1.2e-7`` standard deviations (float32 spacing; 1e-3 at
mean/sd = 1e4); a target further from zero than that is better trained with
``dtype="float64"``.
The exp head's Poisson deviance is unchanged by any scale but for a factor
(``D(c y, c p) = c D(y, p)``) and a shift of its log-link's bias, so its fit does
not depend on the choice.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, TransformerMixin, clone
from sklearn.compose import ColumnTransformer, TransformedTargetRegressor
from sklearn.impute import SimpleImputer
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler

from workbench.data.profiling import TableProfile, TargetInfo, check_head
from workbench.errors import InputError
from workbench.nets.activations import resolve_head

NUMERIC_TYPES = ("numeric", "integer")
CATEGORICAL_TYPES = ("categorical", "boolean")
DATETIME_TYPES = ("datetime",)

#: the parts :class:`DateParts` can produce, in output order
DATE_PARTS = ("year", "month", "day", "weekday", "hour", "minute", "dayofyear")


class DateParts(TransformerMixin, BaseEstimator):
    """Expand datetime columns into numeric parts.

    For each input column: ``year``, ``month`` (1-12), ``day`` (1-31), ``weekday``
    (Monday = 0), ``hour``, ``minute``, ``dayofyear`` (1-366). Parts that are constant
    in the training data (e.g. hour and minute for plain dates) are dropped at
    ``fit``. Missing dates (NaT) give NaN parts, for a following imputer.

    Parameters
    ----------
    parts : tuple of str
        Candidate parts (a subset of :data:`DATE_PARTS`).

    Attributes
    ----------
    parts_ : list of list of str
        Parts kept for each input column.
    n_features_in_ : int
    """

    def __init__(self, parts=DATE_PARTS):
        self.parts = parts

    @staticmethod
    def _as_datetime64(X) -> np.ndarray:
        if isinstance(X, pd.DataFrame):
            cols = []
            for c in X.columns:
                s = X[c]
                if not pd.api.types.is_datetime64_any_dtype(s.dtype):
                    s = pd.to_datetime(s, errors="coerce")
                cols.append(s.to_numpy(dtype="datetime64[s]"))
            return np.column_stack(cols) if cols else np.empty((len(X), 0), "datetime64[s]")
        arr = np.asarray(X)
        if arr.ndim == 1:
            arr = arr[:, None]
        return arr.astype("datetime64[s]")

    @staticmethod
    def _parts(col: np.ndarray) -> dict[str, np.ndarray]:
        nat = np.isnat(col)
        secs = col.astype("datetime64[s]")  # seconds: years 1 to 9999 all fit
        days = secs.astype("datetime64[D]")
        months = secs.astype("datetime64[M]")
        years = secs.astype("datetime64[Y]")
        out = {
            "year": years.astype(np.int64) + 1970.0,
            "month": (months.astype(np.int64) % 12) + 1.0,
            "day": (days - months.astype("datetime64[D]")).astype(np.int64) + 1.0,
            # 1970-01-01 was a Thursday (weekday 3 when Monday is 0)
            "weekday": (days.astype(np.int64) + 3) % 7 + 0.0,
            "hour": ((secs - days).astype("timedelta64[h]").astype(np.int64)) + 0.0,
            "minute": ((secs - days).astype("timedelta64[m]").astype(np.int64) % 60) + 0.0,
            "dayofyear": (days - years.astype("datetime64[D]")).astype(np.int64) + 1.0,
        }
        for k in out:
            out[k] = out[k].astype(np.float64)
            out[k][nat] = np.nan
        return out

    def fit(self, X, y=None):
        bad = [p for p in self.parts if p not in DATE_PARTS]
        if bad:
            raise ValueError(f"unknown date parts {bad}; choose from {DATE_PARTS}")
        arr = self._as_datetime64(X)
        self.n_features_in_ = arr.shape[1]
        if isinstance(X, pd.DataFrame):
            self.feature_names_in_ = np.asarray([str(c) for c in X.columns], dtype=object)
        self.parts_ = []
        for j in range(arr.shape[1]):
            parts = self._parts(arr[:, j])
            keep = []
            for p in self.parts:
                v = parts[p]
                v = v[~np.isnan(v)]
                if v.size and v.min() != v.max():
                    keep.append(p)
            self.parts_.append(keep or ["year"])
        return self

    def transform(self, X):
        arr = self._as_datetime64(X)
        if arr.shape[1] != self.n_features_in_:
            raise ValueError(f"expected {self.n_features_in_} datetime columns, got {arr.shape[1]}")
        out = []
        for j in range(arr.shape[1]):
            parts = self._parts(arr[:, j])
            out.extend(parts[p] for p in self.parts_[j])
        return np.column_stack(out) if out else np.empty((arr.shape[0], 0))

    def get_feature_names_out(self, input_features=None):
        if input_features is None:
            input_features = getattr(self, "feature_names_in_",
                                     [f"x{j}" for j in range(self.n_features_in_)])
        return np.asarray([f"{c}_{p}" for c, ps in zip(input_features, self.parts_) for p in ps],
                          dtype=object)


class TargetScaler(TransformerMixin, BaseEstimator):
    """Scale a regression target to suit an output head, exactly invertible.

    Parameters
    ----------
    mode : {"standard", "scale", "interval"}
        ``standard``: ``(y - mean_) / scale_``; ``scale``: ``y / scale_`` (no centring);
        ``interval``: ``(y - low) / (high - low)``.
    low, high : float, optional
        The interval for ``mode="interval"``; when omitted, the training range.

    Attributes
    ----------
    offset_ : ndarray of shape (n_targets,)
        Subtracted before dividing (the mean, 0, or ``low``).
    scale_ : ndarray of shape (n_targets,)
        The divisor (std, std, or ``high - low``); zero is replaced by 1.
    """

    def __init__(self, mode="standard", low=None, high=None):
        self.mode = mode
        self.low = low
        self.high = high

    def fit(self, y, X=None):
        y = np.asarray(y, dtype=np.float64)
        y2 = y.reshape(len(y), -1)
        if self.mode == "standard":
            offset, scale = y2.mean(axis=0), y2.std(axis=0)
        elif self.mode == "scale":
            offset, scale = np.zeros(y2.shape[1]), y2.std(axis=0)
        elif self.mode == "interval":
            lo = y2.min(axis=0) if self.low is None else np.full(y2.shape[1], float(self.low))
            hi = y2.max(axis=0) if self.high is None else np.full(y2.shape[1], float(self.high))
            offset, scale = lo, hi - lo
        else:
            raise ValueError(f"mode must be 'standard', 'scale' or 'interval', got {self.mode!r}")
        scale = np.where(scale > 0, scale, 1.0)
        self.offset_, self.scale_ = offset.astype(np.float64), scale.astype(np.float64)
        self.n_features_in_ = y2.shape[1]
        return self

    def transform(self, y):
        y = np.asarray(y, dtype=np.float64)
        if y.ndim == 1:
            return (y - self.offset_[0]) / self.scale_[0]
        return (y - self.offset_) / self.scale_

    def inverse_transform(self, y):
        y = np.asarray(y, dtype=np.float64)
        if y.ndim == 1:
            return y * self.scale_[0] + self.offset_[0]
        return y * self.scale_ + self.offset_


def _median_by_column_applies(imputer, X) -> bool:
    """Whether :func:`fit_median_by_column` reproduces ``imputer.fit(X)`` exactly: a
    ``SimpleImputer(strategy="median")`` without the indicator on dense numeric data
    (a NumPy array or a DataFrame of NumPy numeric columns) of at least one row. Then
    scikit-learn validates every subset of the rows to the same dtype, so its fit on the
    first row sets the attributes its fit on every row would. Anything else (sparse data,
    text, pandas' nullable dtypes, whose dtype can depend on the rows) is fitted whole."""
    if type(imputer) is not SimpleImputer or imputer.strategy != "median" \
            or imputer.add_indicator:
        return False
    if isinstance(X, pd.DataFrame):
        kinds = [dt.kind if isinstance(dt, np.dtype) else "" for dt in X.dtypes]
    elif isinstance(X, np.ndarray) and X.ndim == 2:
        kinds = [X.dtype.kind]
    else:
        return False
    return len(X) > 0 and bool(kinds) and all(k in "fiu" for k in kinds)


def fit_median_by_column(imputer: SimpleImputer, X) -> SimpleImputer:
    """Fit ``SimpleImputer(strategy="median")`` on ``X`` one column at a time.

    The result is what ``imputer.fit(X)`` gives -- the same ``statistics_`` (NaN for a
    column without any value, or 0 with ``keep_empty_features``), ``n_features_in_``,
    ``feature_names_in_`` and dtypes -- but scikit-learn's fit builds a masked array of
    every column and sorts copies of it (about four times the data's size on top of its
    validated copy: 97 MB for the 160,000 x 18 training rows of a 200,000-row table),
    whereas here scikit-learn's own imputer is fitted on each column alone (the median
    of a column does not depend on the others), so only one column's copy is held at a
    time. The validation and the attributes come from scikit-learn's fit on the first
    row (see :func:`_median_by_column_applies` for when they equal the whole fit's);
    each column is taken in that validated dtype, as the whole fit would take it.
    Falls back to ``imputer.fit(X)`` where that equivalence is not assured.
    """
    if not _median_by_column_applies(imputer, X):
        return imputer.fit(X)
    frame = isinstance(X, pd.DataFrame)
    imputer.fit(X.iloc[:1] if frame else X[:1])
    dtype = imputer._fit_dtype
    params = imputer.get_params()
    stats = []
    for j in range(X.shape[1]):
        col = X.iloc[:, [j]].to_numpy(dtype=dtype) if frame else X[:, [j]].astype(dtype)
        stats.append(SimpleImputer(**params).fit(col).statistics_)
    imputer.statistics_ = np.concatenate(stats)
    return imputer


class ImputeColumnwise(Pipeline):
    """A :class:`~sklearn.pipeline.Pipeline` whose median imputers are fitted column by
    column (:func:`fit_median_by_column`): the same steps, the same fitted attributes and
    the same output as ``Pipeline``, without the whole-array masked copies of
    scikit-learn's median.

    Each step is fitted in turn as ``Pipeline.fit_transform`` fits it (in place,
    transforming the rows for the next step; the last step by its own
    ``fit_transform``), the median imputers by :func:`fit_median_by_column`. Only
    ``fit`` / ``fit_transform`` without fit parameters are changed (with parameters,
    scikit-learn's own fit runs); ``transform`` is ``Pipeline``'s.

    For fits that are never saved (the sweep's trials, see :func:`build_preprocessor`):
    a saved pipeline holding it would name this class, which an export's skops trust
    list and ONNX converters do not know.
    """

    def fit_transform(self, X, y=None, **params):
        if params:
            return super().fit_transform(X, y, **params)
        self.steps = list(self.steps)
        out = X
        for _, step in self.steps:
            if step is None or (isinstance(step, str) and step == "passthrough"):
                continue
            if _median_by_column_applies(step, out):
                out = fit_median_by_column(step, out).transform(out)
            else:
                out = step.fit_transform(out, y)
        return out

    def fit(self, X, y=None, **params):
        self.fit_transform(X, y, **params)
        return self


def target_scaling(target: TargetInfo, head: str) -> TargetScaler:
    """The :class:`TargetScaler` (unfitted) that suits ``head`` for ``target``."""
    h = resolve_head(head, "regression").name
    if h == "identity":
        return TargetScaler("standard")
    if h in ("relu", "softplus", "exp"):
        return TargetScaler("scale")
    if h == "logistic":
        if target.interval is not None:
            return TargetScaler("interval", low=target.interval[0], high=target.interval[1])
        return TargetScaler("interval")
    raise ValueError(f"no target scaling defined for head {head!r}")  # pragma: no cover


def feature_groups(profile: TableProfile, target: TargetInfo | str | None) -> dict[str, list[str]]:
    """Column names per transformer group (numeric, categorical, boolean, datetime)."""
    tname = target.name if isinstance(target, TargetInfo) else target
    groups: dict[str, list[str]] = {"numeric": [], "categorical": [], "boolean": [],
                                    "datetime": []}
    for c in profile.feature_columns(tname):
        if c.type in NUMERIC_TYPES:
            groups["numeric"].append(c.name)
        elif c.type == "boolean" and c.dtype == "bool":
            groups["boolean"].append(c.name)  # a NumPy bool column has no gaps
        elif c.type in CATEGORICAL_TYPES:
            groups["categorical"].append(c.name)
        elif c.type in DATETIME_TYPES:
            groups["datetime"].append(c.name)
    return groups


def build_preprocessor(profile: TableProfile, target: TargetInfo | str | None,
                       columnwise_medians: bool = False) -> ColumnTransformer:
    """The unfitted ColumnTransformer for the profile's feature columns.

    ``columnwise_medians=True``: the numeric and date groups are :class:`ImputeColumnwise`
    instead of ``Pipeline`` -- the same numbers, fitted with far less memory (their median
    imputers one column at a time), but a class an export does not know: for fits that
    are never saved, such as the sweep's trials. The default keeps scikit-learn's
    classes only (exports, refits, the reproduce script).

    Raises
    ------
    InputError
        When no column can serve as a feature.
    """
    g = feature_groups(profile, target)
    imputing = ImputeColumnwise if columnwise_medians else Pipeline
    steps = []
    if g["numeric"]:
        steps.append(("numeric", imputing([
            ("impute", SimpleImputer(strategy="median")),
            ("scale", StandardScaler()),
        ]), g["numeric"]))
    if g["categorical"]:
        steps.append(("categorical", Pipeline([
            ("impute", SimpleImputer(strategy="most_frequent")),
            ("onehot", OneHotEncoder(handle_unknown="ignore", sparse_output=False)),
        ]), g["categorical"]))
    if g["boolean"]:
        # scikit-learn's SimpleImputer refuses bool arrays; they cannot have gaps anyway
        steps.append(("boolean", Pipeline([
            ("onehot", OneHotEncoder(handle_unknown="ignore", sparse_output=False)),
        ]), g["boolean"]))
    if g["datetime"]:
        steps.append(("datetime", imputing([
            ("parts", DateParts()),
            ("impute", SimpleImputer(strategy="median")),
            ("scale", StandardScaler()),
        ]), g["datetime"]))
    if not steps:
        raise InputError("no column can be used as a feature (all are ignored or the target); "
                         "make a column a feature or add feature columns to the table",
                         setting="roles")
    return ColumnTransformer(steps, remainder="drop", sparse_threshold=0.0,
                             verbose_feature_names_out=True)


def _configure_estimator(estimator, target: TargetInfo, head: str):
    est = clone(estimator)
    params = est.get_params(deep=False)
    kind = type(est).__name__
    if "output_activation" in params:
        est.set_params(output_activation=head)
        return est
    # scikit-learn's own MLPs: only the heads they have
    if target.task == "classification":
        natural = "logistic" if len(target.classes or []) <= 2 else "softmax"
        if head != natural:
            raise InputError(f"{kind} always uses the {natural} head for this target; use the "
                             f"workbench engine to try the {head} head", setting="engine")
        return est
    if head == "identity":
        if "loss" in params:
            est.set_params(loss="squared_error")
        return est
    if head == "exp" and "loss" in params:
        est.set_params(loss="poisson")
        return est
    raise InputError(f"{kind} has no {head} output head; use the workbench engine (NetRegressor) "
                     "to try it", setting="engine")


def build_pipeline(profile: TableProfile, target: TargetInfo, estimator, head: str,
                   columnwise_medians: bool = False) -> Pipeline:
    """Preprocessing + (target scaling) + estimator, fitted together per CV fold.

    Parameters
    ----------
    profile : TableProfile
    target : TargetInfo
    estimator : scikit-learn style estimator
        ``MLPRegressor`` / ``MLPClassifier`` or the workbench's ``NetRegressor`` /
        ``NetClassifier`` (cloned, never modified).
    head : str
        Output head name (aliases accepted, e.g. ``linear``).
    columnwise_medians : bool
        Passed to :func:`build_preprocessor` (True only for fits that are never saved).

    Returns
    -------
    sklearn.pipeline.Pipeline
        Steps ``prep`` and ``model`` (see the module docstring).

    Raises
    ------
    InputError
        When the head cannot serve the target (see :func:`workbench.data.profiling.check_head`)
        or the estimator does not offer the head.
    """
    chk = check_head(target, head)
    if not chk.allowed:
        raise InputError(chk.reason, setting="heads")
    prep = build_preprocessor(profile, target, columnwise_medians)
    return Pipeline([("prep", prep), ("model", _model_step(target, estimator, chk.head))])


def build_model(target: TargetInfo, estimator, head: str):
    """The ``model`` step of :func:`build_pipeline` alone (target scaling and the
    configured estimator), for features already preprocessed: the same step, with
    the same checks (the head and the estimator's heads)."""
    chk = check_head(target, head)
    if not chk.allowed:
        raise InputError(chk.reason, setting="heads")
    return _model_step(target, estimator, chk.head)


def _model_step(target: TargetInfo, estimator, head: str):
    est = _configure_estimator(estimator, target, head)
    if target.task == "regression":
        return TransformedTargetRegressor(regressor=est, transformer=target_scaling(target, head),
                                          check_inverse=False)
    return est


def fitted_estimator(pipeline: Pipeline):
    """The network inside a pipeline from :func:`build_pipeline`.

    For a fitted regression pipeline this is the fitted ``regressor_`` of the target
    wrapper; before fitting, the configured (unfitted) ``regressor``.
    """
    model = pipeline.named_steps["model"]
    if isinstance(model, TransformedTargetRegressor):
        return getattr(model, "regressor_", model.regressor)
    return model
