"""Invented demo data: a city's street-tree inventory with known true effects.

The scenario is made up for ordwidgets and the numbers come from a random generator, not
from any real city.  Each row is one street tree with its health grade
(``poor < fair < good < excellent``) as assessed by an (imaginary) inspector, and:

``diameter``
    trunk diameter at breast height, in cm;
``years``
    years since planting;
``pit_area``
    area of open soil in the planting pit, in square metres;
``species``
    species group (``linden``, ``maple``, ``plane``, ``locust``; ``linden`` is the reference);
``arterial``
    1 when the tree stands on an arterial road (traffic, road salt), else 0.

The grades follow a cumulative logit model with two planted departures from the plain
proportional-odds model, so the checking tools have something to find:

* ``arterial`` is **non-parallel**: it pushes trees into ``poor`` much more than it keeps
  them out of ``excellent`` (an effect that shrinks across the thresholds);
* the latent spread grows **mildly with age** (heteroscedasticity): older trees differ more.

In the notation of the model (McCullagh 1980; Peterson & Harrell 1990 for the non-parallel
term)::

    P(grade <= j | x) = F((theta_j - x'beta - arterial * delta_j) / exp(zeta * years))

with ``F`` the logistic distribution function.  A positive effect moves probability towards
higher grades.  :func:`street_tree_truth` returns every true value; :func:`true_probabilities`
evaluates the true model on any frame with the same columns.

:func:`inspected_trees` adds repeated ratings: each tree is graded by one of a few dozen
inspectors, and inspector ``k`` rates every tree ``u_k`` higher on the latent scale, with
``u_k ~ N(0, INSPECTOR_SD^2)`` (:func:`true_inspector_effects` returns them); the rest of
that model is the plain proportional-odds part of :func:`street_tree_truth` (no departures).
Rows of one inspector are not independent, which is what random intercepts and
cluster-robust standard errors are for.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.special import expit

__all__ = ["GRADES", "SPECIES", "DemoTruth", "street_trees", "street_tree_truth", "true_probabilities",
           "true_parameters", "inspected_trees", "true_inspector_effects", "INSPECTOR_SD"]

#: True SD of the inspectors' effects on the latent scale in :func:`inspected_trees`.
INSPECTOR_SD = 0.7

GRADES = ("poor", "fair", "good", "excellent")
SPECIES = ("linden", "maple", "plane", "locust")
_SPECIES_SHARE = (0.35, 0.30, 0.20, 0.15)
_SPECIES_GROWTH = (1.0, 1.1, 1.25, 0.9)  # relative trunk growth per year


@dataclass(frozen=True)
class DemoTruth:
    """The true model behind :func:`street_trees`.

    Attributes
    ----------
    link : str
        Link of the true model (``"logit"``).
    levels : tuple of str
        Health grades from worst to best.
    thresholds : tuple of float
        ``theta_j`` for a tree off arterial roads, lowest cut first.
    effects : dict
        Parallel effects ``beta`` keyed by the design-column names that ``ow.fit`` gives for
        :attr:`formula` (``species[T.maple]`` is maple against linden).
    nonparallel : dict
        ``{"arterial": (delta_1, delta_2, delta_3)}``: the arterial effect at each threshold;
        with ``nonparallel=False`` in :func:`street_trees` the effect is parallel and equal to
        :attr:`arterial_parallel` instead.
    arterial_parallel : float
        The arterial effect used when the data are made without the non-parallel departure.
    scale : dict
        ``{"years": zeta}``: the latent spread is ``exp(zeta * years)`` (``zeta = 0`` when made
        with ``heteroscedastic=False``).
    formula : str
        A formula naming every predictor once.
    """

    link: str = "logit"
    levels: tuple = GRADES
    thresholds: tuple = (-1.6, 0.3, 2.4)
    effects: dict = field(default_factory=lambda: {
        "diameter": 0.03, "years": -0.05, "pit_area": 0.35,
        "species[T.maple]": -0.6, "species[T.plane]": 0.4, "species[T.locust]": 0.2,
    })
    nonparallel: dict = field(default_factory=lambda: {"arterial": (-1.4, -0.8, -0.3)})
    arterial_parallel: float = -0.8
    scale: dict = field(default_factory=lambda: {"years": 0.015})
    formula: str = "grade ~ diameter + years + pit_area + species + arterial"


def street_tree_truth(*, nonparallel=True, heteroscedastic=True) -> DemoTruth:
    """The true model of :func:`street_trees` made with the same switches.

    Parameters
    ----------
    nonparallel : bool
        Whether the arterial effect differs across thresholds.
    heteroscedastic : bool
        Whether the latent spread grows with ``years``.

    Returns
    -------
    DemoTruth
    """
    base = DemoTruth()
    delta = base.nonparallel["arterial"] if nonparallel else (base.arterial_parallel,) * 3
    zeta = base.scale["years"] if heteroscedastic else 0.0
    return DemoTruth(nonparallel={"arterial": tuple(delta)}, scale={"years": zeta})


def true_parameters(res, truth=None) -> pd.Series:
    """True values of a fit's parameters, aligned with ``res.names``.

    Knows the names ``ow.fit`` gives the street-tree model's parameters: thresholds, parallel
    effects, ``"arterial @ <threshold>"`` for the non-parallel arterial effect and
    ``"scale: years"``.  A parameter the true model does not have (for example a parallel
    ``arterial`` when the truth is non-parallel) is NaN.

    Parameters
    ----------
    res : FitResult
        A fit of :attr:`DemoTruth.formula` (any of its non-parallel / scale variants).
    truth : DemoTruth, optional
        Defaults to the full model (both departures present).

    Returns
    -------
    pandas.Series
    """
    from .core.layout import per_threshold_name, scale_name

    truth = truth or street_tree_truth()
    delta = truth.nonparallel["arterial"]
    values = dict(zip(res.threshold_names, truth.thresholds)) | truth.effects
    values |= {per_threshold_name("arterial", t): d for t, d in zip(res.threshold_names, delta)}
    values[scale_name("years")] = truth.scale["years"]
    if len(set(delta)) == 1:
        values["arterial"] = delta[0]
    return pd.Series([values.get(n, np.nan) for n in res.names], index=res.names, name="true value")


def _predictors(n, rng):
    """Draw the tree attributes (plausible ranges, moderate correlation of size and age)."""
    sp = rng.choice(len(SPECIES), size=n, p=_SPECIES_SHARE)
    years = rng.integers(1, 41, size=n)
    pit = np.clip(np.round(rng.lognormal(np.log(2.0), 0.45, size=n), 1), 0.5, 9.0)
    growth = np.asarray(_SPECIES_GROWTH)[sp] * (pit / 2.0) ** 0.2 * rng.lognormal(0.0, 0.3, size=n)
    diameter = np.round(4.0 + 1.3 * years * growth)
    return pd.DataFrame({
        "tree_id": [f"T{i:05d}" for i in range(1, n + 1)],
        "diameter": diameter,
        "years": years,
        "pit_area": pit,
        "species": pd.Categorical.from_codes(sp, categories=list(SPECIES)),
        "arterial": (rng.random(n) < 0.3).astype(int),
    })


def _linear_predictor(frame, effects):
    """``x'beta`` of the parallel effects; ``species[T.maple]`` is the maple indicator."""
    eta = np.zeros(len(frame))
    species = frame["species"].astype(str).to_numpy()
    for name, b in effects.items():
        if name.startswith("species[T."):
            eta += b * (species == name[len("species[T."):-1])
        else:
            eta += b * frame[name].to_numpy(float)
    return eta


