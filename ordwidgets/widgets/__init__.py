"""The linked panels of ordwidgets (ipywidgets + bqplot).

Every panel observes and sets one :class:`~ordwidgets.state.FitState`, never another panel.
Long work (link comparison, proportional-odds tests, residual refresh after an edit) goes
through :meth:`FitState.run_long`: a background executor in :func:`dashboard`, inline when
the state has no executor (as in the tests).

CSS classes (``add_class``) are stable hooks for browser tests and styling:

==========================  ==========================================================
``ow-dashboard``            the whole dashboard
``ow-status``               "updates: N", bumped after every processed state change
``ow-busy``                 what long work is running (empty when idle; the residual
                            refresh after an edit may land after ``updates`` moved)
``ow-threshold-panel``      :class:`ThresholdPanel`
``ow-threshold-slider``     each threshold slider
``ow-density-figure``       the latent density figure
``ow-loglik-readout``       log-likelihood at the shown thresholds and LR distance
``ow-reset``                the reset button of the thresholds
``ow-threshold-message``    why a threshold edit was refused (empty after an accepted one)
``ow-crossing-note``        why the scenario has no probabilities (cut points cross)
``ow-link-selector``        :class:`LinkSelector`
``ow-link-dropdown``        the link dropdown
``ow-link-table``           loglik / AIC / BIC of every link
``ow-model-controls``       per predictor: in/out, non-parallel, scale effect, PO test
``ow-effects-table``        estimated effects with the sign convention
``ow-explorer``             :class:`ProbabilityExplorer`
``ow-explorer-figure``      the probability figure
``ow-focus-dropdown``       the x-axis predictor dropdown
``ow-whatif-table``         baseline vs scenario probabilities and expected score
``ow-scenario-note``        grid points without probabilities; scenario values outside the data
``ow-residual-panel``       :class:`ResidualPanel`
``ow-residual-figure``      residuals against the fit or a predictor (brushable)
``ow-qq-figure``            QQ plot against the link distribution
``ow-selection-table``      the brushed rows
``ow-kind-choice``          population-averaged / typical group / this group (random intercepts)
``ow-kind-note``            which kind of probability the explorer shows
``ow-grouping-controls``    model controls: a random intercept per grouping column on or off
``ow-group-rows-note``      residuals of random-intercept fits; the picked group's rows
``ow-group-panel``          :class:`GroupEffectsPanel`
``ow-group-figure``         sorted group effects with intervals (click a point to pick)
``ow-group-picker``         the group picker (type or choose a label)
``ow-group-sd``             SD of the random intercept with its profile interval
``ow-group-note``           why there are no group effects (fit without random intercepts)
``ow-save-toolbar``         PNG / SVG buttons under each figure
``ow-save-report``          the dashboard's "save report" button
``ow-report-link``          where the report was saved, with a download link
==========================  ==========================================================
"""
from .dashboard import CAUTION, Dashboard, dashboard
from .explorer import ProbabilityExplorer
from .groups import GroupEffectsPanel
from .links import LinkSelector
from .residuals import ResidualPanel
from .threshold import ThresholdPanel

__all__ = ["ThresholdPanel", "LinkSelector", "ProbabilityExplorer", "ResidualPanel", "GroupEffectsPanel", "Dashboard",
           "dashboard", "CAUTION"]
