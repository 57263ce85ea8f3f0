"""Orchestration only: spec -> data -> estimation -> results.

Each stage is a pure function of the previous stage's typed output; this module puts
them in order, times them and reports progress through an optional callback.
"""

from __future__ import annotations

import platform
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from importlib import metadata

from reportkit.disclosures import build_disclosures
from reportkit.engine.crosscheck import CrossCheckRow
from reportkit.results import (
    Balance,
    ComplierAnalysis,
    CrossCheck,
    FalsificationResult,
    InputFile,
    ModelDescription,
    NotApplicable,
    Provenance,
    SpecificationResult,
    StudyInfo,
    StudyResults,
)
from reportkit.spec.loaded import LoadedSpec

KEY_PACKAGES = (
    "reportkit",
    "numpy",
    "scipy",
    "pandas",
    "linearmodels",
    "pyhdfe",
    "pydantic",
    "jinja2",
    "matplotlib",
    "weasyprint",
)

Progress = Callable[[str], None]


@dataclass
class Timings:
    """Wall time per stage, in seconds, in the order the stages ran."""

    stages: dict[str, float] = field(default_factory=dict)

    @contextmanager
    def stage(self, name: str, progress: Progress | None = None) -> Iterator[None]:
        if progress is not None:
            progress(name)
        t0 = time.perf_counter()
        try:
            yield
        finally:
            self.stages[name] = self.stages.get(name, 0.0) + time.perf_counter() - t0


def package_versions() -> dict[str, str]:
    out = {}
    for name in KEY_PACKAGES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def run_analysis(
    loaded: LoadedSpec,
    *,
    timings: Timings | None = None,
    progress: Progress | None = None,
    extra_inputs: list[InputFile] | None = None,
) -> StudyResults:
    """Compute everything the appendix shows; no files are written here."""
    from threadpoolctl import threadpool_limits

    from reportkit.balance import balance_checks
    from reportkit.balance.checks import balance_column
    from reportkit.balance.complier_inputs import compliers_part
    from reportkit.balance.falsification import falsification_result
    from reportkit.data.binary import binary_outcome, binary_treatment
    from reportkit.data.named_columns import check_named_columns
    from reportkit.data.prepare import prepare, read_source
    from reportkit.estimation import estimate
    from reportkit.specifications import run_specifications
    from reportkit.variants.runner import BinaryInputs, robustness_checks

    timings = timings if timings is not None else Timings()
    spec = loaded.spec.resolved()
    with threadpool_limits(limits=1):
        with timings.stage("reading and preparing data", progress):
            source = read_source(loaded)
            prepared = prepare(loaded, source)
            check_named_columns(loaded, prepared.frame_columns, source.file_name)
            treatment = binary_treatment(prepared, loaded)
            outcome_bin = binary_outcome(prepared, loaded)
        labels = with_indicator_labels(dict(spec.model.labels), prepared.design.control_names)
        with timings.stage("estimation and tests", progress):
            est = estimate(
                prepared.design,
                covariance=spec.covariance,
                estimators=list(spec.estimators),
                confidence_level=spec.inference.confidence_level,
                labels=labels,
                crosscheck=spec.run.crosscheck,
            )
        specifications: list[SpecificationResult] = []
        if spec.specifications:
            with timings.stage("further specifications", progress):
                specifications = run_specifications(loaded, source, labels=labels)
        covariates = (
            list(spec.balance.covariates)
            if spec.balance.covariates is not None
            else list(prepared.design.control_names)
        )
        with timings.stage("balance, placebo, falsification and complier checks", progress):
            balance = balance_checks(
                prepared.design,
                prepared.extras,
                covariates=covariates,
                pre_treatment=list(spec.balance.pre_treatment),
                placebo_outcomes=list(spec.balance.placebo_outcomes),
                cut_points=dict(spec.balance.cut_points),
                covariance=spec.covariance,
                labels=labels,
                level=spec.inference.confidence_level,
                model_controls=list(spec.model.controls),
            )
            falsification = [
                falsification_result(loaded, source, subsample, kind=spec.covariance, labels=labels)
                for subsample in spec.balance.falsification
            ]
            compliers = compliers_part(
                prepared.design,
                treatment,
                {
                    name: balance_column(prepared.design, prepared.extras, name)
                    for name in dict.fromkeys([*covariates, *spec.balance.pre_treatment])
                },
                spec,
                labels=labels,
            )
            balance = with_evidence(balance, falsification, compliers)
        with timings.stage("robustness variants and sensitivity", progress):
            robustness = robustness_checks(
                loaded,
                source,
                prepared,
                est,
                BinaryInputs(
                    outcome=outcome_bin,
                    treatment=None if treatment is None else treatment[0],
                    treatment_text="" if treatment is None else treatment[1],
                ),
                labels=labels,
            )
    design = prepared.design
    model = spec.model
    crosschecks: list[CrossCheck] | NotApplicable
    if isinstance(est.crosschecks, NotApplicable):
        crosschecks = est.crosschecks
    else:
        crosschecks = [_crosscheck(row) for row in est.crosschecks]
    description = ModelDescription(
        outcome=model.outcome,
        endogenous=list(model.endogenous),
        instruments=list(model.instruments),
        controls=list(design.control_names),
        fixed_effects=list(model.fixed_effects),
        cluster_by=list(model.cluster_by),
        weights=model.weights,
        labels=labels,
        n_instruments=len(model.instruments),
        n_endogenous=len(model.endogenous),
        overidentification_degree=len(model.instruments) - len(model.endogenous),
    )
    return StudyResults(
        study=StudyInfo(
            title=spec.study.title, authors=list(spec.study.authors), summary=spec.study.summary
        ),
        model=description,
        conventions=est.conventions,
        sample=prepared.sample,
        estimates=est.estimates,
        first_stages=est.first_stages,
        reduced_form=est.reduced_form,
        ols_2sls_ratio=est.ratio,
        diagnostics=est.diagnostics,
        strength=est.strength,
        weak_iv=est.weak_iv,
        balance=balance,
        robustness=robustness,
        specifications=specifications,
        disclosures=build_disclosures(
            spec.assumptions,
            model=description,
            strength=est.strength,
            weak_iv=est.weak_iv,
            diagnostics=est.diagnostics,
            balance=balance,
        ),
        provenance=Provenance(
            inputs=sorted(
                [*prepared.inputs, *(extra_inputs or [])], key=lambda f: (f.role, f.name)
            ),
            python=platform.python_version(),
            packages=package_versions(),
            seed=spec.run.seed,
            crosschecks=crosschecks,
        ),
    )


