"""Variants that change the data or the model: other clustering, samples, controls, trimming.

Each is the main spec with one change, prepared from the already-read file exactly as
the main sample is (missing values, filters, singletons, screening), then fitted by
2SLS. A variant whose sample cannot support the model is reported as not applicable
with the data stage's own explanation.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from reportkit.data.filters import describe_filter
from reportkit.data.prepare import PreparedData, Source, prepare
from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.estimators import EstimateArrays, tsls
from reportkit.engine.moments import compute_moments
from reportkit.errors import DataError
from reportkit.results import NotApplicable, Variant, VariantGroup
from reportkit.spec.loaded import LoadedSpec
from reportkit.spec.models import RowFilter, Spec
from reportkit.variants.linear import make_variant, safe_fit


def _respecified(loaded: LoadedSpec, spec: Spec) -> LoadedSpec:
    return dataclasses.replace(loaded, spec=spec)


def _fit(
    loaded: LoadedSpec, source: Source
) -> tuple[PreparedData, CovarianceSpec, EstimateArrays | NotApplicable] | NotApplicable:
    try:
        prepared = prepare(loaded, source)
    except DataError as exc:
        return NotApplicable(reason=f"the variant's sample cannot support the model: {exc.message}")
    design = prepared.design
    kind = loaded.spec.covariance
    cov = CovarianceSpec.build(kind, design.clusters if kind == "cluster" else None)
    return prepared, cov, safe_fit(tsls, compute_moments(design), cov)


def _variant(
    loaded: LoadedSpec,
    source: Source,
    *,
    key: str,
    group: VariantGroup,
    name: str,
    description: str,
    labels: dict[str, str],
    level: float,
) -> Variant:
    endog = loaded.spec.model.endogenous
    result = _fit(loaded, source)
    if isinstance(result, NotApplicable):
        return make_variant(
            key=key,
            group=group,
            name=name,
            description=description,
            fit=result,
            n_obs=None,
            covariance="",
            names=endog,
            labels=labels,
            level=level,
        )
    prepared, cov, fit = result
    return make_variant(
        key=key,
        group=group,
        name=name,
        description=description,
        fit=fit,
        n_obs=prepared.design.n,
        covariance=cov.describe(prepared.design.cluster_names),
        names=endog,
        labels=labels,
        level=level,
    )


def clustering_variants(
    loaded: LoadedSpec, source: Source, *, labels: dict[str, str], level: float
) -> list[Variant]:
    """2SLS with other cluster variables, and without clustering when the model clusters."""
    spec = loaded.spec.resolved()
    out = []
    if spec.covariance == "cluster":
        unclustered = spec.model_copy(
            update={
                "model": spec.model.model_copy(update={"cluster_by": []}),
                "inference": spec.inference.model_copy(update={"covariance": "robust"}),
            }
        )
        out.append(
            _variant(
                _respecified(loaded, unclustered),
                source,
                key="inference:robust",
                group="inference",
                name="Not clustered",
                description="Heteroskedasticity-robust standard errors without clustering "
                "(usually smaller; shown to see how much clustering matters).",
                labels=labels,
                level=level,
            )
        )
    for names in spec.robustness.alternative_clusters:
        shown = " and ".join(labels.get(n, n) for n in names)
        other = spec.model_copy(
            update={
                "model": spec.model.model_copy(update={"cluster_by": list(names)}),
                "inference": spec.inference.model_copy(update={"covariance": "cluster"}),
            }
        )
        way = "two-way " if len(names) == 2 else ""
        out.append(
            _variant(
                _respecified(loaded, other),
                source,
                key="inference:cluster:" + "+".join(names),
                group="inference",
                name=f"Clustered by {shown}",
                description=f"The main 2SLS estimate with {way}cluster-robust standard errors "
                f"by {shown}.",
                labels=labels,
                level=level,
            )
        )
    return out


def sample_variants(
    loaded: LoadedSpec, source: Source, *, labels: dict[str, str], level: float
) -> list[Variant]:
    """2SLS on the spec's named subsamples (their filters after data.filters)."""
    spec = loaded.spec
    out = []
    for sub in spec.robustness.samples:
        data = spec.data.model_copy(update={"filters": [*spec.data.filters, *sub.filters]})
        rows = "; ".join(describe_filter(f) for f in sub.filters)
        description = (sub.description + " " if sub.description else "") + f"Rows: {rows}."
        out.append(
            _variant(
                _respecified(loaded, spec.model_copy(update={"data": data})),
                source,
                key=f"sample:{sub.name}",
                group="sample",
                name=sub.name,
                description=description,
                labels=labels,
                level=level,
            )
        )
    return out


def trimming_variants(
    loaded: LoadedSpec,
    source: Source,
    outcome_values: np.ndarray,
    *,
    labels: dict[str, str],
    level: float,
) -> list[Variant]:
    """2SLS without the rows whose outcome lies in either tail (shares of the main sample)."""
    spec = loaded.spec
    outcome = spec.model.outcome
    label = labels.get(outcome, outcome)
    out = []
    for share in spec.robustness.trim_outcome:
        low, high = (float(v) for v in np.quantile(outcome_values, [share, 1 - share]))
        filters = [
            *spec.data.filters,
            RowFilter(column=outcome, keep_if="at_least", value=low),
            RowFilter(column=outcome, keep_if="at_most", value=high),
        ]
        data = spec.data.model_copy(update={"filters": filters})
        percent = f"{100 * share:g}%"
        out.append(
            _variant(
                _respecified(loaded, spec.model_copy(update={"data": data})),
                source,
                key=f"sample:trim:{share:g}",
                group="sample",
                name=f"Outcome trimmed {percent} each tail",
                description=f"Rows with {label} below {low:.6g} or above {high:.6g} (the "
                f"{percent} and {100 - 100 * share:g}% quantiles of the main sample) left out.",
                labels=labels,
                level=level,
            )
        )
    return out


def control_variants(
    loaded: LoadedSpec, source: Source, *, labels: dict[str, str], level: float
) -> list[Variant]:
    """2SLS with the spec's named control sets (controls added or removed)."""
    spec = loaded.spec
    out = []
    for variant in spec.robustness.control_sets:
        model = spec.model
        controls = [c for c in model.controls if c not in variant.remove] + list(variant.add)
        categorical = [c for c in model.categorical_controls if c not in variant.remove]
        changed = spec.model_copy(
            update={
                "model": model.model_copy(
                    update={"controls": controls, "categorical_controls": categorical}
                )
            }
        )
        parts = []
        if variant.add:
            parts.append("adds " + ", ".join(labels.get(c, c) for c in variant.add))
        if variant.remove:
            parts.append("removes " + ", ".join(labels.get(c, c) for c in variant.remove))
        out.append(
            _variant(
                _respecified(loaded, changed),
                source,
                key=f"controls:{variant.name}",
                group="controls",
                name=variant.name,
                description="The main model " + " and ".join(parts) + ".",
                labels=labels,
                level=level,
            )
        )
    return out
