"""The report layer: Jinja2 templates with autoescape, one style sheet, inline PNG figures.

Every piece of text that reaches a report (scheme names, coder names, roster attributes)
goes through a template, so it is escaped; tables come from pandas' own escaping
``to_html``.  Figures are matplotlib ``Figure`` objects drawn on their own Agg canvas:
no pyplot state and no global backend, so a report can be built inside the app.
"""
from __future__ import annotations

import base64
import io

import pandas as pd
from jinja2 import Environment, PackageLoader, StrictUndefined, select_autoescape
from markupsafe import Markup
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

ENVIRONMENT = Environment(
    loader=PackageLoader("observer_app.reports", "templates"),
    autoescape=select_autoescape(["html", "css"], default=True),
    undefined=StrictUndefined, trim_blocks=True, lstrip_blocks=True,
)


def render(template: str, **context: object) -> str:
    """One template of observer_app/reports/templates rendered with ``context``."""
    return ENVIRONMENT.get_template(template).render(**context)


def figure_png_base64(figure: Figure, dpi: int = 100) -> str:
    """A figure as base64 PNG text, without timestamps in the file (reproducible bytes)."""
    if figure.canvas is None or not isinstance(figure.canvas, FigureCanvasAgg):
        FigureCanvasAgg(figure)
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=dpi, bbox_inches="tight", metadata={"Software": None})
    return base64.b64encode(buffer.getvalue()).decode("ascii")


def figure_html(figure: Figure, alt: str) -> Markup:
    """An <img> with the figure inline."""
    return Markup(render("figure.html", alt=alt, data=figure_png_base64(figure)))


def table_html(frame: pd.DataFrame, css_class: str = "") -> Markup:
    """A DataFrame as an HTML table (pandas escapes the cells)."""
    return Markup(frame.to_html(index=False, border=0, classes=css_class or None, na_rep="", escape=True,
                                float_format=lambda value: f"{value:.3f}"))


def paragraph(text: str, css_class: str = "note") -> Markup:
    return Markup(render("paragraph.html", text=text, css_class=css_class))


def section(title: str, *parts: Markup) -> Markup:
    """A titled section of already-rendered parts (tables, paragraphs, figures)."""
    return Markup(render("section.html", title=title, parts=parts))


def page(title: str, sections: list[Markup]) -> str:
    """A whole self-contained HTML page."""
    return render("page.html", title=title, sections=sections)
