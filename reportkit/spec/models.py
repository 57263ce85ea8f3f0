"""The analysis specification: pydantic models, strict about unknown keys.

A spec is the single input that drives a run. Every field has a documented default;
after validation the fully resolved spec (all defaults filled in) is written into the
bundle so that a data editor sees exactly what was run. Cross-field rules that need the
data (does a column exist, is it numeric) live in ``reportkit.data``; rules that need
only the spec (a variable in two roles, too few instruments) live here.
"""

from __future__ import annotations

import itertools
import re
from typing import Annotated, Any, Literal, get_args

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    SerializerFunctionWrapHandler,
    ValidationError,
    ValidationInfo,
    field_validator,
    model_serializer,
    model_validator,
)

Estimator = Literal["ols", "2sls", "liml", "gmm"]
Covariance = Literal["classical", "robust", "cluster"]
Comparison = Literal[
    "equal_to",
    "not_equal_to",
    "less_than",
    "at_most",
    "greater_than",
    "at_least",
    "one_of",
    "not_one_of",
    "is_missing",
    "is_present",
]
ESTIMATORS: tuple[str, ...] = get_args(Estimator)
COVARIANCES: tuple[str, ...] = get_args(Covariance)
COMPARISONS: tuple[str, ...] = get_args(Comparison)
Scalar = str | int | float | bool
ColumnName = Annotated[str, Field(min_length=1)]


class _Strict(BaseModel):
    """Base: unknown keys are errors, objects are immutable once validated."""

    model_config = ConfigDict(extra="forbid", frozen=True, str_strip_whitespace=True)


class StudySection(_Strict):
    """Who wrote the analysis and what it is about; shown in the title block."""

    title: str = Field(min_length=1, description="Title of the study, shown on every page.")
    authors: list[str] = Field(default_factory=list, description="Author names, in order.")
    summary: str = Field(default="", description="A short paragraph describing the study.")


class RowFilter(_Strict):
    """Keep only the rows where ``column`` satisfies ``keep_if`` against ``value``.

    Filters are structured conditions, never code: nothing from a spec is evaluated.
    """

    column: ColumnName
    keep_if: Comparison = Field(description="How the column is compared with value.")
    value: Scalar | list[Scalar] | None = Field(
        default=None,
        description="The value compared against; a list for one_of / not_one_of; "
        "omitted for is_missing / is_present.",
    )

    @model_validator(mode="after")
    def _value_matches_comparison(self) -> RowFilter:
        needs_list = self.keep_if in ("one_of", "not_one_of")
        needs_none = self.keep_if in ("is_missing", "is_present")
        if needs_none and self.value is not None:
            raise ValueError(f"'{self.keep_if}' takes no value; remove 'value'")
        if needs_list and not isinstance(self.value, list):
            raise ValueError(f"'{self.keep_if}' needs a list of values, e.g. value: [1, 2]")
        if not needs_list and not needs_none:
            if self.value is None:
                raise ValueError(f"'{self.keep_if}' needs a value")
            if isinstance(self.value, list):
                raise ValueError(f"'{self.keep_if}' takes a single value, not a list")
        if self.keep_if in ("less_than", "at_most", "greater_than", "at_least") and (
            isinstance(self.value, bool) or not isinstance(self.value, int | float)
        ):
            raise ValueError(f"'{self.keep_if}' compares numbers; value must be a number")
        return self


class DataSection(_Strict):
    """Where the data are, how to check them and which rows to keep."""

    path: str = Field(
        min_length=1,
        description="Data file, relative to the spec file. Read by extension: "
        ".csv, .tsv, .parquet, .dta, .sav.",
    )
    sha256: str | None = Field(
        default=None,
        pattern=r"^[0-9a-fA-F]{64}$",
        description="Expected SHA-256 of the data file; a mismatch stops the run.",
    )
    missing_codes: list[Scalar] = Field(
        default_factory=list,
        description="Values that mean 'missing' in any column (e.g. -99, '.', 'NA').",
    )
    filters: list[RowFilter] = Field(
        default_factory=list, description="Row filters, applied in order."
    )


