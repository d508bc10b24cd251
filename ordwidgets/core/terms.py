"""Formula terms and the design columns behind them.

A formula term such as ``species`` (a factor) becomes several design columns (one dummy per
non-reference level); a numeric term such as ``diameter`` is one column.  Tests "by term"
treat the columns of one term jointly.
"""
from __future__ import annotations

__all__ = ["term_columns"]


def term_columns(res) -> dict[str, list[str]]:
    """Formula term -> the design column names of the fit that belong to it.

    For a parallel fit the design columns are the coefficient names.  With per-threshold or
    scale effects the parameters of a column are named from it (``"dose @ poor->fair"``,
    ``"scale: dose"``; see :mod:`ordwidgets.core.layout`).

    Parameters
    ----------
    res : FitResult

    Returns
    -------
    dict
        Terms in formula order; each maps to the columns in design order.  Terms without a
        column in the fit (the intercept) are left out.  Without a formula spec (a fit made
        from arrays) every column is its own term.
    """
    from .layout import layout_of

    fitted = list(layout_of(res).columns)
    spec = getattr(res, "model_spec", None)
    if spec is None:
        return {c: [c] for c in fitted}
    names = list(spec.column_names)
    out, seen = {}, set()
    for term, idx in spec.term_indices.items():
        cols = [names[i] for i in idx if names[i] in fitted]
        if cols:
            out[str(term)] = cols
            seen.update(cols)
    for c in fitted:  # columns the spec does not list (none expected): their own term
        if c not in seen:
            out[c] = [c]
    return out
