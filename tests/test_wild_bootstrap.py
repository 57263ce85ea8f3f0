"""The restricted wild (cluster) bootstrap of the 2SLS t test (WRE, Davidson & MacKinnon 2010).

Outside references, each named again beside its check:
- a slow reference loop written here literally from the method's definition (Davidson &
  MacKinnon 2010, JBES 28(1), section 3; from memory) on the FULL design: the constant,
  the controls and the fixed-effect dummies as columns (``helpers_design.reference_columns``);
  restricted residuals and the efficient reduced form by numpy least squares on those
  columns, one bootstrap sample per draw, and a refit of 2SLS with linearmodels 7.1
  ``IV2SLS`` (``debiased=True``) on it, which re-estimates the controls and fixed effects in
  every bootstrap sample; the draws from the documented (draws, G) uniform matrix;
- a second loop in the partialled space without re-partialling (the engine's own ``tsls`` on
  the bootstrap columns), the documented approximation at observation level above
  ``EXACT_ROWS_LIMIT`` rows;
- linearmodels 7.1 IV2SLS on the full design (``debiased=True``) for the t statistic of the
  data;
- small Monte Carlo studies under the null with 10 clusters (qualitative): the cluster-robust
  t test with normal critical values over-rejects with few clusters (Cameron, Gelbach &
  Miller 2008, REStat 90(3), 414-427, Monte Carlo rejection rates well above 5% at G = 10;
  from memory) while the WRE bootstrap is close to its nominal level (Davidson & MacKinnon
  2010, simulations; from memory).

Tolerances: bootstrap t draws against the reference loops 1e-10 (both are exact linear algebra
in double precision; they differ only in the order of operations, and the alternating
projections of two fixed effects stop at 1e-13); the t statistic of the data against the
engine and linearmodels 1e-10 relative. The observation-level approximation against the exact
loop: the bound documented in the module (triangle inequality, 1e-10 slack) and 5 k_W / n
(the measured largest difference was about 4 k_W / n; module docstring).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pytest
from helpers_design import random_design, reference_columns
from linearmodels.iv import IV2SLS
from scipy import stats

from reportkit.engine.absorb import Partialler
from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.design import Design
from reportkit.engine.estimators import tsls
from reportkit.engine.moments import Moments, compute_moments
from reportkit.variants import wild_bootstrap as wb
from reportkit.variants.wild_bootstrap import wild_bootstrap_tsls

TOL = 1e-10
# the slope in helpers_design.random_design with one endogenous regressor: y = 0.8 x + ...
TRUE_BETA = 0.8
EXACT_PATHS = ("low rank", "coupled", "per draw")  # the general paths


def reference_draws(seed: int, draws: int, units: int, weights: str) -> np.ndarray:
    """The draws as the module documents them: one (draws, G) uniform matrix, mapped."""
    u = np.random.default_rng(seed).random((draws, units))
    if weights == "rademacher":  # +1 / -1 with probability 1/2 each
        return np.where(u < 0.5, -1.0, 1.0)
    # Webb (2014) six-point distribution, each point with probability 1/6
    points = np.array([-math.sqrt(1.5), -1.0, -math.sqrt(0.5), math.sqrt(0.5), 1.0, math.sqrt(1.5)])
    return points[np.floor(6 * u).astype(int)]


def unit_rows(codes: np.ndarray | None, n: int) -> tuple[int, np.ndarray]:
    """Number of bootstrap units and each row's unit (rows themselves without clusters)."""
    if codes is None:
        return n, np.arange(n)
    return int(np.unique(codes).size), np.unique(codes, return_inverse=True)[1]


@dataclass(frozen=True)
class FullLoop:
    """Exact bootstrap t draws and, per draw, the bound on the observation-level approximation."""

    t: np.ndarray
    bound: np.ndarray  # ||zeta p*|| / ||zeta e~*||, p* = P_W r*, e~* = e* + p* (module doc)