class BinaryTreatment(_Strict):
    """A binary version of the (single) endogenous regressor.

    Either a 0/1 or true/false column (``column`` alone), or a threshold on a numeric
    column: treated when ``column`` is greater than ``treated_above``. Used by the complier
    analysis and by the bivariate probit, which need a treatment that is on or off.
    """

    column: ColumnName = Field(description="A 0/1 or true/false column, or a numeric one.")
    treated_above: float | None = Field(
        default=None,
        description="Treated when the column is greater than this value (e.g. 0 for 'any "
        "hours'); omit when the column is already 0/1 or true/false.",
    )

    def describe(self) -> str:
        if self.treated_above is None:
            return self.column
        return f"{self.column} > {self.treated_above:g}"


class ModelSection(_Strict):
    """The structural equation and the instrument set.

    outcome = endogenous * beta + controls * gamma + fixed effects + error, with the
    endogenous regressors instrumented by ``instruments``; controls are always part
    of the instrument set.
    """

    outcome: ColumnName
    endogenous: list[ColumnName] = Field(min_length=1, description="Endogenous regressors.")
    instruments: list[ColumnName] = Field(min_length=1, description="Excluded instruments.")
    controls: list[ColumnName] = Field(
        default_factory=list, description="Numeric or boolean exogenous controls."
    )
    categorical_controls: list[ColumnName] = Field(
        default_factory=list,
        description="Exogenous controls coded as one indicator per level "
        "(the first level in sorted order is the reference).",
    )
    fixed_effects: list[ColumnName] = Field(
        default_factory=list,
        description="Categorical variables whose effects are absorbed (partialled out).",
    )
    cluster_by: list[ColumnName] = Field(
        default_factory=list,
        max_length=2,
        description="One or two variables defining clusters for the covariance.",
    )
    weights: ColumnName | None = Field(
        default=None, description="Column of non-negative analytic weights, used in every stage."
    )
    labels: dict[str, str] = Field(
        default_factory=dict, description="Readable labels for column names in the appendix."
    )
    binary_treatment: BinaryTreatment | None = Field(
        default=None,
        description="A binary version of the endogenous regressor, for the complier analysis "
        "and the bivariate probit (one endogenous regressor only).",
    )

    @model_validator(mode="after")
    def _roles_are_distinct(self) -> ModelSection:
        roles: dict[str, list[str]] = {}
        single = {"outcome": [self.outcome]}
        if self.weights:
            single["weights"] = [self.weights]
        groups = {
            **single,
            "endogenous": self.endogenous,
            "instruments": self.instruments,
            "controls": self.controls,
            "categorical_controls": self.categorical_controls,
            "fixed_effects": self.fixed_effects,
        }
        for role, names in groups.items():
            seen: set[str] = set()
            for name in names:
                if name in seen:
                    raise ValueError(f"'{name}' is listed twice in model.{role}")
                seen.add(name)
                roles.setdefault(name, []).append(role)
        for name, where in roles.items():
            if len(where) > 1:
                raise ValueError(
                    f"'{name}' appears in two roles ({' and '.join('model.' + w for w in where)}); "
                    "a variable can play only one role"
                )
        if len(self.instruments) < len(self.endogenous):
            raise ValueError(
                f"{len(self.instruments)} instrument(s) for {len(self.endogenous)} endogenous "
                "regressor(s): the model is under-identified; list at least as many "
                "instruments as endogenous regressors"
            )
        if len(set(self.cluster_by)) != len(self.cluster_by):
            raise ValueError("model.cluster_by lists the same variable twice")
        if self.binary_treatment is not None and len(self.endogenous) != 1:
            raise ValueError(
                "model.binary_treatment needs exactly one endogenous regressor; remove it or "
                "list one variable in model.endogenous"
            )
        return self


