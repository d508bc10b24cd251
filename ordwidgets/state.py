"""``FitState``: the one object the panels share.

Every panel observes a single counter, :attr:`FitState.updates`, and reads
:attr:`FitState.changed` to learn *what* changed in the last processed user action:

``"fit"``         a refit replaced :attr:`FitState.fit` (spec, data, options or link changed);
``"thresholds"``  the shown thresholds were edited (or reset);
``"scenario"``    the what-if scenario or the baseline changed;
``"focus"``       the predictor on the explorer's x-axis changed;
``"residuals"``   residual draws or seed changed;
``"selection"``   the brushed rows changed;
``"link_table"``  the loglik / AIC / BIC comparison of the links arrived;
``"group"``       the picked group or the kind of probability shown (random-intercept fits);
``"error"``       a spec change was refused (see :attr:`FitState.error`); nothing else changed.

One coordinator (:meth:`FitState._flush`) turns raw trait changes into one processed update:
it refits only when the spec changed, recomputes the log-likelihood cheaply on threshold
edits, then bumps ``updates`` once.  :meth:`FitState.batch` merges several edits into one
update.  The model is ``P(Y <= j | x) = F(theta_j - x'beta)``: a positive effect moves
probability towards higher categories.  With random intercepts
(:attr:`FitState.random_intercepts`) it is ``F(theta_j - x'beta - u_g)``; which
probabilities the panels show (population-averaged, a typical group, the picked group) is
:attr:`FitState.group_kind`, always computed by the core's random-intercept result.
"""
from __future__ import annotations

import contextlib
import threading

import numpy as np
import pandas as pd
import traitlets as tl

from .core import FitResult, OrdinalDataError, fit as core_fit, link_names
from .core.arguments import STATE_OPTION_RULES, check_keys, check_thresholds
from .core.effects import probabilities_at
from . import _groups, _spec
from ._group_state import GroupTraits
from ._jobs import JobRunner
from ._loglik import RowLoglik
from .core.layout import cumulative_predictors, location_predictor

__all__ = ["FitState", "CHANGE_KINDS", "ThresholdEditError", "unusable"]

CHANGE_KINDS = ("fit", "thresholds", "scenario", "focus", "residuals", "selection", "link_table", "group", "error")
_KIND_OF = {
    "data": "spec", "formula": "spec", "link": "spec", "options": "spec", "dropped": "spec",
    "nonparallel": "spec", "scale_by": "spec", "thresholds": "thresholds", "scenario": "scenario",
    "baseline": "scenario", "focus": "focus", "residual_draws": "residuals",
    "residual_seed": "residuals", "selection": "selection", "link_table": "link_table",
    "random_intercepts": "spec", "group_column": "group", "group": "group", "group_kind": "group",
}
_SPEC = ("data", "formula", "link", "options", "dropped", "nonparallel", "scale_by", "random_intercepts")