def full_design_loop(
    d: Design, codes: np.ndarray | None, draws: int, weights: str, seed: int, beta0: float
) -> FullLoop:
    """Bootstrap t draws by literal construction of every bootstrap sample on the full design
    (constant, controls, fixed-effect dummies as columns) and a linearmodels 2SLS refit."""
    ref = reference_columns(d)
    w_cols, z, x, y = ref.exog.to_numpy(), d.instruments, d.endog[:, 0], d.y
    sw = np.ones(d.n) if d.weights is None else np.sqrt(d.weights / d.weights.mean())

    def wls(lhs: np.ndarray, rhs: np.ndarray) -> np.ndarray:
        return np.linalg.lstsq(lhs * sw[:, None], rhs * sw, rcond=None)[0]

    alpha = wls(w_cols, y - x * beta0)
    u = y - x * beta0 - w_cols @ alpha  # restricted residuals
    coef = wls(np.column_stack([w_cols, z, u]), x)  # efficient reduced form: x on [W, Z, u~]
    kw_, q = w_cols.shape[1], z.shape[1]
    gamma, pi = coef[:kw_], coef[kw_ : kw_ + q]
    v = x - w_cols @ gamma - z @ pi  # reduced-form residuals (plus delta~ u~)
    units, rows = unit_rows(codes, d.n)
    draw = reference_draws(seed, draws, units, weights)
    cov = {"cov_type": "robust"} if codes is None else {"cov_type": "clustered", "clusters": codes}
    # the approximation bound, in the sqrt(weight)-transformed space of the full design
    wt = w_cols * sw[:, None]

    def proj(a: np.ndarray) -> np.ndarray:  # P_W
        return wt @ np.linalg.lstsq(wt, a, rcond=None)[0]

    zt = z * sw[:, None] - proj(z * sw[:, None])  # M_W Z
    t, bound = np.empty(draws), np.empty(draws)
    for b in range(draws):
        wb_rows = draw[b, rows]  # the same draw for every row of a unit
        x_star = w_cols @ gamma + z @ pi + v * wb_rows
        y_star = x_star * beta0 + w_cols @ alpha + u * wb_rows
        fit = IV2SLS(y_star, ref.exog, x_star[:, None], ref.instruments, weights=d.weights).fit(
            debiased=True, **cov
        )
        beta = float(fit.params.iloc[-1])  # the endogenous coefficient comes last
        t[b] = (beta - beta0) / float(fit.std_errors.iloc[-1])
        r_star = sw * (u - (beta - beta0) * v) * wb_rows
        p = proj(r_star)
        e_exact = sw * (y_star - x_star * beta) - proj(sw * (y_star - x_star * beta))
        zeta = zt @ np.linalg.lstsq(zt, sw * x_star, rcond=None)[0]  # M_W Z Pi*
        bound[b] = np.linalg.norm(zeta * p) / np.linalg.norm(zeta * (e_exact + p))
    return FullLoop(t=t, bound=bound)


def partialled_loop(
    m: Moments, codes: np.ndarray | None, draws: int, weights: str, seed: int, beta0: float
) -> np.ndarray:
    """Bootstrap t draws in the partialled space without re-partialling each sample (the
    documented observation-level approximation), refitted with the engine's 2SLS."""
    x, z = m.x[:, 0], m.z
    u = m.y - x * beta0  # restricted structural residuals
    coef = np.linalg.lstsq(np.column_stack([z, u]), x, rcond=None)[0]  # x on [Z, u~]
    pi = coef[: m.q]
    v = x - z @ pi  # reduced-form residuals: y2 - W pi~ (not the lstsq residuals)
    units, rows = unit_rows(codes, m.n)
    w = reference_draws(seed, draws, units, weights)
    cov = (
        CovarianceSpec.build("robust")
        if codes is None
        else CovarianceSpec.build("cluster", codes[:, None])
    )
    out = np.empty(draws)
    for b in range(draws):
        wb_rows = w[b, rows]
        x_star = z @ pi + v * wb_rows
        y_star = x_star * beta0 + u * wb_rows
        mb = Moments(y=y_star, x=x_star[:, None], z=z, k_exog=m.k_exog, partialler=m.partialler)
        fit = tsls(mb, cov)
        out[b] = (fit.params[0] - beta0) / math.sqrt(fit.cov[0, 0])
    return out


