"""Placebo outcomes: variables fixed before the instruments could act on them.

For each placebo outcome, on the rows where it is present (and no row alone in a
fixed-effect group): its reduced form, the placebo regressed on the instruments with the
model's controls and fixed effects and the spec's covariance (coefficients and the joint
Wald test, F = Wald / q), and the 2SLS of the placebo on the endogenous regressors
instrumented as in the main model (``reportkit.engine.estimators.tsls``, normal
intervals). Both should be zero if the instruments are as good as random given the
controls; a non-zero placebo effect is evidence against the design, a zero one is
consistent with it but proves nothing. Common practice in applied work; no single source.
"""

from __future__ import annotations

import numpy as np

from reportkit.balance.regression import Regression, coefficients, joint_test, regress
from reportkit.balance.rows import select_rows
from reportkit.coefficients import finite_coefficient_rows
from reportkit.engine.covariance import CovType
from reportkit.engine.design import Design
from reportkit.engine.estimators import tsls
from reportkit.results import Coefficient, NotApplicable, PlaceboResult


def placebo_result(
    design: Design,
    name: str,
    values: np.ndarray,
    *,
    kind: CovType,
    labels: dict[str, str],
    level: float,
) -> PlaceboResult:
    """Reduced form and 2SLS of one placebo outcome (see the module docstring)."""
    label = labels.get(name, name)
    present = np.isfinite(values)
    rows = select_rows(design, present, fixed_effects=True)
    where = rows.where(f"{name} is present")
    reg: Regression | NotApplicable
    if name in design.control_names:
        reg = NotApplicable(
            reason=f"{name} is one of the model's controls, so the placebo regressions would "
            "hold it fixed; a placebo outcome must not be a control"
        )
    else:
        reg = regress(
            rows,
            rows.take(np.where(present, values, 0.0)),
            rows.take(design.instruments),
            kind=kind,
            y_name=name,
            regressor_names=list(design.instrument_names),
            where=where,
            cluster_names=design.cluster_names,
            controls=rows.take(design.controls),
            endog=rows.take(design.endog),
        )
    if isinstance(reg, NotApplicable):
        return PlaceboResult(
            outcome=name,
            label=label,
            n_used=rows.n,
            reduced_form=[],
            joint_test=reg,
            tsls=reg,
        )
    return PlaceboResult(
        outcome=name,
        label=label,
        n_used=rows.n,
        reduced_form=coefficients(reg, list(design.instrument_names), labels),
        joint_test=joint_test(
            reg,
            name="Wald test of the instruments in the placebo reduced form",
            null=f"the instruments do not predict {label}",
        ),
        tsls=_tsls(reg, design, labels, level, where),
    )


def _tsls(
    reg: Regression, design: Design, labels: dict[str, str], level: float, where: str
) -> list[Coefficient] | NotApplicable:
    try:
        fit = tsls(reg.moments, reg.cov)
    except np.linalg.LinAlgError:
        fit = None
    coefs = None if fit is None else finite_coefficient_rows(fit, design.endog_names, labels, level)
    if coefs is None:
        return NotApplicable(
            reason="the instruments do not identify the endogenous regressors' coefficients "
            f"{where} (singular first stage), so the placebo 2SLS is not defined"
        )
    return coefs
