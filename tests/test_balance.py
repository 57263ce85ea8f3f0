"""Balance checks (reportkit.balance) against statsmodels, linearmodels, pandas and numpy.

Sources of each check:

- balance regressions (a covariate on all instruments, with and without the fixed
  effects), the joint balance test and both steps of the outcome index: statsmodels OLS /
  WLS with cov_type nonrobust / HC1 / cluster and the fixed effects as dummy columns.
  statsmodels' HC1 and cluster small-sample factors equal the engine's
  (tests/test_firststage_and_tests_reference.py checks this); its F test's denominator
  df is n - k, or G - 1 with clusters, as the engine's;
- placebo reduced form and 2SLS: linearmodels IV2SLS (debiased=True) on the full design
  (constant, controls, fixed-effect dummies as columns) of the rows where the placebo is
  present; its Wald statistic divided by the number of instruments;
- group means and counts: pandas groupby (quartile groups from pandas qcut / cut);
- standardized mean difference: its formula with pandas' variance (ddof = 1) or, with
  weights, numpy's ``cov`` with ``aweights`` (the reliability-weight divisor);
- singleton fixed-effect groups in a subset: dropped by an independent pandas loop;
- the demo data: what fixtures/demo/README.md says the simulation built in (a
  randomised lottery; distance related to income band; a placebo unrelated to the
  instruments given the controls), checked on the committed data.

Designs are invented (fixed seeds; tests/helpers_design.py). Tolerance: 1e-10 relative
on coefficients, standard errors and statistics (exact linear algebra on both sides;
fixed effects absorbed exactly for one dimension and to 1e-13 for two), 1e-7 on p-values
(tail probabilities of statistics that agree to 1e-10), 1e-12 on means.
"""

from __future__ import annotations

import dataclasses
import json
import math
from functools import cache
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from helpers_design import ReferenceColumns, random_design, reference_columns
from linearmodels.iv import IV2SLS
from scipy import stats

from reportkit import results as rk
from reportkit.balance import balance_checks
from reportkit.data.prepare import prepare
from reportkit.engine.design import Design
from reportkit.results import (
    Balance,
    BalanceCell,
    Coefficient,
    InstrumentCoefficient,
    NotApplicable,
    OutcomeIndex,
)
from reportkit.spec.loader import load_spec_dict
from reportkit.spec.yaml_io import parse_yaml, read_text

RTOL = 1e-10
P_RTOL = 1e-7
MEAN_RTOL = 1e-12
KINDS = ["classical", "robust", "cluster"]
SM_COV = {"classical": "nonrobust", "robust": "HC1", "cluster": "cluster"}
LM_COV = {"classical": "unadjusted", "robust": "robust", "cluster": "clustered"}
DEMO = Path(__file__).resolve().parent.parent / "fixtures" / "demo"

CASES: dict[str, dict[str, Any]] = {
    "plain": {"seed": 201, "q": 2, "c": 1},
    "fe_weights": {"seed": 202, "q": 2, "c": 1, "n_fe": 1, "weighted": True},
    "two_fe": {"seed": 203, "q": 2, "c": 2, "n_fe": 2},
}
COVARIATES = ["c0", "cov_a"]
PRE_TREATMENT = ["cov_b", "cov_bin"]
VARIABLES = COVARIATES + PRE_TREATMENT
LABELS = {"z1": "Instrument one", "cov_a": "Covariate A"}


@cache
def design(case: str) -> Design:
    """An invented design whose first instrument is binary (0/1).

    With fixed effects, rows 0 and 1 form a fixed-effect level of their own; every
    balance and placebo column is missing in row 0, so row 1 is a singleton in each
    subset and must be dropped from the conditional regressions.
    """
    kw = dict(CASES[case])
    d = random_design(kw.pop("seed"), **kw)
    z = d.instruments.copy()
    z[:, 0] = (z[:, 0] > 0.2).astype(float)
    fe = d.fixed_effects.copy()
    if fe.shape[1]:
        fe[:2, 0] = fe[:, 0].max() + 1
    return dataclasses.replace(d, instruments=z, fixed_effects=fe)


