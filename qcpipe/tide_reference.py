"""A site's tide reference: the water level the tide checks and immersion states compare with.

The observed gauge where it has data, else the harmonic prediction from the site's
constants; and the immersion state a water level alone implies for a sensing point.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .arrays import NS
from .tide.harmonics import TideConstants, predict_tide


@dataclass
class SiteTide:
    """What is known of the water level at a site: harmonic constants and/or an observed gauge."""
    site_id: str
    constants: TideConstants | None = None
    gauge_time: np.ndarray | None = None          # datetime64[ns]
    gauge_level: np.ndarray | None = None         # m above the site datum, failed/missing removed
    gauge_name: str = ""
    max_gauge_gap_s: float = 1800.0

    def predicted(self, times) -> np.ndarray | None:
        """Harmonic prediction at ``times`` (m above the site datum), or None without constants."""
        if self.constants is None:
            return None
        return predict_tide(np.asarray(times, dtype="datetime64[ns]"), self.constants.constituents,
                            mean_level=self.constants.mean_level_m)

    def observed(self, times) -> np.ndarray | None:
        """The gauge's level interpolated to ``times``; NaN outside its record and across its gaps."""
        if self.gauge_time is None or self.gauge_time.size < 2:
            return None
        t = np.asarray(times, dtype="datetime64[ns]").astype(np.int64)
        gt = self.gauge_time.astype("datetime64[ns]").astype(np.int64)
        out = np.interp(t, gt, self.gauge_level, left=np.nan, right=np.nan)
        i = np.clip(np.searchsorted(gt, t), 1, gt.size - 1)
        out[(gt[i] - gt[i - 1]) > self.max_gauge_gap_s * NS] = np.nan
        return out

    def reference(self, times) -> tuple[np.ndarray | None, str]:
        """Reference level at ``times``: the observed gauge where it has data, else the prediction."""
        obs, pred = self.observed(times), self.predicted(times)
        if obs is None and pred is None:
            return None, "none"
        if obs is None:
            return pred, "harmonic prediction"
        if pred is None:
            return obs, f"observed gauge {self.gauge_name}"
        return np.where(np.isnan(obs), pred, obs), f"observed gauge {self.gauge_name} (prediction where it has no data)"


def state_from_level(times, level, *, elevation_m: float, margin_m: float) -> np.ndarray:
    """Immersion state from a water level alone: 1 above elevation + margin, 0 below elevation - margin, else 2."""
    lv = np.asarray(level, dtype=np.float64)
    out = np.full(lv.shape, 2, np.int8)
    out[lv > elevation_m + margin_m] = 1
    out[lv < elevation_m - margin_m] = 0
    return out