def _cumulative(frame, truth, offset=0.0):
    """True ``P(grade <= j)`` for each row, shape ``(n, J - 1)``, written out with scipy
    (``offset``: a latent shift per row, such as the inspector's effect)."""
    eta = _linear_predictor(frame, truth.effects) + offset
    shift = frame["arterial"].to_numpy(float)[:, None] * np.asarray(truth.nonparallel["arterial"])
    spread = np.exp(truth.scale["years"] * frame["years"].to_numpy(float))[:, None]
    return expit((np.asarray(truth.thresholds)[None, :] - eta[:, None] - shift) / spread)


def true_probabilities(frame, truth=None) -> pd.DataFrame:
    """True probability of each grade for the rows of ``frame``.

    Parameters
    ----------
    frame : pandas.DataFrame
        Columns ``diameter``, ``years``, ``pit_area``, ``species`` and ``arterial``.
    truth : DemoTruth, optional
        Defaults to the full model (both departures present).

    Returns
    -------
    pandas.DataFrame
        One column per grade, rows summing to one.
    """
    cum = _cumulative(frame, truth or street_tree_truth())
    ones, zeros = np.ones((len(frame), 1)), np.zeros((len(frame), 1))
    probs = np.diff(np.hstack([zeros, cum, ones]), axis=1)
    return pd.DataFrame(probs, index=frame.index, columns=list(GRADES))


