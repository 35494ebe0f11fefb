"""The coders' laptop clocks: how far each runs ahead of the log server, and how fast it drifts.

Same convention as sync/tables.py (CLOCK MODEL):
    device time = log time + offset_s + drift_ppm * 1e-6 * (log time - reference)
A device whose clock runs ahead has a positive offset.  The laptop's monotonic clock,
which times the windows, ticks at the same (drifting) rate as its wall clock.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class DeviceClock:
    device: str
    offset_s: float
    drift_ppm: float
    reference_ns: int  # the log time at which the offset is offset_s

    def device_from_log(self, log_ns: np.ndarray | int) -> np.ndarray:
        """Log-server time (UTC ns) -> what this laptop's clock read at that moment."""
        log_ns = np.asarray(log_ns, dtype=np.int64)
        since = (log_ns - self.reference_ns).astype(np.float64)
        return log_ns + np.rint(self.offset_s * 1e9 + self.drift_ppm * 1e-6 * since).astype(np.int64)

    def log_from_device(self, device_ns: np.ndarray | int) -> np.ndarray:
        """The inverse: this laptop's reading -> log-server time (UTC ns)."""
        device_ns = np.asarray(device_ns, dtype=np.int64)
        shifted = (device_ns - self.reference_ns).astype(np.float64) - self.offset_s * 1e9
        return self.reference_ns + np.rint(shifted / (1.0 + self.drift_ppm * 1e-6)).astype(np.int64)

    def device_seconds(self, true_seconds: np.ndarray | float) -> np.ndarray:
        """A true duration as the laptop's monotonic clock measures it."""
        return np.asarray(true_seconds, dtype=np.float64) * (1.0 + self.drift_ppm * 1e-6)


def draw_clocks(rng: np.random.Generator, devices: tuple[str, ...], offset_ranges: tuple[tuple[float, float], ...],
                drift_ranges: tuple[tuple[float, float], ...], reference_ns: int) -> tuple[DeviceClock, ...]:
    """One clock per device, offset and drift uniform in that device's ranges, rounded to 1 ms / 0.01 ppm."""
    return tuple(
        DeviceClock(device=device, offset_s=round(float(rng.uniform(*offsets)), 3),
                    drift_ppm=round(float(rng.uniform(*drifts)), 2), reference_ns=reference_ns)
        for device, offsets, drifts in zip(devices, offset_ranges, drift_ranges)
    )
