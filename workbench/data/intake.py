"""Load a table from disk: one entry point, one report, one kind of error.

:func:`load_table` reads ``.csv``, ``.tsv`` and ``.txt`` (delimiter sniffed among
comma, semicolon, tab and pipe, or named by a spreadsheet's ``sep=;`` first line;
decimal comma recognised when the delimiter is a semicolon; UTF-8 with or without BOM, UTF-16 with BOM, Latin-1 as the fallback),
``.xlsx`` (first sheet unless one is named; openpyxl) and ``.parquet`` (pyarrow).
Text tables are parsed with pandas' pyarrow engine (multi-threaded, the fastest
one pandas offers); pandas' C engine is the fallback for files pyarrow refuses.

Every problem with the file is raised as :class:`workbench.errors.InputError`
with a one-line message that says what is wrong and what to do: a missing file,
a folder, no read permission, an empty file, a header without rows, binary
bytes under a table's extension, ragged rows (with the first bad line number),
duplicate column names, a corrupt ``.xlsx`` / ``.parquet``, an unsupported
extension, a single data row, a table over the size limit.

Returned table
--------------
A :class:`pandas.DataFrame` with string column names (stripped; empty names
become ``column_<n>``). Fully empty rows are dropped (and reported); columns
with no name and no values (a trailing delimiter) are dropped (and reported).
ISO-like date / time text and date cells become ``datetime64`` columns
(timezone-aware values are converted to UTC and made naive); boolean columns
with gaps keep ``True`` / ``False`` / ``NaN`` in an object column; text cells
are strings, missing cells are ``NaN`` (nullable and Arrow-backed columns of a
Parquet file become NumPy-backed ones); infinite numbers are read as missing (with
a warning in the report).

LoadReport fields
-----------------
``path`` (str), ``format`` ("csv", "xlsx" or "parquet"), ``rows`` and
``columns`` (the returned table's shape), ``encoding`` (text tables: "utf-8",
"utf-8-sig", "utf-16" or "latin-1"; else None), ``delimiter`` and ``decimal``
(text tables; else None), ``sheet`` (xlsx: the sheet read; else None),
``engine`` ("pyarrow", "c", "openpyxl"), ``file_bytes``, ``rows_dropped``
(int), ``drop_reasons`` (list of one-line str), ``warnings`` (list of str),
``seconds`` (wall time of the load). ``to_dict()`` gives a JSON-ready dict.
"""

from __future__ import annotations

import codecs
import csv
import datetime as _dt
import io
import os
import re
import time
import zipfile
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from workbench.errors import InputError

TEXT_EXTENSIONS = (".csv", ".tsv", ".txt")
EXCEL_EXTENSIONS = (".xlsx",)
PARQUET_EXTENSIONS = (".parquet", ".pq")
SUPPORTED = TEXT_EXTENSIONS + EXCEL_EXTENSIONS + PARQUET_EXTENSIONS

#: default size limit: cells (rows x columns) in the loaded table
DEFAULT_MAX_CELLS = 100_000_000
#: default size limit on the file itself, checked before reading
DEFAULT_MAX_BYTES = 4 * 1024**3
#: a table needs at least this many data rows to be loaded at all
MIN_ROWS = 2

DELIMITERS = (",", ";", "\t", "|")
_DELIM_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}
_SNIFF_BYTES = 256 * 1024
_SNIFF_LINES = 200
#: block of the streaming CSV reader; column types are inferred from the first block
_BLOCK_BYTES = 16 << 20

_SEP_HINT = re.compile(r'^"?sep=([,;\t|])"?$')
_DECIMAL_COMMA = re.compile(r"^\s*[-+]?(\d+|\d{1,3}(\.\d{3})+),\d+\s*$")
#: a number written with a decimal comma, optionally with "." between thousands
_COMMA_NUMBER = re.compile(r"^[-+]?(\d+|\d{1,3}(\.\d{3})+)(,\d+)?$")
_DECIMAL_POINT = re.compile(r"^\s*[-+]?\d*\.\d+\s*$")
_ISO_DATE = re.compile(
    r"^\d{4}[-/]\d{1,2}[-/]\d{1,2}([ T]\d{1,2}:\d{2}(:\d{2}(\.\d+)?)?(Z|[+-]\d{2}:?\d{2})?)?$"
)


