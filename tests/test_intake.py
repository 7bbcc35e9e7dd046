"""Table loading: formats, encodings, sniffing, and the bad-input corpus.

References: pandas' own C parser (``pandas.read_csv`` with the delimiter and decimal
given explicitly) and ``DataFrame.to_csv`` / ``to_excel`` / ``to_parquet`` are the
outside references the loader's results are compared with.
"""

from __future__ import annotations

import csv
import io
import os
import subprocess
import sys
import zipfile

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import workbench.data.intake as intake
from workbench.cli import main, phrase_error
from workbench.data.intake import LoadReport, load_table
from workbench.errors import EXIT_BAD_INPUT, InputError


def _frame(n=30, seed=0):
    rng = np.random.default_rng(seed)
    return pd.DataFrame({
        "x": np.round(rng.normal(size=n), 4),
        "k": rng.integers(0, 9, n),
        "colour": rng.choice(["red", "green", "blue"], n),
        "y": np.round(rng.uniform(-5, 5, n), 3),
    })


# --------------------------------------------------------------------------- good files


@pytest.mark.parametrize("sep,decimal,ext", [(",", ".", ".csv"), (";", ",", ".csv"),
                                             ("\t", ".", ".tsv"), ("|", ".", ".txt"),
                                             (";", ".", ".txt")])
def test_delimiters_and_decimal_comma_match_pandas_reference(tmp_path, sep, decimal, ext):
    df = _frame()
    path = tmp_path / f"t{ext}"
    df.to_csv(path, sep=sep, decimal=decimal, index=False)
    got, rep = load_table(path)
    assert rep.delimiter == sep and rep.decimal == decimal
    # outside reference: pandas' C parser told the delimiter and decimal mark
    ref = pd.read_csv(path, sep=sep, decimal=decimal, engine="c")
    pd.testing.assert_frame_equal(got, ref, check_dtype=False)
    np.testing.assert_allclose(got["x"].to_numpy(), df["x"].to_numpy())
    assert (rep.rows, rep.columns) == df.shape
    assert isinstance(rep, LoadReport) and rep.to_dict()["rows"] == len(df)


@pytest.mark.parametrize("encoding,expected", [("utf-8", "utf-8"), ("utf-8-sig", "utf-8-sig"),
                                               ("utf-16", "utf-16"), ("latin-1", "latin-1")])
def test_encodings(tmp_path, encoding, expected):
    df = pd.DataFrame({"städte": ["Zürich", "Genève", "Malmö", "Zürich"], "n": [1, 2, 3, 4]})
    path = tmp_path / "enc.csv"
    path.write_bytes(df.to_csv(index=False).encode(encoding))
    got, rep = load_table(path)
    assert rep.encoding == expected
    assert list(got.columns) == ["städte", "n"]
    assert got["städte"].tolist() == df["städte"].tolist()


def test_latin1_after_the_sniffed_part_is_reread(tmp_path, monkeypatch):
    # the first 256 KB are plain ASCII, a Latin-1 byte comes much later
    monkeypatch.setattr(intake, "_SNIFF_BYTES", 64)
    path = tmp_path / "late.csv"
    body = "a,b\n" + "".join(f"{i},plain\n" for i in range(50)) + "51,caf\xe9\n"
    path.write_bytes(body.encode("latin-1"))
    got, rep = load_table(path)
    assert rep.encoding == "latin-1"
    assert got["b"].iloc[-1] == "café"


def test_type_change_after_first_block_falls_back_to_c_engine(tmp_path, monkeypatch):
    monkeypatch.setattr(intake, "_BLOCK_BYTES", 256)
    path = tmp_path / "late_text.csv"
    rows = [f"{i},{i * 2}" for i in range(300)] + ["300,not a number"]
    path.write_text("a,b\n" + "\n".join(rows) + "\n")
    got, rep = load_table(path)
    assert rep.engine == "c"
    assert got.shape == (301, 2)
    assert got["b"].iloc[-1] == "not a number"


def test_xlsx_first_and_named_sheet(tmp_path):
    path = tmp_path / "book.xlsx"
    a, b = _frame(12, 1), _frame(15, 2)
    with pd.ExcelWriter(path) as w:
        a.to_excel(w, sheet_name="first", index=False)
        b.to_excel(w, sheet_name="second", index=False)
    got, rep = load_table(path)
    assert rep.format == "xlsx" and rep.sheet == "first"
    pd.testing.assert_frame_equal(got, a, check_dtype=False)
    got2, rep2 = load_table(path, sheet="second")
    assert rep2.sheet == "second" and got2.shape == b.shape
    np.testing.assert_allclose(got2["y"].to_numpy(float), b["y"].to_numpy())
    with pytest.raises(InputError, match="no sheet named 'third'.*first, second") as info:
        load_table(path, sheet="third")
    assert info.value.setting == "sheet"


