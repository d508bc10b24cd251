"""Speed of the inference tools, each as a multiple of a plain fit on the same rows.

Run: ``nice .venv/bin/python bench/inference_speed.py [repeats]``.  Prints medians over
``repeats`` (default 3) of wall time, and each tool's ratio to the plain fit of the same data
measured in the same run (the machine is shared: ratios travel, seconds do not).

* proportional-odds table (LR refits per term, Brant, probability changes) at n = 100,000,
  five numbers, four levels; bar 1.5 s;
* the same table with a 97-level factor (one joint refit for the factor) at n = 20,000;
* profile intervals per parameter (bar: 4 plain fits per parameter), n = 10,000;
* average marginal effects with 97 dummies and ``predict(level=)`` for 40,000 rows;
* ``compare_links(res)`` (four refits, the fit's own link reused).
"""
from __future__ import annotations

import os
import sys
import time
import warnings

import numpy as np
import pandas as pd

import ordwidgets as ow


def numbers(n, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 5))
    y = np.digitize(X @ np.array([0.5, -0.3, 0.2, 0.0, 0.4]) + rng.logistic(size=n), [-1.0, 0.0, 1.2])
    df = pd.DataFrame(X, columns=[f"x{i}" for i in range(1, 6)])
    df["y"] = y
    return df, "y ~ x1 + x2 + x3 + x4 + x5"


def with_factor(n, seed=1, levels=97):
    rng = np.random.default_rng(seed)
    g = rng.integers(0, levels, n)
    effect = rng.normal(0, 0.3, levels)
    df = pd.DataFrame({"x": rng.normal(size=n), "z": rng.uniform(0, 1, n),
                       "site": pd.Categorical([f"s{v:02d}" for v in g])})
    lat = 0.6 * df.x - 0.4 * df.z + effect[g] + rng.logistic(size=n)
    df["y"] = np.digitize(lat, [-1.5, -0.3, 0.6, 1.6])
    return df, "y ~ x + z + site"


def median_s(action, repeat):
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        action()
        times.append(time.perf_counter() - start)
    return float(np.median(times))


def report(label, seconds, fit_seconds, bar=None):
    extra = f"  (bar {bar})" if bar else ""
    print(f"  {label:<52} {seconds:8.3f} s  = {seconds / fit_seconds:6.1f} plain fits{extra}")


def main():
    repeat = int(sys.argv[1]) if len(sys.argv) > 1 else 3
    warnings.simplefilter("ignore")
    print(f"ordwidgets inference speed, load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores, "
          f"medians of {repeat}")
    df, formula = numbers(100_000)
    t_fit = median_s(lambda: ow.fit(formula, df), repeat)
    res = ow.fit(formula, df)
    print(f"n = 100,000, 5 numbers, 4 levels: plain fit {t_fit:.3f} s")
    report("proportional-odds table (5 terms + overall)", median_s(res.proportional_odds_test, repeat), t_fit,
           "1.5 s")
    report("compare_links(res)", median_s(lambda: ow.compare_links(res), repeat), t_fit)

    df, formula = with_factor(20_000)
    t_fit = median_s(lambda: ow.fit(formula, df), repeat)
    res = ow.fit(formula, df)
    print(f"n = 20,000, two numbers and a 97-level factor ({res.n_params} parameters): plain fit {t_fit:.3f} s")
    report("proportional-odds table (3 terms + overall)", median_s(res.proportional_odds_test, repeat), t_fit)
    report("average marginal effects (98 columns)", median_s(res.average_marginal_effects, repeat), t_fit)
    big, _ = with_factor(40_000, seed=2)
    report("predict(40,000 rows, level=0.95)", median_s(lambda: res.predict(big, level=0.95), repeat), t_fit,
           "well under 1 s")

    df, formula = with_factor(10_000, seed=3, levels=12)
    t_fit = median_s(lambda: ow.fit(formula, df), repeat)
    res = ow.fit(formula, df)
    t_prof = median_s(lambda: res.intervals(method="profile"), 1)
    print(f"n = 10,000, two numbers and a 12-level factor ({res.n_params} parameters): plain fit {t_fit:.3f} s")
    report(f"profile intervals, per parameter ({res.n_params} parameters)", t_prof / res.n_params, t_fit,
           "4 plain fits")


if __name__ == "__main__":
    main()