@dataclass
class LoadReport:
    """What :func:`load_table` read and what it did to the table (see module docstring)."""

    path: str
    format: str
    rows: int = 0
    columns: int = 0
    encoding: str | None = None
    delimiter: str | None = None
    decimal: str | None = None
    sheet: str | None = None
    engine: str | None = None
    file_bytes: int = 0
    rows_dropped: int = 0
    drop_reasons: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    seconds: float = 0.0

    def to_dict(self) -> dict:
        return asdict(self)


# --------------------------------------------------------------------------- entry point


def load_table(path, sheet: str | None = None, max_cells: int = DEFAULT_MAX_CELLS,
               max_bytes: int = DEFAULT_MAX_BYTES,
               keep_empty_rows: bool = False) -> tuple[pd.DataFrame, LoadReport]:
    """Read a table file into a DataFrame.

    Parameters
    ----------
    path : str or os.PathLike
        A ``.csv``, ``.tsv``, ``.txt``, ``.xlsx`` or ``.parquet`` file.
    sheet : str, optional
        Sheet of an ``.xlsx`` workbook (default: the first sheet).
    max_cells : int
        Size limit: refuse a table with more than this many cells (rows x columns).
    max_bytes : int
        Size limit on the file, checked before reading it.
    keep_empty_rows : bool
        Keep rows whose every cell is missing (prediction answers every row).

    Returns
    -------
    df : pandas.DataFrame
    report : LoadReport

    Raises
    ------
    InputError
        For every problem with the file, with a one-line message.
    """
    t0 = time.perf_counter()
    p = _check_path(path)
    ext = p.suffix.lower()
    size = p.stat().st_size
    if size == 0:
        raise InputError(f"{p.name} is empty (0 bytes); choose a file that contains a table",
                         setting="table")
    if size > max_bytes:
        raise InputError(
            f"{p.name} is {size / 1e6:.1f} MB, over the size limit of {max_bytes / 1e6:.1f} MB; "
            "use a smaller extract of the table or raise the limit", setting="table")
    if ext in TEXT_EXTENSIONS:
        df, report = _read_text(p, ext, max_cells)
    elif ext in EXCEL_EXTENSIONS:
        df, report = _read_excel(p, sheet, max_cells)
    else:
        df, report = _read_parquet(p)
    report.file_bytes = size
    if sheet is not None and report.format != "xlsx":
        report.warnings.append(f"the worksheet {sheet!r} is not used: only .xlsx workbooks "
                               "have sheets")
    df = _tidy(df, report, p.name, keep_empty_rows)
    cells = int(df.shape[0]) * int(df.shape[1])
    if cells > max_cells:
        raise InputError(
            f"{p.name} has {df.shape[0]:,} rows x {df.shape[1]:,} columns = {cells:,} cells, "
            f"over the size limit of {max_cells:,} cells; use a sample of the rows or raise the limit",
            setting="table")
    report.rows, report.columns = int(df.shape[0]), int(df.shape[1])
    report.seconds = time.perf_counter() - t0
    return df, report


def _check_path(path) -> Path:
    try:
        p = Path(os.fspath(path)).expanduser()
    except TypeError as exc:
        raise InputError(f"not a file path: {path!r}; give the path of a table file",
                         setting="table") from exc
    name = str(p)
    if not p.exists():
        raise InputError(f"no such file: {name}; check the path and the spelling", setting="table")
    if p.is_dir():
        raise InputError(f"{name} is a folder, not a file; choose a table file inside it",
                         setting="table")
    ext = p.suffix.lower()
    if ext not in SUPPORTED:
        hint = ""
        if ext in (".xls", ".xlsm", ".ods"):
            hint = " (save the sheet as .xlsx or .csv)"
        shown = ext or "(no extension)"
        raise InputError(
            f"{p.name}: unsupported file type {shown}{hint}; use .csv, .tsv, .txt, .xlsx or .parquet",
            setting="table")
    try:
        with open(p, "rb") as fh:
            fh.read(1)
    except PermissionError as exc:
        raise InputError(f"no permission to read {name}; change its permissions or copy it "
                         "somewhere you can read", setting="table") from exc
    except OSError as exc:
        raise InputError(f"cannot read {name} ({exc.strerror or exc}); check the file",
                         setting="table") from exc
    return p


