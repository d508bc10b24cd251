"""Average marginal effects and delta-method intervals of predicted probabilities."""
import dataclasses

import numpy as np
import pandas as pd
import pytest
from scipy import special, stats

import ordwidgets as ow


def mixed_data(n=300, seed=0):
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({"x": rng.normal(size=n), "g": rng.integers(0, 2, n), "f": rng.choice(["a", "b", "c"], n)})
    lat = 0.8 * df.x - 0.6 * df.g + np.where(df.f == "c", 0.7, 0.0) + rng.logistic(size=n) * np.exp(0.2 * df.x)
    df["y"] = np.searchsorted([-1.0, 0.2, 1.3], lat)
    return df


FITS = {
    "parallel": dict(),
    "extended": dict(nonparallel=["g"], scale_by=["x"]),
}


def _reference_ame(res, df, h=1e-5):
    """Averages of predictions on edited data frames (public predict, formulaic designs)."""
    mean = lambda frame: res.predict(frame).to_numpy().mean(axis=0)  # noqa: E731
    return {
        "x": (mean(df.assign(x=df.x + h)) - mean(df.assign(x=df.x - h))) / (2 * h),
        "g": mean(df.assign(g=1)) - mean(df.assign(g=0)),
        "C(f)[T.b]": mean(df.assign(f="b")) - mean(df.assign(f="a")),
        "C(f)[T.c]": mean(df.assign(f="c")) - mean(df.assign(f="a")),
    }


@pytest.mark.parametrize("kind", FITS)
def test_marginal_effects_match_differences_of_averaged_predictions(kind):
    df = mixed_data(seed=1)
    res = ow.fit("y ~ x + g + C(f)", df, **FITS[kind])
    ame = res.average_marginal_effects()
    assert list(ame.index) == ["x", "g", "C(f)[T.b]", "C(f)[T.c]"]
    for name, ref in _reference_ame(res, df).items():
        np.testing.assert_allclose(ame.loc[name, "effect"].to_numpy(), ref, atol=1e-6)
    np.testing.assert_allclose(ame["effect"].sum(axis=1), 0.0, atol=1e-12)  # probabilities sum to one
    assert ame.attrs["kind"] == {"x": "derivative", "g": "change 0 -> 1", "C(f)[T.b]": "change 0 -> 1",
                                 "C(f)[T.c]": "change 0 -> 1"}


def _numeric_jacobian(func, res, step=1e-5):
    """Central differences of ``func(result)`` in each parameter (results rebuilt with replace)."""
    cols = []
    for k in range(res.n_params):
        up, down = res.params.copy(), res.params.copy()
        up[k] += step
        down[k] -= step
        cols.append((func(dataclasses.replace(res, params=up)) - func(dataclasses.replace(res, params=down))) / (2 * step))
    return np.stack(cols, axis=-1)


@pytest.mark.parametrize("kind", FITS)
def test_marginal_effect_standard_errors_follow_the_delta_method(kind):
    # Delta method (Oehlert 1992, Am. Stat. 46:27-29): SE = sqrt(J V J'), with J from numerical
    # differences of the reference averages with respect to the parameters.
    df = mixed_data(n=200, seed=2)
    res = ow.fit("y ~ x + g + C(f)", df, **FITS[kind])
    ame = res.average_marginal_effects()
    J = _numeric_jacobian(lambda r: np.array(list(_reference_ame(r, df, h=1e-4).values())), res)
    se = np.sqrt(np.einsum("cjp,pq,cjq->cj", J, res.cov, J))
    np.testing.assert_allclose(ame["std_error"].to_numpy(), se, rtol=1e-4, atol=1e-8)


@pytest.mark.parametrize("kind", FITS)
@pytest.mark.parametrize("what", ["probabilities", "cumulative"])
def test_prediction_intervals_are_logit_scale_delta_intervals_inside_unit_interval(kind, what):
    df = mixed_data(n=200, seed=3)
    res = ow.fit("y ~ x + g + C(f)", df, **FITS[kind])
    new = df.head(6)
    out = res.predict(new, kind=what, level=0.9)
    est = res.predict(new, kind=what).to_numpy()
    np.testing.assert_allclose(out["estimate"].to_numpy(), est, atol=1e-12)
    J = _numeric_jacobian(lambda r: r.predict(new, kind=what).to_numpy(), res)
    se = np.sqrt(np.einsum("njp,pq,njq->nj", J, res.cov, J))
    z = stats.norm.ppf(0.95)
    inner = slice(None, -1) if what == "cumulative" else slice(None)
    with np.errstate(divide="ignore", invalid="ignore"):  # the last cumulative column is 1
        half = z * se / (est * (1 - est))
        refs = {part: special.expit(special.logit(est) + sign * half) for part, sign in (("lower", -1), ("upper", 1))}
    for part, ref in refs.items():
        np.testing.assert_allclose(out[part].to_numpy()[:, inner], ref[:, inner], rtol=1e-5)
    assert ((out["lower"] > 0) & (out["upper"] < 1)).to_numpy()[:, inner].all()
    if what == "cumulative":
        assert (out["lower"].iloc[:, -1] == 1).all() and (out["upper"].iloc[:, -1] == 1).all()


def test_prediction_interval_coverage_is_nominal():
    # Published property of the delta method (asymptotic coverage); the number of covering
    # replicates is binomial and is checked against its 99.9 % range.
    rng = np.random.default_rng(4)
    reps, covered, x0 = 150, 0, pd.DataFrame({"x": [1.0]})
    truth = stats.logistic.cdf(np.array([-0.5, 0.8]) - 0.6) @ np.array([1.0, 0.0])  # P(Y = 0 | x = 1)
    for _ in range(reps):
        x = rng.normal(size=250)
        y = np.searchsorted([-0.5, 0.8], 0.6 * x + rng.logistic(size=250))
        out = ow.fit("y ~ x", pd.DataFrame({"y": y, "x": x})).predict(x0, level=0.95)
        covered += out[("lower", "0")].iloc[0] <= truth <= out[("upper", "0")].iloc[0]
    lo, hi = stats.binom.interval(0.999, reps, 0.95)
    assert lo <= covered <= hi


def test_intervals_for_other_kinds_are_refused():
    df = mixed_data(n=80, seed=5)
    res = ow.fit("y ~ x", df)
    with pytest.raises(ValueError, match="kind='probabilities' or 'cumulative'"):
        res.predict(df, kind="latent", level=0.9)


@pytest.mark.parametrize("options", [dict(), dict(scale_by=["x"]), dict(nonparallel=["x"], scale_by=["x"])])
def test_analytic_marginal_effect_of_a_number_equals_scipy_differentiate(options):
    # Reference: scipy.differentiate.derivative of the averaged public predictions with x
    # shifted by t, at t = 0 (x in the location, the scale and per threshold in turn).
    from scipy import differentiate

    df = mixed_data(n=250, seed=5)
    res = ow.fit("y ~ x + g + C(f)", df, **options)
    ame = res.average_marginal_effects()

    def mean_prob(t, k):
        t = np.asarray(t, float)
        vals = [res.predict(df.assign(x=df.x + v)).to_numpy()[:, k].mean() for v in t.ravel()]
        return np.array(vals).reshape(t.shape)

    for k in range(len(res.levels)):
        ref = differentiate.derivative(lambda t: mean_prob(t, k), 0.0, initial_step=0.01).df
        assert ame.loc["x", "effect"].iloc[k] == pytest.approx(float(ref), abs=1e-9)
