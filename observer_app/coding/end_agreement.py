"""How well a paired session agrees with its partner's, for the end-of-session screen.

The partner's session arrives in this study's store through ``fieldmark import``.
The study's units come from observer_app.pipeline.units (the same pairing as
``fieldmark agree``); every figure is agreement/'s (Cohen's kappa, Landis & Koch
band).  This module only keeps the units this session coded.  It opens its own store
connections, so the end screen runs it off the UI thread (a sqlite3 connection
belongs to the thread that made it).
"""
from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from agreement.statistics import Estimate, assess_agreement, headline_kappa
from observer_app.pipeline.units import study_units
from observer_app.study.store import Store
from observer_app.study.folder import Study

END_SCREEN_RESAMPLES = 200  # enough for a first look; `fieldmark agree` gives the full report


@dataclass(frozen=True)
class PartnerAgreement:
    """Kappa per dimension between this session and the other sessions of its paired run."""

    partners: tuple[str, ...]  # the other coders
    units: int  # windows both coded
    kappa: dict[str, Estimate]  # dimension -> Cohen's kappa (Fleiss' with more coders), 95 % interval
    band: dict[str, str]  # dimension -> Landis & Koch label


def partner_agreement(study: Study, session_id: str,
                      resamples: int = END_SCREEN_RESAMPLES) -> PartnerAgreement | None:
    """None when the session is solo, its partner is not imported, or no window was coded by both."""
    with Store(study.store_path) as store:
        sessions = store.sessions()
    own = sessions[sessions["session_id"] == session_id]
    if own.empty or pd.isna(own["paired_start"].iloc[0]):
        return None
    found = study_units(study)
    units, dimensions = found.units, found.dimensions
    shared = set(units.loc[units["session_id"] == session_id, "unit"]) if len(units) else set()
    units = units[units["unit"].isin(shared)] if shared else units.iloc[0:0]
    partners = set(units["coder"].astype(str)) - {str(own["coder"].iloc[0])}
    if units.empty or not partners:
        return None
    result = assess_agreement(units, dimensions, resamples=resamples)
    return PartnerAgreement(
        partners=tuple(sorted(partners)), units=result.units,
        kappa={name: headline_kappa(figures.figures) for name, figures in result.dimensions.items()},
        band={name: figures.band for name, figures in result.dimensions.items()},
    )
