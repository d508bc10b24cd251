"""Random-intercept fit time against the plain fit on the same rows (same run).

n = 100,000 rows, 1,000 groups, p = 5 predictors, J = 5 levels, logit, default quadrature.
Prints the median of several repeats of each and their ratio (issue target: <= 15x, well
under 10 s).  The machine is shared: quote the ratio measured in one run.
"""
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


def timed(fn, repeats):
    out = []
    for _ in range(repeats):
        t = time.perf_counter()
        res = fn()
        out.append(time.perf_counter() - t)
    return statistics.median(out), res


def main(repeats=3):
    df, rhs = make()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        t_plain, plain = timed(lambda: ow.fit(f"y ~ {rhs}", df), repeats)
        t_mixed, mixed = timed(lambda: ow.fit(f"y ~ {rhs}", df, random_intercepts=["grp"]), repeats)
    print(f"n={len(df):,} groups=1,000 p=5 J=5 logit, median of {repeats}")
    print(f"plain fit          {t_plain * 1e3:8.1f} ms")
    print(f"random intercepts  {t_mixed * 1e3:8.1f} ms  ({mixed.iterations} Newton steps, "
          f"quadrature {mixed.options['quadrature']} points, sd {mixed.sds[0]:.4f} (true 0.8))")
    print(f"ratio              {t_mixed / t_plain:8.1f}x")
    t = time.perf_counter()
    vc = mixed.variance_components
    print(f"profile interval of the SD: {time.perf_counter() - t:.2f} s "
          f"[{vc['lower'].iloc[0]:.4f}, {vc['upper'].iloc[0]:.4f}]")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 3)
