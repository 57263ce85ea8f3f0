"""What the instrument-strength and weak-instrument-robust parts of the appendix show.

Rows of the strength tables (each statistic with the criterion it is read against and the
outcome), the readings of the weak-instrument-robust results, and the pair of intervals
"At a glance" puts side by side. Chosen here, in Python, so that the templates only lay
them out and the choices can be unit-tested; numbers stay numbers, formatted by the
template filters.
"""

from __future__ import annotations

from dataclasses import dataclass

from reportkit.report import formatting, wording
from reportkit.results import (
    Coefficient,
    CriticalValue,
    EndogenousStrength,
    FirstStage,
    NotApplicable,
    Statistic,
    Strength,
    StudyResults,
    TestOrNA,
    TestResult,
    WeakIVRobust,
)


@dataclass(frozen=True)
class MeasureRow:
    """One row of a strength table: a statistic, what it is read against, the outcome.

    ``reason`` is set (and the other fields are blank) when the statistic does not apply;
    an empty ``outcome`` or ``covariance`` is shown as a dash (descriptive measures).
    """

    title: str
    value: float | None
    criterion: str
    outcome: str
    covariance: str
    critical_values: tuple[CriticalValue, ...] = ()
    reason: str | None = None
    reference: str = ""
    note: str = ""


@dataclass(frozen=True)
class StrengthBlock:
    """The strength table of one endogenous regressor."""

    label: str
    rows: list[MeasureRow]


@dataclass(frozen=True)
class WeakIVReadings:
    """The sentences of the weak-instrument-robust section, chosen in Python."""

    ar_zero: str
    clr_zero: str
    ar_set: str
    clr_set: str
    tf: str | None


@dataclass(frozen=True)
class ConventionalInterval:
    """The conventional 2SLS coefficient and the covariance its interval used."""

    coefficient: Coefficient
    covariance: str


@dataclass(frozen=True)
class GlanceInterval:
    """The conventional 2SLS interval beside the weak-instrument-robust (AR) set."""

    label: str
    conventional: ConventionalInterval | None
    robust: WeakIVRobust | NotApplicable


def _na_row(title: str, reason: str, reference: str = "") -> MeasureRow:
    return MeasureRow(title, None, "", "", "", reason=reason, reference=reference)


def _test_row(title: str, result: TestOrNA, alpha: float, reference: str = "") -> MeasureRow:
    if isinstance(result, NotApplicable):
        return _na_row(title, result.reason, reference)
    return MeasureRow(
        title,
        result.statistic,
        wording.test_criterion(result),
        wording.test_outcome(result, alpha),
        result.covariance,
        reference=reference,
    )


def endogenous_strength_rows(
    strength: EndogenousStrength, first_stage: FirstStage, n_endogenous: int, alpha: float
) -> list[MeasureRow]:
    """The strength measures of one endogenous regressor, each with its criterion."""
    rows = [
        MeasureRow("Partial R-squared", strength.partial_r2, wording.PARTIAL_R2_CRITERION, "", ""),
        MeasureRow(
            "Shea partial R-squared",
            strength.shea_partial_r2,
            wording.shea_criterion(n_endogenous),
            "",
            "",
            reference="Shea 1997",
        ),
        _test_row("First-stage F, main covariance", first_stage.f_main, alpha),
        _test_row("First-stage F, classical", first_stage.f_classical, alpha),
    ]
    eff = strength.effective_f
    if isinstance(eff, NotApplicable):
        rows.append(_na_row("Effective F", eff.reason, "Montiel Olea & Pflueger 2013"))
    else:
        rows.append(
            MeasureRow(
                "Effective F",
                eff.value,
                wording.effective_f_criterion(eff.k_eff),
                wording.exceeded_count(eff.critical_values),
                eff.covariance,
                tuple(eff.critical_values),
                reference=eff.reference,
            )
        )
    sw = strength.sanderson_windmeijer
    rows.append(
        _test_row(
            "Conditional F",
            sw,
            alpha,
            sw.reference if isinstance(sw, TestResult) else "Sanderson & Windmeijer 2016",
        )
    )
    return rows