CASES = [
    # (clustered, instruments, weighted, weights, beta0, fixed effects)
    (True, 1, False, "rademacher", TRUE_BETA, 1),
    (True, 2, True, "webb", TRUE_BETA, 1),
    (True, 2, False, "rademacher", 0.0, 1),
    (True, 2, True, "webb", 0.0, 0),
    (True, 1, False, "webb", TRUE_BETA, 2),
    (False, 1, True, "webb", TRUE_BETA, 1),
    (False, 2, False, "rademacher", TRUE_BETA, 1),
    (False, 2, True, "webb", 0.0, 1),
    (False, 2, False, "rademacher", 0.0, 0),
    (False, 1, True, "webb", TRUE_BETA, 2),
]


@pytest.mark.parametrize("clustered,q,weighted,weights,beta0,n_fe", CASES)
def test_vectorised_draws_equal_reference_loop(
    clustered: bool, q: int, weighted: bool, weights: str, beta0: float, n_fe: int
) -> None:
    # Source: the literal per-draw construction on the full design above (Davidson &
    # MacKinnon 2010, section 3), refitted with linearmodels; draw for draw, same seed. With
    # two controls, fixed effects and 12 clusters the partialled-space shortcut would differ.
    d = random_design(31 + q, n=180, q=q, c=2, n_fe=n_fe, n_clusters=12, weighted=weighted)
    m = compute_moments(d)
    codes = d.clusters[:, 0] if clustered else None
    res = wild_bootstrap_tsls(
        m, cluster_codes=codes, k=1 + m.k_exog, draws=60, weights=weights, seed=5, beta0=beta0
    )
    ref = full_design_loop(d, codes, 60, weights, 5, beta0)
    np.testing.assert_allclose(res.t_draws, ref.t, rtol=TOL, atol=TOL)
    assert res.n_clusters == (12 if clustered else None)
    # the re-partialling matters here: the shortcut is off by more than the tolerance
    shortcut = partialled_loop(m, codes, 60, weights, 5, beta0)
    assert np.max(np.abs(shortcut / ref.t - 1)) > 1e-4


@pytest.mark.parametrize("clustered", [True, False])
@pytest.mark.parametrize(
    "path,n_fe",
    [("low rank", 0), ("coupled", 0), ("per draw", 0), ("coupled", 1), ("per draw", 1)],
)
def test_every_exact_path_equals_reference_loop(
    monkeypatch: pytest.MonkeyPatch, clustered: bool, path: str, n_fe: int
) -> None:
    # Each way of computing the re-partialled scores, forced whatever the automatic choice
    # (the low-rank path needs P_W = Q Q', so it is not tried with fixed effects).
    # Source: the full-design reference loop.
    d = random_design(35, n=150, q=2, c=3, n_fe=n_fe, n_clusters=9, weighted=True)
    m = compute_moments(d)
    codes = d.clusters[:, 0] if clustered else None
    monkeypatch.setattr(wb, "_choose_path", lambda *_: path)
    res = wild_bootstrap_tsls(
        m, cluster_codes=codes, k=1 + m.k_exog, draws=25, weights="webb", seed=8, beta0=0.4
    )
    ref = full_design_loop(d, codes, 25, "webb", 8, 0.4)
    np.testing.assert_allclose(res.t_draws, ref.t, rtol=TOL, atol=TOL)


