"""The export folder: only a folder proven to be an export is replaced, nothing of the
user's is lost, and abandoned temporaries of a killed export are removed next time.

References: SHA-256 via :mod:`hashlib` (FIPS 180-4) for "byte for byte"; a killed
export is a real child process ended with ``os._exit`` in the middle of writing
(no clean-up code runs, as after SIGKILL); the lock a live export holds is the
operating system's (``fcntl.flock``, POSIX advisory locks).
"""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
from export_helpers import make_sweep

from workbench.cli import main
from workbench.errors import InputError
from workbench.export import atomic
from workbench.export.bundle import export_configuration
from workbench.export.configuration import CONFIGURATION_NAME, SCHEMA_NAME
from workbench.export.model_files import MANIFEST_FORMAT, MANIFEST_NAME
from workbench.export.report import REPORT_NAME
from workbench.export.results_csv import CONFIGURATIONS_CSV, TRIALS_CSV


@pytest.fixture(scope="module")
def sweep(tmp_path_factory):
    base = tmp_path_factory.mktemp("folder")
    store, sweep_id, table = make_sweep(base, "regression")
    yield store, sweep_id, str(store.path)
    store.close()


def tree(folder: Path) -> dict:
    """Every entry under ``folder``: files by SHA-256 of their bytes, folders and links."""
    out = {}
    for path in sorted(folder.rglob("*")):
        rel = path.relative_to(folder).as_posix()
        if path.is_symlink():
            out[rel] = ("link", os.readlink(path))
        elif path.is_dir():
            out[rel] = ("dir",)
        else:
            out[rel] = ("file", hashlib.sha256(path.read_bytes()).hexdigest())
    return out


def export_cli(sweep, folder, *extra) -> int:
    _, sweep_id, db = sweep
    return main(["export", sweep_id, "--to", str(folder), "--store", db, "--quiet", *extra])


def one_line(err: str) -> str:
    assert err.startswith("workbench: ") and err.count("\n") == 1, err
    assert "Traceback" not in err
    return err


# --------------------------------------------------------------------------- not ours: refused


def test_a_folder_with_someone_elses_manifest_survives_byte_for_byte(sweep, tmp_path, capsys):
    # the case of the hardening issue: a web app's folder with its own manifest.json
    w = tmp_path / "W"
    (w / "src").mkdir(parents=True)
    (w / "manifest.json").write_text('{"name":"My PWA"}\n')
    (w / "src" / "app.js").write_text("precious\n")
    before = tree(w)
    _, sweep_id, db = sweep  # the command as the issue gives it (progress lines not silenced)
    assert main(["export", sweep_id, "--to", str(w), "--formats", "json", "--store", db]) == 2
    out, err = capsys.readouterr()
    err = one_line(err)
    assert out == "" and "not written by the workbench" in err and "(set with --to)" in err
    assert tree(w) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["W"]  # no temporary left


@pytest.mark.parametrize("manifest", [
    "not json at all {",
    json.dumps({"format": MANIFEST_FORMAT, "version": 99, "files": {}}),
    json.dumps({"format": MANIFEST_FORMAT, "version": 1, "files": ["model.skops"]}),
    json.dumps({"format": MANIFEST_FORMAT, "version": 1,
                "files": {"../outside.txt": {"sha256": "0" * 64, "bytes": 1}}}),
    json.dumps({"format": MANIFEST_FORMAT, "version": 1,
                "files": {"report.html": {"sha256": "short", "bytes": 1}}}),
    json.dumps({"format": "something-else", "version": 1, "files": {}}),
    json.dumps([MANIFEST_FORMAT]),
], ids=["not-json", "future-version", "files-not-a-dict", "path-outside", "bad-digest",
        "other-format", "a-list"])
def test_a_manifest_that_does_not_prove_an_export_is_refused(sweep, tmp_path, manifest):
    w = tmp_path / "W"
    w.mkdir()
    (w / MANIFEST_NAME).write_text(manifest)
    (w / "report.html").write_text("<p>mine</p>")
    before = tree(w)
    with pytest.raises(InputError) as err:
        export_configuration(sweep[0], sweep[1], "best", w, formats="json")
    assert err.value.setting == "folder" and "--" not in str(err.value)
    assert tree(w) == before


def test_a_symbolic_link_is_refused(sweep, tmp_path):
    real = tmp_path / "real"
    export_configuration(sweep[0], sweep[1], "best", real, formats="json")
    link = tmp_path / "link"
    link.symlink_to(real, target_is_directory=True)
    before = tree(tmp_path)
    with pytest.raises(InputError, match="symbolic link") as err:
        export_configuration(sweep[0], sweep[1], "best", link, formats="json")
    assert err.value.setting == "folder"
    assert tree(tmp_path) == before


