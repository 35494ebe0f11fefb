"""One clock model per device, or a session's own when the device's clock was corrected
between sessions (a laptop's network time sync overnight, a coder setting the clock).

A device's sync marks are fitted together and each session's apart.  A session keeps
its own model only when both
  (a) its fit disagrees with the device's line: at the session fit's reference the two
      are more than AGREE_STANDARD_ERRORS combined standard errors apart (and more than
      AGREE_FLOOR_S, about a coder's reaction time to a key press, common practice); and
  (b) its own fit explains its marks clearly better: the device line's median absolute
      residual on them is more than BETTER_FIT_RATIO times the session fit's.
(b) guards against a session with few marks whose own fit matched them to the wrong
events (a sparse session can always find some alignment with a busy learner's log).
The device's model is then refitted from the other sessions' marks.  Session models are
keyed ``device/session_id`` (``clock_key``); the one place that maps observations onto
the log's clock looks a session's key up first and the device's second (``model_for``).
"""
from __future__ import annotations

import math
from dataclasses import replace
from statistics import median

from sync.clock import ClockModel

AGREE_STANDARD_ERRORS = 3.0
AGREE_FLOOR_S = 0.5
BETTER_FIT_RATIO = 3.0


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


def sessions_apart(combined: ClockModel, per_session: dict[str, ClockModel]) -> list[str]:
    """Sessions whose own fit disagrees with the device's line and explains its marks
    clearly better ((a) and (b) of the module note), sorted."""
    residual = {r.mark_id: abs(r.residual_s) for r in combined.residuals}
    apart = []
    for session_id, model in sorted(per_session.items()):
        own = [abs(r.residual_s) for r in model.residuals]
        theirs = [residual[r.mark_id] for r in model.residuals if r.mark_id in residual]
        if not own or not theirs or session_disagreement(combined, model) <= AGREE_STANDARD_ERRORS:
            continue
        if median(theirs) > BETTER_FIT_RATIO * median(own):
            apart.append(session_id)
    return apart


def session_model(model: ClockModel, sessions: int) -> ClockModel:
    """A session's own model, with the warning that says why it has one."""
    note = (f"clock corrected between sessions: this session's sync marks disagree with the device's other "
            f"{sessions - 1} sessions, so it has its own model")
    return replace(model, warnings=tuple(dict.fromkeys((*model.warnings, note))))


def _error(model: ClockModel) -> float:
    """The model's standard error over its span (its offset's when the span's is unknown)."""
    return model.span_standard_error_s if math.isfinite(model.span_standard_error_s) else model.offset_standard_error_s
