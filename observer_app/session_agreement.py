"""How well a paired session agrees with its partner's, for the end-of-session screen.

The partner's session arrives in this study's store through ``fieldmark import``;
sessions of one paired run share their shared start time.  Pairing and every figure
are agreement/'s decisions (slot matching, Cohen's kappa, Landis & Koch band); this
module only picks the run's observations and keeps the units this session coded.
"""
from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from agreement.figures import Estimate, assess_agreement, headline_kappa
from agreement.pairing import pair_observations
from observer_app.commands.agree import scheme_dimensions
from observer_app.store import Store
from observer_app.study import Study

END_SCREEN_RESAMPLES = 200  # enough for a first look; `fieldmark agree` gives the full report


@dataclass(frozen=True)
class PartnerAgreement:
    """Kappa per dimension between this session and the other sessions of its paired run."""

    partners: tuple[str, ...]  # the other coders
    units: int  # windows both coded
    kappa: dict[str, Estimate]  # dimension -> Cohen's kappa (Fleiss' with more coders), 95 % interval
    band: dict[str, str]  # dimension -> Landis & Koch label


def partner_agreement(study: Study, store: Store, session_id: str,
                      resamples: int = END_SCREEN_RESAMPLES) -> PartnerAgreement | None:
    """None when the session is solo, its partner is not imported, or no window was coded by both."""
    sessions = store.sessions()
    own = sessions[sessions["session_id"] == session_id]
    if own.empty or pd.isna(own["paired_start"].iloc[0]):
        return None
    run = sessions[sessions["paired_start"] == own["paired_start"].iloc[0]]
    partners = run[run["session_id"] != session_id]
    if partners.empty:
        return None
    names = list(study.scheme.dimension_names)
    observations = store.observations(names)
    observations = observations[observations["session_id"].isin(set(run["session_id"]))]
    units, _ = pair_observations(observations, names, tolerance_s=study.window_seconds / 2.0)
    if units.empty:
        return None
    shared = set(units.loc[units["session_id"] == session_id, "unit"])
    units = units[units["unit"].isin(shared)]
    if units.empty:
        return None
    result = assess_agreement(units, scheme_dimensions(study.scheme), resamples=resamples)
    return PartnerAgreement(
        partners=tuple(sorted(set(partners["coder"].astype(str)))), units=result.units,
        kappa={name: headline_kappa(figures.figures) for name, figures in result.dimensions.items()},
        band={name: figures.band for name, figures in result.dimensions.items()},
    )
