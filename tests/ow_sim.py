"""Simulated data for the widget and state tests (known effects, hostile labels)."""
import numpy as np
import pandas as pd
import pytest

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


def manual_eta(res, frame):
    """``x'beta`` built by hand from the coefficient names (no formula machinery).

    Handles plain numeric columns and treatment-coded ``C(var)[T.level]`` columns: an
    outside reference for the linear predictor the widgets compute through the fit.
    """
    eta = np.zeros(len(frame))
    for name, beta in res.coefficients.items():
        if name.startswith("C(") and "[T." in name:
            var, level = name[2:name.index(")")], name[name.index("[T.") + 3:-1]
            eta += beta * (frame[var].astype(str).to_numpy() == level)
        else:
            eta += beta * frame[name].to_numpy(float)
    return eta


def scenario_rows(state, which="scenario", n=1):
    """A plain frame repeating a scenario ``n`` times."""
    values = getattr(state, which)
    return pd.DataFrame({k: [v] * n for k, v in values.items()}, index=range(n))


def html_values(widget):
    """Every HTML string of a widget tree (HTML widgets only)."""
    import ipywidgets as w

    out = [widget.value] if isinstance(widget, w.HTML) else []
    for child in getattr(widget, "children", ()):
        out += html_values(child)
    return out


@pytest.fixture(scope="module")
def data():
    """The simulated frame with hostile labels (shared by a module's tests)."""
    return simulate()


@pytest.fixture
def make_panel(data):
    """Factory of panels on fresh states of the simulated data; closes them afterwards."""
    import ordwidgets as ow

    made = []

    def make(cls, **state_kwargs):
        made.append(cls(ow.FitState(data=data, formula=FORMULA, **state_kwargs)))
        return made[-1]

    yield make
    for panel in made:
        panel.close()
