"""Fuller's modified LIML and jackknife IV against outside references.

Fuller(alpha) is checked against linearmodels 7.1 ``IVLIML(fuller=alpha)`` on the full
design (controls and fixed-effect dummies as columns, ``debiased=True``). JIVE is checked
against a slow numpy computation on the full design that refits the first stage without
each row, against a full-design sandwich and linearmodels' IV2SLS with the jackknife
predictions as the instrument, and in a many-weak-instruments simulation.

Tolerance: 1e-8 relative (exact linear algebra in double precision on both sides; the
reference partials out by least squares and refits row by row, so it rounds differently).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from helpers_design import random_design, reference_columns
from linearmodels.iv import IV2SLS, IVLIML

from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.design import Design
from reportkit.engine.estimators import ols, tsls
from reportkit.engine.moments import compute_moments
from reportkit.engine.more_estimators import fuller, jive

RTOL = 1e-8
LM_COV = {"classical": "unadjusted", "robust": "robust", "cluster": "clustered"}

DESIGNS = {
    "controls": {},
    "weights": {"weighted": True},
    "one fixed effect": {"n_fe": 1},
    "two regressors, weights, fixed effect": {"p": 2, "q": 3, "n_fe": 1, "weighted": True},
}


def with_two_cluster_dimensions(d: Design, seed: int) -> Design:
    rng = np.random.default_rng(seed)
    second = rng.integers(0, 15, size=d.n)
    return replace(
        d,
        clusters=np.column_stack([d.clusters[:, 0], second]).astype(np.int64),
        cluster_names=("group", "other"),
    )


def engine_cov(d: Design, kind: str) -> CovarianceSpec:
    return CovarianceSpec.build(kind, d.clusters if kind == "cluster" else None)  # type: ignore[arg-type]


def lm_clusters(d: Design) -> np.ndarray | pd.DataFrame:
    return pd.DataFrame(d.clusters) if d.clusters.shape[1] == 2 else d.clusters[:, 0]


# --- Fuller ---------------------------------------------------------------------------


@pytest.mark.parametrize("case", list(DESIGNS))
@pytest.mark.parametrize("alpha", [1.0, 4.0])
@pytest.mark.parametrize("kind", ["classical", "robust", "cluster"])
def test_fuller_matches_linearmodels(case: str, alpha: float, kind: str) -> None:
    d = random_design(31, **DESIGNS[case])
    ours = fuller(compute_moments(d), alpha, engine_cov(d, kind))
    ref_cols = reference_columns(d)
    fit_kw: dict = {"cov_type": LM_COV[kind], "debiased": True}
    if kind == "cluster":
        fit_kw["clusters"] = lm_clusters(d)
    # reference: linearmodels 7.1 IVLIML(fuller=alpha), kappa_LIML - alpha / (n - K) with K
    # every instrument column including the exogenous ones
    ref = IVLIML(
        ref_cols.y,
        ref_cols.exog,
        ref_cols.endog,
        ref_cols.instruments,
        weights=ref_cols.weights,
        fuller=alpha,
    ).fit(**fit_kw)
    names = list(d.endog_names)
    assert ours.estimator == f"fuller_{alpha:g}"
    assert ours.kappa == pytest.approx(ref.kappa, rel=RTOL)
    np.testing.assert_allclose(ours.params, ref.params[names].to_numpy(), rtol=RTOL)
    np.testing.assert_allclose(
        np.sqrt(np.diag(ours.cov)), ref.std_errors[names].to_numpy(), rtol=RTOL
    )


def test_fuller_two_way_cluster_matches_linearmodels() -> None:
    d = with_two_cluster_dimensions(random_design(32, n_fe=1, weighted=True), 5)
    ours = fuller(compute_moments(d), 1.0, engine_cov(d, "cluster"))
    ref_cols = reference_columns(d)
    # reference: linearmodels 7.1 IVLIML(fuller=1) with two-way clustered covariance
    ref = IVLIML(
        ref_cols.y,
        ref_cols.exog,
        ref_cols.endog,
        ref_cols.instruments,
        weights=ref_cols.weights,
        fuller=1.0,
    ).fit(cov_type="clustered", clusters=lm_clusters(d), debiased=True)
    np.testing.assert_allclose(ours.params, ref.params[["x0"]].to_numpy(), rtol=RTOL)
    np.testing.assert_allclose(np.sqrt(ours.cov[0, 0]), ref.std_errors["x0"], rtol=RTOL)


def test_fuller_rejects_a_negative_alpha() -> None:
    m = compute_moments(random_design(33))
    with pytest.raises(ValueError, match="alpha"):
        fuller(m, -1.0, CovarianceSpec.build("classical"))


# --- JIVE: independent slow computation on the full design -----------------------------


def slow_full_design_jive(d: Design) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """IJIVE written out: W (constant, controls, fixed-effect dummies) as columns, partialled
    out by least squares; each row's first stage refitted without that row.

    Returns the weight-transformed y, the full regressors [W, X], the full instruments
    [W, Xt] and the jackknife predictions Xt (Angrist, Imbens & Krueger 1999; partialling
    first as in Ackerberg & Devereux 2009).
    """
    cols = reference_columns(d)
    sw = np.ones(d.n) if d.weights is None else np.sqrt(d.weights / d.weights.mean())
    w_cols = cols.exog.to_numpy() * sw[:, None]
    y = d.y * sw
    x = d.endog * sw[:, None]
    z = d.instruments * sw[:, None]

    def resid(a: np.ndarray) -> np.ndarray:
        return a - w_cols @ np.linalg.lstsq(w_cols, a, rcond=None)[0]

    x_p, z_p = resid(x), resid(z)
    xt = np.empty_like(x_p)
    for i in range(d.n):
        keep = np.arange(d.n) != i
        coef = np.linalg.lstsq(z_p[keep], x_p[keep], rcond=None)[0]
        xt[i] = z_p[i] @ coef
    return y, np.column_stack([w_cols, x]), np.column_stack([w_cols, xt]), xt


def cluster_meat_loops(scores: np.ndarray, clusters: np.ndarray, k: int) -> np.ndarray:
    """One- or two-way cluster meat (Liang & Zeger 1986; Cameron, Gelbach & Miller 2011)
    with explicit loops and the (n-1)/(n-k) G/(G-1) factor of linearmodels' debiased."""
    n = scores.shape[0]
    dims = [(clusters[:, j], 1.0) for j in range(clusters.shape[1])]
    if len(dims) == 2:
        a, b = clusters[:, 0], clusters[:, 1]
        dims.append((a * (int(b.max()) + 1) + b, -1.0))
    out = np.zeros((scores.shape[1], scores.shape[1]))
    for codes, sign in dims:
        groups = np.unique(codes)
        term = np.zeros_like(out)
        for g in groups:
            s = scores[codes == g].sum(axis=0)
            term += np.outer(s, s)
        out += sign * term * (n - 1) / (n - k) * len(groups) / (len(groups) - 1)
    return out


