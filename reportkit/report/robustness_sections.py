"""What the section "How much does the answer move?" shows, chosen in Python.

The comparison table (one block per endogenous regressor, the main 2SLS row first, then
the variants grouped: other estimators, instrument sets, standard errors, samples, control
sets), the models for a binary outcome in a table of their own, leave-one-cluster-out
influence (Young 2022), the wild bootstrap p-value beside the conventional one (Cameron,
Gelbach & Miller 2008; Davidson & MacKinnon 2010) and the sensitivity to violations of the
exclusion restriction (Conley, Hansen & Rossi 2012), each with a reading that does not
overclaim. Numbers stay numbers here, except inside readings; the template formats them
with the filters of ``reportkit.report.formatting``. A value a variant does not provide is
``None`` and shown as a dash with a note; a variant that could not run shows its reason.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

from reportkit.report.formatting import (
    and_join,
    fmt_int,
    fmt_interval,
    fmt_num,
    fmt_p,
    fmt_pct,
    label,
    upper_first,
)
from reportkit.report.robustness_figures import (
    BINARY_KEY,
    GROUP_ORDER,
    GROUP_TITLES,
    finite,
    full_sample_estimate,
    influence_key,
    sensitivity_key,
    value_for,
    variants_key,
)
from reportkit.results import (
    ClusterDrop,
    ClusterInfluence,
    DirectEffectSensitivity,
    EstimatorResult,
    ExclusionSensitivity,
    Interval,
    NotApplicable,
    Robustness,
    StudyResults,
    Variant,
    VariantValue,
    WildBootstrapResult,
)

if TYPE_CHECKING:
    from reportkit.report.html import FigureLike

# How many of the most influential clusters the table lists.
TOP_CLUSTERS = 5

MAIN_ROW_NAME = "Main estimate (2SLS)"
MAIN_ESTIMAND = "as in the main specification"

VARIANTS_CAUTION = (
    "Each variant changes one choice of the main specification. Estimates that agree show "
    "that the answer does not hinge on those choices; they do not show that the instruments "
    "are valid, since every variant keeps the exclusion restriction (its bounded violations "
    "are the subject of the last part of this section). The differences are descriptive, "
    "not tests: the variants share most of their data with the main estimate."
)
GROUP_NOTES = {
    "estimator": (
        "Other estimators: LIML and Fuller's modification of it are less biased than 2SLS "
        "when instruments are many or weak (Fuller 1977); GMM weights the instruments by "
        "the covariance in use; JIVE leaves each row out of its own first stage (Angrist, "
        "Imbens & Krueger 1999). With strong instruments they are expected to agree closely."
    ),
    "instruments": (
        "Other instrument sets: each instrument alone, or each left out. Each set identifies "
        "the effect for the units its instruments move (its own compliers), so with effects "
        "that differ between units the estimates can differ even if every instrument is "
        "valid (Imbens & Angrist 1994)."
    ),
    "inference": (
        "Other standard errors: the estimate is the main one; only the standard error and "
        "interval change with the way errors are allowed to be correlated."
    ),
    "sample": (
        "Other samples: the same model on other rows. A subsample's estimate is the effect "
        "in that population; trimming the outcome's tails shows whether a few extreme values "
        "drive the estimate."
    ),
    "controls": (
        "Other control sets: the same model with controls added or removed. A large move "
        "means the estimate depends on what is held fixed, which the instruments' validity "
        "may also depend on."
    ),
}
BINARY_CAUTION = (
    "These models rest on distributional assumptions that 2SLS does not make (normal or "
    "logistic errors, and for the control-function and residual-inclusion models a "
    "correctly specified first stage), and they estimate different quantities: an average "
    "treatment or partial effect for everyone, where 2SLS estimates a local effect for the "
    "compliers. Differences between them are therefore not by themselves evidence against "
    "either."
)
YOUNG_CONTEXT = (
    "Young (2022) found that in many published instrumental-variables studies the estimate, "
    "or whether it differs from zero, hinges on one or two clusters or observations."
)
BOOTSTRAP_CONTEXT = (
    "With few clusters, cluster-robust t tests tend to reject too often; the wild cluster "
    "bootstrap keeps much closer to its stated level (Cameron, Gelbach & Miller 2008), so "
    "its p-value is the more reliable of the two when clusters are few."
)
SENSITIVITY_CAUTION = (
    "This shows how large a direct effect of the instruments on the outcome would have to be "
    "to overturn the conclusion. Whether an effect of that size is plausible is a judgement "
    "the data cannot make: it rests on what is known about how the instruments could affect "
    "the outcome other than through the treatment."
)
WEIGHT_NAMES = {
    "rademacher": "Rademacher weights (+1 or -1, each with probability one half)",
    "webb": "weights from Webb's six-point distribution",
}


@dataclass(frozen=True)
class ComparisonRow:
    """One row of a comparison table; ``reason`` is set when the variant could not run.

    ``None`` in a value field means the variant does not provide it (shown as a dash).
    ``difference`` is the estimate minus the main estimate (None in the binary table).
    """

    name: str
    description: str
    covariance: str | None
    estimand: str
    quantity: str | None
    reason: str | None
    estimate: float | None
    std_error: float | None
    ci_lower: float | None
    ci_upper: float | None
    n_obs: int | None
    difference: float | None
    difference_in_se: float | None

    @property
    def has_interval(self) -> bool:
        return self.ci_lower is not None and self.ci_upper is not None

    @property
    def has_dash(self) -> bool:
        values = (self.estimate, self.std_error, self.ci_lower, self.n_obs)
        return self.reason is None and any(v is None for v in values)


@dataclass(frozen=True)
class ComparisonGroup:
    key: str
    title: str
    rows: tuple[ComparisonRow, ...]


@dataclass(frozen=True)
class ComparisonBlock:
    """The comparison table of one endogenous regressor, with its reading and figure."""

    endogenous: str
    label: str
    main: ComparisonRow
    groups: tuple[ComparisonGroup, ...]
    reading: str
    notes: tuple[str, ...]
    figure: FigureLike | None


@dataclass(frozen=True)
class BinaryView:
    rows: tuple[ComparisonRow, ...]
    notes: tuple[str, ...]
    figure: FigureLike | None


@dataclass(frozen=True)
class InfluenceView:
    """Leave-one-cluster-out for one endogenous regressor."""

    influence: ClusterInfluence
    cluster_label: str
    top: tuple[ClusterDrop, ...]
    full_estimate: float
    reading: str
    figure: FigureLike | None


@dataclass(frozen=True)
class BootstrapRow:
    """The wild bootstrap p-value beside the conventional one, for one regressor."""

    result: WildBootstrapResult
    conventional_p: float | None
    covariance: str
    weights: str
    resampling: str
    reading: str


@dataclass(frozen=True)
class SensitivityRow:
    entry: DirectEffectSensitivity
    breakdown_text: str
    reading: str


@dataclass(frozen=True)
class IntervalRow:
    """One interval of the sensitivity comparison: no direct effect, union, local to zero."""

    method: str
    estimate: float | None
    interval: Interval | None
    includes_zero: bool | None


@dataclass(frozen=True)
class SensitivityView:
    sensitivity: ExclusionSensitivity
    rows: tuple[SensitivityRow, ...]
    intervals: tuple[IntervalRow, ...]
    reading: str
    figure: FigureLike | None


@dataclass(frozen=True)
class RobustnessView:
    """Everything the robustness section lays out when robustness was computed."""

    blocks: tuple[ComparisonBlock, ...]
    group_notes: tuple[str, ...]
    binary: BinaryView | None
    influence: tuple[InfluenceView, ...] | NotApplicable
    bootstrap: tuple[BootstrapRow, ...] | NotApplicable
    bootstrap_context: str
    sensitivity: tuple[SensitivityView, ...] | NotApplicable
    caution: str
    binary_caution: str
    young_context: str
    sensitivity_caution: str


# --------------------------------------------------------------------------- helpers


def _two_sls(results: StudyResults) -> EstimatorResult | None:
    return next((e for e in results.estimates if e.estimator == "2sls"), None)


def main_value(robustness: Robustness, quantity: str) -> VariantValue:
    """The main 2SLS value of ``quantity``; its absence is an error of the computation."""
    for item in robustness.main:
        if item.quantity == quantity:
            return item
    raise ValueError(
        f"the robustness results have no main 2SLS estimate of '{quantity}'; they hold "
        f"{', '.join(m.quantity for m in robustness.main) or 'none'}"
    )


def includes_zero(lower: float | None, upper: float | None) -> bool:
    """Does the closed interval [lower, upper] contain zero (None: unbounded)?"""
    return (lower is None or lower <= 0.0) and (upper is None or upper >= 0.0)


def _clean(x: float | None) -> float | None:
    return x if finite(x) else None


def _row(
    variant: Variant,
    item: VariantValue | None,
    main: VariantValue | None,
    main_covariance: str,
    quantity_label: str | None = None,
) -> ComparisonRow:
    """A table row of one variant's value (``item`` None: the variant could not run)."""
    covariance = (
        variant.covariance
        if variant.covariance.strip() and variant.covariance != main_covariance
        else None
    )
    if item is None:
        reason = (
            variant.values.reason if isinstance(variant.values, NotApplicable) else "no estimate"
        )
        return ComparisonRow(
            name=variant.name,
            description=variant.description,
            covariance=covariance,
            estimand=variant.estimand,
            quantity=quantity_label,
            reason=reason,
            estimate=None,
            std_error=None,
            ci_lower=None,
            ci_upper=None,
            n_obs=variant.n_obs,
            difference=None,
            difference_in_se=None,
        )
    estimate = _clean(item.estimate)
    lower, upper = _clean(item.ci_lower), _clean(item.ci_upper)
    if lower is None or upper is None:
        lower = upper = None
    difference = in_se = None
    if main is not None and estimate is not None and finite(main.estimate):
        difference = estimate - main.estimate
        if main.std_error is not None and finite(main.std_error) and main.std_error > 0:
            in_se = difference / main.std_error
    return ComparisonRow(
        name=variant.name,
        description=variant.description,
        covariance=covariance,
        estimand=variant.estimand,
        quantity=quantity_label,
        reason=None,
        estimate=estimate,
        std_error=_clean(item.std_error),
        ci_lower=lower,
        ci_upper=upper,
        n_obs=variant.n_obs,
        difference=difference,
        difference_in_se=in_se,
    )