class ModelOverrides(_Strict):
    """The parts of the main model one specification replaces; an omitted key keeps the
    main model's value. The outcome, labels and binary treatment cannot change: every
    specification explains the same outcome."""

    endogenous: list[ColumnName] | None = Field(default=None, min_length=1)
    instruments: list[ColumnName] | None = Field(default=None, min_length=1)
    controls: list[ColumnName] | None = None
    categorical_controls: list[ColumnName] | None = None
    fixed_effects: list[ColumnName] | None = None
    cluster_by: list[ColumnName] | None = Field(default=None, max_length=2)
    weights: ColumnName | Literal[False] | None = Field(
        default=None, description="A weights column, or false for no weights."
    )

    @model_serializer(mode="wrap")
    def _only_given(self, handler: SerializerFunctionWrapHandler) -> dict[str, Any]:
        # an omitted key means "as in the main model": leave it out of the resolved spec
        return {key: value for key, value in handler(self).items() if value is not None}

    def replacements(self) -> dict[str, Any]:
        """The model fields this specification replaces, with their new values."""
        out: dict[str, Any] = {}
        for name in type(self).model_fields:
            value = getattr(self, name)
            if value is not None:
                out[name] = None if value is False else value
        return out


MAIN_SPECIFICATION = "Main"


class Specification(_Strict):
    """One more column of the paper's main table: the main spec with some parts replaced.

    It shares the data, estimators, labels and confidence level with the main spec.
    """

    name: str = Field(min_length=1, description="Column header; unique, and not 'Main'.")
    description: str = Field(default="", description="What this column is, in a sentence.")
    model: ModelOverrides = Field(
        default_factory=ModelOverrides,
        description="Model parts to replace: " + ", ".join(ModelOverrides.model_fields),
    )
    filters: list[RowFilter] | None = Field(
        default=None, description="Row filters replacing data.filters for this column."
    )
    covariance: Covariance | None = Field(
        default=None,
        description="classical, robust or cluster. Default: inference.covariance, or the "
        "default rule applied to this column's model.",
    )

    @field_validator("name")
    @classmethod
    def _not_main(cls, v: str) -> str:
        if v.casefold() == MAIN_SPECIFICATION.casefold():
            raise ValueError(
                f"'{MAIN_SPECIFICATION}' is the name of the main specification's column; "
                "give this specification another name"
            )
        return v

    @model_validator(mode="after")
    def _changes_something(self) -> Specification:
        if not self.model.replacements() and self.filters is None and self.covariance is None:
            raise ValueError(
                f"specification '{self.name}' changes nothing; give model, filters or covariance"
            )
        return self

    def merged_model(self, main: ModelSection) -> ModelSection:
        """The main model with this specification's parts replaced, validated as a model.

        The binary treatment is dropped: specifications run no complier analysis.
        """
        data = {**main.model_dump(), **self.model.replacements(), "binary_treatment": None}
        return ModelSection.model_validate(data)

    def resolved_covariance(
        self, main_choice: Covariance | None, merged: ModelSection
    ) -> Covariance:
        """Its own covariance, else the main spec's choice, else the default rule on its model."""
        choice = self.covariance or main_choice
        if choice is not None:
            return choice
        return "cluster" if merged.cluster_by else "robust"


class Subsample(_Strict):
    """A named set of rows, chosen by structured filters (never code)."""

    name: str = Field(min_length=1, description="A short name, shown in tables.")
    description: str = Field(default="", description="Why these rows, in a sentence.")
    filters: list[RowFilter] = Field(min_length=1, description="Row filters, applied in order.")


class CompliersSection(_Strict):
    """Settings of the complier analysis (binary instrument and binary treatment)."""

    instrument: ColumnName | None = Field(
        default=None,
        description="The binary instrument to use; default: the only 0/1 instrument.",
    )
    outcome_bins: int = Field(
        default=12, ge=2, le=100, description="Bins of the outcome for the implied densities."
    )
    draws: int = Field(
        default=499, ge=99, le=9999, description="Bootstrap draws for bands and the test."
    )


