"""Run-time cross-check: the main estimates re-fitted with linearmodels.

linearmodels is an independent implementation (it fits the full design; we partial
out). The appendix reports the largest relative difference of the coefficients and
standard errors for each estimator. Fixed effects enter linearmodels as dummy columns,
so the check runs when their number is moderate; otherwise linearmodels is given the
partialled columns with the absorbed degrees of freedom declared (``extra_df``), which
checks the estimator algebra but not the absorption, and the appendix says so.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from reportkit.engine.design import Design
from reportkit.engine.estimators import EstimateArrays
from reportkit.engine.moments import Moments

AUTO_MAX_ROWS = 200_000
MAX_DUMMIES = 1_000
AGREEMENT_TOLERANCE = 1e-6  # relative; tests hold the engine to 1e-10


@dataclass(frozen=True)
class CrossCheckRow:
    estimator: str
    max_rel_diff_estimate: float
    max_rel_diff_std_error: float
    method: str

    @property
    def agrees(self) -> bool:
        return max(self.max_rel_diff_estimate, self.max_rel_diff_std_error) < AGREEMENT_TOLERANCE


def should_run(mode: str, design: Design) -> tuple[bool, str]:
    if mode == "never":
        return False, "the cross-check was switched off in the spec (run.crosscheck: never)"
    if mode == "always":
        return True, ""
    if design.n > AUTO_MAX_ROWS:
        return False, (
            f"the sample has {design.n:,} rows, more than the {AUTO_MAX_ROWS:,} for which the "
            "re-fit runs by default; set run.crosscheck: always to run it"
        )
    return True, ""


def _n_dummies(design: Design) -> int:
    return int(
        sum(
            np.unique(design.fixed_effects[:, j]).size - 1
            for j in range(design.fixed_effects.shape[1])
        )
    )


def run_crosscheck(
    design: Design, m: Moments, fits: dict[str, EstimateArrays], covariance: str
) -> list[CrossCheckRow]:
    import pandas as pd
    from linearmodels.iv import IV2SLS, IVGMM, IVLIML

    use_dummies = _n_dummies(design) <= MAX_DUMMIES
    if use_dummies:
        cols: dict[str, np.ndarray] = {}
        if design.has_constant:
            cols["const"] = np.ones(design.n)
        if design.fixed_effects.shape[1]:
            cols["const"] = np.ones(design.n)
            for j in range(design.fixed_effects.shape[1]):
                codes = design.fixed_effects[:, j]
                for level in np.unique(codes)[1:]:
                    cols[f"fe{j}_{level}"] = (codes == level).astype(float)
        for j, keep in enumerate(m.partialler.kept_controls):
            cols[f"control{j}"] = design.controls[:, keep]
        exog = pd.DataFrame(cols)
        dep = pd.Series(design.y, name="y")
        endog = pd.DataFrame(design.endog, columns=[f"x{j}" for j in range(m.p)])
        instr = pd.DataFrame(design.instruments, columns=[f"z{j}" for j in range(m.q)])
        weights = design.weights
        extra: dict = {}
        method = (
            "full design with fixed-effect dummies"
            if design.fixed_effects.shape[1]
            else "full design"
        )
    else:
        exog = None
        dep = pd.Series(m.y, name="y")
        endog = pd.DataFrame(m.x, columns=[f"x{j}" for j in range(m.p)])
        instr = pd.DataFrame(m.z, columns=[f"z{j}" for j in range(m.q)])
        weights = None
        extra = {"extra_df": m.k_exog}
        method = "partialled columns (absorption not re-checked)"
    cov_type = {"classical": "unadjusted", "robust": "robust", "cluster": "clustered"}[covariance]
    fit_kw: dict = {"cov_type": cov_type, "debiased": True}
    if covariance == "cluster":
        fit_kw["clusters"] = (
            pd.DataFrame(design.clusters)
            if design.clusters.shape[1] == 2
            else design.clusters[:, 0]
        )
    names = list(endog.columns)
    rows: list[CrossCheckRow] = []
    for name, ours in fits.items():
        if name == "gmm" and (design.clusters.shape[1] == 2 or not use_dummies):
            continue  # linearmodels' GMM weight is one-way only; no partialled form
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            if name == "ols":
                mod = IV2SLS(
                    dep,
                    pd.concat([exog, endog], axis=1) if exog is not None else endog,
                    None,
                    None,
                    weights=weights,
                )
            elif name == "2sls":
                mod = IV2SLS(dep, exog, endog, instr, weights=weights)
            elif name == "liml":
                mod = IVLIML(dep, exog, endog, instr, weights=weights)
            else:
                wt = {"classical": "unadjusted", "robust": "robust", "cluster": "clustered"}[
                    covariance
                ]
                wkw = {"clusters": fit_kw["clusters"]} if covariance == "cluster" else {}
                mod = IVGMM(dep, exog, endog, instr, weights=weights, weight_type=wt, **wkw)
            kw = dict(fit_kw)
            if extra and name != "gmm":
                kw.update(extra)
            ref = mod.fit(**kw)
        rp = ref.params[names].to_numpy()
        rs = ref.std_errors[names].to_numpy()
        rows.append(
            CrossCheckRow(
                estimator=name,
                max_rel_diff_estimate=_max_rel(ours.params, rp),
                max_rel_diff_std_error=_max_rel(np.sqrt(np.diag(ours.cov)), rs),
                method=method,
            )
        )
    return rows


def _max_rel(a: np.ndarray, b: np.ndarray) -> float:
    scale = np.maximum(np.abs(b), 1e-300)
    return float(np.max(np.abs(a - b) / scale))