def street_trees(n=1500, *, seed=2026, nonparallel=True, heteroscedastic=True) -> pd.DataFrame:
    """Make an invented street-tree inventory with known true effects.

    Parameters
    ----------
    n : int
        Number of trees.
    seed : int
        Seed of :func:`numpy.random.default_rng`; the same seed gives the same frame.
    nonparallel : bool
        Plant the non-parallel arterial effect (else the effect is parallel).
    heteroscedastic : bool
        Plant the growth of the latent spread with age (else the spread is constant).

    Returns
    -------
    pandas.DataFrame
        ``tree_id``, ``diameter``, ``years``, ``pit_area``, ``species``, ``arterial`` and the
        response ``grade`` (an ordered Categorical ``poor < fair < good < excellent``).

    Examples
    --------
    >>> from ordwidgets.demo import street_trees
    >>> trees = street_trees(200, seed=1)
    >>> list(trees["grade"].cat.categories)
    ['poor', 'fair', 'good', 'excellent']
    """
    if not isinstance(n, (int, np.integer)) or n < 1:
        raise ValueError(f"n must be a positive integer, got {n!r}")
    rng = np.random.default_rng(seed)
    frame = _predictors(int(n), rng)
    cum = _cumulative(frame, street_tree_truth(nonparallel=nonparallel, heteroscedastic=heteroscedastic))
    codes = (rng.random(len(frame))[:, None] > cum).sum(axis=1)
    frame["grade"] = pd.Categorical.from_codes(codes, categories=list(GRADES), ordered=True)
    return frame


def true_inspector_effects(n_inspectors=30, *, seed=2026, sd=INSPECTOR_SD) -> pd.Series:
    """The true latent effect of each inspector in :func:`inspected_trees` (positive = grades higher).

    Drawn from their own generator (seeded by ``(seed, 1)``), so they do not depend on ``n``.
    """
    rng = np.random.default_rng([seed, 1])
    names = [f"I{k:02d}" for k in range(1, n_inspectors + 1)]
    return pd.Series(rng.normal(0.0, sd, n_inspectors), index=pd.Index(names, name="inspector"), name="effect")


def inspected_trees(n=1500, *, seed=2026, n_inspectors=30, sd=INSPECTOR_SD) -> pd.DataFrame:
    """Street trees each graded by one of ``n_inspectors`` inspectors with their own leniency.

    ``P(grade <= j | x, inspector k) = F(theta_j - x'beta - u_k)``, ``u_k ~ N(0, sd^2)``, with
    ``theta`` and ``beta`` those of ``street_tree_truth(nonparallel=False,
    heteroscedastic=False)`` and ``u`` from :func:`true_inspector_effects`.

    Returns
    -------
    pandas.DataFrame
        The columns of :func:`street_trees` plus ``inspector`` (``"I01"`` ...).
    """
    if not isinstance(n, (int, np.integer)) or n < 1:
        raise ValueError(f"n must be a positive integer, got {n!r}")
    rng = np.random.default_rng(seed)
    frame = _predictors(int(n), rng)
    effects = true_inspector_effects(n_inspectors, seed=seed, sd=sd)
    who = rng.integers(0, n_inspectors, len(frame))
    frame["inspector"] = effects.index.to_numpy()[who]
    truth = street_tree_truth(nonparallel=False, heteroscedastic=False)
    cum = _cumulative(frame, DemoTruth(effects={**truth.effects, "arterial": truth.arterial_parallel},
                                         nonparallel={"arterial": (0.0, 0.0, 0.0)}, scale={"years": 0.0}),
                      offset=effects.to_numpy()[who])
    codes = (rng.random(len(frame))[:, None] > cum).sum(axis=1)
    frame["grade"] = pd.Categorical.from_codes(codes, categories=list(GRADES), ordered=True)
    return frame
