"""Tides: constituents, astronomical arguments, prediction and harmonic analysis.

Only this package's harmonic modules are imported here; other modules of the
package (events, datums, classify, exposure, crossings, clock, elevation) are imported by
their own path.
"""

from .analysis import TideFit, fit_constituents, select_constituents
from .constituents import CONSTITUENTS, PRIORITY, Constituent, constituent, nodal_corrections
from .harmonics import (
    AstronomicalArguments,
    HarmonicConstant,
    TideConstants,
    astronomical_arguments,
    astronomical_arguments_from_days,
    days_from_epoch,
    equilibrium_arguments,
    predict_tide,
)

__all__ = [
    "CONSTITUENTS", "PRIORITY", "AstronomicalArguments", "Constituent", "HarmonicConstant",
    "TideConstants", "TideFit", "astronomical_arguments", "astronomical_arguments_from_days",
    "constituent", "days_from_epoch", "equilibrium_arguments", "fit_constituents",
    "nodal_corrections", "predict_tide", "select_constituents",
]