def with_evidence(
    balance: Balance | NotApplicable,
    falsification: list[FalsificationResult],
    compliers: ComplierAnalysis | NotApplicable | None,
) -> Balance | NotApplicable:
    """The balance part with the falsification and complier results attached.

    Without balance covariates or placebo outcomes the balance part is otherwise empty;
    it is still made when there are falsification or complier results to show.
    """
    if not falsification and compliers is None:
        return balance
    if isinstance(balance, NotApplicable):
        return Balance(
            rows=[],
            joint=[],
            outcome_index=NotApplicable(reason=balance.reason),
            placebo=[],
            covariance="",
            conditioning="",
            falsification=falsification,
            compliers=compliers,
        )
    return balance.model_copy(update={"falsification": falsification, "compliers": compliers})


def with_indicator_labels(labels: dict[str, str], names: tuple[str, ...]) -> dict[str, str]:
    """Add readable labels for categorical indicators: 'income_band=low' -> 'Income band: low'."""
    out = dict(labels)
    for name in names:
        column, sep, level = name.partition("=")
        if sep and name not in out and column in labels:
            out[name] = f"{labels[column]}: {level}"
    return out


def _crosscheck(row: CrossCheckRow) -> CrossCheck:
    return CrossCheck(
        estimator=row.estimator,
        max_rel_diff_estimate=row.max_rel_diff_estimate,
        max_rel_diff_std_error=row.max_rel_diff_std_error,
        agrees=row.agrees,
        method=row.method,
    )