class BalanceSection(_Strict):
    """Evidence on whether the instruments look as good as randomly assigned."""

    covariates: list[ColumnName] | None = Field(
        default=None,
        description="Covariates whose balance across instrument values is shown. Default "
        "(null): every control of the model, categorical-control indicators included.",
    )
    pre_treatment: list[ColumnName] = Field(
        default_factory=list,
        description="Pre-treatment variables checked for balance only (not used as controls).",
    )
    placebo_outcomes: list[ColumnName] = Field(
        default_factory=list,
        description="Pre-treatment outcomes the instruments should not move: reduced form "
        "and 2SLS read as 'should be zero'.",
    )
    cut_points: dict[str, list[float]] = Field(
        default_factory=dict,
        description="Group boundaries per continuous instrument for the table of means "
        "(default: quartiles). A binary instrument is grouped by its two values.",
    )
    falsification: list[Subsample] = Field(
        default_factory=list,
        description="Rows of the file where the instruments should not move the treatment; "
        "their filters replace data.filters. First stage and reduced form are shown there.",
    )
    compliers: CompliersSection = Field(
        default_factory=CompliersSection,
        description="Complier analysis settings; it runs when model.binary_treatment is given.",
    )

    @field_validator("cut_points")
    @classmethod
    def _sorted_cut_points(cls, v: dict[str, list[float]]) -> dict[str, list[float]]:
        for name, points in v.items():
            if not points:
                raise ValueError(f"balance.cut_points.{name} is empty; give at least one value")
            if any(b <= a for a, b in itertools.pairwise(points)):
                raise ValueError(f"balance.cut_points.{name} must be strictly increasing")
        return v


VariantEstimator = Literal["liml", "fuller_1", "fuller_4", "gmm", "jive"]
VARIANT_ESTIMATORS: tuple[str, ...] = get_args(VariantEstimator)
BinaryModel = Literal["control_function_probit", "2sri_probit", "2sri_logit", "bivariate_probit"]
BINARY_MODELS: tuple[str, ...] = get_args(BinaryModel)


class ControlVariant(_Strict):
    """The main model with some controls added or removed."""

    name: str = Field(min_length=1)
    add: list[ColumnName] = Field(default_factory=list, description="Numeric controls to add.")
    remove: list[ColumnName] = Field(
        default_factory=list, description="Controls (or categorical controls) to remove."
    )

    @model_validator(mode="after")
    def _changes_something(self) -> ControlVariant:
        if not self.add and not self.remove:
            raise ValueError(f"control variant '{self.name}' neither adds nor removes a control")
        return self


class WildBootstrapSection(_Strict):
    """Restricted wild (cluster) bootstrap of the 2SLS t test (Davidson & MacKinnon 2010)."""

    draws: int = Field(default=999, ge=99, le=99_999)
    weights: Literal["rademacher", "webb"] = Field(
        default="rademacher",
        description="Draw distribution: rademacher (+1/-1) or webb (six points; better with "
        "fewer than about 12 clusters).",
    )


class BinaryOutcomeSection(_Strict):
    """Nonlinear models for a binary outcome, compared with linear 2SLS on the same outcome."""

    outcome: ColumnName = Field(description="A 0/1 or true/false outcome column.")
    models: list[BinaryModel] = Field(default_factory=lambda: list(BINARY_MODELS), min_length=1)
    bootstrap_draws: int = Field(default=199, ge=49, le=9999)


