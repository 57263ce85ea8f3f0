"""Plain-language sentences of the appendix, built from the results in Python.

The templates only place these sentences; choosing between wordings (singular or
plural, a test that rejects or not, a test that does not apply) happens here, where it
can be unit-tested. Readings are deliberately modest: a test that does not reject is
never described as showing that an assumption holds.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from statistics import NormalDist

from reportkit.report.formatting import (
    and_join,
    fmt_distribution,
    fmt_num,
    fmt_pct,
    label,
    p_phrase,
    upper_first,
)
from reportkit.results import (
    ConfidenceSet,
    Conventions,
    CriticalValue,
    CriticalValueTable,
    Diagnostics,
    ModelDescription,
    NotApplicable,
    TestOrNA,
    TestResult,
    TFResult,
)

OVERID_CAUTION = (
    "An over-identification test compares instruments with each other; it cannot detect a "
    "violation that all instruments share."
)
STRENGTH_CAUTION = (
    "A large F shows that the instruments move the endogenous regressor (relevance); it says "
    "nothing about the exclusion restriction."
)
ENDOGENEITY_CAUTION = (
    "The endogeneity test compares OLS with the instrumented estimate and is only as good as "
    "the instruments; with weak instruments it has little power."
)


def _labels(names: list[str], labels: Mapping[str, str]) -> str:
    return and_join([label(n, labels) for n in names])


def specification_sentences(model: ModelDescription) -> list[str]:
    """The estimated model in words, one sentence per part."""
    labels = model.labels
    endogenous = _labels(model.endogenous, labels)
    verb = "is" if len(model.endogenous) == 1 else "are"
    sentences = [
        f"Outcome: {label(model.outcome, labels)}.",
        f"{upper_first(endogenous)} {verb} treated as endogenous and instrumented by "
        f"{_labels(model.instruments, labels)}.",
        f"Controls: {_labels(model.controls, labels)}." if model.controls else "Controls: none.",
        f"Fixed effects absorbed: {_labels(model.fixed_effects, labels)}."
        if model.fixed_effects
        else "Fixed effects absorbed: none.",
    ]
    if model.cluster_by:
        sentences.append(f"Standard errors clustered by {_labels(model.cluster_by, labels)}.")
    if model.weights is not None:
        sentences.append(f"Every stage is weighted by {label(model.weights, labels)}.")
    sentences.append(identification_sentence(model))
    return sentences


def identification_sentence(model: ModelDescription) -> str:
    """How many instruments per endogenous regressor, in words."""
    instruments = "instrument" if model.n_instruments == 1 else "instruments"
    regressors = "regressor" if model.n_endogenous == 1 else "regressors"
    counts = (
        f"{model.n_instruments} excluded {instruments} for {model.n_endogenous} endogenous "
        f"{regressors}"
    )
    if model.overidentification_degree == 0:
        return f"Identification: {counts}, exactly identified (no over-identification test)."
    return f"Identification: {counts}, over-identified by {model.overidentification_degree}."


def significance_level(conventions: Conventions) -> float:
    """The test level matching the confidence level (0.95 -> 0.05)."""
    return round(1.0 - conventions.confidence_level, 10)


def _level_text(alpha: float) -> str:
    return fmt_pct(alpha, digits=0 if round(100 * alpha, 6).is_integer() else 1)


def describe_test(result: TestOrNA) -> str:
    """One test as a short phrase with its statistic, df and p-value."""
    if isinstance(result, NotApplicable):
        return f"n/a: {result.reason}"
    return (
        f"{result.name} = {fmt_num(result.statistic)} ({fmt_distribution(result)}), "
        f"p {p_phrase(result.p_value)}"
    )


def _not_reported(result: NotApplicable) -> str:
    return f"Not reported: {result.reason}."


def overid_reading(result: TestOrNA, alpha: float) -> str:
    """A plain reading of an over-identification test that does not overclaim."""
    if isinstance(result, NotApplicable):
        return _not_reported(result)
    level = _level_text(alpha)
    if result.p_value < alpha:
        return (
            f"The instruments point to different answers (rejected at the {level} level): "
            "at least one instrument, or the model, is at odds with the data."
        )
    return (
        f"No detectable disagreement among the instruments at the {level} level. "
        "This does not show that they are valid."
    )


def endogeneity_reading(result: TestOrNA, alpha: float) -> str:
    """A plain reading of the endogeneity test that does not overclaim."""
    if isinstance(result, NotApplicable):
        return _not_reported(result)
    level = _level_text(alpha)
    if result.p_value < alpha:
        return (
            f"OLS and the instrumented estimate differ by more than chance explains at the "
            f"{level} level: evidence that the regressor is endogenous, if the instruments "
            "are valid."
        )
    return (
        f"No detectable difference between OLS and the instrumented estimate at the {level} "
        "level. This is not evidence that the regressor is exogenous."
    )


def main_overid_test(diagnostics: Diagnostics, covariance: str) -> TestOrNA:
    """The over-identification test to headline: Hansen J, or Sargan with a classical covariance.

    Hansen J is robust to the covariance in use; Sargan assumes independent,
    homoskedastic errors (Sargan, 1958; Hansen, 1982). If the preferred one does not
    apply and the other does, the other is shown.
    """
    preferred, other = (
        (diagnostics.sargan, diagnostics.hansen_j)
        if covariance == "classical"
        else (diagnostics.hansen_j, diagnostics.sargan)
    )
    if isinstance(preferred, NotApplicable) and isinstance(other, TestResult):
        return other
    return preferred


# --- instrument strength ---------------------------------------------------------------

RELEVANCE_NOT_EXCLUSION = (
    "A strong first stage shows relevance; it says nothing about the exclusion restriction."
)
PARTIAL_R2_CRITERION = (
    "no threshold: the share of the regressor's variation left after the controls that the "
    "instruments explain"
)
UNDERIDENTIFICATION_NOTE = (
    "Rejecting under-identification shows that the instruments move the endogenous regressors "
    "at all; it does not show that they are strong."
)
VERDICT_LABELS = {
    "strong": "Strong instruments",
    "moderate": "Instruments of moderate strength",
    "weak": "Weak instruments",
}
VERDICT_ADVICE = {
    "strong": "",
    "moderate": (
        "Conventional 2SLS intervals may be somewhat too narrow; compare them with the "
        "inference that stays valid with weak instruments."
    ),
    "weak": (
        "Conventional 2SLS standard errors and intervals can mislead; rely on the inference "
        "that stays valid with weak instruments."
    ),
}


def shea_criterion(n_endogenous: int) -> str:
    """What the Shea partial R-squared is compared with (Shea, 1997)."""
    if n_endogenous == 1:
        return "the partial R-squared: with one endogenous regressor the two are equal"
    return (
        "the partial R-squared: a Shea value far below it means the instruments explain this "
        "regressor mostly through what they share with the other endogenous regressors"
    )


def test_criterion(result: TestResult) -> str:
    """The reference a test is read against: its distribution and null, in words."""
    return f"p-value, {fmt_distribution(result)}; null: {result.null}"


def test_outcome(result: TestOrNA, alpha: float) -> str:
    """A test's p-value and whether it rejects at the report's level."""
    if isinstance(result, NotApplicable):
        return f"n/a: {result.reason}"
    verdict = "rejected" if result.p_value < alpha else "not rejected"
    return f"p {p_phrase(result.p_value)}: {verdict} at the {_level_text(alpha)} level"


def exceeded_count(rows: Sequence[CriticalValue]) -> str:
    """How many of its critical values a statistic exceeds ("exceeds 2 of 2")."""
    if not rows:
        return "no critical values computed"
    count = sum(row.exceeded for row in rows)
    noun = "critical value" if len(rows) == 1 else "critical values"
    if count == 0:
        return f"exceeds none of its {len(rows)} {noun}"
    return f"exceeds {count} of {len(rows)} {noun}"


def effective_f_criterion(k_eff: float) -> str:
    """What the effective F is read against (Montiel Olea & Pflueger, 2013)."""
    return (
        "critical values computed for these data (effective degrees of freedom "
        f"{fmt_num(k_eff)}), allowing for the covariance in use:"
    )


def cragg_donald_criterion(stock_yogo: CriticalValueTable | NotApplicable) -> str:
    """What the Cragg-Donald F is read against: Stock-Yogo, or why there is nothing."""
    if isinstance(stock_yogo, NotApplicable):
        return f"no tabulated critical values: {stock_yogo.reason}"
    return (
        f"{stock_yogo.source} critical values (table below), which assume independent, "
        "homoskedastic errors"
    )


def kleibergen_paap_f_criterion(n_endogenous: int) -> str:
    """What the Kleibergen-Paap Wald F is read against: no table holds for it."""
    text = (
        "no tabulated critical values allow for this covariance; the Stock-Yogo values are "
        "at most a rough guide"
    )
    if n_endogenous == 1:
        text += "; with one endogenous regressor, read the effective F instead"
    return text


# --- weak-instrument-robust inference --------------------------------------------------

C_TEST_CAUTION = (
    "Each C statistic tests one instrument while assuming that all the other instruments are "
    "valid; if they are not, the test says nothing about this one. Like any "
    "over-identification test, it cannot detect a violation that all instruments share."
)
AR_OVERID_NOTE = (
    "With more instruments than endogenous regressors, the Anderson-Rubin test also rejects "
    "when the instruments disagree with each other, so its set can be narrow, or empty, for "
    "that reason rather than because the effect is precisely estimated."
)

_SET_READINGS = {
    "interval": (
        "A bounded interval: the values of the coefficient that this test does not reject at "
        "the {alpha} level."
    ),
    "two_rays": (
        "Two rays: the data rule out the values in the gap between them but bound the effect "
        "in neither direction. This shape arises when the instruments are weak."
    ),
    "ray": (
        "A half-line: the data bound the effect on one side only. This shape arises when the "
        "instruments are weak."
    ),
    "whole_line": (
        "No value of the coefficient is rejected at the {alpha} level: the instruments are too "
        "weak for the data to say anything about the size of the effect."
    ),
    "empty": (
        "Every value of the coefficient is rejected at the {alpha} level. This does not mean "
        "the effect is known precisely: the instruments point to different answers, the "
        "evidence an over-identification test looks for."
    ),
    "union": (
        "Several separate pieces: the values not rejected at the {alpha} level do not form "
        "one range. This arises with weak instruments, or instruments that point to different "
        "answers."
    ),
}


def set_reading(cs: ConfidenceSet | NotApplicable) -> str:
    """A plain reading of a confidence set's shape that does not overclaim."""
    if isinstance(cs, NotApplicable):
        return _not_reported(cs)
    alpha = round(1.0 - cs.level, 10)
    return _SET_READINGS[cs.shape].format(alpha=_level_text(alpha))


