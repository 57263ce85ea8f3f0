"""First stages, reduced form and the basic tests against statsmodels and linearmodels.

Everything ``reportkit.estimation.estimate`` reports besides the main coefficients (which
tests/test_engine_vs_linearmodels.py covers) is recomputed by an independent library on
small invented designs (fixed seeds): one and two endogenous regressors, with and without
weights, fixed effects given to the references as dummy columns, each covariance type.

- first-stage and reduced-form coefficients and SEs: statsmodels OLS / WLS of the column
  on [constant, controls, dummies, instruments], cov_type nonrobust / HC1 / cluster;
- first-stage F with the main covariance: statsmodels' Wald test / q; the classical F:
  the textbook partial F from restricted and unrestricted sums of squared residuals;
- partial R-squared: linearmodels ``first_stage.diagnostics["partial.rsquared"]`` (the
  R-squared of the endogenous regressor on the instruments, both residualised on the
  exogenous regressors, with no constant: linearmodels/iv/results.py, ``diagnostics``);
- Sargan: linearmodels ``sargan`` (n (1 - e'M_Z e / e'e), the same formula);
- regression-based Durbin-Wu-Hausman: linearmodels ``wooldridge_regression`` and a
  statsmodels regression with the first-stage residuals added;
- Hansen J: linearmodels IVGMM ``j_stat`` with robust and clustered weights;
- binned first-stage data: the slope of each bin set is the first-stage coefficient.

Tolerance: 1e-10 relative on every statistic (both sides are exact linear algebra in
double precision on well-conditioned designs; the fixed effects are absorbed exactly for
one dimension and by alternating projections to 1e-13 for two). P-values are compared
at 1e-7 relative: they are tail probabilities of statistics that agree to 1e-10, and a
relative error in a statistic of size s moves a tail probability by up to about s times
that error.
"""

from __future__ import annotations

from functools import cache

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from helpers_design import ReferenceColumns, random_design, reference_columns
from linearmodels.iv import IV2SLS, IVGMM
from linearmodels.iv.results import IVResults
from scipy import stats
from statsmodels.regression.linear_model import RegressionResultsWrapper

from reportkit import results as rk
from reportkit.engine.design import Design
from reportkit.estimation import EstimationOutput, estimate

RTOL = 1e-10
P_RTOL = 1e-7

CASES: dict[str, dict] = {
    "p1_q2": {"seed": 101, "p": 1, "q": 2},
    "p1_q3_weights_fe": {"seed": 102, "p": 1, "q": 3, "n_fe": 1, "weighted": True},
    "p2_q3_fe": {"seed": 103, "p": 2, "q": 3, "c": 1, "n_fe": 1},
    "p2_q4_weights": {"seed": 104, "p": 2, "q": 4, "c": 3, "weighted": True},
    "p1_q2_two_fe": {"seed": 105, "p": 1, "q": 2, "n_fe": 2},
    "p2_q2_just_identified": {"seed": 106, "p": 2, "q": 2, "weighted": True},
}
OVERIDENTIFIED = [k for k, v in CASES.items() if v["q"] > v["p"]]
KINDS = ["classical", "robust", "cluster"]
SM_COV = {"classical": "nonrobust", "robust": "HC1", "cluster": "cluster"}
LM_COV = {"classical": "unadjusted", "robust": "robust", "cluster": "clustered"}


@cache
def design(case: str) -> Design:
    kw = dict(CASES[case])
    return random_design(kw.pop("seed"), **kw)


@cache
def columns(case: str) -> ReferenceColumns:
    return reference_columns(design(case))


@cache
def ours(case: str, kind: str) -> EstimationOutput:
    return estimate(
        design(case),
        covariance=kind,
        estimators=["ols", "2sls", "gmm"],
        confidence_level=0.95,
        labels={},
        crosscheck="never",
    )


def sm_fit(
    dep: pd.Series, regressors: pd.DataFrame, r: ReferenceColumns, kind: str
) -> RegressionResultsWrapper:
    """statsmodels OLS (or WLS with the design's weights) with the matching covariance."""
    model = (
        sm.OLS(dep, regressors) if r.weights is None else sm.WLS(dep, regressors, weights=r.weights)
    )
    kw = {"cov_kwds": {"groups": r.clusters}} if kind == "cluster" else {}
    return model.fit(cov_type=SM_COV[kind], **kw)


