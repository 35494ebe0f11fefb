"""One clock model per device, or one per session when the device's clock was corrected
between sessions (a laptop's network time sync overnight, a coder setting the clock).

A device's sessions are fitted together and each apart.  The combined model is kept
when every session's own fit agrees with it: the combined line, stated at the session
fit's reference, lies within AGREE_STANDARD_ERRORS combined standard errors of the
session's offset (never closer than AGREE_FLOOR_S, about a coder's reaction time to a
key press, common practice).  Otherwise the sessions keep their own models, keyed
``device/session_id`` (``clock_key``); the one place that maps observations onto the
log's clock looks a session's key up first and the device's second (``model_for``).
"""
from __future__ import annotations

import math
from dataclasses import replace

from sync.clock import ClockModel

AGREE_STANDARD_ERRORS = 3.0
AGREE_FLOOR_S = 0.5


def clock_key(device: str, session_id: str | None = None) -> str:
    """The key of a clock model: the device, or ``device/session_id`` for one session's clock."""
    return str(device) if not session_id else f"{device}/{session_id}"


def model_for(models: dict[str, ClockModel], device: str, session_id: str | None) -> ClockModel | None:
    """The model a session's live observations go through: the session's own, else the device's."""
    return models.get(clock_key(device, session_id)) or models.get(str(device))


def session_disagreement(combined: ClockModel, session: ClockModel) -> float:
    """How many standard errors apart the session's fit and the combined line are at the
    session's reference (0 when within AGREE_FLOOR_S; inf when an error is unknown)."""
    gap = abs(combined.at_reference(session.reference_ns).offset_s - session.offset_s)
    if gap <= AGREE_FLOOR_S:
        return 0.0
    spread = math.hypot(_error(session), _error(combined))
    return gap / spread if spread > 0 else math.inf  # NaN spread (unknown error) is not > 0: inf


def models_by_session(combined: ClockModel, per_session: dict[str, ClockModel]) -> dict[str, ClockModel]:
    """{device: combined} when every session's fit agrees with it (or there is at most one),
    else {device/session_id: that session's fit} for every session with a fit."""
    disagree = [session_id for session_id, model in per_session.items()
                if session_disagreement(combined, model) > AGREE_STANDARD_ERRORS]
    if len(per_session) < 2 or not disagree:
        return {combined.device: combined}
    note = (f"clock corrected between sessions: {len(disagree)} of {len(per_session)} sessions disagree with one "
            "line for the device, so each session has its own model")
    return {clock_key(combined.device, session_id): _with_warning(model, note)
            for session_id, model in sorted(per_session.items())}


def _error(model: ClockModel) -> float:
    """The model's standard error over its span (its offset's when the span's is unknown)."""
    return model.span_standard_error_s if math.isfinite(model.span_standard_error_s) else model.offset_standard_error_s


def _with_warning(model: ClockModel, note: str) -> ClockModel:
    return replace(model, warnings=tuple(dict.fromkeys((*model.warnings, note))))