def zero_test_reading(result: TestOrNA, alpha: float) -> str:
    """Reading of a weak-instrument-robust test that the effect is zero."""
    if isinstance(result, NotApplicable):
        return _not_reported(result)
    level = _level_text(alpha)
    if result.p_value < alpha:
        return (
            f"A zero effect is rejected at the {level} level, and this conclusion does not "
            "depend on the instruments being strong (it does depend on their being valid)."
        )
    return (
        f"A zero effect is not rejected at the {level} level. This is not evidence that the "
        "effect is zero: weak instruments leave such tests with little power."
    )


def normal_critical_value(confidence_level: float) -> float:
    """The two-sided standard-normal critical value of a conventional t-test (1.96 at 95%)."""
    return NormalDist().inv_cdf(0.5 + confidence_level / 2.0)


def tf_reading(tf: TFResult, confidence_level: float) -> str:
    """Reading of the tF test of a zero effect (Lee, McCrary, Moreira & Porter, 2022)."""
    level = _level_text(round(1.0 - confidence_level, 10))
    if not math.isfinite(tf.critical_value):
        return (
            f"With a first-stage F of {fmt_num(tf.first_stage_f)}, no finite critical value "
            f"applies: the tF test cannot reject any value at the {level} level."
        )
    usual = fmt_num(normal_critical_value(confidence_level))
    verdict = "rejects" if abs(tf.t_statistic) > tf.critical_value else "does not reject"
    return (
        f"With a first-stage F of {fmt_num(tf.first_stage_f)}, the t-ratio must exceed "
        f"{fmt_num(tf.critical_value)} in absolute value instead of the usual {usual}; at "
        f"{fmt_num(tf.t_statistic)} it {verdict} a zero effect at the {level} level."
    )


