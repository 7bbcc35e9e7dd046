"""``workbench export SWEEP_ID [--config recommended|RANK|best] --to FOLDER [--formats ...]
[--store PATH] [--table PATH] [--sign-key-file FILE]``.

Exports one configuration of a stored sweep into FOLDER -- by default the
recommended one (the simplest configuration practically equivalent to the best,
see :func:`workbench.sweep.results.recommended_rank`), or a rank (1 = the best):
configuration JSON, the refitted pipeline (skops, joblib, ONNX), reproduce.py,
the sweep's results as CSV and an HTML report, with a manifest of SHA-256
checksums (see :mod:`workbench.export.bundle`; the formats are listed in
:mod:`workbench.export.formats`) and, with ``--sign-key-file``, the manifest's
HMAC-SHA256 (:mod:`workbench.export.signature`). The folder is written
atomically; only an earlier export is replaced, and files of the user's in it
are kept (one line says which).
Exit status 0, or 2 on bad input (unknown sweep or rank, folder not writable,
unknown format, changed table).
"""

from __future__ import annotations

import sys

from workbench.errors import InputError
from workbench.export.formats import FORMATS

#: the --config value that picks the verdict's recommended configuration
RECOMMENDED = "recommended"

NAME = "export"
HELP = "Export one configuration of a stored sweep: model files, configuration, script, report."


def add_arguments(parser):
    parser.add_argument("sweep_id", metavar="SWEEP_ID", help="a sweep id (see workbench history)")
    parser.add_argument("--config", metavar="recommended|RANK|best", default=RECOMMENDED,
                        help="which configuration: 'recommended' (the simplest one practically "
                             "equivalent to the best, as the verdict says), its rank in the "
                             "results (1 = best) or 'best' (default recommended)")
    parser.add_argument("--to", metavar="FOLDER", required=True, dest="folder",
                        help="the export folder: new, empty or an earlier export (replaced "
                             "whole; files it did not write are kept and reported)")
    parser.add_argument("--formats", metavar="LIST", default=None,
                        help=f"comma-separated subset of: {','.join(FORMATS)} (default: all)")
    parser.add_argument("--store", metavar="PATH", default=None,
                        help="the store file (default: the user's data folder)")
    parser.add_argument("--table", metavar="PATH", default=None,
                        help="the sweep's table, when its stored path no longer reaches it "
                             "(its SHA-256 must match)")
    parser.add_argument("--sign-key-file", metavar="FILE", default=None,
                        help="sign the folder: write the HMAC-SHA256 of its manifest with the "
                             "key in FILE (at least 32 bytes, kept apart from the folder); "
                             "predict --verify-key-file checks it")
    parser.add_argument("--quiet", action="store_true", help="print only the folder")


def run(args) -> int:
    from workbench.export.bundle import export_configuration
    from workbench.export.signature import read_key
    from workbench.sweep.store import Store, existing_store_path

    def progress(message, fraction):
        if not args.quiet:
            print(f"[{100 * fraction:3.0f}%] {message}", file=sys.stderr)

    def note(message):  # printed even with --quiet: files of the user's were involved
        print(f"workbench: {message}", file=sys.stderr)

    key = None
    if args.sign_key_file is not None:
        try:
            key = read_key(args.sign_key_file, folder=args.folder)
        except InputError as exc:
            raise InputError(f"{exc} (set with --sign-key-file)") from None
    with Store(existing_store_path(args.store)) as store:
        which, res = args.config, None
        if str(which).strip().lower() == RECOMMENDED:
            from workbench.sweep.results import recommended_rank, sweep_results

            res = sweep_results(store, args.sweep_id)  # computed once, handed to the export
            which = recommended_rank(res)
        try:
            folder = export_configuration(store, args.sweep_id, which, args.folder,
                                          formats=args.formats, on_progress=progress,
                                          table=args.table, on_note=note, sign_key=key,
                                          results=res)
        except InputError as exc:
            if exc.setting == "table":  # here the table is set with --table, not an argument
                raise InputError(f"{exc} (set with --table)") from None
            raise
    print(folder)
    return 0