def test_path_choice_follows_the_documented_rule(monkeypatch: pytest.MonkeyPatch) -> None:
    # The rule in the module docstring (common practice, no source: cost and memory).
    no_fe = compute_moments(random_design(36, n=200, q=2, c=2, n_fe=0, n_clusters=10))
    fe = compute_moments(random_design(36, n=200, q=2, c=2, n_fe=1, n_clusters=10))
    ten = wb._cluster_index(np.arange(200) % 10, 200)
    hundred = wb._cluster_index(np.arange(200) % 100, 200)
    assert wb._choose_path(no_fe, ten, 999) == "low rank"
    assert wb._choose_path(no_fe, None, 999) == "low rank"
    assert wb._choose_path(fe, ten, 999) == "coupled"  # G q = 20 absorbed columns <= draws
    assert wb._choose_path(fe, hundred, 199) == "per draw"  # G q = 200 > 199
    assert wb._choose_path(fe, hundred, 200) == "coupled"
    assert wb._choose_path(fe, None, 999) == "coupled"  # n q = 400 <= 999
    assert wb._choose_path(fe, None, 399) == "per draw"
    # one fixed effect, its codes given (r = 2 controls, n (r + 2) = 800): closed-form
    # coupling at cluster level when A and C fit and either G q <= draws or G^2 q <= 800
    assert wb._choose_path(fe, ten, 999, True) == "one effect"
    assert wb._choose_path(fe, ten, 19, True) == "one effect"  # G^2 q = 200 <= 800
    assert wb._choose_path(fe, hundred, 200, True) == "one effect"  # as the coupled path
    assert wb._choose_path(fe, hundred, 199, True) == "per draw"  # G^2 q = 20,000 > 800
    assert wb._choose_path(fe, None, 999, True) == "coupled"  # observation level unchanged
    assert wb._choose_path(fe, None, 399, True) == "per draw"
    assert wb._choose_path(no_fe, ten, 999, True) == "low rank"
    monkeypatch.setattr(wb, "COUPLING_BYTES", 2 * 10 * 20 * 8 - 1)  # A and C would not fit
    assert wb._choose_path(fe, ten, 999) == "per draw"
    assert wb._choose_path(fe, ten, 999, True) == "per draw"
    monkeypatch.setattr(wb, "EXACT_ROWS_LIMIT", 199)
    assert wb._choose_path(no_fe, None, 999) == "partialled"
    assert wb._choose_path(fe, None, 999) == "partialled"
    assert wb._choose_path(fe, ten, 999) == "per draw"  # clusters are always exact


@pytest.mark.parametrize("clustered", [True, False])
@pytest.mark.parametrize("weighted", [True, False])
@pytest.mark.parametrize("c", [3, 0])
def test_one_effect_path_equals_reference_loop(clustered: bool, weighted: bool, c: int) -> None:
    # One fixed-effect dimension, its codes given: at cluster level the coupling arrays in
    # closed form (P_W = P_F + Q Q'), chosen automatically; at observation level the codes
    # change nothing (the general exact path). Source: the full-design reference loop
    # (dummies as columns, linearmodels refit per draw), draw for draw.
    d = random_design(37, n=160, q=2, c=c, n_fe=1, n_clusters=11, weighted=weighted)
    m = compute_moments(d)
    codes = d.clusters[:, 0] if clustered else None
    index = None if codes is None else wb._cluster_index(codes, m.n)
    assert wb._choose_path(m, index, 30, True) == ("one effect" if clustered else "per draw")
    res = wild_bootstrap_tsls(
        m,
        cluster_codes=codes,
        k=1 + m.k_exog,
        draws=30,
        weights="webb",
        seed=12,
        beta0=0.3,
        fixed_effects=d.fixed_effects,
    )
    ref = full_design_loop(d, codes, 30, "webb", 12, 0.3)
    np.testing.assert_allclose(res.t_draws, ref.t, rtol=TOL, atol=TOL)


@pytest.mark.parametrize("clustered", [True, False])
@pytest.mark.parametrize("recode", ["as given", "gaps", "negative"])
def test_one_effect_path_equals_coupled_path(
    monkeypatch: pytest.MonkeyPatch, clustered: bool, recode: str
) -> None:
    # The closed form (forced, also with one row per unit) against the coupled path forced
    # (the masked instrument columns absorbed by pyhdfe), on the same draws; any integer
    # labelling of the levels gives the same result (codes with unused values, negative
    # codes). Source: the coupled path, itself checked against the full-design loop above.
    d = random_design(39, n=240, q=3, c=2, n_fe=1, n_clusters=15, weighted=True)
    m = compute_moments(d)
    codes = d.clusters[:, 0] if clustered else None
    fe = {"as given": d.fixed_effects, "gaps": 7 * d.fixed_effects + 3}.get(
        recode, -5 * d.fixed_effects - 1
    )
    kw = {"cluster_codes": codes, "k": 1 + m.k_exog, "draws": 40, "weights": "webb", "seed": 2}
    monkeypatch.setattr(wb, "_choose_path", lambda *_: "one effect")
    fast = wild_bootstrap_tsls(m, fixed_effects=fe, **kw)
    monkeypatch.setattr(wb, "_choose_path", lambda *_: "coupled")
    coupled = wild_bootstrap_tsls(m, **kw)
    np.testing.assert_allclose(fast.t_draws, coupled.t_draws, rtol=TOL, atol=TOL)
    assert fast.t_statistic == pytest.approx(coupled.t_statistic, rel=TOL)


