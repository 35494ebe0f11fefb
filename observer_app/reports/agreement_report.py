"""The self-contained HTML reliability report of ``fieldmark agree --report``."""
from __future__ import annotations

import pandas as pd

from agreement.plots import confusion_figure, drift_figure
from agreement.statistics import Agreement, DimensionAgreement, estimate_text, headline_kappa
from agreement.tables import FIGURE_KEYS, FIGURE_LABELS
from observer_app.reports.html import figure_html, render


def _plain(value: object) -> str:
    """A pairing figure as text: counts per name as "ann 3, ben 1", "none" when empty."""
    if isinstance(value, dict):
        return ", ".join(f"{name} {count}" for name, count in value.items()) or "none"
    return str(value)


def _dimension(result: DimensionAgreement) -> dict[str, object]:
    could_not = result.could_not_observe
    return {
        "name": result.name, "level": result.level, "units": result.units, "coders": result.coders,
        "band": result.band,
        "could_not_observe": (
            f"Could-not-observe code {could_not.code}: used {could_not.codes} times; "
            f"{could_not.units_one_coder_could_not} units where one coder could not observe and another coded; "
            f"{'included as a code' if could_not.included else 'left out of the figures'}."
            if could_not.code else ""),
        "figures": [(FIGURE_LABELS[key], estimate_text(result.figures[key]))
                    for key in FIGURE_KEYS if result.figures[key].value is not None],
        "per_code": [(code, estimate_text(estimate)) for code, estimate in result.per_code_kappa.items()],
        "confusion": figure_html(confusion_figure(result), f"confusion matrix of {result.name}"),
    }


def render_agreement_report(title: str, agreement: Agreement, rolling: dict[str, pd.DataFrame], window: int,
                            pairing: dict[str, object] | None = None,
                            views: dict[str, Agreement] | None = None) -> str:
    """The whole report as one HTML string (every text escaped by the template)."""
    drift = drift_figure(rolling, window)
    names = list(agreement.dimensions)
    return render(
        "agreement.html", title=title, agreement=agreement,
        pairing=[(key.replace("_", " "), _plain(value)) for key, value in (pairing or {}).items()],
        dimensions=[_dimension(result) for result in agreement.dimensions.values()],
        drift=figure_html(drift, "rolling kappa") if drift is not None else None,
        view_columns=names,
        views=[(label, [estimate_text(headline_kappa(view.dimensions[name].figures)) for name in names])
               for label, view in (views or {}).items()],
    )