class RobustnessSection(_Strict):
    """Variants of the main 2SLS estimate, each compared with it in one table and plot."""

    estimators: list[VariantEstimator] = Field(
        default_factory=lambda: list(VARIANT_ESTIMATORS),
        description="Other estimators: " + ", ".join(VARIANT_ESTIMATORS),
    )
    instrument_sets: bool = Field(
        default=True, description="Each instrument alone, and each one left out."
    )
    alternative_clusters: list[list[ColumnName]] = Field(
        default_factory=list,
        description="Other cluster variables (one or two each) for the main 2SLS estimate.",
    )
    cluster_influence: bool = Field(
        default=True, description="Re-estimate leaving out one cluster at a time."
    )
    wild_bootstrap: WildBootstrapSection | None = Field(
        default_factory=WildBootstrapSection,
        description="Wild bootstrap of the 2SLS t test; null to skip.",
    )
    samples: list[Subsample] = Field(
        default_factory=list,
        description="Sample variants: their filters are applied after data.filters.",
    )
    control_sets: list[ControlVariant] = Field(default_factory=list)
    trim_outcome: list[float] = Field(
        default_factory=list,
        description="Shares of rows trimmed from each tail of the outcome (e.g. 0.01).",
    )
    binary_outcome: BinaryOutcomeSection | None = None

    @field_validator("trim_outcome")
    @classmethod
    def _trim_shares(cls, v: list[float]) -> list[float]:
        for t in v:
            if not 0 < t < 0.25:
                raise ValueError("robustness.trim_outcome shares must be between 0 and 0.25")
        return v

    @field_validator("alternative_clusters")
    @classmethod
    def _cluster_sets(cls, v: list[list[str]]) -> list[list[str]]:
        for names in v:
            if not 1 <= len(names) <= 2 or len(set(names)) != len(names):
                raise ValueError(
                    "each entry of robustness.alternative_clusters lists one or two "
                    "different variables"
                )
        return v


class DirectEffectRange(_Strict):
    """A range of direct effects of one instrument on the outcome (Conley, Hansen & Rossi
    2012): gamma in [lower, upper]; for the local-to-zero approximation gamma is taken as
    normal with ``prior_mean`` and ``prior_sd`` (defaults: the midpoint and a quarter of
    the width, so that the range is about +/- 2 standard deviations)."""

    lower: float
    upper: float
    prior_mean: float | None = None
    prior_sd: float | None = Field(default=None, gt=0)

    @model_validator(mode="after")
    def _ordered(self) -> DirectEffectRange:
        if self.upper < self.lower:
            raise ValueError("upper must be at least lower")
        if self.upper == self.lower and self.prior_sd is None:
            raise ValueError("a single value needs prior_sd for the local-to-zero approximation")
        return self


class SensitivitySection(_Strict):
    """How far the exclusion restriction may fail before the conclusion changes."""

    direct_effects: dict[str, DirectEffectRange] = Field(
        default_factory=dict,
        description="For each instrument, the range of direct effects on the outcome (in "
        "outcome units per unit of the instrument) to allow.",
    )
    grid_points: int = Field(default=41, ge=5, le=1001)


class Argument(_Strict):
    """The authors' own argument for one identifying assumption, quoted verbatim."""

    argument: str = Field(min_length=1, description="The argument, in the authors' words.")
    references: list[str] = Field(
        default_factory=list, description="Works the argument relies on (free text)."
    )


class AdditionalAssumption(Argument):
    name: str = Field(min_length=1, description="A short name for the assumption.")


class AssumptionsSection(_Strict):
    """The authors' arguments for the assumptions no data can fully test.

    A missing argument is shown as missing in the appendix and counted on its front page.
    """

    relevance: Argument | None = None
    independence: Argument | None = Field(
        default=None, description="Why the instruments are as good as randomly assigned."
    )
    exclusion_restriction: Argument | None = Field(
        default=None, description="Why the instruments affect the outcome only through treatment."
    )
    monotonicity: Argument | None = Field(
        default=None, description="Why no unit's treatment moves against the instrument."
    )
    late_claimed: bool = Field(
        default=True,
        description="Whether the estimate is read as a local average treatment effect for "
        "compliers; monotonicity is then an identifying assumption.",
    )
    additional: list[AdditionalAssumption] = Field(
        default_factory=list, description="Further assumptions the authors rely on."
    )


class InferenceSection(_Strict):
    """How uncertainty is measured."""

    covariance: Covariance | None = Field(
        default=None,
        description="classical, robust or cluster. Default: cluster when model.cluster_by "
        "is given, robust otherwise.",
    )
    confidence_level: float = Field(default=0.95, gt=0.5, lt=1.0)


