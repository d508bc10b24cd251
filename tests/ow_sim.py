"""Simulated data for the widget and state tests (known effects, hostile labels)."""
import numpy as np
import pandas as pd

HOSTILE = ["<script>alert(1)</script>", "<b>bold</b>", "plain"]


def simulate(n=600, seed=0, hostile=True):
    """Four-level response from a logistic latent model with two numbers and one factor."""
    rng = np.random.default_rng(seed)
    groups = HOSTILE if hostile else ["a", "b", "c"]
    df = pd.DataFrame({"age": rng.uniform(20, 70, n), "dose": rng.normal(0, 1, n),
                       "group": rng.choice(groups, n)})
    eta = 0.04 * df.age + 0.8 * df.dose + np.where(df.group == groups[1], 0.6, 0.0)
    cut = np.digitize(eta + rng.logistic(size=n), [0.9, 2.0, 3.2])
    labels = ["<i>low</i>", "mid", "high", "top"] if hostile else ["low", "mid", "high", "top"]
    df["rating"] = pd.Categorical.from_codes(cut, categories=labels, ordered=True)
    return df


FORMULA = "rating ~ age + dose + C(group)"
