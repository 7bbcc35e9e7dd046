"""Understand a table's columns and its target; advise the output head; guard heads.

Column profile
--------------
:func:`profile_table(df, target=None) <profile_table>` returns a :class:`TableProfile`:

- ``rows`` (int), ``columns`` (list of :class:`ColumnProfile`, table order),
  ``suggested_target`` (str or None: the single most likely target column; None
  when no column is clearly the target), ``suggestion_reason`` (one sentence: why
  that column, or why none) and ``target`` (the column given as ``target``, or None).
  A year, a date, an identifier or a row index is never suggested
  (:func:`never_a_target`).

Each :class:`ColumnProfile` has ``name``, ``type``, ``base_type``, ``role``,
``reason``, ``dtype`` (pandas dtype as text), ``missing``, ``missing_share``,
``distinct``, ``min`` / ``max`` / ``mean`` (numeric and datetime types, else
None; datetimes as ISO text), ``top`` (up to 5 most frequent values as text, for
categorical / boolean / text), ``target_candidate`` (bool) and ``not_suggested``
(why the column is never suggested as the target, else empty).

``type`` is one of ``numeric`` (real-valued), ``integer`` (whole numbers),
``boolean``, ``categorical`` (text with few distinct values; ``distinct`` is
its cardinality), ``datetime``, ``text`` (free text), ``id`` (unique per row),
``constant`` (one value) or ``missing`` (mostly or entirely missing).
``base_type`` is the data type before the last three overrides.

``role`` is ``feature``, ``ignore`` (``reason`` says why) or ``target`` (the
column given as ``target``; when none is given, the suggested target).
``TableProfile.with_roles({column: "feature" | "ignore"})`` returns a copy with
roles the user changed; it is the only way the project applies the user's roles
(the window, the sweep's runner and an export's refit all call it), so an
identifier made a feature gets its ``base_type`` back everywhere.
``TableProfile.feature_columns(target)`` lists the columns the preprocessing uses;
``TableProfile.require_features(target)`` refuses a table with none (before any trial).

Target
------
:func:`analyse_target(df, name) <analyse_target>` returns a :class:`TargetInfo`:
``name``, ``kind`` (``binary``, ``multiclass``, ``signed``, ``non_negative``,
``count`` or ``bounded``), ``task`` (``classification`` for binary/multiclass,
else ``regression``), ``evidence`` (dict: ``dtype``, ``rows``, ``missing``,
``missing_share``, ``distinct``, ``min``, ``max``, ``mean``, ``std``,
``zero_share``, ``negative_share``, ``integer_valued``, ``rule`` = one sentence
saying why this kind; classification adds ``class_counts``), ``classes`` (sorted
list of labels for classification, else None), ``interval`` ((low, high) for
bounded, else None), ``rows_dropped`` (rows whose target is missing),
``rows`` (rows kept), ``detected_kind`` (what the values say), ``kind_set_by_user``
(``kind`` was given to :func:`analyse_target`; a kind the values cannot have is
refused by :func:`check_kind`), and for small integer codes that could be classes
or a count: ``ambiguous`` (bool), ``alternatives`` (the other kinds the values fit)
and ``ambiguity`` (the evidence and the rule that picked the default; the evidence
is also ``evidence["codes"]``: ``distinct``, ``low``, ``high``, ``rare_code``,
``rare_share``, ``rare_rows``). :func:`split_xy` gives the features and the target
with the rows whose target is missing dropped.

Advice and guard
----------------
:func:`advise(target) <advise>` returns an :class:`Advice`: ``output_head`` (a
head name of :mod:`workbench.nets.activations`), ``loss`` (``squared_error``,
``poisson`` or ``log_loss``), ``reason`` (one sentence), ``hidden`` (the default
hidden activation, ``relu``), ``hidden_to_sweep`` (tuple of hidden activations
worth sweeping), ``heads_to_sweep`` (tuple of heads worth comparing, the advised
one first) and ``basis`` (always ``"common practice"``: these are rules of thumb
that the sweep is there to test).

:func:`check_head(target, head) <check_head>` returns a :class:`HeadCheck`
``(allowed, warning, reason, head, loss)``: a head whose range cannot cover the
target is refused (``allowed`` False, ``reason`` says why); a head that is only
unusual for the kind is allowed with ``warning`` True and the reason; the usual
heads are allowed with no warning and an empty reason.
"""

from __future__ import annotations

import math
import re
from dataclasses import asdict, dataclass, field

import numpy as np
import pandas as pd

from workbench.errors import InputError
from workbench.nets.activations import HEADS, resolve_head

KINDS = ("binary", "multiclass", "signed", "non_negative", "count", "bounded")
TASK_OF_KIND = {"binary": "classification", "multiclass": "classification",
                "signed": "regression", "non_negative": "regression",
                "count": "regression", "bounded": "regression"}

#: common practice: a column with more than this share missing is ignored
MOSTLY_MISSING = 0.6
#: common practice: text columns with more distinct values are not one-hot encoded
MAX_CATEGORIES = 50
#: integer codes 0..k-1 (or 1..k) with at most this many values are read as classes
#: (a rule of thumb of this project, common practice; the number is from memory, no
#: study is cited)
MAX_CODE_CLASSES = 10
#: ... and only when every code holds at least this share of the rows (counts thin out
#: in their tail; class labels rarely do). Codes with a rarer code are read as a count
#: and flagged ambiguous (:attr:`TargetInfo.ambiguous`). Common practice; the 5 % is
#: from memory, no study is cited.
MIN_CODE_SHARE = 0.05
#: a classification target with more classes than this is refused (common practice)
MAX_CLASSES = 100
#: free text: mean length of a value at least this, with spaces (common practice)
TEXT_MIN_LENGTH = 20

