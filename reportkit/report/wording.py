"""Plain-language sentences of the appendix, built from the results in Python.

The templates only place these sentences; choosing between wordings (singular or
plural, a test that rejects or not, a test that does not apply) happens here, where it
can be unit-tested. Readings are deliberately modest: a test that does not reject is
never described as showing that an assumption holds.
"""

from __future__ import annotations

from collections.abc import Mapping

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
    Conventions,
    Diagnostics,
    ModelDescription,
    NotApplicable,
    TestOrNA,
    TestResult,
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