class RunSection(_Strict):
    """Where the bundle goes and how the run is made reproducible."""

    output: str = Field(
        default="reportkit-output",
        min_length=1,
        description="Bundle folder, relative to the spec file.",
    )
    seed: int = Field(
        default=20240601,
        ge=0,
        lt=2**63,
        description="Master seed; every random procedure derives its own seed from it.",
    )
    crosscheck: Literal["auto", "always", "never"] = Field(
        default="auto",
        description="Re-fit the main estimates with linearmodels: auto = when the sample "
        "is small enough for it to take a few seconds.",
    )


def _check_covariance(
    where: str, specification: Specification, main_choice: Covariance | None, merged: ModelSection
) -> None:
    """A specification's covariance must fit its model's clusters, as the main spec's must."""
    cov = specification.resolved_covariance(main_choice, merged)
    source = "" if specification.covariance is not None else " (from inference.covariance)"
    if cov == "cluster" and not merged.cluster_by:
        raise ValueError(
            f"{where}: covariance is 'cluster'{source} but its model has no cluster_by; "
            "name the cluster variable(s) in its model.cluster_by or set its covariance to "
            "'robust'"
        )
    if cov != "cluster" and merged.cluster_by:
        raise ValueError(
            f"{where}: covariance is '{cov}'{source} but its model clusters by "
            f"{', '.join(merged.cluster_by)}; set cluster_by: [] in its model or choose "
            "covariance 'cluster'"
        )


def _unique_names(where: str, names: list[str]) -> None:
    seen: set[str] = set()
    for name in names:
        if name in seen:
            raise ValueError(f"{where} uses the name '{name}' twice; names must differ")
        seen.add(name)


