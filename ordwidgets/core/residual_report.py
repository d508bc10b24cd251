"""One cheap entry point computing everything the residual panel shows for a fit.

:func:`residual_diagnostics` draws surrogate residuals (Liu & Zhang 2018, J. Amer. Statist.
Assoc. 113:845-854) at the fitted or edited thresholds and returns a
:class:`ResidualDiagnostics` holding plain arrays and DataFrames: QQ points, binned means
against the fitted linear predictor and a chosen variable, the summary tests and a
reproducible subset of rows for display.  Statistics always use all rows.
"""
from __future__ import annotations

import weakref
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .arguments import aligned_values
from .diagnostics import Axis, SortedDraws, ks_from_sorted, qq_from_sorted, display_rows, moment_table
from .residuals import ReferenceDistribution, draw_surrogate, whole_counts

__all__ = ["ResidualDiagnostics", "residual_diagnostics"]

TEST_COLUMNS = ["test", "against", "method", "statistic", "p_value", "flagged", "message"]


@dataclass(frozen=True, eq=False)
class ResidualDiagnostics:
    """Residual diagnostics of one fit at one set of thresholds.

    Attributes
    ----------
    kind : {"latent", "probability"}
        Which surrogate residual was drawn (probability scale for non-parallel fits).
    description : str
        One sentence naming the residual, for the panel's caption.
    reference : ReferenceDistribution
        What the residuals follow under a correct model.
    residuals : ndarray, shape (n_residuals, draws)
        One residual per row, or, for a fit with whole-number frequency weights, one per
        counted unit (``n_residuals`` = total weight), so that everything below behaves as
        on the data expanded to one row per unit.
    units : ndarray of int, shape (n_residuals,)
        The fitted row of each residual (``arange(n_rows)`` without weights).
    counted : str
        ``"rows"``, ``"counted units"``, or ``"weighted rows"`` (weights that are not whole
        numbers: plots are weighted, tests are not computed).
    fitted : ndarray, shape (n_residuals,)
        Fitted linear predictor ``eta = x'beta`` of each residual's row (for non-parallel
        fits the parallel part only, as :meth:`FitResult.linear_predictor` gives it).
    x_name : str or None
    x : ndarray, shape (n_residuals,), or None
        The chosen variable for the second trend plot (level numbers ``0..K-1`` for a
        factor, ``nan`` where missing).
    x_levels : tuple or None
        The levels of a factor ``x`` (``x`` holds their positions); ``None`` for a number.
    qq : DataFrame
        Columns ``theoretical``, ``sample`` (see :func:`~ordwidgets.core.diagnostics.qq_points`).
    versus_fitted, versus_x : DataFrame (``versus_x`` is None without ``x``)
        Columns ``center``, ``mean``, ``lower``, ``upper``, ``count``
        (see :func:`~ordwidgets.core.diagnostics.binned_means`).
    tests : DataFrame
        One row per test with columns ``test`` (``"distance"``, ``"trend"``, ``"spread"``;
        against a factor, trend and spread are one-way analyses of variance across its levels),
        ``against`` (``"link distribution"``, ``"fitted"`` or a variable name), ``method``,
        ``statistic``, ``p_value``, ``flagged`` (``p_value < alpha``) and ``message`` (one
        plain-language sentence).
    moments : DataFrame
        Index ``center``, ``spread``; columns ``summary``, ``observed``, ``expected``
        (median and IQR for cauchit).
    versus_x
        For a factor ``x``: one row per level, ``center`` its position, plus ``level``.
    rows : ndarray of int
        Increasing positions (into ``residuals``) of the points to draw (at most ``max_points``).
    """

    kind: str
    description: str
    reference: ReferenceDistribution
    residuals: np.ndarray
    units: np.ndarray
    counted: str
    fitted: np.ndarray
    x_name: str | None
    x: np.ndarray | None
    x_levels: tuple | None
    qq: pd.DataFrame
    versus_fitted: pd.DataFrame
    versus_x: pd.DataFrame | None
    tests: pd.DataFrame
    moments: pd.DataFrame
    rows: np.ndarray

    def points(self, draw=0) -> pd.DataFrame:
        """The display subset: columns ``row`` (fitted row position), ``fitted``, ``x`` (if
        chosen) and ``residual`` (of draw ``draw``)."""
        cols = {"row": self.units[self.rows], "fitted": self.fitted[self.rows]}
        if self.x is not None:
            cols["x"] = self.x[self.rows]
        cols["residual"] = self.residuals[self.rows, draw]
        return pd.DataFrame(cols)