@cache
def extras(case: str) -> dict[str, np.ndarray]:
    d = design(case)
    rng = np.random.default_rng(CASES[case]["seed"] + 1000)
    n = d.n

    def holes(values: np.ndarray, share: float) -> np.ndarray:
        out = values.astype(float)
        out[rng.random(n) < share] = np.nan
        out[0], out[1] = np.nan, values[1]  # row 1 present: a singleton in the subset
        return out

    fe_effect = np.cos(d.fixed_effects[:, 0]) if d.fixed_effects.shape[1] else 0.0
    c0 = d.controls[:, 0].copy()
    c0[0] = np.nan
    return {
        "c0": c0,
        "cov_a": holes(0.5 * d.instruments[:, 1] + 0.3 * fe_effect + rng.normal(size=n), 0.15),
        "cov_b": holes(0.2 * d.instruments[:, 0] + rng.normal(size=n), 0.10),
        "cov_bin": holes((rng.normal(size=n) > 0.3).astype(float), 0.05),
        "placebo": holes(d.controls @ np.full(d.controls.shape[1], 0.2) + rng.normal(size=n), 0.1),
    }


@cache
def ours(case: str, kind: str, cut_points: tuple[float, ...] = ()) -> Balance:
    out = balance_checks(
        design(case),
        extras(case),
        covariates=COVARIATES,
        pre_treatment=PRE_TREATMENT,
        placebo_outcomes=["placebo"],
        cut_points={"z1": list(cut_points)} if cut_points else {},
        covariance=kind,
        labels=LABELS,
        level=0.9,
    )
    assert isinstance(out, Balance)
    return out


# --- independent references ---------------------------------------------------------------


def kept_after_singletons(codes: np.ndarray) -> np.ndarray:
    """Positions kept after dropping singleton fixed-effect groups until none is left."""
    frame = pd.DataFrame(codes)
    while True:
        alone = np.zeros(len(frame), dtype=bool)
        for col in frame.columns:
            alone |= frame.groupby(col)[col].transform("size").to_numpy() == 1
        if not alone.any():
            return frame.index.to_numpy()
        frame = frame.loc[~alone]


def subset_columns(
    d: Design, present: np.ndarray, *, fixed_effects: bool, controls: bool = False
) -> tuple[np.ndarray, ReferenceColumns]:
    """The rows used (singletons dropped) and their reference columns."""
    pos = np.flatnonzero(present)
    n_fe = d.fixed_effects.shape[1] if fixed_effects else 0
    if n_fe:
        pos = pos[kept_after_singletons(d.fixed_effects[pos])]
    sub = Design(
        y=d.y[pos],
        endog=d.endog[pos],
        instruments=d.instruments[pos],
        controls=d.controls[pos] if controls else np.zeros((pos.size, 0)),
        fixed_effects=d.fixed_effects[pos][:, :n_fe],
        clusters=d.clusters[pos],
        weights=None if d.weights is None else d.weights[pos],
        outcome_name=d.outcome_name,
        endog_names=d.endog_names,
        instrument_names=d.instrument_names,
        control_names=d.control_names if controls else (),
    )
    return pos, reference_columns(sub)


def sm_fit(dep: np.ndarray, regressors: pd.DataFrame, r: ReferenceColumns, kind: str) -> Any:
    model = (
        sm.OLS(dep, regressors) if r.weights is None else sm.WLS(dep, regressors, weights=r.weights)
    )
    kw = {"cov_kwds": {"groups": r.clusters}} if kind == "cluster" else {}
    return model.fit(cov_type=SM_COV[kind], **kw)


def restriction(regressors: pd.DataFrame, names: list[str]) -> np.ndarray:
    idx = [list(regressors.columns).index(nm) for nm in names]
    return np.eye(regressors.shape[1])[idx]


def check_coefficients(coefs: list[InstrumentCoefficient], ref: Any, names: list[str]) -> None:
    assert [c.instrument for c in coefs] == names
    np.testing.assert_allclose([c.estimate for c in coefs], ref.params[names], rtol=RTOL)
    np.testing.assert_allclose([c.std_error for c in coefs], ref.bse[names], rtol=RTOL)
    # p-values from the normal distribution (the project's convention for coefficients)
    expected_p = 2 * stats.norm.sf(np.abs(ref.tvalues[names].to_numpy()))
    np.testing.assert_allclose([c.p_value for c in coefs], expected_p, rtol=P_RTOL)