class Spec(_Strict):
    """A complete reportkit specification."""

    study: StudySection
    data: DataSection
    model: ModelSection
    estimators: list[Estimator] = Field(
        default_factory=lambda: list(ESTIMATORS),
        min_length=1,
        description="Estimators to report, from: " + ", ".join(ESTIMATORS),
    )
    inference: InferenceSection = Field(default_factory=InferenceSection)
    specifications: list[Specification] = Field(
        default_factory=list,
        description="Further columns of the main table: each replaces parts of the model, "
        "the filters or the covariance; the main specification is the column 'Main'.",
    )
    balance: BalanceSection = Field(default_factory=BalanceSection)
    robustness: RobustnessSection = Field(default_factory=RobustnessSection)
    sensitivity: SensitivitySection = Field(default_factory=SensitivitySection)
    assumptions: AssumptionsSection = Field(default_factory=AssumptionsSection)
    run: RunSection = Field(default_factory=RunSection)

    @field_validator("estimators")
    @classmethod
    def _no_repeats(cls, v: list[str]) -> list[str]:
        if len(set(v)) != len(v):
            raise ValueError("an estimator is listed twice")
        # canonical order, so that tables always read OLS, 2SLS, LIML, GMM
        return [e for e in ESTIMATORS if e in v]

    @field_validator("specifications")
    @classmethod
    def _specifications_fit(
        cls, v: list[Specification], info: ValidationInfo
    ) -> list[Specification]:
        _unique_names("specifications", [s.name for s in v])
        model = info.data.get("model")
        inference = info.data.get("inference")
        if model is None:  # the main model has its own errors
            return v
        for i, specification in enumerate(v):
            where = f"specifications[{i}] ('{specification.name}')"
            try:
                merged = specification.merged_model(model)
            except ValidationError as exc:
                problems = "; ".join(
                    re.sub(r"^Value error, ", "", str(e["msg"])) for e in exc.errors()
                )
                raise ValueError(f"{where}: its model is not valid: {problems}") from None
            if inference is not None:
                _check_covariance(where, specification, inference.covariance, merged)
        return v

    @model_validator(mode="after")
    def _covariance_needs_clusters(self) -> Spec:
        cov = self.inference.covariance
        if cov == "cluster" and not self.model.cluster_by:
            raise ValueError(
                "inference.covariance is 'cluster' but model.cluster_by is empty; "
                "name the cluster variable(s) or choose 'robust'"
            )
        if cov in ("classical", "robust") and self.model.cluster_by:
            raise ValueError(
                f"inference.covariance is '{cov}' but model.cluster_by is given; "
                "remove cluster_by or choose 'cluster'"
            )
        return self

    @model_validator(mode="after")
    def _balance_roles(self) -> Spec:
        model, bal = self.model, self.balance
        structural = {model.outcome, *model.endogenous, *model.instruments}
        for key in ("covariates", "pre_treatment", "placebo_outcomes"):
            for name in getattr(bal, key) or []:
                if name in structural:
                    raise ValueError(
                        f"balance.{key} lists '{name}', which is the outcome, an endogenous "
                        "regressor or an instrument; balance variables must be other columns"
                    )
        for name in bal.cut_points:
            if name not in model.instruments:
                raise ValueError(
                    f"balance.cut_points names '{name}', which is not in model.instruments"
                )
        chosen = bal.compliers.instrument
        if chosen is not None and chosen not in model.instruments:
            raise ValueError(
                f"balance.compliers.instrument is '{chosen}', which is not in model.instruments"
            )
        _unique_names("balance.falsification", [f.name for f in bal.falsification])
        return self

    @model_validator(mode="after")
    def _robustness_roles(self) -> Spec:
        model, rob = self.model, self.robustness
        _unique_names("robustness.samples", [f.name for f in rob.samples])
        _unique_names("robustness.control_sets", [c.name for c in rob.control_sets])
        current = set(model.controls) | set(model.categorical_controls)
        structural = {model.outcome, *model.endogenous, *model.instruments}
        for variant in rob.control_sets:
            for name in variant.remove:
                if name not in current:
                    raise ValueError(
                        f"control variant '{variant.name}' removes '{name}', which is not in "
                        "model.controls or model.categorical_controls"
                    )
            for name in variant.add:
                if name in current or name in structural or name in model.fixed_effects:
                    raise ValueError(
                        f"control variant '{variant.name}' adds '{name}', which the model "
                        "already uses"
                    )
        for name in self.sensitivity.direct_effects:
            if name not in model.instruments:
                raise ValueError(
                    f"sensitivity.direct_effects names '{name}', which is not in model.instruments"
                )
        binary = rob.binary_outcome
        if binary is not None and binary.outcome in structural - {model.outcome}:
            raise ValueError(
                f"robustness.binary_outcome.outcome is '{binary.outcome}', an endogenous "
                "regressor or instrument; name a 0/1 outcome column"
            )
        return self

    @property
    def covariance(self) -> Covariance:
        """The covariance actually used, after the default rule is applied."""
        if self.inference.covariance is not None:
            return self.inference.covariance
        return "cluster" if self.model.cluster_by else "robust"

    def resolved(self) -> Spec:
        """A copy with every default made explicit (written to the bundle)."""
        main_choice = self.inference.covariance
        specifications = [
            s.model_copy(
                update={
                    "covariance": s.resolved_covariance(main_choice, s.merged_model(self.model))
                }
            )
            for s in self.specifications
        ]
        return self.model_copy(
            update={
                "inference": self.inference.model_copy(update={"covariance": self.covariance}),
                "specifications": specifications,
            }
        )

    def specification_spec(self, index: int) -> Spec:
        """The spec of specification ``index`` as a spec of its own, ready for the data stage.

        Its model, filters and covariance replace the main ones; the sections a
        specification does not run (balance, robustness, sensitivity, other
        specifications) are reset to defaults that read no extra columns.
        """
        specification = self.specifications[index]
        model = specification.merged_model(self.model)
        data = self.data
        if specification.filters is not None:
            data = data.model_copy(update={"filters": list(specification.filters)})
        covariance = specification.resolved_covariance(self.inference.covariance, model)
        return self.model_copy(
            update={
                "data": data,
                "model": model,
                "inference": self.inference.model_copy(update={"covariance": covariance}),
                "balance": BalanceSection(covariates=[]),
                "robustness": RobustnessSection(wild_bootstrap=None),
                "sensitivity": SensitivitySection(),
                "specifications": [],
            }
        )