def residual_diagnostics(res, *, x=None, thresholds=None, draws=1, seed=None, bins=20,
                         level=0.95, quantiles=1000, max_points=5000, display_seed=0,
                         alpha=0.01) -> ResidualDiagnostics:
    """Everything the residual panel needs for a fit, thresholds, draws, seed and variable.

    Parameters
    ----------
    res : FitResult
        A fit that kept its training data.
    x : str or array_like, optional
        Variable for the second trend plot: the name of a design column (a column of
        ``res.training.X``) or of a column of the training frame when the result keeps one,
        or an array / Series with one value per training row (for example a candidate
        predictor left out of the model).  It is also tested for trend and spread.  A
        non-numeric column or a pandas Categorical is a factor: per-level means and one-way
        analyses of variance instead of a trend in arbitrary level codes.
    thresholds : array_like, optional
        Edited thresholds (the residuals follow them; the fitted effects are kept).
    draws : int
        Surrogate draws per row; plots average over draws, tests use the first draw.
    seed : int, Generator or None
        Seed of the surrogate draws.
    bins : int
        Bins of the trend plots.
    level : float
        Coverage of the binned-mean intervals.
    quantiles : int
        Maximum number of QQ points.
    max_points : int
        Maximum number of rows offered for display (``rows``); chosen with ``display_seed``.
    alpha : float
        Tests with ``p_value < alpha`` are flagged.

    Returns
    -------
    ResidualDiagnostics
    """
    _check_options(bins=bins, quantiles=quantiles, max_points=max_points, level=level, alpha=alpha)
    weights = None if res.training is None else res.training.weights  # no data: draw_surrogate says so
    per_unit = weights is not None and whole_counts(weights)
    sur = draw_surrogate(res, draws=draws, seed=seed, thresholds=thresholds, per_unit=per_unit)
    counted = sur.counted if weights is None or per_unit else "weighted rows"
    row_weights = None if per_unit else weights
    units = sur.units
    x_name, x_values, x_levels = _resolve_x(res, x)
    variables = {"fitted": res.linear_predictor(), **{n: res.training.X[:, j] for j, n in enumerate(_design_columns(res))}}
    if x_values is not None:
        variables[x_name] = x_values
    variables = {name: values[units] for name, values in variables.items()}
    axes = _axes(res, variables, x_name if x_levels is not None else None, row_weights, bins)
    ordered = SortedDraws.of(sur.residuals, row_weights)
    versus_x = None if x_values is None else axes[x_name].means(sur.residuals, level=level)
    if x_levels is not None:
        versus_x.insert(0, "level", [x_levels[int(c)] for c in versus_x["center"]])
    return ResidualDiagnostics(
        kind=sur.kind, description=sur.description, reference=sur.reference, residuals=sur.residuals,
        units=units, counted=counted, fitted=variables["fitted"], x_name=x_name,
        x=None if x_values is None else variables[x_name], x_levels=x_levels,
        qq=qq_from_sorted(ordered, sur.reference, quantiles),
        versus_fitted=axes["fitted"].means(sur.residuals, level=level), versus_x=versus_x,
        tests=_test_table(sur, ordered, axes, alpha, counted=counted,
                          factor=x_name if x_levels is not None else None),
        moments=moment_table(sur.residuals, sur.reference),
        rows=display_rows(len(units), max_points=max_points, seed=display_seed),
    )


def _check_options(*, level, alpha, **counts):
    for name, value in counts.items():
        if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, np.integer)) or value < 1:
            raise ValueError(f"{name} must be a whole number of at least 1, got {value!r}")
    for name, value in (("level", level), ("alpha", alpha)):
        if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float)) or not 0 < value < 1:
            raise ValueError(f"{name} must lie strictly between 0 and 1, got {value!r}")