# --------------------------------------------------------------------------- text tables


_MAGIC = (
    (b"PK\x03\x04", "a zip archive (an .xlsx workbook?)"),
    (b"PAR1", "a Parquet file"),
    (b"%PDF", "a PDF document"),
    (b"\x89PNG", "a PNG image"),
    (b"\xff\xd8\xff", "a JPEG image"),
    (b"\x1f\x8b", "a gzip archive"),
    (b"\xd0\xcf\x11\xe0", "an old Office file (.xls?)"),
    (b"SQLite format 3", "an SQLite database"),
)


def _read_head(p: Path) -> bytes:
    with open(p, "rb") as fh:
        return fh.read(_SNIFF_BYTES)


def _detect_encoding(p: Path, head: bytes) -> str:
    if head.startswith(codecs.BOM_UTF8):
        return "utf-8-sig"
    if head.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        return "utf-16"
    for magic, what in _MAGIC:
        if head.startswith(magic):
            raise InputError(f"{p.name} is {what}, not a text table; save it as CSV or give it "
                             "its proper extension", setting="table")
    if b"\x00" in head:
        raise InputError(f"{p.name} contains binary data (NUL bytes), not a text table; "
                         "export the table as CSV (UTF-8)", setting="table")
    try:
        # a cut in the middle of a multi-byte character at the end is fine
        codecs.getincrementaldecoder("utf-8")().decode(head, final=False)
        enc = "utf-8"
    except UnicodeDecodeError:
        enc = "latin-1"
    text = head.decode(enc, errors="replace")
    controls = sum(1 for ch in text if ord(ch) < 32 and ch not in "\t\r\n\f\v")
    if text and controls / len(text) > 0.05:
        raise InputError(f"{p.name} looks like a binary file ({controls} control characters in "
                         "its first part), not a text table; export the table as CSV (UTF-8)",
                         setting="table")
    return enc


def _sample_lines(text: str, truncated: bool) -> list[str]:
    lines = text.splitlines()
    if truncated and len(lines) > 1:
        lines = lines[:-1]  # the last line may be cut
    return [ln for ln in lines if ln.strip()][:_SNIFF_LINES]


def _sniff_delimiter(lines: list[str], ext: str) -> str:
    """The candidate delimiter that splits the sample into the most consistent fields."""
    best, best_score = None, (0, 0, 0)
    for d in DELIMITERS:
        try:
            counts = [len(r) for r in csv.reader(lines, delimiter=d)]
        except csv.Error:
            continue
        if not counts:
            continue
        header_n = counts[0]
        if header_n < 2:
            continue
        agree = sum(1 for c in counts if c == header_n)
        # score: share of lines agreeing with the header, then number of fields,
        # then the preferred delimiter for the extension
        pref = 1 if (ext == ".tsv" and d == "\t") or (ext != ".tsv" and d == ",") else 0
        score = (round(agree / len(counts), 2), header_n, pref)
        if score > best_score:
            best, best_score = d, score
    if best is None:
        return "\t" if ext == ".tsv" else ","
    return best


def _sniff_decimal(lines: list[str], delim: str) -> str:
    if delim != ";":
        return "."
    comma = point = 0
    for row in csv.reader(lines[1:], delimiter=delim):
        for cell in row:
            if _DECIMAL_COMMA.match(cell):
                comma += 1
            elif _DECIMAL_POINT.match(cell):
                point += 1
    return "," if comma > point else "."


def _header_fields(lines: list[str], delim: str) -> list[str]:
    try:
        return next(csv.reader(lines[:1], delimiter=delim))
    except (StopIteration, csv.Error):
        return []