TF_NO_INTERVAL = (
    "none: the first-stage F is below the smallest value the tF adjustment covers, so no "
    "finite interval applies"
)


# --- is the instrument as good as random? -----------------------------------------------

BALANCE_CAUTION = (
    "Balance on observed covariates is evidence, not proof: the instrument can still be "
    "related to unobserved causes of the outcome."
)
PLACEBO_CAUTION = (
    "A placebo effect far from zero is evidence against the exclusion restriction or random "
    "assignment; one near zero is consistent with them but does not establish them."
)
# The band drawn around zero for standardized differences: common practice, no source. It
# is a rule of thumb for a negligible imbalance, not a test.
STD_DIFFERENCE_BAND = 0.1
STD_DIFFERENCE_BAND_TEXT = (
    f"|standardized difference| <= {STD_DIFFERENCE_BAND}, a common rule of thumb for a "
    "negligible imbalance (not a test)"
)
COVARIATE_KINDS = {
    "control": "control in the model",
    "pre_treatment": "pre-treatment, not a control",
}


def coefficient_guide(conditioning: str, n_instruments: int, conditional: bool) -> str:
    """How to read the coefficient columns of the balance tables."""
    regressed = (
        "the covariate regressed on the instrument"
        if n_instruments == 1
        else "the covariate regressed on all the instruments together, so that each "
        "coefficient holds the other instruments fixed"
    )
    columns = (
        f"; unconditional: without {conditioning}; conditional: with {conditioning} held fixed"
        if conditional
        else ""
    )
    return (
        f"Coefficient on the instrument: {regressed}{columns}. The standard error is in "
        "brackets, then the p-value. For a continuous instrument the coefficient is the "
        "change in the covariate per unit of the instrument."
    )


