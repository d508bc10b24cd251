"""Random-intercept fit time against the plain fit on the same rows (same run).

n = 100,000 rows, 1,000 groups, p = 5 predictors, J = 5 levels, logit, default quadrature.
Prints the median and minimum of several repeats of each and their ratio (issue target:
<= 15x, well under 10 s), the profile-likelihood interval of the SD, and the load average
before and after.  Run as ``OPENBLAS_NUM_THREADS=1 python bench/random_intercept_speed.py
[repeats]`` (one BLAS thread: the machine has 2 shared cores).  The machine is shared:
quote the ratio measured in one run.
"""
import os
import statistics
import sys
import time
import warnings

import numpy as np
import pandas as pd

import ordwidgets as ow


def make(n=100_000, n_groups=1_000, p=5, sigma=0.8, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    g = rng.integers(0, n_groups, n)
    lat = X @ np.linspace(-0.6, 0.6, p) + rng.normal(0, sigma, n_groups)[g] + rng.logistic(size=n)
    df = pd.DataFrame(X, columns=[f"x{j}" for j in range(p)])
    df["grp"] = g
    df["y"] = pd.Categorical(np.digitize(lat, [-1.5, -0.5, 0.5, 1.5]), ordered=True)
    return df, " + ".join(f"x{j}" for j in range(p))


def timed(fns, repeats):
    """Median, minimum and last result of each of ``fns``, run in turn within each repeat
    (interleaved, so that a change of the machine's load falls on all of them alike)."""
    times, results = [[] for _ in fns], [None] * len(fns)
    for _ in range(repeats):
        for k, fn in enumerate(fns):
            t = time.perf_counter()
            results[k] = fn()
            times[k].append(time.perf_counter() - t)
    return [(statistics.median(ts), min(ts), res) for ts, res in zip(times, results)]


def load():
    return ", ".join(f"{v:.2f}" for v in os.getloadavg())


def main(repeats=3):
    print(f"load average before: {load()}")
    df, rhs = make()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        (t_plain, m_plain, _), (t_mixed, m_mixed, mixed) = timed(
            [lambda: ow.fit(f"y ~ {rhs}", df), lambda: ow.fit(f"y ~ {rhs}", df, random_intercepts=["grp"])], repeats)
    print(f"n={len(df):,} groups=1,000 p=5 J=5 logit, median (minimum) of {repeats}, interleaved")
    print(f"plain fit          {t_plain * 1e3:8.1f} ms ({m_plain * 1e3:.1f})")
    print(f"random intercepts  {t_mixed * 1e3:8.1f} ms ({m_mixed * 1e3:.1f})  ({mixed.iterations} Newton steps, "
          f"quadrature {mixed.options['quadrature']} points, sd {mixed.sds[0]:.4f} (true 0.8))")
    print(f"ratio              {t_mixed / t_plain:8.1f}x (of the minimums {m_mixed / m_plain:.1f}x)")
    t = time.perf_counter()
    vc = mixed.variance_components
    print(f"profile interval of the SD: {time.perf_counter() - t:.2f} s "
          f"[{vc['lower'].iloc[0]:.4f}, {vc['upper'].iloc[0]:.4f}]")
    print(f"load average after: {load()}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 3)