def _check_duplicates(names, fname: str):
    seen, dups = set(), []
    for n in names:
        key = str(n).strip()
        if key == "":
            continue
        if key in seen and key not in dups:
            dups.append(key)
        seen.add(key)
    if dups:
        shown = ", ".join(repr(d) for d in dups[:5])
        raise InputError(f"{fname} has duplicate column names: {shown}; give every column a "
                         "unique name in the header", setting="table")


def _first_ragged_line(source, encoding: str, delim: str,
                       skip: int = 0) -> tuple[int, int, int] | None:
    """(line number, fields found, fields expected) of the first ragged row, or None."""
    if isinstance(source, bytes | bytearray):
        fh = io.TextIOWrapper(io.BytesIO(source), encoding=encoding, errors="replace", newline="")
    else:
        fh = open(source, encoding=encoding, errors="replace", newline="")  # noqa: SIM115
    with fh:
        for _ in range(skip):
            fh.readline()
        reader = csv.reader(fh, delimiter=delim)
        expected = None
        try:
            for row in reader:
                if not row or (len(row) == 1 and not row[0].strip()):
                    continue  # blank line
                if expected is None:
                    expected = len(row)
                    continue
                if len(row) != expected:
                    return reader.line_num + skip, len(row), expected
        except csv.Error:
            return None
    return None


_NOT_UTF8 = object()
#: cells read as missing: pandas' default markers (pyarrow's list is the same set)
_NULL_MARKERS = ["", "#N/A", "#N/A N/A", "#NA", "-1.#IND", "-1.#QNAN", "-NaN", "-nan",
                 "1.#IND", "1.#QNAN", "<NA>", "N/A", "NA", "NULL", "NaN", "None", "n/a",
                 "nan", "null"]


def _read_arrow(source, encoding: str, delim: str, decimal: str, skip: int = 0):
    """Parse with pyarrow's streaming CSV reader, one column at a time into pandas.

    Batches are kept per column and each column is converted (and its Arrow
    buffers released) before the next, so the peak stays near one copy of the
    table plus one column, instead of the file + an Arrow table + a pandas frame.
    Returns ``_NOT_UTF8`` when a column holds bytes that are not valid UTF-8.
    Column types are inferred from the first block (16 MB); a later cell that does
    not fit raises, and the caller falls back to pandas' C engine.
    """
    import pyarrow as pa
    import pyarrow.csv as pacsv

    read = pacsv.ReadOptions(encoding=encoding, block_size=_BLOCK_BYTES, use_threads=True,
                             skip_rows=skip)
    parse = pacsv.ParseOptions(delimiter=delim, ignore_empty_lines=True)
    convert = pacsv.ConvertOptions(null_values=_NULL_MARKERS, strings_can_be_null=True,
                                   decimal_point=decimal,
                                   true_values=["true", "True", "TRUE"],
                                   false_values=["false", "False", "FALSE"])
    reader = pacsv.open_csv(source, read_options=read, parse_options=parse,
                            convert_options=convert)
    schema = reader.schema
    if any(pa.types.is_binary(f.type) or pa.types.is_large_binary(f.type) for f in schema):
        return _NOT_UTF8
    chunks: list[list] = [[] for _ in schema.names]
    for batch in reader:
        for i in range(batch.num_columns):
            chunks[i].append(batch.column(i))
        del batch
    columns = {}
    for i, field_ in enumerate(schema):
        arr = pa.chunked_array(chunks[i], type=field_.type)
        chunks[i] = None
        columns[i] = arr.to_pandas(date_as_object=False)
        del arr
    df = pd.DataFrame(columns, copy=False)
    df.columns = list(schema.names)
    return df


