"""Sensitivity to a bounded failure of the exclusion restriction (Conley, Hansen & Rossi 2012).

Outside references, each named again beside its check:
- linearmodels 7.1 ``IV2SLS`` fitted on the full design (constant, controls and fixed-effect
  dummies as columns) of the outcome y - Z gamma, ``debiased=True`` (our small-sample
  conventions); its ``conf_int`` reads a t distribution when debiased, so intervals are
  built here as params +/- z x std_errors, the normal reference the appendix uses.
- statsmodels OLS / WLS for the first-stage coefficient of the known-shift check.
- plain numpy on the full design, written independently of the moment engine: 2SLS as
  H y with H = (X'P_Z X)^-1 X'P_Z, the HC1 covariance H diag(e^2) H' n / (n - k), and the
  local-to-zero formulas of Conley, Hansen & Rossi (2012, sect. 3; formulas from memory):
  beta-hat ~ N(beta + A mu, V + A Omega A'), A = (X'P_Z X)^-1 X'P_Z Z.
- for two-way clustering with few clusters (where the variance's quadratic form in gamma can
  be indefinite and the box's vertices no longer suffice): the engine's 2SLS refitted at every
  point of a dense grid of gamma, and scipy's bounded scalar minimiser (Brent) over the same
  refits; the engine's two-way covariance itself is held to linearmodels in
  test_engine_vs_linearmodels.py.
- a simulation in which the direct effect gamma is itself drawn from the prior in every
  replication (invented data, simulation-recovery only): the local-to-zero interval must
  cover about 95% of the time, the plain 2SLS interval far less.

Tolerances: exact linear algebra on both sides, 1e-12 absolute where the same engine
routine is compared with itself and 1e-9 relative against linearmodels / numpy (the engine
is held to linearmodels at 1e-10 in test_engine_vs_linearmodels.py); root-finding results
at 1e-8; simulation coverage within about 3 Monte Carlo standard errors.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from helpers_design import random_design, reference_columns
from linearmodels.iv import IV2SLS
from scipy import optimize, stats

from reportkit.coefficients import coefficient_rows
from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.design import Design
from reportkit.engine.estimators import tsls
from reportkit.engine.moments import compute_moments
from reportkit.results import ExclusionSensitivity
from reportkit.variants.exclusion import _family, exclusion_sensitivity

LEVEL = 0.95
Z95 = float(stats.norm.ppf(0.975))
KINDS = ["classical", "robust", "cluster"]


# --- helpers -------------------------------------------------------------------------


def cov_spec(d: Design, kind: str) -> CovarianceSpec:
    return CovarianceSpec.build(kind, d.clusters if kind == "cluster" else None)  # type: ignore[arg-type]


def run(
    d: Design,
    kind: str,
    ranges: dict[int, tuple[float, float, float | None, float | None]],
    grid_points: int = 11,
) -> list[ExclusionSensitivity]:
    return exclusion_sensitivity(
        compute_moments(d),
        cov_spec(d, kind),
        ranges=ranges,
        instrument_names=d.instrument_names,
        endog_names=d.endog_names,
        labels={"x0": "Hours of tutoring", "z0": "Voucher offer"},
        level=LEVEL,
        grid_points=grid_points,
        covariance_text=kind,
    )


def shifted(d: Design, gamma: np.ndarray) -> Design:
    """The design with the outcome y - Z gamma (gamma over all instruments)."""
    return replace(d, y=d.y - d.instruments @ gamma)


def engine_interval(d: Design, kind: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The main 2SLS estimate and interval as the estimation stage builds them."""
    rows = coefficient_rows(tsls(compute_moments(d), cov_spec(d, kind)), d.endog_names, {}, LEVEL)
    return (
        np.array([r.estimate for r in rows]),
        np.array([r.ci_lower for r in rows]),
        np.array([r.ci_upper for r in rows]),
    )