def test_sheet_messages_speak_of_the_worksheet_not_a_flag(tmp_path):
    path = tmp_path / "book.xlsx"
    with pd.ExcelWriter(path) as w:
        _frame(12).to_excel(w, sheet_name="data", index=False)
        pd.DataFrame().to_excel(w, sheet_name="blank", index=False)
    with pytest.raises(InputError, match="sheet 'blank' is empty; choose the worksheet") as info:
        load_table(path, sheet="blank")
    assert info.value.setting == "sheet" and "--" not in str(info.value)
    csv_path = tmp_path / "t.csv"
    _frame(12).to_csv(csv_path, index=False)
    _, rep = load_table(csv_path, sheet="data")  # a text table has no sheets: a warning
    assert rep.warnings == ["the worksheet 'data' is not used: only .xlsx workbooks have sheets"]


def test_parquet_round_trip(tmp_path):
    df = _frame(20)
    df["when"] = pd.date_range("2024-01-01", periods=20, freq="D")
    path = tmp_path / "t.parquet"
    df.to_parquet(path)
    got, rep = load_table(path)
    assert rep.format == "parquet"
    pd.testing.assert_frame_equal(got, df, check_dtype=False, check_index_type=False)


def test_dates_become_datetimes_and_empty_rows_are_dropped(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text("day,stamp,v,\n2024-01-05,2024-01-05 10:30,1,\n,,,\n"
                    "2024-02-29,2024-02-29T23:59:00,2,\n2024-03-01,,3,\n")
    got, rep = load_table(path)
    assert pd.api.types.is_datetime64_any_dtype(got["day"])
    assert pd.api.types.is_datetime64_any_dtype(got["stamp"])
    assert got["day"].dt.day.tolist() == [5, 29, 1]
    assert got["stamp"].isna().tolist() == [False, False, True]
    assert rep.rows_dropped == 1 and "empty row" in rep.drop_reasons[0]
    assert list(got.columns) == ["day", "stamp", "v"]  # nameless empty column dropped
    assert any("no name and no values" in w for w in rep.warnings)


def test_quoted_fields_with_delimiters_and_newlines(tmp_path):
    path = tmp_path / "q.csv"
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["id", "note", "v"])
        w.writerow([1, "a, b; c", 1.5])
        w.writerow([2, "two\nlines", 2.5])
        w.writerow([3, 'say "hi"', 3.5])
    got, _ = load_table(path)
    assert got["note"].tolist() == ["a, b; c", "two\nlines", 'say "hi"']
    assert got["v"].tolist() == [1.5, 2.5, 3.5]


def test_missing_markers_become_nan(tmp_path):
    path = tmp_path / "m.csv"
    path.write_text("a,b\n1,x\nNA,y\n3,null\n4,\n")
    got, _ = load_table(path)
    assert got["a"].isna().tolist() == [False, True, False, False]
    assert got["b"].isna().tolist() == [False, False, True, True]


# --------------------------------------------------------------------------- bad input corpus


def _write(path, data):
    if isinstance(data, bytes):
        path.write_bytes(data)
    else:
        path.write_text(data)
    return path


