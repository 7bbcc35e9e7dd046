"""Does a results view show the verdict? One check for every view (not a test module).

The command line (:func:`workbench.commands.show.format_results`), the report
(:func:`workbench.export.report.render_report`) and the window all show the
words of :func:`workbench.sweep.results.verdict_statements`; a view agrees with
the JSON document when every statement's text appears in it. Views wrap long
lines and HTML escapes characters, so both sides are compared with their white
space collapsed (pass a view's *text*: for HTML, the parsed text, not the
markup; for Qt widgets, their ``text()`` or ``toPlainText()``).

Usage from a window test::

    from verdict_views import assert_view_shows_verdict
    assert_view_shows_verdict(strip_label.text(), results_json)
"""

from __future__ import annotations

from html.parser import HTMLParser

from workbench.sweep.results import verdict_statements


def normalise(text: str) -> str:
    """White space collapsed to single blanks."""
    return " ".join(str(text).split())


def statement_texts(res: dict) -> list[str]:
    """The texts every view must show for the results document ``res``."""
    return [s["text"] for s in verdict_statements(res)]


def assert_view_shows_verdict(view_text: str, res: dict, *, skip=()) -> None:
    """Fail, naming the missing statement, unless ``view_text`` shows every statement.

    ``skip`` lists statement keys a view shows elsewhere or not at all.
    """
    shown = normalise(view_text)
    for s in verdict_statements(res):
        if s["key"] in skip:
            continue
        assert normalise(s["text"]) in shown, f"the view lacks the {s['key']} statement: {s['text']}"


class _Text(HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.parts = []

    def handle_data(self, data):
        self.parts.append(data)


def html_text(markup: str) -> str:
    """The text an HTML document shows (entities decoded), parts separated by blanks."""
    p = _Text()
    p.feed(markup)
    p.close()
    return " ".join(p.parts)
