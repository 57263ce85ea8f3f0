"""Complier analysis (reportkit.balance.compliers) against simulations with known types,
statsmodels, linearmodels, numpy and pandas computed another way, and the published
definitions of the methods.

Sources of each check:

- shares and covariate means: simulations in which every row's type (complier,
  always-taker, never-taker, defier) is drawn and known, so the true shares and type
  means are the simulation's parameters (Imbens & Angrist 1994; Angrist, Imbens & Rubin
  1996: under monotonicity P(D=1|Z=0) is the always-taker share, P(D=0|Z=1) the
  never-taker share);
- complier share = the OLS (or WLS) coefficient of D on Z: statsmodels; with binary Z
  and no controls that coefficient is the difference of treated shares exactly;
- bootstrap standard error of the complier share: statsmodels' HC0 and cluster standard
  errors of the same coefficient (a bootstrap and a sandwich estimate of the same
  variance; they agree to sampling error of the bootstrap);
- complier outcome means: their difference is the Wald ratio = linearmodels IV2SLS with
  binary D and Z (Imbens & Angrist 1994); each equals its Abadie (2003) kappa_1 / kappa_0
  weighted mean written out row by row (from memory: kappa_1 = D (Z - p) / (p (1 - p)),
  kappa_0 = (1 - D) ((1 - Z) - (1 - p)) / (p (1 - p)));
- weighted means: numpy ``np.average`` row by row, with Abadie's kappa built per row;
- implied masses per bin: pandas crosstabs of (bin, D) within each instrument arm; the
  treated and untreated masses each add up to the complier share (Imbens & Rubin 1997);
- Kitagawa (2015): the statistic written out as a loop over all closed intervals with
  sample end points, as defined in the paper (section 2, from memory); its behaviour
  (rejects with defiers whose outcomes differ, does not reject a valid design) is the
  paper's claim, checked on fixed-seed simulations.

Tolerances: 1e-12 for quantities computed exactly two ways (closed forms, crosstabs);
4 standard errors of the simulation for recovery of true values (stated beside each);
15-20% for a bootstrap standard error against a sandwich one (the bootstrap's own
relative error is about 1 / sqrt(2 * draws)). Designs are invented, seeds fixed.
"""

from __future__ import annotations

import itertools
import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from linearmodels.iv import IV2SLS

from reportkit import results as rk
from reportkit.balance.compliers import complier_analysis, complier_outcome_means
from reportkit.balance.compliers_kitagawa import KITAGAWA_TRIM
from reportkit.results import ComplierAnalysis, LateImplication, NotApplicable

COMPLIER, ALWAYS, NEVER, DEFIER = 0, 1, 2, 3


def simulate(
    n: int,
    seed: int,
    *,
    types: tuple[float, float, float, float] = (0.5, 0.2, 0.3, 0.0),
    p_on: float = 0.4,
    defier_shift: float = 0.0,
) -> dict[str, np.ndarray]:
    """Rows with known types; x's mean by type is (1, 2, -1, 0); y(0) ~ N(type mean, 1)
    with type means (0, 1, -0.5, 0 + defier_shift) and an effect of 1 for everyone."""
    rng = np.random.default_rng(seed)
    kind = rng.choice(4, size=n, p=types)
    z = (rng.random(n) < p_on).astype(float)
    d = np.select([kind == COMPLIER, kind == ALWAYS, kind == NEVER], [z, 1.0, 0.0], default=1.0 - z)
    x = np.array([1.0, 2.0, -1.0, 0.0])[kind] + rng.normal(size=n)
    female = (rng.random(n) < np.array([0.3, 0.6, 0.5, 0.5])[kind]).astype(float)
    y = np.array([0.0, 1.0, -0.5, defier_shift])[kind] + d + rng.normal(size=n)
    return {"z": z, "d": d, "y": y, "x": x, "female": female, "kind": kind}


def analyse(
    z: np.ndarray,
    d: np.ndarray,
    y: np.ndarray,
    covariates: dict[str, np.ndarray] | None = None,
    **options: object,
) -> ComplierAnalysis | NotApplicable:
    settings: dict[str, object] = {
        "weights": None,
        "clusters": None,
        "outcome_bins": 10,
        "draws": 199,
        "seed": 20240611,
        "level": 0.95,
    }
    settings.update(options)
    return complier_analysis(
        z=z,
        d=d,
        y=y,
        covariates=covariates or {},
        instrument="voucher",
        instrument_label="Voucher offered",
        treatment="tutoring_hours > 0",
        treatment_label="Any tutoring",
        outcome="score",
        outcome_label="Test score",
        labels={"x": "Prior score"},
        **settings,  # type: ignore[arg-type]
    )


