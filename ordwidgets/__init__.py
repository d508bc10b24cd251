"""ordwidgets: linked Jupyter widgets for building, checking and explaining cumulative link models.

The model: ``P(Y <= j | x) = F(theta_j - x'beta)`` with increasing thresholds ``theta``;
a positive effect ``beta`` moves probability towards higher categories.
"""
from .core import *  # noqa: F401,F403
from .core import __all__ as _core_all

from ._statefile import StateFileError
from .report import write_report
from .state import FitState
from .widgets import Dashboard, GroupEffectsPanel, LinkSelector, ProbabilityExplorer, ResidualPanel, ThresholdPanel, dashboard

__version__ = "0.1.0"
__all__ = list(_core_all) + ["FitState", "StateFileError", "ThresholdPanel", "LinkSelector", "GroupEffectsPanel",
                             "ProbabilityExplorer", "ResidualPanel", "Dashboard", "dashboard", "write_report"]
