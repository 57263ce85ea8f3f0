"""``balance_checks``: everything the appendix shows on whether the instruments look as
good as randomly assigned, as one ``Balance`` result.

No test can show that an instrument is as good as random; these computations show
whether the observable pre-treatment characteristics differ across its values, which is
what a reader can check. The parts:

1. the balance table (``table.py``): each covariate's means across groups of each
   instrument's values, their difference and standardized difference, and its
   regression on the instruments, unconditional and with the fixed effects absorbed;
2. joint balance (``joint.py``): each instrument on all covariates, one joint test;
3. the outcome index (``joint.py``): the outcome predicted from the covariates,
   regressed on the instruments;
4. placebo outcomes (``placebo.py``): reduced form and 2SLS, read as "should be zero".

Every regression goes through the moment engine, so weights, fixed effects, clusters and
the covariance's small-sample factors are those of the main estimates. With weights all
means, variances and regressions are weighted. Each balance variable is used on the rows
of the estimation sample where it is present; its own missing values never remove rows
from the main sample. Degenerate inputs give ``NotApplicable`` or None with a reason,
never an error or a non-finite number.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from reportkit.balance.groups import instrument_groups
from reportkit.balance.joint import joint_balance, outcome_index
from reportkit.balance.placebo import placebo_result
from reportkit.balance.regression import plural
from reportkit.balance.table import balance_row
from reportkit.engine.covariance import CovarianceSpec, CovType
from reportkit.engine.design import Design
from reportkit.results import Balance, NotApplicable, OutcomeIndex


def balance_checks(
    design: Design,
    extras: Mapping[str, np.ndarray],
    *,
    covariates: list[str],
    pre_treatment: list[str],
    placebo_outcomes: list[str],
    cut_points: Mapping[str, list[float]],
    covariance: str,
    labels: dict[str, str],
    level: float,
    model_controls: Sequence[str] = (),
) -> Balance | NotApplicable:
    """Balance table, joint tests, outcome index and placebo results for one model.

    ``design`` is the estimation sample; ``extras[name]`` each balance or placebo column
    on its rows (float, NaN where missing; a model control missing from ``extras`` is
    taken from ``design.controls``). The balance variables are ``covariates`` followed
    by the ``pre_treatment`` names not already among them; a variable is of kind
    'control' when it is a model control (``design.control_names`` or
    ``model_controls``, which may list controls the data stage dropped), else
    'pre_treatment'. ``cut_points`` group a continuous instrument's values for the
    table of means (default: quartiles); ``covariance`` is 'classical', 'robust' or
    'cluster'; ``level`` the confidence level of the placebo 2SLS intervals.
    """
    kind = _covariance_kind(covariance)
    variables = list(dict.fromkeys([*covariates, *pre_treatment]))
    placebos = list(dict.fromkeys(placebo_outcomes))
    if not variables and not placebos:
        return NotApplicable(
            reason="there are no balance covariates and no placebo outcomes: the model has "
            "no numeric controls and the spec's balance section names none"
        )
    columns = {name: balance_column(design, extras, name) for name in [*variables, *placebos]}
    controls = {*design.control_names, *model_controls}
    groupings = [
        instrument_groups(
            design.instruments[:, j],
            name,
            labels.get(name, name),
            list(cut_points[name]) if name in cut_points else None,
        )
        for j, name in enumerate(design.instrument_names)
    ]
    rows = [
        balance_row(
            design,
            name,
            columns[name],
            "control" if name in controls else "pre_treatment",
            groupings,
            kind=kind,
            labels=labels,
        )
        for name in variables
    ]
    index: OutcomeIndex | NotApplicable
    if variables:
        matrix = np.column_stack([columns[name] for name in variables])
        joint = joint_balance(design, variables, matrix, kind=kind, labels=labels)
        index = outcome_index(design, variables, matrix, kind=kind, labels=labels)
    else:
        joint = []
        index = NotApplicable(reason="there are no balance covariates to predict the outcome")
    placebo = [
        placebo_result(design, name, columns[name], kind=kind, labels=labels, level=level)
        for name in placebos
    ]
    spec = CovarianceSpec.build(kind, design.clusters if kind == "cluster" else None)
    return Balance(
        rows=rows,
        joint=joint,
        outcome_index=index,
        placebo=placebo,
        covariance=spec.describe(design.cluster_names),
        conditioning=conditioning_text(design.fixed_effect_names),
    )


def conditioning_text(fixed_effect_names: tuple[str, ...]) -> str:
    """What the conditional regressions hold fixed, in words."""
    if not fixed_effect_names:
        return "nothing (no fixed effects in the model)"
    return f"the {plural(list(fixed_effect_names))} fixed effects"


def _covariance_kind(covariance: str) -> CovType:
    if covariance not in ("classical", "robust", "cluster"):
        raise ValueError(
            f"covariance must be 'classical', 'robust' or 'cluster', not {covariance!r}"
        )
    return covariance  # type: ignore[return-value]


def balance_column(design: Design, extras: Mapping[str, np.ndarray], name: str) -> np.ndarray:
    """The balance column as float with NaN where missing (non-finite counts as missing)."""
    if name in extras:
        values = np.asarray(extras[name], dtype=float)
    elif name in design.control_names:
        values = design.controls[:, design.control_names.index(name)].astype(float)
    else:
        raise ValueError(
            f"balance column '{name}' is neither in the extras nor a model control; the data "
            "stage must pass every balance and placebo column"
        )
    if values.shape != (design.n,):
        raise ValueError(
            f"balance column '{name}' has shape {values.shape}, expected ({design.n},): one "
            "value per row of the estimation sample"
        )
    return np.where(np.isfinite(values), values, np.nan)
