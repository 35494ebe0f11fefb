"""Pictures of agreement: the confusion heatmap and the rolling kappa over coding time.

matplotlib's object API (``Figure``), so nothing touches pyplot's global state or the
backend; the report layer (observer_app/reports) embeds them.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from agreement.statistics import DimensionAgreement


def confusion_figure(result: DimensionAgreement) -> Figure:
    """Heatmap of the dimension's confusion matrix."""
    counts = result.confusion.counts
    size = max(3.0, 0.6 * len(result.codes) + 1.5)
    figure = Figure(figsize=(size + 1, size))
    axes = figure.subplots()
    image = axes.imshow(counts, cmap="Blues")
    axes.set_xticks(range(len(result.codes)), result.codes, rotation=45, ha="right")
    axes.set_yticks(range(len(result.codes)), result.codes)
    axes.set_xlabel(result.confusion.columns)
    axes.set_ylabel(result.confusion.rows)
    axes.set_title(result.name)
    threshold = counts.max() / 2 if counts.size and counts.max() > 0 else 0
    for (row, column), value in np.ndenumerate(counts):
        axes.text(column, row, f"{value:g}", ha="center", va="center",
                  color="white" if value > threshold else "black", fontsize=8)
    figure.colorbar(image, ax=axes, shrink=0.8)
    return figure


SESSION_BREAK_MINUTES = 60


def drift_figure(rolling: dict[str, pd.DataFrame], window: int) -> Figure | None:
    """Rolling kappa per dimension (ROLLING tables); None when no dimension has a window."""
    drawable = {name: frame for name, frame in rolling.items() if len(frame)}
    if not drawable:
        return None
    figure = Figure(figsize=(8, 3.5), layout="tight")
    axes = figure.subplots()
    # Dimensions differ in which units count (could-not-observe is left out), so a shared
    # clock axis is comparable and unit numbers are not; CSVs without times fall back.
    timed = all(pd.notna(frame["time"]).all() for frame in drawable.values())
    breaks: list[float] = []
    if timed:
        # Coding happens in sessions hours or days apart; on a plain clock axis each session
        # would be a sliver.  Minutes of coding time, with each long pause shown as a line.
        stamps = pd.to_datetime(pd.concat([frame["time"] for frame in drawable.values()])).sort_values().unique()
        steps = np.diff(stamps.astype("int64")) / 60e9
        paused = steps > SESSION_BREAK_MINUTES
        minutes = np.concatenate([[0.0], np.cumsum(np.where(paused, 1.0, steps))])
        breaks = list(minutes[1:][paused] - 0.5)
        lookup = pd.Series(minutes, index=pd.DatetimeIndex(stamps))
    for name, frame in drawable.items():
        x = lookup.loc[pd.to_datetime(frame["time"])].to_numpy() if timed else frame["position"]
        axes.plot(x, frame["kappa"], label=name)
    for place in breaks:
        axes.axvline(place, color="#bbb", linestyle=":", linewidth=1)
    axes.axhline(0.6, color="#888", linestyle="--", linewidth=1, label="0.6")
    where = "minutes of coding (dotted: a pause of over an hour)" if timed else "unit (file order)"
    axes.set_xlabel(f"{where}; kappa over the last {window} units")
    axes.set_ylabel("kappa")
    axes.set_ylim(-0.2, 1.05)
    axes.legend(loc="lower left", fontsize=8)
    return figure
