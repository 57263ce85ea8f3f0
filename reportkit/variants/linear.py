"""Linear variants of the main 2SLS estimate: other estimators, instrument sets, clustering.

Each variant is re-estimated with the moment engine and returned as a ``Variant``: the
same coefficients as the main table (normal intervals at the spec's level), or
``NotApplicable`` with the reason when it cannot be estimated (a single instrument left
for two endogenous regressors, a singular first stage, a degenerate leverage for JIVE).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import replace

import numpy as np

from reportkit.coefficients import finite_coefficient_rows
from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.design import Design
from reportkit.engine.estimators import EstimateArrays, gmm, liml, tsls
from reportkit.engine.moments import Moments, compute_moments
from reportkit.engine.more_estimators import fuller, jive
from reportkit.results import Coefficient, NotApplicable, Variant, VariantGroup, VariantValue

EstimatorFunction = Callable[[Moments, CovarianceSpec], EstimateArrays]

ESTIMATOR_VARIANTS: dict[str, tuple[str, str, EstimatorFunction]] = {
    "liml": (
        "LIML",
        "Limited-information maximum likelihood (Anderson & Rubin 1949): less biased than "
        "2SLS with many or weak instruments.",
        liml,
    ),
    "fuller_1": (
        "Fuller (alpha = 1)",
        "Fuller (1977) modification of LIML with alpha = 1: approximately unbiased, with "
        "finite moments.",
        lambda m, cov: fuller(m, 1.0, cov),
    ),
    "fuller_4": (
        "Fuller (alpha = 4)",
        "Fuller (1977) modification of LIML with alpha = 4: smaller mean squared error.",
        lambda m, cov: fuller(m, 4.0, cov),
    ),
    "gmm": (
        "Two-step GMM",
        "Efficient two-step GMM (Hansen 1982) with the spec's covariance in the weight.",
        gmm,
    ),
    "jive": (
        "JIVE",
        "Jackknife IV (Angrist, Imbens & Krueger 1999) after partialling out the controls "
        "(Ackerberg & Devereux 2009): each row's first-stage prediction leaves that row out.",
        jive,
    ),
}


def coefficient_text(labels: dict[str, str], names: Sequence[str]) -> str:
    """What a linear variant estimates, in words."""
    shown = " and ".join(labels.get(n, n) for n in names)
    return f"coefficient on {shown}"


def variant_values(coefficients: Sequence[Coefficient]) -> list[VariantValue]:
    """Labelled coefficients as variant values (one per regressor)."""
    return [
        VariantValue(
            quantity=c.name,
            estimate=c.estimate,
            std_error=c.std_error,
            ci_lower=c.ci_lower,
            ci_upper=c.ci_upper,
            p_value=c.p_value,
        )
        for c in coefficients
    ]


def fitted_values(
    fit: EstimateArrays, names: Sequence[str], labels: dict[str, str], level: float
) -> list[VariantValue] | NotApplicable:
    """The fit as variant values; NotApplicable when estimates or variances are not finite."""
    rows = finite_coefficient_rows(fit, tuple(names), labels, level)
    if rows is None:
        return NotApplicable(reason="the estimate or its variance is not finite for these data")
    return variant_values(rows)


def safe_fit(
    function: EstimatorFunction, m: Moments, cov: CovarianceSpec
) -> EstimateArrays | NotApplicable:
    """Run an estimator; a singular system or a degenerate input becomes NotApplicable."""
    try:
        return function(m, cov)
    except np.linalg.LinAlgError:
        return NotApplicable(
            reason="the estimator's matrices are singular for these data (the instruments do "
            "not identify the coefficients)"
        )
    except ValueError as exc:
        return NotApplicable(reason=str(exc))


def make_variant(
    *,
    key: str,
    group: VariantGroup,
    name: str,
    description: str,
    fit: EstimateArrays | NotApplicable,
    n_obs: int | None,
    covariance: str,
    names: Sequence[str],
    labels: dict[str, str],
    level: float,
) -> Variant:
    values = fit if isinstance(fit, NotApplicable) else fitted_values(fit, names, labels, level)
    return Variant(
        key=key,
        group=group,
        name=name,
        description=description,
        estimand=coefficient_text(labels, names),
        n_obs=n_obs,
        covariance=covariance,
        values=values,
    )


def estimator_variants(
    m: Moments,
    cov: CovarianceSpec,
    design: Design,
    *,
    estimators: Sequence[str],
    labels: dict[str, str],
    level: float,
) -> list[Variant]:
    """The main model with each of ``estimators`` instead of 2SLS."""
    covariance = cov.describe(design.cluster_names)
    out = []
    for key in estimators:
        name, description, function = ESTIMATOR_VARIANTS[key]
        out.append(
            make_variant(
                key=f"estimator:{key}",
                group="estimator",
                name=name,
                description=description,
                fit=safe_fit(function, m, cov),
                n_obs=design.n,
                covariance=covariance,
                names=design.endog_names,
                labels=labels,
                level=level,
            )
        )
    return out


def _with_instruments(design: Design, columns: list[int]) -> Design:
    return replace(
        design,
        instruments=np.ascontiguousarray(design.instruments[:, columns]),
        instrument_names=tuple(design.instrument_names[j] for j in columns),
    )


def instrument_variants(
    design: Design, cov: CovarianceSpec, *, labels: dict[str, str], level: float
) -> list[Variant]:
    """2SLS with each instrument alone and with each instrument left out."""
    q, p = design.instruments.shape[1], design.endog.shape[1]
    covariance = cov.describe(design.cluster_names)
    names = design.instrument_names
    if q == 1:
        return [
            Variant(
                key="instruments:single",
                group="instruments",
                name="Other instrument sets",
                description="Each instrument alone, and each left out.",
                estimand=coefficient_text(labels, design.endog_names),
                n_obs=design.n,
                covariance=covariance,
                values=NotApplicable(
                    reason="the model has a single instrument, so there is no other set"
                ),
            )
        ]
    sets: list[tuple[str, str, str, list[int]]] = []
    for j, name in enumerate(names):
        label = labels.get(name, name)
        sets.append(
            (
                f"instruments:only:{name}",
                f"Only {label}",
                f"2SLS with {label} as the only instrument.",
                [j],
            )
        )
    for j, name in enumerate(names):
        label = labels.get(name, name)
        rest = [k for k in range(q) if k != j]
        sets.append(
            (
                f"instruments:without:{name}",
                f"Without {label}",
                f"2SLS with {label} left out of the instruments.",
                rest,
            )
        )
    out = []
    seen: set[tuple[int, ...]] = set()
    for key, title, description, columns in sets:
        if tuple(columns) in seen:  # with two instruments, 'without a' is 'only b'
            continue
        seen.add(tuple(columns))
        fit: EstimateArrays | NotApplicable
        if len(columns) < p:
            fit = NotApplicable(
                reason=f"{len(columns)} instrument(s) cannot identify {p} endogenous regressors"
            )
        else:
            fit = safe_fit(tsls, compute_moments(_with_instruments(design, columns)), cov)
        out.append(
            make_variant(
                key=key,
                group="instruments",
                name=title,
                description=description,
                fit=fit,
                n_obs=design.n,
                covariance=covariance,
                names=design.endog_names,
                labels=labels,
                level=level,
            )
        )
    return out
