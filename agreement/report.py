"""The self-contained HTML reliability report: tables, confusion heatmaps, drift plot.

Plots are drawn with matplotlib's Agg backend and embedded as base64 PNG, so the file
can be mailed or archived alone.
"""
from __future__ import annotations

import base64
import html
import io

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

from agreement.statistics import Agreement, DimensionAgreement, estimate_text, headline_kappa  # noqa: E402
from agreement.tables import FIGURE_KEYS, FIGURE_LABELS  # noqa: E402


STYLE = """
body { font-family: sans-serif; margin: 2em; color: #222; max-width: 60em; }
table { border-collapse: collapse; margin: 0.5em 0 1.5em; }
th, td { border: 1px solid #ccc; padding: 0.25em 0.6em; text-align: right; }
th:first-child, td:first-child { text-align: left; }
caption { text-align: left; font-weight: bold; margin-bottom: 0.3em; }
.note { color: #555; font-size: 0.9em; }
"""


def png_base64(figure: plt.Figure) -> str:
    """The figure as a base64 PNG (and closed)."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=100, bbox_inches="tight")
    plt.close(figure)
    return base64.b64encode(buffer.getvalue()).decode("ascii")


def confusion_figure(result: DimensionAgreement) -> plt.Figure:
    """Heatmap of the dimension's confusion matrix."""
    counts = result.confusion.counts
    size = max(3.0, 0.6 * len(result.codes) + 1.5)
    figure, axes = plt.subplots(figsize=(size + 1, size))
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


def drift_figure(rolling: dict[str, pd.DataFrame], window: int) -> plt.Figure | None:
    """Rolling kappa per dimension (ROLLING tables); None when no dimension has a window."""
    drawable = {name: frame for name, frame in rolling.items() if len(frame)}
    if not drawable:
        return None
    figure, axes = plt.subplots(figsize=(8, 3.5))
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
    figure.tight_layout()
    return figure


def _figure_table(result: DimensionAgreement) -> str:
    rows = "".join(
        f"<tr><td>{html.escape(FIGURE_LABELS[key])}</td><td>{estimate_text(result.figures[key])}</td></tr>"
        for key in FIGURE_KEYS if result.figures[key].value is not None
    )
    per_code = "".join(
        f"<tr><td>{html.escape(code)}</td><td>{estimate_text(estimate)}</td></tr>"
        for code, estimate in result.per_code_kappa.items()
    )
    could_not = result.could_not_observe
    could_not_line = (
        f"<p class='note'>Could-not-observe code {html.escape(could_not.code)}: used {could_not.codes} times; "
        f"{could_not.units_one_coder_could_not} units where one coder could not observe and another coded; "
        f"{'included as a code' if could_not.included else 'left out of the figures'}.</p>"
        if could_not.code else ""
    )
    return (
        f"<h2>{html.escape(result.name)}</h2>"
        f"<p>Level {result.level}; {result.units} units; coders {html.escape(', '.join(result.coders))}; "
        f"Landis &amp; Koch band: <b>{html.escape(result.band)}</b>.</p>{could_not_line}"
        f"<table><caption>Figures with 95 % cluster-bootstrap intervals</caption>"
        f"<tr><th>Figure</th><th>Value [95 % CI]</th></tr>{rows}</table>"
        f"<table><caption>One-vs-rest kappa per code</caption><tr><th>Code</th><th>Kappa [95 % CI]</th></tr>"
        f"{per_code}</table>"
        f"<img alt='confusion matrix of {html.escape(result.name)}' "
        f"src='data:image/png;base64,{png_base64(confusion_figure(result))}'>"
    )


def _plain(value: object) -> str:
    """A pairing figure as text: counts per name as "ann 3, ben 1", "none" when empty."""
    if isinstance(value, dict):
        return ", ".join(f"{name} {count}" for name, count in value.items()) or "none"
    return str(value)


def render_report(title: str, agreement: Agreement, rolling: dict[str, pd.DataFrame], window: int,
                  pairing: dict[str, object] | None = None,
                  views: dict[str, Agreement] | None = None) -> str:
    """The whole report as one HTML string."""
    parts = [f"<!DOCTYPE html><html><head><meta charset='utf-8'><title>{html.escape(title)}</title>"
             f"<style>{STYLE}</style></head><body><h1>{html.escape(title)}</h1>",
             f"<p>{agreement.units} units from {agreement.clusters} learners; coders "
             f"{html.escape(', '.join(agreement.coders))}. Intervals: 95 % percentile bootstrap, "
             f"{agreement.resamples} resamples of learners (clusters), seed {agreement.seed}.</p>"]
    if pairing:
        parts.append("<table><caption>Pairing</caption>" + "".join(
            f"<tr><td>{html.escape(key.replace('_', ' '))}</td><td>{html.escape(_plain(value))}</td></tr>"
            for key, value in pairing.items()) + "</table>")
    for result in agreement.dimensions.values():
        parts.append(_figure_table(result))
    drift_plot = drift_figure(rolling, window)
    drift = png_base64(drift_plot) if drift_plot is not None else None
    parts.append("<h2>Agreement over time</h2>")
    parts.append(f"<img alt='rolling kappa' src='data:image/png;base64,{drift}'>" if drift
                 else "<p>Too few units for a rolling kappa.</p>")
    if views:
        header = "".join(f"<th>{html.escape(name)}</th>" for name in agreement.dimensions)
        rows = "".join(
            f"<tr><td>{html.escape(label)}</td>" + "".join(
                f"<td>{estimate_text(headline_kappa(view.dimensions[name].figures))}</td>" for name in agreement.dimensions)
            + "</tr>" for label, view in views.items())
        parts.append(f"<table><caption>Kappa by view</caption><tr><th></th>{header}</tr>{rows}</table>")
    parts.append("</body></html>")
    return "".join(parts)