HIDDEN_DEFAULT = "relu"
HIDDEN_TO_SWEEP = ("relu", "tanh", "leaky_relu", "gelu", "silu")

_ID_NAME = re.compile(r"(^|[_\s.-])(id|key|uuid|guid|code|no|nr|index|idx)$|^id([_\s.-]|$)",
                      re.I)
_TARGET_STRONG = re.compile(r"^(target|label|labels|y|class|outcome|response)$", re.I)
_TARGET_WORDS = re.compile(
    r"(target|label|class|outcome|result|grade|pass|passed|passes|fail|status|yield|"
    r"price|amount|share|rate|count|change|score|quality|drawn|demand|sales|response)",
    re.I)
_PERCENT_NAME = re.compile(r"(percent|pct|%)", re.I)
#: a time stamp or calendar part by name: the whole name, or a first / last word of it
_TIME_WORD = r"(year|yr|date|datetime|timestamp)"
_TIME_NAME = re.compile(rf"^{_TIME_WORD}([_\s.-]|$)|(^|[_\s.-]){_TIME_WORD}$|"
                        r"^(month|day|week|weekday|quarter|hour|dayofweek|day_of_week)$", re.I)
_UNNAMED = re.compile(r"^(unnamed(:?\s*\d+)?|\s*)$", re.I)  # pandas' name for a saved index
#: whole numbers inside this range forming a run of consecutive values read as years
#: (common practice; the range is from memory)
YEAR_RANGE = (1800, 2100)
_COUNT_NAME = re.compile(r"(count|number|^num_|^n_|_n$|qty|quantity|caught|visits|defects|"
                         r"events|calls|arrivals|per_)", re.I)


# --------------------------------------------------------------------------- columns


@dataclass
class ColumnProfile:
    """One column's profile (fields documented in the module docstring)."""

    name: str
    type: str
    base_type: str
    role: str
    reason: str
    dtype: str
    missing: int
    missing_share: float
    distinct: int
    min: float | str | None = None
    max: float | str | None = None
    mean: float | None = None
    top: list[str] = field(default_factory=list)
    target_candidate: bool = False
    not_suggested: str = ""

    def to_dict(self) -> dict:
        return to_jsonable(asdict(self))


@dataclass
class TableProfile:
    """The profile of a whole table (fields documented in the module docstring)."""

    rows: int
    columns: list[ColumnProfile]
    suggested_target: str | None
    target: str | None = None
    suggestion_reason: str = ""

    def column(self, name: str) -> ColumnProfile:
        for c in self.columns:
            if c.name == name:
                return c
        raise KeyError(name)

    @property
    def names(self) -> list[str]:
        return [c.name for c in self.columns]

    def feature_columns(self, target: str | None = None) -> list[ColumnProfile]:
        """Columns used as features when ``target`` (default: this profile's target) is
        the target: role ``feature``, or the suggested target when another column is
        the target."""
        target = target if target is not None else (self.target or self.suggested_target)
        out = []
        for c in self.columns:
            if c.name == target:
                continue
            if c.role == "feature" or (c.role == "target" and c.type not in _NEVER_FEATURE):
                out.append(c)
        return out

    def with_roles(self, roles: dict[str, str]) -> TableProfile:
        """A copy with some columns' roles changed by the user.

        This is the one rule for applying the user's column roles: the window's
        profile table, the sweep's runner and an export's refit all go through it,
        so a column means the same thing to each of them.

        Parameters
        ----------
        roles : dict
            ``{column: "feature" | "ignore"}``. A column typed ``id``, ``constant`` or
            ``missing`` made a feature is used as its ``base_type`` (an identifier made of
            whole numbers becomes an ``integer`` feature, and so on); making a feature of a
            column that already is one, or ignoring an ignored one, changes nothing.

        Returns
        -------
        TableProfile
            A new profile; this one is left unchanged.

        Raises
        ------
        InputError
            (``setting="roles"``) for an unknown column or role, a role for the target
            column, or free text / an empty column made a feature.
        """
        cols = [ColumnProfile(**asdict(c)) for c in self.columns]
        by_name = {c.name: c for c in cols}
        for name, role in roles.items():
            if name not in by_name:
                raise InputError(f"no column named {name!r}; the columns are: "
                                 f"{', '.join(by_name)}", setting="roles")
            if role not in ("feature", "ignore"):
                raise InputError(f"role {role!r} for {name!r} is not valid; use feature or ignore",
                                 setting="roles")
            if self.target is not None and name == self.target:
                raise InputError(f"column {name!r} is the target, so it is neither a feature nor "
                                 "ignored; choose another target first", setting="roles")
            c = by_name[name]
            if role == "feature" and c.role != "feature":
                if c.distinct == 0:
                    raise InputError(f"column {name!r} has no values and cannot be a feature; "
                                     "leave it ignored", setting="roles")
                if c.base_type == "text":
                    raise InputError(f"column {name!r} is free text and cannot be a feature; "
                                     "leave it ignored", setting="roles")
                if c.type in ("id", "constant", "missing"):
                    c.type = c.base_type
                c.role, c.reason = "feature", "made a feature by the user"
            elif role == "ignore" and c.role != "ignore":
                c.role, c.reason = "ignore", "ignored by the user"
        return TableProfile(rows=self.rows, columns=cols, suggested_target=self.suggested_target,
                            target=self.target, suggestion_reason=self.suggestion_reason)

    def require_features(self, target: str | None = None) -> list[ColumnProfile]:
        """:meth:`feature_columns`, refusing a table that has none.

        Raises
        ------
        InputError
            (``setting="roles"``) naming the ignored columns and why, so that no sweep
            starts whose every trial would fail.
        """
        feats = self.feature_columns(target)
        if feats:
            return feats
        target = target if target is not None else (self.target or self.suggested_target)
        others = [c for c in self.columns if c.name != target]
        if not others:
            raise InputError(f"the table has no column besides the target {target!r}, so there "
                             "is nothing to predict it from; add feature columns",
                             setting="roles")
        why = "; ".join(f"{c.name!r}: {c.reason or c.type}" for c in others[:6])
        more = f"; and {len(others) - 6} more" if len(others) > 6 else ""
        raise InputError(f"no column can be used as a feature for target {target!r} (ignored: "
                         f"{why}{more}); make a column a feature or add feature columns",
                         setting="roles")

    def to_dict(self) -> dict:
        return {"rows": self.rows, "columns": [c.to_dict() for c in self.columns],
                "suggested_target": self.suggested_target,
                "suggestion_reason": self.suggestion_reason, "target": self.target}