def analysed(*args: object, **kwargs: object) -> ComplierAnalysis:
    result = analyse(*args, **kwargs)  # type: ignore[arg-type]
    assert isinstance(result, ComplierAnalysis)
    return result


def implication(result: ComplierAnalysis) -> LateImplication:
    assert isinstance(result.late_implication, LateImplication)
    return result.late_implication


# --- recovery of known types ---------------------------------------------------------


def test_large_simulation_recovers_true_shares_and_type_means() -> None:
    sim = simulate(200_000, seed=11)
    x_missing = sim["x"].copy()
    x_missing[np.random.default_rng(12).random(len(x_missing)) < 0.1] = np.nan
    covariates = {"x": sim["x"], "female": sim["female"], "x_missing": x_missing}
    result = analysed(sim["z"], sim["d"], sim["y"], covariates, draws=99)
    shares = result.shares
    # True shares are the simulation's (0.5, 0.2, 0.3); 4 binomial standard errors:
    # complier share sd = sqrt(.7*.3/80000 + .2*.8/120000) ~ 0.0019, so 0.008.
    assert shares.compliers == pytest.approx(0.5, abs=0.008)
    assert shares.always_takers == pytest.approx(0.2, abs=0.005)  # sd ~ 0.0012
    assert shares.never_takers == pytest.approx(0.3, abs=0.007)  # sd ~ 0.0016
    assert shares.n_on + shares.n_off == 200_000
    by_name = {m.covariate: m for m in result.means}
    # x's true type means are (1, 2, -1); sd of each estimated mean is below 0.0075
    # (about 25,000 always-takers with Z=0 and 24,000 never-takers with Z=1; the complier
    # mean's bootstrap sd is about 0.006), so 4 sd is 0.03.
    for name in ("x", "x_missing"):
        tol = 0.03 if name == "x" else 0.035  # 10% fewer rows
        assert by_name[name].compliers == pytest.approx(1.0, abs=tol)
        assert by_name[name].always_takers == pytest.approx(2.0, abs=tol)
        assert by_name[name].never_takers == pytest.approx(-1.0, abs=tol)
        assert by_name[name].full_sample == pytest.approx(0.6, abs=0.012)  # .5 + .4 - .3
    assert by_name["x"].label == "Prior score" and by_name["female"].label == "female"
    # The binary covariate's type shares are (0.3, 0.6, 0.5); binomial sd below 0.004.
    assert by_name["female"].compliers == pytest.approx(0.3, abs=0.016)
    assert by_name["female"].always_takers == pytest.approx(0.6, abs=0.016)
    assert by_name["female"].never_takers == pytest.approx(0.5, abs=0.016)
    # The bootstrap sd of the complier mean is near the spread of the estimator
    # (0.004 to 0.01 covers the delta-method value ~0.0065 with a wide margin).
    se = by_name["x"].compliers_se
    assert se is not None and 0.004 < se < 0.01


def test_complier_share_is_the_ols_first_stage_and_its_bootstrap_se_the_robust_se() -> None:
    sim = simulate(5_000, seed=21)
    result = analysed(sim["z"], sim["d"], sim["y"], draws=399)
    # statsmodels OLS of D on a constant and Z: slope = P(D=1|Z=1) - P(D=1|Z=0) exactly.
    fit = sm.OLS(sim["d"], sm.add_constant(sim["z"])).fit(cov_type="HC0")
    assert result.shares.compliers == pytest.approx(fit.params[1], abs=1e-12)
    assert result.shares.treated_share_off == pytest.approx(fit.params[0], abs=1e-12)
    # Bootstrap sd vs statsmodels HC0 sd of the same coefficient (399 draws: the
    # bootstrap sd's own relative error is ~3.5%, so 15% is 4 of them).
    assert result.shares.compliers_se == pytest.approx(fit.bse[1], rel=0.15)


