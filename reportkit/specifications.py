"""Further specifications: the other columns of a paper's main table, each run in full.

A spec may define several specifications that share its data and defaults and replace
parts of the main model, the row filters or the covariance (``Spec.specifications``).
Each one is the spec changed (``Spec.specification_spec``), prepared from the file
already read exactly as the main sample is (missing values, filters, singletons,
screening), then estimated by the same stage as the main model (every estimator the spec
lists, first stages, strength, Anderson-Rubin set, over-identification and endogeneity
tests), without the linearmodels cross-check. A specification whose sample cannot
support the model is kept, with every part not applicable and the data stage's own
explanation: the run goes on.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from reportkit.data.filters import describe_filter
from reportkit.data.prepare import Source, prepare
from reportkit.errors import DataError
from reportkit.estimation import EstimationOutput, estimate
from reportkit.results import (
    ModelDescription,
    NotApplicable,
    SpecificationResult,
    SpecificationSetting,
    SpecificationStrength,
    WeakIVRobust,
)
from reportkit.spec.loaded import LoadedSpec
from reportkit.spec.models import ModelSection, RowFilter, Spec

# The covariance in a few words (the clusters have a row of their own).
COVARIANCE_WORDS = {
    "classical": "classical (independent, homoskedastic errors)",
    "robust": "heteroskedasticity-robust",
    "cluster": "cluster-robust",
}
SETTING_TITLES = {
    "endogenous": "Endogenous regressors",
    "instruments": "Instruments",
    "controls": "Controls",
    "fixed_effects": "Fixed effects",
    "clusters": "Clusters",
    "weights": "Weights",
    "covariance": "Standard errors",
    "sample": "Sample",
}


def run_specifications(
    loaded: LoadedSpec, source: Source, *, labels: dict[str, str]
) -> list[SpecificationResult]:
    """Every specification of ``loaded.spec``, in spec order (empty when there are none)."""
    return [
        specification_result(loaded, source, index, labels=labels)
        for index in range(len(loaded.spec.specifications))
    ]


def specification_result(
    loaded: LoadedSpec, source: Source, index: int, *, labels: dict[str, str]
) -> SpecificationResult:
    """Prepare and estimate specification ``index``; not applicable when its data cannot."""
    main = loaded.spec
    specification = main.specifications[index]
    own = main.specification_spec(index)
    settings = compare_settings(main, own, labels)
    common: dict[str, Any] = {
        "name": specification.name,
        "description": specification.description,
        "changes": [change_sentence(s) for s in settings if s.changed],
        "settings": settings,
        "covariance_type": own.covariance,
    }
    try:
        prepared = prepare(dataclasses.replace(loaded, spec=own), source)
        design = prepared.design
        est = estimate(
            design,
            covariance=own.covariance,
            estimators=list(own.estimators),
            confidence_level=own.inference.confidence_level,
            labels=labels,
            crosscheck="never",
        )
    except DataError as exc:
        reason = f"this specification's sample cannot support the model: {exc.message}"
        return _not_applicable(common, own.model, labels, reason)
    except np.linalg.LinAlgError as exc:
        reason = f"the model cannot be estimated on this sample ({exc})"
        return _not_applicable(common, own.model, labels, reason)
    return SpecificationResult(
        **common,
        model=model_description(own.model, labels, design.control_names),
        covariance=est.conventions.covariance_description,
        n_obs=design.n,
        estimates=est.estimates,
        strength=_strength(est),
        verdict=est.strength.verdict,
        anderson_rubin=(
            est.weak_iv.anderson_rubin
            if isinstance(est.weak_iv, WeakIVRobust)
            else NotApplicable(reason=est.weak_iv.reason)
        ),
        sargan=est.diagnostics.sargan,
        hansen_j=est.diagnostics.hansen_j,
        endogeneity=est.diagnostics.endogeneity,
    )


def _not_applicable(
    common: dict[str, Any], model: ModelSection, labels: dict[str, str], reason: str
) -> SpecificationResult:
    na = NotApplicable(reason=reason)
    named = (*model.controls, *model.categorical_controls)
    return SpecificationResult(
        **common,
        model=model_description(model, labels, named),
        covariance="",
        n_obs=None,
        estimates=na,
        strength=na,
        verdict=na,
        anderson_rubin=na,
        sargan=na,
        hansen_j=na,
        endogeneity=na,
    )


def _strength(est: EstimationOutput) -> list[SpecificationStrength]:
    return [
        SpecificationStrength(
            endogenous=fs.endogenous,
            label=fs.label,
            first_stage_f=fs.f_main,
            effective_f=strength.effective_f,
        )
        for fs, strength in zip(est.first_stages, est.strength.per_endogenous, strict=True)
    ]


def model_description(
    model: ModelSection, labels: dict[str, str], controls: Sequence[str]
) -> ModelDescription:
    """The model as the results describe it (controls as used, indicators included)."""
    return ModelDescription(
        outcome=model.outcome,
        endogenous=list(model.endogenous),
        instruments=list(model.instruments),
        controls=list(controls),
        fixed_effects=list(model.fixed_effects),
        cluster_by=list(model.cluster_by),
        weights=model.weights,
        labels=dict(labels),
        n_instruments=len(model.instruments),
        n_endogenous=len(model.endogenous),
        overidentification_degree=len(model.instruments) - len(model.endogenous),
    )


# --- what a specification changes, in words -------------------------------------------


def _names(names: Sequence[str], labels: Mapping[str, str]) -> str:
    return ", ".join(labels.get(n, n) for n in names) if names else "none"


def _rows(filters: Sequence[RowFilter]) -> str:
    return "; ".join(describe_filter(f) for f in filters) if filters else "all rows"


def _parts(spec: Spec, labels: Mapping[str, str]) -> dict[str, tuple[object, str]]:
    """Each setting of ``spec``: (what is compared, the words shown)."""
    model = spec.model
    controls = [*model.controls, *model.categorical_controls]
    weights = [model.weights] if model.weights else []
    return {
        "endogenous": (set(model.endogenous), _names(model.endogenous, labels)),
        "instruments": (set(model.instruments), _names(model.instruments, labels)),
        "controls": (set(controls), _names(controls, labels)),
        "fixed_effects": (set(model.fixed_effects), _names(model.fixed_effects, labels)),
        "clusters": (set(model.cluster_by), _names(model.cluster_by, labels)),
        "weights": (set(weights), _names(weights, labels)),
        "covariance": (spec.covariance, COVARIANCE_WORDS[spec.covariance]),
        "sample": (list(spec.data.filters), _rows(spec.data.filters)),
    }


def compare_settings(
    main: Spec, own: Spec, labels: Mapping[str, str]
) -> list[SpecificationSetting]:
    """Every setting of a specification beside the main specification's, and whether it
    differs (lists compared as sets: the order of the names changes nothing)."""
    mine, theirs = _parts(own, labels), _parts(main, labels)
    return [
        SpecificationSetting(
            part=part,  # type: ignore[arg-type]
            title=SETTING_TITLES[part],
            value=value,
            main=theirs[part][1],
            changed=compared != theirs[part][0],
        )
        for part, (compared, value) in mine.items()
    ]


def change_sentence(setting: SpecificationSetting) -> str:
    """E.g. 'instruments: Won the lottery (main: Won the lottery, Distance (km))'."""
    return f"{setting.title.lower()}: {setting.value} (main: {setting.main})"