def check_f_test(
    test: rk.TestResult | NotApplicable, ref: Any, regs: pd.DataFrame, names: list[str]
) -> None:
    """Our F = statsmodels' Wald statistic / k with the same covariance; its df and p."""
    regs_r = restriction(regs, names)
    wald = ref.wald_test(regs_r, use_f=False, scalar=True)
    f = ref.f_test(regs_r)
    assert isinstance(test, rk.TestResult)
    assert test.distribution == "F"
    assert test.statistic == pytest.approx(float(wald.statistic) / len(names), rel=RTOL)
    assert test.statistic == pytest.approx(float(f.fvalue), rel=RTOL)
    assert test.df == [float(len(names)), float(f.df_denom)]
    assert test.p_value == pytest.approx(float(f.pvalue), rel=P_RTOL)
    assert test.reference == "Wald test"


# --- rows of the balance table ------------------------------------------------------------


@pytest.mark.parametrize("case", CASES)
def test_rows_kinds_and_counts(case: str) -> None:
    out = ours(case, "robust")
    assert [r.covariate for r in out.rows] == VARIABLES
    # c0 is a model control; the others are named only for balance
    assert [r.kind for r in out.rows] == [
        "control",
        "pre_treatment",
        "pre_treatment",
        "pre_treatment",
    ]
    for r in out.rows:
        assert r.n_used == int(np.isfinite(extras(case)[r.covariate]).sum())
        assert [c.instrument for c in r.cells] == ["z0", "z1"]
    assert out.rows[1].label == "Covariate A"
    expected = "nothing (no fixed effects in the model)" if case == "plain" else None
    if expected:
        assert out.conditioning == expected
    else:
        names = design(case).fixed_effect_names
        assert out.conditioning == f"the {' and '.join(names)} fixed effects"


