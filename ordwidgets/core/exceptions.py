"""Errors and warnings raised by the fitting core.

Every refusal is a :class:`ValueError` subclass whose message names the column or level at
fault; every repair the core makes on the user's behalf (dropped rows, dropped levels) is
reported with a :class:`DataWarning`.
"""

__all__ = [
    "OrdinalDataError",
    "UnknownLinkError",
    "CollinearityError",
    "DataWarning",
    "ConvergenceWarning",
    "SeparationWarning",
    "CrossingError",
    "CrossingWarning",
    "ComparisonError",
    "ArgumentError",
    "UnseenLevelError",
]


class OrdinalDataError(ValueError):
    """The data cannot be used for a cumulative link fit as given."""


class UnknownLinkError(ValueError):
    """The requested link is not one of the available links."""


class ArgumentError(OrdinalDataError, TypeError):
    """An argument breaks its rule (see :mod:`ordwidgets.core.arguments`); names the argument."""


class ThresholdError(OrdinalDataError):
    """Threshold values refused: not one finite number per threshold, or out of order."""


class UnseenLevelError(OrdinalDataError):
    """New data hold levels of a factor (or missing values) the fit has no effect for."""


class CollinearityError(OrdinalDataError):
    """Predictors are perfectly collinear (with each other or with the thresholds)."""


class DataWarning(UserWarning):
    """The core changed the data on the user's behalf (for example dropped rows)."""


class ConvergenceWarning(UserWarning):
    """The optimiser stopped before reaching a verified maximum of the likelihood."""


class SeparationWarning(ConvergenceWarning):
    """Estimates run to infinity because a predictor separates the categories."""


class CrossingError(OrdinalDataError):
    """A non-parallel fit needs cumulative probabilities that cross for observed rows."""


class CrossingWarning(UserWarning):
    """Fitted cumulative probabilities cross somewhere inside the range of the data."""


class ComparisonError(ValueError):
    """Two fits cannot be compared (not nested, or fitted on different rows)."""