def _main_row(main: VariantValue, n_obs: int | None) -> ComparisonRow:
    lower, upper = _clean(main.ci_lower), _clean(main.ci_upper)
    if lower is None or upper is None:
        lower = upper = None
    return ComparisonRow(
        name=MAIN_ROW_NAME,
        description="",
        covariance=None,
        estimand=MAIN_ESTIMAND,
        quantity=None,
        reason=None,
        estimate=_clean(main.estimate),
        std_error=_clean(main.std_error),
        ci_lower=lower,
        ci_upper=upper,
        n_obs=n_obs,
        difference=None,
        difference_in_se=None,
    )


# --------------------------------------------------------------------------- comparison


def comparison_reading(
    name: str, main: ComparisonRow, rows: Sequence[ComparisonRow], level: float
) -> str:
    """How far the variants' estimates of one coefficient move from the main one."""
    estimated = [r for r in rows if r.estimate is not None]
    failed = len(rows) - len(estimated)
    if not rows:
        return f"No variant of the estimate of {name} was computed."
    if not estimated:
        return f"None of the {fmt_int(len(rows))} variants of the estimate of {name} could run."
    low = min(estimated, key=lambda r: r.estimate or 0.0)
    high = max(estimated, key=lambda r: r.estimate or 0.0)
    noun = "variant" if len(estimated) == 1 else "variants"
    if len(estimated) == 1:
        span = f"the estimate of the effect of {name} is {fmt_num(low.estimate or 0.0)}"
    else:
        span = (
            f"the estimate of the effect of {name} ranges from {fmt_num(low.estimate or 0.0)} "
            f"({low.name}) to {fmt_num(high.estimate or 0.0)} ({high.name})"
        )
    text = [f"Across the {fmt_int(len(estimated))} {noun} with an estimate, {span}"]
    if main.estimate is not None:
        text[0] += f"; the main 2SLS estimate is {fmt_num(main.estimate)}."
        sign = 1.0 if main.estimate > 0 else -1.0 if main.estimate < 0 else 0.0
        opposite = [r.name for r in estimated if sign and (r.estimate or 0.0) * sign < 0]
        if sign and opposite:
            text.append(
                f"{fmt_int(len(opposite))} of them {'has' if len(opposite) == 1 else 'have'} "
                f"the opposite sign: {and_join(opposite)}."
            )
        elif sign:
            text.append("All have the same sign as the main estimate.")
    else:
        text[0] += "."
    with_interval = [r for r in estimated if r.has_interval]
    if with_interval:
        away = sum(not includes_zero(r.ci_lower, r.ci_upper) for r in with_interval)
        main_part = ""
        if main.has_interval:
            verb = "includes" if includes_zero(main.ci_lower, main.ci_upper) else "excludes"
            main_part = f"; the main interval {verb} zero"
        text.append(
            f"Of the variants' {fmt_pct(level)} intervals, {fmt_int(away)} of "
            f"{fmt_int(len(with_interval))} exclude zero{main_part}."
        )
    if failed:
        text.append(f"{fmt_int(failed)} could not run (reasons in the table).")
    return " ".join(text)