@pytest.mark.parametrize("conditional", [False, True])
@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("case", CASES)
def test_balance_regressions_match_statsmodels(case: str, kind: str, conditional: bool) -> None:
    d = design(case)
    out = ours(case, kind)
    names = list(d.instrument_names)
    for row in out.rows:
        coefs = [c.conditional if conditional else c.unconditional for c in row.cells]
        if conditional and not d.fixed_effects.shape[1]:
            assert all(isinstance(c, NotApplicable) for c in coefs)
            assert "no fixed effects" in coefs[0].reason  # type: ignore[union-attr]
            continue
        values = extras(case)[row.covariate]
        pos, r = subset_columns(d, np.isfinite(values), fixed_effects=conditional)
        if conditional:  # the subset's singleton (row 1) is dropped, as the reference does
            assert pos.size < row.n_used
        regs = pd.concat([r.exog, r.instruments], axis=1)
        ref = sm_fit(values[pos], regs, r, kind)
        assert all(isinstance(c, InstrumentCoefficient) for c in coefs)
        check_coefficients(coefs, ref, names)  # type: ignore[arg-type]


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("case", CASES)
def test_joint_balance_matches_statsmodels(case: str, kind: str) -> None:
    d = design(case)
    matrix = np.column_stack([extras(case)[v] for v in VARIABLES])
    pos, r = subset_columns(d, np.all(np.isfinite(matrix), axis=1), fixed_effects=True)
    regs = pd.concat([r.exog, pd.DataFrame(matrix[pos], columns=VARIABLES)], axis=1)
    joint = ours(case, kind).joint
    assert [j.instrument for j in joint] == list(d.instrument_names)
    for j, jb in enumerate(joint):
        ref = sm_fit(d.instruments[pos, j], regs, r, kind)
        check_f_test(jb.test, ref, regs, VARIABLES)
        assert jb.test.name == "Wald test of 4 balance covariates"  # type: ignore[union-attr]
        assert jb.test.null == f"the covariates do not predict {LABELS.get(f'z{j}', f'z{j}')}"  # type: ignore[union-attr]


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("case", CASES)
def test_outcome_index_matches_statsmodels(case: str, kind: str) -> None:
    d = design(case)
    matrix = np.column_stack([extras(case)[v] for v in VARIABLES])
    pos, r = subset_columns(d, np.all(np.isfinite(matrix), axis=1), fixed_effects=True)
    cov_frame = pd.DataFrame(matrix[pos], columns=VARIABLES)
    full = sm_fit(d.y[pos], pd.concat([r.exog, cov_frame], axis=1), r, "classical")
    restricted = sm_fit(d.y[pos], r.exog, r, "classical")
    index = cov_frame.to_numpy() @ full.params[VARIABLES].to_numpy()
    out = ours(case, kind).outcome_index
    assert isinstance(out, OutcomeIndex)
    # R-squared on partialled data: 1 - SSR / SSR of the constant (or fixed effects) alone
    assert out.r2_prediction == pytest.approx(1 - full.ssr / restricted.ssr, rel=RTOL)
    if not d.fixed_effects.shape[1]:
        assert out.r2_prediction == pytest.approx(full.rsquared, rel=RTOL)
    regs = pd.concat([r.exog, r.instruments], axis=1)
    ref = sm_fit(index, regs, r, kind)
    check_coefficients(out.coefficients, ref, list(d.instrument_names))
    check_f_test(out.joint_test, ref, regs, list(d.instrument_names))


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("case", CASES)
def test_placebo_matches_linearmodels(case: str, kind: str) -> None:
    d = design(case)
    values = extras(case)["placebo"]
    pos, r = subset_columns(d, np.isfinite(values), fixed_effects=True, controls=True)
    (placebo,) = ours(case, kind).placebo
    assert placebo.outcome == "placebo"
    assert placebo.n_used == pos.size
    kw = {"clusters": r.clusters} if kind == "cluster" else {}
    dep = pd.Series(values[pos], name="placebo")
    # reduced form: linearmodels' IV2SLS with no endogenous regressors is OLS
    rf = IV2SLS(dep, pd.concat([r.exog, r.instruments], axis=1), None, None, weights=r.weights)
    rf_res = rf.fit(cov_type=LM_COV[kind], debiased=True, **kw)
    names = list(d.instrument_names)
    assert [c.instrument for c in placebo.reduced_form] == names
    np.testing.assert_allclose(
        [c.estimate for c in placebo.reduced_form], rf_res.params[names], rtol=RTOL
    )
    np.testing.assert_allclose(
        [c.std_error for c in placebo.reduced_form], rf_res.std_errors[names], rtol=RTOL
    )
    cols = list(rf_res.params.index)
    restr = np.eye(len(cols))[[cols.index(nm) for nm in names]]
    wald = rf_res.wald_test(restr, np.zeros(len(names)))
    test = placebo.joint_test
    assert isinstance(test, rk.TestResult)
    assert test.statistic == pytest.approx(wald.stat / len(names), rel=RTOL)
    n, k = pos.size, len(cols)
    df2 = len(np.unique(r.clusters)) - 1 if kind == "cluster" else n - k
    assert test.df == [float(len(names)), float(df2)]
    assert test.p_value == pytest.approx(
        float(stats.f.sf(test.statistic, len(names), df2)), rel=P_RTOL
    )
    # 2SLS of the placebo on the endogenous regressor, the model's instruments
    iv = IV2SLS(dep, r.exog, r.endog, r.instruments, weights=r.weights)
    iv_res = iv.fit(cov_type=LM_COV[kind], debiased=True, **kw)
    assert isinstance(placebo.tsls, list)
    (coef,) = placebo.tsls
    assert isinstance(coef, Coefficient)
    assert coef.name == "x0"
    assert coef.estimate == pytest.approx(iv_res.params["x0"], rel=RTOL)
    assert coef.std_error == pytest.approx(iv_res.std_errors["x0"], rel=RTOL)
    # normal intervals at the requested level (0.9): linearmodels' debiased intervals use
    # t(df_resid), so the interval is rebuilt from its estimate and SE with the normal
    z = stats.norm.ppf(0.95)
    assert coef.ci_lower == pytest.approx(
        iv_res.params["x0"] - z * iv_res.std_errors["x0"], rel=RTOL
    )
    assert coef.ci_upper == pytest.approx(
        iv_res.params["x0"] + z * iv_res.std_errors["x0"], rel=RTOL
    )
    assert coef.p_value == pytest.approx(
        2 * stats.norm.sf(abs(iv_res.params["x0"] / iv_res.std_errors["x0"])), rel=P_RTOL
    )


# --- group means and standardized differences ---------------------------------------------


def reference_groups(
    d: Design, j: int, cut_points: tuple[float, ...]
) -> tuple[pd.Series, np.ndarray | None]:
    """Each row's group for instrument j, and the bin edges (None when grouped by value)."""
    z = pd.Series(d.instruments[:, j])
    if z.nunique() <= 2:
        return z, None
    if cut_points:
        bins = np.array([-np.inf, *cut_points, np.inf])
    else:
        _, bins = pd.qcut(z, 4, retbins=True)
    return pd.cut(z, bins, include_lowest=True), bins