def lm_2sls(r: ReferenceColumns, kind: str, *, debiased: bool = True) -> IVResults:
    kw = {"clusters": r.clusters} if kind == "cluster" else {}
    model = IV2SLS(r.y, r.exog, r.endog, r.instruments, weights=r.weights)
    return model.fit(cov_type=LM_COV[kind], debiased=debiased, **kw)


def restriction(regressors: pd.DataFrame, names: list[str]) -> np.ndarray:
    """Rows of the identity picking ``names`` out of the regressor columns."""
    idx = [list(regressors.columns).index(nm) for nm in names]
    return np.eye(regressors.shape[1])[idx]


# --- the references' own small-sample conventions ----------------------------------------


@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("kind", ["robust", "cluster"])
def test_statsmodels_small_sample_factors(kind: str, weighted: bool) -> None:
    """statsmodels' HC1 uses n/(n-k); its cluster default (n-1)/(n-k) * G/(G-1).

    These are the factors the engine documents (reportkit/engine/covariance.py), so the
    statsmodels comparisons below test like against like. The raw sandwich is built by
    hand with numpy from the whitened regressors and residuals.
    """
    r = columns("p1_q3_weights_fe" if weighted else "p1_q2")
    regs = pd.concat([r.exog, r.instruments], axis=1)
    res = sm_fit(r.endog.iloc[:, 0], regs, r, kind)
    sw = np.ones(len(regs)) if r.weights is None else np.sqrt(r.weights)
    xw = regs.to_numpy() * sw[:, None]
    ew = (r.endog.iloc[:, 0].to_numpy() - regs.to_numpy() @ res.params.to_numpy()) * sw
    n, k = xw.shape
    bread = np.linalg.inv(xw.T @ xw)
    scores = xw * ew[:, None]
    if kind == "robust":
        meat, factor = scores.T @ scores, n / (n - k)
    else:
        codes = np.unique(r.clusters, return_inverse=True)[1]
        g = int(codes.max()) + 1
        sums = np.zeros((g, k))
        np.add.at(sums, codes, scores)
        meat, factor = sums.T @ sums, (n - 1) / (n - k) * g / (g - 1)
    np.testing.assert_allclose(
        res.cov_params().to_numpy(), factor * bread @ meat @ bread, rtol=RTOL
    )


# --- first stage ---------------------------------------------------------------------------


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("case", CASES)
def test_first_stage_coefficients(case: str, kind: str) -> None:
    r = columns(case)
    regs = pd.concat([r.exog, r.instruments], axis=1)
    names = list(r.instruments.columns)
    for j, fs in enumerate(ours(case, kind).first_stages):
        ref = sm_fit(r.endog.iloc[:, j], regs, r, kind)
        assert fs.endogenous == r.endog.columns[j]
        assert [c.instrument for c in fs.coefficients] == names
        est = np.array([c.estimate for c in fs.coefficients])
        se = np.array([c.std_error for c in fs.coefficients])
        np.testing.assert_allclose(est, ref.params[names].to_numpy(), rtol=RTOL)
        np.testing.assert_allclose(se, ref.bse[names].to_numpy(), rtol=RTOL)


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("case", CASES)
def test_first_stage_f_main_covariance(case: str, kind: str) -> None:
    """F with the main covariance = statsmodels' Wald statistic / q, same covariance."""
    r = columns(case)
    regs = pd.concat([r.exog, r.instruments], axis=1)
    names = list(r.instruments.columns)
    q = len(names)
    for j, fs in enumerate(ours(case, kind).first_stages):
        ref = sm_fit(r.endog.iloc[:, j], regs, r, kind)
        wald = ref.wald_test(restriction(regs, names), use_f=False, scalar=True)
        f = ref.f_test(restriction(regs, names))
        assert fs.f_main.distribution == "F"
        assert fs.f_main.statistic == pytest.approx(float(wald.statistic) / q, rel=RTOL)
        assert fs.f_main.statistic == pytest.approx(float(f.fvalue), rel=RTOL)
        # statsmodels' denominator df: n - k, or G - 1 with clusters (df_correction)
        assert fs.f_main.df == [float(q), float(f.df_denom)]
        assert fs.f_main.p_value == pytest.approx(float(f.pvalue), rel=P_RTOL)