def test_cluster_bootstrap_se_matches_the_cluster_robust_se() -> None:
    rng = np.random.default_rng(31)
    groups = 200
    clusters = np.repeat(np.arange(groups), 25)
    # Instrument assigned by cluster; compliance correlated within clusters.
    z = (rng.random(groups) < 0.5).astype(float)[clusters]
    propensity = np.clip(0.5 + rng.normal(scale=0.2, size=groups), 0.05, 0.95)[clusters]
    complier = rng.random(len(z)) < propensity
    d = np.where(complier, z, (rng.random(len(z)) < 0.3).astype(float))
    y = d + rng.normal(size=len(z))
    result = analysed(z, d, y, clusters=clusters, draws=399)
    fit = sm.OLS(d, sm.add_constant(z)).fit(cov_type="cluster", cov_kwds={"groups": clusters})
    assert result.shares.compliers == pytest.approx(fit.params[1], abs=1e-12)
    # statsmodels' cluster sd (with its G/(G-1) (n-1)/(n-k) factor, ~1.005 here) vs the
    # bootstrap over whole clusters; 20% allows the bootstrap's error and random arm sizes.
    assert result.shares.compliers_se == pytest.approx(fit.bse[1], rel=0.2)
    # The instrument is constant within clusters, so Kitagawa's pooled cluster bootstrap runs.
    assert isinstance(implication(result).test, rk.TestResult)
    assert "whole clusters" in implication(result).test.covariance


def test_wald_ratio_is_the_difference_of_complier_outcome_means() -> None:
    sim = simulate(3_000, seed=41)
    z, d, y = sim["z"], sim["d"], sim["y"]
    means = complier_outcome_means(z, d, y)
    assert means is not None
    # linearmodels 2SLS of Y on D instrumented by Z (with a constant): the Wald ratio.
    exog = pd.DataFrame({"const": np.ones(len(y))})
    iv = IV2SLS(pd.Series(y), exog, pd.Series(d, name="d"), pd.Series(z, name="z")).fit()
    assert means[0] - means[1] == pytest.approx(iv.params["d"], abs=1e-10)
    # Abadie (2003) kappa_1 and kappa_0 weights, row by row (formulas from memory).
    p = z.mean()
    kappa_1 = d * (z - p) / (p * (1 - p))
    kappa_0 = (1 - d) * ((1 - z) - (1 - p)) / (p * (1 - p))
    assert means[0] == pytest.approx(np.average(y, weights=kappa_1), abs=1e-10)
    assert means[1] == pytest.approx(np.average(y, weights=kappa_0), abs=1e-10)
    # The simulation's compliers have y(0) ~ N(0, 1) and an effect of 1 (n = 3000:
    # sd of each mean < 0.1 here, 4 sd = 0.4).
    assert means[0] == pytest.approx(1.0, abs=0.4)
    assert means[1] == pytest.approx(0.0, abs=0.4)


# --- weights -------------------------------------------------------------------------


def test_weighted_shares_and_means_match_hand_computed_weighted_averages() -> None:
    sim = simulate(4_000, seed=51)
    z, d, x = sim["z"], sim["d"], sim["x"].copy()
    weights = np.random.default_rng(52).uniform(0.2, 3.0, size=len(z))
    x[np.random.default_rng(53).random(len(x)) < 0.15] = np.nan
    result = analysed(z, d, sim["y"], {"x": x}, weights=weights)
    on, off = z == 1, z == 0
    treated_on = np.average(d[on], weights=weights[on])
    treated_off = np.average(d[off], weights=weights[off])
    assert result.shares.treated_share_on == pytest.approx(treated_on, abs=1e-12)
    assert result.shares.always_takers == pytest.approx(treated_off, abs=1e-12)
    assert result.shares.never_takers == pytest.approx(1 - treated_on, abs=1e-12)
    # statsmodels WLS of D on Z: slope = weighted complier share.
    wls = sm.WLS(d, sm.add_constant(z), weights=weights).fit()
    assert result.shares.compliers == pytest.approx(wls.params[1], abs=1e-12)
    # Covariate means by hand on the rows where x is present (Abadie 2003 kappa, p the
    # weighted share with Z=1 on those rows).
    keep = np.isfinite(x)
    zk, dk, xk, wk = z[keep], d[keep], x[keep], weights[keep]
    p = np.average(zk, weights=wk)
    kappa = 1 - dk * (1 - zk) / (1 - p) - (1 - dk) * zk / p
    row = result.means[0]
    assert row.compliers == pytest.approx(np.average(xk, weights=wk * kappa), abs=1e-12)
    always = (dk == 1) & (zk == 0)
    never = (dk == 0) & (zk == 1)
    assert row.always_takers == pytest.approx(np.average(xk[always], weights=wk[always]), abs=1e-12)
    assert row.never_takers == pytest.approx(np.average(xk[never], weights=wk[never]), abs=1e-12)
    assert row.full_sample == pytest.approx(np.average(xk, weights=wk), abs=1e-12)
    means = complier_outcome_means(z, d, sim["y"], weights)
    assert means is not None
    wls_y = sm.WLS(sim["y"], sm.add_constant(z), weights=weights).fit()
    assert means[0] - means[1] == pytest.approx(wls_y.params[1] / wls.params[1], abs=1e-10)


