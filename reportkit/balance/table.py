"""Rows of the balance table: each covariate across groups of each instrument.

Per covariate, on the rows where it is present: its (weighted) mean within each group of
each instrument's values (``groups.py``), and its regression on all the instruments
together, once unconditionally (a constant only) and once with the model's fixed effects
absorbed. The instrument's coefficient answers "does the covariate differ with the
instrument, holding the other instruments fixed?", with a standard error from the spec's
covariance. Regressing covariates on the instrument is common practice in applied work
(no single source); it is the regression counterpart of the difference in means.
"""

from __future__ import annotations

from typing import Literal

import numpy as np

from reportkit.balance.groups import Grouping, summarise
from reportkit.balance.regression import Regression, coefficients, regress
from reportkit.balance.rows import select_rows
from reportkit.engine.covariance import CovType
from reportkit.engine.design import Design
from reportkit.results import (
    BalanceCell,
    BalanceRow,
    InstrumentCoefficient,
    NotApplicable,
)

NO_FIXED_EFFECTS = "the model has no fixed effects, so only the unconditional regression applies"


def covariate_regression(
    design: Design,
    values: np.ndarray,
    present: np.ndarray,
    name: str,
    *,
    conditional: bool,
    kind: CovType,
    labels: dict[str, str],
) -> list[InstrumentCoefficient] | NotApplicable:
    """The covariate on all instruments (and the fixed effects when ``conditional``)."""
    rows = select_rows(design, present, fixed_effects=conditional)
    where = rows.where(f"{name} is present")
    reg = regress(
        rows,
        rows.take(values),
        rows.take(design.instruments),
        kind=kind,
        y_name=name,
        regressor_names=list(design.instrument_names),
        where=where,
        cluster_names=design.cluster_names,
    )
    if isinstance(reg, NotApplicable):
        return reg
    assert isinstance(reg, Regression)
    return coefficients(reg, list(design.instrument_names), labels)


def balance_row(
    design: Design,
    name: str,
    values: np.ndarray,
    kind_of_row: Literal["control", "pre_treatment"],
    groupings: list[Grouping],
    *,
    kind: CovType,
    labels: dict[str, str],
) -> BalanceRow:
    """One covariate against every instrument."""
    present = np.isfinite(values)
    clean = np.where(present, values, 0.0)
    unconditional = covariate_regression(
        design, clean, present, name, conditional=False, kind=kind, labels=labels
    )
    conditional: list[InstrumentCoefficient] | NotApplicable
    if design.fixed_effects.shape[1]:
        conditional = covariate_regression(
            design, clean, present, name, conditional=True, kind=kind, labels=labels
        )
    else:
        conditional = NotApplicable(reason=NO_FIXED_EFFECTS)
    cells = []
    for j, grouping in enumerate(groupings):
        summary = summarise(clean, present, grouping, design.weights)
        cells.append(
            BalanceCell(
                instrument=grouping.instrument,
                groups=summary.groups,
                difference=summary.difference,
                std_difference=summary.std_difference,
                unconditional=_pick(unconditional, j),
                conditional=_pick(conditional, j),
            )
        )
    return BalanceRow(
        covariate=name,
        label=labels.get(name, name),
        kind=kind_of_row,
        n_used=int(present.sum()),
        cells=cells,
    )


def _pick(
    coefs: list[InstrumentCoefficient] | NotApplicable, j: int
) -> InstrumentCoefficient | NotApplicable:
    return coefs if isinstance(coefs, NotApplicable) else coefs[j]