@pytest.mark.parametrize("case", CASES)
def test_first_stage_classical_f_is_partial_f(case: str) -> None:
    """The classical F is the textbook partial F, whatever the main covariance."""
    r = columns(case)
    regs = pd.concat([r.exog, r.instruments], axis=1)
    q = r.instruments.shape[1]
    for j, fs in enumerate(ours(case, "cluster").first_stages):
        full = sm_fit(r.endog.iloc[:, j], regs, r, "classical")
        restricted = sm_fit(r.endog.iloc[:, j], r.exog, r, "classical")
        partial_f = ((restricted.ssr - full.ssr) / q) / (full.ssr / full.df_resid)
        assert fs.f_classical.statistic == pytest.approx(partial_f, rel=RTOL)
        assert fs.f_classical.df == [float(q), float(full.df_resid)]
        assert fs.f_classical.p_value == pytest.approx(
            float(stats.f.sf(partial_f, q, full.df_resid)), rel=P_RTOL
        )


@pytest.mark.parametrize("case", CASES)
def test_partial_r2_matches_linearmodels(case: str) -> None:
    r = columns(case)
    diag = lm_2sls(r, "classical").first_stage.diagnostics
    for fs in ours(case, "robust").first_stages:
        ref = float(diag.loc[fs.endogenous, "partial.rsquared"])
        assert fs.partial_r2 == pytest.approx(ref, rel=RTOL)


@pytest.mark.parametrize("case", CASES)
def test_classical_first_stage_f_matches_linearmodels(case: str) -> None:
    # linearmodels' diagnostics f.stat: Wald / q with the unadjusted covariance when fitted
    # with debiased=True (its docstring); a second, independent reference for the F
    r = columns(case)
    diag = lm_2sls(r, "classical").first_stage.diagnostics
    for fs in ours(case, "classical").first_stages:
        ref = float(diag.loc[fs.endogenous, "f.stat"])
        assert fs.f_main.statistic == pytest.approx(ref, rel=RTOL)


# --- reduced form -------------------------------------------------------------------------


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("case", CASES)
def test_reduced_form(case: str, kind: str) -> None:
    r = columns(case)
    regs = pd.concat([r.exog, r.instruments], axis=1)
    names = list(r.instruments.columns)
    ref = sm_fit(r.y, regs, r, kind)
    rf = ours(case, kind).reduced_form
    np.testing.assert_allclose(
        [c.estimate for c in rf.coefficients], ref.params[names].to_numpy(), rtol=RTOL
    )
    np.testing.assert_allclose(
        [c.std_error for c in rf.coefficients], ref.bse[names].to_numpy(), rtol=RTOL
    )
    f = ref.f_test(restriction(regs, names))
    assert rf.joint_test.statistic == pytest.approx(float(f.fvalue), rel=RTOL)
    assert rf.joint_test.df == [float(len(names)), float(f.df_denom)]


# --- over-identification ------------------------------------------------------------------


@pytest.mark.parametrize("case", CASES)
def test_sargan_matches_linearmodels(case: str) -> None:
    r = columns(case)
    ref = lm_2sls(r, "classical").sargan
    for kind in KINDS:  # Sargan assumes iid errors: the same under every covariance
        s = ours(case, kind).diagnostics.sargan
        if case not in OVERIDENTIFIED:
            assert isinstance(s, rk.NotApplicable)
            assert np.isnan(ref.stat)  # linearmodels: InvalidTestStatistic
            continue
        assert isinstance(s, rk.TestResult)
        assert s.statistic == pytest.approx(ref.stat, rel=RTOL)
        assert s.df == [float(ref.df)]
        assert s.p_value == pytest.approx(ref.pval, rel=P_RTOL)


@pytest.mark.parametrize("kind", ["robust", "cluster"])
@pytest.mark.parametrize("case", OVERIDENTIFIED)
def test_hansen_j_matches_linearmodels_ivgmm(case: str, kind: str) -> None:
    r = columns(case)
    kw = {"clusters": r.clusters} if kind == "cluster" else {}
    model = IVGMM(
        r.y, r.exog, r.endog, r.instruments, weights=r.weights, weight_type=LM_COV[kind], **kw
    )
    ref = model.fit(cov_type=LM_COV[kind], debiased=True, **kw).j_stat
    out = ours(case, kind)
    for j in (
        out.diagnostics.hansen_j,
        next(e for e in out.estimates if e.estimator == "gmm").hansen_j,
    ):
        assert isinstance(j, rk.TestResult)
        assert j.statistic == pytest.approx(ref.stat, rel=RTOL)
        assert j.df == [float(ref.df)]
        assert j.p_value == pytest.approx(ref.pval, rel=P_RTOL)


# --- endogeneity --------------------------------------------------------------------------


def _augmented_columns(case: str) -> int:
    """Columns of the control-function regression: exogenous, endogenous, residuals."""
    r = columns(case)
    return r.exog.shape[1] + 2 * r.endog.shape[1]