_NEVER_FEATURE = ("id", "constant", "missing", "text")


def _is_bool_series(s: pd.Series) -> bool:
    if pd.api.types.is_bool_dtype(s.dtype):
        return True
    if s.dtype == object:
        vals = s.dropna()
        return len(vals) > 0 and all(isinstance(v, bool | np.bool_) for v in vals.iloc[:500]) \
            and vals.map(lambda v: isinstance(v, bool | np.bool_)).all()
    return False


def _integer_valued(v: np.ndarray) -> bool:
    if v.size == 0:
        return False
    if np.issubdtype(v.dtype, np.integer):
        return True
    return bool(np.all(np.isfinite(v)) and np.all(v == np.round(v)))


def _num(x) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def profile_column(s: pd.Series) -> ColumnProfile:
    """Profile one column (see the module docstring for the fields)."""
    name = str(s.name)
    n = len(s)
    missing = int(s.isna().sum())
    share = missing / n if n else 1.0
    vals = s.dropna()
    distinct = int(vals.nunique())
    dtype = str(s.dtype)
    lo = hi = mean = None
    top: list[str] = []

    if _is_bool_series(s):
        base = "boolean"
    elif pd.api.types.is_datetime64_any_dtype(s.dtype):
        base = "datetime"
        if len(vals):
            lo, hi = vals.min().isoformat(), vals.max().isoformat()
    elif pd.api.types.is_numeric_dtype(s.dtype):
        v = vals.to_numpy(dtype=np.float64)
        base = "integer" if _integer_valued(v) else "numeric"
        if v.size:
            lo, hi, mean = _num(v.min()), _num(v.max()), _num(v.mean())
    else:
        txt = vals.astype(str)
        mean_len = float(txt.str.len().mean()) if len(txt) else 0.0
        spaces = float(txt.str.contains(" ", regex=False).mean()) if len(txt) else 0.0
        if distinct <= MAX_CATEGORIES or distinct <= 0.05 * max(len(vals), 1):
            base = "categorical"
        elif mean_len >= TEXT_MIN_LENGTH and spaces >= 0.5:
            base = "text"
        else:
            base = "categorical"
    if base in ("boolean", "categorical", "text") and len(vals):
        top = [str(k) for k in vals.astype(str).value_counts().index[:5]]

    typ, role, reason = base, "feature", ""
    if distinct == 0:
        typ, role, reason = "missing", "ignore", "every value is missing"
    elif share > MOSTLY_MISSING:
        typ, role, reason = "missing", "ignore", \
            f"{share:.0%} of values missing (more than {MOSTLY_MISSING:.0%}, common practice)"
    elif distinct == 1:
        typ, role, reason = "constant", "ignore", f"one value only ({vals.iloc[0]!s})"
    elif _looks_like_id(name, base, vals, n, missing, distinct):
        typ, role, reason = "id", "ignore", "unique per row, like an identifier"
    elif base == "text":
        role, reason = "ignore", "free text (not encoded as a feature)"
    elif base == "categorical" and distinct > MAX_CATEGORIES:
        role, reason = "ignore", \
            f"{distinct} categories (more than {MAX_CATEGORIES} are not one-hot encoded)"
    candidate = role == "feature" and base in ("boolean", "categorical", "integer", "numeric") \
        and (base != "categorical" or distinct <= MAX_CLASSES)
    return ColumnProfile(name=name, type=typ, base_type=base, role=role, reason=reason,
                         dtype=dtype, missing=missing, missing_share=share, distinct=distinct,
                         min=lo, max=hi, mean=mean, top=top, target_candidate=candidate)


