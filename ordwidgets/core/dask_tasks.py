"""What each Dask task does to one partition (plain pandas and numpy; no Dask import).

A partitioned fit makes three kinds of pass over the rows, each one task per partition
whose small result is sent back and added up; no partition is ever moved whole:

1. :func:`scan_partition` checks the rows with the same rules as the in-memory path and
   counts what is needed to fix the model up front: missing and infinite cells per column,
   the (weighted) count of every response value and the values of each categorical
   predictor.
2. :func:`moment_partition` builds the design with the model spec learnt from those levels
   and returns the weighted column means and centred cross-products (for the collinearity
   check and the internal standardisation) and the rows of the reproducible sample.
3. :func:`sums_partition` returns the log-likelihood, gradient and Hessian of the
   partition's rows at given parameters (one call per Newton evaluation).

Every task receives a :class:`PartitionPlan`, a small picklable description of the model,
so the tasks run alike on the threaded scheduler and on ``dask.distributed`` workers.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .design import check_mixed_types, float_arithmetic, weights_array, unusable_rows
from .exceptions import OrdinalDataError
from .naming import factors_of
from .objective import category_ranges, sort_by_category
from .sorted_design import SortedDesign, layout_sorted_design

__all__ = ["PartitionPlan", "scan_partition", "moment_partition", "sums_partition", "formula_input"]

HEAD_ROWS = 5


@dataclass(frozen=True, eq=False)
class PartitionPlan:
    """The model as every partition task sees it.

    Attributes
    ----------
    response, columns, weights
        Response column, predictor variables and weights column (or ``None``).
    categorical : tuple of str
        Predictors whose values are scanned (object or string columns).
    all_levels : tuple
        Response levels in order, before empty levels are dropped.
    kept : ndarray or None
        Positions in ``all_levels`` of the levels fitted (``None``: all).
    spec, names
        formulaic model spec (learnt once, so every partition yields the same columns) and
        the design columns used.
    mean, sd
        Global weighted column means and standard deviations (internal standardisation).
    layout : ModelLayout or None
        Which columns are parallel, per-threshold or scale effects (``None``: all parallel).
    """

    response: str
    columns: tuple
    weights: str | None
    categorical: tuple = ()
    all_levels: tuple = ()
    kept: np.ndarray | None = None
    spec: object = None
    names: tuple = ()
    mean: np.ndarray = field(default_factory=lambda: np.zeros(0))
    sd: np.ndarray = field(default_factory=lambda: np.ones(0))
    layout: object = None

    @property
    def levels_kept(self) -> tuple:
        """The response levels fitted (those with observations)."""
        return self.all_levels if self.kept is None else tuple(self.all_levels[i] for i in self.kept)

    @property
    def n_levels(self) -> int:
        return len(self.levels_kept)


def _usable(part, plan):
    """Rows usable for the fit, their weights and the tally of the rows dropped."""
    w = weights_array(plan.weights, part)
    keep, tally = unusable_rows(part, plan.response, list(plan.columns), w)
    weights = None if w is None else w[keep].to_numpy(float)
    return part.loc[keep], weights, tally


def scan_partition(part, plan):
    """First pass: data checks and the counts that fix the levels.

    Returns
    -------
    dict
        ``tally`` (missing and infinite cells), ``values`` (weighted count of each response
        value), ``rows`` (usable rows), ``nonzero`` (those with positive weight), ``categories`` (values of each
        categorical predictor) and ``head`` (a few usable rows, to learn the model spec).
    """
    check_mixed_types(part, list(plan.columns))
    rows, w, tally = _usable(part, plan)
    values = rows[plan.response]
    if w is None:
        counts = values.value_counts(sort=False, dropna=True)
    else:
        counts = pd.Series(w, index=values.index).groupby(values, observed=False, sort=False).sum()
    cats = {c: _levels_in(rows[c]) for c in plan.categorical}
    nonzero = len(rows) if w is None else int(np.count_nonzero(w))
    return {"tally": tally, "values": counts, "rows": len(rows), "nonzero": nonzero, "categories": cats,
            "head": rows.head(HEAD_ROWS)}


def _levels_in(column):
    """Values a categorical predictor takes: all categories of a Categorical (as in memory),
    else the distinct values present."""
    if isinstance(column.dtype, pd.CategoricalDtype):
        return np.asarray(column.dtype.categories, dtype=object)
    return np.asarray(pd.unique(column), dtype=object)


def response_codes(values, plan):
    """Codes ``0..J-1`` of the fitted levels for a column of response values."""
    codes = pd.Categorical(values, categories=list(plan.all_levels)).codes.astype(np.intp)
    if np.any(codes < 0):
        raise OrdinalDataError(
            f"response {plan.response!r} has values not seen when the levels were learnt "
            "(did the data change during the fit?)"
        )
    if plan.kept is None:
        return codes
    remap = np.full(len(plan.all_levels), -1, dtype=np.intp)
    remap[plan.kept] = np.arange(len(plan.kept))
    return remap[codes]


def formula_input(rows, columns):
    """Rows with string-typed ``columns`` as plain objects (Dask stores text as Arrow strings,
    which formulaic would not treat as categorical)."""
    text = [c for c in columns if pd.api.types.is_string_dtype(rows[c].dtype)
            and not isinstance(rows[c].dtype, pd.CategoricalDtype) and rows[c].dtype != object]
    return rows.astype({c: object for c in text}) if text else rows


def design_arrays(part, plan):
    """Design (user scale), response codes, weights and usable rows of one partition."""
    rows, w, _ = _usable(part, plan)
    y = response_codes(rows[plan.response], plan)
    if not plan.names:
        return np.empty((len(rows), 0)), y, w, rows
    evaluated = float_arithmetic(factors_of(plan.spec.formula), formula_input(rows, plan.categorical))
    mm = plan.spec.get_model_matrix(evaluated, na_action="ignore")
    return np.asfortranarray(mm[list(plan.names)].to_numpy(float)), y, w, rows


def _refuse_non_finite(X, names):
    """Refuse design columns that a transform made missing or infinite (e.g. ``np.log`` of 0).

    In memory such rows are dropped with a warning; on a Dask frame the rows and levels are
    counted before the design exists, so dropping here would change counts already used.
    """
    bad = ~np.isfinite(X).all(axis=0)
    if bad.any():
        counts = (~np.isfinite(X[:, bad])).sum(axis=0)
        which = ", ".join(f"{str(n)!r} ({c:,} rows in one partition)" for n, c in zip(np.asarray(names)[bad], counts))
        raise OrdinalDataError(f"predictor terms give missing or infinite values: {which}; on a Dask frame "
                               "such rows are not dropped automatically: filter them out first (for "
                               "example keep x > 0 for np.log(x)) or fit the frame in memory")


def moment_partition(part, number, plan, cutoff, seed):
    """Second pass: weighted moments of the design and this partition's sample candidates.

    Every usable row gets a uniform key from a generator seeded with ``(seed, number)``;
    rows with a key below ``cutoff`` are candidates, and the smallest keys of all
    partitions form the sample (reproducible for the same data, partitioning and seed).
    With the cutoff a little above ``sample size / rows`` the candidates stay few whatever
    the number of partitions.

    Returns
    -------
    dict
        ``weight`` (sum of weights), ``mean`` and ``m2`` (centred weighted cross-products),
        ``sample`` (candidate rows with their keys) and ``low`` / ``high`` (per-category column
        ranges, for the separation check).
    """
    X, y, w, rows = design_arrays(part, plan)
    _refuse_non_finite(X, plan.names)  # the first pass that builds the design; later passes repeat it
    wt = np.ones(len(y)) if w is None else w
    total = float(wt.sum())
    mean = (wt @ X) / total if total > 0 else np.zeros(X.shape[1])
    Xc = X - mean
    keys = np.random.default_rng([seed, number]).random(len(y))
    pick = np.flatnonzero(keys < cutoff)
    sample = {"key": keys[pick], "X": X[pick], "y": y[pick], "w": None if w is None else w[pick],
              "frame": rows.iloc[pick]}
    order, bounds = sort_by_category(y, plan.n_levels)
    low, high = category_ranges(X[order], bounds, None if w is None else w[order])
    return {"weight": total, "mean": mean, "m2": Xc.T @ (Xc * wt[:, None]), "sample": sample,
            "low": low, "high": high}


def prepared_partition(part, plan):
    """One partition as a :class:`SortedDesign`: standardised columns sorted by category.

    This is all the Newton steps need (8 bytes per row and column, plus the weights), and
    what a fit with ``cache=True`` keeps in memory between steps.
    """
    X, y, w, _ = design_arrays(part, plan)
    rank, bounds = sort_by_category(y, plan.n_levels)
    Xs = X[rank]
    Xs -= plan.mean
    Xs /= plan.sd
    w = None if w is None else w[rank]
    if plan.layout is None or plan.layout.is_parallel:
        return SortedDesign(np.asfortranarray(Xs), bounds, w)
    return layout_sorted_design(plan.layout, Xs, bounds, w, plan.mean, plan.sd)


def design_sums(design, plan, link, params, order):
    """Log-likelihood, gradient and Hessian of a prepared partition (``plan`` unused).

    ``-inf`` when the cuts cross for some row of the partition (per-threshold effects), so
    the line search rejects such a step without a pass of its own.
    """
    if design.X.shape[0] == 0:
        k = len(params)
        return 0.0, np.zeros(k) if order >= 1 else None, np.zeros((k, k)) if order >= 2 else None
    if not design.feasible(params):
        return -np.inf, None, None
    return design.sums(link, params, order=order)


def sums_partition(part, plan, link, params, order):
    """Log-likelihood, gradient and Hessian (internal scale) of one partition's rows."""
    return design_sums(prepared_partition(part, plan), plan, link, params, order)