@pytest.mark.parametrize("case", CASES)
def test_dwh_classical_vs_linearmodels_wooldridge_regression(case: str) -> None:
    """linearmodels' ``wooldridge_regression`` is the same regression and Wald test.

    With ``debiased=True`` its classical s^2 divides by n - k as ours does (k the
    augmented regression's columns), so the statistics agree; with the default
    ``debiased=False`` it divides by n, and ours = theirs x (n - k) / n.
    """
    r = columns(case)
    dwh = ours(case, "classical").diagnostics.endogeneity
    assert isinstance(dwh, rk.TestResult)
    ref = lm_2sls(r, "classical").wooldridge_regression
    assert dwh.statistic == pytest.approx(ref.stat, rel=RTOL)
    assert dwh.df == [float(ref.df)] == [float(r.endog.shape[1])]
    assert dwh.p_value == pytest.approx(ref.pval, rel=P_RTOL)
    n, k = len(r.y), _augmented_columns(case)
    plain = lm_2sls(r, "classical", debiased=False).wooldridge_regression
    assert dwh.statistic == pytest.approx(plain.stat * (n - k) / n, rel=RTOL)


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("case", CASES)
def test_dwh_vs_statsmodels_control_function_regression(case: str, kind: str) -> None:
    """Hand-made: y on exogenous, endogenous and first-stage residuals; Wald on the latter."""
    r = columns(case)
    first_regs = pd.concat([r.exog, r.instruments], axis=1)
    fitted = {nm: sm_fit(r.endog[nm], first_regs, r, "classical").fittedvalues for nm in r.endog}
    resid = pd.DataFrame({f"v_{nm}": r.endog[nm] - fitted[nm] for nm in r.endog})
    regs = pd.concat([r.exog, r.endog, resid], axis=1)
    ref = sm_fit(r.y, regs, r, kind)
    wald = ref.wald_test(restriction(regs, list(resid.columns)), use_f=False, scalar=True)
    dwh = ours(case, kind).diagnostics.endogeneity
    assert isinstance(dwh, rk.TestResult)
    assert dwh.statistic == pytest.approx(float(wald.statistic), rel=RTOL)
    assert dwh.df == [float(resid.shape[1])]
    # linearmodels 7.1's wooldridge_regression uses the fit's covariance too (its source:
    # `_OLS(...).fit(cov_type=self.cov_type, **self.cov_config)`), a second reference
    lm = lm_2sls(r, kind).wooldridge_regression
    assert dwh.statistic == pytest.approx(lm.stat, rel=RTOL)


# --- binned first-stage data --------------------------------------------------------------


@pytest.mark.parametrize("case", CASES)
def test_binned_first_stage(case: str) -> None:
    """Each bin set's slope is the first-stage coefficient (Frisch-Waugh-Lovell)."""
    d, r = design(case), columns(case)
    regs = pd.concat([r.exog, r.instruments], axis=1)
    w = np.ones(d.n) if d.weights is None else d.weights
    for j, fs in enumerate(ours(case, "robust").first_stages):
        ref = sm_fit(r.endog.iloc[:, j], regs, r, "classical")
        assert [b.instrument for b in fs.binned] == list(d.instrument_names)
        for ell, b in enumerate(fs.binned):
            assert b.slope == pytest.approx(ref.params[d.instrument_names[ell]], rel=RTOL)
            assert b.slope == pytest.approx(fs.coefficients[ell].estimate, rel=RTOL)
            assert sum(b.count) == d.n
            assert all(c > 0 for c in b.count)
            assert len(b.x) == len(b.y) == len(b.count)
            # bins are intervals of the residualised instrument, so their means increase
            assert np.all(np.diff(b.x) > 0)
            if d.weights is None:
                # bin means are means of their rows: count-weighted, they give the
                # sample means back
                cnt = np.asarray(b.count, dtype=float)
                assert cnt @ np.asarray(b.y) / d.n == pytest.approx(d.endog[:, j].mean(), rel=RTOL)
                assert cnt @ np.asarray(b.x) / d.n == pytest.approx(
                    d.instruments[:, ell].mean(), rel=RTOL, abs=RTOL
                )
            # the line goes through the (weighted) means of the raw variables: the
            # residualised axes are shifted back to the variables' own units
            mean_x = np.average(d.endog[:, j], weights=w)
            mean_z = np.average(d.instruments[:, ell], weights=w)
            assert b.intercept + b.slope * mean_z == pytest.approx(mean_x, rel=RTOL)