def _looks_like_id(name: str, base: str, vals: pd.Series, n: int, missing: int,
                   distinct: int) -> bool:
    if missing or n < 3 or base not in ("integer", "categorical", "text"):
        return False
    if distinct != n:
        return False
    if base == "integer":
        v = vals.to_numpy(dtype=np.float64)
        consecutive = (v.max() - v.min() + 1) == n
        return bool(_ID_NAME.search(name) or consecutive)
    if base == "text":
        return bool(_ID_NAME.search(name))
    return True


def never_a_target(c: ColumnProfile, s: pd.Series) -> str:
    """Why column ``c`` (values ``s``) is never *suggested* as the target, or ``""``.

    A year, a date, an identifier or a row index is rarely what a table is about
    (common practice): a date-time column, an ``id`` column, a name like
    ``year`` / ``order_date`` / ``birth_year`` / ``month``, whole numbers forming a
    run of consecutive years (inside :data:`YEAR_RANGE`), a name like an identifier
    or an index (``subject_id``, ``index``, ``Unnamed: 0``), or whole numbers that
    are unique, strictly increase down the rows and fill at least half of their
    range (row numbers with gaps). The user may still choose such a column.
    """
    if c.base_type == "datetime":
        return "a date"
    if _TIME_NAME.search(c.name):
        return "named like a date or a year"
    if c.base_type == "integer" and c.min is not None and c.distinct >= 2:
        lo, hi = float(c.min), float(c.max)
        if YEAR_RANGE[0] <= lo and hi <= YEAR_RANGE[1] and hi - lo + 1 == c.distinct:
            return (f"whole numbers {lo:g} to {hi:g} with no gap, like years (inside "
                    f"{YEAR_RANGE[0]}..{YEAR_RANGE[1]}, common practice)")
    if _UNNAMED.match(c.name):
        return "an unnamed column, like a saved row index"
    if c.type == "id":
        return "an identifier (unique per row)"
    if _ID_NAME.search(c.name):
        return "named like an identifier or an index"
    if (c.base_type == "integer" and c.min is not None and c.missing == 0
            and c.distinct == len(s) >= 3 and float(c.max) - float(c.min) + 1 <= 2 * len(s)
            and s.is_monotonic_increasing):
        return ("whole numbers unique per row that increase down the rows with few gaps, "
                "like a row index")
    return ""


def _target_score(c: ColumnProfile, first: bool, last: bool) -> tuple[float, list[str], bool]:
    """How much a column looks like the target, the reasons, and whether it is sure.

    Common practice: a usual target name (``target``, ``label``, ``y``, ``class``,
    ``outcome``, ``response``) scores 5, a name containing a word targets are often
    called by (``price``, ``yield``, ``count``, ...) 2, being the table's last column
    2.5 and its first 0.25. Only a usual target name or the last column make a
    suggestion sure; the other points break ties.
    """
    score, why = 0.0, []
    strong = bool(_TARGET_STRONG.match(c.name))
    if strong:
        score += 5
        why.append(f"it is named {c.name!r}, a usual name for a target")
    else:
        m = _TARGET_WORDS.search(c.name)
        if m:
            score += 2
            why.append(f"its name contains {m.group(0).lower()!r}, a word targets are often "
                       "named with")
    if last:
        score += 2.5
        why.insert(0, "it is the table's last column, where tables usually keep the target")
    if first:
        score += 0.25
    return score, why, strong or last


def _suggest(cols: list[ColumnProfile], df: pd.DataFrame) -> tuple[str | None, str]:
    """The suggested target and the sentence saying why (or why there is none)."""
    for c in cols:
        c.not_suggested = never_a_target(c, df[c.name])
    scored = []
    for i, c in enumerate(cols):
        if c.target_candidate and not c.not_suggested:
            sc, why, sure = _target_score(c, first=i == 0, last=i == len(cols) - 1)
            scored.append((sc, c.name, why, sure))
    scored.sort(key=lambda t: -t[0])
    if scored and scored[0][3] and (len(scored) == 1 or scored[1][0] < scored[0][0]):
        _, name, why, _ = scored[0]
        return name, "suggested because " + " and ".join(why) + " (common practice)"
    last = cols[-1] if cols else None
    if last is None:
        return None, "the table has no columns"
    if scored and scored[0][3]:
        tied = [t[1] for t in scored if t[0] == scored[0][0]]
        return None, (f"no target suggested: {', '.join(repr(t) for t in tied)} are equally "
                      "likely targets; choose one")
    if last.not_suggested:
        about = f"the last column, {last.name!r}, is {last.not_suggested}"
    elif not last.target_candidate:
        about = f"the last column, {last.name!r}, cannot be a target ({last.reason or last.type})"
    else:
        about = f"the last column is {last.name!r}"
    return None, ("no target suggested: no column has a usual target name (target, label, y, "
                  f"class, outcome, response) and {about}; choose the target")


