"""All robustness variants and sensitivity analyses of one run, as one ``Robustness`` part.

The main 2SLS estimate is the reference; every variant changes one thing (the estimator,
the instruments, the inference, the sample, the controls, or the model for a binary
outcome). Random procedures draw from seeds derived from the master seed and their own
name (``reportkit.seeds``), recorded in the results.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reportkit.data.prepare import PreparedData, Source
from reportkit.engine.estimators import tsls
from reportkit.estimation import EstimationOutput
from reportkit.results import (
    ExclusionSensitivity,
    NotApplicable,
    Robustness,
    WildBootstrapResult,
)
from reportkit.seeds import derive_seed
from reportkit.spec.loaded import LoadedSpec
from reportkit.variants.binary import binary_variants
from reportkit.variants.exclusion import exclusion_sensitivity
from reportkit.variants.influence import cluster_influence
from reportkit.variants.linear import estimator_variants, fitted_values, instrument_variants
from reportkit.variants.respecified import (
    clustering_variants,
    control_variants,
    sample_variants,
    trimming_variants,
)
from reportkit.variants.wild_bootstrap import wild_bootstrap_tsls


@dataclass(frozen=True)
class BinaryInputs:
    """The 0/1 outcome (and treatment) on the estimation sample, NaN where missing."""

    outcome: np.ndarray | None
    treatment: np.ndarray | None
    treatment_text: str


def robustness_checks(
    loaded: LoadedSpec,
    source: Source,
    prepared: PreparedData,
    est: EstimationOutput,
    binary: BinaryInputs,
    *,
    labels: dict[str, str],
) -> Robustness | NotApplicable:
    """Variants, cluster influence, wild bootstrap and exclusion sensitivity."""
    spec = loaded.spec.resolved()
    rob = spec.robustness
    level = spec.inference.confidence_level
    design = prepared.design
    m, cov = est.moments, est.cov
    main_fit = est.fits["2sls"] if "2sls" in est.fits else tsls(m, cov)
    main = fitted_values(main_fit, design.endog_names, labels, level)
    if isinstance(main, NotApplicable):
        return NotApplicable(reason=f"the main 2SLS estimate is not defined: {main.reason}")

    variants = estimator_variants(
        m, cov, design, estimators=rob.estimators, labels=labels, level=level
    )
    if rob.instrument_sets:
        variants += instrument_variants(design, cov, labels=labels, level=level)
    variants += clustering_variants(loaded, source, labels=labels, level=level)
    variants += sample_variants(loaded, source, labels=labels, level=level)
    variants += trimming_variants(loaded, source, design.y, labels=labels, level=level)
    variants += control_variants(loaded, source, labels=labels, level=level)
    if rob.binary_outcome is not None and binary.outcome is not None:
        variants += binary_variants(
            design,
            binary.outcome,
            binary.treatment,
            binary.treatment_text,
            rob.binary_outcome,
            kind=spec.covariance,
            labels=labels,
            level=level,
            master_seed=spec.run.seed,
        )

    influence = (
        cluster_influence(
            design,
            spec.covariance,
            main_fit,
            cluster_labels=prepared.cluster_levels,
            labels=labels,
            level=level,
        )
        if rob.cluster_influence
        else NotApplicable(reason="not asked for (robustness.cluster_influence is false)")
    )
    return Robustness(
        main=main,
        variants=variants,
        cluster_influence=influence,
        wild_bootstrap=_wild(prepared, est, spec.covariance, labels, loaded),
        sensitivity=_sensitivity(prepared, est, labels, loaded),
    )


def _wild(
    prepared: PreparedData,
    est: EstimationOutput,
    kind: str,
    labels: dict[str, str],
    loaded: LoadedSpec,
) -> list[WildBootstrapResult] | NotApplicable:
    settings = loaded.spec.robustness.wild_bootstrap
    design, m = prepared.design, est.moments
    if settings is None:
        return NotApplicable(reason="not asked for (robustness.wild_bootstrap is null)")
    if m.p != 1:
        return NotApplicable(
            reason="the restricted wild bootstrap here tests one endogenous regressor's "
            "coefficient; the model has several"
        )
    codes = None
    if kind == "cluster":
        dim = design.coarsest_cluster
        codes = None if dim is None else design.clusters[:, dim]
    seed = derive_seed(loaded.spec.run.seed, "wild_bootstrap")
    try:
        boot = wild_bootstrap_tsls(
            m,
            cluster_codes=codes,
            k=m.p + m.k_exog,
            draws=settings.draws,
            weights=settings.weights,
            seed=seed,
            fixed_effects=design.fixed_effects,
        )
    except (ValueError, np.linalg.LinAlgError) as exc:
        return NotApplicable(reason=str(exc))
    name = design.endog_names[0]
    return [
        WildBootstrapResult(
            endogenous=name,
            label=labels.get(name, name),
            t_statistic=boot.t_statistic,
            p_value=boot.p_value,
            draws=boot.draws,
            weights=boot.weights,
            level="cluster" if codes is not None else "observation",
            clusters=boot.n_clusters,
            seed=seed,
        )
    ]


def _sensitivity(
    prepared: PreparedData,
    est: EstimationOutput,
    labels: dict[str, str],
    loaded: LoadedSpec,
) -> list[ExclusionSensitivity] | NotApplicable:
    spec = loaded.spec.resolved()
    settings = spec.sensitivity
    design = prepared.design
    if not settings.direct_effects:
        return NotApplicable(
            reason="the spec gives no range of direct effects (sensitivity.direct_effects)"
        )
    names = list(design.instrument_names)
    ranges = {
        names.index(name): (r.lower, r.upper, r.prior_mean, r.prior_sd)
        for name, r in settings.direct_effects.items()
    }
    return exclusion_sensitivity(
        est.moments,
        est.cov,
        ranges=ranges,
        instrument_names=names,
        endog_names=list(design.endog_names),
        labels=labels,
        level=spec.inference.confidence_level,
        grid_points=settings.grid_points,
        covariance_text=est.cov.describe(design.cluster_names),
    )