def _read_text(p: Path, ext: str, max_cells: int = DEFAULT_MAX_CELLS
               ) -> tuple[pd.DataFrame, LoadReport]:
    head = _read_head(p)
    enc = _detect_encoding(p, head)
    size = p.stat().st_size
    source: Path | bytes = p
    if enc == "utf-16":
        # rare and usually small: transcode once to UTF-8 in memory
        try:
            source = p.read_bytes().decode("utf-16").encode("utf-8")
        except UnicodeDecodeError as exc:
            raise InputError(f"{p.name} starts with a UTF-16 mark but is not valid UTF-16; "
                             "save it again as UTF-8 CSV", setting="table") from exc
        text = source[:_SNIFF_BYTES].decode("utf-8", errors="ignore")
        truncated = len(source) > _SNIFF_BYTES
        read_enc = "utf-8"
    else:
        text = head.decode(enc, errors="replace")
        if enc == "utf-8-sig":
            text = text.lstrip("\ufeff")
        truncated = size > _SNIFF_BYTES
        read_enc = enc
    lines = _sample_lines(text, truncated)
    if not lines:
        raise InputError(f"{p.name} contains only blank lines; choose a file that contains a table",
                         setting="table")
    skip = 0
    hint = _SEP_HINT.match(lines[0].strip())
    if hint and text.lstrip().startswith(lines[0].strip()):
        # a spreadsheet's "sep=;" first line names the delimiter
        delim, skip, lines = hint.group(1), 1, lines[1:]
        if not lines:
            raise InputError(f"{p.name} has only a 'sep=' line; add a header and rows",
                             setting="table")
    else:
        delim = _sniff_delimiter(lines, ext)
    decimal = _sniff_decimal(lines, delim)
    header = _header_fields(lines, delim)
    _check_duplicates(header, p.name)
    report = LoadReport(path=str(p), format="csv", encoding=enc, delimiter=delim,
                        decimal=decimal)
    if len(lines) == 1:
        raise InputError(f"{p.name} has a header but no data rows; add rows below the header",
                         setting="table")
    if truncated:
        # refuse a table far over the cell limit before reading it: estimate its rows
        # from the mean length of the sampled lines
        per_line = max(1.0, len("\n".join(lines).encode(read_enc, errors="replace")) / len(lines))
        total = len(source) if isinstance(source, bytes) else size
        estimate = int(total / per_line) * max(1, len(header))
        if estimate > 2 * max_cells:
            raise InputError(
                f"{p.name} holds about {estimate:,} cells ({total / 1e6:.0f} MB), over the size "
                f"limit of {max_cells:,} cells; use a sample of the rows or raise the limit",
                setting="table")

    def src():
        return io.BytesIO(source) if isinstance(source, bytes) else str(p)

    opts = dict(sep=delim, decimal=decimal, skip_blank_lines=True, skiprows=skip)
    df = None
    try:
        df = _read_arrow(src(), read_enc, delim, decimal, skip)
        report.engine = "pyarrow"
        if df is _NOT_UTF8:
            # invalid UTF-8 further down the file: read it again as Latin-1
            report.encoding = read_enc = "latin-1"
            df = _read_arrow(src(), read_enc, delim, decimal, skip)
            if df is _NOT_UTF8:  # pragma: no cover - Latin-1 decodes every byte
                df = None
    except Exception:  # noqa: BLE001 - any pyarrow refusal: diagnose, then fall back
        df = None
    if df is None:
        bad = _first_ragged_line(source if isinstance(source, bytes) else p, read_enc, delim,
                                 skip)
        if bad is not None:
            line, got, want = bad
            raise InputError(
                f"{p.name}: line {line} has {got} fields but the header has {want} "
                f"({_DELIM_NAMES[delim]}-separated); fix that row (and any after it) so every "
                "row has the same number of fields", setting="table")
        for attempt_enc in dict.fromkeys((read_enc, "latin-1")):
            try:
                df = pd.read_csv(src(), engine="c", encoding=attempt_enc, low_memory=False,
                                 **opts)
                report.engine = "c"
                report.encoding = attempt_enc if not isinstance(source, bytes) else "utf-16"
                break
            except UnicodeDecodeError:
                continue
            except pd.errors.EmptyDataError as exc:
                raise InputError(f"{p.name} has no columns to read; choose a file that contains "
                                 "a table", setting="table") from exc
            except (pd.errors.ParserError, ValueError, csv.Error, OverflowError,
                    MemoryError) as exc:
                msg = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
                raise InputError(f"{p.name} could not be parsed as a "
                                 f"{_DELIM_NAMES[delim]}-separated table ({msg}); check that it "
                                 "is a plain text table", setting="table") from exc
        if df is None:
            raise InputError(f"{p.name} could not be decoded as UTF-8 or Latin-1 text; save it "
                             "again as UTF-8 CSV", setting="table")
    if df.shape[0] == 0:
        raise InputError(f"{p.name} has a header but no data rows; add rows below the header",
                         setting="table")
    return df, report