@pytest.mark.parametrize("cut_points", [(), (-0.5, 0.5)])
@pytest.mark.parametrize("case", CASES)
def test_group_means_match_pandas(case: str, cut_points: tuple[float, ...]) -> None:
    d = design(case)
    out = ours(case, "classical", cut_points)
    w = pd.Series(np.ones(d.n) if d.weights is None else d.weights)
    for row in out.rows:
        x = pd.Series(extras(case)[row.covariate])
        present = x.notna()
        for j, cell in enumerate(row.cells):
            groups, bins = reference_groups(d, j, cut_points)
            g = groups[present]
            means = (w[present] * x[present]).groupby(g, observed=False).sum() / w[present].groupby(
                g, observed=False
            ).sum()
            counts = x[present].groupby(g, observed=False).size()
            assert [gm.n for gm in cell.groups] == counts.tolist()
            np.testing.assert_allclose([gm.mean for gm in cell.groups], means, rtol=MEAN_RTOL)
            if d.weights is None:
                np.testing.assert_allclose(
                    [gm.mean for gm in cell.groups],
                    x[present].groupby(g, observed=False).mean(),
                    rtol=MEAN_RTOL,
                )
            if bins is None:
                assert [gm.group for gm in cell.groups] == ["value 0", "value 1"]
            else:
                lab = LABELS["z1"]
                inner = [f"{b:.2f}" for b in bins[1:-1]]
                assert cell.groups[0].group == f"{lab} <= {inner[0]}"
                assert cell.groups[1].group == f"{inner[0]} < {lab} <= {inner[1]}"
                assert cell.groups[-1].group == f"{lab} > {inner[-1]}"
            assert cell.difference == pytest.approx(means.iloc[-1] - means.iloc[0], rel=1e-10)


@pytest.mark.parametrize("case", CASES)
def test_standardized_difference_formula(case: str) -> None:
    """(mean_last - mean_first) / sqrt((s_first^2 + s_last^2) / 2), Imbens & Rubin 2015."""
    d = design(case)
    for row in ours(case, "classical").rows:
        x = extras(case)[row.covariate]
        for j, cell in enumerate(row.cells):
            groups, _ = reference_groups(d, j, ())
            codes = pd.Series(groups).astype("category").cat.codes.to_numpy()
            first = np.isfinite(x) & (codes == 0)
            last = np.isfinite(x) & (codes == codes.max())
            if d.weights is None:
                v1, v2 = pd.Series(x[first]).var(), pd.Series(x[last]).var()
                m1, m2 = x[first].mean(), x[last].mean()
            else:  # numpy's aweights variance has the reliability-weight divisor
                v1 = float(np.cov(x[first], aweights=d.weights[first]))
                v2 = float(np.cov(x[last], aweights=d.weights[last]))
                m1 = np.average(x[first], weights=d.weights[first])
                m2 = np.average(x[last], weights=d.weights[last])
            assert cell.std_difference == pytest.approx(
                (m2 - m1) / math.sqrt((v1 + v2) / 2), rel=1e-10
            )


# --- degenerate inputs --------------------------------------------------------------------


@cache
def small() -> Design:
    """120 rows, 12 clusters, one fixed effect, a binary and a continuous instrument."""
    d = random_design(210, n=120, q=2, c=1, n_fe=1, n_clusters=12)
    z = d.instruments.copy()
    z[:, 0] = (z[:, 0] > 0).astype(float)
    return dataclasses.replace(d, instruments=z)


def run_small(cols: dict[str, np.ndarray], **kw: Any) -> Balance | NotApplicable:
    args: dict[str, Any] = {
        "covariates": list(cols),
        "pre_treatment": [],
        "placebo_outcomes": [],
        "cut_points": {},
        "covariance": "cluster",
        "labels": {},
        "level": 0.95,
    }
    args.update(kw)
    return balance_checks(small(), cols, **args)


def all_floats_finite(value: Any) -> bool:
    if isinstance(value, float):
        return math.isfinite(value)
    if isinstance(value, dict):
        return all(all_floats_finite(v) for v in value.values())
    if isinstance(value, list):
        return all(all_floats_finite(v) for v in value)
    return True


def cell(out: Balance | NotApplicable, covariate: str, j: int) -> BalanceCell:
    assert isinstance(out, Balance)
    return next(r for r in out.rows if r.covariate == covariate).cells[j]


