"""Cost of one residual-panel update: ``residual_diagnostics`` at n = 100,000.

Run: ``.venv/bin/python bench/residual_speed.py``.

A logit fit with two predictors and four levels; each timing is the median of repeated
calls with a fixed seed.  The first call for a fit prepares the bins and least-squares terms
of each variable (cached per result); later calls, as after a threshold edit, reuse them.
The machine is shared and noisy, so read medians and ratios rather than single numbers.
"""
from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
import ordwidgets as ow  # noqa: E402


def median_ms(call, repeats=15):
    """Median wall and CPU milliseconds per call (CPU time is less sensitive to load)."""
    wall, cpu = [], []
    for _ in range(repeats):
        w0, c0 = time.perf_counter(), time.process_time()
        call()
        wall.append(time.perf_counter() - w0)
        cpu.append(time.process_time() - c0)
    return f"{1000 * statistics.median(wall):6.1f} ms wall, {1000 * statistics.median(cpu):6.1f} ms CPU"


def main(n=100_000):
    rng = np.random.default_rng(0)
    x, z = rng.normal(size=n), rng.normal(size=n)
    y = np.searchsorted([-1.0, 0.3, 1.6], 0.8 * x - 0.5 * z + rng.logistic(size=n))
    res = ow.fit("y ~ x + z", pd.DataFrame({"y": y, "x": x, "z": z}))
    edited = res.thresholds.to_numpy() + [0.2, 0.0, -0.1]
    start = time.perf_counter()
    res.residual_diagnostics(x="x", seed=1)
    print(f"n = {n:,}; first call (prepares variables): {1000 * (time.perf_counter() - start):.1f} ms")
    print(f"surrogate_residuals, 1 draw:                           {median_ms(lambda: res.surrogate_residuals(seed=1))}")
    for draws in (1, 5):
        took = median_ms(lambda: res.residual_diagnostics(x="x", thresholds=edited, draws=draws, seed=1))
        print(f"residual_diagnostics, {draws} draw(s), edited thresholds: {took}")


if __name__ == "__main__":
    main()