def _table_notes(rows: Sequence[ComparisonRow], main: ComparisonRow) -> tuple[str, ...]:
    notes = []
    if main.std_error is not None and main.std_error > 0:
        notes.append(
            "Difference: the variant's estimate minus the main estimate; below it, the same "
            "in units of the main standard error."
        )
    else:
        notes.append("Difference: the variant's estimate minus the main estimate.")
    if any(r.covariance is not None for r in rows):
        notes.append(
            "Where a variant's standard errors are computed differently from the main "
            "estimate's, the way is named under its name."
        )
    if main.has_dash or any(r.has_dash for r in rows):
        notes.append("A dash marks a value the variant does not provide.")
    return tuple(notes)


def comparison_block(
    robustness: Robustness,
    quantity: str,
    labels: Mapping[str, str],
    main_n: int | None,
    main_covariance: str,
    level: float,
    figure: FigureLike | None,
) -> ComparisonBlock:
    """The comparison table of one endogenous regressor (binary-outcome models excluded)."""
    main = main_value(robustness, quantity)
    main_row = _main_row(main, main_n)
    groups = []
    for key in GROUP_ORDER:
        rows = tuple(
            _row(v, value_for(v, quantity), main, main_covariance)
            for v in robustness.variants
            if v.group == key
        )
        if rows:
            groups.append(ComparisonGroup(key, GROUP_TITLES[key], rows))
    every = [r for g in groups for r in g.rows]
    name = label(quantity, labels)
    return ComparisonBlock(
        endogenous=quantity,
        label=name,
        main=main_row,
        groups=tuple(groups),
        reading=comparison_reading(name, main_row, every, level),
        notes=_table_notes(every, main_row),
        figure=figure,
    )


