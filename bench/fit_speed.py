"""Fit speed of ordwidgets against a generic optimiser and against the X'WX floor.

Run: ``.venv/bin/python bench/fit_speed.py`` (``--quick`` for a smaller run).

All timings in one run on the same data: n = 200,000 rows, 10 predictors, 5 levels, logit.
- ours: ``ow.fit`` end to end (formula, checks, Newton, standard errors);
- extended: ``ow.fit`` with two non-parallel predictors and one scale effect on the same rows;
- generic: scipy L-BFGS-B on the same log-likelihood with an analytic gradient coded in
  plain numpy, thresholds parameterised as first value + log increments so the optimiser is
  unconstrained (well-conditioned data; no standard errors, which would cost it a Hessian);
- L-BFGS-B on our kernel: the same optimiser on ordwidgets' own segmented gradient, which
  isolates what Newton's method buys over a quasi-Newton method;
- floor: one weighted Gram product ``X'WX`` in numpy, the least any Newton step must do.
Minimum over repeats (the least disturbed run; medians of ours and the floor too; the machine is shared and noisy), with the
load average printed beside them: read the ratios, which come from the same run.
Then n = 1,000,000: fit time and peak traced memory relative to the design matrix.
"""
from __future__ import annotations

import argparse
import os
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import optimize, special

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
import ordwidgets as ow  # noqa: E402
from ordwidgets.core.engine import closed_form_thresholds  # noqa: E402
from ordwidgets.core.objective import sort_by_category  # noqa: E402
from ordwidgets.core.sorted_design import SortedDesign  # noqa: E402


def make_data(n, p=10, seed=0):
    """Correlated, well-conditioned predictors; logistic latent errors; five levels."""
    rng = np.random.default_rng(seed)
    Z = rng.normal(size=(n, p))
    X = Z + 0.3 * Z[:, [0]]
    beta = np.linspace(-0.5, 0.5, p)
    y = np.searchsorted([-1.5, -0.5, 0.5, 1.5], X @ beta + rng.logistic(size=n))
    df = pd.DataFrame(X, columns=[f"x{i}" for i in range(p)])
    df["grade"] = y
    return df, X, y


def best_time(fn, repeats):
    """Smallest wall time of ``repeats`` calls (the run least disturbed by other jobs)."""
    return wall_times(fn, repeats).min()


def wall_times(fn, repeats):
    """Wall times of ``repeats`` calls (seconds)."""
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return np.array(times)


def _unpack(z, m):
    return np.concatenate([np.cumsum(np.concatenate([[z[0]], np.exp(z[1:m])])), z[m:]])


def _chain(g, z, m):
    """Gradient in (first threshold, log increments, effects) from the natural gradient."""
    gz = g.copy()
    gz[:m] = np.cumsum(g[:m][::-1])[::-1]  # d theta_k / d z_j = 1 for k >= j
    gz[1:m] *= np.exp(z[1:m])
    return gz


def _start(y, J, p):
    theta0 = closed_form_thresholds("logit", np.bincount(y, minlength=J))
    return np.concatenate([[theta0[0]], np.log(np.diff(theta0)), np.zeros(p)])


def plain_negll(z, X, y, m):
    """Negative log-likelihood and analytic gradient written directly in numpy/scipy."""
    params = _unpack(z, m)
    theta = np.concatenate([[-np.inf], params[:m], [np.inf]])
    eta = X @ params[m:]
    u, lo = theta[y + 1] - eta, theta[y] - eta
    Fu, Fl = special.expit(u), special.expit(lo)
    P = Fu - Fl
    fu, fl = Fu * (1 - Fu), Fl * (1 - Fl)
    ru, rl = fu / P, fl / P
    g = np.zeros(len(params))
    g[:m] = (np.bincount(y, weights=ru, minlength=m + 2)[:m]
             - np.bincount(y, weights=rl, minlength=m + 2)[1:m + 1])
    g[m:] = -(X.T @ (ru - rl))
    return -np.log(P).sum(), -_chain(g, z, m)