def profile_table(df: pd.DataFrame, target: str | None = None) -> TableProfile:
    """Profile every column and name the most likely target.

    The suggestion (``suggested_target``, with ``suggestion_reason``) is a column
    with a usual target name or the table's last column, never a column that
    :func:`never_a_target` rules out; when no column qualifies, or two are equally
    likely, there is no suggestion and the reason says why (the window then asks).

    Parameters
    ----------
    df : pandas.DataFrame
    target : str, optional
        The column the user chose as target; it gets role ``target``.

    Returns
    -------
    TableProfile
    """
    if target is not None:
        check_column(df, target)
    cols = [profile_column(df[c]) for c in df.columns]
    best, why = _suggest(cols, df)
    chosen = target if target is not None else best
    for c in cols:
        if c.name == chosen:
            c.role, c.reason = "target", ("chosen as target" if target is not None
                                          else "most likely target")
    return TableProfile(rows=int(df.shape[0]), columns=cols, suggested_target=best,
                        target=target, suggestion_reason=why)


def parse_roles(items) -> dict[str, str]:
    """Column roles written ``COLUMN=feature`` or ``COLUMN=ignore``, as ``{column: role}``.

    The text after the last ``=`` is the role, so a column name may itself contain
    ``=``. The roles are applied by :meth:`TableProfile.with_roles` (which also
    refuses unknown columns); a later entry for the same column wins.

    Raises
    ------
    InputError
        (``setting="roles"``) for an entry without ``=`` or with another role.
    """
    out: dict[str, str] = {}
    for item in items or []:
        name, sep, role = str(item).rpartition("=")
        role = role.strip().lower()
        if not sep or not name:
            raise InputError(f"column role {item!r} is not written COLUMN=feature or "
                             "COLUMN=ignore", setting="roles")
        if role not in ("feature", "ignore"):
            raise InputError(f"role {role!r} for {name!r} is not valid; use feature or ignore",
                             setting="roles")
        out[name] = role
    return out


def check_column(df: pd.DataFrame, name: str) -> None:
    """Refuse a target name that is not a column of ``df`` (``setting="target"``)."""
    if name not in df.columns:
        raise InputError(_no_column_message(name, df), setting="target")


def _no_column_message(name: str, df: pd.DataFrame) -> str:
    names = [str(c) for c in df.columns]
    shown = ", ".join(names[:12]) + (", ..." if len(names) > 12 else "")
    return f"no column named {name!r}; the columns are: {shown}"


# --------------------------------------------------------------------------- target


@dataclass
class TargetInfo:
    """The analysed target (fields documented in the module docstring)."""

    name: str
    kind: str
    task: str
    evidence: dict
    classes: list | None = None
    interval: tuple[float, float] | None = None
    rows_dropped: int = 0
    rows: int = 0
    detected_kind: str = ""
    kind_set_by_user: bool = False
    ambiguous: bool = False
    alternatives: list[str] = field(default_factory=list)
    ambiguity: str = ""

    def to_dict(self) -> dict:
        d = asdict(self)
        d["interval"] = list(self.interval) if self.interval is not None else None
        return to_jsonable(d)


def analyse_target(df: pd.DataFrame, name: str, kind: str | None = None,
                   interval: tuple[float, float] | None = None) -> TargetInfo:
    """Name the target's kind, with the evidence.

    Parameters
    ----------
    df : pandas.DataFrame
    name : str
        The target column.
    kind : str, optional
        The kind set by the user (one of :data:`KINDS`) instead of the detected one;
        it must fit the values (:func:`check_kind`).
    interval : (float, float), optional
        The known interval of a bounded target (implies ``kind="bounded"``).

    Returns
    -------
    TargetInfo
        ``detected_kind`` is what the values say, ``kind`` what is used;
        ``ambiguous``, ``alternatives`` and ``ambiguity`` flag small integer codes
        that could be classes or a count (see :func:`_detect_kind`).

    Raises
    ------
    InputError
        When the column is missing, entirely empty, has one value only, cannot be a
        target (dates, free text, too many classes) or does not fit the kind set
        (``setting="kind"``, naming the evidence).
    """
    check_column(df, name)
    s = df[name]
    n = len(s)
    miss = s.isna().to_numpy()
    dropped = int(miss.sum())
    vals = s[~miss]
    if len(vals) == 0:
        raise InputError(f"target {name!r} has no values (every cell is missing); choose "
                         "another target column", setting="target")
    if kind is not None and kind not in KINDS:
        raise InputError(f"unknown target kind {kind!r}; choose one of: {', '.join(KINDS)}",
                         setting="kind")
    user_kind = kind is not None or interval is not None
    if interval is not None:
        kind = "bounded"
    distinct = int(vals.nunique())
    ev: dict = {"dtype": str(s.dtype), "rows": n, "missing": dropped,
                "missing_share": dropped / n if n else 0.0, "distinct": distinct,
                "min": None, "max": None, "mean": None, "std": None, "zero_share": None,
                "negative_share": None, "integer_valued": None}
    if distinct == 1:
        raise InputError(f"target {name!r} has a single value ({vals.iloc[0]!s}) in every row; "
                         "there is nothing to predict, choose another target column",
                         setting="target")
    if pd.api.types.is_datetime64_any_dtype(s.dtype):
        raise InputError(f"target {name!r} holds dates; predict a number or a class instead "
                         "(e.g. a duration computed from the dates)", setting="target")
    numeric = pd.api.types.is_numeric_dtype(s.dtype) and not pd.api.types.is_bool_dtype(s.dtype)
    if numeric:
        v = vals.to_numpy(dtype=np.float64)
        if not np.all(np.isfinite(v)):
            raise InputError(f"target {name!r} contains infinite values; remove or replace them",
                             setting="target")
        ev.update(min=float(v.min()), max=float(v.max()), mean=float(v.mean()),
                  std=float(v.std()), zero_share=float(np.mean(v == 0)),
                  negative_share=float(np.mean(v < 0)), integer_valued=_integer_valued(v))
    detected, rule, iv, amb = _detect_kind(name, vals, ev, numeric, forced=user_kind)
    if kind is None:
        kind = detected
    else:
        check_kind(name, kind, ev, numeric, interval, vals)
        rule = f"{kind} as set by the user (detected: {detected}, because {rule})"
        if kind == "bounded":
            iv = interval if interval is not None else (iv or (ev["min"], ev["max"]))
    ev["rule"] = rule
    task = TASK_OF_KIND[kind]
    classes = None
    if task == "classification":
        if distinct > MAX_CLASSES:
            raise InputError(f"target {name!r} has {distinct} distinct values, too many classes "
                             f"(at most {MAX_CLASSES}); choose another target or treat it as a "
                             "number", setting="target")
        counts = vals.value_counts()
        classes = sorted(counts.index.tolist(), key=_sort_key)
        ev["class_counts"] = {str(k): int(counts[k]) for k in classes}
        if int(counts.min()) < 2:
            ev["rule"] += "; some class has a single row, so stratified CV will struggle"
    alternatives, ambiguity = [], ""
    if amb is not None:
        ev["codes"] = amb["codes"]
        alternatives = [k for k in amb["kinds"] if k != kind]
        ambiguity = amb["sentence"]
    return TargetInfo(name=name, kind=kind, task=task, evidence=to_jsonable(ev),
                      classes=[_py(c) for c in classes] if classes is not None else None,
                      interval=(float(iv[0]), float(iv[1])) if kind == "bounded" else None,
                      rows_dropped=dropped, rows=int(len(vals)), detected_kind=detected,
                      kind_set_by_user=user_kind,
                      ambiguous=amb is not None, alternatives=alternatives,
                      ambiguity=ambiguity)