# --- implied outcome masses and Kitagawa's test --------------------------------------


def test_masses_of_a_discrete_outcome_match_pandas_crosstabs() -> None:
    sim = simulate(3_000, seed=61)
    y = np.clip(np.round(sim["y"]), -1, 3)  # five values: one bin each
    result = analysed(sim["z"], sim["d"], y, outcome_bins=12)
    bins = implication(result).bins
    assert [b.lower for b in bins] == [-1.0, 0.0, 1.0, 2.0, 3.0]
    assert all(b.lower == b.upper for b in bins)
    frame = pd.DataFrame({"z": sim["z"], "d": sim["d"], "y": y})
    share = {arm: pd.crosstab(part["y"], part["d"]) / len(part) for arm, part in frame.groupby("z")}
    for b in bins:
        treated = share[1.0].loc[b.lower, 1.0] - share[0.0].loc[b.lower, 1.0]
        untreated = share[0.0].loc[b.lower, 0.0] - share[1.0].loc[b.lower, 0.0]
        assert b.treated == pytest.approx(treated, abs=1e-12)
        assert b.untreated == pytest.approx(untreated, abs=1e-12)
        assert b.treated_low <= b.treated <= b.treated_high
        assert b.untreated_low <= b.untreated <= b.untreated_high
    # Each side's masses add up to the complier share (Imbens & Rubin 1997).
    assert sum(b.treated for b in bins) == pytest.approx(result.shares.compliers, abs=1e-12)
    assert sum(b.untreated for b in bins) == pytest.approx(result.shares.compliers, abs=1e-12)


def test_continuous_outcome_bins_at_quantiles_match_pandas_cut() -> None:
    sim = simulate(2_000, seed=71)
    y = sim["y"].copy()
    y[:50] = np.nan  # rows without an outcome are left out of the masses only
    result = analysed(sim["z"], sim["d"], y, outcome_bins=8)
    bins = implication(result).bins
    finite = np.isfinite(y)
    edges = np.quantile(y[finite], np.linspace(0, 1, 9))  # numpy's quantiles
    assert [b.lower for b in bins] == pytest.approx(list(edges[:-1]), abs=0)
    assert [b.upper for b in bins] == pytest.approx(list(edges[1:]), abs=0)
    frame = pd.DataFrame({"z": sim["z"], "d": sim["d"], "y": y})[finite]
    # [lower, upper) bins with the maximum in the last one, by pandas.
    frame["bin"] = pd.cut(frame["y"], edges, right=False, labels=False)
    frame.loc[frame["y"] == edges[-1], "bin"] = len(edges) - 2
    share = {arm: pd.crosstab(p["bin"], p["d"]) / len(p) for arm, p in frame.groupby("z")}
    for k, b in enumerate(bins):
        assert b.treated == pytest.approx(
            share[1.0].loc[k, 1.0] - share[0.0].loc[k, 1.0], abs=1e-12
        )
        assert b.untreated == pytest.approx(
            share[0.0].loc[k, 0.0] - share[1.0].loc[k, 0.0], abs=1e-12
        )
    assert result.n_used == 2_000
    assert result.shares.n_on + result.shares.n_off == 2_000


def test_valid_design_has_no_negative_bin_and_kitagawa_does_not_reject() -> None:
    sim = simulate(3_000, seed=81)
    late = implication(analysed(sim["z"], sim["d"], sim["y"], draws=299))
    assert late.negative_bins == 0
    assert isinstance(late.test, rk.TestResult)
    assert late.test.distribution == "bootstrap" and late.test.df == []
    assert late.test.p_value > 0.05
    assert late.band_level == 0.95 and late.draws == 299


