"""The window's look: palette, light and dark themes, style sheet and icons.

The series colours were picked for this program and checked for colour-vision
deficiency (see ``tests/test_gui_theme.py``): every pair stays apart after the
protanopia, deuteranopia and tritanopia simulations of Machado, Oliveira &
Fernandes (2009). Colour never carries meaning alone: tie groups also carry a
marker glyph, health warnings a word and an icon.

Rows of the results table are coloured by their *decision* against the best
(``best`` a pale gold, ``equivalent`` a pale green; undecided and worse rows keep
the base colour) and baselines by ``reference`` (a neutral grey, with italic
text); all are hues away from the blue ``selection``, so a selected row never
looks like a decided one (``tests/test_gui_results.py`` measures the CIE76
distance in both themes).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from PySide6.QtCore import QByteArray, QSize, Qt
from PySide6.QtGui import QColor, QGuiApplication, QIcon, QPainter, QPalette, QPixmap
from PySide6.QtSvg import QSvgRenderer

#: series colours, one per configuration in the plots (light background)
SERIES_LIGHT = (
    "#1f5fa8",  # deep blue
    "#e07b00",  # orange
    "#6b2d6b",  # plum
    "#3f94d1",  # sky
    "#8a6a00",  # ochre
    "#1a9988",  # teal
    "#404040",  # graphite
    "#d46a8e",  # rose
)
#: the same roles for a dark background (lighter, so lines stand out on dark grey)
SERIES_DARK = (
    "#5b9be0",  # blue
    "#f29a32",  # orange
    "#e8dfb0",  # cream
    "#f5a3c0",  # pink
    "#a58f2c",  # ochre
    "#3cc0ad",  # teal
    "#909090",  # grey
    "#b5a0ff",  # lavender
)


@dataclass(frozen=True)
class Theme:
    """Named colours of one theme; the style sheet template reads them."""

    name: str
    window: str
    base: str
    alt_base: str
    panel: str
    text: str
    muted: str
    border: str
    accent: str
    accent_text: str
    selection: str
    tie: str
    best: str
    equivalent: str
    reference: str
    banner_bg: str
    banner_text: str
    warn: str
    plot_bg: str
    plot_fg: str
    series: tuple[str, ...]

    @property
    def dark(self) -> bool:
        return self.name == "dark"

    def series_color(self, i: int) -> QColor:
        return QColor(self.series[i % len(self.series)])


LIGHT = Theme(
    name="light",
    window="#f4f3ef",
    base="#ffffff",
    alt_base="#f8f7f4",
    panel="#eceae4",
    text="#1f2328",
    muted="#5d646c",
    border="#cfccc4",
    accent="#24527a",
    accent_text="#ffffff",
    selection="#c9dcf0",
    tie="#e7eff7",
    best="#f3e2a9",
    equivalent="#d9eed5",
    reference="#ece4d4",
    banner_bg="#fbecd2",
    banner_text="#5a3a00",
    warn="#a35a00",
    plot_bg="#ffffff",
    plot_fg="#3a3f45",
    series=SERIES_LIGHT,
)

DARK = Theme(
    name="dark",
    window="#1d2024",
    base="#25292e",
    alt_base="#2a2f35",
    panel="#2c3137",
    text="#e6e6e3",
    muted="#a3a9b0",
    border="#40464e",
    accent="#6fa6d8",
    accent_text="#10161c",
    selection="#2f4f6e",
    tie="#223448",
    best="#4d4219",
    equivalent="#23412a",
    reference="#3a3833",
    banner_bg="#4a3510",
    banner_text="#fbe3b8",
    warn="#f2b25c",
    plot_bg="#25292e",
    plot_fg="#d0d3d6",
    series=SERIES_DARK,
)

THEMES = {"light": LIGHT, "dark": DARK}


def resources_dir() -> Path:
    """Folder holding the icons and the style sheet: package data inside ``workbench``."""
    return Path(__file__).resolve().parent.parent / "resources"


def system_prefers_dark() -> bool:
    """True when the platform reports a dark colour scheme."""
    app = QGuiApplication.instance()
    if app is None:
        return False
    try:
        return app.styleHints().colorScheme() == Qt.ColorScheme.Dark
    except AttributeError:  # pragma: no cover - Qt < 6.5
        return app.palette().color(QPalette.Window).lightness() < 128


def resolve(choice: str) -> Theme:
    """The theme for ``choice`` in ("system", "light", "dark")."""
    if choice in THEMES:
        return THEMES[choice]
    return DARK if system_prefers_dark() else LIGHT


def qpalette(theme: Theme) -> QPalette:
    """A QPalette for the Fusion style matching ``theme``."""
    p = QPalette()
    c = QColor
    p.setColor(QPalette.Window, c(theme.window))
    p.setColor(QPalette.WindowText, c(theme.text))
    p.setColor(QPalette.Base, c(theme.base))
    p.setColor(QPalette.AlternateBase, c(theme.alt_base))
    p.setColor(QPalette.ToolTipBase, c(theme.base))
    p.setColor(QPalette.ToolTipText, c(theme.text))
    p.setColor(QPalette.PlaceholderText, c(theme.muted))
    p.setColor(QPalette.Text, c(theme.text))
    p.setColor(QPalette.Button, c(theme.panel))
    p.setColor(QPalette.ButtonText, c(theme.text))
    p.setColor(QPalette.BrightText, c(theme.warn))
    p.setColor(QPalette.Highlight, c(theme.selection))
    p.setColor(QPalette.HighlightedText, c(theme.text))
    p.setColor(QPalette.Link, c(theme.accent))
    p.setColor(QPalette.Mid, c(theme.border))
    for role in (QPalette.WindowText, QPalette.Text, QPalette.ButtonText):
        p.setColor(QPalette.Disabled, role, c(theme.muted))
    return p


def style_sheet(theme: Theme) -> str:
    """The resources' style sheet with this theme's colours filled in."""
    path = resources_dir() / "style.qss"
    text = path.read_text(encoding="utf-8") if path.is_file() else ""
    for key, value in vars(theme).items():
        if isinstance(value, str):
            text = text.replace("@" + key + "@", value)
    return text


def apply(app, theme: Theme) -> None:
    """Apply ``theme`` to the whole application (once: re-styling every widget is costly)."""
    if app.property("workbenchTheme") == theme.name:
        return
    app.setStyle("Fusion")
    app.setPalette(qpalette(theme))
    app.setStyleSheet(style_sheet(theme))
    app.setProperty("workbenchTheme", theme.name)


_ICON_CACHE: dict[tuple[str, str], QIcon] = {}


def icon(name: str, color: str) -> QIcon:
    """One of our SVG icons, drawn in ``color`` (``currentColor`` in the file)."""
    key = (name, color)
    if key in _ICON_CACHE:
        return _ICON_CACHE[key]
    path = resources_dir() / "icons" / f"{name}.svg"
    ico = QIcon()
    if path.is_file():
        data = path.read_text(encoding="utf-8").replace("currentColor", color)
        renderer = QSvgRenderer(QByteArray(data.encode("utf-8")))
        for size in (16, 20, 24, 32, 48):
            pix = QPixmap(QSize(size, size))
            pix.fill(Qt.transparent)
            painter = QPainter(pix)
            renderer.render(painter)
            painter.end()
            ico.addPixmap(pix)
    _ICON_CACHE[key] = ico
    return ico
