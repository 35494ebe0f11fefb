"""The picture behind a clock model, for reports: sync-mark residuals over time, or the
automatic scan's score against offset.  matplotlib's object API (Agg canvas), so no
global backend is touched."""
from __future__ import annotations

import io

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from sync.clock import ClockModel

LABELLED_OUTLIERS = 8


def residual_figure(model: ClockModel) -> Figure:
    """Marks: residual (s) of each mark against hours since the reference, outliers named.
    Automatic: the scan's score per candidate offset with the estimate marked.  Other
    methods: a one-line note.  Every title states the offset at the model's reference
    instant and names it (restate the model with ``ClockModel.at_reference`` to show
    several at one instant)."""
    at = "at " + pd.Timestamp(model.reference_ns, tz="UTC").strftime("%Y-%m-%dT%H:%M:%SZ")
    figure = Figure(figsize=(6.4, 3.2), dpi=100)
    FigureCanvasAgg(figure)
    axes = figure.add_subplot()
    if model.residuals:
        hours = np.array([(r.event_ns - model.reference_ns) / 3.6e12 for r in model.residuals])
        residual = np.array([r.residual_s for r in model.residuals])
        outlier = np.array([r.outlier for r in model.residuals])
        axes.axhline(0.0, color="#888888", linewidth=0.8)
        axes.scatter(hours[~outlier], residual[~outlier], s=14, color="#3B6EA5", label="used in the fit")
        if outlier.any():
            axes.scatter(hours[outlier], residual[outlier], s=22, marker="x", color="#B5523B", label="outlier")
            for index in np.flatnonzero(outlier)[:LABELLED_OUTLIERS]:
                axes.annotate(model.residuals[index].mark_id[:8], (hours[index], residual[index]),
                              fontsize=7, xytext=(3, 3), textcoords="offset points")
        axes.set_xlabel("hours since the reference time (log clock)")
        axes.set_ylabel("residual (s)")
        axes.legend(fontsize=8, loc="best")
        axes.set_title(f"{model.device}: sync marks, offset {model.offset_s:+.2f} s {at}, drift {model.drift_ppm:+.1f} ppm",
                       fontsize=9)
    elif model.scan_scores:
        axes.plot(model.scan_offsets_s, model.scan_scores, color="#3B6EA5", linewidth=1.0)
        axes.axvline(model.offset_s, color="#B5523B", linewidth=0.8, linestyle="--")
        axes.set_xlabel("candidate offset (s, device minus log)")
        axes.set_ylabel("G statistic (codes vs log activity)")
        axes.set_title(f"{model.device}: automatic scan, offset {model.offset_s:+.2f} s {at}, "
                       f"confidence {model.confidence:.2f}", fontsize=9)
    else:
        axes.axis("off")
        axes.text(0.5, 0.5, f"{model.device}: {model.method} offset {model.offset_s:+.2f} s {at} (no fit to show)",
                  ha="center", va="center", fontsize=9)
    figure.tight_layout()
    return figure


def residual_plot_png(model: ClockModel) -> bytes:
    """:func:`residual_figure` as PNG bytes (to embed as base64 in self-contained HTML)."""
    buffer = io.BytesIO()
    residual_figure(model).savefig(buffer, format="png")
    return buffer.getvalue()
