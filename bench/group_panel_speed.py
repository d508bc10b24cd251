"""Group-effects panel and the random part in the dashboard at n = 100,000 rows, 1,000 groups.

Run: ``.venv/bin/python bench/group_panel_speed.py [n] [groups]``.  On simulated data (five
levels, five numbers, one grouping column with a true SD of 0.7, default quadrature) prints
the median and minimum of:

* panel draw: building a ``GroupEffectsPanel`` (sorted effects, intervals, marks), with the
  SD's profile interval handed to a background thread (what the dashboard does);
* pick a group: ``state.group = label`` until the group panel, explorer, threshold and
  residual panels have redrawn (the explorer showing "this group");
* threshold edit: the marginal log-likelihood recomputed (no refit) and every panel redrawn;
* link switch: the random-intercept refit plus the redraws ("redrawn"), and until the
  background work (residual refresh, the SD's profile interval) is done, against the same
  switch of the plain fit (ratio of the redrawn times);

and the load average, since the machine is shared.  One run; ratios within it.
"""
from __future__ import annotations

import os
import sys
import time
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pandas as pd

import ordwidgets as ow
from ordwidgets.widgets.groups import GroupEffectsPanel


def simulate(n, groups, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 5))
    g = rng.integers(0, groups, n)
    u = rng.normal(0, 0.7, groups)
    eta = X @ np.array([0.5, -0.3, 0.2, 0.0, 0.4]) + u[g]
    df = pd.DataFrame(X, columns=[f"x{k}" for k in range(5)])
    df["rater"] = [f"R{k:04d}" for k in g]
    df["grade"] = pd.Categorical.from_codes(np.digitize(eta + rng.logistic(size=n), [-2.0, -0.7, 0.7, 2.0]),
                                            categories=list("abcde"), ordered=True)
    return df


def timings(action, repeat):
    out = []
    for i in range(repeat):
        start = time.perf_counter()
        action(i)
        out.append(time.perf_counter() - start)
    return float(np.median(out)), float(np.min(out))


def show(label, med_min, unit=1e3, name="ms"):
    print(f"{label:<44} median {med_min[0] * unit:9.1f} {name}   min {med_min[1] * unit:9.1f} {name}")


def main(n=100_000, groups=1000):
    print(f"n = {n:,} rows, {groups:,} groups; load average {os.getloadavg()}")
    df = simulate(n, groups)
    formula = "grade ~ x0 + x1 + x2 + x3 + x4"
    start = time.perf_counter()
    mixed = ow.fit(formula, df, random_intercepts=["rater"])
    print(f"random-intercept fit: {time.perf_counter() - start:.2f} s")
    executor = ThreadPoolExecutor(2)
    state = ow.FitState.from_fit(mixed, executor=executor)
    panels = [ow.ProbabilityExplorer(state), ow.ThresholdPanel(state), ow.ResidualPanel(state)]
    state.wait()
    show("panel draw (profile interval in background)", timings(lambda i: GroupEffectsPanel(state).close(), 3))
    state.wait()
    group_panel = GroupEffectsPanel(state)
    state.wait()
    labels = list(group_panel.table.index)
    state.group = labels[0]
    state.group_kind = "conditional"
    show("pick a group (all panels redrawn)", timings(lambda i: setattr(state, "group", labels[(7 * i + 3) % groups]), 9))
    theta0 = state.thresholds[0]
    show("threshold edit (marginal loglik, redraws)",
         timings(lambda i: state.set_threshold(0, theta0 - 0.05 * (1 + i % 2)), 6))
    state.wait()
    state.reset_thresholds()
    state.wait()
    switches = {}
    for name, st in (("random-intercept", state), ("plain", plain_state(formula, df, executor))):
        links = ("probit", "logit")
        drawn = timings(lambda i: setattr(st, "link", links[i % 2]), 1)
        idle = timings(lambda i: (setattr(st, "link", links[(i + 1) % 2]), st.wait()), 1)
        show(f"link switch, {name} fit: redrawn", drawn, 1, "s ")
        show(f"link switch, {name} fit: background work done", idle, 1, "s ")
        switches[name] = drawn[0]
    print(f"ratio random-intercept / plain link switch (redrawn): {switches['random-intercept'] / switches['plain']:.1f}x")
    print(f"load average at the end {os.getloadavg()}")
    for p in panels + [group_panel]:
        p.close()
    state.close()
    executor.shutdown()


def plain_state(formula, df, executor):
    """The plain fit of the same rows with the same three panels."""
    st = ow.FitState.from_fit(ow.fit(formula, df), executor=executor)
    st.bench_panels = [ow.ProbabilityExplorer(st), ow.ThresholdPanel(st), ow.ResidualPanel(st)]
    st.wait()
    return st


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