# --------------------------------------------------------------------------- xlsx, parquet


def _read_excel(p: Path, sheet: str | None, max_cells: int = DEFAULT_MAX_CELLS
                ) -> tuple[pd.DataFrame, LoadReport]:
    try:
        import openpyxl
    except ImportError as exc:  # pragma: no cover - it is a dependency
        raise InputError("reading .xlsx needs the openpyxl package; install it with "
                         "`pip install openpyxl`") from exc
    if not zipfile.is_zipfile(p):
        raise InputError(f"{p.name} is not a valid .xlsx workbook (not a zip archive); open it "
                         "in a spreadsheet program and save it again as .xlsx", setting="table")
    try:
        wb = openpyxl.load_workbook(p, read_only=True, data_only=True)
    except Exception as exc:  # noqa: BLE001 - openpyxl raises many kinds on broken files
        raise InputError(f"{p.name} is a corrupt or unreadable .xlsx workbook "
                         f"({type(exc).__name__}); open it in a spreadsheet program and save it "
                         "again", setting="table") from exc
    try:
        names = wb.sheetnames
        if not names:
            raise InputError(f"{p.name} has no sheets; choose a workbook that contains a table",
                             setting="table")
        if sheet is None:
            chosen = names[0]
        elif sheet in names:
            chosen = sheet
        else:
            raise InputError(f"{p.name} has no sheet named {sheet!r}; its sheets are: "
                             f"{', '.join(names)}", setting="sheet")
        ws = wb[chosen]
        try:
            declared = int(ws.max_row or 0) * int(ws.max_column or 0)
        except (TypeError, ValueError):
            declared = 0
        if declared > 2 * max_cells:
            raise InputError(f"{p.name}: sheet {chosen!r} spans about {declared:,} cells, over "
                             f"the size limit of {max_cells:,} cells; use a sample of the rows "
                             "or raise the limit", setting="table")
        try:
            rows = list(ws.iter_rows(values_only=True))
        except Exception as exc:  # noqa: BLE001
            raise InputError(f"{p.name}: sheet {chosen!r} could not be read "
                             f"({type(exc).__name__}); save the workbook again",
                             setting="table") from exc
    finally:
        wb.close()
    rows = [r for r in rows if r is not None and any(v is not None and v != "" for v in r)]
    if not rows:
        raise InputError(f"{p.name}: sheet {chosen!r} is empty; choose the worksheet that holds "
                         "the table", setting="sheet")
    header = list(rows[0])
    while header and header[-1] is None:
        header.pop()
    width = max(len(header), max(len(r) for r in rows))
    header = header + [None] * (width - len(header))
    _check_duplicates([h for h in header if h is not None], p.name)
    if len(rows) == 1:
        raise InputError(f"{p.name}: sheet {chosen!r} has a header but no data rows; add rows "
                         "below the header", setting="table")
    body = [list(r) + [None] * (width - len(r)) for r in rows[1:]]
    cols = [("" if h is None else str(h)) for h in header]
    df = pd.DataFrame(body, columns=range(width))
    df.columns = cols
    # numeric-looking object columns (openpyxl gives Python numbers) become numbers
    for i in range(width):
        s = df.iloc[:, i]
        if s.dtype == object:
            conv = pd.to_numeric(s, errors="coerce")
            if conv.notna().sum() == s.notna().sum() and s.notna().any():
                df.isetitem(i, conv)
    report = LoadReport(path=str(p), format="xlsx", sheet=chosen, engine="openpyxl")
    return df, report


