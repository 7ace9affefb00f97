"""Map the sensor clock onto the video clock from sync events (CONTRACT §1, sync.csv).

A sync event (say, a tap on the sensor seen on camera) is seen at ``video_s`` on the
video clock and ``sensor_s`` on the sensor clock. The two clocks are related by

    sensor_s = offset_s + rate * video_s

One pair fixes the offset (rate 1); two or more pairs fix offset and linear drift by
ordinary least squares, and the root-mean-square residual is reported in QC.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Drift larger than this (parts per million) is implausible for a sensor's quartz clock
#: (common practice: consumer quartz clocks drift tens of ppm) and is flagged.
MAX_PLAUSIBLE_DRIFT_PPM = 1000.0


@dataclass(frozen=True)
class ClockMap:
    """sensor_s = offset_s + rate * video_s, with how it was obtained."""

    offset_s: float
    rate: float
    n_pairs: int
    residual_s: float  # RMS residual of the fit; NaN where not estimable (< 3 pairs)

    @property
    def drift_ppm(self) -> float:
        return (self.rate - 1.0) * 1e6

    def to_sensor(self, video_s: np.ndarray) -> np.ndarray:
        return self.offset_s + self.rate * np.asarray(video_s, dtype=float)

    def to_video(self, sensor_s: np.ndarray) -> np.ndarray:
        return (np.asarray(sensor_s, dtype=float) - self.offset_s) / self.rate

    def flags(self) -> list[str]:
        out = []
        if self.n_pairs == 0:
            out.append("no_sync_aligned_at_zero")
        if abs(self.drift_ppm) > MAX_PLAUSIBLE_DRIFT_PPM:
            out.append("implausible_clock_drift")
        return out


IDENTITY = ClockMap(offset_s=0.0, rate=1.0, n_pairs=0, residual_s=float("nan"))


def fit_clock_map(pairs: np.ndarray) -> ClockMap:
    """Fit the video-to-sensor mapping from sync pairs.

    Parameters
    ----------
    pairs : ndarray, shape (n, 2)
        Columns video_s, sensor_s. With n = 0 the clocks are taken as equal (flagged).

    Returns
    -------
    ClockMap
        With n = 1 the rate is 1 and only the offset is estimated; with n >= 2 both
        are estimated by least squares (exact for n = 2). The residual is the RMS of
        the fit's residuals, defined for n >= 3.
    """
    pairs = np.asarray(pairs, dtype=float).reshape(-1, 2)
    n = len(pairs)
    if n == 0:
        return IDENTITY
    video, sensor = pairs[:, 0], pairs[:, 1]
    if n == 1 or np.ptp(video) == 0:
        offset = float(np.mean(sensor - video))
        resid = sensor - (offset + video)
        rms = float(np.sqrt(np.mean(resid**2))) if n >= 2 else float("nan")
        return ClockMap(offset_s=offset, rate=1.0, n_pairs=n, residual_s=rms)
    rate, offset = np.polyfit(video, sensor, 1)
    resid = sensor - (offset + rate * video)
    rms = float(np.sqrt(np.mean(resid**2))) if n >= 3 else float("nan")
    return ClockMap(offset_s=float(offset), rate=float(rate), n_pairs=n, residual_s=rms)