def _sort_key(v):
    return (0, float(v), "") if isinstance(v, int | float | np.number | bool | np.bool_) \
        else (1, 0.0, str(v))


def _py(v):
    return v.item() if isinstance(v, np.generic) else v


def _detect_kind(name: str, vals: pd.Series, ev: dict, numeric: bool, forced: bool = False):
    """The kind the values suggest: ``(kind, rule, interval, ambiguity)``.

    ``ambiguity`` is None, or a dict (``kinds``: the kinds the values fit equally,
    ``codes``: the evidence, ``sentence``: what was found and the rule that picked
    the default) for small integer codes that could be classes or a count: at most
    :data:`MAX_CODE_CLASSES` consecutive whole numbers starting at 0 or 1 are read as
    class labels when every code holds at least :data:`MIN_CODE_SHARE` of the rows,
    and as a count (flagged ambiguous) when some code is rarer or the name says it
    counts. ``forced`` (a kind set by the user) turns a text target that looks like an
    identifier into a ``multiclass`` detection, so the user's kind decides.
    """
    distinct = ev["distinct"]
    if distinct == 2 and (not numeric or ev["integer_valued"]):
        shown = ", ".join(str(x) for x in sorted(vals.unique().tolist(), key=_sort_key))
        return "binary", f"exactly two distinct values ({shown})", None, None
    if not numeric:
        if _is_bool_series(vals):
            return "binary", "boolean values", None, None
        if (distinct > MAX_CLASSES or distinct > 0.5 * len(vals)) and not forced:
            raise InputError(
                f"target {name!r} is text with {distinct} distinct values, which looks like an "
                "identifier or free text, not classes; choose another target column",
                setting="target")
        return "multiclass", f"text labels with {distinct} distinct classes", None, None
    lo, hi, integer = ev["min"], ev["max"], ev["integer_valued"]
    amb = None
    if integer and distinct <= MAX_CODE_CLASSES and lo in (0.0, 1.0) and hi - lo + 1 == distinct:
        shares = vals.value_counts(normalize=True)
        rare, smallest = shares.idxmin(), float(shares.min())
        codes = {"distinct": distinct, "low": lo, "high": hi, "rare_code": _py(rare),
                 "rare_share": smallest, "rare_rows": int(round(smallest * len(vals)))}
        rule_words = (f"Rule: at most {MAX_CODE_CLASSES} consecutive whole-number codes from 0 "
                      f"or 1, each on at least {MIN_CODE_SHARE:.0%} of the rows, are read as "
                      "classes, else as a count (common practice; thresholds from memory).")
        count_name = _COUNT_NAME.search(name)
        if not count_name and smallest >= MIN_CODE_SHARE:
            return "multiclass", (
                f"integer codes {lo:g}..{hi:g} ({distinct} values, at most {MAX_CODE_CLASSES}, "
                f"each at least {MIN_CODE_SHARE:.0%} of rows) read as class labels "
                "(common practice)"), None, None
        why = (f"code {float(rare):g} holds only {smallest:.1%} of the rows (under "
               f"{MIN_CODE_SHARE:.0%})" if smallest < MIN_CODE_SHARE
               else f"the name {name!r} says it counts something")
        amb = {"kinds": ["count", "multiclass"], "codes": codes, "sentence": (
            f"ambiguous: {distinct} consecutive integer codes {lo:g}..{hi:g} could be classes or "
            f"a count; {why}, so they were read as a count; if they name categories, set the "
            f"kind to multiclass. {rule_words}")}
    if lo < 0:
        return "signed", f"takes negative values (min {lo:g}, max {hi:g})", None, amb
    if integer and lo <= 1:
        return "count", (f"non-negative whole numbers from {lo:g} to {hi:g} "
                         f"({ev['zero_share']:.0%} zeros)"), None, amb
    if hi <= 1:
        return "bounded", f"all values inside [0, 1] (min {lo:g}, max {hi:g}): a proportion", \
            (0.0, 1.0), amb
    if hi <= 100 and _PERCENT_NAME.search(name):
        return "bounded", f"a percentage inside [0, 100] (min {lo:g}, max {hi:g})", \
            (0.0, 100.0), amb
    return "non_negative", (f"never below zero (min {lo:g}, max {hi:g}, "
                            f"{ev['zero_share']:.0%} zeros)"), None, amb