def _read_parquet(p: Path) -> tuple[pd.DataFrame, LoadReport]:
    try:
        import pyarrow.parquet as pq
    except ImportError as exc:  # pragma: no cover - it is a dependency
        raise InputError("reading .parquet needs the pyarrow package; install it with "
                         "`pip install pyarrow`") from exc
    try:
        table = pq.read_table(p)
    except Exception as exc:  # noqa: BLE001 - arrow raises ArrowInvalid, OSError, ...
        raise InputError(f"{p.name} is a corrupt or unreadable Parquet file "
                         f"({type(exc).__name__}); write it again or export the table as CSV",
                         setting="table") from exc
    _check_duplicates(table.column_names, p.name)
    if table.num_columns == 0:
        raise InputError(f"{p.name} has no columns; choose a file that contains a table",
                         setting="table")
    if table.num_rows == 0:
        raise InputError(f"{p.name} has column names but no data rows; choose a file with rows",
                         setting="table")
    import pyarrow as pa

    for i, col in enumerate(table.schema):  # decimal128/256: numbers (float64), not text
        if pa.types.is_decimal(col.type):
            table = table.set_column(i, col.with_type(pa.float64()),
                                     table.column(i).cast(pa.float64()))
    try:
        df = table.to_pandas()
    except Exception as exc:  # noqa: BLE001
        raise InputError(f"{p.name}: its column types cannot be converted to a table "
                         f"({type(exc).__name__}); export it with plain numeric and text "
                         "columns", setting="table") from exc
    df = df.reset_index(drop=True)
    return df, LoadReport(path=str(p), format="parquet", engine="pyarrow")


# --------------------------------------------------------------------------- tidy up


def _is_unnamed(name: str) -> bool:
    return name == "" or re.fullmatch(r"Unnamed: \d+", name) is not None


def _tidy(df: pd.DataFrame, report: LoadReport, fname: str,
          keep_empty_rows: bool = False) -> pd.DataFrame:
    names = [str(c).strip() for c in df.columns]
    # columns without a name and without values (a trailing delimiter): drop
    keep = []
    for i, n in enumerate(names):
        if _is_unnamed(n) and df.iloc[:, i].isna().all():
            report.warnings.append(f"dropped column {i + 1}: it has no name and no values")
            continue
        keep.append(i)
    if len(keep) != len(names):
        df = df.iloc[:, keep]
        names = [names[i] for i in keep]
    names = [f"column_{i + 1}" if _is_unnamed(n) else n for i, n in enumerate(names)]
    _check_duplicates(names, fname)
    df = df.copy(deep=False)
    df.columns = names
    if df.shape[1] == 0:
        raise InputError(f"{fname} has no columns with values; choose a file that contains a table",
                         setting="table")
    empty = np.ones(df.shape[0], dtype=bool)
    for i in range(df.shape[1]):
        empty &= df.iloc[:, i].isna().to_numpy()
    n_empty = int(empty.sum())
    if n_empty and not keep_empty_rows:
        df = df.loc[~empty].reset_index(drop=True)
        report.rows_dropped += n_empty
        report.drop_reasons.append(f"{n_empty} empty row(s) (every cell missing)")
    if df.shape[0] == 0:
        raise InputError(f"{fname} has a header but no data rows; add rows below the header",
                         setting="table")
    if df.shape[0] < MIN_ROWS:
        raise InputError(f"{fname} has a single data row; a table needs at least {MIN_ROWS} rows "
                         "(cross-validation needs many more), so add rows", setting="table")
    for i in range(df.shape[1]):
        col = df.iloc[:, i]
        new = _normalise_column(col, report)
        if new is not col:
            df.isetitem(i, new)
    return df


