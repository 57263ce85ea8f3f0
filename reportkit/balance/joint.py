"""Joint balance tests and the outcome index: are the covariates, taken together,
related to the instruments?

Joint balance (per instrument): the instrument is regressed on all balance covariates
together, on the rows where every one of them is present, with the model's fixed effects
absorbed when it has any, and the covariates' coefficients are tested jointly with a
Wald (1943) test using the spec's covariance, reported as F = Wald / k. Covariates that
do not vary in those rows (or within the fixed-effect groups), or are collinear with
earlier ones, are left out and named in the test's name. Common practice in applied
work; no single source.

Outcome index: the outcome is predicted from the covariates alone by OLS (with the fixed
effects absorbed when present, weighted with the model's weights), and the prediction is
regressed on the instruments (fixed effects absorbed when present) with the spec's
covariance. Each covariate is thus weighted by how much it matters for the outcome, so
the index measures the imbalance that could bias the estimates, in outcome units. Its
R-squared is computed on partialled data: after removing the constant, or the fixed
effects (the within R-squared). The second-step standard errors treat the prediction as
data and ignore that its weights were estimated. Common practice in applied work; no
single source.
"""

from __future__ import annotations

import numpy as np

from reportkit.balance.regression import Regression, coefficients, joint_test, plural, regress
from reportkit.balance.rows import select_rows
from reportkit.engine.covariance import CovType
from reportkit.engine.design import Design
from reportkit.results import JointBalance, NotApplicable, OutcomeIndex


def _count(k: int) -> str:
    return "1 balance covariate" if k == 1 else f"{k} balance covariates"


def _left_out(reg: Regression, names: list[str]) -> str:
    notes = []
    if reg.constant:
        within = " within the fixed-effect groups" if reg.absorbs_fixed_effects else ""
        notes.append(f"{plural([names[j] for j in reg.constant])} (no variation{within})")
    if reg.collinear:
        notes.append(f"{plural([names[j] for j in reg.collinear])} (collinear with the others)")
    return f"; left out: {', '.join(notes)}" if notes else ""


def joint_balance(
    design: Design,
    names: list[str],
    covariates: np.ndarray,
    *,
    kind: CovType,
    labels: dict[str, str],
) -> list[JointBalance]:
    """One joint test per instrument of all balance covariates (columns of ``covariates``)."""
    present = np.all(np.isfinite(covariates), axis=1)
    rows = select_rows(design, present, fixed_effects=True)
    x = rows.take(covariates)
    where = rows.where("every balance covariate is present")
    out = []
    for j, instrument in enumerate(design.instrument_names):
        label = labels.get(instrument, instrument)
        reg = regress(
            rows,
            rows.take(design.instruments[:, j]),
            x,
            kind=kind,
            y_name=instrument,
            regressor_names=names,
            where=where,
            cluster_names=design.cluster_names,
            drop_degenerate=True,
        )
        if isinstance(reg, NotApplicable):
            out.append(JointBalance(instrument=instrument, label=label, test=reg))
            continue
        test = joint_test(
            reg,
            name=f"Wald test of {_count(len(reg.kept))}{_left_out(reg, names)}",
            null=f"the covariates do not predict {label}",
        )
        out.append(JointBalance(instrument=instrument, label=label, test=test))
    return out


def outcome_index(
    design: Design,
    names: list[str],
    covariates: np.ndarray,
    *,
    kind: CovType,
    labels: dict[str, str],
) -> OutcomeIndex | NotApplicable:
    """The outcome predicted from the covariates, regressed on the instruments."""
    present = np.all(np.isfinite(covariates), axis=1)
    rows = select_rows(design, present, fixed_effects=True)
    x = rows.take(covariates)
    where = rows.where("every balance covariate is present")
    first = regress(
        rows,
        rows.take(design.y),
        x,
        kind="classical",  # only the coefficients are used
        y_name=design.outcome_name,
        regressor_names=names,
        where=where,
        drop_degenerate=True,
    )
    if isinstance(first, NotApplicable):
        return NotApplicable(
            reason=f"the outcome cannot be predicted from the covariates: {first.reason}"
        )
    r2 = first.fit.partial_r2
    index = x[:, list(first.kept)] @ first.fit.coef
    second = regress(
        rows,
        index,
        rows.take(design.instruments),
        kind=kind,
        y_name="the outcome predicted from the covariates",
        regressor_names=list(design.instrument_names),
        where=where,
        cluster_names=design.cluster_names,
    )
    if isinstance(second, NotApplicable):
        return second
    if not np.isfinite(r2):
        return NotApplicable(reason=f"the R-squared of the prediction is not defined {where}")
    label = labels.get(design.outcome_name, design.outcome_name)
    return OutcomeIndex(
        coefficients=coefficients(second, list(design.instrument_names), labels),
        joint_test=joint_test(
            second,
            name=f"Wald test of the instruments on the predicted outcome{_left_out(first, names)}",
            null=f"the instruments do not predict {label} as predicted from the covariates",
        ),
        r2_prediction=float(r2),
    )
