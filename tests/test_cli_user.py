"""The command line as an analyst meets it: one-line messages, exit codes, readable output.

Regression tests for problems found by using every sub-command by hand. Fast: tiny
tables, a store in tmp_path, `workbench.cli.main(argv)` in-process with capsys.
"""

from __future__ import annotations

import pytest

from workbench.cli import main


def _err_line(capsys) -> str:
    err = capsys.readouterr().err
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    return lines[0]


@pytest.mark.parametrize("argv, words", [
    (["sweep", "t.csv", "--target", "y", "--folds", "abc"], "--folds"),
    (["sweep", "t.csv", "--engine", "gpu"], "--engine"),
    (["export", "SOME_ID"], "--to"),
    (["predict", "a", "b", "--joblib", "--onnx"], "--onnx"),
    (["no-such-command"], "no-such-command"),
])
def test_usage_errors_are_one_line_with_exit_2(capsys, argv, words):
    with pytest.raises(SystemExit) as exc:
        main(argv)
    assert exc.value.code == 2
    line = _err_line(capsys)
    assert words in line and "--help" in line
    assert not line.startswith("usage:")