def binary_view(
    robustness: Robustness,
    labels: Mapping[str, str],
    main_covariance: str,
    figure: FigureLike | None,
) -> BinaryView | None:
    """The table of the binary-outcome models, or None when none was run."""
    rows: list[ComparisonRow] = []
    for variant in robustness.variants:
        if variant.group != "binary":
            continue
        if isinstance(variant.values, NotApplicable) or not variant.values:
            rows.append(_row(variant, None, None, main_covariance))
            continue
        several = len(variant.values) > 1
        for item in variant.values:
            quantity = label(item.quantity, labels) if several else None
            rows.append(_row(variant, item, None, main_covariance, quantity))
    if not rows:
        return None
    notes = [
        "No difference from the main estimate is shown: these models estimate other "
        "quantities, of another outcome or on another scale."
    ]
    if any(r.covariance is not None for r in rows):
        notes.append(
            "Where a model's standard errors are computed differently from the main "
            "estimate's, the way is named under its name."
        )
    if any(r.has_dash for r in rows):
        notes.append("A dash marks a value the model does not provide.")
    return BinaryView(tuple(rows), tuple(notes), figure)


# --------------------------------------------------------------------------- influence


def influence_reading(influence: ClusterInfluence, full: float, main_se: float | None) -> str:
    """How this estimate behaves when single clusters are left out (no more than that)."""
    if not influence.drops:
        return "No cluster was left out."
    top = max(influence.drops, key=lambda d: abs(d.shift))
    size = ""
    if main_se is not None and main_se > 0:
        size = f", {fmt_num(abs(top.shift) / main_se)} times the main standard error"
    text = [
        f"Leaving out one of the {fmt_int(influence.n_clusters)} clusters at a time, the "
        f"estimate ranges from {fmt_num(influence.lowest)} to {fmt_num(influence.highest)} "
        f"(full sample: {fmt_num(full)}). The largest shift comes from leaving out "
        f"{top.cluster}: {fmt_num(top.shift)}{size}."
    ]
    changes = influence.significance_changes
    if changes == 0:
        text.append("No single removal changes whether the interval excludes zero.")
    elif changes == 1:
        text.append(
            "Removing one cluster changes whether the interval excludes zero: that "
            "conclusion hinges on a single cluster here."
        )
    else:
        text.append(
            f"Removing any one of {fmt_int(changes)} clusters changes whether the interval "
            "excludes zero: that conclusion hinges on single clusters here."
        )
    return " ".join(text)