def test_constant_covariate() -> None:
    d = small()
    rng = np.random.default_rng(1)
    out = run_small({"flat": np.full(d.n, 3.0), "noise": rng.normal(size=d.n)})
    c = cell(out, "flat", 0)
    assert [g.mean for g in c.groups] == [3.0, 3.0]
    assert c.difference == 0.0
    assert c.std_difference is None  # constant within both groups: undefined
    for coef in (c.unconditional, c.conditional):
        assert isinstance(coef, NotApplicable)
        assert "flat does not vary" in coef.reason
    assert isinstance(out, Balance)
    for jb in out.joint:  # dropped from the joint test, with a note
        assert isinstance(jb.test, rk.TestResult)
        assert jb.test.df[0] == 1.0
        assert "left out: flat (no variation within the fixed-effect groups)" in jb.test.name
    assert isinstance(out.outcome_index, OutcomeIndex)
    assert all_floats_finite(out.model_dump())


def test_collinear_covariate_left_out_of_joint_test() -> None:
    """The later of two collinear covariates is dropped; the test equals statsmodels' on
    the remaining ones (WLS/OLS with district dummies, cluster covariance)."""
    d = small()
    rng = np.random.default_rng(6)
    a, b = rng.normal(size=d.n), rng.normal(size=d.n) + 0.3 * d.instruments[:, 1]
    out = run_small({"a": a, "b": b, "a_again": 2.0 * a + 1.0})
    assert isinstance(out, Balance)
    pos, r = subset_columns(d, np.ones(d.n, dtype=bool), fixed_effects=True)
    regs = pd.concat([r.exog, pd.DataFrame({"a": a[pos], "b": b[pos]})], axis=1)
    for j, jb in enumerate(out.joint):
        assert isinstance(jb.test, rk.TestResult)
        assert jb.test.name.endswith("left out: a_again (collinear with the others)")
        check_f_test(jb.test, sm_fit(d.instruments[pos, j], regs, r, "cluster"), regs, ["a", "b"])


def test_quartiles_with_ties_at_the_top() -> None:
    """A quartile equal to the largest value would leave the top group empty: dropped."""
    d = small()
    z1 = np.where(np.arange(d.n) % 10 == 0, 0.0, np.where(np.arange(d.n) % 10 == 1, 1.0, 2.0))
    tied = dataclasses.replace(d, instruments=np.column_stack([d.instruments[:, 0], z1]))
    x = np.random.default_rng(7).normal(size=d.n)
    out = balance_checks(
        tied,
        {"x": x},
        covariates=["x"],
        pre_treatment=[],
        placebo_outcomes=[],
        cut_points={},
        covariance="robust",
        labels={},
        level=0.95,
    )
    assert isinstance(out, Balance)
    c = out.rows[0].cells[1]
    # numpy quartiles of z1 are 2, 2, 2 (80% of rows at the top): the largest value
    # below the top becomes the only edge
    assert np.quantile(z1, [0.25, 0.5, 0.75]).tolist() == [2.0, 2.0, 2.0]
    assert [g.group for g in c.groups] == ["z1 <= 1.00", "z1 > 1.00"]
    assert [g.n for g in c.groups] == [int((z1 <= 1).sum()), int((z1 > 1).sum())]
    assert c.groups[1].mean == pytest.approx(x[z1 > 1].mean(), rel=MEAN_RTOL)


def test_covariate_constant_within_each_arm() -> None:
    d = small()
    out = run_small({"step": 2.0 + 3.0 * d.instruments[:, 0]})
    c = cell(out, "step", 0)
    assert c.difference == pytest.approx(3.0, rel=1e-12)
    assert c.std_difference is None
    assert isinstance(c.unconditional, NotApplicable)
    assert "fits it exactly" in c.unconditional.reason


def test_covariate_constant_within_one_arm() -> None:
    d = small()
    z0 = d.instruments[:, 0]
    x = np.where(z0 == 1, 5.0, np.random.default_rng(2).normal(size=d.n))
    c = cell(run_small({"half": x}), "half", 0)
    v0 = pd.Series(x[z0 == 0]).var()  # the other arm's variance is exactly zero
    assert c.std_difference == pytest.approx((5.0 - x[z0 == 0].mean()) / math.sqrt(v0 / 2))


@pytest.mark.parametrize(("cut_points", "empty"), [((100.0,), [1]), ((-100.0, 100.0), [0, 2])])
def test_empty_groups(cut_points: tuple[float, ...], empty: list[int]) -> None:
    x = np.random.default_rng(3).normal(size=small().n)
    c = cell(run_small({"x": x}, cut_points={"z1": list(cut_points)}), "x", 1)
    assert len(c.groups) == len(cut_points) + 1
    for g in empty:
        assert c.groups[g].n == 0
        assert c.groups[g].mean is None
    assert c.difference is None
    assert c.std_difference is None
    assert sum(g.n for g in c.groups) == small().n