def test_defiers_with_shifted_outcomes_give_negative_bins_and_kitagawa_rejects() -> None:
    # 25% defiers whose outcomes sit 4 sd above everyone else's: for those outcome values
    # P(Y in B, D=1 | Z=0) > P(Y in B, D=1 | Z=1), the violation Kitagawa (2015) detects.
    sim = simulate(3_000, seed=91, types=(0.45, 0.15, 0.15, 0.25), defier_shift=4.0)
    late = implication(analysed(sim["z"], sim["d"], sim["y"], draws=299))
    assert late.negative_bins > 0
    assert isinstance(late.test, rk.TestResult)
    assert late.test.p_value < 0.05


def _kitagawa_by_loops(z: np.ndarray, d: np.ndarray, y: np.ndarray, trim: float) -> float:
    """Kitagawa (2015) statistic, written from the paper's definition (from memory):
    sqrt(mn/N) sup over closed intervals [a, b] with sample end points and d of
    (-1)^d (P(B,d) - Q(B,d)) / max(xi, sqrt((1-l) P(1-P) + l Q(1-Q))), l = m/N."""
    m, n = int(np.sum(z == 1)), int(np.sum(z == 0))
    lam = m / (m + n)
    best = -np.inf
    values = np.unique(y)
    for a, b in itertools.combinations_with_replacement(values, 2):
        inside = (y >= a) & (y <= b)
        for treated in (0, 1):
            p = np.sum(inside & (d == treated) & (z == 1)) / m
            q = np.sum(inside & (d == treated) & (z == 0)) / n
            sigma = np.sqrt((1 - lam) * p * (1 - p) + lam * q * (1 - q))
            best = max(best, (-1) ** treated * (p - q) / max(trim, sigma))
    return float(np.sqrt(m * n / (m + n)) * best)


@pytest.mark.parametrize("shift", [0.0, 3.0])
def test_kitagawa_statistic_equals_the_definition_over_all_intervals(shift: float) -> None:
    # 40 rows: at most 50 distinct outcomes, so the grid is every sample value and the
    # intervals are all closed intervals with sample end points, as in the paper.
    sim = simulate(40, seed=102, types=(0.6, 0.15, 0.15, 0.1), p_on=0.5, defier_shift=shift)
    late = implication(analysed(sim["z"], sim["d"], sim["y"], draws=99))
    assert isinstance(late.test, rk.TestResult)
    expected = _kitagawa_by_loops(sim["z"], sim["d"], sim["y"], KITAGAWA_TRIM)
    assert late.test.statistic == pytest.approx(expected, abs=1e-12)
    assert f"{KITAGAWA_TRIM:g}" in late.test.name
    assert 0.0 <= late.test.p_value <= 1.0


def test_kitagawa_draws_rows_when_the_instrument_varies_within_clusters() -> None:
    sim = simulate(1_000, seed=111)
    clusters = np.arange(1_000) % 40  # the instrument is drawn row by row
    clustered = analysed(sim["z"], sim["d"], sim["y"], clusters=clusters)
    plain = analysed(sim["z"], sim["d"], sim["y"])
    test, reference = implication(clustered).test, implication(plain).test
    assert isinstance(test, rk.TestResult) and isinstance(reference, rk.TestResult)
    # Same statistic and, rows being drawn with the same seed, the same p-value as the
    # analysis without clusters; the standard errors still come from cluster draws.
    assert (test.statistic, test.p_value) == (reference.statistic, reference.p_value)
    assert "varies within clusters" in test.covariance
    assert clustered.shares.compliers_se != plain.shares.compliers_se


# --- degenerate data ------------------------------------------------------------------


def test_covariate_constant_within_an_arm_and_overall() -> None:
    sim = simulate(2_000, seed=121)
    z, d = sim["z"], sim["d"]
    x_arm = np.where(z == 1, 1.0, sim["x"])  # constant among Z=1
    constant = np.full(len(z), 7.0)
    result = analysed(z, d, sim["y"], {"x_arm": x_arm, "constant": constant})
    row, flat = result.means
    p = z.mean()
    kappa = 1 - d * (1 - z) / (1 - p) - (1 - d) * z / p
    assert row.compliers == pytest.approx(np.average(x_arm, weights=kappa), abs=1e-12)
    assert row.never_takers == 1.0  # never-takers are seen with Z=1 only
    assert flat.compliers == pytest.approx(7.0, abs=1e-12)
    assert flat.compliers_se == pytest.approx(0.0, abs=1e-12)
    assert flat.always_takers == flat.never_takers == flat.full_sample == 7.0


