"""A target the user can correct: the suggested target, ambiguous integer codes, a kind
set by the user, and a table with no usable feature.

Outside references:

- statsmodels' ``anes96`` data (1996 American National Election Study, shipped with
  statsmodels): ``PID`` is party identification coded 0 (strong Democrat) to 6 (strong
  Republican), a category stored as whole numbers; code 3 (independent) holds 37 of
  944 rows (3.9 %). pandas' ``value_counts`` recomputes the evidence.
- statsmodels' ``longley`` data (Longley 1967, JASA 62:819-841): ``TOTEMP`` is the
  response in statsmodels' order (first column); R's ``datasets::longley`` puts
  ``Employed`` last. ``YEAR`` runs 1947..1962.
- The Palmer penguins table (Horst, Hill & Gorman 2020, R package palmerpenguins)
  ends with ``year`` (2007..2009); it is rebuilt here in miniature with the same
  column names and value ranges, the values drawn at random.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from workbench.data.profiling import (
    KINDS,
    MAX_CODE_CLASSES,
    MIN_CODE_SHARE,
    analyse_target,
    never_a_target,
    profile_table,
)
from workbench.errors import InputError


def _anes():
    from statsmodels.datasets import anes96

    return anes96.load_pandas().data


def _longley():
    from statsmodels.datasets import longley

    return longley.load_pandas().data


def _penguins(n=120, seed=0):
    rng = np.random.default_rng(seed)
    return pd.DataFrame({
        "species": rng.choice(["Adelie", "Chinstrap", "Gentoo"], n),
        "island": rng.choice(["Biscoe", "Dream", "Torgersen"], n),
        "bill_length_mm": rng.normal(44, 5, n).round(1),
        "bill_depth_mm": rng.normal(17, 2, n).round(1),
        "flipper_length_mm": rng.integers(172, 231, n),
        "body_mass_g": rng.integers(2700, 6300, n),
        "sex": rng.choice(["female", "male"], n),
        "year": rng.choice([2007, 2008, 2009], n),
    })


# --------------------------------------------------------------------------- suggestion


def test_penguins_like_table_does_not_suggest_its_year():
    prof = profile_table(_penguins())
    assert prof.suggested_target is None
    assert "'year'" in prof.suggestion_reason and "year" in prof.column("year").not_suggested
    assert prof.column("year").role == "feature"  # still usable as a feature
    # the same table with the year moved away from the end: the last column is suggested
    df = _penguins()
    df = df[["year"] + [c for c in df.columns if c != "year"]]
    prof = profile_table(df)
    assert prof.suggested_target == "sex"
    assert "last column" in prof.suggestion_reason


def test_longley_in_statsmodels_order_suggests_nothing_and_in_r_order_employment():
    df = _longley()
    assert list(df.columns)[-1] == "YEAR" and df["YEAR"].min() == 1947
    prof = profile_table(df)
    # YEAR (last) is a year, and no column has a target's name: the window must ask
    assert prof.suggested_target is None
    assert "'YEAR'" in prof.suggestion_reason and "year" in prof.suggestion_reason
    assert prof.column("YEAR").not_suggested
    # POP grows every year but is a measurement, not an index
    assert prof.column("POP").not_suggested == ""
    r_order = df[["GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR", "TOTEMP"]]
    prof = profile_table(r_order)
    assert prof.suggested_target == "TOTEMP"
    assert prof.suggestion_reason.startswith("suggested because it is the table's last column")


@pytest.mark.parametrize("name,values,fragment", [
    ("year", [2001, 2003, 2001, 2002, 2003, 2002], "date or a year"),
    ("order_date", [f"2024-01-0{i % 9 + 1}" for i in range(6)], "date or a year"),
    ("birth_year", [1961, 1975, 1980, 1955, 1990, 1961], "date or a year"),
    ("season", [1990, 1991, 1992, 1993, 1994, 1995], "like years"),
    ("Unnamed: 0", [0, 1, 2, 3, 4, 5], "unnamed"),
    ("subject_id", [1, 1, 2, 2, 3, 3], "identifier or an index"),
    ("row", [1, 2, 4, 5, 7, 8], "row index"),
])
def test_years_dates_identifiers_and_indexes_are_never_suggested(name, values, fragment):
    rng = np.random.default_rng(1)
    df = pd.DataFrame({"x": rng.normal(size=6), "w": rng.normal(size=6), name: values})
    prof = profile_table(df)
    col = prof.column(name)
    assert fragment in col.not_suggested
    assert never_a_target(col, df[name]) == col.not_suggested
    assert prof.suggested_target is None and repr(name) in prof.suggestion_reason


def test_a_measured_last_column_is_still_suggested_with_its_reason():
    rng = np.random.default_rng(2)
    n = 50
    df = pd.DataFrame({"x": rng.normal(size=n), "day_count": rng.integers(0, 9, n),
                       "yield_kg": rng.gamma(2, 2, n)})
    prof = profile_table(df)
    assert prof.suggested_target == "yield_kg"
    assert "last column" in prof.suggestion_reason and "'yield'" in prof.suggestion_reason
    assert prof.to_dict()["suggestion_reason"] == prof.suggestion_reason


def test_a_usual_target_name_wins_and_two_of_them_tie_so_none_is_suggested():
    rng = np.random.default_rng(3)
    n = 40
    df = pd.DataFrame({"y": rng.normal(size=n), "x": rng.normal(size=n),
                       "price": rng.gamma(2, 2, n)})
    prof = profile_table(df)
    assert prof.suggested_target == "y" and "usual name for a target" in prof.suggestion_reason
    df = pd.DataFrame({"x": rng.normal(size=n), "label": rng.choice(["a", "b"], n),
                       "target": rng.normal(size=n), "z": rng.normal(size=n)})
    prof = profile_table(df)
    assert prof.suggested_target is None
    assert "'label'" in prof.suggestion_reason and "'target'" in prof.suggestion_reason


# --------------------------------------------------------------------------- ambiguity


def test_party_identification_0_to_6_with_a_rare_code_is_flagged_ambiguous():
    df = _anes()
    shares = df["PID"].value_counts(normalize=True)
    assert shares.min() == pytest.approx(37 / 944) and shares.idxmin() == 3.0
    t = analyse_target(df, "PID")
    assert t.kind == "count" and t.detected_kind == "count" and not t.kind_set_by_user
    assert t.ambiguous and t.alternatives == ["multiclass"]
    codes = t.evidence["codes"]
    assert codes == {"distinct": 7, "low": 0.0, "high": 6.0, "rare_code": 3.0,
                     "rare_share": pytest.approx(shares.min()), "rare_rows": 37}
    # the sentence names the evidence and the rule with its thresholds
    for fragment in ("7 consecutive integer codes 0..6", "code 3 holds only 3.9%",
                     f"under {MIN_CODE_SHARE:.0%}", f"at most {MAX_CODE_CLASSES}",
                     "set the kind to multiclass", "common practice", "from memory"):
        assert fragment in t.ambiguity
    assert t.to_dict()["ambiguous"] is True and "\n" not in t.ambiguity


def test_kind_multiclass_makes_the_code_a_classification():
    df = _anes()
    t = analyse_target(df, "PID", kind="multiclass")
    assert t.kind == "multiclass" and t.task == "classification"
    assert t.detected_kind == "count" and t.kind_set_by_user
    assert t.classes == [0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0]
    assert t.evidence["class_counts"]["3.0"] == 37
    assert t.ambiguous and t.alternatives == ["count"]
    assert "set by the user" in t.evidence["rule"] and "detected: count" in t.evidence["rule"]


@pytest.mark.parametrize("name,codes,shares,kind,ambiguous", [
    ("grade", [0, 1, 2, 3, 4], [0.2] * 5, "multiclass", False),      # every code common
    ("grade", [1, 2, 3, 4], [0.5, 0.3, 0.17, 0.03], "count", True),  # a rare code, from 1
    ("n_visits", [0, 1, 2, 3], [0.25] * 4, "count", True),           # the name says count
    ("defects", list(range(15)), None, "count", False),              # too many codes
    ("ok", [0, 1], [0.97, 0.03], "binary", False),                   # two values: binary
])
def test_small_integer_codes(name, codes, shares, kind, ambiguous):
    rng = np.random.default_rng(4)
    n = 400
    values = rng.choice(codes, n, p=shares)
    values[:len(codes)] = codes  # every code present
    t = analyse_target(pd.DataFrame({"x": rng.normal(size=n), name: values}), name)
    assert (t.kind, t.ambiguous) == (kind, ambiguous)
    assert (t.ambiguity != "") == ambiguous and ("codes" in t.evidence) == ambiguous


# --------------------------------------------------------------------------- kind set by the user


@pytest.mark.parametrize("values,kind,fragment", [
    ([0, 1, 2, 3, 4] * 4, "binary", "has 5 distinct values, not 2"),
    ([-2.0, 0.5, 1.0, 3.0] * 5, "non_negative", "negative values (min -2, 25.0% of rows)"),
    ([-2, 0, 1, 3] * 5, "count", "negative values (min -2"),
    ([0.5, 1.0, 2.0, 3.0] * 5, "count", "not whole numbers"),
    ([0.5, 1.0, 2.0, 3.0] * 5, "multiclass", "not whole numbers (e.g. 0.5)"),
    (list(range(150)), "multiclass", "150 distinct values, more than 100 classes"),
    (["a", "b", "c", "a"] * 5, "signed", "is not numeric"),
    ([0, 1, 2, 3] * 5, "nominal", "unknown target kind 'nominal'"),
])
def test_a_kind_the_values_cannot_have_is_refused_naming_the_evidence(values, kind, fragment):
    df = pd.DataFrame({"x": np.arange(len(values)), "t": values})
    with pytest.raises(InputError) as info:
        analyse_target(df, "t", kind=kind)
    assert fragment in str(info.value)
    assert info.value.setting == "kind" and "\n" not in str(info.value)


@pytest.mark.parametrize("kind", KINDS)
def test_every_kind_the_values_can_have_is_accepted(kind):
    values = {"binary": [0, 1] * 10, "multiclass": [0, 1, 2, 3] * 5,
              "signed": [0, 1, 2, 3] * 5, "non_negative": [0, 1, 2, 3] * 5,
              "count": [0, 1, 2, 3] * 5, "bounded": [0.0, 0.2, 0.5, 1.0] * 5}[kind]
    t = analyse_target(pd.DataFrame({"x": np.arange(20), "t": values}), "t", kind=kind)
    assert t.kind == kind and t.kind_set_by_user


# --------------------------------------------------------------------------- features


def test_a_table_without_usable_features_is_refused_naming_why():
    n = 30
    df = pd.DataFrame({"sample_id": [f"s{i}" for i in range(n)], "site": "north",
                       "y": np.linspace(0, 1, n)})
    prof = profile_table(df, target="y")
    with pytest.raises(InputError) as info:
        prof.require_features()
    msg = str(info.value)
    assert info.value.setting == "roles" and "'sample_id'" in msg and "'site'" in msg
    assert "identifier" in msg and "one value only" in msg
    # made a feature by the user (through with_roles), the identifier is usable
    feats = prof.with_roles({"sample_id": "feature"}).require_features()
    assert [c.name for c in feats] == ["sample_id"]
    with pytest.raises(InputError, match="no column besides the target"):
        profile_table(df[["y"]], target="y").require_features()