class FitState(GroupTraits):
    """Shared, observable state of one cumulative link fit and the edits made to it.

    Build it with :meth:`from_fit` or ``FitState(data=df, formula="y ~ x", link="logit")``.
    Refits happen only when :attr:`data`, :attr:`formula`, :attr:`options`, :attr:`dropped`,
    :attr:`nonparallel`, :attr:`scale_by`, :attr:`random_intercepts` or :attr:`link` change.
    Every refit passes all of them to ``ow.fit`` (:meth:`fit_kwargs`), so a link change or a
    dropped predictor keeps the random part, the cluster column and the weight kind.  The
    traits of the random part and the picked group are declared in
    :class:`~ordwidgets._group_state.GroupTraits`.
    """

    data = tl.Instance(pd.DataFrame, allow_none=True, help="The data frame the model is fitted on.")
    formula = tl.Unicode("", help="Full model formula 'response ~ predictors' (Wilkinson notation).")
    link = tl.Enum(list(link_names()), default_value="logit", help="Link; setting it refits.")
    options = tl.Dict(help="Fit options passed through to ow.fit: 'weights' (column), 'levels', 'quadrature' "
                           "(points per group of a random-intercept fit), 'cluster' (column: cluster-robust "
                           "covariance) and 'weight_kind' ('frequency' or 'sampling').")
    dropped = tl.Tuple(help="Predictors left out of the model (model controls: 'out').")
    nonparallel = tl.Tuple(help="Predictors with a separate effect per threshold (non-parallel).")
    scale_by = tl.Tuple(help="Predictors with a scale effect on the latent spread.")
    fit = tl.Instance(FitResult, allow_none=True, help="Maximum-likelihood fit of the current spec.")
    thresholds = tl.Tuple(help="Thresholds shown (strictly increasing); the fitted ones until edited.")
    loglik = tl.Float(np.nan, help="Log-likelihood at the shown thresholds with the fitted effects.")
    lr_distance = tl.Float(0.0, help="2 * (fitted loglik - shown loglik): likelihood-ratio distance.")
    scenario = tl.Dict(help="Predictor values of the what-if case (default: weighted median / most common "
                            "level); assigning a partial dict changes only the predictors it names.")
    baseline = tl.Dict(help="Predictor values of the comparison case (same defaults).")
    focus = tl.Unicode("", help="Predictor on the explorer's x-axis.")
    residual_draws = tl.Int(1, min=1, max=50, help="Surrogate residual draws per row.")
    residual_seed = tl.Int(2718, min=0, help="Seed of the surrogate residual draws (any fixed default).")
    selection = tl.Tuple(help="Positions (0..n_rows-1 of the fitted rows) brushed in the residual panel.")
    link_table = tl.List(help="Rows {link, loglik, aic, bic, error} for every link of the current spec.")
    busy = tl.Unicode("", help="What long work is running ('' when idle).")
    error = tl.Unicode("", help="Message of the last refused spec change ('' when fine).")
    changed = tl.Tuple(help="Change kinds processed in the last update (see CHANGE_KINDS).")
    updates = tl.Int(0, help="Counter bumped once after every processed change.")

    def __init__(self, *, executor=None, **kwargs):
        self.jobs = JobRunner(executor, on_busy=self._show_busy)
        self._depth, self._pending, self._lock = 0, set(), threading.RLock()
        self._good, self._busy_labels = None, []
        preset = kwargs.pop("fit", None)
        with self._quiet():
            super().__init__(**kwargs)
            self._install(preset if preset is not None else self._run_fit())
        self._pending.clear()
        self._finish({"fit", "thresholds", "scenario", "focus"})

    # ---- construction ------------------------------------------------------------------------
    @classmethod
    def from_fit(cls, res, data=None, **kwargs):
        """State around an existing fit (no refit).  ``data`` defaults to the fit's own frame."""
        if data is None:
            data = getattr(res.training, "frame", None) if res.training is not None else None
        if data is None:
            raise ValueError("from_fit needs data=: this result does not hold its data frame")
        opts = _groups.options_of(res)
        extra = {k: tuple(res.options.get(k) or ()) for k in ("nonparallel", "scale_by")}
        return cls(data=data, formula=res.formula, link=res.link.name, options=opts, fit=res,
                   random_intercepts=_groups.grouping_of(res), **extra, **kwargs)

    # ---- derived, read-only views ----------------------------------------------------------------
    @property
    def theta(self) -> np.ndarray:
        """Shown thresholds as an array."""
        return np.asarray(self.thresholds, float)

    @property
    def edited(self) -> bool:
        """True when the shown thresholds differ from the fitted ones."""
        return not np.array_equal(self.theta, self.fit.thresholds.to_numpy())

    @property
    def predictors(self) -> list:
        """All predictor variables of :attr:`formula` (whether in or out of the model)."""
        return _spec.variables(self.formula)

    @property
    def included(self) -> list:
        """Predictors currently in the model."""
        return [v for v in self.predictors if v not in self.dropped]

    @property
    def model_formula(self) -> str:
        """The formula actually fitted (``formula`` without the dropped predictors)."""
        return _spec.without(self.formula, self.dropped)

    @property
    def frame(self) -> pd.DataFrame:
        """Rows of :attr:`data` used by the fit, in fit order; row ``i`` is fitted row ``i``.

        Taken by position (the fit's own frame), so a repeated index (for example after
        ``pd.concat``) cannot pull in other rows.
        """
        if self._frames.get("rows") is None:
            self._frames["rows"] = _fitted_rows(self.fit, self.data)
        return self._frames["rows"]

    @property
    def weights(self):
        """Frequency weights of the fitted rows (``None`` when unweighted)."""
        return self.fit.training.weights if self.fit is not None and self.fit.training is not None else None

    def default_scenario(self) -> dict:
        """The default case: weighted median of each number, weighted most common level."""
        rows, weights = self._summary_rows()
        return _spec.complete_scenario({}, rows, self.formula, weights=weights)

    def _summary_rows(self):
        """Rows (and weights) the defaults and ranges are taken from: the fitted rows."""
        if self.fit is None or self.fit.training is None:
            return self.data, None
        return self.frame, self.weights

    def outside_data(self, which="scenario") -> list:
        """``(name, value, low, high)`` of each number in a scenario outside the fitted rows' range."""
        values, (rows, _) = getattr(self, which), self._summary_rows()
        out = []
        for name, value in values.items():
            if name in rows.columns and not self.is_categorical(name):
                lo, hi = _spec.value_range(rows[name])
                if not lo <= value <= hi:
                    out.append((name, value, lo, hi))
        return out

    def is_categorical(self, name) -> bool:
        """Whether predictor ``name`` is treated as categorical (dropdown rather than slider)."""
        return _spec.is_categorical(self.data[name], name, self.formula)

    def scenario_frame(self, which="scenario", focus_values=None) -> pd.DataFrame:
        """One-row frame of a scenario, or one row per ``focus_values`` of :attr:`focus`.

        Frames are remembered until the next refit (treat them as read-only).
        """
        values = dict(self.scenario if which == "scenario" else self.baseline)
        key = (repr(sorted(values.items())), self.focus, None if focus_values is None else repr(list(focus_values)))
        if key not in self._frames:
            if len(self._frames) > 64:
                self._frames = {"rows": self._frames.get("rows")}
            self._frames[key] = self._build_frame(values, focus_values)
        return self._frames[key]

    def _build_frame(self, values, focus_values):
        n = 1 if focus_values is None else len(focus_values)
        frame = pd.DataFrame({k: [v] * n for k, v in values.items()}, index=pd.RangeIndex(n))
        if focus_values is not None:
            frame[self.focus] = list(focus_values)
        return _spec.match_dtypes(frame, self.data)

    def design_of(self, frame) -> np.ndarray:
        """Design rows of ``frame`` for the current fit.

        Rows are cached by content (scenario rows repeat on every edit); only rows not seen
        since the last refit go through the formula machinery, in one call.
        """
        if not len(frame):
            return self.fit.design(frame)
        keys = pd.util.hash_pandas_object(frame, index=False).to_numpy()
        new = [i for i, k in enumerate(keys) if k not in self._designs]
        if new:
            if len(self._designs) > 5000:
                self._designs.clear()
                new = list(range(len(keys)))
            rows = self.fit.design(frame.iloc[new])
            self._designs.update(zip(keys[new], rows))
        return np.array([self._designs[k] for k in keys])

    def eta_of(self, frame) -> np.ndarray:
        """Linear predictor ``x'beta`` of the rows of ``frame`` under the current fit."""
        return self._eta(self.design_of(frame))

    def _eta(self, D):
        res = self.fit
        return location_predictor(res.layout, res.params, D)

    def cuts_of(self, frame):
        """Standardised cut points at the shown thresholds for the rows of ``frame``.

        ``P(Y <= j | x_i) = F(U[i, j])``: ``U = theta - x'beta`` for a parallel fit; fits
        with non-parallel or scale effects use the core's per-threshold predictors and return
        the row scales ``sigma`` (ones otherwise).

        Returns
        -------
        eta, U, sigma : ndarray, shapes (n,), (n, J-1), (n,)
        """
        res, D = self.fit, self.design_of(frame)
        eta = self._eta(D)
        params = np.concatenate([self.theta, res.params[res.n_thresholds:]])
        U, sigma = cumulative_predictors(res.layout, params, D)
        return eta, U, np.asarray(sigma, float) * np.ones(len(eta))

    def probabilities(self, frame) -> np.ndarray:
        """Category probabilities ``(n, J)`` of the rows of ``frame`` at the shown thresholds.

        Computed by the core (:func:`ordwidgets.core.effects.probabilities_at`, the function
        behind ``FitResult.predict`` for every fit), so every panel shows the core's numbers:
        rows whose cumulative probabilities cross (non-parallel effects far out, or edited
        base thresholds) are ``nan`` -- the core gives no probabilities there, and the panels
        say so (:meth:`crossings`) instead of drawing clipped values.
        """
        res = self.fit
        if self.grouping:
            return res.probabilities_of(self.design_of(frame), thresholds=self.theta, groups=self.group_kind,
                                        offset=self.group_offset)
        params = np.concatenate([self.theta, res.params[res.n_thresholds:]])
        return probabilities_at(res, self.design_of(frame), params, warn=False)

    def crossings(self, frame) -> list:
        """Per row of ``frame``: the ``(lower cut, upper cut)`` name pairs that cross (``[]`` if none)."""
        _, U, _ = self.cuts_of(frame)
        names = list(self.fit.threshold_names)
        return [[(names[j], names[j + 1]) for j in np.flatnonzero(np.diff(row) < 0)] for row in U]

    # ---- validation (one place) --------------------------------------------------------------------
    @tl.validate("thresholds")
    def _valid_thresholds(self, proposal):
        names = None if self.fit is None else self.fit.threshold_names
        try:
            return tuple(float(v) for v in check_thresholds(proposal["value"], names))
        except OrdinalDataError as exc:
            raise ThresholdEditError(str(exc)) from None

    @tl.validate("options")
    def _valid_options(self, proposal):
        check_keys("FitState options", STATE_OPTION_RULES, proposal["value"])
        return proposal["value"]

    @tl.validate("scenario", "baseline")
    def _valid_scenario(self, proposal):
        """A partial scenario changes only the predictors it names (merged with the current one)."""
        if self.data is None or not self.formula:
            return dict(proposal["value"])
        rows, weights = self._summary_rows()
        return _spec.complete_scenario(proposal["value"], rows, self.formula, weights=weights,
                                       current=getattr(self, proposal["trait"].name))

    @tl.validate("focus")
    def _valid_focus(self, proposal):
        name = proposal["value"]
        if name and self.formula and name not in self.included:
            raise tl.TraitError(f"focus must be one of the predictors in the model {self.included}, got {name!r}")
        return name

    @tl.validate("selection")
    def _valid_selection(self, proposal):
        rows = np.unique(np.asarray(proposal["value"], dtype=np.int64))
        n = n_training(self.fit) if self.fit is not None else 0
        if rows.size and (rows[0] < 0 or rows[-1] >= n):
            raise tl.TraitError(f"selection holds row positions outside 0..{n - 1}")
        return tuple(int(r) for r in rows)

    @tl.validate("dropped", "nonparallel", "scale_by")
    def _valid_names(self, proposal):
        names = tuple(dict.fromkeys(str(v) for v in proposal["value"]))
        unknown = [v for v in names if self.formula and v not in self.predictors]
        if unknown:
            raise tl.TraitError(f"not predictors of {self.formula!r}: {unknown}")
        return names

    # ---- edits -----------------------------------------------------------------------------------
    def set_threshold(self, i, value):
        """Move threshold ``i`` to ``value``; refused if it would reach or pass a neighbour.

        Raises
        ------
        ThresholdEditError
            ``i`` is not a threshold, ``value`` is not a finite number, or the edit would
            break the order of the thresholds (nothing changes then).
        """
        theta, names = self.theta.copy(), list(self.fit.threshold_names)
        if isinstance(i, (bool, np.bool_)) or not isinstance(i, (int, np.integer)) or not 0 <= i < len(theta):
            raise ThresholdEditError(f"threshold {i!r} does not exist: this fit has thresholds 0..{len(theta) - 1} "
                                     f"({', '.join(names)})")
        if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float, np.number)):
            raise ThresholdEditError(f"threshold {names[i]!r} must be a finite number, got {value!r}")
        theta[i] = float(value)
        try:
            self.thresholds = tuple(theta)  # the one threshold rule (check_thresholds) decides
        except ThresholdEditError as exc:
            raise ThresholdEditError(f"{exc}; the edit was not applied") from None
        return theta[i]

    def reset_thresholds(self):
        """Show the fitted thresholds again."""
        self.thresholds = tuple(self.fit.thresholds.to_numpy())

    def reset(self):
        """Restore the fitted state: fitted thresholds, default scenarios, no selection."""
        with self.batch():
            self.reset_thresholds()
            self.reset_scenarios()
            self.selection = ()

    def reset_scenarios(self):
        """Set scenario and baseline back to the default case (:meth:`default_scenario`)."""
        with self.batch():
            self.scenario = self.baseline = self.default_scenario()

    @contextlib.contextmanager
    def batch(self):
        """Merge every change made inside the block into one processed update."""
        with self._lock:
            self._depth += 1
            try:
                with self.hold_trait_notifications():
                    yield self
            finally:
                self._depth -= 1
            self._flush()

    # ---- the coordinator -----------------------------------------------------------------------------
    @tl.observe(*_KIND_OF)
    def _note_change(self, change):
        self._pending.add(_KIND_OF[change["name"]])
        self._flush()

    def _flush(self):
        with self._lock:
            if self._depth or not self._pending:
                return
            kinds, self._pending = set(self._pending), set()
            with self._quiet():
                if "spec" in kinds:
                    kinds |= self._refit()
                if kinds & {"fit", "thresholds"}:
                    self._update_loglik()
            kinds |= self._pending - {"spec"}
            self._pending.clear()
            kinds.discard("spec")
            if kinds:
                self._finish(kinds)

    @contextlib.contextmanager
    def _quiet(self):
        """Derived changes made inside are recorded, not processed on their own."""
        self._depth += 1
        try:
            yield
        finally:
            self._depth -= 1

    def _finish(self, kinds):
        with self._quiet():  # changes made by observers wait for the next update
            self.changed = tuple(k for k in CHANGE_KINDS if k in kinds)
            self.updates += 1
        self._flush()

    def _refit(self):
        try:
            res = self.run_inline("refitting", self._run_fit)
            problem = unusable(res)
        except (OrdinalDataError, ValueError, np.linalg.LinAlgError) as exc:
            problem = str(exc)
        if problem:
            self._restore_good(f"refit refused: {problem}; the previous fit is kept")
            return {"error"}
        self._install(res)
        return {"fit", "thresholds", "scenario", "focus"}

    def _run_fit(self):
        held = self.fit.training if self.fit is not None else None
        if held is not None and held.is_sample:  # refitting the sample would pass for the whole fit
            raise ValueError(f"the fit used all {self.fit.n_rows:,} rows of a Dask frame and the panels hold "
                             f"{held.describe()}; refit with ow.fit on the Dask frame")
        return core_fit(self.model_formula, self.data, link=self.link, **self.fit_kwargs())

    def _install(self, res):
        problem = unusable(res)
        if problem:
            raise OrdinalDataError(f"cannot show this fit: {problem}")
        self._designs, self._frames = {}, {}
        self.fit = res
        self.error = ""
        self._good = {k: getattr(self, k) for k in _SPEC}
        self.thresholds = tuple(res.thresholds.to_numpy())
        rows, weights = self._summary_rows()
        for which in ("scenario", "baseline"):
            setattr(self, which, _spec.complete_scenario(getattr(self, which), rows, self.formula, lenient=True,
                                                         weights=weights))
        if self.focus not in self.included:
            self.focus = self.included[0] if self.included else ""
        self.selection = tuple(r for r in self.selection if r < n_training(res))
        self._install_groups(res)
        self._update_loglik()

    def _restore_good(self, message):
        for name, value in (self._good or {}).items():
            setattr(self, name, value)
        self._pending.discard("spec")
        self.error = message

    def _update_loglik(self):
        fitted = self.fitted_loglik
        ll = fitted if not self.edited else self._loglik_at(self.theta)
        self.loglik = float(ll)
        self.lr_distance = float(max(2.0 * (fitted - ll), 0.0))

    @property
    def fitted_loglik(self) -> float:
        """Fitted log-likelihood on the rows :attr:`loglik` uses (the display sample of a Dask fit)."""
        res = self.fit
        if getattr(self, "_fitted_ll", (None,))[0] is not res:
            whole = n_training(res) == res.n_rows
            self._fitted_ll = (res, res.loglik if whole else res.loglik_at())
        return self._fitted_ll[1]

    def _loglik_at(self, theta):
        res = self.fit
        if self.grouping:  # the marginal likelihood, as the fitted one
            return res.marginal_loglik_at(theta)
        if not res.layout.is_parallel:
            return res.loglik_at(thresholds=theta)
        if getattr(self, "_rows_fit", None) is not res:
            self._rows_fit, self._rows = res, RowLoglik(res)
        return self._rows.at(theta)

    # ---- long work off the interaction path -------------------------------------------------------------
    @property
    def executor(self):
        """Executor of the long work (``None``: inline); see :class:`~ordwidgets._jobs.JobRunner`."""
        return self.jobs.executor

    @executor.setter
    def executor(self, value):
        self.jobs.executor = value

    def run_long(self, label, work, done, *, kind=None, wanted=None, stopped=None):
        """Run ``work()`` then ``done(result)``: inline without an executor, else in it.

        An exception raised by ``work`` is passed to ``done`` as the result.  ``busy`` holds
        ``label`` meanwhile.  A newer job of the same ``kind`` supersedes this one.  ``done``
        is skipped when ``wanted()`` is false at the end (default: the fit has changed since),
        and after :meth:`close`, which calls ``stopped()`` instead (if given and still wanted).
        """
        fit_then = self.fit
        wanted = wanted or (lambda: self.fit is fit_then)

        def finish(result):
            with self._lock:
                done(result)

        def halt():
            if stopped is not None and wanted():
                with self._lock:
                    stopped()

        self.jobs.submit(kind, label, work, finish, wanted=wanted, stopped=halt)

    def run_inline(self, label, work):
        """Run ``work()`` now with ``busy`` showing ``label`` (the frontend sees it at once)."""
        self._set_busy(label, True)
        try:
            return work()
        finally:
            self._set_busy(label, False)

    def _set_busy(self, label, on):
        if on:
            self._busy_labels.append(label)
        else:
            self._busy_labels.remove(label)
        self._show_busy()

    def _show_busy(self, text=None):
        parts = [p for p in (", ".join(self._busy_labels), self.jobs.busy if text is None else text) if p]
        self.busy = ", ".join(parts)

    def wait(self, timeout=None) -> bool:
        """Wait for the long work started so far (``False`` if ``timeout`` seconds pass first)."""
        return self.jobs.wait(timeout)

    def request_link_table(self):
        """Compute the loglik / AIC / BIC of every link for the current spec (once per spec).

        The table does not depend on the current link, so a link change while it is computed
        keeps the request; a spec change supersedes it (the old job is cancelled or its result
        dropped) and empties :attr:`link_table` until the new rows arrive.  Every request ends
        with the full table or a row whose ``error`` says why there is none.
        """
        key = self._spec_key()
        if getattr(self, "_table_key", None) == key:
            return
        self._table_key = key
        if self.link_table:
            self.link_table = []
        kwargs = self.fit_kwargs()
        spec = dict(formula=self.model_formula, data=self.data,
                    options={k: v for k, v in kwargs.items() if k in _groups.FIT_OPTIONS},
                    extra={k: v for k, v in kwargs.items() if k not in _groups.FIT_OPTIONS})
        self.run_long("comparing links", lambda: _spec.link_rows(**spec), self._set_link_table,
                      kind="link_table", wanted=lambda: self._spec_key() == key, stopped=self._link_table_stopped)

    def _link_table_stopped(self):
        self._table_key = None  # the next request computes it again
        self.link_table = [{"link": "", "error": "the link comparison was stopped by close(); it runs again "
                                                  "on the next change of the model"}]

    def _set_link_table(self, rows):
        self.link_table = rows if isinstance(rows, list) else [{"link": "", "error": str(rows)}]

    def _spec_key(self):
        return (id(self.data), self.model_formula, repr(sorted(self.options.items())), self.nonparallel, self.scale_by,
                self.random_intercepts)

    # ---- files -------------------------------------------------------------------------------------------
    #: Function ``(state, name, **options) -> Figure`` behind :meth:`figure`; installed by
    #: :mod:`ordwidgets.figures` (which draws the panels, and the panels import this module).
    figure_drawer = None

    def figure(self, name, **options):
        """Static matplotlib picture of one panel: "explorer", "thresholds", "residuals", "links".

        See :func:`ordwidgets.figures.state_figure`; drawn from the panel's own marks, no browser.
        """
        if FitState.figure_drawer is None:
            raise RuntimeError("figures need ordwidgets.figures (import ordwidgets installs it)")
        return FitState.figure_drawer(self, name, **options)

    def to_dict(self) -> dict:
        """Plain JSON-able description of the spec and the edits (no data)."""
        from ._statefile import state_to_dict

        return state_to_dict(self)

    def save(self, path):
        """Write the spec, link, edits, scenarios and seeds as JSON (no data, no code)."""
        from ._statefile import write_state

        write_state(self, path)

    @classmethod
    def load(cls, path, data, *, spec_only=False, **kwargs):
        """Rebuild a state from :meth:`save` output and the same ``data``.

        The file holds a fingerprint of the data it was saved on; other data are refused
        unless ``spec_only=True``, which applies only the model spec and drops the saved
        threshold edits, scenarios and selection with a ``DataWarning``.

        Raises
        ------
        StateFileError
            If the file is malformed, hostile or does not match ``data``; nothing in it is executed.
        """
        from ._statefile import read_state

        return read_state(cls, path, data, spec_only=spec_only, **kwargs)

    def close(self):
        """Stop the long work: queued jobs are cancelled, running ones dropped, threads ended.

        ``busy`` is cleared.  The state stays usable; later long work runs inline.
        """
        self.jobs.close()