def check_kind(name: str, kind: str, ev: dict, numeric: bool, interval=None,
               vals: pd.Series | None = None) -> None:
    """Refuse a kind set by the user that the target's values cannot have.

    Each refusal is one line naming the evidence (``setting="kind"``): binary needs
    exactly two distinct values; multiclass at least two and at most
    :data:`MAX_CLASSES`, whole numbers or text; the regression kinds numbers;
    non_negative and count no negative value; count whole numbers; bounded values
    inside the interval given.
    """
    distinct = ev["distinct"]
    if kind == "binary" and distinct != 2:
        raise InputError(f"target {name!r} has {distinct} distinct values, not 2, so it cannot "
                         "be binary; choose multiclass or a regression kind", setting="kind")
    if kind == "multiclass":
        if distinct > MAX_CLASSES:
            raise InputError(f"target {name!r} has {distinct} distinct values, more than "
                             f"{MAX_CLASSES} classes, so it cannot be multiclass; choose a "
                             "regression kind", setting="kind")
        if numeric and not ev["integer_valued"]:
            frac = next((float(v) for v in vals if float(v) != round(float(v))), None) \
                if vals is not None else None
            eg = f" (e.g. {frac:g})" if frac is not None else ""
            raise InputError(f"target {name!r} has values that are not whole numbers{eg}, so "
                             "they cannot be class labels; choose a regression kind",
                             setting="kind")
    if TASK_OF_KIND[kind] == "regression" and not numeric:
        raise InputError(f"target {name!r} is not numeric (dtype {ev['dtype']}), so it cannot "
                         f"be a {kind} regression target; choose binary or multiclass",
                         setting="kind")
    if kind in ("non_negative", "count") and ev["min"] < 0:
        raise InputError(f"target {name!r} has negative values (min {ev['min']:g}, "
                         f"{ev['negative_share']:.1%} of rows), so it cannot be {kind}; choose "
                         "signed", setting="kind")
    if kind == "count" and not ev["integer_valued"]:
        raise InputError(f"target {name!r} has values that are not whole numbers, so it cannot "
                         "be a count; choose non_negative", setting="kind")
    if kind == "bounded" and interval is not None:
        lo, hi = float(interval[0]), float(interval[1])
        if not lo < hi:
            raise InputError(f"interval ({lo:g}, {hi:g}) is empty; give low < high",
                             setting="kind")
        if ev["min"] < lo or ev["max"] > hi:
            raise InputError(f"target {name!r} has values outside [{lo:g}, {hi:g}] (min "
                             f"{ev['min']:g}, max {ev['max']:g}); widen the interval",
                             setting="kind")


def split_xy(df: pd.DataFrame, target: TargetInfo) -> tuple[pd.DataFrame, np.ndarray]:
    """Features and target with the rows whose target is missing dropped.

    Returns
    -------
    X : pandas.DataFrame
        Every column except the target (the preprocessor picks the features).
    y : numpy.ndarray
        float64 for regression; the labels as they are in the table for classification.
    """
    keep = df[target.name].notna().to_numpy()
    X = df.loc[keep].drop(columns=[target.name]).reset_index(drop=True)
    ys = df.loc[keep, target.name]
    if target.task == "regression":
        y = ys.to_numpy(dtype=np.float64)
    else:
        y = ys.to_numpy()
        if y.dtype.kind not in "biuf":
            y = y.astype(object)
    return X, y


# --------------------------------------------------------------------------- advice


@dataclass(frozen=True)
class Advice:
    """The recommended output head (fields documented in the module docstring)."""

    output_head: str
    loss: str
    reason: str
    hidden: str = HIDDEN_DEFAULT
    hidden_to_sweep: tuple = HIDDEN_TO_SWEEP
    heads_to_sweep: tuple = ()
    basis: str = "common practice"

    def to_dict(self) -> dict:
        return to_jsonable(asdict(self))


#: common practice: when at least this share of a non-negative target is exactly zero,
#: a relu head (which reaches exact zeros) is advised over softplus
ZERO_SHARE_FOR_RELU = 0.10