def joint_balance_reading(result: TestOrNA, instrument: str, alpha: float) -> str:
    """Reading of the joint test that the covariates are unrelated to one instrument."""
    if isinstance(result, NotApplicable):
        return _not_reported(result)
    level = _level_text(alpha)
    if result.p_value < alpha:
        return (
            f"The covariates together predict {instrument} (rejected at the {level} level): "
            "the instrument is not as good as randomly assigned with respect to them. The "
            "analysis then relies on the controls to account for these differences, and on "
            "unobserved causes of the outcome not differing in the same way."
        )
    return (
        f"No detectable joint relation between the covariates and {instrument} at the {level} "
        "level. Random assignment would produce this, but it does not show that the "
        "instrument is as good as random."
    )


def outcome_index_intro(r2_prediction: float) -> str:
    """What the outcome index is, with how much of the outcome the covariates predict."""
    return (
        "The outcome index is the outcome predicted from the covariates alone (R-squared "
        f"{fmt_num(r2_prediction)}): it weights each covariate by how strongly it predicts the "
        "outcome, so an imbalance in the index is one that could move the estimate. The check "
        "is only as informative as the covariates are predictive."
    )


def outcome_index_reading(result: TestOrNA, alpha: float) -> str:
    """Reading of the joint test that the instruments are unrelated to the outcome index."""
    if isinstance(result, NotApplicable):
        return _not_reported(result)
    level = _level_text(alpha)
    if result.p_value < alpha:
        return (
            f"The instruments are related to the outcome index (rejected at the {level} "
            "level): the observations they shift differ in characteristics that predict the "
            "outcome, which can bias the estimate unless the controls account for them."
        )
    return (
        f"No detectable relation between the instruments and the outcome index at the {level} "
        "level. This does not rule out a relation to what the covariates do not capture."
    )


def placebo_reading(result: TestOrNA, outcome: str, alpha: float) -> str:
    """Reading of the joint reduced-form test on a placebo outcome ("should be zero")."""
    if isinstance(result, NotApplicable):
        return _not_reported(result)
    level = _level_text(alpha)
    if result.p_value < alpha:
        return (
            f"The instruments shift {outcome}, which they should not (rejected at the {level} "
            "level)."
        )
    return f"No detectable effect of the instruments on {outcome} at the {level} level."


def placebo_tsls_reading(
    lower: float, upper: float, regressor: str, outcome: str, confidence_level: float
) -> str:
    """Reading of a placebo 2SLS interval: does it include zero, and what its width means."""
    level = fmt_pct(confidence_level)
    if lower <= 0.0 <= upper:
        return (
            f"The {level} interval for the 2SLS 'effect' of {regressor} on {outcome} includes "
            "zero; its width shows how large a placebo effect the data could miss."
        )
    return (
        f"The {level} interval for the 2SLS 'effect' of {regressor} on {outcome} excludes "
        "zero: the data are at odds with the zero effect that valid instruments imply."
    )


def balance_glance(joint: Sequence[tuple[str, TestOrNA]], alpha: float) -> str:
    """The balance line of "At a glance": the smallest joint-test p-value and its meaning.

    ``joint`` pairs each instrument's label with its joint balance test. With several
    tests, the smallest p-value is reported as such: one small p-value among several is
    more likely by chance than a single one.
    """
    applicable = [(name, t) for name, t in joint if isinstance(t, TestResult)]
    if not applicable:
        reasons = "; ".join(
            f"{name}: {t.reason}" for name, t in joint if isinstance(t, NotApplicable)
        )
        if not reasons:
            return "n/a: no joint balance test was computed"
        return f"n/a: no joint balance test applies ({reasons})"
    name, smallest = min(applicable, key=lambda pair: pair[1].p_value)
    level = _level_text(alpha)
    count = len(applicable)
    head = (
        f"Joint balance test of {name}: p {p_phrase(smallest.p_value)}."
        if count == 1
        else f"Smallest of {count} joint balance tests: p {p_phrase(smallest.p_value)}, for {name}."
    )
    if smallest.p_value < alpha:
        meaning = (
            f"The observed covariates predict this instrument at the {level} level: evidence "
            "against its being as good as random, unless the controls account for them."
        )
    else:
        noun = "the instrument is" if count == 1 else "no instrument is"
        meaning = (
            f"At the {level} level {noun} detectably related to the observed covariates; "
            "this says nothing about unobserved ones."
        )
    skipped = [name for name, t in joint if isinstance(t, NotApplicable)]
    if skipped:
        meaning += f" No joint test applies to {and_join(skipped)} (see the balance section)."
    return f"{head} {meaning}"