def _statistic_row(
    statistic: Statistic | NotApplicable,
    title: str,
    reference: str,
    criterion: str,
    outcome: str,
) -> MeasureRow:
    if isinstance(statistic, NotApplicable):
        return _na_row(title, statistic.reason, reference)
    return MeasureRow(
        statistic.name,
        statistic.value,
        criterion,
        outcome,
        statistic.covariance,
        reference=statistic.reference,
        note=_full_stop(statistic.note.strip()),
    )


def _full_stop(text: str) -> str:
    return text if not text or text.endswith((".", "!", "?")) else f"{text}."


def system_strength_rows(strength: Strength, n_endogenous: int, alpha: float) -> list[MeasureRow]:
    """Statistics of all the first stages together, each with its criterion."""
    stock_yogo = strength.stock_yogo
    cd_outcome = ""
    if not isinstance(stock_yogo, NotApplicable):
        cd_outcome = wording.exceeded_count(stock_yogo.rows)
    kp_lm = strength.kleibergen_paap_lm
    return [
        _statistic_row(
            strength.cragg_donald,
            "Cragg-Donald F",
            "Cragg & Donald 1993",
            wording.cragg_donald_criterion(stock_yogo),
            cd_outcome,
        ),
        _statistic_row(
            strength.kleibergen_paap_f,
            "Kleibergen-Paap rk Wald F",
            "Kleibergen & Paap 2006",
            wording.kleibergen_paap_f_criterion(n_endogenous),
            "",
        ),
        _test_row(
            kp_lm.name if isinstance(kp_lm, TestResult) else "Kleibergen-Paap rk LM",
            kp_lm,
            alpha,
            kp_lm.reference if isinstance(kp_lm, TestResult) else "Kleibergen & Paap 2006",
        ),
    ]


def strength_blocks(results: StudyResults, alpha: float) -> list[StrengthBlock]:
    """One strength table per endogenous regressor, matched to its first stage by name."""
    first_stages = {fs.endogenous: fs for fs in results.first_stages}
    n_endogenous = len(results.strength.per_endogenous)
    blocks = []
    for strength in results.strength.per_endogenous:
        if strength.endogenous not in first_stages:
            raise ValueError(
                f"the strength results name '{strength.endogenous}', which has no first stage"
            )
        rows = endogenous_strength_rows(
            strength, first_stages[strength.endogenous], n_endogenous, alpha
        )
        blocks.append(StrengthBlock(strength.label, rows))
    return blocks


def two_sls_coefficient(results: StudyResults, name: str) -> ConventionalInterval | None:
    """The conventional 2SLS coefficient of ``name``, or None when 2SLS was not estimated."""
    for result in results.estimates:
        if result.estimator == "2sls":
            for coef in result.coefficients:
                if coef.name == name:
                    return ConventionalInterval(coef, result.covariance)
    return None


def weak_iv_readings(weak_iv: WeakIVRobust, confidence_level: float) -> WeakIVReadings:
    """The readings of each weak-instrument-robust result."""
    alpha = round(1.0 - confidence_level, 10)
    tf = weak_iv.tf
    return WeakIVReadings(
        ar_zero=wording.zero_test_reading(weak_iv.ar_test_zero, alpha),
        clr_zero=wording.zero_test_reading(weak_iv.clr_test_zero, alpha),
        ar_set=wording.set_reading(weak_iv.anderson_rubin),
        clr_set=wording.set_reading(weak_iv.clr),
        tf=None if isinstance(tf, NotApplicable) else wording.tf_reading(tf, confidence_level),
    )


def glance_interval(results: StudyResults) -> GlanceInterval:
    """The 2SLS interval and the AR set of the coefficient weak-IV inference is about.

    When weak-IV inference was not computed, the first endogenous regressor is shown with
    the reason.
    """
    weak_iv = results.weak_iv
    if isinstance(weak_iv, WeakIVRobust):
        return GlanceInterval(
            weak_iv.label, two_sls_coefficient(results, weak_iv.endogenous), weak_iv
        )
    name = results.model.endogenous[0]
    return GlanceInterval(
        formatting.label(name, results.model.labels), two_sls_coefficient(results, name), weak_iv
    )
