"""How the window phrases core messages (workbench.gui.messages), checked without Qt.

Reference: the command line's own phrasing (workbench.cli.SETTING_FLAGS / phrase_error)
of the same messages: both front ends must cover every setting the core can name.
"""

from __future__ import annotations

import subprocess
import sys

import pytest

from workbench.cli import SETTING_FLAGS, phrase_error
from workbench.errors import SETTINGS, InputError
from workbench.gui.messages import SETTING_LABELS, phrase


def test_every_setting_the_core_can_name_has_words_in_the_window():
    assert set(SETTING_LABELS) == set(SETTINGS) == set(SETTING_FLAGS)
    for key, words in SETTING_LABELS.items():
        assert words and "\n" not in words, key
        assert "--" not in words, key  # the window's users have no command line


@pytest.mark.parametrize("key", sorted(SETTINGS))
def test_phrase_adds_the_window_words_where_the_cli_adds_the_flag(key):
    exc = InputError(f"{SETTINGS[key]} is not right; change it", setting=key)
    assert phrase(exc) == f"{exc} ({SETTING_LABELS[key]})"
    assert phrase_error(exc) == f"{exc} (set with {SETTING_FLAGS[key]})"


def test_phrase_of_a_message_without_a_setting_is_the_message():
    assert phrase(InputError("something is wrong; fix it")) == "something is wrong; fix it"
    assert phrase(ValueError("two\nlines")) == "two lines"
    exc = InputError("the number of folds must be at least 2, got 1", setting="folds")
    assert phrase(exc) == ("the number of folds must be at least 2, got 1 "
                           "(set with the “Folds” box in the set-up column)")


def test_the_messages_module_imports_no_qt():
    code = ("import sys, workbench.gui.messages; "
            "print(sorted(m for m in sys.modules if m.split('.')[0] in "
            "('PySide6', 'shiboken6', 'pyqtgraph')))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.strip()
    assert out == "[]"
