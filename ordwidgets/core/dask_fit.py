"""Preparing a fit of a Dask DataFrame: the same model and design protocol, sums reduced over partitions.

The likelihood, its gradient and its Hessian are sums over rows, so every Newton evaluation
is one task per partition (:func:`~ordwidgets.core.dask_tasks.sums_partition`) whose
few numbers are added up; rows never leave their partition.  Before the iteration one pass
learns the response levels, the levels of the categorical predictors and the missing-value
counts, and a second pass the column moments (collinearity check, internal
standardisation) and a reproducible sample of rows kept in the result for residuals and
display.  The fit and every statistic use all rows.

The module imports without Dask; Dask is imported only when a Dask frame is fitted.  Tasks
run on whatever scheduler is active: the local threaded one by default, or a
``dask.distributed`` ``Client``.
"""
from __future__ import annotations

import copy
import warnings
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from .dask_tasks import (PartitionPlan, design_sums, formula_input, moment_partition, prepared_partition,
                         scan_partition, sums_partition)
from .design import (PreparedData, check_response_not_used, design_matrix, required_columns,
                     empty_levels, encode_response, split_formula, threshold_labels, unusable_notes)
from .engine import PreparedFit, check_enough_rows, safe_sd, user_scale_matrix
from .extended_fit import (as_names, build_layout, check_layout_columns, crossing_report, layout_separation,
                           resolve_predictors, two_valued)
from .exceptions import DataWarning, OrdinalDataError
from .layout import parallel_layout
from .links import get_link
from .progress import progress_for
from .results import TrainingData

__all__ = ["partitioned_problem", "is_dask_frame", "PartitionedDesign", "PartitionRunner", "DEFAULT_SAMPLE_ROWS"]

DEFAULT_SAMPLE_ROWS = 20_000
INSTALL_HINT = "fitting a Dask DataFrame needs the optional extra: pip install 'ordwidgets[dask]'"


def is_dask_frame(data) -> bool:
    """Whether ``data`` is a Dask DataFrame (checked without importing Dask)."""
    module = type(data).__module__ or ""
    return module.split(".")[0] == "dask" and hasattr(data, "to_delayed")


def _require_dask():
    try:
        import dask
    except ImportError as exc:
        raise ImportError(INSTALL_HINT) from exc
    return dask


class PartitionRunner:
    """Run one task per partition on the active scheduler and bring back the small results.

    With a ``dask.distributed`` client the tasks are submitted as futures and cancelled if
    the caller is interrupted, so a stopped fit leaves nothing running on the cluster.
    """

    def __init__(self, frame):
        self.dask = _require_dask()
        self.parts = frame.to_delayed(optimize_graph=True)
        owner = getattr(self.dask.base.get_scheduler(), "__self__", None)
        self.client = owner if hasattr(owner, "gather") and hasattr(owner, "cancel") else None

    @property
    def n_partitions(self) -> int:
        return len(self.parts)

    def _tasks(self, func, plan, args, numbered=False):
        delayed = self.dask.delayed
        shared = delayed(plan, traverse=False)
        return [delayed(func, pure=False)(part, *((i,) if numbered else ()), shared, *args)
                for i, part in enumerate(self.parts)]

    def kept(self, func, plan):
        """A runner over ``func(part, plan)`` of every partition, computed once and kept in
        memory (on the workers with ``dask.distributed``)."""
        tasks = self._tasks(func, plan, ())
        other = copy.copy(self)
        other.parts = list(self.dask.persist(*tasks) if self.client is None else self.client.persist(tasks))
        return other

    def map(self, func, plan, *args, numbered=False):
        """``[func(part, [number,] plan, *args) for each partition]``, computed in parallel."""
        tasks = self._tasks(func, plan, args, numbered)
        if self.client is None:
            return list(self.dask.compute(*tasks))
        futures = self.client.compute(tasks)
        try:
            return self.client.gather(futures)
        except BaseException:
            self.client.cancel(futures)
            raise