def full_design_sandwich(
    y: np.ndarray, xf: np.ndarray, zf: np.ndarray, kind: str, clusters: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Just-identified IV beta = (Zf'Xf)^-1 Zf'y and its sandwich covariance."""
    n, k = xf.shape
    bread = np.linalg.inv(zf.T @ xf)
    beta = bread @ (zf.T @ y)
    e = y - xf @ beta
    scores = zf * e[:, None]
    if kind == "classical":
        meat = (zf.T @ zf) * float(e @ e) / (n - k)
    elif kind == "robust":
        meat = sum(np.outer(s, s) for s in scores) * n / (n - k)
    else:
        meat = cluster_meat_loops(scores, clusters, k)
    return beta, bread @ meat @ bread.T


JIVE_DESIGNS = {
    "controls": {"n": 200},
    "weights": {"n": 200, "weighted": True},
    "one fixed effect": {"n": 200, "n_fe": 1},
    "two regressors, weights, fixed effect": {
        "n": 200,
        "p": 2,
        "q": 4,
        "n_fe": 1,
        "weighted": True,
    },
}


@pytest.mark.parametrize("case", list(JIVE_DESIGNS))
def test_jive_matches_slow_full_design_computation(case: str) -> None:
    d = with_two_cluster_dimensions(random_design(41, **JIVE_DESIGNS[case]), 6)
    y, xf, zf, _ = slow_full_design_jive(d)
    p = d.endog.shape[1]
    m = compute_moments(d)
    for kind, clusters in (
        ("classical", d.clusters),
        ("robust", d.clusters),
        ("cluster", d.clusters[:, :1]),
        ("cluster", d.clusters),
    ):
        ours = jive(m, CovarianceSpec.build(kind, clusters if kind == "cluster" else None))  # type: ignore[arg-type]
        # reference: slow numpy IJIVE and its full-design IV sandwich (written above)
        beta, cov = full_design_sandwich(y, xf, zf, kind, clusters)
        np.testing.assert_allclose(ours.params, beta[-p:], rtol=RTOL)
        np.testing.assert_allclose(
            np.sqrt(np.diag(ours.cov)), np.sqrt(np.diag(cov))[-p:], rtol=RTOL
        )
        np.testing.assert_allclose(ours.cov, cov[-p:, -p:], rtol=RTOL, atol=0)


@pytest.mark.parametrize("kind", ["classical", "robust", "cluster"])
def test_jive_covariance_matches_linearmodels_iv_with_jackknife_instrument(kind: str) -> None:
    d = with_two_cluster_dimensions(random_design(42, n=200, n_fe=1, weighted=True), 7)
    _, _, _, xt = slow_full_design_jive(d)
    cols = reference_columns(d)
    sw = np.sqrt(d.weights / d.weights.mean())  # type: ignore[operator]
    instrument = pd.DataFrame(xt / sw[:, None], columns=["xt0"])  # back to original units
    fit_kw: dict = {"cov_type": LM_COV[kind], "debiased": True}
    if kind == "cluster":
        fit_kw["clusters"] = lm_clusters(d)
    # reference: linearmodels 7.1 IV2SLS with the jackknife prediction as the instrument
    ref = IV2SLS(cols.y, cols.exog, cols.endog, instrument, weights=d.weights).fit(**fit_kw)
    ours = jive(compute_moments(d), engine_cov(d, kind))
    np.testing.assert_allclose(ours.params, ref.params[["x0"]].to_numpy(), rtol=RTOL)
    np.testing.assert_allclose(np.sqrt(ours.cov[0, 0]), ref.std_errors["x0"], rtol=RTOL)


# --- JIVE: many weak instruments ------------------------------------------------------


def test_jive_is_nearly_median_unbiased_with_many_weak_instruments() -> None:
    # Angrist, Imbens & Krueger (1999), J. Applied Econometrics: with many weak instruments
    # 2SLS is biased toward OLS while JIVE is approximately median-unbiased (qualitative
    # finding; the design below is our own: one relevant instrument among 20, concentration
    # parameter about 18, error correlation 0.8). Simulation, fixed seed.
    rng = np.random.default_rng(1999)
    n, q, reps, beta = 200, 20, 300, 1.0
    classical = CovarianceSpec.build("classical")
    draws = []
    for _ in range(reps):
        z = rng.standard_normal((n, q))
        control = rng.standard_normal((n, 1))
        u = rng.standard_normal(n)
        v = 0.8 * u + 0.6 * rng.standard_normal(n)
        x = 0.3 * z[:, 0] + 0.5 * control[:, 0] + v
        y = 2.0 + beta * x - 0.7 * control[:, 0] + u
        d = Design(
            y=y,
            endog=x[:, None],
            instruments=z,
            controls=control,
            fixed_effects=np.zeros((n, 0), dtype=np.int64),
            clusters=np.zeros((n, 0), dtype=np.int64),
            weights=None,
            outcome_name="y",
            endog_names=("x",),
            instrument_names=tuple(f"z{j}" for j in range(q)),
            control_names=("c",),
        )
        m = compute_moments(d)
        draws.append(
            [est(m, classical).params[0] for est in (ols, tsls, jive)]  # type: ignore[operator]
        )
    bias_ols, bias_tsls, bias_jive = np.median(np.array(draws), axis=0) - beta
    assert bias_ols > 0.5  # the design is strongly endogenous
    assert 0.3 * bias_ols < bias_tsls < bias_ols  # 2SLS pulled toward OLS
    assert abs(bias_jive) < 0.25 * bias_tsls  # JIVE close to the truth


# --- JIVE: degenerate leverage -------------------------------------------------------


@pytest.mark.parametrize("n_fe", [0, 1])
def test_jive_rejects_an_instrument_nonzero_in_one_row(n_fe: int) -> None:
    # A row that the instruments and controls fit exactly has leverage one: the
    # jackknife prediction without it is undefined (Angrist, Imbens & Krueger 1999 divide
    # by 1 - h_i). With the constant or fixed effects partialled out, the partialled
    # leverage is below one for that row, so this checks the full leverage.
    d = random_design(43, n=150, n_fe=n_fe)
    spike = np.zeros(d.n)
    spike[17] = 1.0
    d = replace(
        d,
        instruments=np.column_stack([d.instruments, spike]),
        instrument_names=(*d.instrument_names, "spike"),
    )
    m = compute_moments(d)
    h = np.einsum("ij,jk,ik->i", m.z, m.zz_inv, m.z)
    assert h[17] < 0.999  # partialled leverage alone would not catch it
    with pytest.raises(ValueError, match="row 18"):
        jive(m, CovarianceSpec.build("robust"))
    # the same design without the spike is estimable
    fit = jive(compute_moments(random_design(43, n=150, n_fe=n_fe)), engine_cov(d, "robust"))
    assert np.all(np.isfinite(fit.params))
