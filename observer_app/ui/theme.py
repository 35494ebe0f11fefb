"""How the app looks in its two modes: calm and light, or discreet (dark, low glare).

Discreet mode exists so a room full of learners does not notice the coder: a dark
background, dimmed code colours, no bright accents; the app never makes a sound
in either mode.  Type sizes are in points and sized for reading at arm's length.
"""
from __future__ import annotations

from dataclasses import dataclass

from PySide6.QtGui import QColor
from PySide6.QtWidgets import QLabel, QProgressBar, QVBoxLayout, QWidget


@dataclass(frozen=True)
class Theme:
    name: str
    background: str
    surface: str  # panels and tiles
    text: str
    quiet_text: str  # captions, secondary text
    accent: str  # the time bar
    warning: str  # unsaved / error text
    colour_strength: float  # how much of a code's colour shows on an unselected tile (0..1)
    selected_strength: float  # how much on the selected tile


LIGHT = Theme(name="standard", background="#F4F2EE", surface="#FFFFFF", text="#23272B", quiet_text="#6B6F73",
              accent="#5B8DB8", warning="#A8453A", colour_strength=0.16, selected_strength=0.85)
DISCREET = Theme(name="discreet", background="#111315", surface="#1B1E21", text="#B9BDC1", quiet_text="#6E7378",
                 accent="#3F5F78", warning="#B0675E", colour_strength=0.10, selected_strength=0.45)

# Point sizes: the learner's label must be readable from a metre away.
LEARNER_POINTS = 54
TIME_POINTS = 34
NEXT_POINTS = 24
TILE_POINTS = 17
KEY_SHARE_OF_BADGE = 0.62  # the key letter's height as a share of its badge, so it always fits
PAD_TITLE_POINTS = 15
STATUS_POINTS = 13
DISCREET_SCALE = 1.1  # discreet mode is darker, so the type is a little larger


def blend(colour: str, base: str, strength: float) -> QColor:
    """``strength`` of ``colour`` over ``base``: tiles show scheme colours softly."""
    top, bottom = QColor(colour), QColor(base)
    return QColor(
        round(bottom.red() + (top.red() - bottom.red()) * strength),
        round(bottom.green() + (top.green() - bottom.green()) * strength),
        round(bottom.blue() + (top.blue() - bottom.blue()) * strength),
    )


def readable_text(background: QColor, theme: Theme) -> str:
    """Dark or light text, whichever reads better on this background."""
    luminance = 0.299 * background.red() + 0.587 * background.green() + 0.114 * background.blue()
    if theme is DISCREET:
        return "#0E0F10" if luminance > 150 else theme.text
    return "#14171A" if luminance > 140 else "#FFFFFF"


def titled_column(page: QWidget, title: str, margins: tuple[int, int, int, int]) -> QVBoxLayout:
    """``page``'s layout, a column that starts with ``title`` in the title style (role "title")."""
    layout = QVBoxLayout(page)
    layout.setContentsMargins(*margins)
    heading = QLabel(title)
    heading.setProperty("role", "title")
    layout.addWidget(heading)
    return layout


def busy_bar() -> QProgressBar:
    """A thin moving bar for work of no known length (the style sheet below draws it)."""
    bar = QProgressBar()
    bar.setRange(0, 0)  # no known end: Qt shows it as moving
    bar.setTextVisible(False)
    return bar


def stylesheet(theme: Theme) -> str:
    """The application-wide style for forms, tables and lists."""
    return f"""
    QWidget {{ background: {theme.background}; color: {theme.text}; font-size: 13pt; }}
    QLineEdit, QComboBox, QListWidget, QTableWidget, QPlainTextEdit, QTextBrowser {{
        background: {theme.surface}; color: {theme.text}; border: 1px solid {theme.quiet_text};
        border-radius: 4px; padding: 4px; }}
    QLineEdit:focus, QComboBox:focus, QListWidget:focus, QTableWidget:focus {{ border: 2px solid {theme.accent}; }}
    QLineEdit:disabled, QComboBox:disabled {{ background: {theme.background}; color: {theme.quiet_text};
        border: 1px dashed {theme.quiet_text}; }}
    QLabel:disabled {{ color: {theme.quiet_text}; }}
    QHeaderView::section {{ background: {theme.background}; color: {theme.quiet_text}; border: none;
        border-bottom: 1px solid {theme.quiet_text}; padding: 4px; font-weight: bold; }}
    QPushButton {{ background: {theme.surface}; color: {theme.text}; border: 1px solid {theme.quiet_text};
        border-radius: 6px; padding: 8px 16px; }}
    QPushButton:focus {{ border: 2px solid {theme.accent}; }}
    QLabel[role="caption"] {{ color: {theme.quiet_text}; font-size: 12pt; letter-spacing: 1px; }}
    QLabel[role="title"] {{ font-size: 22pt; font-weight: bold; }}
    QLabel[role="warning"] {{ color: {theme.warning}; }}
    QFrame[role="panel"] {{ background: {theme.surface}; border-radius: 8px; }}
    QFrame[role="panel"] QLabel {{ background: transparent; }}
    QProgressBar {{ background: {theme.surface}; border: none; border-radius: 2px; max-height: 4px; }}
    QProgressBar::chunk {{ background: {theme.accent}; border-radius: 2px; }}
    """
