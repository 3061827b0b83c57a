"""A site's tide reference: the water level the tide checks and immersion states compare with.

Order of preference, per time: the site's observed gauge level (QC'd; failed and
missing samples removed; gaps not filled), then the harmonic prediction from the
constants the register names (official ones, say), else from constants fitted to the
site's own archived gauge records, else none.  Every sample's reference is labelled
with where it came from (:data:`SOURCE_MEANINGS`), so datasets record it per sample.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .arrays import NS
from .tide.harmonics import TideConstants, predict_tide

#: per-sample source of the reference level (a flag variable's values and meanings)
NO_REFERENCE, OBSERVED_GAUGE, REGISTER_PREDICTION, FITTED_PREDICTION = 0, 1, 2, 3
SOURCE_MEANINGS = ("no_reference observed_gauge_level prediction_from_register_constants "
                   "prediction_from_constants_fitted_to_site_gauge")
SOURCE_WORDS = {NO_REFERENCE: "no reference", OBSERVED_GAUGE: "observed gauge level",
                REGISTER_PREDICTION: "prediction from the register's harmonic constants",
                FITTED_PREDICTION: "prediction from constants fitted to the site's gauge records"}


#: per-sample source of an instrument's immersion state
IMMERSION_UNKNOWN, IMMERSION_PROBE = 0, 1
IMMERSION_SOURCE_MEANINGS = ("unknown immersion_probe observed_gauge_level prediction_from_register_constants "
                             "prediction_from_constants_fitted_to_site_gauge")


def immersion_source_from_reference(source) -> np.ndarray:
    """Immersion-state source codes of states taken from the reference level with these source codes."""
    src = np.asarray(source, dtype=np.int8)
    return np.where(src == NO_REFERENCE, IMMERSION_UNKNOWN, src + 1).astype(np.int8)


@dataclass
class SiteTide:
    """What is known of the water level at a site: harmonic constants and/or an observed gauge.

    ``constants`` are the register's (published) constants; ``fitted`` those fitted to
    the site's own gauge records, used only where the register names none
    (``fitted_from`` says from what).
    """
    site_id: str
    constants: TideConstants | None = None
    gauge_time: np.ndarray | None = None          # datetime64[ns]
    gauge_level: np.ndarray | None = None         # m above the site datum, failed/missing removed
    gauge_name: str = ""
    max_gauge_gap_s: float = 1800.0
    fitted: TideConstants | None = None
    fitted_from: str = ""
    why_no_fit: str = ""                          # why constants could not be fitted (for notices)

    @property
    def prediction_constants(self) -> tuple[TideConstants | None, int]:
        """The constants a prediction uses and their source code: the register's, else the fitted ones."""
        if self.constants is not None:
            return self.constants, REGISTER_PREDICTION
        if self.fitted is not None:
            return self.fitted, FITTED_PREDICTION
        return None, NO_REFERENCE

    @property
    def has_reference(self) -> bool:
        return self.prediction_constants[0] is not None or (self.gauge_time is not None and self.gauge_time.size >= 2)

    def predicted(self, times) -> np.ndarray | None:
        """Harmonic prediction at ``times`` (m above the site datum), or None without constants."""
        constants, _ = self.prediction_constants
        if constants is None:
            return None
        return predict_tide(np.asarray(times, dtype="datetime64[ns]"), constants.constituents,
                            mean_level=constants.mean_level_m)

    def register_predicted(self, times) -> np.ndarray | None:
        """Prediction from the register's constants only (a gauge is never checked against its own fit)."""
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
        on_sample = (gt[i] == t) | (gt[i - 1] == t)
        out[((gt[i] - gt[i - 1]) > self.max_gauge_gap_s * NS) & ~on_sample] = np.nan
        return out

    def level_and_source(self, times) -> tuple[np.ndarray, np.ndarray]:
        """Reference level at ``times`` (NaN where there is none) and its per-sample source code."""
        t = np.asarray(times, dtype="datetime64[ns]")
        level = np.full(t.size, np.nan)
        source = np.full(t.size, NO_REFERENCE, np.int8)
        pred = self.predicted(t)
        if pred is not None:
            level[:] = pred
            source[:] = self.prediction_constants[1]
        obs = self.observed(t)
        if obs is not None:
            have = np.isfinite(obs)
            level[have] = obs[have]
            source[have] = OBSERVED_GAUGE
        return level, source

    def reference(self, times) -> tuple[np.ndarray | None, str]:
        """Reference level at ``times`` and a sentence saying what it is made of (None, "none" without any)."""
        level, source = self.level_and_source(times)
        if not np.any(source != NO_REFERENCE):
            return None, "none"
        return level, self.describe(source)

    def describe(self, source) -> str:
        """What a per-sample source array is made of, in words, largest share first."""
        source = np.asarray(source)
        if source.size == 0:
            return "none"
        parts = []
        for code in sorted(SOURCE_WORDS, key=lambda c: -np.count_nonzero(source == c)):
            n = int(np.count_nonzero(source == code))
            if n == 0:
                continue
            words = SOURCE_WORDS[code]
            if code == OBSERVED_GAUGE:
                words += f" ({self.gauge_name})"
            elif code == REGISTER_PREDICTION and self.constants is not None and self.constants.source:
                words += f" ({self.constants.source})"
            elif code == FITTED_PREDICTION:
                words += f" ({self.fitted_from})"
            parts.append(f"{words}: {100.0 * n / source.size:.1f} % of samples")
        return "; ".join(parts)


def state_from_level(times, level, *, elevation_m: float, margin_m: float) -> np.ndarray:
    """Immersion state from a water level alone: 1 above elevation + margin, 0 below elevation - margin, else 2."""
    lv = np.asarray(level, dtype=np.float64)
    out = np.full(lv.shape, 2, np.int8)
    out[lv > elevation_m + margin_m] = 1
    out[lv < elevation_m - margin_m] = 0
    return out
