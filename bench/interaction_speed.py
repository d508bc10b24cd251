"""Interaction speed of the dashboard at n = 100,000 (medians, and ratios across n).

Run: ``.venv/bin/python bench/interaction_speed.py [n]``.  Prints, for simulated data
(four levels, two numbers and one factor):

* threshold edit: ``state.set_threshold`` until every panel has processed it, with the
  residual refresh handed to the background executor (what the dashboard does), and the
  same with everything inline (what the tests do);
* residual refresh: the surrogate draws, trend, QQ points and tests computed for the edit;
* link switch: refit plus all redraws; the proportional-odds tests of the new fit run in the
  background (busy indicator) and are waited for, untimed, before the next switch;
* link switch until idle: the same with the background tests (per-term LR refits, Brant)
  timed until they are on screen;
* scaling: the ratio of the inline edit time at n to that at n / 4 (4.0 means linear).

Bars (issue 5): threshold edit < 50 ms, link switch < 1 s at n = 100,000.
"""
from __future__ import annotations

import os
import sys
import time
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pandas as pd

import ordwidgets as ow
from ordwidgets.widgets.residuals import residual_view

FORMULA = "rating ~ age + dose + C(group)"


def simulate(n, seed=0):
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({"age": rng.uniform(20, 70, n), "dose": rng.normal(0, 1, n),
                       "group": rng.choice(["a", "b", "c"], n)})
    eta = 0.04 * df.age + 0.8 * df.dose + np.where(df.group == "b", 0.6, 0.0)
    df["rating"] = pd.Categorical.from_codes(np.digitize(eta + rng.logistic(size=n), [0.9, 2.0, 3.2]),
                                             categories=["low", "mid", "high", "top"], ordered=True)
    return df


def median_ms(action, repeat, settle=None):
    """Median time of ``action(i)``; ``settle()`` (not timed) runs after each call."""
    times = []
    for i in range(repeat):
        start = time.perf_counter()
        action(i)
        times.append(time.perf_counter() - start)
        if settle is not None:
            settle()
    return 1000 * float(np.median(times))


def wait_idle(state):
    """Wait until the background work of ``state`` has finished."""
    while state.busy:
        time.sleep(0.005)


def edits(state, settle=None, repeat=30):
    base = state.theta.copy()
    return median_ms(lambda i: state.set_threshold(1, base[1] + 0.002 * (i % 7 - 3)), repeat, settle)


def measure(n):
    data = simulate(n)
    out = {}
    inline = ow.FitState(data=data, formula=FORMULA)
    dash = ow.dashboard(inline, background=False)
    out["edit_inline"] = edits(inline)
    panel = dash.residual_panel
    out["residual_refresh"] = median_ms(lambda i: residual_view(
        panel.tools, inline.fit, inline.theta, 1, 0, panel.x_values()[0]), 10)
    dash.close()
    background = ow.FitState(data=data, formula=FORMULA, executor=ThreadPoolExecutor(2))
    dash = ow.dashboard(background)
    wait_idle(background)
    out["edit_background"] = edits(background, settle=lambda: wait_idle(background))
    links = ["probit", "logit"]
    out["link_switch"] = median_ms(lambda i: setattr(background, "link", links[i % 2]), 6,
                                   settle=lambda: wait_idle(background))

    def switch_until_idle(i):
        background.link = links[i % 2]
        wait_idle(background)

    out["link_switch_all"] = median_ms(switch_until_idle, 6)
    dash.close()
    background.close()
    return out


def main():
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 100_000
    print(f"ordwidgets interaction speed, load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    big, small = measure(n), measure(n // 4)
    print(f"n = {n:,}:")
    print(f"  threshold edit, residual refresh in background: {big['edit_background']:7.1f} ms  (bar 50 ms)")
    print(f"  threshold edit, everything inline:              {big['edit_inline']:7.1f} ms")
    print(f"  residual refresh (draws, trend, QQ, tests):     {big['residual_refresh']:7.1f} ms")
    print(f"  link switch (refit + all redraws):              {big['link_switch']:7.1f} ms  (bar 1000 ms)")
    print(f"  link switch until the proportional-odds tests "
          f"are on screen: {big['link_switch_all']:7.1f} ms")
    for key in ("edit_inline", "edit_background", "residual_refresh", "link_switch", "link_switch_all"):
        print(f"  ratio {key} n / (n/4): {big[key] / small[key]:.2f}  (4.0 = linear)")


if __name__ == "__main__":
    main()