def generic_fit(X, y, J=5):
    """The generic route: L-BFGS-B with an analytic gradient coded in plain numpy."""
    res = optimize.minimize(plain_negll, _start(y, J, X.shape[1]), args=(X, y, J - 1), jac=True,
                            method="L-BFGS-B", options={"maxiter": 10_000, "gtol": 1e-6})
    return -res.fun, res.nit


def kernel_lbfgs_fit(X, y, J=5):
    """L-BFGS-B on ordwidgets' own sorted, segmented gradient: isolates the optimiser."""
    order, bounds = sort_by_category(y, J)
    d = SortedDesign(np.asfortranarray(X[order]), bounds)
    m = J - 1

    def negll(z):
        ll, g, _ = d.sums("logit", _unpack(z, m), order=1)
        return -ll, -_chain(g, z, m)

    res = optimize.minimize(negll, _start(y, J, X.shape[1]), jac=True, method="L-BFGS-B",
                            options={"maxiter": 10_000, "gtol": 1e-6})
    return -res.fun, res.nit


def floor(X, w):
    return (X * w[:, None]).T @ X


def main(quick=False):
    n = 50_000 if quick else 200_000
    df, X, y = make_data(n)
    formula = "grade ~ " + " + ".join(f"x{i}" for i in range(10))
    extended = dict(nonparallel=["x1", "x2"], scale_by=["x3"])
    res = ow.fit(formula, df)
    ext = ow.fit(formula, df, **extended)
    w = np.random.default_rng(1).random(n)
    load = os.getloadavg()[0]
    ours = wall_times(lambda: ow.fit(formula, df), 7)
    t_ours = ours.min()
    t_ext = best_time(lambda: ow.fit(formula, df, **extended), 5)
    t_generic = best_time(lambda: generic_fit(X, y), 3)
    t_kernel = best_time(lambda: kernel_lbfgs_fit(X, y), 3)
    floors = wall_times(lambda: floor(X, w), 21)
    t_floor = floors.min()
    ll_generic, nit = generic_fit(X, y)
    ll_kernel, nit_k = kernel_lbfgs_fit(X, y)
    print(f"n = {n:,}, p = 10, J = 5, logit (minimum of repeats; load average {load:.1f} -> "
          f"{os.getloadavg()[0]:.1f} on {os.cpu_count()} cores)")
    print(f"  ours      {t_ours * 1e3:8.1f} ms  (end to end, {res.iterations} Newton steps, loglik {res.loglik:.4f})")
    print(f"  extended  {t_ext * 1e3:8.1f} ms  (x1, x2 non-parallel, scale x3: {ext.iterations} Newton steps, "
          f"loglik {ext.loglik:.4f})")
    print(f"  generic   {t_generic * 1e3:8.1f} ms  (L-BFGS-B + plain numpy gradient, {nit} iterations, "
          f"loglik {ll_generic:.4f})")
    print(f"  L-BFGS-B on our kernel {t_kernel * 1e3:6.1f} ms  ({nit_k} iterations, loglik {ll_kernel:.4f})")
    print(f"  floor     {t_floor * 1e3:8.2f} ms  (one X'WX)")
    print(f"  generic / ours = {t_generic / t_ours:.2f}   kernel L-BFGS-B / ours = {t_kernel / t_ours:.2f}   "
          f"ours / floor = {t_ours / t_floor:.1f} floors   extended / ours = {t_ext / t_ours:.2f}")
    print(f"  medians: ours {np.median(ours) * 1e3:.1f} ms, floor {np.median(floors) * 1e3:.2f} ms, "
          f"ours / floor = {np.median(ours) / np.median(floors):.1f} floors")
    big = 200_000 if quick else 1_000_000
    df, X, y = make_data(big, seed=2)
    del X, y
    t_big = best_time(lambda: ow.fit(formula, df), 3)
    tracemalloc.start()
    ow.fit(formula, df)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    design_bytes = big * 10 * 8
    print(f"n = {big:,}: fit {t_big:.2f} s; peak traced memory {peak / 2**20:.0f} MiB "
          f"= {peak / design_bytes:.2f}x the design matrix ({design_bytes / 2**20:.0f} MiB)")


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes for a smoke run")
    main(**vars(ap.parse_args()))