def test_no_always_takers() -> None:
    sim = simulate(2_000, seed=131, types=(0.6, 0.0, 0.4, 0.0))
    result = analysed(sim["z"], sim["d"], sim["y"], {"x": sim["x"]})
    assert result.shares.always_takers == 0.0
    assert result.shares.treated_share_off == 0.0
    row = result.means[0]
    assert row.always_takers is None
    assert row.compliers is not None and row.never_takers is not None
    # One-sided non-compliance: the complier mean is the mean among the treated with Z=1
    # (all of them compliers) up to the kappa adjustment for chance imbalance in x;
    # true value 1, sd < 0.05 here.
    assert row.compliers == pytest.approx(1.0, abs=0.2)
    assert isinstance(implication(result).test, rk.TestResult)


def test_instrument_without_variation_is_not_applicable() -> None:
    sim = simulate(500, seed=141)
    result = analyse(np.ones(500), sim["d"], sim["y"], {"x": sim["x"]})
    assert isinstance(result, NotApplicable)
    assert "Voucher offered" in result.reason and "every row" in result.reason
    # Rows with Z=0 present but all of zero weight: the same, not a division by zero.
    weights = np.where(sim["z"] == 0, 0.0, 1.0)
    weightless = analyse(sim["z"], sim["d"], sim["y"], weights=weights)
    assert isinstance(weightless, NotApplicable) and "every row" in weightless.reason


def test_no_first_stage_keeps_shares_but_no_complier_means() -> None:
    sim = simulate(2_000, seed=151)
    d_reversed = 1.0 - sim["d"]  # the instrument now lowers treatment
    result = analysed(sim["z"], d_reversed, sim["y"], {"x": sim["x"]})
    assert result.shares.compliers < 0
    assert result.shares.compliers_se is not None
    assert result.means[0].compliers is None and result.means[0].compliers_se is None
    assert result.means[0].always_takers is not None
    late = result.late_implication
    assert isinstance(late, NotApplicable) and "no compliers" in late.reason
    zero = analysed(sim["z"], np.ones(2_000), sim["y"], {"x": sim["x"]})
    assert zero.shares.compliers == 0.0
    assert isinstance(zero.late_implication, NotApplicable)


def test_all_missing_covariate_and_outcome_missing_in_one_arm() -> None:
    sim = simulate(1_000, seed=161)
    y = np.where(sim["z"] == 1, np.nan, sim["y"])
    result = analysed(sim["z"], sim["d"], y, {"gone": np.full(1_000, np.nan)})
    row = result.means[0]
    assert (row.full_sample, row.compliers, row.always_takers, row.never_takers) == (None,) * 4
    assert isinstance(result.late_implication, NotApplicable)
    assert "Test score" in result.late_implication.reason


def test_instrument_or_treatment_not_zero_one_is_a_value_error() -> None:
    sim = simulate(100, seed=171)
    with pytest.raises(ValueError, match="0/1"):
        analyse(sim["z"] * 2, sim["d"], sim["y"])
    with pytest.raises(ValueError, match="0/1"):
        analyse(sim["z"], sim["d"] + 0.5, sim["y"])


# --- determinism ----------------------------------------------------------------------


def test_same_seed_same_result_and_json_is_finite() -> None:
    sim = simulate(1_500, seed=181)
    covariates = {"x": sim["x"], "female": sim["female"]}
    weights = np.random.default_rng(182).uniform(0.5, 2.0, size=1_500)
    first = analysed(sim["z"], sim["d"], sim["y"], covariates, weights=weights, seed=5)
    second = analysed(sim["z"], sim["d"], sim["y"], covariates, weights=weights, seed=5)
    other = analysed(sim["z"], sim["d"], sim["y"], covariates, weights=weights, seed=6)
    assert first.model_dump() == second.model_dump()
    assert first.shares.compliers_se != other.shares.compliers_se
    assert first.seed == 5 and implication(first).seed == 5
    json.dumps(first.model_dump(mode="json"), allow_nan=False)
