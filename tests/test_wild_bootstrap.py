"""The restricted wild (cluster) bootstrap of the 2SLS t test (WRE, Davidson & MacKinnon 2010).

Outside references, each named again beside its check:
- a slow reference loop written here literally from the method's definition (Davidson &
  MacKinnon 2010, JBES 28(1), section 3; from memory): restricted residuals, the efficient
  reduced form by least squares of x on [Z, u~] (numpy lstsq, not the module's normal
  equations), one bootstrap sample per draw, and a refit of 2SLS with the engine's own
  ``tsls`` and covariance on it; the draws from the documented (draws, G) uniform matrix;
- linearmodels 7.1 IV2SLS on the full design (constant, controls, fixed-effect dummies as
  columns; ``debiased=True``) for the t statistic of the data;
- a small Monte Carlo under the null with 10 clusters (qualitative): the cluster-robust t
  test with normal critical values over-rejects with few clusters (Cameron, Gelbach & Miller
  2008, REStat 90(3), 414-427, Monte Carlo rejection rates well above 5% at G = 10; from
  memory) while the WRE bootstrap is close to its nominal level (Davidson & MacKinnon 2010,
  simulations; from memory).

Tolerances: bootstrap t draws against the reference loop 1e-10 (both are exact linear algebra
in double precision; they differ only in the order of operations); the t statistic of the data
against the engine and linearmodels 1e-10 relative.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from helpers_design import random_design, reference_columns
from linearmodels.iv import IV2SLS
from scipy import stats

from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.design import Design
from reportkit.engine.estimators import tsls
from reportkit.engine.moments import Moments, compute_moments
from reportkit.variants import wild_bootstrap as wb
from reportkit.variants.wild_bootstrap import wild_bootstrap_tsls

TOL = 1e-10
# the slope in helpers_design.random_design with one endogenous regressor: y = 0.8 x + ...
TRUE_BETA = 0.8


def reference_draws(seed: int, draws: int, units: int, weights: str) -> np.ndarray:
    """The draws as the module documents them: one (draws, G) uniform matrix, mapped."""
    u = np.random.default_rng(seed).random((draws, units))
    if weights == "rademacher":  # +1 / -1 with probability 1/2 each
        return np.where(u < 0.5, -1.0, 1.0)
    # Webb (2014) six-point distribution, each point with probability 1/6
    points = np.array([-math.sqrt(1.5), -1.0, -math.sqrt(0.5), math.sqrt(0.5), 1.0, math.sqrt(1.5)])
    return points[np.floor(6 * u).astype(int)]


def reference_loop(
    m: Moments, codes: np.ndarray | None, draws: int, weights: str, seed: int, beta0: float
) -> np.ndarray:
    """Bootstrap t draws by literal construction of every bootstrap sample and a 2SLS refit."""
    x, z = m.x[:, 0], m.z
    u = m.y - x * beta0  # restricted structural residuals
    coef = np.linalg.lstsq(np.column_stack([z, u]), x, rcond=None)[0]  # x on [Z, u~]
    pi = coef[: m.q]
    v = x - z @ pi  # reduced-form residuals: y2 - W pi~ (not the lstsq residuals)
    units = m.n if codes is None else int(np.unique(codes).size)
    w = reference_draws(seed, draws, units, weights)
    if codes is None:
        cov = CovarianceSpec.build("robust")
        rows = np.arange(m.n)
    else:
        cov = CovarianceSpec.build("cluster", codes[:, None])
        rows = np.unique(codes, return_inverse=True)[1]
    out = np.empty(draws)
    for b in range(draws):
        wb_rows = w[b, rows]  # the same draw for every row of a cluster
        x_star = z @ pi + v * wb_rows
        y_star = x_star * beta0 + u * wb_rows
        mb = Moments(y=y_star, x=x_star[:, None], z=z, k_exog=m.k_exog, partialler=m.partialler)
        fit = tsls(mb, cov)
        out[b] = (fit.params[0] - beta0) / math.sqrt(fit.cov[0, 0])
    return out


CASES = [
    # (clustered, instruments, weighted, weights, beta0)
    (True, 1, False, "rademacher", TRUE_BETA),
    (True, 2, True, "webb", TRUE_BETA),
    (True, 2, False, "rademacher", 0.0),
    (False, 1, True, "webb", TRUE_BETA),
    (False, 2, False, "rademacher", TRUE_BETA),
    (False, 2, True, "webb", 0.0),
]


@pytest.mark.parametrize("clustered,q,weighted,weights,beta0", CASES)
def test_vectorised_draws_equal_reference_loop(
    clustered: bool, q: int, weighted: bool, weights: str, beta0: float
) -> None:
    # Source: the literal per-draw construction above (Davidson & MacKinnon 2010, section 3),
    # refitted with the engine's own 2SLS and covariance; draw for draw, same seed.
    d = random_design(31 + q, n=180, q=q, c=2, n_fe=1, n_clusters=12, weighted=weighted)
    m = compute_moments(d)
    codes = d.clusters[:, 0] if clustered else None
    res = wild_bootstrap_tsls(
        m, cluster_codes=codes, k=1 + m.k_exog, draws=60, weights=weights, seed=5, beta0=beta0
    )
    ref = reference_loop(m, codes, 60, weights, 5, beta0)
    np.testing.assert_allclose(res.t_draws, ref, rtol=TOL, atol=TOL)
    assert res.n_clusters == (12 if clustered else None)


@pytest.mark.parametrize("clustered", [True, False])
@pytest.mark.parametrize("weights", ["rademacher", "webb"])
def test_chunked_path_equals_reference_loop(
    monkeypatch: pytest.MonkeyPatch, clustered: bool, weights: str
) -> None:
    # The memory-bounded path (draws in chunks, uniforms a few rows at a time, units in
    # blocks, columns rebuilt per chunk) must give the same draws as one (draws, G) matrix.
    # Source: the reference loop.
    d = random_design(41, n=300, q=2, c=1, n_fe=1, n_clusters=150, weighted=True)
    m = compute_moments(d)
    codes = d.clusters[:, 0] if clustered else None
    units = m.n if codes is None else int(np.unique(codes).size)
    monkeypatch.setattr(wb, "INDEX_CHUNK_BYTES", 7 * units)  # 7 draws per chunk
    monkeypatch.setattr(wb, "UNIFORM_CHUNK_BYTES", 8 * 3 * units)  # 3 rows of uniforms
    monkeypatch.setattr(wb, "BLOCK_BYTES", 8 * 7 * 40)  # 40 units per block
    monkeypatch.setattr(wb, "MIN_BLOCK_UNITS", 1)
    monkeypatch.setattr(wb, "COLUMNS_KEEP_BYTES", 0)  # rebuild the columns for every chunk
    res = wild_bootstrap_tsls(
        m, cluster_codes=codes, k=1 + m.k_exog, draws=45, weights=weights, seed=9, beta0=0.5
    )
    ref = reference_loop(m, codes, 45, weights, 9, 0.5)
    np.testing.assert_allclose(res.t_draws, ref, rtol=TOL, atol=TOL)


@pytest.mark.parametrize("clustered", [True, False])
@pytest.mark.parametrize("q,weighted", [(1, False), (2, True)])
def test_t_statistic_equals_engine_and_linearmodels(
    clustered: bool, q: int, weighted: bool
) -> None:
    # Source: the engine's 2SLS (reportkit.engine.estimators.tsls) with the same covariance,
    # and linearmodels 7.1 IV2SLS on the full design with debiased=True (cluster-robust, or
    # HC1 "robust" without clusters).
    d = random_design(51 + q, n=240, q=q, c=2, n_fe=1, n_clusters=20, weighted=weighted)
    m = compute_moments(d)
    codes = d.clusters[:, 0] if clustered else None
    beta0 = 0.3
    res = wild_bootstrap_tsls(
        m,
        cluster_codes=codes,
        k=1 + m.k_exog,
        draws=19,
        weights="rademacher",
        seed=1,
        beta0=beta0,
    )
    cov = (
        CovarianceSpec.build("cluster", d.clusters) if clustered else CovarianceSpec.build("robust")
    )
    fit = tsls(m, cov)
    t_engine = (fit.params[0] - beta0) / math.sqrt(fit.cov[0, 0])
    assert res.t_statistic == pytest.approx(t_engine, rel=TOL)

    ref = reference_columns(d)
    kw = (
        {"cov_type": "clustered", "clusters": ref.clusters} if clustered else {"cov_type": "robust"}
    )
    lm = IV2SLS(ref.y, ref.exog, ref.endog, ref.instruments, weights=ref.weights).fit(
        debiased=True, **kw
    )
    t_lm = (float(lm.params["x0"]) - beta0) / float(lm.std_errors["x0"])
    assert res.t_statistic == pytest.approx(t_lm, rel=TOL)


def few_clusters_design(rng: np.random.Generator, clusters: int = 10, per: int = 20) -> Design:
    """Invented simulation data under the null beta = 0: instrument and errors both carry a
    cluster component (the setting where cluster-robust t tests over-reject)."""
    cl = np.repeat(np.arange(clusters), per)
    n = cl.size
    z = rng.normal(size=(clusters, 1))[cl] + rng.normal(size=(n, 1))
    u = rng.normal(size=clusters)[cl] + rng.normal(size=n)
    x = 0.8 * z[:, 0] + 0.5 * u + rng.normal(size=n)
    return Design(
        y=u,  # y = 0 * x + u
        endog=x[:, None],
        instruments=z,
        controls=np.zeros((n, 0)),
        fixed_effects=np.zeros((n, 0), dtype=np.int64),
        clusters=cl[:, None],
        weights=None,
        outcome_name="y",
        endog_names=("x",),
        instrument_names=("z",),
        control_names=(),
        cluster_names=("group",),
    )


def test_few_clusters_bootstrap_holds_size_where_cluster_t_over_rejects() -> None:
    # Qualitative Monte Carlo, 1,000 replications at 10 clusters, 199 Webb draws each.
    # Cameron, Gelbach & Miller (2008, REStat 90(3), 414-427): the cluster-robust t test with
    # normal critical values rejects a true null well above 5% with 10 clusters (from memory);
    # Davidson & MacKinnon (2010, simulations) and Webb (2014, six-point draws for few
    # clusters): the restricted wild bootstrap is close to 5% (from memory). With 1,000
    # replications the Monte Carlo standard error of a 5% rate is 0.7 points; the bounds are
    # about 3 of them. The design has a constant only: see the module docstring for designs
    # with many control columns, where the partialled-space bootstrap rejects more often.
    rng = np.random.default_rng(2024)
    reps = 1000
    reject_t = reject_boot = 0
    for r in range(reps):
        d = few_clusters_design(rng)
        m = compute_moments(d)
        res = wild_bootstrap_tsls(
            m, cluster_codes=d.clusters, k=1 + m.k_exog, draws=199, weights="webb", seed=r
        )
        reject_t += 2 * stats.norm.sf(abs(res.t_statistic)) < 0.05
        reject_boot += res.p_value < 0.05
    rate_t, rate_boot = reject_t / reps, reject_boot / reps
    assert 0.03 <= rate_boot <= 0.075
    assert rate_t >= 0.09
    assert rate_t - rate_boot >= 0.03


def test_same_seed_same_draws_and_p_value_is_the_share_of_larger_draws() -> None:
    d = random_design(61, n=200, q=2, n_clusters=15)
    m = compute_moments(d)
    kw = {"cluster_codes": d.clusters, "k": 1 + m.k_exog, "draws": 99, "weights": "webb"}
    first = wild_bootstrap_tsls(m, seed=3, beta0=TRUE_BETA, **kw)
    again = wild_bootstrap_tsls(m, seed=3, beta0=TRUE_BETA, **kw)
    other = wild_bootstrap_tsls(m, seed=4, beta0=TRUE_BETA, **kw)
    assert np.array_equal(first.t_draws, again.t_draws)
    assert first.p_value == again.p_value
    assert not np.array_equal(first.t_draws, other.t_draws)
    assert first.t_statistic == other.t_statistic  # the data's statistic takes no draws
    assert first.t_draws.shape == (99,) and first.draws == 99 and first.weights == "webb"
    # symmetric p-value (Davidson & MacKinnon 2010): share of |t*| >= |t|, within [0, 1]
    share = float(np.mean(np.abs(first.t_draws) >= abs(first.t_statistic)))
    assert first.p_value == pytest.approx(share)
    assert 0.0 <= first.p_value <= 1.0


def test_null_at_the_estimate_gives_t_zero_and_p_one() -> None:
    # At beta0 = the 2SLS estimate the t statistic is 0, so every draw is at least as extreme.
    d = random_design(62, n=200, q=2, n_clusters=15)
    m = compute_moments(d)
    beta_hat = float(tsls(m, CovarianceSpec.build("cluster", d.clusters)).params[0])
    res = wild_bootstrap_tsls(
        m,
        cluster_codes=d.clusters,
        k=1 + m.k_exog,
        draws=49,
        weights="rademacher",
        seed=1,
        beta0=beta_hat,
    )
    assert abs(res.t_statistic) < 1e-9
    assert res.p_value == 1.0


def test_draw_distributions_have_unit_variance() -> None:
    # Rademacher: +1/-1; Webb (2014): six points +-sqrt(1/2), +-1, +-sqrt(3/2) with equal
    # probability, mean 0, variance 1, fourth moment 7/6 (from memory). Frequencies of the
    # documented mapping over 600,000 uniforms, within 5 binomial standard errors of 1/6.
    for name, fourth in (("rademacher", 1.0), ("webb", 7 / 6)):
        values = wb.DRAW_VALUES[name]
        assert values.mean() == pytest.approx(0.0, abs=1e-15)
        assert (values**2).mean() == pytest.approx(1.0, rel=1e-15)
        assert (values**4).mean() == pytest.approx(fourth, rel=1e-15)
    draws = reference_draws(0, 1, 600_000, "webb")[0]
    points, counts = np.unique(draws, return_counts=True)
    np.testing.assert_allclose(points, np.sort(wb.DRAW_VALUES["webb"]))
    se = math.sqrt(600_000 * (1 / 6) * (5 / 6))
    assert np.all(np.abs(counts - 100_000) < 5 * se)


def test_bad_arguments_are_refused_with_the_allowed_values() -> None:
    d = random_design(71, n=120, q=2, n_clusters=10)
    m = compute_moments(d)
    kw = {"cluster_codes": d.clusters, "k": 1 + m.k_exog, "draws": 19, "seed": 1}
    with pytest.raises(ValueError, match="rademacher, webb"):
        wild_bootstrap_tsls(m, weights="mammen", **kw)
    with pytest.raises(ValueError, match="positive integer"):
        wild_bootstrap_tsls(m, weights="webb", **{**kw, "draws": 0})
    with pytest.raises(ValueError, match="one cluster dimension"):
        two_way = np.column_stack([d.clusters[:, 0], d.clusters[:, 0] % 3])
        wild_bootstrap_tsls(m, weights="webb", **{**kw, "cluster_codes": two_way})
    with pytest.raises(ValueError, match="at least two clusters"):
        wild_bootstrap_tsls(m, weights="webb", **{**kw, "cluster_codes": np.zeros(m.n)})
    two_endog = compute_moments(random_design(72, n=120, p=2, q=3, n_clusters=10))
    with pytest.raises(ValueError, match="one endogenous regressor"):
        wild_bootstrap_tsls(two_endog, weights="webb", **{**kw, "k": 1 + two_endog.k_exog})
