"""A device's clock model: how a coder's device time maps to the log server's time.

Convention (also in sync/tables.py):
    device time = log time + offset_s + drift_ppm * 1e-6 * (log time - reference)
A device whose clock runs ahead has a positive ``offset_s``; ``drift_ppm`` is how many
microseconds per second it gains.  The model is fitted by ``sync.clock_marks`` (sync
marks) or ``sync.clock_scan`` (automatic), or set by hand, and stored as JSON text per
device.
"""
from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, replace

import numpy as np
from sync.json_numbers import json_safe

METHODS: tuple[str, ...] = ("manual", "marks", "borrowed", "auto", "identity")
NAT = np.iinfo(np.int64).min


@dataclass(frozen=True)
class MarkResidual:
    """One sync mark after the fit: which event it was matched to and how far off it is."""

    mark_id: str
    learner: str
    device_ns: int
    event_ns: int
    residual_s: float
    outlier: bool


@dataclass(frozen=True)
class ClockModel:
    """Offset and drift of one device's clock relative to the log, with the evidence.

    offset_standard_error_s: the offset's standard error at the reference (marks: from the
    observed information of the mark-matching model, sync/clock_mark_errors.py; auto:
    bootstrap over windows, see sync/clock_refine.py); NaN when not known.
    span_standard_error_s: the standard error of device -> log time over the device's
    whole observed span, drift included (the largest over the span; it grows away from the
    reference; for marks half a 95 % simultaneous band, so 2 of it covers the whole span);
    NaN when not known.  The uncertainty gate of ``fieldmark align`` uses it.
    confidence is in [0, 1]: for "marks" the share of marks that agree with the fit
    (within max(1 s, 5 robust SD)); for "auto" how clearly the best offset beats the
    next-best separate candidate (1 = unrivalled, 0 = a tie); NaN for "manual" and
    "identity".  ``scan_offsets_s``/``scan_scores`` keep the automatic scan's curve for
    the report's plot.
    """

    device: str
    method: str
    offset_s: float
    drift_ppm: float = 0.0
    reference_ns: int = 0
    marks_used: int = 0
    median_abs_residual_s: float = math.nan
    confidence: float = math.nan
    offset_standard_error_s: float = math.nan
    span_standard_error_s: float = math.nan
    warnings: tuple[str, ...] = ()
    residuals: tuple[MarkResidual, ...] = ()
    scan_offsets_s: tuple[float, ...] = ()
    scan_scores: tuple[float, ...] = ()

    def __post_init__(self) -> None:
        if self.method not in METHODS:
            raise ValueError(f"method must be one of {METHODS}, got {self.method!r}")

    @property
    def outlying_marks(self) -> list[str]:
        """mark ids the fit set aside as outliers."""
        return [r.mark_id for r in self.residuals if r.outlier]

    def to_log_ns(self, device_ns: np.ndarray) -> np.ndarray:
        """Device instants (int64 UTC ns, NaT sentinel kept) -> log instants, vectorised.

        Inverts the convention: log = reference + (device - reference - offset) / (1 + drift).
        Integer arithmetic for the large parts keeps nanoseconds exact at today's epochs.
        """
        device_ns = np.asarray(device_ns, dtype=np.int64)
        delta = device_ns - np.int64(self.reference_ns) - np.int64(round(self.offset_s * 1e9))
        scaled = np.round(delta / (1.0 + self.drift_ppm * 1e-6)).astype(np.int64)
        return np.where(device_ns == NAT, NAT, np.int64(self.reference_ns) + scaled)

    def to_device_ns(self, log_ns: np.ndarray) -> np.ndarray:
        """Log instants -> device instants (the convention read forwards)."""
        log_ns = np.asarray(log_ns, dtype=np.int64)
        since = log_ns - np.int64(self.reference_ns)
        shift = np.round(self.offset_s * 1e9 + self.drift_ppm * 1e-6 * since).astype(np.int64)
        return np.where(log_ns == NAT, NAT, log_ns + shift)

    def at_reference(self, reference_ns: int) -> "ClockModel":
        """The same clock line written with another reference time (offset re-expressed
        there), e.g. to compare with a model stated at a different reference.  The automatic
        scan's candidate offsets move with it, so its curve still peaks at ``offset_s``."""
        shift = self.drift_ppm * 1e-6 * (reference_ns - self.reference_ns) / 1e9
        return replace(self, offset_s=self.offset_s + shift, reference_ns=int(reference_ns),
                       scan_offsets_s=tuple(offset + shift for offset in self.scan_offsets_s))

    def to_json(self) -> str:
        """JSON text for the store; NaN becomes null."""
        data = asdict(self)
        data = json_safe(data)
        return json.dumps(data, sort_keys=True)

    @classmethod
    def from_json(cls, text: str) -> "ClockModel":
        """The inverse of :meth:`to_json`."""
        data = json.loads(text)
        for key in ("median_abs_residual_s", "confidence", "offset_standard_error_s", "span_standard_error_s"):
            if data.get(key) is None:
                data[key] = math.nan
        data["warnings"] = tuple(data.get("warnings", ()))
        data["residuals"] = tuple(MarkResidual(**item) for item in data.get("residuals", ()))
        data["scan_offsets_s"] = tuple(data.get("scan_offsets_s", ()))
        data["scan_scores"] = tuple(data.get("scan_scores", ()))
        return cls(**data)


def manual_model(device: str, offset_s: float) -> ClockModel:
    """A hand-set offset (``fieldmark align --set-offset DEVICE=SECONDS``), no drift."""
    return ClockModel(device=device, method="manual", offset_s=float(offset_s))


def identity_model(device: str) -> ClockModel:
    """Device time taken as log time, for a device nobody has aligned (with a warning)."""
    return ClockModel(device=device, method="identity", offset_s=0.0,
                      warnings=(f"device {device!r} has no clock model; its times are used as log times",))
