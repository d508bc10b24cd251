"""Effects on the odds scale (logit link) and what ``exp(beta)`` means under each link.

With the logit link, ``P(Y <= j | x) = F(theta_j - x'beta)`` gives
``odds(Y > j | x) = exp(x'beta - theta_j)``: a unit increase of a predictor multiplies the odds
of a higher category (above any cut) by ``exp(beta)`` (McCullagh 1980, sec. 2).  Under other
links ``exp(beta)`` is no odds ratio; :data:`EXP_BETA_MEANING` says what it is or is not.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from .effects import check_level, wald_bounds
from .layout import effect_groups

__all__ = ["odds_scale", "exp_beta_meaning", "EXP_BETA_MEANING"]

EXP_BETA_MEANING = {
    "logit": ("exp(beta) is an odds ratio: a unit increase multiplies the odds of a higher category "
              "(above any threshold) by exp(beta); above 1 = towards higher categories."),
    "probit": ("exp(beta) means nothing under the probit link (it is no odds ratio): beta shifts a normal "
               "latent variable, in units of its standard deviation."),
    "cloglog": ("exp(beta) is no odds ratio under the cloglog link; here exp(-beta) multiplies "
                "-log P(Y > j) at every threshold (a proportional-hazards reading), and beta shifts a "
                "Gumbel (minimum) latent variable."),
    "loglog": ("exp(beta) is no odds ratio under the loglog link; here exp(beta) multiplies "
               "-log P(Y <= j) at every threshold, and beta shifts a Gumbel (maximum) latent variable."),
    "cauchit": ("exp(beta) means nothing under the cauchit link (it is no odds ratio): beta shifts a "
                "Cauchy latent variable, in units of its scale (it has no standard deviation)."),
}


def exp_beta_meaning(link_name) -> str:
    """What ``exp(beta)`` is, or is not, under the link ``link_name``."""
    return EXP_BETA_MEANING.get(link_name, "exp(beta) is no odds ratio under this link.")


def odds_scale(res, *, level=0.95) -> pd.DataFrame:
    """Odds ratios ``exp(beta)`` of the location effects, with Wald intervals.

    A per-threshold effect ``"x @ low->high"`` gives the odds ratio at that threshold only.

    The interval is ``exp(beta -+ z SE)`` (the Wald interval of ``beta``, transformed).

    Raises
    ------
    ValueError
        For a link other than logit, with :func:`exp_beta_meaning` as the message.

    Returns
    -------
    pandas.DataFrame
        Indexed by effect; columns ``odds_ratio``, ``wald_low``, ``wald_high``.
    """
    check_level(level)
    if res.link.name != "logit":
        raise ValueError(exp_beta_meaning(res.link.name))
    scale = set(effect_groups(res)["scale"])
    names = [n for n in res.coef_names if n not in scale]
    idx = [res.names.index(n) for n in names]
    est = res.params[idx]
    se = np.sqrt(np.maximum(np.diag(res.cov)[idx], 0.0))
    low, high = wald_bounds(est, se, level)
    return pd.DataFrame({"odds_ratio": np.exp(est), "wald_low": np.exp(low),
                         "wald_high": np.exp(high)}, index=pd.Index(names, name="effect"))