@dataclass(eq=False)
class PartitionedDesign:
    """The design protocol of :mod:`ordwidgets.core.engine` over partitions.

    ``sums`` sends the parameters to every partition and adds the returned
    log-likelihoods, gradients and Hessians.
    """

    runner: PartitionRunner
    plan: PartitionPlan
    level_counts: np.ndarray
    task: object = sums_partition
    rows_used: int = 0

    @property
    def n_levels(self) -> int:
        return len(self.level_counts)

    @property
    def n_params(self) -> int:
        return self.plan.layout.n_params

    def feasible(self, params):
        """Finite parameters and increasing thresholds; crossing cuts of rows with
        per-threshold effects are found by the partitions (their sums are then ``-inf``)."""
        params = np.asarray(params, float)
        return bool(np.all(np.isfinite(params))) and (
            bool(self.plan.layout.nonparallel) or bool(np.all(np.diff(params[:self.n_levels - 1]) > 0)))

    def counts(self):
        """Weighted number of rows in each category (all partitions)."""
        return self.level_counts

    def sums(self, link, params, *, order=2):
        """Log-likelihood and, for ``order`` 1 or 2, gradient and Hessian over all rows."""
        parts = self.runner.map(self.task, self.plan, get_link(link).name, np.asarray(params, float), order)
        ll = float(sum(p[0] for p in parts))
        if not np.isfinite(ll):
            return -np.inf, None, None
        grad = sum(p[1] for p in parts) if order >= 1 else None
        hess = sum(p[2] for p in parts) if order >= 2 else None
        return ll, grad, hess


def partitioned_problem(formula, data, *, weights=None, levels=None, callback=None, sample_rows=DEFAULT_SAMPLE_ROWS,
                        seed=0, progress="auto", cache=False, nonparallel=None, scale_by=None):
    """Prepare the fit of a Dask frame (see :func:`ordwidgets.core.fitting.fit_dask`).

    Returns
    -------
    problem : PreparedFit
    show : Progress
        The status line, also the Newton callback.
    """
    if weights is not None and not isinstance(weights, str):
        raise OrdinalDataError("for a Dask frame weights= must name a column of the frame")
    _require_dask()
    names = (as_names(nonparallel, "nonparallel"), as_names(scale_by, "scale_by"))
    plan, rhs, scale_extra = _plan(formula, data, weights, names[1])
    used = list(dict.fromkeys([plan.response, *plan.columns, *([weights] if weights else [])]))
    runner = PartitionRunner(data[used])  # only these columns are read
    show = progress_for(progress, callback, prefix=f"ordwidgets fit on {runner.n_partitions} partitions · ")
    try:
        return _prepare(rhs, plan, runner, show, levels, sample_rows, seed, cache, names, scale_extra), show
    except KeyboardInterrupt:
        show.show("interrupted; no result was made")
        raise


def _plan(formula, data, weights, scale_by):
    """The partition plan; scale-only variables (data columns not in the formula) join the design."""
    response, rhs = split_formula(formula)
    if response not in data.columns:
        raise OrdinalDataError(f"response column {response!r} is not in the data")
    if weights is not None and weights not in data.columns:
        raise OrdinalDataError(f"weights column {weights!r} is not in the data")
    columns = required_columns(rhs, data)
    check_response_not_used(response, columns, "in the formula")
    check_response_not_used(response, scale_by, "in scale_by=")
    extra = [n for n in scale_by if n in data.columns and n not in columns]
    if extra:
        rhs = " + ".join([rhs] + [f"`{n}`" for n in extra])
        columns = required_columns(rhs, data)
    plan = PartitionPlan(response, tuple(columns), weights, categorical=_categorical(data._meta, columns))
    return plan, rhs, extra