def _resolve_x(res, x):
    """``(name, values, levels)``: numbers (``levels`` None) or a factor's level positions."""
    if x is None:
        return None, None, None
    if isinstance(x, str):
        columns = _design_columns(res)
        if x in columns:
            return x, res.training.X[:, columns.index(x)], None
        frame = res.training.frame
        if frame is None or x not in frame.columns:
            raise KeyError(f"x={x!r} is not a design column; choose one of {', '.join(columns) or '(none)'} "
                           "or pass an array with one value per training row")
        x = frame[x]
    x = aligned_values("residual_diagnostics", "x", x, res.training.index)
    name = str(getattr(x, "name", None) or "x")
    if len(x) != res.n_training:
        raise ValueError(f"x must have one value per training row ({res.n_training}), got {len(x)} values")
    if _is_factor(x):
        codes = pd.Categorical(x)
        levels = tuple(v.item() if isinstance(v, np.generic) else v for v in codes.categories)
        return name, np.where(codes.codes >= 0, codes.codes, np.nan).astype(float), levels
    values = np.asarray(getattr(x, "to_numpy", lambda: x)(), dtype=float)
    if values.shape != (res.n_training,):
        raise ValueError(f"x must have one value per training row ({res.n_training}), got shape {values.shape}")
    return name, values, None


def _is_factor(x) -> bool:
    dtype = getattr(x, "dtype", np.asarray(x).dtype)
    return isinstance(dtype, pd.CategoricalDtype) or not (pd.api.types.is_numeric_dtype(dtype)
                                                          or pd.api.types.is_bool_dtype(dtype))


def _design_columns(res) -> list:
    """Names of the columns of ``res.training.X`` (the layout's columns for extended fits)."""
    return list(res.layout.columns)


# Prepared axes per fit: variables do not change when thresholds are edited, so their bins
# and least-squares terms are computed once and reused while the result lives.
_AXIS_CACHE: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


def _axes(res, variables, factor, weights, bins):
    """Prepared axes of ``variables`` (``factor``: the name of the one that is a factor)."""
    cache = _AXIS_CACHE.setdefault(res, {})
    axes = {}
    for name, values in variables.items():
        key = (name, bins, name == factor, weights is None)
        hit = cache.get(key)
        if hit is None or not np.array_equal(hit[0], values, equal_nan=True):
            axis = (Axis.of_levels(np.nan_to_num(values, nan=-1).astype(np.intp), weights=weights)
                    if name == factor else Axis.of(values, bins=bins, weights=weights))
            hit = (values.copy(), axis, name == factor)
            cache[key] = hit
        axes[name] = hit[1]
    return axes


def _test_table(sur, ordered, axes, alpha, *, counted="rows", factor=None):
    v = sur.reference.cdf(sur.residuals[:, 0]) - 0.5
    tested = counted != "weighted rows"  # weights that are not counts: no test has its stated size
    rows = [("distance", "link distribution", "Kolmogorov-Smirnov",
             *(ks_from_sorted(ordered, sur.reference) if tested else (np.nan, np.nan)))]
    for name, axis in axes.items():
        how = ("one-way analysis of variance across levels", "one-way analysis of variance of |residual|") \
            if name == factor else ("F-test on x and x^2", "F-test of |residual| on x and x^2")
        rows.append(("trend", name, how[0], *(axis.f_test(v) if tested else (np.nan, np.nan))))
        rows.append(("spread", name, how[1], *(axis.f_test(np.abs(v)) if tested else (np.nan, np.nan))))
    test, against, method, statistic, p_value = (np.array(c) for c in zip(*rows))
    flagged = p_value.astype(float) < alpha
    message = [_message(*row, sur.reference) if tested else _untested(row[0], row[1])
               for row in zip(test, against, p_value, flagged)]
    columns = (test, against, method, statistic.astype(float), p_value.astype(float), flagged, message)
    return pd.DataFrame(dict(zip(TEST_COLUMNS, columns)))


def _untested(test, against):
    return (f"{test} against {against}: not computed, the weights are not whole counts (frequency weights "
            "are needed to count units; refit with counts, or judge the plots only)")


def _message(test, against, p, flagged, reference):
    if not np.isfinite(p):
        return f"{test} against {against}: not computable (constant variable)"
    pv = "p < 0.001" if p < 0.001 else f"p = {p:.3f}"
    if test == "distance":
        return (f"residuals depart from the {reference.name} distribution: the link may be wrong ({pv})"
                if flagged else f"residuals are consistent with the {reference.name} distribution ({pv})")
    if test == "trend":
        return (f"mean residual changes with {against}: a curvature or term may be missing ({pv})"
                if flagged else f"no trend of the residuals with {against} ({pv})")
    return (f"residual spread changes with {against}: a scale effect may be needed ({pv})"
            if flagged else f"no change of residual spread with {against} ({pv})")
