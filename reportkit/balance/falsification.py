"""Falsification subsamples: rows where the instruments should not move the treatment.

The spec names rows of the file (its own filters, applied instead of ``data.filters``)
where the design implies no first stage, for example pupils who could not use a voucher
whatever the lottery gave them. There the first stage and the reduced form are estimated
with the model's controls, fixed effects and covariance. If the first stage is indeed
zero, the instruments can move the outcome only through a direct channel, so a reduced
form far from zero is evidence against the exclusion restriction; a reduced form near
zero is consistent with it but proves nothing. Common practice in applied work (e.g.
Altonji, Elder & Taber 2005 for a "zero first stage" sample); no single source for the
layout.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from reportkit.balance.regression import Regression, coefficients, joint_test, regress
from reportkit.balance.rows import select_rows
from reportkit.data.filters import describe_filter
from reportkit.data.prepare import Source, prepare
from reportkit.engine.covariance import CovarianceSpec, CovType
from reportkit.errors import DataError
from reportkit.results import (
    FalsificationFirstStage,
    FalsificationResult,
    InstrumentCoefficient,
    NotApplicable,
    TestOrNA,
)
from reportkit.spec.loaded import LoadedSpec
from reportkit.spec.models import Subsample


def subsample_spec(
    loaded: LoadedSpec, subsample: Subsample, *, replace_filters: bool
) -> LoadedSpec:
    """``loaded`` with the subsample's filters instead of (or after) ``data.filters``."""
    spec = loaded.spec
    filters = list(subsample.filters)
    if not replace_filters:
        filters = [*spec.data.filters, *filters]
    data = spec.data.model_copy(update={"filters": filters})
    return dataclasses.replace(loaded, spec=spec.model_copy(update={"data": data}))


def falsification_result(
    loaded: LoadedSpec,
    source: Source,
    subsample: Subsample,
    *,
    kind: CovType,
    labels: dict[str, str],
) -> FalsificationResult:
    """First stage and reduced form on one falsification subsample (module docstring)."""
    rows_text = [describe_filter(f) for f in subsample.filters]
    try:
        prepared = prepare(subsample_spec(loaded, subsample, replace_filters=True), source)
    except DataError as exc:
        reason = NotApplicable(
            reason=f"the subsample '{subsample.name}' cannot support the model: {exc.message}"
        )
        return FalsificationResult(
            name=subsample.name,
            description=subsample.description,
            rows=rows_text,
            n_used=0,
            first_stages=reason,
            reduced_form=reason,
            reduced_form_test=reason,
            covariance="",
        )
    design = prepared.design
    rows = select_rows(design, np.ones(design.n, dtype=bool), fixed_effects=True)
    where = f"in the subsample '{subsample.name}'"
    instruments = list(design.instrument_names)

    def fit(values: np.ndarray, name: str) -> Regression | NotApplicable:
        return regress(
            rows,
            rows.take(values),
            rows.take(design.instruments),
            kind=kind,
            y_name=name,
            regressor_names=instruments,
            where=where,
            cluster_names=design.cluster_names,
            controls=rows.take(design.controls),
        )

    stages: list[FalsificationFirstStage] = []
    for j, name in enumerate(design.endog_names):
        reg = fit(design.endog[:, j], name)
        label = labels.get(name, name)
        if isinstance(reg, NotApplicable):
            stages.append(
                FalsificationFirstStage(
                    endogenous=name, label=label, coefficients=[], joint_test=reg
                )
            )
            continue
        stages.append(
            FalsificationFirstStage(
                endogenous=name,
                label=label,
                coefficients=coefficients(reg, instruments, labels),
                joint_test=joint_test(
                    reg,
                    name="Wald test of the instruments in the first stage",
                    null=f"the instruments do not move {label} in this subsample",
                ),
            )
        )
    outcome_label = labels.get(design.outcome_name, design.outcome_name)
    reduced = fit(design.y, design.outcome_name)
    reduced_form: list[InstrumentCoefficient] | NotApplicable
    test: TestOrNA
    if isinstance(reduced, NotApplicable):
        reduced_form, test = reduced, reduced
    else:
        reduced_form = coefficients(reduced, instruments, labels)
        test = joint_test(
            reduced,
            name="Wald test of the instruments in the reduced form",
            null=f"the instruments do not move {outcome_label} in this subsample",
        )
    spec = CovarianceSpec.build(kind, design.clusters if kind == "cluster" else None)
    return FalsificationResult(
        name=subsample.name,
        description=subsample.description,
        rows=rows_text,
        n_used=design.n,
        first_stages=stages,
        reduced_form=reduced_form,
        reduced_form_test=test,
        covariance=spec.describe(design.cluster_names),
    )
