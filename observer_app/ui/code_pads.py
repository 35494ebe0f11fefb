"""The code pads both coding screens show: one pad per dimension, one tile per code.

A tile shows its code's key in a badge, its label and its scheme colour, and is filled
when the code is in effect; a click forwards (dimension, code) to the screen, which
hands it to its session.  Nothing here decides anything.
"""
from __future__ import annotations

from PySide6.QtCore import QRectF, QSize, Qt
from PySide6.QtGui import QColor, QFont, QPainter, QPainterPath, QPen
from PySide6.QtWidgets import QFrame, QHBoxLayout, QLabel, QSizePolicy, QVBoxLayout, QWidget

from observer_app.study.scheme import Code, SchemeDimension
from observer_app.ui import theme as looks
from observer_app.ui.theme import Theme


def dimension_title(name: str) -> str:
    """A dimension or code name as the screen writes it: 'rapid_guessing' -> 'Rapid guessing'."""
    return name.replace("_", " ").capitalize()


class CodeTile(QWidget):
    """One code: its key in a badge, its label, its scheme colour; filled when in effect."""

    def __init__(self, dimension: SchemeDimension, code: Code, on_click) -> None:
        super().__init__()
        self.dimension = dimension
        self.code = code
        self.selected = False
        self.theme: Theme = looks.LIGHT
        self.scale = 1.0
        self._on_click = on_click
        self.setFocusPolicy(Qt.FocusPolicy.NoFocus)
        self.setMinimumHeight(36)
        self.setMaximumHeight(66)
        self.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Expanding)
        self.setToolTip(f"key {code.key.upper()}: {code.label}")

    def sizeHint(self) -> QSize:
        return QSize(360, 64)

    def mousePressEvent(self, event) -> None:  # noqa: N802
        self._on_click(self.dimension.name, self.code.name)

    def paintEvent(self, event) -> None:  # noqa: N802
        theme = self.theme
        painter = QPainter(self)
        painter.setRenderHint(QPainter.RenderHint.Antialiasing)
        box = QRectF(self.rect()).adjusted(2, 3, -2, -3)
        strength = theme.selected_strength if self.selected else theme.colour_strength
        fill = looks.blend(self.code.colour, theme.surface, strength)
        painter.setPen(QPen(looks.blend(self.code.colour, theme.surface, 0.9 if self.selected else 0.3),
                            3 if self.selected else 1))
        painter.setBrush(fill)
        painter.drawRoundedRect(box, 9, 9)
        strip = QPainterPath()
        strip.addRoundedRect(QRectF(box.left(), box.top(), 16, box.height()), 8, 8)
        painter.setPen(Qt.PenStyle.NoPen)
        strip_strength = 0.75 if theme is looks.LIGHT else 0.5
        strip_colour = looks.blend(self.code.colour, theme.surface, strip_strength)
        painter.setBrush(strip_colour.darker(125) if self.selected else strip_colour)
        painter.drawPath(strip)
        painter.drawRect(QRectF(box.left() + 8, box.top(), 8, box.height()))
        side = min(box.height() - 8, 46.0)
        badge = QRectF(box.left() + 26, box.top() + (box.height() - side) / 2, side, side)
        painter.setPen(QPen(QColor(theme.quiet_text), 1.5))
        painter.setBrush(QColor(theme.background))
        painter.drawRoundedRect(badge, 6, 6)
        key_font = QFont(self.font())
        key_font.setPixelSize(max(12, round(side * looks.KEY_SHARE_OF_BADGE)))
        key_font.setBold(True)
        painter.setFont(key_font)
        painter.setPen(QColor(theme.text))
        painter.drawText(badge, Qt.AlignmentFlag.AlignCenter, self.code.key.upper())
        label_font = QFont(self.font())
        label_font.setPointSizeF(looks.TILE_POINTS * self.scale)
        label_font.setBold(self.selected)
        painter.setFont(label_font)
        painter.setPen(QColor(looks.readable_text(fill, theme)))
        text_box = QRectF(badge.right() + 16, box.top(), box.right() - badge.right() - 26, box.height())
        smallest = label_font.pointSizeF() * 0.7  # shrink a long label before eliding it
        while (painter.fontMetrics().horizontalAdvance(self.code.label) > text_box.width()
               and label_font.pointSizeF() > smallest):
            label_font.setPointSizeF(label_font.pointSizeF() - 1)
            painter.setFont(label_font)
        label = painter.fontMetrics().elidedText(self.code.label, Qt.TextElideMode.ElideRight, int(text_box.width()))
        painter.drawText(text_box, Qt.AlignmentFlag.AlignVCenter | Qt.AlignmentFlag.AlignLeft, label)


class DimensionPad(QFrame):
    """One dimension: its name, whether it is still to code, and a tile per code."""

    def __init__(self, dimension: SchemeDimension, on_click, slots: int = 0) -> None:
        """``slots``: the most codes any pad has; empty slots keep every pad's tiles the same height."""
        super().__init__()
        self.dimension = dimension
        self.setProperty("role", "panel")
        layout = QVBoxLayout(self)
        layout.setContentsMargins(14, 10, 14, 12)
        layout.setSpacing(4)
        header = QHBoxLayout()
        self.title = QLabel(dimension_title(dimension.name).upper())
        self.state = QLabel("")
        self.state.setAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
        # Fixed height: the heading keeps its own height whatever room the tiles leave, so the
        # headings of pads with different numbers of codes stand on one line.
        self.title.setSizePolicy(QSizePolicy.Policy.Minimum, QSizePolicy.Policy.Fixed)
        self.state.setSizePolicy(QSizePolicy.Policy.Preferred, QSizePolicy.Policy.Fixed)
        header.addWidget(self.title)
        header.addWidget(self.state, 1)
        layout.addLayout(header)
        self.tiles = [CodeTile(dimension, code, on_click) for code in dimension.codes]
        for tile in self.tiles:
            layout.addWidget(tile, 1)
        for _ in range(max(0, slots - len(self.tiles))):
            layout.addStretch(1)

    def show_code(self, code: str | None, theme: Theme, scale: float) -> None:
        for tile in self.tiles:
            tile.selected = tile.code.name == code
            tile.theme, tile.scale = theme, scale
            tile.update()
        points = looks.PAD_TITLE_POINTS * scale
        self.title.setStyleSheet(f"font-size: {points}pt; font-weight: bold; color: {theme.quiet_text};")
        if code is None:
            self.state.setText("to code")
            self.state.setStyleSheet(f"font-size: {points}pt; color: {theme.quiet_text};")
        else:
            self.state.setText("✓ " + self.dimension.code(code).label)
            self.state.setStyleSheet(f"font-size: {points}pt; font-weight: bold; color: {theme.text};")


def pads_for(scheme, on_click) -> list[DimensionPad]:
    """One pad per dimension, tiles of equal height across pads."""
    slots = max(len(dimension.codes) for dimension in scheme.dimensions)
    return [DimensionPad(dimension, on_click, slots) for dimension in scheme.dimensions]