def test_instrument_with_one_value_in_the_subset() -> None:
    d = small()
    x = np.random.default_rng(4).normal(size=d.n)
    x[d.instruments[:, 0] == 0] = np.nan
    out = run_small({"only_winners": x})
    c = cell(out, "only_winners", 0)
    assert c.groups[0].n == 0 and c.groups[0].mean is None
    assert c.groups[1].n == int(np.isfinite(x).sum())
    assert c.difference is None
    for coef in (c.unconditional, c.conditional):
        assert isinstance(coef, NotApplicable)
        assert "z0 does not vary" in coef.reason
    assert all_floats_finite(out.model_dump())


def test_covariate_missing_everywhere() -> None:
    d = small()
    out = run_small({"empty": np.full(d.n, np.nan), "ok": np.ones(d.n) + d.controls[:, 0]})
    assert isinstance(out, Balance)
    row = out.rows[0]
    assert row.n_used == 0
    assert all(g.n == 0 and g.mean is None for c in row.cells for g in c.groups)
    assert isinstance(row.cells[0].unconditional, NotApplicable)
    assert "no rows" in row.cells[0].unconditional.reason
    assert all(isinstance(j.test, NotApplicable) for j in out.joint)
    assert isinstance(out.outcome_index, NotApplicable)


def test_fewer_rows_than_columns() -> None:
    d = small()
    z0 = d.instruments[:, 0]
    keep = np.concatenate([np.flatnonzero(z0 == 0)[:2], np.flatnonzero(z0 == 1)[:1]])
    x = np.full(d.n, np.nan)
    x[keep] = [1.0, 2.0, 4.0]
    c = cell(run_small({"x": x}, covariance="robust"), "x", 0)
    assert isinstance(c.unconditional, NotApplicable)
    assert "needs 3 columns" in c.unconditional.reason
    assert "only 3 rows" in c.unconditional.reason


def test_too_few_clusters() -> None:
    d = small()
    rng = np.random.default_rng(5)
    one = rng.normal(size=d.n)
    one[d.clusters[:, 0] != d.clusters[0, 0]] = np.nan
    c = cell(run_small({"one_cluster": one}), "one_cluster", 0)
    assert isinstance(c.unconditional, NotApplicable)
    assert "single cluster" in c.unconditional.reason
    # a joint test of 3 coefficients needs G - 1 > 3: with 4 clusters it is not applicable
    four = dataclasses.replace(d, clusters=d.clusters % 4)
    cols = {f"v{k}": rng.normal(size=d.n) for k in range(3)}
    out = balance_checks(
        four,
        cols,
        covariates=list(cols),
        pre_treatment=[],
        placebo_outcomes=[],
        cut_points={},
        covariance="cluster",
        labels={},
        level=0.95,
    )
    assert isinstance(out, Balance)
    for jb in out.joint:
        assert isinstance(jb.test, NotApplicable)
        assert "at least 5 clusters" in jb.test.reason
    assert isinstance(run_small(cols), Balance)  # 12 clusters are enough
    assert all(isinstance(j.test, rk.TestResult) for j in run_small(cols).joint)  # type: ignore[union-attr]


def test_nothing_to_check() -> None:
    out = run_small({})
    assert isinstance(out, NotApplicable)
    assert "no balance covariates and no placebo outcomes" in out.reason
    d = small()
    only_placebo = run_small(
        {"p": d.controls[:, 0] + 1.0 + np.sin(np.arange(d.n))},
        covariates=[],
        placebo_outcomes=["p"],
    )
    assert isinstance(only_placebo, Balance)
    assert only_placebo.rows == [] and only_placebo.joint == []
    assert isinstance(only_placebo.outcome_index, NotApplicable)
    assert isinstance(only_placebo.placebo[0].joint_test, rk.TestResult)


def test_placebo_that_is_a_control() -> None:
    d = small()
    out = run_small({"c0": d.controls[:, 0]}, covariates=[], placebo_outcomes=["c0"])
    assert isinstance(out, Balance)
    (p,) = out.placebo
    assert p.reduced_form == []
    assert isinstance(p.joint_test, NotApplicable)
    assert "one of the model's controls" in p.joint_test.reason
    assert isinstance(p.tsls, NotApplicable)


def test_unknown_column_is_a_programming_error() -> None:
    with pytest.raises(ValueError, match="'nowhere'"):
        run_small({}, covariates=["nowhere"])