def influence_view(
    robustness: Robustness,
    influence: ClusterInfluence,
    labels: Mapping[str, str],
    figure: FigureLike | None,
) -> InfluenceView:
    full = full_sample_estimate(robustness, influence)
    main = next((m for m in robustness.main if m.quantity == influence.endogenous), None)
    main_se = main.std_error if main is not None else None
    ordered = sorted(influence.drops, key=lambda d: -abs(d.shift))  # stable
    return InfluenceView(
        influence=influence,
        cluster_label=label(influence.cluster_variable, labels),
        top=tuple(ordered[:TOP_CLUSTERS]),
        full_estimate=full,
        reading=influence_reading(influence, full, main_se),
        figure=figure,
    )


# --------------------------------------------------------------------------- bootstrap


def bootstrap_reading(
    result: WildBootstrapResult, conventional_p: float | None, alpha: float
) -> str:
    """The bootstrap p-value read beside the conventional one, for this number of clusters."""
    level = fmt_pct(alpha, digits=0 if round(100 * alpha, 6).is_integer() else 1)
    boot = result.p_value < alpha
    if result.level == "cluster" and result.clusters is not None:
        where = f"With {fmt_int(result.clusters)} clusters, the"
    else:
        where = "Resampling single observations, the"
    text = f"{where} wild bootstrap p-value is {fmt_p(result.p_value)}"
    if conventional_p is None:
        verdict = "rejects" if boot else "does not reject"
        return f"{text}; it {verdict} a zero effect at the {level} level."
    conventional = conventional_p < alpha
    text += f", the conventional one {fmt_p(conventional_p)}"
    if boot == conventional:
        verdict = "reject" if boot else "do not reject"
        return f"{text}: both {verdict} a zero effect at the {level} level."
    which = "only the bootstrap rejects" if boot else "only the conventional test rejects"
    return (
        f"{text}: they disagree at the {level} level ({which} a zero effect). With few "
        "clusters, the bootstrap is the more reliable of the two."
    )