class ThresholdEditError(OrdinalDataError, tl.TraitError):
    """A threshold edit that was refused (names the threshold and the neighbour in the way)."""


def unusable(res) -> str:
    """Why a fit cannot be shown (``""`` when it can): thresholds must be finite and increasing,
    effects finite."""
    theta = res.params[: res.n_thresholds]
    bad = [n for n, v in zip(res.names, res.params) if not np.isfinite(v)]
    if bad:
        return f"the fit of {res.formula!r} has non-finite estimates ({', '.join(map(str, bad[:5]))})"
    try:
        check_thresholds(theta, res.threshold_names)
    except OrdinalDataError as exc:
        return f"the fit of {res.formula!r} has thresholds out of order: {exc}"
    return ""


def _fitted_rows(res, data):
    """The fitted rows by position: the fit's own frame, else ``data`` by a unique index."""
    held = res.training.frame if res.training is not None else None
    if held is not None:
        return held
    index = res.training.index
    if not data.index.is_unique:
        raise OrdinalDataError("the data frame's index repeats labels and the fit does not hold its rows: "
                               "call data.reset_index(drop=True) before fitting")
    return data.loc[index]


def n_training(res) -> int:
    """Rows the fit holds for residuals and edited log-likelihoods (a sample for Dask fits)."""
    return res.n_training

