"""The demo's self-contained HTML report: sections of tables and matplotlib figures
embedded as base64 PNG (Agg backend), so the file opens anywhere without a server."""
from __future__ import annotations

import base64
import html
import io

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

from observer_app.study.scheme import Dimension  # noqa: E402

STYLE = """
body { font-family: system-ui, sans-serif; max-width: 1100px; margin: 2em auto; color: #222; }
h1 { font-size: 1.6em; } h2 { border-bottom: 1px solid #ccc; padding-bottom: .2em; margin-top: 2em; }
table { border-collapse: collapse; margin: .8em 0; font-size: .92em; }
th, td { border: 1px solid #ccc; padding: .25em .6em; text-align: right; }
th { background: #f0f0f0; } td:first-child, th:first-child { text-align: left; }
.note { color: #555; font-size: .92em; } .truth { background: #fff6e0; }
img { max-width: 100%; }
"""


def figure_html(figure: Figure, alt: str) -> str:
    """A matplotlib figure as an <img> with the PNG inline; the figure is closed."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=90, bbox_inches="tight", metadata={"Software": None})
    plt.close(figure)
    encoded = base64.b64encode(buffer.getvalue()).decode("ascii")
    return f'<img alt="{html.escape(alt)}" src="data:image/png;base64,{encoded}">'


def table_html(frame: pd.DataFrame, css_class: str = "") -> str:
    return frame.to_html(index=False, border=0, classes=css_class or None, na_rep="", float_format=lambda v: f"{v:.3f}")


def paragraph(text: str, css_class: str = "note") -> str:
    return f'<p class="{css_class}">{html.escape(text)}</p>'


def section(title: str, *parts: str) -> str:
    return f"<section><h2>{html.escape(title)}</h2>\n" + "\n".join(parts) + "\n</section>"


def page(title: str, sections: list[str]) -> str:
    return (f"<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>{html.escape(title)}</title>"
            f"<style>{STYLE}</style></head><body><h1>{html.escape(title)}</h1>\n" + "\n".join(sections)
            + "\n</body></html>\n")


def timeline_figure(states: pd.DataFrame, codes: pd.DataFrame, dimension: Dimension, origin: pd.Timestamp,
                    caption: str) -> Figure:
    """Latent-state bands per learner with each coder's codes as markers above them.

    ``states``: truth_states rows of one dimension (learner, state, start, end);
    ``codes``: learner, coder, time (where to put the code), code.  x axis: minutes from ``origin``.
    """
    learners = sorted(states["learner"].unique())
    coders = sorted(codes["coder"].unique())
    colours = {code.name: code.colour for code in dimension.codes}
    figure, axis = plt.subplots(figsize=(11, 1.2 + 0.8 * len(learners)))
    for row, learner in enumerate(learners):
        runs = states[states["learner"] == learner]
        left = (runs["start"] - origin).dt.total_seconds() / 60
        width = (runs["end"] - runs["start"]).dt.total_seconds() / 60
        axis.barh(row, width, left=left, height=0.45, color=runs["state"].map(colours).fillna("#cccccc"))
        for offset, coder in enumerate(coders):
            mine = codes[(codes["learner"] == learner) & (codes["coder"] == coder)]
            axis.scatter((mine["time"] - origin).dt.total_seconds() / 60, [row - 0.32 - 0.16 * offset] * len(mine),
                         c=mine["code"].map(colours).fillna("#000000").tolist(), marker="v" if offset else "o",
                         s=28, edgecolors="black", linewidths=0.4)
    axis.set_yticks(range(len(learners)), learners)
    axis.set_ylim(len(learners) - 0.6, -0.75)
    axis.set_xlim(-1, (codes["time"].max() - origin).total_seconds() / 60 + 1)
    axis.set_xlabel("minutes from the start of coding")
    handles = [plt.Rectangle((0, 0), 1, 1, color=c.colour) for c in dimension.codes]
    axis.legend(handles, [c.name for c in dimension.codes], ncol=len(handles), loc="upper center",
                bbox_to_anchor=(0.5, -0.12 - 0.4 / len(learners)), fontsize=8, frameon=False)
    axis.set_title(caption, fontsize=10)
    return figure


def codes_per_learner_figure(observations: pd.DataFrame, dimension: Dimension) -> Figure:
    """Stacked bars: how often each learner got each code of ``dimension``."""
    counts = (observations.groupby(["learner", dimension.name]).size().unstack(fill_value=0)
              .reindex(columns=list(dimension.code_names), fill_value=0))
    figure, axis = plt.subplots(figsize=(11, 3.2))
    bottom = pd.Series(0, index=counts.index)
    for code in dimension.codes:
        axis.bar(counts.index, counts[code.name], bottom=bottom, color=code.colour, label=code.name)
        bottom = bottom + counts[code.name]
    axis.set_ylabel("coded windows")
    axis.set_title(f"{dimension.name} codes per learner (both coders)", fontsize=10)
    axis.tick_params(axis="x", labelrotation=90, labelsize=8)
    axis.legend(fontsize=8, ncol=len(dimension.codes), loc="upper center", bbox_to_anchor=(0.5, -0.3), frameon=False)
    return figure