def linearmodels_interval(d: Design, kind: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """linearmodels IV2SLS on the full design; normal interval from params and SEs."""
    ref = reference_columns(d)
    cov_type = {"classical": "unadjusted", "robust": "robust", "cluster": "clustered"}[kind]
    kw: dict = {"cov_type": cov_type, "debiased": True}
    if kind == "cluster":
        kw["clusters"] = pd.DataFrame(d.clusters) if d.clusters.shape[1] == 2 else d.clusters[:, 0]
    fit = IV2SLS(ref.y, ref.exog, ref.endog, ref.instruments, weights=d.weights).fit(**kw)
    names = list(d.endog_names)
    b = fit.params[names].to_numpy()
    se = fit.std_errors[names].to_numpy()
    return b, b - Z95 * se, b + Z95 * se


def numpy_full_design(d: Design) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Full-design 2SLS pieces in plain numpy: (H, X, Z_excluded, sqrt w), transformed."""
    exog = reference_columns(d).exog.to_numpy()
    sw = np.ones(d.n) if d.weights is None else np.sqrt(d.weights / d.weights.mean())
    x = np.column_stack([d.endog, exog]) * sw[:, None]
    z = np.column_stack([d.instruments, exog]) * sw[:, None]
    xhat = z @ np.linalg.lstsq(z, x, rcond=None)[0]  # P_Z X
    h = np.linalg.solve(xhat.T @ x, xhat.T)  # 2SLS: b = H y
    return h, x, d.instruments * sw[:, None], sw


def numpy_intervals(d: Design, outcomes: np.ndarray, kind: str) -> tuple[np.ndarray, np.ndarray]:
    """2SLS estimate and SE of the endogenous coefficients for many outcome columns (n, G)
    at once, HC1 (var = H diag(e^2) H' n / (n - k)) or one-way cluster (Liang & Zeger 1986:
    sums of H e over clusters, factor (n - 1) / (n - k) x C / (C - 1)); diagonal only."""
    h, x, _, sw = numpy_full_design(d)
    yt = outcomes * sw[:, None]
    b = h @ yt
    e = yt - x @ b
    n, k = x.shape
    p = d.endog.shape[1]
    if kind == "robust":
        var = (h[:p] ** 2) @ (e**2) * (n / (n - k))
    else:
        codes = np.unique(d.clusters[:, 0], return_inverse=True)[1]
        onehot = np.eye(codes.max() + 1)[codes]  # (n, C)
        c = onehot.shape[1]
        var = np.array([((onehot.T @ (h[j][:, None] * e)) ** 2).sum(axis=0) for j in range(p)])
        var *= (n - 1) / (n - k) * c / (c - 1)
    return b[:p], np.sqrt(var)


def few_cluster_two_way(seed: int) -> Design:
    """Two-way clustering with 5 x 4 clusters: its variance form can be indefinite."""
    d = random_design(seed, q=1, n=120, n_clusters=5)
    rng = np.random.default_rng(seed + 1000)
    second = rng.integers(0, 4, size=d.n)
    return replace(d, clusters=np.column_stack([d.clusters[:, 0], second]))


# --- union of confidence intervals ---------------------------------------------------


@pytest.mark.parametrize("kind", KINDS)
def test_zero_range_gives_the_main_interval(kind: str) -> None:
    d = random_design(21, q=2)
    out = run(d, kind, {0: (0.0, 0.0, None, 0.1)})
    est, lo, hi = engine_interval(d, kind)
    u = out[0].union_interval
    # the estimation stage's own interval (coefficients.coefficient_rows on engine 2SLS)
    assert u.lower == pytest.approx(lo[0], abs=1e-12)
    assert u.upper == pytest.approx(hi[0], abs=1e-12)
    # and linearmodels IV2SLS on the full design
    _, ref_lo, ref_hi = linearmodels_interval(d, kind)
    assert u.lower == pytest.approx(ref_lo[0], rel=1e-9)
    assert u.upper == pytest.approx(ref_hi[0], rel=1e-9)
    assert all(pt.estimate == pytest.approx(est[0], abs=1e-12) for pt in out[0].curve)
    assert out[0].label == "Hours of tutoring"
    assert out[0].covariance == kind and out[0].level == LEVEL


@pytest.mark.parametrize(
    "kind,weighted", [("classical", False), ("robust", False), ("robust", True), ("cluster", True)]
)
def test_known_shift_is_the_2sls_of_y_minus_z_gamma(kind: str, weighted: bool) -> None:
    # Conley, Hansen & Rossi (2012, sect. 3): with gamma known to be g, the model is the
    # usual IV model for y - Z g; with one instrument and one endogenous regressor the
    # estimate moves by -g / pi, pi the first-stage coefficient.
    d = random_design(22, q=1, weighted=weighted)
    g = 0.23
    out = run(d, kind, {0: (g, g, None, 0.05)})[0]
    _, ref_lo, ref_hi = linearmodels_interval(shifted(d, np.array([g])), kind)
    assert out.union_interval.lower == pytest.approx(ref_lo[0], rel=1e-9)
    assert out.union_interval.upper == pytest.approx(ref_hi[0], rel=1e-9)
    # first-stage coefficient from statsmodels OLS / WLS of x on [constant, controls, z]
    ref = reference_columns(d)
    fs_x = pd.concat([ref.exog, ref.instruments], axis=1)
    fs = (
        sm.WLS(ref.endog["x0"], fs_x, weights=d.weights)
        if weighted
        else sm.OLS(ref.endog["x0"], fs_x)
    ).fit()
    b0, _, _ = linearmodels_interval(d, kind)
    expected = b0[0] - g / float(fs.params["z0"])
    assert out.local_to_zero_estimate == pytest.approx(expected, rel=1e-9)  # prior mean = g
    assert all(pt.estimate == pytest.approx(expected, rel=1e-9) for pt in out.curve)
    assert out.ranges[0].prior_mean == g and out.ranges[0].prior_sd == 0.05


@pytest.mark.parametrize("kind", ["robust", "cluster"])
def test_union_is_attained_at_the_vertices(kind: str) -> None:
    # The claim in the module docstring (lower end concave, upper end convex in gamma),
    # checked against a dense 61 x 61 grid of intervals computed in plain numpy.
    d = random_design(23, q=2, n=300)
    box = {0: (-0.15, 0.1, None, None), 1: (-0.05, 0.2, None, None)}
    out = run(d, kind, box)[0]
    g0 = np.linspace(-0.15, 0.1, 61)
    g1 = np.linspace(-0.05, 0.2, 61)
    gammas = np.array([(a, b) for a in g0 for b in g1])
    # plain numpy on the full design (HC1 or one-way cluster), vectorised over the grid
    b, se = numpy_intervals(d, d.y[:, None] - d.instruments @ gammas.T, kind)
    lows, highs = b[0] - Z95 * se[0], b[0] + Z95 * se[0]
    u = out.union_interval
    assert lows.min() >= u.lower - 1e-10
    assert highs.max() <= u.upper + 1e-10
    # the extremes sit at corners of the box, and the union is not a degenerate answer
    corners = {(0, 0), (0, 60), (60, 0), (60, 60)}
    assert divmod(int(np.argmin(lows)), 61) in corners
    assert divmod(int(np.argmax(highs)), 61) in corners
    assert lows.min() == pytest.approx(u.lower, abs=1e-9)
    assert highs.max() == pytest.approx(u.upper, abs=1e-9)
    assert np.ptp(lows) > 0.05


def test_curve_points_are_the_engine_2sls_at_each_gamma() -> None:
    d = random_design(24, p=2, q=3, weighted=True, n_fe=1)
    grid = 7
    out = run(d, "robust", {0: (-0.2, 0.1, None, None), 2: (0.0, 0.3, None, None)}, grid)
    for j, res in enumerate(out):
        assert [pt.instrument for pt in res.curve] == ["z0"] * grid + ["z2"] * grid
        for pt in res.curve:
            col = int(pt.instrument[1:])
            gamma = np.zeros(3)
            gamma[col] = pt.gamma
            est, lo, hi = engine_interval(shifted(d, gamma), "robust")
            assert (pt.estimate, pt.ci_lower, pt.ci_upper) == pytest.approx(
                (est[j], lo[j], hi[j]), abs=1e-12
            )
        gam = [pt.gamma for pt in res.curve[:grid]]
        assert gam == pytest.approx(list(np.linspace(-0.2, 0.1, grid)), abs=1e-15)
        assert gam[0] == -0.2 and gam[-1] == 0.1


# --- local to zero --------------------------------------------------------------------


@pytest.mark.parametrize("weighted", [False, True])
def test_local_to_zero_against_full_design_numpy(weighted: bool) -> None:
    # Conley, Hansen & Rossi (2012, sect. 3; formulas from memory):
    # beta-hat ~ N(beta + A mu, V + A Omega A'), A = (X'P_Z X)^-1 X'P_Z Z.
    d = random_design(25, p=2, q=3, weighted=weighted)
    box = {0: (-0.1, 0.3, None, None), 2: (0.0, 0.2, 0.05, 0.08)}
    out = run(d, "robust", box)
    mu = np.array([0.1, 0.05])  # midpoint default; given mean
    sd = np.array([0.1, 0.08])  # (upper - lower) / 4 default; given sd
    h, x, z_excl, sw = numpy_full_design(d)
    p = 2
    b = (h @ (d.y * sw))[:p]
    e = d.y * sw - x @ (h @ (d.y * sw))
    n, k = x.shape
    v = (h * e**2) @ h.T * (n / (n - k))  # HC1 covariance of the full 2SLS
    a = (h @ z_excl)[:p][:, [0, 2]]
    cov = v[:p, :p] + a @ np.diag(sd**2) @ a.T
    shifted_b = b - a @ mu
    half = Z95 * np.sqrt(np.diag(cov))
    for j, res in enumerate(out):
        assert res.local_to_zero_estimate == pytest.approx(shifted_b[j], rel=1e-9)
        assert res.local_to_zero.lower == pytest.approx(shifted_b[j] - half[j], rel=1e-9)
        assert res.local_to_zero.upper == pytest.approx(shifted_b[j] + half[j], rel=1e-9)
        assert [r.prior_mean for r in res.ranges] == pytest.approx(list(mu), abs=1e-15)
        assert [r.prior_sd for r in res.ranges] == pytest.approx(list(sd), abs=1e-15)


def test_local_to_zero_covers_when_gamma_is_drawn_from_the_prior() -> None:
    # Simulation (invented data): in each replication the direct effect gamma is drawn from
    # N(0.15, 0.1^2) and the data are generated with it; the local-to-zero interval treats
    # gamma exactly so and must cover the true beta about 95% of the time; the plain 2SLS
    # interval, centred on a biased estimate, must not.
    rng = np.random.default_rng(20120801)
    reps, n, beta = 300, 250, 0.5
    mean, sd = 0.15, 0.1
    cover_ltz = cover_plain = cover_union = 0
    for _ in range(reps):
        z = rng.normal(size=n)
        c = rng.normal(size=n)
        u = rng.normal(size=n)
        x = 0.8 * z + 0.3 * c + 0.6 * u + rng.normal(size=n)
        gamma = rng.normal(mean, sd)
        y = beta * x + gamma * z + 0.4 * c + u
        d = Design(
            y=y,
            endog=x[:, None],
            instruments=z[:, None],
            controls=c[:, None],
            fixed_effects=np.zeros((n, 0), dtype=np.int64),
            clusters=np.zeros((n, 0), dtype=np.int64),
            weights=None,
            outcome_name="y",
            endog_names=("x0",),
            instrument_names=("z0",),
            control_names=("c0",),
        )
        res = run(d, "robust", {0: (mean - 2 * sd, mean + 2 * sd, None, None)}, grid_points=5)[0]
        _, lo, hi = engine_interval(d, "robust")
        cover_ltz += res.local_to_zero.lower <= beta <= res.local_to_zero.upper
        cover_plain += lo[0] <= beta <= hi[0]
        cover_union += res.union_interval.lower <= beta <= res.union_interval.upper
    # Monte Carlo SE of a 95% coverage rate over 300 replications is about 0.013
    assert 0.91 <= cover_ltz / reps <= 0.99
    assert cover_plain / reps < 0.6
    # gamma lies in the box with probability 0.954, so the union covers at least ~0.91
    assert cover_union / reps >= 0.91


# --- breakdown ------------------------------------------------------------------------


@pytest.mark.parametrize("kind", KINDS)
def test_breakdown_is_where_the_interval_reaches_zero(kind: str) -> None:
    d = random_design(26, q=2, n=400)
    # the second instrument enters with the opposite sign, so that its first stage is
    # negative and the interval reaches zero on the negative side of its direct effect
    d = replace(d, instruments=d.instruments * np.array([1.0, -1.0]))
    _, lo, _ = linearmodels_interval(d, kind)
    assert lo[0] > 0  # precondition: the main interval excludes zero
    out = run(d, kind, {0: (-0.05, 0.05, None, None), 1: (0.0, 0.1, None, None)})[0]
    nearer_side = []
    for col, rng_ in enumerate(out.ranges):
        bd = rng_.breakdown
        assert bd is not None and bd > 0
        # linearmodels at +/- the breakdown value: one side's lower end is 0, the other's not below
        ends = []
        for sign in (1.0, -1.0):
            gamma = np.zeros(2)
            gamma[col] = sign * bd
            ends.append(linearmodels_interval(shifted(d, gamma), kind)[1][0])
        assert min(abs(e) for e in ends) < 1e-8
        assert min(ends) > -1e-8
        nearer_side.append(1.0 if abs(ends[0]) < abs(ends[1]) else -1.0)
        # and nowhere nearer zero: just inside, on both sides, the interval excludes zero
        for sign in (1.0, -1.0):
            gamma = np.zeros(2)
            gamma[col] = sign * 0.99 * bd
            assert engine_interval(shifted(d, gamma), kind)[1][0] > 0
    assert nearer_side == [1.0, -1.0]


def test_breakdown_zero_when_main_interval_covers_zero_and_none_beyond_the_search() -> None:
    d = random_design(27, q=2, n=400)
    wide = run(d, "robust", {0: (-1.0, 1.0, None, None)})[0].ranges[0].breakdown
    assert wide is not None and wide > 1e-3
    # the search reaches 100 x the range's largest bound: [0, wide / 50] finds the same value,
    # [0, wide / 200] stops short of it
    found = run(d, "robust", {0: (0.0, wide / 50, None, None)})[0].ranges[0].breakdown
    assert found == pytest.approx(wide, rel=1e-10)
    assert run(d, "robust", {0: (0.0, wide / 200, None, None)})[0].ranges[0].breakdown is None
    # an outcome with the 2SLS estimate moved to zero: the main interval covers zero
    b0 = engine_interval(d, "robust")[0][0]
    centred = replace(d, y=d.y - b0 * d.endog[:, 0])
    out = run(centred, "robust", {0: (-0.1, 0.1, None, None), 1: (0.0, 0.1, None, None)})[0]
    assert [r.breakdown for r in out.ranges] == [0.0, 0.0]


# --- cluster, two-way cluster, weights ------------------------------------------------


@pytest.mark.parametrize("weighted", [False, True])
def test_two_way_cluster_against_linearmodels(weighted: bool) -> None:
    d = random_design(28, q=2, n=400, n_clusters=30, weighted=weighted, n_fe=1)
    rng = np.random.default_rng(280)
    d = replace(d, clusters=np.column_stack([d.clusters[:, 0], rng.integers(0, 20, size=d.n)]))
    g = np.array([0.12, -0.07])
    out = run(d, "cluster", {0: (g[0], g[0], None, 0.02), 1: (g[1], g[1], None, 0.02)})[0]
    # linearmodels IV2SLS with two-way clustering (Cameron, Gelbach & Miller 2011)
    _, ref_lo, ref_hi = linearmodels_interval(shifted(d, g), "cluster")
    assert out.union_interval.lower == pytest.approx(ref_lo[0], rel=1e-9)
    assert out.union_interval.upper == pytest.approx(ref_hi[0], rel=1e-9)
    box = run(d, "cluster", {0: (-0.1, 0.1, None, None), 1: (0.0, 0.2, None, None)})[0]
    assert box.union_interval.lower is not None and box.union_interval.upper is not None
    assert len(box.curve) == 2 * 11


def test_two_way_indefinite_variance_is_searched_beyond_the_vertices() -> None:
    # With 5 x 4 two-way clusters the variance's quadratic form is indefinite here (checked
    # first), the upper end is not convex, and an interior gamma gives a higher upper end
    # than both vertices: the engine's 2SLS on a dense grid of gamma shows it.
    d = few_cluster_two_way(10)
    m = compute_moments(d)
    cov = cov_spec(d, "cluster")
    assert not _family(m, cov, tsls(m, cov), [0]).exact_vertices
    out = run(d, "cluster", {0: (-0.5, 0.5, None, None)})[0]
    grid = np.linspace(-0.5, 0.5, 401)
    ends = [engine_interval(shifted(d, np.array([g])), "cluster") for g in grid]
    lows = np.array([e[1][0] for e in ends])
    highs = np.array([e[2][0] for e in ends])
    u = out.union_interval
    assert highs.max() > max(highs[0], highs[-1]) + 0.01  # the vertices alone are too narrow
    assert lows.min() >= u.lower - 1e-9 and highs.max() <= u.upper + 1e-9

    # and not wider than the true extremes: scipy's bounded scalar search (Brent) on the
    # engine's 2SLS ends, one fit per evaluation
    def end(g: float, which: int) -> float:
        return engine_interval(shifted(d, np.array([g])), "cluster")[which][0]

    top = optimize.minimize_scalar(
        lambda g: -end(g, 2), bounds=(-0.5, 0.5), method="bounded", options={"xatol": 1e-10}
    )
    assert u.upper == pytest.approx(-top.fun, abs=1e-9)
    assert u.lower == pytest.approx(lows.min(), abs=1e-9)  # the lowest end is at a vertex here
    # breakdown found by scan and bisection: the interval's nearer end is zero there
    d7 = few_cluster_two_way(7)
    bd = run(d7, "cluster", {0: (-0.5, 0.5, None, None)})[0].ranges[0].breakdown
    assert bd is not None and bd > 0
    near = [engine_interval(shifted(d7, np.array([s * bd])), "cluster")[1][0] for s in (1, -1)]
    assert min(abs(v) for v in near) < 1e-8


def test_two_way_negative_variance_leaves_the_union_unbounded() -> None:
    # Where the two-way variance is negative the engine's 2SLS has no standard error; the
    # union over a box containing such a gamma cannot be bounded and those points are left
    # out of the curve.
    d = few_cluster_two_way(22)
    out = run(d, "cluster", {0: (-0.5, 0.5, None, None)}, grid_points=41)[0]
    assert out.union_interval.lower is None and out.union_interval.upper is None
    kept = {pt.gamma for pt in out.curve}
    assert 0 < len(kept) < 41
    for g in np.linspace(-0.5, 0.5, 41):
        with np.errstate(invalid="ignore"):
            _, lo, _ = engine_interval(shifted(d, np.array([g])), "cluster")
        assert (float(g) in kept) == bool(np.isfinite(lo[0]))
    # where even the main estimate's two-way variance is negative, no interval is claimed
    d5 = few_cluster_two_way(5)
    with np.errstate(invalid="ignore"):
        assert np.isnan(engine_interval(d5, "cluster")[1][0])
    out5 = run(d5, "cluster", {0: (-0.5, 0.5, None, None)})[0]
    assert out5.local_to_zero.lower is None and out5.local_to_zero.upper is None
    assert out5.union_interval.lower is None and out5.ranges[0].breakdown == 0.0


def test_output_is_deterministic_and_serialisable() -> None:
    d = random_design(29, q=2, weighted=True)
    a = run(d, "cluster", {1: (-0.1, 0.2, None, None)})
    b = run(d, "cluster", {1: (-0.1, 0.2, None, None)})
    assert [r.model_dump_json() for r in a] == [r.model_dump_json() for r in b]
    assert a[0].ranges[0].instrument == "z1" and a[0].ranges[0].label == "z1"
