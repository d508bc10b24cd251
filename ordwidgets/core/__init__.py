"""Fitting core: pure numpy/scipy, no widget imports."""
from .design import encode_response, prepare, threshold_labels
from .exceptions import (CollinearityError, ConvergenceWarning, DataWarning, OrdinalDataError,
                         SeparationWarning, UnknownLinkError)
from .engine import closed_form_thresholds
from .fitting import fit, fit_dask
from .links import LINKS, Link, get_link, link_names
from .probabilities import category_probabilities, interval_logprob, interval_probability
from .results import SIGN_CONVENTION, FitResult

__all__ = [
    "fit", "FitResult", "Link", "LINKS", "get_link", "link_names", "closed_form_thresholds",
    "category_probabilities", "interval_probability", "interval_logprob", "prepare",
    "encode_response", "threshold_labels", "SIGN_CONVENTION", "OrdinalDataError",
    "UnknownLinkError", "CollinearityError", "DataWarning", "ConvergenceWarning",
    "SeparationWarning",
]

from .residual_report import ResidualDiagnostics, residual_diagnostics  # noqa: E402
from .residuals import (ReferenceDistribution, SurrogateDraws, draw_surrogate,  # noqa: E402
                        probability_scale_residuals, reference_distribution, surrogate_residuals)

__all__ += [
    "surrogate_residuals", "probability_scale_residuals", "draw_surrogate", "SurrogateDraws",
    "reference_distribution", "ReferenceDistribution", "residual_diagnostics", "ResidualDiagnostics",
]

from .exceptions import ComparisonError, CrossingError, CrossingWarning  # noqa: E402
from .inference import compare  # noqa: E402
from .link_ranking import compare_links  # noqa: E402

__all__ += ["compare", "compare_links", "CrossingError", "CrossingWarning", "ComparisonError"]

__all__ += ["fit_dask"]  # (imports Dask only when a Dask frame is fitted)

from .exceptions import ArgumentError, UnseenLevelError  # noqa: E402
from .naming import quote_name, unquote_name  # noqa: E402

__all__ += ["ArgumentError", "UnseenLevelError", "quote_name", "unquote_name"]
