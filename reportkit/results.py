"""The typed, immutable results of a run and their JSON form.

``StudyResults`` is the only contract between computing and rendering: results.json is
written from it, the templates, the table exports and (later) the verify command read
it. A statistic that does not apply is stored as ``NotApplicable`` with its reason,
never as a silent blank. Floats that are not finite never reach JSON.
"""

from __future__ import annotations

import json
import math
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator

SCHEMA_VERSION = "1.5.0"


class _Frozen(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class NotApplicable(_Frozen):
    """A statistic that was not computed, and why (e.g. 'just-identified')."""

    kind: Literal["not_applicable"] = "not_applicable"
    reason: str


class TestResult(_Frozen):
    """A hypothesis test: statistic, its reference distribution and p-value."""

    kind: Literal["test"] = "test"
    name: str
    statistic: float
    distribution: Literal["chi2", "F", "normal", "conditional", "bootstrap"]
    df: list[float] = Field(description="Degrees of freedom (one for chi2, two for F).")
    p_value: float
    covariance: str = Field(description="Covariance the statistic was computed with.")
    null: str = Field(description="The null hypothesis in words.")
    reference: str = Field(description="Author, year of the method.")

    @field_validator("statistic", "p_value")
    @classmethod
    def _finite(cls, v: float) -> float:
        if not math.isfinite(v):
            raise ValueError("test statistics stored in results must be finite")
        return v


TestOrNA = TestResult | NotApplicable


class Coefficient(_Frozen):
    """One estimated coefficient with its uncertainty."""

    name: str
    label: str
    estimate: float
    std_error: float
    statistic: float = Field(description="estimate / std_error")
    p_value: float
    ci_lower: float
    ci_upper: float


class EstimatorResult(_Frozen):
    """One estimator's coefficients on the endogenous regressors.

    Controls and fixed effects are partialled out before estimation (Frisch-Waugh-
    Lovell), so their coefficients are not reported.
    """

    estimator: Literal["ols", "2sls", "liml", "gmm"]
    label: str
    coefficients: list[Coefficient]
    kappa: float | None = Field(
        default=None, description="k-class parameter: 0 for OLS, 1 for 2SLS, LIML's estimate."
    )
    n_obs: int
    df_model: int = Field(description="Columns used by the model, absorbed effects included.")
    covariance: str
    sigma: float = Field(description="Residual standard deviation (degrees-of-freedom corrected).")
    hansen_j: TestOrNA | None = Field(
        default=None, description="GMM only: Hansen's J from the two-step weight."
    )


class FirstStageCoefficient(_Frozen):
    instrument: str
    label: str
    estimate: float
    std_error: float
    p_value: float
    sign: Literal["positive", "negative", "zero"]


class BinnedScatter(_Frozen):
    """Binned means of an endogenous regressor against one instrument.

    Both are residualised on the controls, fixed effects and the other instruments
    (Frisch-Waugh-Lovell) and shifted back to their sample means, so the axes are in the
    variables' units and the fitted line's slope is the first-stage coefficient.
    Bins are quantiles of the instrument residual (fewer when it takes few values).
    """

    instrument: str
    x: list[float]
    y: list[float]
    count: list[int]
    slope: float
    intercept: float


class FirstStage(_Frozen):
    """Regression of one endogenous regressor on the instruments and controls."""

    endogenous: str
    label: str
    coefficients: list[FirstStageCoefficient]
    partial_r2: float = Field(description="R-squared of the instruments after partialling out.")
    f_main: TestResult = Field(
        description="Joint test of the excluded instruments with the main covariance."
    )
    f_classical: TestResult = Field(description="The same test assuming iid errors.")
    binned: list[BinnedScatter] = Field(default_factory=list)


class ReducedForm(_Frozen):
    """Regression of the outcome on the instruments and controls."""

    coefficients: list[FirstStageCoefficient]
    joint_test: TestResult


class SampleStep(_Frozen):
    step: str
    rows_removed: int
    rows_remaining: int


class MissingCount(_Frozen):
    column: str
    rows_removed: int = Field(description="Rows removed because this column was missing.")


class CodingNote(_Frozen):
    column: str
    coding: str


class SampleAccount(_Frozen):
    """How the estimation sample was built from the file."""

    rows_read: int
    steps: list[SampleStep]
    missing_by_column: list[MissingCount]
    singletons_removed: int
    rows_used: int
    clusters_used: list[int] = Field(default_factory=list)
    fixed_effect_levels: list[int] = Field(default_factory=list)
    codings: list[CodingNote] = Field(default_factory=list)
    dropped_columns: list[CodingNote] = Field(
        default_factory=list, description="Control columns dropped as constant or collinear."
    )


class InputFile(_Frozen):
    role: str
    name: str
    sha256: str
    size_bytes: int


class CrossCheck(_Frozen):
    """Agreement of the main estimates with an independent re-fit in linearmodels."""

    estimator: str
    max_rel_diff_estimate: float
    max_rel_diff_std_error: float
    agrees: bool
    method: str = Field(default="full design", description="What linearmodels was given.")


class Provenance(_Frozen):
    inputs: list[InputFile]
    python: str
    packages: dict[str, str]
    seed: int
    crosschecks: list[CrossCheck] | NotApplicable


class Conventions(_Frozen):
    """Degrees-of-freedom and small-sample conventions, stated once."""

    covariance: str
    covariance_description: str
    small_sample: str
    reference_distribution: str
    confidence_level: float


class InstrumentValidity(_Frozen):
    """Difference-in-J (C) test of one instrument's validity, given the others."""

    instrument: str
    label: str
    test: TestOrNA


class Diagnostics(_Frozen):
    sargan: TestOrNA
    basmann: TestOrNA
    hansen_j: TestOrNA
    instrument_validity: list[InstrumentValidity] | NotApplicable = Field(
        description="One C statistic per instrument (Eichenbaum, Hansen & Singleton 1988)."
    )
    endogeneity: TestOrNA


# --- instrument strength -------------------------------------------------------------


class Statistic(_Frozen):
    """A statistic read against critical values rather than a p-value (e.g. Cragg-Donald)."""

    kind: Literal["statistic"] = "statistic"
    name: str
    value: float
    covariance: str
    reference: str
    note: str = ""


StatOrNA = Statistic | NotApplicable


class CriticalValue(_Frozen):
    """One published or computed critical value and whether the statistic exceeds it."""

    criterion: str = Field(description="In words, e.g. '2SLS size distortion at most 10%'.")
    estimator: Literal["2sls", "liml", "any"]
    kind: Literal["relative_bias", "size", "nagar_bias"]
    threshold: float = Field(description="e.g. 0.10 for 10%")
    value: float
    exceeded: bool


class CriticalValueTable(_Frozen):
    """Critical values for a strength statistic, with their source and assumptions."""

    kind: Literal["critical_values"] = "critical_values"
    statistic_name: str
    statistic: float
    rows: list[CriticalValue]
    source: str
    note: str


class EffectiveF(_Frozen):
    """Montiel Olea & Pflueger (2013) effective F with critical values computed for the data."""

    kind: Literal["effective_f"] = "effective_f"
    value: float
    k_eff: float = Field(description="Effective degrees of freedom of the simplified procedure.")
    critical_values: list[CriticalValue]
    covariance: str
    reference: str = "Montiel Olea & Pflueger 2013"


class EndogenousStrength(_Frozen):
    endogenous: str
    label: str
    partial_r2: float
    shea_partial_r2: float
    sanderson_windmeijer: TestOrNA = Field(
        description="Conditional F (Sanderson & Windmeijer 2016); n/a with one endogenous "
        "regressor."
    )
    effective_f: EffectiveF | NotApplicable


class StrengthVerdict(_Frozen):
    level: Literal["strong", "moderate", "weak"]
    summary: str = Field(description="One sentence naming the statistic and criterion used.")


class Strength(_Frozen):
    per_endogenous: list[EndogenousStrength]
    cragg_donald: Statistic
    kleibergen_paap_f: StatOrNA
    kleibergen_paap_lm: TestOrNA
    stock_yogo: CriticalValueTable | NotApplicable
    verdict: StrengthVerdict


# --- weak-instrument-robust inference ------------------------------------------------


class Interval(_Frozen):
    """A closed interval; None means unbounded on that side."""

    lower: float | None
    upper: float | None


class ConfidenceSet(_Frozen):
    """A confidence set for one coefficient: a union of disjoint intervals, sorted.

    shape: 'interval' (one bounded interval), 'two_rays' (everything outside a bounded
    gap), 'ray' (half-line), 'whole_line', 'empty', or 'union' (anything else).
    """

    kind: Literal["confidence_set"] = "confidence_set"
    shape: Literal["interval", "two_rays", "ray", "whole_line", "empty", "union"]
    pieces: list[Interval]
    level: float
    method: str
    covariance: str
    reference: str


SetOrNA = ConfidenceSet | NotApplicable


class TFResult(_Frozen):
    """Lee, McCrary, Moreira & Porter (2022) tF: 2SLS t-ratio with an F-adjusted critical value."""

    kind: Literal["tf"] = "tf"
    first_stage_f: float
    critical_value: float
    t_statistic: float
    p_value_adjusted: float | None = Field(
        default=None, description="Smallest level at which the tF test rejects beta = 0."
    )
    interval: Interval | None = Field(
        description="The tF confidence interval; None when F is below the smallest tabulated F."
    )
    note: str = ""
    reference: str = "Lee, McCrary, Moreira & Porter 2022"


class PValueCurve(_Frozen):
    """Weak-IV-robust p-values over a range of hypothesised coefficient values (figure data)."""

    beta0: list[float]
    anderson_rubin: list[float]
    clr: list[float] | None


class WeakIVRobust(_Frozen):
    """Inference on the coefficient of the single endogenous regressor that stays valid
    however weak the instruments are."""

    endogenous: str
    label: str
    ar_test_zero: TestOrNA
    anderson_rubin: SetOrNA
    clr_test_zero: TestOrNA
    clr: SetOrNA
    tf: TFResult | NotApplicable
    curve: PValueCurve | None


class ModelDescription(_Frozen):
    outcome: str
    endogenous: list[str]
    instruments: list[str]
    controls: list[str]
    fixed_effects: list[str]
    cluster_by: list[str]
    weights: str | None
    labels: dict[str, str]
    n_instruments: int
    n_endogenous: int
    overidentification_degree: int


# --- is the instrument as good as random? -------------------------------------------


class GroupMean(_Frozen):
    """Mean of a covariate within one group of instrument values."""

    group: str = Field(description="The group in words, e.g. 'value 1' or '2.0 < x <= 4.5'.")
    mean: float | None = Field(description="None when the group has no rows with the covariate.")
    n: int


class InstrumentCoefficient(_Frozen):
    """One instrument's coefficient in a balance or placebo regression."""

    instrument: str
    label: str
    estimate: float
    std_error: float
    p_value: float


class BalanceCell(_Frozen):
    """A covariate against one instrument."""

    instrument: str
    groups: list[GroupMean]
    difference: float | None = Field(description="Mean of the last group minus the first.")
    std_difference: float | None = Field(
        description="Difference divided by the pooled standard deviation of the two groups."
    )
    unconditional: InstrumentCoefficient | NotApplicable
    conditional: InstrumentCoefficient | NotApplicable = Field(
        description="Conditional on the fixed effects (n/a without fixed effects)."
    )


class BalanceRow(_Frozen):
    covariate: str
    label: str
    kind: Literal["control", "pre_treatment"]
    n_used: int
    cells: list[BalanceCell]


class JointBalance(_Frozen):
    """An instrument regressed on all balance covariates: are they jointly unrelated to it?"""

    instrument: str
    label: str
    test: TestOrNA


class OutcomeIndex(_Frozen):
    """The outcome predicted from the covariates alone, regressed on the instruments."""

    coefficients: list[InstrumentCoefficient]
    joint_test: TestOrNA
    r2_prediction: float = Field(description="R-squared of the outcome on the covariates.")


class PlaceboResult(_Frozen):
    """A pre-treatment outcome the instruments should not move."""

    outcome: str
    label: str
    n_used: int
    reduced_form: list[InstrumentCoefficient]
    joint_test: TestOrNA
    tsls: list[Coefficient] | NotApplicable


class FalsificationFirstStage(_Frozen):
    """First stage of one endogenous regressor in a falsification subsample."""

    endogenous: str
    label: str
    coefficients: list[InstrumentCoefficient]
    joint_test: TestOrNA


class FalsificationResult(_Frozen):
    """Rows where the instruments should not move the treatment: first stage and reduced
    form there. A reduced form far from zero where the first stage is zero is evidence
    against the exclusion restriction."""

    name: str
    description: str
    rows: list[str] = Field(description="The subsample's filters in words.")
    n_used: int
    first_stages: list[FalsificationFirstStage] | NotApplicable
    reduced_form: list[InstrumentCoefficient] | NotApplicable
    reduced_form_test: TestOrNA
    covariance: str


class ComplierShares(_Frozen):
    """Shares of compliers, always-takers and never-takers (binary instrument and treatment,
    monotonicity assumed; Imbens & Angrist 1994)."""

    compliers: float
    compliers_se: float | None = Field(description="Bootstrap standard error.")
    always_takers: float = Field(description="Share treated with the instrument off.")
    never_takers: float = Field(description="Share untreated with the instrument on.")
    treated_share_on: float
    treated_share_off: float
    n_on: int
    n_off: int


class ComplierMean(_Frozen):
    """Mean of a covariate among compliers (Abadie 2003 kappa weights) and other types."""

    covariate: str
    label: str
    full_sample: float | None
    compliers: float | None
    compliers_se: float | None = Field(description="Bootstrap standard error.")
    always_takers: float | None
    never_takers: float | None


class DensityBin(_Frozen):
    """One outcome bin: the implied complier probability mass, treated and untreated.

    treated = P(Y in bin, D=1 | Z=1) - P(Y in bin, D=1 | Z=0); untreated =
    P(Y in bin, D=0 | Z=0) - P(Y in bin, D=0 | Z=1). Under the LATE assumptions both are
    the compliers' share times their outcome probability in the bin, so never negative.
    """

    lower: float
    upper: float
    treated: float
    treated_low: float
    treated_high: float
    untreated: float
    untreated_low: float
    untreated_high: float


class LateImplication(_Frozen):
    """The testable implication of the LATE assumptions for a binary treatment."""

    outcome: str
    label: str
    bins: list[DensityBin]
    band_level: float = Field(description="Coverage of each bin's bootstrap band.")
    negative_bins: int = Field(description="Bins whose band lies wholly below zero.")
    test: TestOrNA = Field(description="Kitagawa (2015) variance-weighted test.")
    draws: int
    seed: int


class ComplierAnalysis(_Frozen):
    """Who are the compliers? Binary instrument, binary treatment."""

    instrument: str
    instrument_label: str
    treatment: str = Field(description="The binary treatment's definition, e.g. 'hours > 0'.")
    treatment_label: str
    n_used: int
    shares: ComplierShares
    means: list[ComplierMean]
    late_implication: LateImplication | NotApplicable
    conditioning: str = Field(description="What the computation conditions on, in words.")
    draws: int
    seed: int


class Balance(_Frozen):
    rows: list[BalanceRow]
    joint: list[JointBalance]
    outcome_index: OutcomeIndex | NotApplicable
    placebo: list[PlaceboResult]
    covariance: str
    conditioning: str = Field(description="What the conditional regressions hold fixed.")
    falsification: list[FalsificationResult] = Field(default_factory=list)
    compliers: ComplierAnalysis | NotApplicable | None = Field(
        default=None, description="None when the spec defines no binary treatment."
    )


# --- robustness variants and sensitivity ---------------------------------------------


class VariantValue(_Frozen):
    """One variant's estimate of one quantity."""

    quantity: str = Field(description="The endogenous regressor, or e.g. 'average partial effect'.")
    estimate: float
    std_error: float | None
    ci_lower: float | None
    ci_upper: float | None
    p_value: float | None


VariantGroup = Literal["estimator", "instruments", "inference", "sample", "controls", "binary"]


class Variant(_Frozen):
    """A variant of the main estimate: another estimator, instrument set, inference,
    sample or control set, or a model for a binary outcome."""

    key: str = Field(description="Stable identifier, e.g. 'estimator:liml'.")
    group: VariantGroup
    name: str
    description: str
    estimand: str = Field(description="What the number estimates, in words.")
    n_obs: int | None
    covariance: str
    values: list[VariantValue] | NotApplicable
    details: dict[str, float] = Field(
        default_factory=dict,
        description="Model-specific numbers, e.g. the control-function residual's coefficient "
        "(a test of exogeneity in that model), the bivariate probit's error correlation, or the "
        "average structural function at treatment on and off.",
    )

    @field_validator("details")
    @classmethod
    def _finite_details(cls, v: dict[str, float]) -> dict[str, float]:
        return {k: x for k, x in v.items() if math.isfinite(x)}


class ClusterDrop(_Frozen):
    """The estimate with one cluster left out."""

    cluster: str
    n_rows: int
    estimate: float
    shift: float = Field(description="Estimate without the cluster minus the full-sample one.")
    std_error: float
    significant: bool = Field(description="Whether the interval without it excludes zero.")


class ClusterInfluence(_Frozen):
    """Leave-one-cluster-out influence (how much hinges on single clusters; Young 2022)."""

    endogenous: str
    label: str
    cluster_variable: str
    n_clusters: int
    drops: list[ClusterDrop] = Field(description="Every cluster, largest |shift| first.")
    lowest: float
    highest: float
    significance_changes: int = Field(
        description="Clusters whose removal changes whether the interval excludes zero."
    )


class WildBootstrapResult(_Frozen):
    """Restricted wild (cluster) bootstrap p-value of the 2SLS t test of beta = 0."""

    endogenous: str
    label: str
    t_statistic: float
    p_value: float
    draws: int
    weights: str
    level: Literal["cluster", "observation"]
    clusters: int | None
    seed: int
    reference: str = "Davidson & MacKinnon 2010"


class DirectEffectSensitivity(_Frozen):
    """The allowed direct effect of one instrument and the breakdown value."""

    instrument: str
    label: str
    lower: float
    upper: float
    prior_mean: float
    prior_sd: float
    breakdown: float | None = Field(
        description="Smallest direct effect (in absolute value, this instrument alone) at "
        "which the interval first covers zero; None if not within 100 times the range."
    )


class SensitivityPoint(_Frozen):
    instrument: str
    gamma: float
    estimate: float
    ci_lower: float
    ci_upper: float


class ExclusionSensitivity(_Frozen):
    """Conley, Hansen & Rossi (2012): inference when the exclusion restriction holds only
    approximately."""

    endogenous: str
    label: str
    ranges: list[DirectEffectSensitivity]
    union_interval: Interval
    local_to_zero: Interval
    local_to_zero_estimate: float
    curve: list[SensitivityPoint]
    covariance: str
    level: float
    reference: str = "Conley, Hansen & Rossi 2012"


class Robustness(_Frozen):
    main: list[VariantValue] = Field(description="The main 2SLS estimate, for comparison.")
    variants: list[Variant]
    cluster_influence: list[ClusterInfluence] | NotApplicable
    wild_bootstrap: list[WildBootstrapResult] | NotApplicable
    sensitivity: list[ExclusionSensitivity] | NotApplicable


# --- further specifications (the columns of a paper's main table) --------------------


class SpecificationSetting(_Frozen):
    """One choice of a specification in words, beside the main specification's."""

    part: Literal["endogenous", "instruments", "controls", "fixed_effects", "clusters",
                  "weights", "covariance", "sample"]  # fmt: skip
    title: str = Field(description="The choice's name as a row title, e.g. 'Instruments'.")
    value: str = Field(description="This specification's choice, in words.")
    main: str = Field(description="The main specification's choice, in words.")
    changed: bool


class SpecificationStrength(_Frozen):
    """First-stage strength of one endogenous regressor in one specification."""

    endogenous: str
    label: str
    first_stage_f: TestResult = Field(description="F on the excluded instruments, main covariance.")
    effective_f: EffectiveF | NotApplicable


class SpecificationResult(_Frozen):
    """One further specification of the spec (one column of the cross-specification table).

    When its sample cannot support the model, every computed part is ``NotApplicable``
    with the data stage's explanation and ``n_obs`` is None.
    """

    name: str
    description: str
    changes: list[str] = Field(description="What differs from the main specification, in words.")
    settings: list[SpecificationSetting]
    model: ModelDescription
    covariance_type: Literal["classical", "robust", "cluster"]
    covariance: str = Field(description="The covariance in words ('' when not computed).")
    n_obs: int | None
    estimates: list[EstimatorResult] | NotApplicable
    strength: list[SpecificationStrength] | NotApplicable
    verdict: StrengthVerdict | NotApplicable
    anderson_rubin: SetOrNA
    sargan: TestOrNA
    hansen_j: TestOrNA
    endogeneity: TestOrNA


# --- disclosures of untestable assumptions -------------------------------------------


class EvidenceLink(_Frozen):
    """A section of this appendix that bears on an assumption, and how."""

    section_id: str
    text: str


class AssumptionDisclosure(_Frozen):
    key: str = Field(
        description="relevance, independence, exclusion_restriction, monotonicity, or additional-N"
    )
    name: str
    statement: str = Field(description="What the assumption says, in plain words.")
    testable: Literal["no", "partly", "yes"]
    testable_why: str
    evidence: list[EvidenceLink]
    argument: str | None = Field(description="The authors' argument verbatim; None if missing.")
    references: list[str]


class Disclosures(_Frozen):
    items: list[AssumptionDisclosure]
    stated: int = Field(description="Assumptions with an argument from the authors.")
    total: int
    cautions: list[str]


class StudyInfo(_Frozen):
    title: str
    authors: list[str]
    summary: str


class StudyResults(_Frozen):
    """Everything a run computed, in one immutable object."""

    schema_version: str = SCHEMA_VERSION
    study: StudyInfo
    model: ModelDescription
    conventions: Conventions
    sample: SampleAccount
    estimates: list[EstimatorResult]
    first_stages: list[FirstStage]
    reduced_form: ReducedForm
    ols_2sls_ratio: list[float | None] = Field(
        description="2SLS / OLS per endogenous regressor (None when OLS is zero or absent)."
    )
    diagnostics: Diagnostics
    strength: Strength
    weak_iv: WeakIVRobust | NotApplicable
    balance: Balance | NotApplicable
    robustness: Robustness | NotApplicable
    specifications: list[SpecificationResult] = Field(
        default_factory=list,
        description="Further specifications of the spec, in spec order (empty when none).",
    )
    disclosures: Disclosures
    provenance: Provenance

    def to_json(self) -> str:
        """Canonical JSON: sorted keys, fixed float repr, trailing newline."""
        return json.dumps(self.model_dump(mode="json"), indent=2, sort_keys=True) + "\n"

    @classmethod
    def from_json(cls, text: str) -> StudyResults:
        return cls.model_validate(json.loads(text))


def json_schema() -> dict[str, Any]:
    """The published JSON Schema of results.json."""
    schema = StudyResults.model_json_schema()
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    schema["title"] = f"reportkit results, schema version {SCHEMA_VERSION}"
    return schema