def _plain_dtypes(s: pd.Series) -> pd.Series:
    """Nullable / Arrow-backed columns (pd.NA) as NumPy-backed ones (NaN), which
    scikit-learn's imputers understand."""
    dt = s.dtype
    if not isinstance(dt, pd.api.extensions.ExtensionDtype) or \
            isinstance(dt, pd.CategoricalDtype | pd.DatetimeTZDtype):
        return s
    if isinstance(dt, pd.StringDtype) and dt.na_value is not pd.NA:
        return s  # pandas' default text dtype: missing is already NaN
    has_na = bool(s.isna().any())
    if pd.api.types.is_bool_dtype(dt):
        if not has_na:
            return s.astype(bool)
        return s.astype(object).where(s.notna(), np.nan)
    if pd.api.types.is_integer_dtype(dt) and not has_na:
        return s.astype(np.int64)
    if pd.api.types.is_numeric_dtype(dt):
        return pd.Series(s.to_numpy(dtype=np.float64, na_value=np.nan), index=s.index,
                         name=s.name)
    if pd.api.types.is_datetime64_any_dtype(dt):
        return pd.Series(s.to_numpy(dtype="datetime64[ns]", na_value=np.datetime64("NaT")),
                         index=s.index, name=s.name)
    return s.astype(object).where(s.notna(), np.nan)


def _normalise_column(s: pd.Series, report: LoadReport) -> pd.Series:
    s = _plain_dtypes(s)
    dt = s.dtype
    if isinstance(dt, pd.DatetimeTZDtype):
        return s.dt.tz_convert("UTC").dt.tz_localize(None)
    if pd.api.types.is_float_dtype(dt):
        inf = np.isinf(s.to_numpy())
        n_inf = int(inf.sum())
        if n_inf:
            report.warnings.append(f"column {s.name!r}: {n_inf} infinite value(s) read as missing")
            return s.mask(inf)
        return s
    if pd.api.types.is_numeric_dtype(dt) or pd.api.types.is_bool_dtype(dt) or \
            pd.api.types.is_datetime64_any_dtype(dt):
        return s
    if isinstance(dt, pd.CategoricalDtype):
        s = s.astype(object)
    vals = s.dropna()
    if len(vals) == 0:
        return s.astype("float64") if pd.api.types.is_object_dtype(dt) else s
    sample = vals.iloc[:200]
    if pd.api.types.is_object_dtype(dt):
        kinds = {type(v) for v in sample}
        if kinds <= {bool, np.bool_}:
            if not vals.map(lambda v: isinstance(v, bool | np.bool_)).all():
                return vals.astype(str).reindex(s.index)
            return s.where(s.notna(), np.nan)
        if kinds <= {_dt.date, _dt.datetime, pd.Timestamp}:
            out = pd.to_datetime(s, errors="coerce")
            if out.dt.tz is not None:
                out = out.dt.tz_convert("UTC").dt.tz_localize(None)
            return out
        if not kinds <= {str}:
            # mixed cells (numbers and text, e.g. from a spreadsheet): all text
            report.warnings.append(f"column {s.name!r} mixes numbers and text; read as text")
            return s.map(lambda v: v if isinstance(v, str) else str(v)).where(s.notna(), np.nan)
    # text: surrounding spaces are not part of a value
    if isinstance(dt, pd.StringDtype) or pd.api.types.is_object_dtype(dt):
        stripped = s.str.strip()
        if not stripped.equals(s):
            s = stripped.where(stripped != "", np.nan)
            vals = s.dropna()
            if len(vals) == 0:
                return s
            sample = vals.iloc[:200]
    # decimal-comma numbers with thousands points ("1.234,5") in a semicolon table
    if report.decimal == ",":
        str_sample = sample.astype(str)
        if str_sample.map(lambda v: _COMMA_NUMBER.match(v) is not None).all():
            txt = vals.astype(str)
            if txt.map(lambda v: _COMMA_NUMBER.match(v) is not None).all():
                num = pd.to_numeric(txt.str.replace(".", "", regex=False)
                                    .str.replace(",", ".", regex=False), errors="coerce")
                return num.reindex(s.index).astype(np.float64)
    # text: ISO-like dates become datetimes
    str_sample = sample.astype(str).str.strip()
    if len(str_sample) and str_sample.map(lambda v: _ISO_DATE.match(v) is not None).all():
        try:
            out = pd.to_datetime(s, errors="coerce", format="mixed", utc=True)
            out = out.dt.tz_localize(None)
        except (ValueError, TypeError, OverflowError):
            return s
        if out.notna().sum() >= 0.95 * len(vals):
            return out
    return s