def test_two_fixed_effects_given_take_the_general_paths() -> None:
    # With two fixed-effect dimensions the codes are accepted and the absorbed paths used.
    # Source: the full-design reference loop.
    d = random_design(40, n=150, q=1, c=2, n_fe=2, n_clusters=10)
    m = compute_moments(d)
    res = wild_bootstrap_tsls(
        m,
        cluster_codes=d.clusters,
        k=1 + m.k_exog,
        draws=20,
        weights="webb",
        seed=6,
        beta0=TRUE_BETA,
        fixed_effects=d.fixed_effects,
    )
    ref = full_design_loop(d, d.clusters[:, 0], 20, "webb", 6, TRUE_BETA)
    np.testing.assert_allclose(res.t_draws, ref.t, rtol=TOL, atol=TOL)


def test_fixed_effect_codes_must_match_the_moments() -> None:
    d = random_design(42, n=120, q=2, n_fe=1, n_clusters=10)
    m = compute_moments(d)
    kw = {"cluster_codes": d.clusters, "k": 1 + m.k_exog, "draws": 9, "weights": "webb", "seed": 1}
    with pytest.raises(ValueError, match="shape \\(n, f\\)"):
        wild_bootstrap_tsls(m, fixed_effects=d.fixed_effects[:50], **kw)
    with pytest.raises(ValueError, match="partialled with fixed effects"):
        wild_bootstrap_tsls(m, fixed_effects=np.zeros((m.n, 0), dtype=np.int64), **kw)
    with pytest.raises(ValueError, match="integer codes"):
        wild_bootstrap_tsls(m, fixed_effects=d.fixed_effects.astype(float), **kw)
    no_fe = compute_moments(random_design(42, n=120, q=2, n_fe=0, n_clusters=10))
    with pytest.raises(ValueError, match="partialled without fixed effects"):
        wild_bootstrap_tsls(no_fe, fixed_effects=d.fixed_effects, **{**kw, "k": 1 + no_fe.k_exog})


@pytest.mark.parametrize("clustered", [True, False])
@pytest.mark.parametrize("weights", ["rademacher", "webb"])
@pytest.mark.parametrize("path", EXACT_PATHS)
def test_chunked_path_equals_reference_loop(
    monkeypatch: pytest.MonkeyPatch, clustered: bool, weights: str, path: str
) -> None:
    # The memory-bounded paths (draws in chunks, uniforms a few rows at a time, masked
    # instrument columns a few units at a time, draws absorbed a few at a time, per-unit sums
    # a block of rows at a time) must give the same draws as one (draws, G) matrix.
    # Source: the full-design reference loop.
    n_fe = 0 if path == "low rank" else 1
    d = random_design(41, n=300, q=2, c=1, n_fe=n_fe, n_clusters=150, weighted=True)
    m = compute_moments(d)
    codes = d.clusters[:, 0] if clustered else None
    units = m.n if codes is None else int(np.unique(codes).size)
    monkeypatch.setattr(wb, "_choose_path", lambda *_: path)
    monkeypatch.setattr(wb, "INDEX_CHUNK_BYTES", 7 * units)  # 7 draws per chunk
    monkeypatch.setattr(wb, "UNIFORM_CHUNK_BYTES", 8 * 3 * units)  # 3 rows of uniforms
    monkeypatch.setattr(wb, "MASK_CHUNK_BYTES", 8 * m.n * m.q * 13)  # 13 units' columns
    monkeypatch.setattr(wb, "MASK_COLUMNS", 1_000)
    if path == "low rank":  # per-unit sums 37 rows at a time (8 columns: r = 2, q = 2)
        monkeypatch.setattr(wb, "WORK_BYTES", 8 * 8 * 37)
    res = wild_bootstrap_tsls(
        m, cluster_codes=codes, k=1 + m.k_exog, draws=20, weights=weights, seed=9, beta0=0.5
    )
    ref = full_design_loop(d, codes, 20, weights, 9, 0.5)
    np.testing.assert_allclose(res.t_draws, ref.t, rtol=TOL, atol=TOL)


