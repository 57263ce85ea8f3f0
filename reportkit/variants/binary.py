"""Binary-outcome variants: nonlinear models beside linear 2SLS on the same 0/1 outcome.

The models (``binary_models``) need the full design, not partialled columns: a constant,
the controls and one indicator per fixed-effect level (beyond ``MAX_EFFECT_LEVELS``
levels a nonlinear model's fixed effects are too many to estimate reliably: the
incidental-parameters problem, Neyman & Scott 1948). They estimate average effects for
the whole population under distributional assumptions 2SLS does not make; linear 2SLS
on the same outcome estimates a local effect for compliers. Both are shown, with their
estimands, so a reader can see where they differ and why that is not by itself evidence
against either.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from reportkit.balance.placebo import placebo_result
from reportkit.balance.rows import recode
from reportkit.data.singletons import singleton_rows
from reportkit.engine.design import Design
from reportkit.results import NotApplicable, Variant, VariantValue
from reportkit.seeds import derive_seed
from reportkit.spec.models import BinaryOutcomeSection
from reportkit.variants.binary_models import (
    BinaryEffect,
    bivariate_probit,
    control_function_probit,
    two_stage_residual_inclusion,
)
from reportkit.variants.linear import variant_values

MAX_EFFECT_LEVELS = 50  # the batched bootstrap costs draws x n x k^2; see bench_binary_bootstrap.py

MODEL_NAMES = {
    "control_function_probit": "Control-function probit",
    "2sri_probit": "2SRI probit",
    "2sri_logit": "2SRI logit",
    "bivariate_probit": "Bivariate probit",
}
MODEL_DESCRIPTIONS = {
    "control_function_probit": "Probit of the outcome on the treatment, the controls and the "
    "first-stage residual (Rivers & Vuong 1988); average partial effect over the sample "
    "(Wooldridge 2010, sect. 15.7). Assumes normal errors, jointly with the first stage.",
    "2sri_probit": "Two-stage residual inclusion (Terza, Basu & Rathouz 2008): the raw "
    "first-stage residual added to a probit; average partial effect.",
    "2sri_logit": "Two-stage residual inclusion (Terza, Basu & Rathouz 2008) with a logit "
    "second stage; average partial effect.",
    "bivariate_probit": "Recursive bivariate probit of the outcome and the binary treatment by "
    "maximum likelihood; average treatment effect. Assumes jointly normal errors.",
}


def _num(x: float) -> str:
    return f"{x:.3g}"


def detail_sentences(extra: dict[str, float]) -> list[str]:
    """The model-specific numbers worth reading, in words (all are also in ``details``)."""
    out = []
    if {"coef_residual", "coef_residual_se", "coef_residual_p_value"} <= extra.keys():
        out.append(
            f"Coefficient on the first-stage residual {_num(extra['coef_residual'])} (SE "
            f"{_num(extra['coef_residual_se'])}, p = {_num(extra['coef_residual_p_value'])}): "
            "within this model, a test that the treatment is exogenous."
        )
    if {"coef_endogenous_se_analytic", "coef_endogenous_se_bootstrap"} <= extra.keys():
        out.append(
            "Standard error of the treatment's coefficient: "
            f"{_num(extra['coef_endogenous_se_analytic'])} by the two-step correction (Murphy & "
            f"Topel 1985), {_num(extra['coef_endogenous_se_bootstrap'])} by the bootstrap."
        )
    if {"rho", "rho_se"} <= extra.keys():
        out.append(
            f"Correlation of the two equations' errors {_num(extra['rho'])} (SE "
            f"{_num(extra['rho_se'])}); zero would mean the treatment is exogenous in this model."
        )
    if {"asf_treated", "asf_untreated"} <= extra.keys():
        out.append(
            "Average structural function: probability "
            f"{_num(extra['asf_treated'])} with everyone treated, "
            f"{_num(extra['asf_untreated'])} with no one treated."
        )
    return out


def _rows(design: Design, present: np.ndarray) -> np.ndarray:
    """Positions of the rows where ``present``, rows alone in a fixed-effect group dropped."""
    idx = np.flatnonzero(present)
    drop = singleton_rows(recode(design.fixed_effects[idx]))
    return idx[~drop]


def _exogenous(design: Design, rows: np.ndarray) -> np.ndarray:
    """Constant, controls and one indicator per fixed-effect level except the first."""
    parts = [np.ones((rows.size, 1)), design.controls[rows]]
    fe = recode(design.fixed_effects[rows])
    for j in range(fe.shape[1]):
        levels = int(fe[:, j].max()) + 1
        parts.append((fe[:, j][:, None] == np.arange(1, levels)[None, :]).astype(float))
    return np.column_stack(parts)


def _effect_variant(
    key: str,
    effect: BinaryEffect | NotApplicable,
    covariance: str,
    description: str,
    quantity: str,
) -> Variant:
    if isinstance(effect, NotApplicable):
        return Variant(
            key=f"binary:{key}",
            group="binary",
            name=MODEL_NAMES[key],
            description=description,
            estimand=quantity,
            n_obs=None,
            covariance=covariance,
            values=effect,
        )
    return Variant(
        key=f"binary:{key}",
        group="binary",
        name=MODEL_NAMES[key],
        description=" ".join([description, *detail_sentences(effect.extra)]),
        details=dict(effect.extra),
        estimand=quantity,
        n_obs=effect.n_obs,
        covariance=effect.std_error_method,
        values=[
            VariantValue(
                quantity=quantity,
                estimate=effect.estimate,
                std_error=effect.std_error,
                ci_lower=effect.ci_lower,
                ci_upper=effect.ci_upper,
                p_value=effect.p_value,
            )
        ],
    )


def _linear(
    design: Design,
    y_bin: np.ndarray,
    *,
    key: str,
    name: str,
    treatment: str,
    kind: str,
    labels: dict[str, str],
    level: float,
    outcome: str,
) -> Variant:
    result = placebo_result(design, outcome, y_bin, kind=kind, labels=labels, level=level)  # type: ignore[arg-type]
    coefs = result.tsls
    values = coefs if isinstance(coefs, NotApplicable) else variant_values(coefs)
    return Variant(
        key=f"binary:{key}",
        group="binary",
        name=name,
        description="Linear 2SLS of the 0/1 outcome (a linear probability model), instrumented "
        "as in the main model; for comparison with the nonlinear models.",
        estimand=f"coefficient on {treatment} (local effect on the probability, for compliers)",
        n_obs=result.n_used,
        covariance=result.joint_test.covariance
        if not isinstance(result.joint_test, NotApplicable)
        else "",
        values=values,
    )


def binary_variants(
    design: Design,
    y_bin: np.ndarray,
    d_bin: np.ndarray | None,
    d_bin_text: str,
    settings: BinaryOutcomeSection,
    *,
    kind: str,
    labels: dict[str, str],
    level: float,
    master_seed: int,
) -> list[Variant]:
    """The binary-outcome group of variants (see the module docstring)."""
    outcome = settings.outcome
    outcome_label = labels.get(outcome, outcome)
    endog_label = " and ".join(labels.get(e, e) for e in design.endog_names)

    def quantity(key: str) -> str:
        binary_treatment = key == "bivariate_probit" or (
            key.startswith("2sri") and d_bin is not None
        )
        if binary_treatment:
            return f"average treatment effect of {d_bin_text} on P({outcome_label})"
        return f"average partial effect of {endog_label} on P({outcome_label})"

    out = [
        _linear(
            design,
            y_bin,
            key="linear_2sls",
            name="2SLS, binary outcome",
            treatment=endog_label,
            kind=kind,
            labels=labels,
            level=level,
            outcome=outcome,
        )
    ]
    if d_bin is not None:
        swapped = replace(
            design,
            endog=np.where(np.isfinite(d_bin), d_bin, 0.0)[:, None],
            endog_names=(d_bin_text,),
        )
        present = np.isfinite(y_bin) & np.isfinite(d_bin)
        out.append(
            _linear(
                swapped,
                np.where(present, y_bin, np.nan),
                key="linear_2sls_binary_treatment",
                name="2SLS, binary outcome and treatment",
                treatment=d_bin_text,
                kind=kind,
                labels=labels,
                level=level,
                outcome=outcome,
            )
        )
    present = np.isfinite(y_bin) & (np.isfinite(d_bin) if d_bin is not None else True)
    rows = _rows(design, present)
    levels = (
        sum(
            int(recode(design.fixed_effects[rows])[:, j].max()) + 1
            for j in range(design.fixed_effects.shape[1])
        )
        if rows.size
        else 0
    )
    clusters = None
    if kind == "cluster" and design.clusters.shape[1]:
        dim = design.coarsest_cluster
        assert dim is not None
        clusters = recode(design.clusters[rows][:, [dim]])[:, 0]
    covariance = "cluster bootstrap" if clusters is not None else "bootstrap"
    for key in settings.models:
        description = MODEL_DESCRIPTIONS[key]
        problem = None
        if design.endog.shape[1] != 1:
            problem = (
                f"the nonlinear models here take one endogenous regressor; the model has "
                f"{design.endog.shape[1]}"
            )
        elif levels > MAX_EFFECT_LEVELS:
            problem = (
                f"the fixed effects have {levels} levels; nonlinear models with more than "
                f"{MAX_EFFECT_LEVELS} fixed-effect indicators suffer the incidental-parameters "
                "bias, so they are not estimated"
            )
        elif key == "bivariate_probit" and d_bin is None:
            problem = "the bivariate probit needs a binary treatment: define model.binary_treatment"
        if problem is not None:
            out.append(
                _effect_variant(
                    key, NotApplicable(reason=problem), covariance, description, quantity(key)
                )
            )
            continue
        y = y_bin[rows]
        z = design.instruments[rows]
        w = _exogenous(design, rows)
        weights = None if design.weights is None else design.weights[rows]
        seed = derive_seed(master_seed, f"binary:{key}")
        d_cont = design.endog[rows, 0]
        effect: BinaryEffect | NotApplicable
        try:
            if key == "control_function_probit":
                effect = control_function_probit(
                    y,
                    d_cont,
                    z,
                    w,
                    weights=weights,
                    clusters=clusters,
                    draws=settings.bootstrap_draws,
                    seed=seed,
                    level=level,
                )
            elif key in ("2sri_probit", "2sri_logit"):
                effect = two_stage_residual_inclusion(
                    y,
                    d_bin[rows] if d_bin is not None else d_cont,
                    z,
                    w,
                    link=key.split("_")[1],
                    weights=weights,
                    clusters=clusters,
                    draws=settings.bootstrap_draws,
                    seed=seed,
                    level=level,
                )
            else:
                assert d_bin is not None
                effect = bivariate_probit(
                    y, d_bin[rows], z, w, weights=weights, clusters=clusters, level=level
                )
        except (ValueError, np.linalg.LinAlgError) as exc:
            effect = NotApplicable(reason=str(exc) or "the model could not be estimated")
        out.append(_effect_variant(key, effect, covariance, description, quantity(key)))
    return out
