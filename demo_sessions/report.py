"""The demo report's own pictures (latent-state timelines, codes per learner); the page,
sections, tables and paragraphs come from the one report layer (observer_app/reports)."""
from __future__ import annotations

import pandas as pd
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle

from observer_app.reports.html import figure_html, page, paragraph, section, table_html
from observer_app.study.scheme import SchemeDimension

__all__ = ["figure_html", "page", "paragraph", "section", "table_html", "timeline_figure",
           "codes_per_learner_figure"]


def timeline_figure(states: pd.DataFrame, codes: pd.DataFrame, dimension: SchemeDimension, origin: pd.Timestamp,
                    caption: str) -> Figure:
    """Latent-state bands per learner with each coder's codes as markers above them.

    ``states``: truth_states rows of one dimension (learner, state, start, end);
    ``codes``: learner, coder, time (where to put the code), code.  x axis: minutes from ``origin``.
    """
    learners = sorted(states["learner"].unique())
    coders = sorted(codes["coder"].unique())
    colours = {code.name: code.colour for code in dimension.codes}
    figure = Figure(figsize=(11, 1.2 + 0.8 * len(learners)))
    axis = figure.subplots()
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
    handles = [Rectangle((0, 0), 1, 1, color=c.colour) for c in dimension.codes]
    axis.legend(handles, [c.name for c in dimension.codes], ncol=len(handles), loc="upper center",
                bbox_to_anchor=(0.5, -0.12 - 0.4 / len(learners)), fontsize=8, frameon=False)
    axis.set_title(caption, fontsize=10)
    return figure


def codes_per_learner_figure(observations: pd.DataFrame, dimension: SchemeDimension) -> Figure:
    """Stacked bars: how often each learner got each code of ``dimension``."""
    counts = (observations.groupby(["learner", dimension.name]).size().unstack(fill_value=0)
              .reindex(columns=list(dimension.code_names), fill_value=0))
    figure = Figure(figsize=(11, 3.2))
    axis = figure.subplots()
    bottom = pd.Series(0, index=counts.index)
    for code in dimension.codes:
        axis.bar(counts.index, counts[code.name], bottom=bottom, color=code.colour, label=code.name)
        bottom = bottom + counts[code.name]
    axis.set_ylabel("coded windows")
    axis.set_title(f"{dimension.name} codes per learner (both coders)", fontsize=10)
    axis.tick_params(axis="x", labelrotation=90, labelsize=8)
    axis.legend(fontsize=8, ncol=len(dimension.codes), loc="upper center", bbox_to_anchor=(0.5, -0.3), frameon=False)
    return figure