def bootstrap_row(
    result: WildBootstrapResult, robustness: Robustness, results: StudyResults, alpha: float
) -> BootstrapRow:
    main = next((m for m in robustness.main if m.quantity == result.endogenous), None)
    conventional = main.p_value if main is not None else None
    two_sls = _two_sls(results)
    if conventional is None and two_sls is not None:
        coef = next((c for c in two_sls.coefficients if c.name == result.endogenous), None)
        conventional = coef.p_value if coef is not None else None
    covariance = two_sls.covariance if two_sls is not None else results.conventions.covariance
    if result.level == "cluster":
        clusters = "" if result.clusters is None else f" ({fmt_int(result.clusters)} clusters)"
        resampling = f"weights drawn per cluster{clusters}"
    else:
        resampling = "weights drawn per observation"
    return BootstrapRow(
        result=result,
        conventional_p=conventional,
        covariance=covariance,
        weights=WEIGHT_NAMES.get(result.weights, result.weights),
        resampling=resampling,
        reading=bootstrap_reading(result, conventional, alpha),
    )


# --------------------------------------------------------------------------- sensitivity


def breakdown_text(entry: DirectEffectSensitivity) -> str:
    """The breakdown value in words: a number, zero, or not reached."""
    if entry.breakdown is None:
        return "not reached within 100 times the range's largest bound"
    return fmt_num(entry.breakdown)


def breakdown_reading(entry: DirectEffectSensitivity, outcome: str) -> str:
    """What the breakdown value of one instrument means, compared with its allowed range."""
    name = upper_first(entry.label)
    if entry.breakdown is None:
        return (
            f"{name}: the interval excludes zero for every direct effect of this instrument "
            "alone up to 100 times the largest bound of its allowed range."
        )
    if entry.breakdown == 0.0:
        return f"{name}: the interval includes zero even without any direct effect."
    reach = max(abs(entry.lower), abs(entry.upper))
    inside = (
        "the allowed range reaches that size"
        if reach >= entry.breakdown
        else "the allowed range stays below that size"
    )
    return (
        f"{name}: a direct effect of {fmt_num(entry.breakdown)} in absolute value (in "
        f"{outcome} per unit of the instrument, the others kept excluded) is enough for the "
        f"interval to include zero; {inside} (at most {fmt_num(reach)})."
    )


def sensitivity_reading(sensitivity: ExclusionSensitivity, main: VariantValue | None) -> str:
    """The union and local-to-zero intervals, read beside the main interval."""
    level = fmt_pct(sensitivity.level)
    union = sensitivity.union_interval
    ltz = sensitivity.local_to_zero
    text = [
        f"Allowing every direct effect in the ranges, the union of the {level} intervals is "
        f"{fmt_interval(union)}, which {_zero_verb(union)} zero.",
        f"Treating the direct effects as normal with the stated means and standard deviations "
        f"(local to zero), the estimate is {fmt_num(sensitivity.local_to_zero_estimate)} with "
        f"interval {fmt_interval(ltz)}, which {_zero_verb(ltz)} zero.",
    ]
    if main is not None and finite(main.ci_lower) and finite(main.ci_upper):
        main_interval = Interval(lower=main.ci_lower, upper=main.ci_upper)
        text.append(
            f"Without any direct effect (the main estimate) it is {fmt_interval(main_interval)}."
        )
    return " ".join(text)


def _zero_verb(interval: Interval) -> str:
    return "includes" if includes_zero(interval.lower, interval.upper) else "excludes"


