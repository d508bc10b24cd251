"""The random-intercept part of :class:`~ordwidgets.state.FitState`: its traits and views.

``FitState`` inherits these declared traits (the grouping columns, the picked group and the
kind of probability shown), their validation and the views the panels read.  Every number
comes from the core's random-intercept result (``group_effects``, ``probabilities_of``);
the helpers are the pure functions of :mod:`ordwidgets._groups`.
"""
from __future__ import annotations

import numpy as np
import traitlets as tl

from . import _groups, _spec
from .core.mixed_results import GROUP_KINDS

__all__ = ["GroupTraits"]


class GroupTraits(tl.HasTraits):
    """Random intercepts of a state: grouping columns, picked group, kind of probability.

    Needs the host's ``fit``, ``data``, ``options``, ``nonparallel``, ``scale_by``,
    ``included`` and ``_frames`` (the per-fit cache); :meth:`_install_groups` is called by
    the host whenever a new fit is installed.
    """

    random_intercepts = tl.Tuple(help="Grouping columns with a normal random intercept each (Hedeker & Gibbons "
                                      "1994); setting it refits.  The model controls switch each on and off.")
    group_candidates = tl.Tuple(help="Grouping columns the model controls offer to switch on and off: those "
                                     "given here and every column of random_intercepts.")
    group_column = tl.Unicode("", help="Grouping column of the picked group (the fit's first by default; '' "
                                       "without random intercepts).")
    group = tl.Any(None, allow_none=True, help="The picked group: a label of group_column seen in the fit, or "
                                               "None.  Set by the group-effects panel.")
    group_kind = tl.Enum(GROUP_KINDS, default_value="population",
                         help="Probabilities shown for a random-intercept fit: 'population' (averaged over the "
                              "groups), 'typical' (group effect 0) or 'conditional' (the picked group at its "
                              "estimated effect).  Set by the explorer.")

    # ---- views ----------------------------------------------------------------------------------
    @property
    def grouping(self) -> tuple:
        """Grouping columns of the current fit (``()`` unless it has random intercepts)."""
        return _groups.grouping_of(self.fit)

    @property
    def group_offset(self) -> float:
        """Latent shift of the probabilities shown: the picked group's estimated effect (its
        conditional mode, ``group_effects``) when :attr:`group_kind` is ``"conditional"``, else 0."""
        if self.group_kind != "conditional" or self.group is None:
            return 0.0
        return float(self.group_effects(self.group_column).loc[self.group, "estimate"])

    def group_effects(self, column=None):
        """The core's ``group_effects(column)`` of the current fit (kept until the next refit)."""
        column = column or self.group_column
        key = ("group effects", column)
        if key not in self._frames:
            self._frames[key] = self.fit.group_effects(column)
        return self._frames[key]

    def group_rows(self) -> np.ndarray:
        """Positions of the fitted rows of the picked group (empty when none is picked)."""
        if self.group is None or not self.grouping:
            return np.zeros(0, dtype=np.int64)
        return _groups.group_rows(self.fit, self.group_column, self.group)

    def kind_text(self) -> str:
        """Plain words for the probabilities shown ("" for a fit without random intercepts)."""
        if not self.grouping:
            return ""
        return _groups.kind_text(self.group_kind, self.group_column, self.group, several=len(self.grouping) > 1)

    def fit_kwargs(self) -> dict:
        """Keyword arguments of ``ow.fit`` (besides formula, data, link) for the current spec."""
        return _groups.fit_kwargs(self.options, _spec.model_kwargs(self.nonparallel, self.scale_by, self.included),
                                  self.random_intercepts)

    @tl.validate("random_intercepts", "group_candidates")
    def _valid_grouping(self, proposal):
        names = tuple(dict.fromkeys(proposal["value"]))
        bad = [v for v in names if not isinstance(v, str) or (self.data is not None and v not in self.data.columns)]
        if bad:
            raise tl.TraitError(f"grouping columns must be columns of the data, got {bad}")
        return names

    @tl.validate("group_column")
    def _valid_group_column(self, proposal):
        name = proposal["value"]
        if name and self.fit is not None and name not in self.grouping:
            raise tl.TraitError(f"group_column must be a grouping column of the fit {list(self.grouping)}, got {name!r}")
        return name

    @tl.validate("group")
    def _valid_group(self, proposal):
        if proposal["value"] is None or self.fit is None:
            return proposal["value"]
        try:
            return _groups.group_label(self.fit, self.group_column, proposal["value"])
        except ValueError as exc:
            raise tl.TraitError(str(exc)) from None

    @tl.validate("group_kind")
    def _valid_group_kind(self, proposal):
        kind = proposal["value"]
        if self.fit is not None and kind != "population" and not self.grouping:
            raise tl.TraitError(f"group_kind {kind!r} needs a fit with random intercepts")
        if self.fit is not None and kind == "conditional" and self.group is None:
            raise tl.TraitError("group_kind 'conditional' needs a picked group (state.group)")
        return kind

    def _install_groups(self, res):
        """Grouping traits that hold for ``res``: the picked group kept while the new fit has it."""
        groups = _groups.grouping_of(res)
        self.random_intercepts = groups
        self.group_candidates = tuple(dict.fromkeys(self.group_candidates + groups))
        column = self.group_column if self.group_column in groups else (groups[0] if groups else "")
        try:
            group = None if self.group is None or not column else _groups.group_label(res, column, self.group)
        except ValueError:
            group = None
        if self.group_kind == "conditional" and group is None or not groups:
            self.group_kind = "population"
        self.group, self.group_column, self.group = None, column, group