@pytest.mark.parametrize("weights", ["rademacher", "webb"])
def test_observation_level_approximation_is_the_documented_one(
    monkeypatch: pytest.MonkeyPatch, weights: str
) -> None:
    # Above EXACT_ROWS_LIMIT rows the observation-level bootstrap skips re-partialling.
    # Sources: (1) the partialled-space loop, draw for draw, also through the memory-bounded
    # path (draws in chunks, rows in blocks, columns rebuilt per chunk); (2) the exact
    # full-design loop: every draw within the triangle-inequality bound documented in the
    # module and within 5 k_W / n (3 controls and a 6-level fixed effect, k_W / n = 0.03).
    d = random_design(43, n=300, q=2, c=3, n_fe=1, weighted=True)
    m = compute_moments(d)
    kw = {"cluster_codes": None, "k": 1 + m.k_exog, "draws": 45, "weights": weights, "seed": 4}
    monkeypatch.setattr(wb, "EXACT_ROWS_LIMIT", m.n - 1)
    res = wild_bootstrap_tsls(m, beta0=TRUE_BETA, **kw)
    monkeypatch.setattr(wb, "INDEX_CHUNK_BYTES", 7 * m.n)  # 7 draws per chunk
    monkeypatch.setattr(wb, "UNIFORM_CHUNK_BYTES", 8 * 3 * m.n)  # 3 rows of uniforms
    monkeypatch.setattr(wb, "BLOCK_BYTES", 8 * 7 * 40)  # 40 rows per block
    monkeypatch.setattr(wb, "MIN_BLOCK_UNITS", 1)
    monkeypatch.setattr(wb, "COLUMNS_KEEP_BYTES", 0)  # rebuild the columns for every chunk
    chunked = wild_bootstrap_tsls(m, beta0=TRUE_BETA, **kw)
    shortcut = partialled_loop(m, None, 45, weights, 4, TRUE_BETA)
    np.testing.assert_allclose(res.t_draws, shortcut, rtol=TOL, atol=TOL)
    np.testing.assert_allclose(chunked.t_draws, shortcut, rtol=TOL, atol=TOL)

    exact = full_design_loop(d, None, 45, weights, 4, TRUE_BETA)
    gap = np.abs(res.t_draws / exact.t - 1)
    assert np.all(gap <= exact.bound + TOL)
    k_w = m.k_exog
    assert k_w == 3 + 6
    assert np.all(gap <= 5 * k_w / m.n)
    assert np.max(gap) > 1e-4  # the approximation is not exact


def few_clusters_design(
    rng: np.random.Generator,
    clusters: int = 10,
    per: int = 20,
    n_controls: int = 0,
    fe_levels: int = 0,
) -> Design:
    """Invented simulation data under the null beta = 0: instrument and errors both carry a
    cluster component (the setting where cluster-robust t tests over-reject). Optional
    controls with a cluster component that move the instrument, the errors and x, and a
    fixed effect crossed with the clusters."""
    cl = np.repeat(np.arange(clusters), per)
    n = cl.size
    z = rng.normal(size=(clusters, 1))[cl] + rng.normal(size=(n, 1))
    u = rng.normal(size=clusters)[cl] + rng.normal(size=n)
    noise = rng.normal(size=n)
    controls = rng.normal(size=(clusters, n_controls))[cl] + rng.normal(size=(n, n_controls))
    fe = np.zeros((n, 0), dtype=np.int64)
    y = np.zeros(n)
    if n_controls:
        z = z + 0.5 * controls[:, :1]
        u = u + 0.5 * controls[:, -1]
        y = controls @ np.full(n_controls, 0.5)
    if fe_levels:
        codes = np.arange(n) % fe_levels
        rng.shuffle(codes)  # every level present, crossed with the clusters
        fe = codes[:, None]
        y = y + 0.4 * codes
    x = 0.8 * z[:, 0] + 0.5 * u + controls @ np.full(n_controls, 0.3) + noise
    return Design(
        y=y + u,  # y = 0 * x + controls + fixed effect + u
        endog=x[:, None],
        instruments=z,
        controls=controls,
        fixed_effects=fe,
        clusters=cl[:, None],
        weights=None,
        outcome_name="y",
        endog_names=("x",),
        instrument_names=("z",),
        control_names=tuple(f"c{j}" for j in range(n_controls)),
        fixed_effect_names=("fe",) if fe_levels else (),
        cluster_names=("group",),
    )