def sensitivity_view(
    sensitivity: ExclusionSensitivity,
    robustness: Robustness,
    outcome: str,
    figure: FigureLike | None,
) -> SensitivityView:
    main = next((m for m in robustness.main if m.quantity == sensitivity.endogenous), None)
    intervals = []
    if main is not None:
        has = finite(main.ci_lower) and finite(main.ci_upper)
        intervals.append(
            IntervalRow(
                "No direct effect (main 2SLS)",
                _clean(main.estimate),
                Interval(lower=main.ci_lower, upper=main.ci_upper) if has else None,
                includes_zero(main.ci_lower, main.ci_upper) if has else None,
            )
        )
    intervals += [
        IntervalRow(
            "Union over the allowed ranges",
            None,
            sensitivity.union_interval,
            includes_zero(sensitivity.union_interval.lower, sensitivity.union_interval.upper),
        ),
        IntervalRow(
            "Local to zero (normal prior on the direct effects)",
            sensitivity.local_to_zero_estimate,
            sensitivity.local_to_zero,
            includes_zero(sensitivity.local_to_zero.lower, sensitivity.local_to_zero.upper),
        ),
    ]
    return SensitivityView(
        sensitivity=sensitivity,
        rows=tuple(
            SensitivityRow(e, breakdown_text(e), breakdown_reading(e, outcome))
            for e in sensitivity.ranges
        ),
        intervals=tuple(intervals),
        reading=sensitivity_reading(sensitivity, main),
        figure=figure,
    )


# --------------------------------------------------------------------------- view


def robustness_view(
    results: StudyResults, alpha: float, figures: Mapping[str, FigureLike]
) -> RobustnessView | None:
    """The robustness section's content, or None when robustness was not computed."""
    robustness = results.robustness
    if isinstance(robustness, NotApplicable):
        return None
    labels = results.model.labels
    level = results.conventions.confidence_level
    two_sls = _two_sls(results)
    main_covariance = two_sls.covariance if two_sls is not None else results.conventions.covariance
    main_n = two_sls.n_obs if two_sls is not None else results.sample.rows_used
    outcome = label(results.model.outcome, labels)
    blocks = tuple(
        comparison_block(
            robustness,
            m.quantity,
            labels,
            main_n,
            main_covariance,
            level,
            figures.get(variants_key(i)),
        )
        for i, m in enumerate(robustness.main)
    )
    present = {v.group for v in robustness.variants}
    influence: tuple[InfluenceView, ...] | NotApplicable
    if isinstance(robustness.cluster_influence, NotApplicable):
        influence = robustness.cluster_influence
    else:
        influence = tuple(
            influence_view(robustness, entry, labels, figures.get(influence_key(i)))
            for i, entry in enumerate(robustness.cluster_influence)
        )
    bootstrap: tuple[BootstrapRow, ...] | NotApplicable
    if isinstance(robustness.wild_bootstrap, NotApplicable):
        bootstrap = robustness.wild_bootstrap
    else:
        bootstrap = tuple(
            bootstrap_row(entry, robustness, results, alpha) for entry in robustness.wild_bootstrap
        )
    sensitivity: tuple[SensitivityView, ...] | NotApplicable
    if isinstance(robustness.sensitivity, NotApplicable):
        sensitivity = robustness.sensitivity
    else:
        sensitivity = tuple(
            sensitivity_view(entry, robustness, outcome, figures.get(sensitivity_key(i)))
            for i, entry in enumerate(robustness.sensitivity)
        )
    return RobustnessView(
        blocks=blocks,
        group_notes=tuple(GROUP_NOTES[g] for g in GROUP_ORDER if g in present),
        binary=binary_view(robustness, labels, main_covariance, figures.get(BINARY_KEY)),
        influence=influence,
        bootstrap=bootstrap,
        bootstrap_context=BOOTSTRAP_CONTEXT,
        sensitivity=sensitivity,
        caution=VARIANTS_CAUTION,
        binary_caution=BINARY_CAUTION,
        young_context=YOUNG_CONTEXT,
        sensitivity_caution=SENSITIVITY_CAUTION,
    )
