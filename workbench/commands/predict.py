"""``workbench predict MODEL_FOLDER TABLE [--out FILE] [--joblib | --onnx] [--sheet NAME]
[--verify-key-file FILE]``.

Loads an exported model (``workbench export``) and writes one row per row of
TABLE as CSV (to FILE, or to standard output), in order: ``prediction``, for
classifiers ``probability_<class>`` per class, and ``reason`` (why a row has no
prediction: every column the model reads is empty; such rows are kept, never
dropped). The skops file is used by
default (only trusted types are loaded); ``--joblib`` unpickles the joblib file
after checking its SHA-256 (unpickling runs code: use it only on folders you
trust); ``--onnx`` predicts with onnxruntime. ``--verify-key-file`` checks the
folder's signature first (:mod:`workbench.export.signature`). Exit status 0, or
2 on bad input (a changed model file, a forged or damaged file, a signature that
does not match, missing columns, ...).
"""

from __future__ import annotations

import sys
from pathlib import Path

from workbench.data.intake import load_table
from workbench.errors import InputError
from workbench.export.model_files import read_manifest
from workbench.export.predict import BLANK_REASON, REASON_COLUMN, predict_table
from workbench.export.safe_csv import write_safe_csv
from workbench.export.signature import SIGNATURE_NAME, read_key, verify_folder

NAME = "predict"
HELP = "Predict with an exported model folder; writes a CSV of predictions."


def add_arguments(parser):
    parser.add_argument("folder", metavar="MODEL_FOLDER", help="a folder written by workbench export")
    parser.add_argument("table", metavar="TABLE", help="a .csv, .tsv, .xlsx or .parquet table")
    parser.add_argument("--out", metavar="FILE", default=None,
                        help="write the predictions here (default: standard output)")
    parser.add_argument("--sheet", metavar="NAME", default=None,
                        help="sheet of an .xlsx workbook (default: the first)")
    which = parser.add_mutually_exclusive_group()
    which.add_argument("--joblib", action="store_true",
                       help="use the joblib pickle (runs code when loaded: trusted folders only)")
    which.add_argument("--onnx", action="store_true", help="use the ONNX file with onnxruntime")
    parser.add_argument("--verify-key-file", metavar="FILE", default=None,
                        help="check the folder's signature (export --sign-key-file) with the "
                             "key in FILE before anything is loaded")


def run(args) -> int:
    kind = "joblib" if args.joblib else "onnx" if args.onnx else "skops"
    read_manifest(args.folder)  # a wrong folder is reported before the table is read
    key = None
    if args.verify_key_file is not None:
        try:
            key = read_key(args.verify_key_file, folder=args.folder)
        except InputError as exc:
            raise InputError(f"{exc} (set with --verify-key-file)") from None
        verify_folder(args.folder, key)  # a forged folder is reported before the table is read
    elif (Path(args.folder) / SIGNATURE_NAME).is_file():
        print(f"workbench: this folder is signed ({SIGNATURE_NAME}) but not checked; give "
              "--verify-key-file with the key to check it", file=sys.stderr)
    df, _ = load_table(args.table, sheet=args.sheet, keep_empty_rows=True)
    out = predict_table(args.folder, df, kind=kind, key=key,
                        warn=lambda msg: print(f"workbench: {msg}", file=sys.stderr))
    rows = out.to_numpy(dtype=object).tolist()
    unanswered = int(out[REASON_COLUMN].notna().sum())
    if args.out:
        try:
            write_safe_csv(args.out, list(out.columns), rows)
        except OSError as exc:
            raise InputError(f"cannot write {args.out} ({exc.strerror}); choose another file") \
                from None
    else:
        write_safe_csv(sys.stdout, list(out.columns), rows)
    if args.out or unanswered:
        where = f" to {args.out}" if args.out else ""
        missing = (f", {unanswered} of them without a prediction ({BLANK_REASON}; see the "
                   f"{REASON_COLUMN} column)" if unanswered else "")
        print(f"workbench: {len(out)} row(s) written{where}{missing}", file=sys.stderr)
    return 0