def _prepare(rhs, plan, runner, show, levels, sample_rows, seed, cache, names, scale_extra):
    show.show("pass 1: checking rows and learning levels")
    plan, counts, scan, notes = _learn_levels(runner, plan, levels, rhs)
    m = len(counts) - 1
    show.show("pass 2: column moments and sample")
    moments = runner.map(moment_partition, plan, _cutoff(sample_rows, scan["rows"]), seed, numbered=True)
    mean, cov = _combine_moments(moments, len(plan.names))
    low, high = _combine_ranges(moments)
    training = _sample(moments, sample_rows, scan["rows"]) if sample_rows else None
    del moments  # the sample candidates are not needed any more
    meta = PreparedData(np.empty((0, len(plan.names))), np.empty(0, np.intp), None, plan.levels_kept,
                        plan.names, plan.response, rhs, plan.spec, pd.RangeIndex(0), notes)
    layout = _layout(meta, names, scale_extra, (low, high, mean, cov))
    check_enough_rows(scan["nonzero"], layout.n_params)
    check_layout_columns(plan.names, layout, mean, cov)
    plan = replace(plan, mean=mean, sd=safe_sd(cov), layout=layout)
    design = PartitionedDesign(runner, plan, counts, rows_used=scan["nonzero"])
    if cache:
        show.show("pass 3: preparing the design kept in memory")
        design = PartitionedDesign(runner.kept(prepared_partition, plan), plan, counts, task=design_sums,
                                   rows_used=scan["nonzero"])
    options = _options(plan.weights, levels, runner, sample_rows, seed, cache)
    if not layout.is_parallel:
        options.update(nonparallel=names[0], scale_by=names[1])
    return PreparedFit(design=design, layout=layout, to_user=user_scale_matrix(layout, plan.mean, plan.sd),
                       meta=meta, training=training, n_rows=scan["rows"],
                       separated=tuple(layout_separation(layout, low, high)), options=options,
                       after=None if layout.is_parallel else crossing_report(layout, low, high))


def _layout(meta, names, scale_extra, moments):
    """The fit's layout (all parallel without ``nonparallel=`` / ``scale_by=``)."""
    if not (names[0] or names[1]):
        return parallel_layout(meta.columns, threshold_labels(meta.levels))
    spec_vars = () if meta.model_spec is None else meta.model_spec.required_variables
    original = [v for v in map(str, spec_vars) if v not in scale_extra]
    scale_only = set(resolve_predictors(scale_extra, meta, "scale_by")) if scale_extra else set()
    if scale_only and original:
        scale_only -= set(resolve_predictors(original, meta, "scale_by"))
    return build_layout(meta, names[0], names[1], scale_only, two_valued(*moments))


def _combine_ranges(parts):
    """Per-category smallest and largest column values over all partitions."""
    low = np.minimum.reduce([q["low"] for q in parts])
    high = np.maximum.reduce([q["high"] for q in parts])
    return low, high


def _options(weights, levels, runner, sample_rows, seed, cache):
    return {"weights": weights, "levels": levels, "engine": "dask", "partitions": runner.n_partitions,
            "sample_rows": sample_rows, "sample_seed": seed, "cache": cache}


def _categorical(meta, columns):
    """Predictors whose levels must be learnt: non-numeric or boolean columns."""
    return tuple(c for c in columns if not pd.api.types.is_numeric_dtype(meta[c].dtype)
                 or pd.api.types.is_bool_dtype(meta[c].dtype))