def test_a_changed_file_of_an_export_is_not_overwritten(sweep, tmp_path, capsys):
    f = tmp_path / "F"
    assert export_cli(sweep, f, "--formats", "json,csv") == 0
    with open(f / CONFIGURATIONS_CSV, "a", encoding="utf-8") as fh:
        fh.write("my own note\n")  # edited in a spreadsheet, say
    before = tree(f)
    capsys.readouterr()
    assert export_cli(sweep, f, "--formats", "json") == 2
    err = one_line(capsys.readouterr().err)
    assert CONFIGURATIONS_CSV in err and "changed since" in err
    assert tree(f) == before


def test_a_user_file_named_like_a_new_export_file_is_refused(sweep, tmp_path, capsys):
    f = tmp_path / "F"
    assert export_cli(sweep, f, "--formats", "json") == 0
    (f / REPORT_NAME).write_text("<p>my own report</p>")
    before = tree(f)
    capsys.readouterr()
    assert export_cli(sweep, f, "--formats", "json,report") == 2
    err = one_line(capsys.readouterr().err)
    assert REPORT_NAME in err and "this export writes a file of that name" in err
    assert tree(f) == before


# --------------------------------------------------------------------------- ours: replaced, user files kept


def test_re_export_keeps_the_users_files_and_says_so(sweep, tmp_path, capsys):
    f = tmp_path / "F"
    assert export_cli(sweep, f, "--formats", "json,csv") == 0
    (f / "new_rows.csv").write_text("a,b\n1,2\n")
    (f / "notes").mkdir()
    (f / "notes" / "todo.txt").write_text("ask Ana\n")
    mine = {k: v for k, v in tree(f).items() if k.startswith(("new_rows", "notes"))}
    capsys.readouterr()
    assert export_cli(sweep, f, "--formats", "json", "--config", "2") == 0
    out, err = capsys.readouterr()
    assert out.strip() == str(f)
    err = one_line(err)
    assert "kept 2" in err and "new_rows.csv" in err and "notes" in err
    after = tree(f)
    assert {k: v for k, v in after.items() if k.startswith(("new_rows", "notes"))} == mine
    # the earlier export's own files are gone, the new one's are there
    assert {k for k in after if "/" not in k} == {CONFIGURATION_NAME, SCHEMA_NAME, MANIFEST_NAME,
                                                  "new_rows.csv", "notes"}
    manifest = json.loads((f / MANIFEST_NAME).read_text())
    assert set(manifest["files"]) == {CONFIGURATION_NAME, SCHEMA_NAME}
    assert json.loads((f / CONFIGURATION_NAME).read_text())["scores"]["rank"] == 2
    assert sorted(p.name for p in tmp_path.iterdir()) == ["F"]
    # the kept files stay the user's: the next export keeps them again
    assert export_cli(sweep, f, "--formats", "json,csv") == 0
    assert "new_rows.csv" in capsys.readouterr().err
    assert (f / CONFIGURATIONS_CSV).is_file() and (f / TRIALS_CSV).is_file()
    assert {k: v for k, v in tree(f).items() if k.startswith(("new_rows", "notes"))} == mine


def test_a_failed_swap_puts_the_users_files_back(sweep, tmp_path, monkeypatch):
    f = tmp_path / "F"
    export_configuration(sweep[0], sweep[1], "best", f, formats="json")
    (f / "new_rows.csv").write_text("a,b\n1,2\n")
    before = tree(f)
    real, failed = os.replace, []

    def failing(src, dst):
        if Path(dst) == f and not failed:  # the new folder cannot take the target's place
            failed.append(src)
            raise OSError(28, "No space left on device")
        return real(src, dst)

    monkeypatch.setattr(atomic.os, "replace", failing)
    with pytest.raises(InputError, match="nothing was changed") as err:
        export_configuration(sweep[0], sweep[1], 2, f, formats="json")
    assert err.value.setting == "folder" and failed
    assert tree(f) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["F"]


# --------------------------------------------------------------------------- killed exports


KILL_MID_WRITE = textwrap.dedent('''
    import os, sys
    from workbench.export import formats
    from workbench.export.bundle import export_configuration
    from workbench.sweep.store import Store

    def die(ctx, folder):  # half a file written, then the process ends with no clean-up
        (folder / "configurations.csv").write_text("half")
        os._exit(9)

    fmt = formats.FORMATS["csv"]
    formats.FORMATS["csv"] = formats.ExportFormat(fmt.key, fmt.label, fmt.description,
                                                  fmt.files, fmt.needs_model, die)
    db, sweep_id, folder = sys.argv[1:]
    with Store(db) as store:
        export_configuration(store, sweep_id, "best", folder, formats="json,csv")
''')


