"""Sums over rows for the random-intercept likelihood: scores and Hessian pieces mapped onto
the parameters ``[theta (J-1), beta (p), sigma]``.

Row ``i`` (category ``y_i``, group ``g_i``) at node ``z`` of its group has the interval ends
``u = theta_{y_i} - x_i'beta - sigma z`` and ``l = theta_{y_i - 1} - x_i'beta - sigma z``, so
``du/dpsi = e_{y_i} - (0, x_i, z)`` and ``dl/dpsi = e_{y_i - 1} - (0, x_i, z)``; the
helpers here only add those chain-rule pieces over rows and groups (the per-row
derivatives of ``log P`` in ``u`` and ``l`` come from
:func:`ordwidgets.core.grouped_likelihood.shift_terms`).  They read ``rows.codes``,
``rows.X``, ``rows.n_levels``, ``rows.groups``, ``rows.n_groups`` and ``rows.weights``.
"""
from __future__ import annotations

import numpy as np
from scipy import sparse

__all__ = ["parameter_sums", "moment_hessian", "group_matrix", "score_matrices", "node_scores",
           "outer_term"]


def _segments(rows):
    """Row slices of the categories (rows are sorted by category)."""
    b = rows.bounds
    return [slice(int(b[k]), int(b[k + 1])) for k in range(len(b) - 1)]


def _threshold_sums(seg, cu, cl, cols=None):
    """``sum_i cu_i [y_i = j] c_i + cl_i [y_i - 1 = j] c_i`` for each threshold ``j``
    (``c_i = 1`` without ``cols``, else the row of ``cols``): shape (m,) or (m, k)."""
    m = len(seg) - 1
    if cols is None:
        return np.array([cu[seg[j]].sum() + cl[seg[j + 1]].sum() for j in range(m)])
    return np.array([cu[seg[j]] @ cols[seg[j]] + cl[seg[j + 1]] @ cols[seg[j + 1]] for j in range(m)])


def parameter_sums(rows, cu, cl, cs, csig):
    """``sum_i`` of per-row derivative pieces mapped onto ``[theta, beta, sigma]``.

    ``cu`` multiplies ``d upper/d theta`` (the row's own threshold), ``cl`` ``d lower/d
    theta`` (the one below), ``cs`` the row's ``x`` and ``csig`` goes to ``sigma``.
    """
    return np.concatenate([_threshold_sums(_segments(rows), cu, cl), rows.X.T @ cs, [csig.sum()]])


def moment_hessian(rows, acc):
    """Hessian in ``[theta, beta, sigma]`` from per-row moments of the second derivatives.

    ``acc`` holds per-row sums over nodes (weights included) of ``uu``, ``ll``, ``ul``;
    ``tu0``/``tl0`` of ``uu + ul`` / ``ul + ll`` and ``tu1``/``tl1`` the same times the node;
    ``s0``, ``s1``, ``s2`` of ``uu + 2 ul + ll`` times the node's power 0, 1, 2.
    """
    X, seg = rows.X, _segments(rows)
    m, p = rows.n_levels - 1, X.shape[1]
    P = m + p + 1
    H = np.zeros((P, P))
    H[:m, :m] = np.diag(_threshold_sums(seg, acc["uu"], acc["ll"]))
    off = np.array([acc["ul"][seg[k]].sum() for k in range(1, m)])  # rows of category k: theta_{k-1}, theta_k
    idx = np.arange(m - 1)
    H[idx, idx + 1] += off
    H[idx + 1, idx] += off
    blocks = np.column_stack([_threshold_sums(seg, acc["tu0"], acc["tl0"], X).reshape(m, p),
                              _threshold_sums(seg, acc["tu1"], acc["tl1"])])
    H[:m, m:] -= blocks
    H[m:, :m] -= blocks.T
    H[m:m + p, m:m + p] += X.T @ (X * acc["s0"][:, None])
    H[m:m + p, -1] += X.T @ acc["s1"]
    H[-1, m:m + p] += X.T @ acc["s1"]
    H[-1, -1] += acc["s2"].sum()
    return H


def group_matrix(rows):
    """Sparse (n_groups, n) matrix of each row's weight (1 without weights) in its group.

    Compressed by columns: a product with an (n, Q) array then reads the rows in order and
    adds them into the small (n_groups, Q) result (rows need not be sorted by group).
    """
    n = len(rows.groups)
    w = np.ones(n) if rows.weights is None else rows.weights
    return sparse.csc_matrix((w, (rows.groups, np.arange(n))), shape=(rows.n_groups, n))


def score_matrices(rows):
    """Sparse matrices ``(M_u, M_l)`` with ``M_u @ d_u + M_l @ d_l`` the threshold and effect
    parts of every group's score, for per-row derivatives ``d_u``, ``d_l`` of ``log P`` in
    the interval ends (shape (n,) or (n, Q)).

    Rows ``0 .. G m - 1`` of the result are the (group, threshold) cells: the upper end of a
    row adds to its own threshold ``y_i`` (rows below the top category), the lower end to
    ``y_i - 1`` (rows above the bottom one).  Rows ``G m + g p + j`` are group ``g``'s effect
    ``j``: both ends add ``-w_i x_ij`` (``d u / d beta = d l / d beta = -x``).
    """
    m, p, y, g = rows.n_levels - 1, rows.X.shape[1], rows.codes, rows.groups
    n, G = len(y), rows.n_groups
    w = np.ones(n) if rows.weights is None else rows.weights
    cells = np.empty((n, p + 1), np.intp)  # per row: its threshold cell, then its effect cells
    cells[:, 1:] = G * m + g[:, None] * p + np.arange(p)[None, :]
    data = np.empty((n, p + 1))
    data[:, 0] = w
    data[:, 1:] = -(w[:, None] * rows.X)
    out = []
    for keep, shift in ((y < m, 0), (y > 0, -1)):
        cells[:, 0] = g * m + y + shift
        use = np.ones((n, p + 1), bool)
        use[:, 0] = keep
        indptr = np.concatenate([[0], np.cumsum(p + keep.astype(np.intp))])
        out.append(sparse.csc_matrix((data[use], cells[use], indptr), shape=(G * (m + p), n)))
    return tuple(out)


def node_scores(rows, matrices, T, nodes, s1_groups):
    """Score vector of each group at each node, shape (n_groups, n_nodes, n_params).

    ``matrices`` is :func:`score_matrices`, ``T`` the per-row terms at the nodes (arrays
    (n, Q)), ``nodes`` (n_groups, Q) and ``s1_groups`` the weighted group sums of
    ``d log P / d shift`` at the nodes (the SD's part is the node times that sum).
    """
    G, Q = nodes.shape
    m, p = rows.n_levels - 1, rows.X.shape[1]
    out = np.empty((G, Q, m + p + 1))
    sums = matrices[0] @ T["u"] + matrices[1] @ T["l"]  # (G (m + p), Q)
    out[:, :, :m] = sums[: G * m].reshape(G, m, Q).transpose(0, 2, 1)
    out[:, :, m:m + p] = sums[G * m:].reshape(G, p, Q).transpose(0, 2, 1)
    out[:, :, -1] = s1_groups * nodes
    return out


def outer_term(pi, scores):
    """``sum_g [sum_k pi_gk s_gk s_gk' - sbar_g sbar_g']`` with ``sbar_g = sum_k pi_gk s_gk``."""
    mean = np.einsum("gk,gka->ga", pi, scores)
    return np.einsum("gk,gka,gkb->ab", pi, scores, scores) - mean.T @ mean
