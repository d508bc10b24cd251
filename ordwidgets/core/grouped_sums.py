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

__all__ = ["parameter_sums", "moment_hessian", "group_matrix", "threshold_matrices", "node_scores",
           "outer_term"]


def parameter_sums(rows, cu, cl, cs, csig):
    """``sum_i`` of per-row derivative pieces mapped onto ``[theta, beta, sigma]``.

    ``cu`` multiplies ``d upper/d theta`` (the row's own threshold), ``cl`` ``d lower/d
    theta`` (the one below), ``cs`` the row's ``x`` and ``csig`` goes to ``sigma``.
    """
    m = rows.n_levels - 1
    y = rows.codes
    up, lo = y < m, y > 0
    g_theta = np.bincount(y[up], weights=cu[up], minlength=m)[:m] + np.bincount(y[lo] - 1, weights=cl[lo],
                                                                                 minlength=m)[:m]
    return np.concatenate([g_theta, rows.X.T @ cs, [csig.sum()]])


def moment_hessian(rows, acc):
    """Hessian in ``[theta, beta, sigma]`` from per-row moments of the second derivatives.

    ``acc`` holds per-row sums over nodes (weights included) of ``uu``, ``ll``, ``ul``;
    ``tu0``/``tl0`` of ``uu + ul`` / ``ul + ll`` and ``tu1``/``tl1`` the same times the node;
    ``s0``, ``s1``, ``s2`` of ``uu + 2 ul + ll`` times the node's power 0, 1, 2.
    """
    y, X = rows.codes, rows.X
    m, p = rows.n_levels - 1, X.shape[1]
    n = len(y)
    P = m + p + 1
    H = np.zeros((P, P))
    up, lo = y < m, y > 0
    both = up & lo
    H[:m, :m] += np.diag(np.bincount(y[up], acc["uu"][up], minlength=m)[:m]
                         + np.bincount(y[lo] - 1, acc["ll"][lo], minlength=m)[:m])
    off = np.bincount(y[both] - 1, acc["ul"][both], minlength=m)[:m]  # between theta_{k-1} and theta_k
    idx = np.arange(m - 1)
    H[idx, idx + 1] += off[: m - 1]
    H[idx + 1, idx] += off[: m - 1]
    for key_u, key_l, col, span in (("tu0", "tl0", X, slice(m, m + p)),
                                    ("tu1", "tl1", np.ones((n, 1)), slice(m + p, P))):
        block = _theta_block(y, m, up, lo, acc[key_u], acc[key_l], col)
        H[:m, span] -= block
        H[span, :m] -= block.T
    H[m:m + p, m:m + p] += X.T @ (X * acc["s0"][:, None])
    H[m:m + p, -1] += X.T @ acc["s1"]
    H[-1, m:m + p] += X.T @ acc["s1"]
    H[-1, -1] += acc["s2"].sum()
    return H


def _theta_block(y, m, up, lo, cu, cl, cols):
    """``sum_i cu_i 1{y_i = j} cols_i + cl_i 1{y_i - 1 = j} cols_i`` as an (m, k) array."""
    out = np.empty((m, cols.shape[1]))
    for j in range(cols.shape[1]):
        out[:, j] = (np.bincount(y[up], cu[up] * cols[up, j], minlength=m)[:m]
                     + np.bincount(y[lo] - 1, cl[lo] * cols[lo, j], minlength=m)[:m])
    return out


def group_matrix(rows):
    """Sparse (n_groups, n) matrix with each row's weight (1 without weights) in its group."""
    n = len(rows.groups)
    w = np.ones(n) if rows.weights is None else rows.weights
    return sparse.csr_matrix((w, (rows.groups, np.arange(n))), shape=(rows.n_groups, n))


def threshold_matrices(rows):
    """Sparse (n_groups * m, n) matrices adding weighted rows into (group, threshold) cells:
    the upper end (rows below the top category, threshold ``y_i``) and the lower end (rows
    above the bottom one, threshold ``y_i - 1``)."""
    m, y, g = rows.n_levels - 1, rows.codes, rows.groups
    n = len(y)
    w = np.ones(n) if rows.weights is None else rows.weights
    out = []
    for keep, shift in ((y < m, 0), (y > 0, -1)):
        i = np.flatnonzero(keep)
        out.append(sparse.csr_matrix((w[i], (g[i] * m + y[i] + shift, i)), shape=(rows.n_groups * max(m, 1), n)))
    return tuple(out)


def node_scores(rows, Zw, thresholds, T, nodes, s1_groups):
    """Score vector of each group at each node, shape (n_groups, n_nodes, n_params).

    ``Zw`` is :func:`group_matrix`, ``thresholds`` :func:`threshold_matrices`, ``T`` the
    per-row terms at the nodes (arrays (n, Q)), ``nodes`` (n_groups, Q) and ``s1_groups``
    the weighted group sums of ``d log P / d shift`` at the nodes.
    """
    G, Q = nodes.shape
    m, p = rows.n_levels - 1, rows.X.shape[1]
    out = np.empty((G, Q, m + p + 1))
    th = thresholds[0] @ T["u"] + thresholds[1] @ T["l"]  # (G * m, Q)
    out[:, :, :m] = th.reshape(G, m, Q).transpose(0, 2, 1)
    s1 = -(T["u"] + T["l"])
    for j in range(p):
        out[:, :, m + j] = Zw @ (s1 * rows.X[:, j:j + 1])
    out[:, :, -1] = s1_groups * nodes
    return out


def outer_term(pi, scores):
    """``sum_g [sum_k pi_gk s_gk s_gk' - sbar_g sbar_g']`` with ``sbar_g = sum_k pi_gk s_gk``."""
    mean = np.einsum("gk,gka->ga", pi, scores)
    return np.einsum("gk,gka,gkb->ab", pi, scores, scores) - mean.T @ mean