@pytest.mark.parametrize("case", CASES)
def test_results_are_finite_and_serialise(case: str) -> None:
    out = ours(case, "cluster")
    assert all_floats_finite(out.model_dump())
    text = out.model_dump_json()

    def refuse(name: str) -> None:
        raise AssertionError(f"non-finite number {name} in JSON")

    json.loads(text, parse_constant=refuse)
    assert Balance.model_validate_json(text) == out


# --- the demo data ------------------------------------------------------------------------


@cache
def demo() -> tuple[Balance, Design]:
    data = parse_yaml(read_text(DEMO / "tutoring.yaml"), "tutoring.yaml").data
    data["balance"] = {
        "pre_treatment": ["maths_score_grade5"],
        "placebo_outcomes": ["maths_score_grade5"],
    }
    loaded = load_spec_dict(data, base_dir=DEMO)
    prepared = prepare(loaded)
    spec = loaded.spec.resolved()
    d = prepared.design
    cols = dict(prepared.extras)
    # income band is a categorical control: its indicator comes from the design
    low = "income_band=low"
    cols[low] = d.controls[:, d.control_names.index(low)]
    out = balance_checks(
        d,
        cols,
        covariates=[*(spec.balance.covariates or spec.model.controls), low],
        pre_treatment=list(spec.balance.pre_treatment),
        placebo_outcomes=list(spec.balance.placebo_outcomes),
        cut_points=spec.balance.cut_points,
        covariance=spec.covariance,
        labels=dict(spec.model.labels),
        level=spec.inference.confidence_level,
    )
    assert isinstance(out, Balance)
    return out, d


def test_demo_lottery_is_balanced_distance_is_not() -> None:
    """fixtures/demo/README.md: the lottery is randomised; distance depends on income band."""
    out, d = demo()
    assert [r.covariate for r in out.rows] == [
        "maths_score_grade6",
        "female",
        "age_years",
        "income_band=low",
        "maths_score_grade5",
    ]
    assert [r.kind for r in out.rows] == ["control"] * 4 + ["pre_treatment"]
    assert out.conditioning == "the district fixed effects"
    assert "clustered by school (40 clusters)" in out.covariance
    lottery, distance = out.joint
    assert isinstance(lottery.test, rk.TestResult) and isinstance(distance.test, rk.TestResult)
    # the data show: lottery F about 0.2 (p about 0.96), distance F about 115 (p < 1e-20)
    assert lottery.test.p_value > 0.01
    assert distance.test.p_value < 0.01
    assert lottery.test.df == distance.test.df == [5.0, 39.0]  # 5 covariates, 40 schools
    income = next(r for r in out.rows if r.covariate == "income_band=low")
    by_lottery, by_distance = income.cells
    # low-income pupils live further away: the share rises from about 0.15 in the nearest
    # quarter to about 0.50 in the furthest (standardized difference about 0.8)
    assert by_distance.std_difference is not None and by_distance.std_difference > 0.5
    assert isinstance(by_distance.conditional, InstrumentCoefficient)
    assert by_distance.conditional.estimate > 0 and by_distance.conditional.p_value < 0.01
    assert isinstance(by_lottery.conditional, InstrumentCoefficient)
    assert by_lottery.conditional.p_value > 0.01
    assert abs(by_lottery.std_difference or 0.0) < 0.1
    assert [g.group for g in by_lottery.groups] == ["value 0", "value 1"]
    assert by_distance.groups[0].group.startswith("Distance to nearest tutoring centre (km) <= ")
    assert sum(g.n for g in by_distance.groups) == d.n


def test_demo_outcome_index_and_placebo() -> None:
    """The imbalance in distance matters for the outcome; the placebo shows no effect."""
    out, _ = demo()
    index = out.outcome_index
    assert isinstance(index, OutcomeIndex)
    lottery, distance = index.coefficients
    assert lottery.p_value > 0.01
    assert distance.p_value < 0.01 and distance.estimate < 0  # further away, lower predicted score
    assert 0.5 < index.r2_prediction < 0.8  # prior scores predict the score well (about 0.68)
    (placebo,) = out.placebo
    assert placebo.outcome == "maths_score_grade5"
    # README: given the controls and district, neither instrument is related to the placebo
    assert isinstance(placebo.joint_test, rk.TestResult)
    assert placebo.joint_test.p_value > 0.01
    assert isinstance(placebo.tsls, list)
    (effect,) = placebo.tsls
    assert effect.ci_lower < 0 < effect.ci_upper