def test_a_killed_export_leaves_a_temporary_the_next_export_removes(sweep, tmp_path, capsys):
    _, sweep_id, db = sweep
    f = tmp_path / "F"
    assert export_cli(sweep, f, "--formats", "json") == 0
    before = tree(f)
    child = subprocess.run([sys.executable, "-c", KILL_MID_WRITE, db, sweep_id, str(f)],
                           capture_output=True, text=True)
    assert child.returncode == 9, child.stderr
    assert tree(f) == before  # the earlier export is untouched
    left = [p for p in tmp_path.iterdir() if p.name != "F"]
    assert len(left) == 1 and atomic.TEMPORARY_PATTERN.match(left[0].name)
    assert (left[0] / atomic.MARKER_NAME).is_file()
    # a folder that only looks like a temporary is not touched
    lookalike = tmp_path / ".F.tmp-0123abcd"
    lookalike.mkdir()
    (lookalike / "mine.txt").write_text("mine")
    capsys.readouterr()
    # the next export to the same parent (another folder) removes the abandoned one
    assert export_cli(sweep, tmp_path / "G", "--formats", "json") == 0
    assert capsys.readouterr().err == ""
    assert sorted(p.name for p in tmp_path.iterdir()) == [".F.tmp-0123abcd", "F", "G"]
    assert tree(lookalike) == {"mine.txt": ("file", hashlib.sha256(b"mine").hexdigest())}
    assert tree(f) == before


def _abandoned(parent: Path, name: str, files: dict[str, str]) -> Path:
    tmp = parent / name
    tmp.mkdir()
    (tmp / atomic.MARKER_NAME).write_text(json.dumps({"format": MANIFEST_FORMAT,
                                                      "in_progress": True}))
    for file, text in files.items():
        (tmp / file).write_text(text)
    return tmp


def test_only_unlocked_marked_temporaries_holding_our_files_are_removed(tmp_path):
    ours = {CONFIGURATION_NAME, MANIFEST_NAME}
    gone = _abandoned(tmp_path, ".out.tmp-00000001", {CONFIGURATION_NAME: "{}"})
    wrong_pattern = _abandoned(tmp_path, ".out.tmp-XYZ", {CONFIGURATION_NAME: "{}"})
    users = _abandoned(tmp_path, ".out.tmp-00000002", {"new_rows.csv": "a\n1\n"})
    live = _abandoned(tmp_path, ".other.tmp-00000003", {CONFIGURATION_NAME: "{}"})
    unmarked = tmp_path / ".out.tmp-00000004"
    unmarked.mkdir()
    (unmarked / CONFIGURATION_NAME).write_text("{}")
    fake = _abandoned(tmp_path, ".out.tmp-00000005", {})
    (fake / atomic.MARKER_NAME).write_text('{"name": "not ours"}')
    import fcntl

    with open(live / atomic.MARKER_NAME, "rb") as held:
        fcntl.flock(held.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)  # a live export's lock
        notes = atomic.remove_abandoned(tmp_path, ours)
    assert not gone.exists()
    for kept in (wrong_pattern, users, live, unmarked, fake):
        assert kept.is_dir(), kept.name
    assert (users / "new_rows.csv").read_text() == "a\n1\n"
    assert len(notes) == 1 and users.name in notes[0] and "new_rows.csv" in notes[0]
    # the lock released (the live export ended): now it is abandoned
    assert atomic.remove_abandoned(tmp_path, ours) == notes
    assert not live.exists()


def test_a_file_saved_while_the_export_runs_is_kept(sweep, tmp_path, monkeypatch, capsys):
    f = tmp_path / "F"
    assert export_cli(sweep, f, "--formats", "json") == 0
    real, calls = atomic.inspect_target, []

    def then_the_user_saves(folder, writes):
        kept = real(folder, writes)
        calls.append(folder)
        if len(calls) == 2:  # the check right before the swap (the first is before the refit)
            (f / "late.txt").write_text("saved meanwhile")
        return kept

    monkeypatch.setattr(atomic, "inspect_target", then_the_user_saves)
    capsys.readouterr()
    assert export_cli(sweep, f, "--formats", "json,csv") == 0
    assert "late.txt" in one_line(capsys.readouterr().err)
    assert (f / "late.txt").read_text() == "saved meanwhile"
    assert (f / CONFIGURATIONS_CSV).is_file() and calls == [f, f]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["F"]