def _corrupt_xlsx(tmp_path):
    p = tmp_path / "broken.xlsx"
    good = tmp_path / "good.xlsx"
    _frame(5).to_excel(good, index=False)
    raw = good.read_bytes()
    p.write_bytes(raw[: len(raw) // 2])  # truncated zip
    return p


def _zip_not_xlsx(tmp_path):
    p = tmp_path / "other.xlsx"
    with zipfile.ZipFile(p, "w") as z:
        z.writestr("hello.txt", "not a workbook")
    return p


def _corrupt_parquet(tmp_path):
    good = tmp_path / "good.parquet"
    _frame(50).to_parquet(good)
    raw = bytearray(good.read_bytes())
    raw[len(raw) // 3: len(raw) // 3 + 40] = b"\x00" * 40
    p = tmp_path / "broken.parquet"
    p.write_bytes(bytes(raw[:-10]))
    return p


RAGGED = "a,b,c\n1,2,3\n4,5,6\n7,8\n9,10,11\n"
RAGGED_LONG = "a;b\n1;2\n3;4\n5;6;7\n"

#: (case id, how to make the file, expected message fragment)
CORPUS = [
    ("missing file", lambda t: t / "nope.csv", "no such file"),
    ("folder", lambda t: (t / "afolder.csv").mkdir() or (t / "afolder.csv"), "is a folder"),
    ("empty file", lambda t: _write(t / "empty.csv", ""), "is empty (0 bytes)"),
    ("blank lines only", lambda t: _write(t / "blank.csv", "\n\n  \n"), "only blank lines"),
    ("header only", lambda t: _write(t / "header.csv", "a,b,c\n"), "header but no data rows"),
    ("binary bytes", lambda t: _write(t / "bin.csv", bytes(range(256)) * 8),
     "binary data"),
    ("xlsx under .csv", lambda t: _write(t / "book.csv", b"PK\x03\x04" + b"\x14" * 200),
     "zip archive"),
    ("control characters", lambda t: _write(t / "ctl.txt", b"\x01\x02\x03\x04\x05ab\n" * 40),
     "looks like a binary file"),
    ("ragged short row", lambda t: _write(t / "ragged.csv", RAGGED),
     "line 4 has 2 fields but the header has 3"),
    ("ragged long row", lambda t: _write(t / "ragged2.csv", RAGGED_LONG),
     "line 4 has 3 fields but the header has 2"),
    ("duplicate names", lambda t: _write(t / "dup.csv", "a,b,a\n1,2,3\n4,5,6\n"),
     "duplicate column names: 'a'"),
    ("duplicate names after stripping", lambda t: _write(t / "dup2.csv", "a, a\n1,2\n3,4\n"),
     "duplicate column names"),
    ("corrupt xlsx", _corrupt_xlsx, "not a valid .xlsx workbook"),
    ("zip that is not xlsx", _zip_not_xlsx, "corrupt or unreadable .xlsx"),
    ("corrupt parquet", _corrupt_parquet, "corrupt or unreadable Parquet"),
    ("parquet of text", lambda t: _write(t / "text.parquet", "a,b\n1,2\n"),
     "corrupt or unreadable Parquet"),
    ("unsupported extension", lambda t: _write(t / "table.json", "{}"), "unsupported file type"),
    ("old excel", lambda t: _write(t / "old.xls", b"\xd0\xcf\x11\xe0"), "save the sheet as .xlsx"),
    ("single row", lambda t: _write(t / "one.csv", "a,b\n1,2\n"), "single data row"),
    ("single row xlsx", lambda t: _frame(1).to_excel(t / "one.xlsx", index=False)
     or (t / "one.xlsx"), "single data row"),
]


@pytest.mark.parametrize("case,make,fragment", CORPUS, ids=[c[0] for c in CORPUS])
def test_bad_input_corpus(tmp_path, capsys, case, make, fragment):
    path = make(tmp_path)
    with pytest.raises(InputError) as info:
        load_table(path)
    msg = str(info.value)
    assert fragment in msg
    assert "\n" not in msg and ";" in msg  # one line: what is wrong; what to do
    assert info.value.setting == "table" and "--" not in msg  # a setting, in words
    code = main(["inspect", str(path)])
    out, err = capsys.readouterr()
    assert code == EXIT_BAD_INPUT
    # the command line says the core's line, then the argument that sets the table
    assert err.strip() == f"workbench: {phrase_error(info.value)}"
    assert err.strip().endswith("(set with the FILE argument)")
    assert "Traceback" not in err and out == ""


def test_ragged_row_beyond_the_sniffed_part(tmp_path, monkeypatch):
    monkeypatch.setattr(intake, "_SNIFF_BYTES", 128)
    lines = ["a,b"] + [f"{i},{i}" for i in range(500)]
    lines.insert(401, "x,y,z")  # physical line 402
    path = _write(tmp_path / "late_ragged.csv", "\n".join(lines) + "\n")
    with pytest.raises(InputError, match="line 402 has 3 fields but the header has 2"):
        load_table(path)


def test_ragged_line_number_counts_quoted_newlines(tmp_path):
    path = _write(tmp_path / "qr.csv", 'a,b\n1,"x\ny"\n2,3,4\n')
    with pytest.raises(InputError, match="line 4 has 3 fields"):
        load_table(path)


def test_no_read_permission(tmp_path, capsys, monkeypatch):
    path = _write(tmp_path / "secret.csv", "a,b\n1,2\n3,4\n")
    os.chmod(path, 0)
    try:
        if os.access(path, os.R_OK):
            # running as root: chmod 000 does not stop reads, so simulate the refusal
            real_open = open

            def refusing_open(file, *args, **kwargs):
                if os.fspath(file) == os.fspath(path):
                    raise PermissionError(13, "Permission denied", os.fspath(file))
                return real_open(file, *args, **kwargs)

            monkeypatch.setattr(intake, "open", refusing_open, raising=False)
        with pytest.raises(InputError, match="no permission to read") as info:
            load_table(path)
        assert "\n" not in str(info.value)
        assert main(["inspect", str(path)]) == EXIT_BAD_INPUT
        err = capsys.readouterr().err
        assert "no permission to read" in err and "Traceback" not in err
    finally:
        os.chmod(path, 0o644)


def test_size_limits(tmp_path, capsys):
    path = tmp_path / "big.csv"
    _frame(40).to_csv(path, index=False)
    with pytest.raises(InputError, match="160 cells, over the size limit of 100 cells"):
        load_table(path, max_cells=100)
    assert load_table(path, max_cells=160)[0].shape == (40, 4)
    with pytest.raises(InputError, match="over the size limit of"):
        load_table(path, max_bytes=100)
    assert main(["inspect", str(path), "--max-cells", "100"]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "over the size limit" in err and err.count("\n") == 1
    assert main(["inspect", str(path), "--max-cells", "0"]) == EXIT_BAD_INPUT


def test_bad_input_through_a_real_process(tmp_path):
    path = _write(tmp_path / "ragged.csv", RAGGED)
    res = subprocess.run([sys.executable, "-m", "workbench", "inspect", str(path)],
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == EXIT_BAD_INPUT
    assert res.stderr.strip().startswith("workbench: ragged.csv: line 4 has 2 fields")
    assert res.stderr.count("\n") == 1 and "Traceback" not in res.stderr


def test_missing_file_through_a_real_process(tmp_path):
    res = subprocess.run([sys.executable, "-m", "workbench", "inspect",
                          str(tmp_path / "absent.parquet"), "--json"],
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == EXIT_BAD_INPUT and res.stdout == ""
    assert "no such file" in res.stderr and "Traceback" not in res.stderr


# --------------------------------------------------------------------------- properties


@settings(max_examples=60, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.binary(min_size=0, max_size=3000),
       ext=st.sampled_from([".csv", ".tsv", ".txt", ".xlsx", ".parquet"]))
def test_random_bytes_give_a_table_or_an_input_error(tmp_path, data, ext):
    path = tmp_path / f"random{ext}"
    path.write_bytes(data)
    try:
        df, rep = load_table(path)
    except InputError as exc:
        assert "\n" not in str(exc)
    else:
        assert isinstance(df, pd.DataFrame) and df.shape[0] >= 2
        assert rep.rows == df.shape[0]


_cell = st.one_of(
    st.integers(-10**6, 10**6).map(str),
    st.floats(allow_nan=False, allow_infinity=False, width=32).map(lambda v: f"{v:.6g}"),
    st.text(alphabet=st.characters(blacklist_categories=("Cs", "Cc")), max_size=12),
    st.just(""),
)


@settings(max_examples=60, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(n_cols=st.integers(1, 6), data=st.data(), delim=st.sampled_from([",", ";", "\t", "|"]))
def test_random_well_formed_csv_gives_a_table_or_an_input_error(tmp_path, n_cols, data, delim):
    names = data.draw(st.lists(st.text(alphabet="abcdefghij_", min_size=1, max_size=6),
                               min_size=n_cols, max_size=n_cols, unique=True))
    rows = data.draw(st.lists(st.lists(_cell, min_size=n_cols, max_size=n_cols),
                              min_size=0, max_size=25))
    buf = io.StringIO()
    w = csv.writer(buf, delimiter=delim, lineterminator="\n")
    w.writerow(names)
    w.writerows(rows)
    path = tmp_path / "wellformed.csv"
    path.write_text(buf.getvalue(), encoding="utf-8")
    try:
        df, rep = load_table(path)
    except InputError as exc:
        assert "\n" not in str(exc)
    else:
        assert df.shape[0] <= len(rows) and df.shape[1] <= n_cols
        if n_cols > 1 and len(rows) >= 2 and df.shape[1] == n_cols:
            assert rep.delimiter == delim
        # whatever loads can be profiled; its suggested target is analysed or refused
        from workbench.data.profiling import advise, analyse_target, profile_table

        prof = profile_table(df)
        assert len(prof.columns) == df.shape[1]
        if prof.suggested_target is not None:
            try:
                advise(analyse_target(df, prof.suggested_target))
            except InputError as exc:
                assert "\n" not in str(exc)


# --------------------------------------------------------------------------- workbench inspect


def test_inspect_xlsx_sheet_and_bad_target(tmp_path, capsys):
    import json

    path = tmp_path / "book.xlsx"
    rng = np.random.default_rng(0)
    other = pd.DataFrame({"a": rng.normal(size=30), "share": rng.uniform(0, 1, 30)})
    with pd.ExcelWriter(path) as w:
        _frame(30).to_excel(w, sheet_name="first", index=False)
        other.to_excel(w, sheet_name="second", index=False)
    assert main(["inspect", str(path), "--sheet", "second", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["load"]["sheet"] == "second" and d["rows"] == 30
    assert d["target"]["name"] == "share" and d["target"]["kind"] == "bounded"
    assert d["target"]["interval"] == [0.0, 1.0]
    assert main(["inspect", str(path), "--target", "nope"]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "no column named 'nope'; the columns are: x, k, colour, y" in err
    assert main(["inspect", str(path), "--sheet", "third"]) == EXIT_BAD_INPUT
    assert "its sheets are: first, second (set with --sheet)" in capsys.readouterr().err


def test_inspect_text_report_and_a_table_without_target(tmp_path, capsys):
    path = tmp_path / "semi.csv"
    _frame(40).to_csv(path, sep=";", decimal=",", index=False)
    assert main(["inspect", str(path), "--target", "y"]) == 0
    out = capsys.readouterr().out
    assert "semicolon-separated" in out and "decimal comma" in out
    assert "Target 'y' (given): signed (regression)" in out
    assert "output head identity with squared_error loss" in out
    ids = tmp_path / "ids.csv"
    ids.write_text("code,note\n" + "".join(f"c{i},free text number {i} here and there\n"
                                          for i in range(30)))
    assert main(["inspect", str(ids), "--json"]) == 0
    import json

    d = json.loads(capsys.readouterr().out)
    assert d["target"] is None and d["advice"] is None and "--target" in d["note"]
    assert [c["role"] for c in d["columns"]] == ["ignore", "ignore"]


def test_infinite_numbers_are_read_as_missing_with_a_warning(tmp_path):
    path = _write(tmp_path / "inf.csv", "a,b\n1.5,inf\n2.5,-inf\n3.5,4.0\n")
    got, rep = load_table(path)
    assert got["b"].isna().tolist() == [True, True, False]
    assert any("2 infinite value(s)" in w for w in rep.warnings)


def test_load_benchmark_quick_run_reports_its_figures():
    from workbench.benchmarks import load as bench_load

    res = bench_load.run(quick=True)
    assert set(res) == {"title", "lines", "figures"}
    fig = res["figures"]
    assert fig["rows"] == bench_load.QUICK_ROWS and fig["columns"] == 20
    # 18 float64 + 2 int64 columns: the payload is rows x 20 x 8 bytes
    assert fig["payload_mb"] == pytest.approx(bench_load.QUICK_ROWS * 20 * 8 / 1e6, rel=1e-3)
    assert all(isinstance(v, int | float) for v in fig.values())
    assert fig["seconds_min"] <= fig["seconds"] <= fig["seconds_max"]
    assert fig["memory_over_payload"] == pytest.approx(fig["peak_mb"] / fig["payload_mb"],
                                                       rel=0.02)
    assert len(res["lines"]) == 2


def test_spreadsheet_sep_line_names_the_delimiter(tmp_path):
    path = _write(tmp_path / "hint.csv", "sep=;\na;b\n1,5;x\n2,5;y\n")
    got, rep = load_table(path)
    assert rep.delimiter == ";" and rep.decimal == ","
    assert list(got.columns) == ["a", "b"] and got["a"].tolist() == [1.5, 2.5]
    bad = _write(tmp_path / "hint_bad.csv", "sep=;\na;b\n1;2\n3;4;5\n")
    with pytest.raises(InputError, match="line 4 has 3 fields"):
        load_table(bad)


def test_nullable_parquet_columns_become_numpy_backed(tmp_path):
    import warnings

    from sklearn.neural_network import MLPRegressor

    from workbench.data.preprocessing import build_pipeline
    from workbench.data.profiling import analyse_target, profile_table, split_xy

    rng = np.random.default_rng(0)
    n = 50
    df = pd.DataFrame({
        "i": pd.array(list(range(25)) + [None] * 25, dtype="Int64"),
        "f": pd.array(rng.normal(size=n), dtype="Float64"),
        "b": pd.array([True, False, None, True, False] * 10, dtype="boolean"),
        "s": pd.array(["a", "b", None, "c", "a"] * 10, dtype="string"),
        "c": pd.Categorical(["x", "y"] * 25),
        "y": rng.normal(size=n),
    })
    path = tmp_path / "nullable.parquet"
    df.to_parquet(path)
    got, _ = load_table(path)
    assert got["i"].dtype == np.float64 and got["i"].isna().sum() == 25
    assert got["b"].dtype == object and got["b"].isna().sum() == 10
    assert got["s"].isna().sum() == 10 and got["c"].tolist() == df["c"].tolist()
    # scikit-learn's imputers accept every column now (pd.NA would make them fail)
    prof = profile_table(got, target="y")
    t = analyse_target(got, "y")
    X, y = split_xy(got, t)
    pipe = build_pipeline(prof, t, MLPRegressor(hidden_layer_sizes=(3,), max_iter=3), "identity")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipe.fit(X, y)
    assert np.isfinite(pipe.predict(X)).all()


def test_many_blocks_give_the_same_table_as_pandas_c_parser(tmp_path, monkeypatch):
    # small blocks: the column-by-column assembly of many Arrow chunks is exercised
    monkeypatch.setattr(intake, "_BLOCK_BYTES", 16 << 10)
    rng = np.random.default_rng(7)
    n = 20_000
    df = pd.DataFrame({"a": np.round(rng.normal(size=n), 5), "b": rng.integers(-50, 50, n),
                       "c": rng.choice(["p", "q", "r"], n), "d": np.round(rng.uniform(size=n), 3)})
    df.loc[rng.random(n) < 0.05, "a"] = np.nan
    df.loc[rng.random(n) < 0.05, "c"] = np.nan
    path = tmp_path / "blocks.csv"
    df.to_csv(path, index=False)
    got, rep = load_table(path)
    assert rep.engine == "pyarrow"
    ref = pd.read_csv(path, engine="c")
    pd.testing.assert_frame_equal(got, ref, check_dtype=False)


def test_far_too_large_text_table_is_refused_before_reading(tmp_path, monkeypatch):
    monkeypatch.setattr(intake, "_SNIFF_BYTES", 256)
    path = tmp_path / "wide.csv"
    _frame(400).to_csv(path, index=False)
    calls = []
    monkeypatch.setattr(intake, "_read_arrow", lambda *a, **k: calls.append(a))
    with pytest.raises(InputError, match=r"holds about [\d,]+ cells .* over the size limit"):
        load_table(path, max_cells=200)
    assert calls == []  # refused from the estimate, nothing parsed


@pytest.mark.parametrize("raw,expected", [
    (b"a,b\r\n1,2\r\n3,4\r\n", [[1, 2], [3, 4]]),  # Windows line ends
    (b"a,b\r1,2\r3,4\r", [[1, 2], [3, 4]]),  # old Mac line ends
    (b"a,b\n1,2\n3,4", [[1, 2], [3, 4]]),  # no final newline
    (b"\n\na,b\n1,2\n3,4\n", [[1, 2], [3, 4]]),  # blank lines before the header
    (b'"a","b"\n1,2\n3,4\n', [[1, 2], [3, 4]]),  # quoted header
])
def test_line_endings_and_layout(tmp_path, raw, expected):
    got, _ = load_table(_write(tmp_path / "t.csv", raw))
    assert list(got.columns) == ["a", "b"] and got.values.tolist() == expected


def test_thousands_points_and_padding_spaces(tmp_path):
    path = _write(tmp_path / "eu.csv", "amount;name;n\n1.234,5; x ;3\n2.000;y;4\n12,25;  ;5\n")
    got, rep = load_table(path)
    assert rep.decimal == ","
    np.testing.assert_allclose(got["amount"].to_numpy(), [1234.5, 2000.0, 12.25])
    assert got["name"].tolist()[:2] == ["x", "y"] and pd.isna(got["name"].iloc[2])
    assert got["n"].tolist() == [3, 4, 5]


def test_xlsx_over_the_size_limit(tmp_path):
    path = tmp_path / "big.xlsx"
    _frame(60).to_excel(path, index=False)
    with pytest.raises(InputError, match="over the size limit of 100 cells"):
        load_table(path, max_cells=100)