def _learn_levels(runner, plan, levels, rhs):
    """Pass 1: data checks, response levels, empty levels and the model spec."""
    scan = _combine_scans(runner.map(scan_partition, plan))
    notes = unusable_notes(scan["tally"])
    values = scan["values"]
    codes, all_levels = encode_response(pd.Series(values.index), levels, name=plan.response)
    counts = np.bincount(codes, weights=values.to_numpy(float), minlength=len(all_levels))
    kept, fitted_levels, more = empty_levels(counts, all_levels, plan.response)
    notes += more
    for n in notes:
        warnings.warn(n, DataWarning, stacklevel=5)
    template = formula_input(_template(scan["head"], scan["categories"]), plan.categorical)
    _, names, spec = design_matrix(rhs, template)
    if names and getattr(spec, "transform_state", None):
        raise OrdinalDataError(
            f"the predictors {rhs!r} use transforms that learn from the data (such as center, "
            "scale or splines); on a Dask frame compute those columns first"
        )
    plan = replace(plan, all_levels=all_levels, kept=kept, spec=spec, names=names)
    return plan, counts if kept is None else counts[kept], scan, notes


def _combine_scans(scans):
    tally = {}
    for s in scans:
        for kind, (rows, cells) in s["tally"].items():
            before = tally.get(kind)
            tally[kind] = (rows, cells) if before is None else (before[0] + rows, before[1].add(cells, fill_value=0))
    values = pd.concat([s["values"] for s in scans])
    values = values.groupby(level=0, observed=False, sort=False).sum()
    cats = {c: [s["categories"][c] for s in scans] for c in scans[0]["categories"]}
    heads = [s["head"] for s in scans if len(s["head"])]
    return {"tally": tally, "values": values[values.index.notna()], "nonzero": sum(s["nonzero"] for s in scans),
            "rows": sum(s["rows"] for s in scans), "categories": cats, "head": heads[0] if heads else scans[0]["head"]}


def _template(head, categories):
    """A few rows in which every categorical predictor takes each of its values at least once."""
    if not len(head):
        raise OrdinalDataError("no usable rows: every row has a missing value")
    found = {c: pd.unique(np.concatenate(parts)) for c, parts in categories.items()}
    size = max([len(head)] + [len(v) for v in found.values()])
    frame = head.iloc[np.arange(size) % len(head)].reset_index(drop=True)
    for c, vals in found.items():
        dtype = head[c].dtype
        if isinstance(dtype, pd.CategoricalDtype):  # the categories of every partition, in order
            dtype = pd.CategoricalDtype(vals, ordered=dtype.ordered)
        frame[c] = pd.array(np.resize(vals, size), dtype=dtype)
    return frame


def _cutoff(size, rows):
    """Key below which a row is a sample candidate: ``size`` expected rows plus five
    binomial standard deviations, so fewer than ``size`` candidates is vanishingly rare
    (then the sample is all of them)."""
    return 0.0 if size <= 0 or rows == 0 else min(1.0, (size + 5.0 * np.sqrt(size) + 10.0) / rows)


def _combine_moments(parts, p):
    """Pooled weighted mean and covariance from per-partition moments (Chan et al. 1979)."""
    total = sum(q["weight"] for q in parts)
    mean = sum(q["weight"] * q["mean"] for q in parts) / total if p else np.zeros(0)
    m2 = np.zeros((p, p))
    for q in parts:
        d = q["mean"] - mean
        m2 += q["m2"] + q["weight"] * np.outer(d, d)
    return mean, m2 / total


def _sample(parts, size, population):
    """The ``size`` rows with the smallest keys, in partition and row order."""
    s = [q["sample"] for q in parts]
    keys = np.concatenate([q["key"] for q in s])
    pick = np.sort(np.argsort(keys, kind="stable")[:size])
    X = np.concatenate([q["X"] for q in s])[pick]
    y = np.concatenate([q["y"] for q in s])[pick]
    w = None if s[0]["w"] is None else np.concatenate([q["w"] for q in s])[pick]
    frame = pd.concat([q["frame"] for q in s]).iloc[pick]
    if not frame.index.is_unique:  # e.g. Parquet files each numbered from 0
        frame = frame.reset_index(drop=True)
    sampled_from = None if len(y) == population else population
    return TrainingData(np.asfortranarray(X), y, w, frame.index, frame=frame, sampled_from=sampled_from)