def advise(target: TargetInfo) -> Advice:
    """Recommend the output head and loss for the target's kind (common practice).

    Binary -> logistic with log-loss; multiclass -> softmax with log-loss; signed ->
    identity with squared error; non-negative -> relu (many exact zeros) or softplus
    with squared error; count -> exp with the Poisson deviance; bounded -> logistic
    with squared error on the target mapped from its interval to [0, 1].
    Hidden layers default to relu, with tanh, leaky_relu, gelu and silu worth sweeping.
    """
    k = target.kind
    ev = target.evidence
    if k == "binary":
        head, reason, sweep = "logistic", (
            "two classes: a logistic output gives the probability of the positive class and "
            "is matched with log-loss"), ("logistic", "softmax")
    elif k == "multiclass":
        head, reason, sweep = "softmax", (
            f"{len(target.classes or [])} classes: a softmax output gives one probability per "
            "class, summing to one, matched with log-loss"), ("softmax",)
    elif k == "signed":
        head, reason, sweep = "identity", (
            "the target takes negative and positive values, so a linear (identity) output "
            "that can reach any real number is the natural choice"), ("identity",)
    elif k == "non_negative":
        zs = ev.get("zero_share") or 0.0
        if zs >= ZERO_SHARE_FOR_RELU:
            head, reason = "relu", (
                f"the target is never below zero and {zs:.0%} of it is exactly zero, so a relu "
                "output, which cannot go negative and reaches zero exactly, fits")
            sweep = ("relu", "softplus", "exp", "identity")
        else:
            head, reason = "softplus", (
                "the target is never below zero, so a softplus output, which cannot go negative "
                "and never goes flat, fits")
            sweep = ("softplus", "relu", "exp", "identity")
    elif k == "count":
        head, reason, sweep = "exp", (
            "the target counts events (non-negative whole numbers), so an exp output matched "
            "with the Poisson deviance is the classic choice"), ("exp", "softplus", "relu",
                                                                   "identity")
    else:  # bounded
        lo, hi = target.interval or (0.0, 1.0)
        head, reason, sweep = "logistic", (
            f"the target lies in the known interval [{lo:g}, {hi:g}], so it is mapped to [0, 1] "
            "and a logistic output keeps predictions inside it"), ("logistic", "identity",
                                                                   "relu")
    loss = HEADS[(target.task, head)].loss
    return Advice(output_head=head, loss=loss, reason=reason + " (common practice).",
                  heads_to_sweep=sweep)


# --------------------------------------------------------------------------- head guard


@dataclass(frozen=True)
class HeadCheck:
    """Result of :func:`check_head` (fields documented in the module docstring)."""

    allowed: bool
    warning: bool
    reason: str
    head: str | None = None
    loss: str | None = None

    def to_dict(self) -> dict:
        return asdict(self)


USUAL_HEADS = {
    "binary": ("logistic",),
    "multiclass": ("softmax",),
    "signed": ("identity",),
    "non_negative": ("relu", "softplus", "exp"),
    "count": ("exp", "relu", "softplus"),
    "bounded": ("logistic",),
}


def check_head(target: TargetInfo, head: str) -> HeadCheck:
    """Can the output ``head`` serve this target?

    Refused when the head belongs to the other task, when its range cannot cover
    the target (relu / softplus / exp with negative values; the regression logistic
    head with values outside the target's interval), or a logistic head for more
    than two classes. Allowed with a warning when it is only unusual for the kind.
    """
    try:
        h = resolve_head(head, target.task)
    except ValueError as exc:
        return HeadCheck(False, False, str(exc))
    name, ev = h.name, target.evidence
    if target.task == "classification":
        n_classes = len(target.classes or [])
        if name == "logistic" and n_classes > 2:
            return HeadCheck(False, False,
                             f"the logistic head gives one probability, but {target.name!r} has "
                             f"{n_classes} classes; use softmax", name, h.loss)
    else:
        lo, hi = ev.get("min"), ev.get("max")
        if h.low == 0.0 and h.high == math.inf and lo is not None and lo < 0:
            return HeadCheck(False, False,
                             f"the {name} head never goes below 0, but {target.name!r} has "
                             f"negative values (min {lo:g}); use identity", name, h.loss)
        if name == "logistic":
            if target.interval is not None:
                ilo, ihi = target.interval
                if lo < ilo or hi > ihi:
                    return HeadCheck(False, False,
                                     f"the logistic head maps to [{ilo:g}, {ihi:g}], but "
                                     f"{target.name!r} has values outside it (min {lo:g}, max "
                                     f"{hi:g})", name, h.loss)
            else:
                return HeadCheck(True, True,
                                 f"{target.name!r} has no known interval; the logistic head "
                                 f"will map the training range [{lo:g}, {hi:g}] to [0, 1] and "
                                 "cannot predict outside it", name, h.loss)
    if name in USUAL_HEADS[target.kind]:
        return HeadCheck(True, False, "", name, h.loss)
    usual = ", ".join(USUAL_HEADS[target.kind])
    extra = ""
    if name == "identity" and target.kind in ("non_negative", "count", "bounded"):
        extra = "; it can predict values outside the target's range"
    return HeadCheck(True, True,
                     f"the {name} head is unusual for a {target.kind} target (usual: {usual})"
                     f"{extra}", name, h.loss)


# --------------------------------------------------------------------------- helpers


def to_jsonable(obj):
    """Plain Python types only (numpy scalars -> Python, NaN/inf -> None)."""
    if isinstance(obj, dict):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    if isinstance(obj, pd.Timestamp):
        return obj.isoformat()
    return obj