def test_few_clusters_bootstrap_holds_size_where_cluster_t_over_rejects() -> None:
    # Qualitative Monte Carlo, 1,000 replications at 10 clusters, 199 Webb draws each.
    # Cameron, Gelbach & Miller (2008, REStat 90(3), 414-427): the cluster-robust t test with
    # normal critical values rejects a true null well above 5% with 10 clusters (from memory);
    # Davidson & MacKinnon (2010, simulations) and Webb (2014, six-point draws for few
    # clusters): the restricted wild bootstrap is close to 5% (from memory). With 1,000
    # replications the Monte Carlo standard error of a 5% rate is 0.7 points; the bounds are
    # about 3 of them. The design has a constant only.
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


def size_with_controls(reps: int, seed: int) -> tuple[float, float, float]:
    """Rejection rates at 5% of a true null: cluster t test (normal critical values), the
    re-partialled bootstrap, and the partialled-space shortcut (the same columns with a
    partialler that holds no W, so that no bootstrap sample is re-partialled). 10 clusters of
    30 rows, 3 cluster-correlated controls, a 6-level fixed effect: 9 columns in W."""
    rng = np.random.default_rng(seed)
    reject = np.zeros(3)
    for r in range(reps):
        d = few_clusters_design(rng, per=30, n_controls=3, fe_levels=6)
        m = compute_moments(d)
        kw = {"cluster_codes": d.clusters, "k": 1 + m.k_exog, "draws": 199, "weights": "webb"}
        res = wild_bootstrap_tsls(m, seed=r, **kw)
        bare = Partialler(
            sqrt_w=None,
            weights_normalised=None,
            q=np.zeros((m.n, 0)),
            absorber=None,
            df_absorbed=m.k_exog,
            kept_controls=(),
        )
        shortcut = wild_bootstrap_tsls(
            Moments(y=m.y, x=m.x, z=m.z, k_exog=m.k_exog, partialler=bare), seed=r, **kw
        )
        assert shortcut.t_statistic == pytest.approx(res.t_statistic, rel=TOL)
        reject += [
            2 * stats.norm.sf(abs(res.t_statistic)) < 0.05,
            res.p_value < 0.05,
            shortcut.p_value < 0.05,
        ]
    return tuple(reject / reps)  # type: ignore[return-value]


def test_few_clusters_with_controls_and_fixed_effect_bootstrap_holds_size() -> None:
    # Qualitative Monte Carlo, 1,000 replications, 199 Webb draws each (sources as in the
    # test above). With 9 columns in W the re-partialled bootstrap stays near 5% (bounds 2.5-8%,
    # about 4 Monte Carlo standard errors), while the shortcut that does not re-partial each
    # bootstrap sample rejects more often on the same data (paired: the same data sets and
    # draws; measured 1.8-3.7 points more over seven seeds of 1,000 replications).
    rate_t, rate_boot, rate_shortcut = size_with_controls(1000, 2025)
    assert 0.025 <= rate_boot <= 0.08
    assert rate_t >= 0.09
    assert rate_shortcut - rate_boot >= 0.01


@pytest.mark.slow
def test_few_clusters_with_controls_size_over_more_replications() -> None:
    # The same study with 5,000 replications (Monte Carlo standard error 0.3 points).
    rate_t, rate_boot, rate_shortcut = size_with_controls(5000, 2026)
    assert 0.035 <= rate_boot <= 0.075
    assert rate_t >= 0.09
    assert rate_shortcut - rate_boot >= 0.01


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
