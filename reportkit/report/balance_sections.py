"""What the section "Is the instrument as good as random?" shows, chosen in Python.

One table of covariate means per instrument (the groups of the instrument as columns), the
joint tests with their readings, the outcome index, the placebo outcomes and the line of
"At a glance". Values that could not be computed (an empty group's mean, a difference
without a first or last mean) are kept as ``None`` here and shown by the template as a
dash, each explained by a note built below: never an empty cell. Numbers stay numbers;
the template formats them with the filters of ``reportkit.report.formatting``.

Two subsections close the section when the results hold them: the falsification
subsamples (rows where the instruments should not move the treatment; first stage and
reduced form there) and the complier analysis (shares of compliers, always-takers and
never-takers, Imbens & Angrist 1994; complier covariate means by Abadie's 2003 kappa
weights; the testable implication of the LATE assumptions, Kitagawa 2015). Their readings
are chosen here and stay modest: a check that finds nothing is never said to establish an
assumption.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass

from reportkit.report import formatting, wording
from reportkit.results import (
    Balance,
    BalanceCell,
    Coefficient,
    ComplierAnalysis,
    ComplierMean,
    DensityBin,
    FalsificationResult,
    InstrumentCoefficient,
    LateImplication,
    NotApplicable,
    OutcomeIndex,
    PlaceboResult,
    StudyResults,
    TestOrNA,
    TestResult,
)

# Group names up to this many characters are kept on one line in the table header.
COMPACT_GROUP_NAME = 16
# Stands for the instrument's value in group names such as "1.8 < x <= 3.4".
VALUE_SYMBOL = "x"


@dataclass(frozen=True)
class MeanEntry:
    """A covariate's mean in one group of the instrument; ``mean`` None when not computable."""

    group: str
    mean: float | None
    n: int


@dataclass(frozen=True)
class BalanceTableRow:
    """One covariate in the table of one instrument."""

    label: str
    kind: str
    n_used: int
    means: tuple[MeanEntry, ...]
    difference: float | None
    std_difference: float | None
    beyond_band: bool
    unconditional: InstrumentCoefficient | NotApplicable
    conditional: InstrumentCoefficient | NotApplicable


@dataclass(frozen=True)
class BalanceTable:
    """The covariate means of one instrument, with the notes that explain its dashes."""

    instrument: str
    label: str
    groups: tuple[str, ...]
    compact_groups: bool
    show_unconditional: bool
    show_conditional: bool
    rows: tuple[BalanceTableRow, ...]
    notes: tuple[str, ...]

    @property
    def coefficient_columns(self) -> int:
        return int(self.show_unconditional) + int(self.show_conditional)


@dataclass(frozen=True)
class JointEntry:
    label: str
    test: TestOrNA
    reading: str


@dataclass(frozen=True)
class IndexView:
    index: OutcomeIndex
    intro: str
    reading: str


@dataclass(frozen=True)
class PlaceboTsls:
    coefficient: Coefficient
    reading: str


@dataclass(frozen=True)
class PlaceboBlock:
    placebo: PlaceboResult
    reading: str
    tsls: tuple[PlaceboTsls, ...] | NotApplicable


@dataclass(frozen=True)
class BalanceView:
    """Everything the balance section lays out when balance was computed."""

    tables: tuple[BalanceTable, ...]
    joint: tuple[JointEntry, ...]
    index: IndexView | NotApplicable
    placebo: tuple[PlaceboBlock, ...]
    covariance: str
    conditioning: str
    coefficient_guide: str
    falsification: FalsificationView | None = None
    compliers: ComplierView | None = None


def finite_or_none(value: float | None) -> float | None:
    """A value to show, or None (shown as a dash) when it is missing or not finite."""
    return value if value is not None and math.isfinite(value) else None


def beyond_band(std_difference: float | None) -> bool:
    """Is a standardized difference outside the rule-of-thumb band (common practice, no source)?"""
    value = finite_or_none(std_difference)
    return value is not None and abs(value) > wording.STD_DIFFERENCE_BAND


def instrument_order(balance: Balance) -> list[str]:
    """The instruments of the balance rows, in the order of the first row's cells.

    Every row must hold exactly one cell per instrument: a row that lacks one is an error of
    the computation, not something to render around.
    """
    if not balance.rows:
        return []
    order = [cell.instrument for cell in balance.rows[0].cells]
    for row in balance.rows:
        names = [cell.instrument for cell in row.cells]
        if sorted(names) != sorted(order) or len(set(names)) != len(names):
            raise ValueError(
                f"the balance row of '{row.covariate}' has cells for {', '.join(names) or 'none'}"
                f"; every row needs one cell for each of {', '.join(order)}"
            )
    return order


def _cell(cells: list[BalanceCell], instrument: str) -> BalanceCell:
    return next(cell for cell in cells if cell.instrument == instrument)


def _dash_notes(label: str, cell: BalanceCell, shown: tuple[str, ...]) -> list[str]:
    """One note per value shown as a dash, saying why it is missing (groups as shown)."""
    notes = [
        f"{formatting.upper_first(label)}, group {name}: no rows with this covariate "
        "(n = 0), so no mean."
        if g.n == 0
        else f"{formatting.upper_first(label)}, group {name}: mean not computed."
        for g, name in zip(cell.groups, shown, strict=True)
        if finite_or_none(g.mean) is None
    ]
    first, last = cell.groups[0].mean, cell.groups[-1].mean
    ends_missing = finite_or_none(first) is None or finite_or_none(last) is None
    if finite_or_none(cell.difference) is None:
        why = "the first or last group has no mean" if ends_missing else "not computed"
        notes.append(
            f"{formatting.upper_first(label)}: no difference or standardized difference ({why})."
        )
    elif finite_or_none(cell.std_difference) is None:
        notes.append(
            f"{formatting.upper_first(label)}: no standardized difference (the pooled "
            "standard deviation of the first and last groups is zero or undefined)."
        )
    return notes


def short_group_names(
    names: tuple[str, ...], instrument: str, label: str
) -> tuple[tuple[str, ...], bool]:
    """Group names with the instrument's label (or column name) written as "x".

    Interval groups name the instrument ("1.80 < distance to the centre (km) <= 3.40");
    in a table header that repeats a long label in every column, so it is replaced by
    ``VALUE_SYMBOL`` where it stands as a whole word, and a note says what x stands for.
    Returns the names and whether any was shortened (or already used x).
    """
    patterns = [re.escape(text) for text in dict.fromkeys((label, instrument)) if text.strip()]
    whole = re.compile(r"(^|\s)(" + "|".join(patterns) + r")(?=\s|$)")
    symbol = re.compile(r"(^|\s)" + re.escape(VALUE_SYMBOL) + r"(?=\s|$)")
    shortened = tuple(whole.sub(lambda m: m.group(1) + VALUE_SYMBOL, name) for name in names)
    uses_symbol = any(symbol.search(name) for name in shortened)
    return shortened, uses_symbol


def _common_reason(entries: list[InstrumentCoefficient | NotApplicable]) -> str | None:
    """The reason shared by every entry of a column when none applies, else None."""
    reasons = {e.reason for e in entries if isinstance(e, NotApplicable)}
    if entries and len(reasons) == 1 and all(isinstance(e, NotApplicable) for e in entries):
        return reasons.pop()
    return None


def balance_table(balance: Balance, instrument: str, labels: Mapping[str, str]) -> BalanceTable:
    """The table of covariate means across the groups of one instrument.

    A coefficient column in which nothing applies, for one shared reason (no fixed
    effects to condition on, say), is left out and its reason given once in the notes.
    """
    label = formatting.label(instrument, labels)
    rows: list[BalanceTableRow] = []
    cells: list[tuple[str, BalanceCell]] = []
    groups: tuple[str, ...] | None = None
    for row in balance.rows:
        cell = _cell(row.cells, instrument)
        names = tuple(g.group for g in cell.groups)
        if len(names) < 2:
            raise ValueError(
                f"the balance cell of '{row.covariate}' and '{instrument}' has "
                f"{len(names)} group(s); a comparison needs at least two"
            )
        if groups is None:
            groups = names
        elif names != groups:
            raise ValueError(
                f"the balance cells of '{instrument}' use different groups: "
                f"{', '.join(groups)} and, for '{row.covariate}', {', '.join(names)}"
            )
        rows.append(
            BalanceTableRow(
                label=row.label,
                kind=wording.COVARIATE_KINDS[row.kind],
                n_used=row.n_used,
                means=tuple(MeanEntry(g.group, finite_or_none(g.mean), g.n) for g in cell.groups),
                difference=finite_or_none(cell.difference),
                std_difference=finite_or_none(cell.std_difference),
                beyond_band=beyond_band(cell.std_difference),
                unconditional=cell.unconditional,
                conditional=cell.conditional,
            )
        )
        cells.append((row.label, cell))
    shown, uses_symbol = short_group_names(groups or (), instrument, label)
    dash_notes = [note for name, cell in cells for note in _dash_notes(name, cell, shown)]
    notes: list[str] = []
    if shown:
        where = f", written with {VALUE_SYMBOL} for its value" if uses_symbol else ""
        notes.append(
            f"Groups of {label}{where}; the difference is the mean in the last group "
            f"({shown[-1]}) minus the first ({shown[0]})."
        )
    hidden = {
        "unconditional": _common_reason([r.unconditional for r in rows]),
        "conditional": _common_reason([r.conditional for r in rows]),
    }
    notes += [
        f"{formatting.upper_first(which)} coefficients: n/a: {reason}"
        f"{'' if reason.endswith('.') else '.'}"
        for which, reason in hidden.items()
        if reason is not None
    ]
    if dash_notes:
        notes.append("A dash marks a value that could not be computed:")
    return BalanceTable(
        instrument=instrument,
        label=label,
        groups=shown,
        compact_groups=all(len(name) <= COMPACT_GROUP_NAME for name in shown),
        show_unconditional=hidden["unconditional"] is None,
        show_conditional=hidden["conditional"] is None,
        rows=tuple(rows),
        notes=tuple(notes + dash_notes),
    )


def placebo_block(placebo: PlaceboResult, alpha: float, confidence_level: float) -> PlaceboBlock:
    """A placebo outcome's reduced form and 2SLS, with readings ("should be zero")."""
    tsls: tuple[PlaceboTsls, ...] | NotApplicable
    if isinstance(placebo.tsls, NotApplicable):
        tsls = placebo.tsls
    else:
        tsls = tuple(
            PlaceboTsls(
                coef,
                wording.placebo_tsls_reading(
                    coef.ci_lower, coef.ci_upper, coef.label, placebo.label, confidence_level
                ),
            )
            for coef in placebo.tsls
        )
    return PlaceboBlock(
        placebo, wording.placebo_reading(placebo.joint_test, placebo.label, alpha), tsls
    )


def balance_view(results: StudyResults, alpha: float) -> BalanceView | None:
    """The balance section's content, or None when balance was not computed."""
    balance = results.balance
    if isinstance(balance, NotApplicable):
        return None
    labels = results.model.labels
    index: IndexView | NotApplicable = balance.outcome_index
    if isinstance(balance.outcome_index, OutcomeIndex):
        index = IndexView(
            balance.outcome_index,
            wording.outcome_index_intro(balance.outcome_index.r2_prediction),
            wording.outcome_index_reading(balance.outcome_index.joint_test, alpha),
        )
    tables = tuple(balance_table(balance, name, labels) for name in instrument_order(balance))
    return BalanceView(
        tables=tables,
        joint=tuple(
            JointEntry(j.label, j.test, wording.joint_balance_reading(j.test, j.label, alpha))
            for j in balance.joint
        ),
        index=index,
        placebo=tuple(
            placebo_block(p, alpha, results.conventions.confidence_level) for p in balance.placebo
        ),
        covariance=balance.covariance,
        conditioning=balance.conditioning,
        coefficient_guide=wording.coefficient_guide(
            balance.conditioning,
            len(instrument_order(balance)),
            any(table.show_conditional for table in tables),
        ),
        falsification=falsification_view(results, alpha),
        compliers=complier_view(results, alpha),
    )


def balance_glance(results: StudyResults, alpha: float) -> str:
    """The balance line of "At a glance" (see ``wording.balance_glance``), or n/a with why."""
    balance = results.balance
    if isinstance(balance, NotApplicable):
        return f"n/a: {balance.reason}"
    return wording.balance_glance([(j.label, j.test) for j in balance.joint], alpha)


# --- falsification subsamples ----------------------------------------------------------

# Anchors of the two closing subsections, and their headings. Evidence links of the
# disclosures point at these anchors (``reportkit.disclosures`` repeats the ids).
FALSIFICATION_ID = "falsification-subsamples"
COMPLIERS_ID = "compliers"
SUBSECTION_TITLES = {
    FALSIFICATION_ID: "Falsification subsamples: rows where the instruments should not act",
    COMPLIERS_ID: "Compliers: whose treatment the instrument changes",
}

FALSIFICATION_INTRO = (
    "In each subsample below the design implies that the instruments cannot move the "
    "treatment. There the first stage should be zero, and then the instruments can move the "
    "outcome only by another path: a reduced form far from zero is evidence against the "
    "exclusion restriction. The subsamples are the authors' choice; their filters are applied "
    "to the data file instead of the main sample's filters."
)
FALSIFICATION_CAUTION = (
    "A reduced form near zero in a falsification subsample is consistent with the exclusion "
    "restriction but cannot prove it: a direct effect too small for these rows to detect, or "
    "one that acts only where the instruments also move the treatment, would go unnoticed."
)


@dataclass(frozen=True)
class FalsificationStage:
    """The first stage of one endogenous regressor in a falsification subsample."""

    label: str
    coefficients: tuple[InstrumentCoefficient, ...]
    joint_test: TestOrNA


@dataclass(frozen=True)
class FalsificationBlock:
    """One falsification subsample as shown.

    ``not_estimated`` holds the reason when nothing could be estimated (one reason for the
    first stage, the reduced form and its test); ``serves`` is False when the first stage is
    detectably non-zero, so that the subsample does not serve as a falsification test.
    """

    result: FalsificationResult
    stages: tuple[FalsificationStage, ...] | NotApplicable
    not_estimated: str | None
    serves: bool
    first_stage_reading: str
    reduced_form_reading: str


@dataclass(frozen=True)
class FalsificationView:
    anchor: str
    title: str
    intro: str
    outcome_label: str
    blocks: tuple[FalsificationBlock, ...]
    caution: str


def _detected(tests: list[TestOrNA], alpha: float) -> bool | None:
    """True if any applicable test rejects at ``alpha``, False if none does, None if no test
    applies."""
    applied = [t for t in tests if isinstance(t, TestResult)]
    if not applied:
        return None
    return any(t.p_value < alpha for t in applied)


def _stage_tests(result: FalsificationResult) -> list[TestOrNA]:
    if isinstance(result.first_stages, NotApplicable):
        return [result.first_stages]
    return [stage.joint_test for stage in result.first_stages]


def _reasons(tests: list[TestOrNA]) -> str:
    reasons = dict.fromkeys(t.reason.rstrip(".") for t in tests if isinstance(t, NotApplicable))
    return "; ".join(reasons) or "no test was computed"


def falsification_readings(
    result: FalsificationResult, treatment: str, outcome: str, alpha: float
) -> tuple[bool, str, str]:
    """Whether the subsample serves as a falsification test, and the readings of its first
    stage and its reduced form.

    The design expects no first stage here. A first stage rejected at ``alpha`` means the
    subsample does not serve as a test; otherwise a reduced form rejected at ``alpha`` is
    evidence against the exclusion restriction, and one not rejected is consistent with it
    without proving it (how much it could detect depends on the rows available).
    """
    level = fmt_level_pct(alpha)
    stage_tests = _stage_tests(result)
    first = _detected(stage_tests, alpha)
    reduced = _detected([result.reduced_form_test], alpha)
    rows = formatting.fmt_int(result.n_used)
    if first is True:
        return (
            False,
            f"The instruments move {treatment} in these rows (first stage rejected at the "
            f"{level} level), although the design expects them not to.",
            "So this subsample does not serve as a falsification test: its reduced form mixes "
            f"any direct effect of the instruments on {outcome} with their effect through "
            f"{treatment}, and says nothing about the exclusion restriction.",
        )
    if first is False:
        skipped = [t for t in stage_tests if isinstance(t, NotApplicable)]
        first_reading = (
            f"As the design expects, no first stage is detected in these rows (not rejected at "
            f"the {level} level, {rows} rows). A first stage too small to detect cannot be "
            "ruled out."
        )
        if skipped:
            first_reading += f" Not estimated for every regressor: {_reasons(skipped)}."
        moved = (
            f"Yet the instruments shift {outcome} here (reduced form rejected at the {level} "
            f"level) without a detectable path through {treatment}: evidence against the "
            "exclusion restriction (or against the instruments' being as good as random in "
            "these rows)."
        )
        unmoved = "The reduced form is not detectably different from zero either"
    else:
        first_reading = (
            f"The first stage could not be estimated in these rows ({_reasons(stage_tests)}), "
            f"so the data cannot confirm that the instruments leave {treatment} unmoved here."
        )
        moved = (
            f"If the design is right that they do, the instruments shift {outcome} here "
            f"(reduced form rejected at the {level} level) by another path: evidence against "
            "the exclusion restriction (or against the instruments' being as good as random in "
            "these rows)."
        )
        unmoved = (
            "If the design is right that they do, the reduced form is not detectably different "
            "from zero"
        )
    if reduced is None:
        return (
            True,
            first_reading,
            f"The reduced-form test could not be computed "
            f"({_reasons([result.reduced_form_test])}), so this subsample gives no evidence "
            "on the exclusion restriction.",
        )
    if reduced:
        return True, first_reading, moved
    return (
        True,
        first_reading,
        f"{unmoved} (at the {level} level). This is consistent with the exclusion restriction "
        f"but cannot prove it: with {rows} rows, only direct effects that are large relative "
        "to the standard errors above would be detected.",
    )


def fmt_level_pct(alpha: float) -> str:
    """A test level as a percentage: 0.05 -> "5%", 0.025 -> "2.5%"."""
    return formatting.fmt_pct(alpha, digits=0 if round(100 * alpha, 6).is_integer() else 1)


def _not_estimated(result: FalsificationResult) -> str | None:
    """The one reason shown when neither the first stage nor the reduced form was estimated."""
    parts = [result.first_stages, result.reduced_form, result.reduced_form_test]
    if all(isinstance(p, NotApplicable) for p in parts):
        reasons = {p.reason for p in parts if isinstance(p, NotApplicable)}
        if len(reasons) == 1:
            return reasons.pop()
    return None


def falsification_block(
    result: FalsificationResult, treatment: str, outcome: str, alpha: float
) -> FalsificationBlock:
    """One falsification subsample with its readings (see ``falsification_readings``)."""
    stages: tuple[FalsificationStage, ...] | NotApplicable
    if isinstance(result.first_stages, NotApplicable):
        stages = result.first_stages
    else:
        stages = tuple(
            FalsificationStage(s.label, tuple(s.coefficients), s.joint_test)
            for s in result.first_stages
        )
    serves, first_reading, reduced_reading = falsification_readings(
        result, treatment, outcome, alpha
    )
    return FalsificationBlock(
        result=result,
        stages=stages,
        not_estimated=_not_estimated(result),
        serves=serves,
        first_stage_reading=first_reading,
        reduced_form_reading=reduced_reading,
    )


def falsification_view(results: StudyResults, alpha: float) -> FalsificationView | None:
    """The falsification subsection, or None when balance or the subsamples are absent."""
    balance = results.balance
    if isinstance(balance, NotApplicable) or not balance.falsification:
        return None
    model = results.model
    treatment = formatting.and_join(formatting.label(n, model.labels) for n in model.endogenous)
    outcome = formatting.label(model.outcome, model.labels)
    return FalsificationView(
        anchor=FALSIFICATION_ID,
        title=SUBSECTION_TITLES[FALSIFICATION_ID],
        intro=FALSIFICATION_INTRO,
        outcome_label=outcome,
        blocks=tuple(
            falsification_block(f, treatment, outcome, alpha) for f in balance.falsification
        ),
        caution=FALSIFICATION_CAUTION,
    )


# --- compliers -------------------------------------------------------------------------

# A share this close to zero is zero up to rounding: no unit of that type.
NO_SHARE = 1e-12

COMPLIER_TYPES_INTRO = (
    "With a binary instrument and a binary treatment, each unit is of one of four types: "
    "compliers take the treatment only when the instrument is on, always-takers take it "
    "either way, never-takers take it neither way, and defiers do the opposite of what the "
    "instrument says. Assuming monotonicity (no defiers), the shares of the other three types "
    "follow from the shares treated with the instrument on and off (Imbens & Angrist 1994), "
    "and the compliers' covariate means from weights that single them out (Abadie 2003), "
    "although no individual complier can be identified."
)
LATE_IMPLICATION_INTRO = (
    "Under the LATE assumptions (exclusion, independence and monotonicity), the share of the "
    "rows that are compliers with an outcome in a given range can be computed twice: among "
    "the treated, as the share treated with the outcome in that range with the instrument on "
    "minus the same share with it off; among the untreated, the other way round. Both are "
    "shares of people, so neither can be negative (Imbens & Rubin 1997). The figure shows "
    "them per bin of the outcome, and the test of Kitagawa (2015) checks all bins together."
)
LATE_IMPLICATION_CAUTION = (
    "Negative implied masses are evidence against the LATE assumptions (exclusion, "
    "independence or monotonicity), without saying which one fails. Finding none does not "
    "establish them: passing does not establish monotonicity, because a violation that "
    "leaves every implied mass non-negative cannot be detected."
)


@dataclass(frozen=True)
class ShareRow:
    """One type of unit: its share (and standard error when computed) and how it is found."""

    name: str
    share: float
    std_error: float | None
    who: str
    estimated_as: str


@dataclass(frozen=True)
class ComplierMeanRow:
    """A covariate's mean in the full sample and per type; None is shown as a dash."""

    label: str
    full_sample: float | None
    compliers: float | None
    compliers_se: float | None
    always_takers: float | None
    never_takers: float | None


@dataclass(frozen=True)
class LateImplicationView:
    """The LATE implication as shown; ``distribution`` is empty when the test does not apply."""

    implication: LateImplication
    bins: int
    distribution: str
    negative: tuple[str, ...]
    reading: str
    intro: str = LATE_IMPLICATION_INTRO
    caution: str = LATE_IMPLICATION_CAUTION


@dataclass(frozen=True)
class ComplierAnalysisView:
    analysis: ComplierAnalysis
    show_treatment_label: bool
    shares: tuple[ShareRow, ...]
    share_notes: tuple[str, ...]
    reading: str
    means: tuple[ComplierMeanRow, ...]
    mean_notes: tuple[str, ...]
    late: LateImplicationView | NotApplicable


@dataclass(frozen=True)
class ComplierView:
    """The complier subsection: the analysis, or the reason it does not apply."""

    anchor: str
    title: str
    intro: str
    content: ComplierAnalysisView | NotApplicable


def share_rows(analysis: ComplierAnalysis) -> tuple[ShareRow, ...]:
    """Compliers, always-takers and never-takers, each with how its share is estimated."""
    s = analysis.shares
    on, off = formatting.fmt_num(s.treated_share_on), formatting.fmt_num(s.treated_share_off)
    rows_on, rows_off = formatting.fmt_int(s.n_on), formatting.fmt_int(s.n_off)
    return (
        ShareRow(
            "Compliers",
            s.compliers,
            finite_or_none(s.compliers_se),
            "treated with the instrument on, untreated with it off",
            f"share treated with the instrument on ({on}, {rows_on} rows) minus off ({off}, "
            f"{rows_off} rows)",
        ),
        ShareRow(
            "Always-takers",
            s.always_takers,
            None,
            "treated whatever the instrument",
            f"share treated with the instrument off ({off})",
        ),
        ShareRow(
            "Never-takers",
            s.never_takers,
            None,
            "untreated whatever the instrument",
            f"share untreated with the instrument on (1 minus {on})",
        ),
    )


def treatment_label_differs(analysis: ComplierAnalysis) -> bool:
    """Does the treatment's label say more than its definition ("any tutoring" against
    "hours > 0")? When it only repeats it, the definition is shown once."""
    label = analysis.treatment_label.strip()
    return bool(label) and label != analysis.treatment.strip()


def complier_reading(analysis: ComplierAnalysis) -> str:
    """What the shares mean for the LATE; modest about monotonicity."""
    s = analysis.shares
    treated = (
        f"{analysis.treatment_label}: {analysis.treatment}"
        if treatment_label_differs(analysis)
        else analysis.treatment
    )
    if s.compliers <= NO_SHARE:
        return (
            f"The share treated ({treated}) is not higher with {analysis.instrument_label} on than "
            f"off ({formatting.fmt_num(s.treated_share_on)} against "
            f"{formatting.fmt_num(s.treated_share_off)}), so no compliers are identified in "
            "this direction: the shares and covariate means here describe no group of units."
        )
    return (
        f"The LATE is the average effect for the compliers, about "
        f"{formatting.fmt_pct(s.compliers)} of the rows used: those for whom "
        f"{analysis.instrument_label} changes whether they are treated ({treated}). It need "
        "not equal the effect for always-takers "
        f"({formatting.fmt_pct(s.always_takers)}) or never-takers "
        f"({formatting.fmt_pct(s.never_takers)}), and the compliers may differ from the full "
        "sample, as the table of covariate means shows. These types are identified only under "
        "monotonicity (no defiers); without it these shares and the covariate means below "
        "describe no group of units."
    )


def _mean_notes(analysis: ComplierAnalysis) -> list[str]:
    """One note per value shown as a dash, and for complier means without a standard error."""
    empty = {
        "always-takers": analysis.shares.always_takers <= NO_SHARE,
        "never-takers": analysis.shares.never_takers <= NO_SHARE,
        "compliers": analysis.shares.compliers <= NO_SHARE,
    }
    notes: list[str] = []
    for m in analysis.means:
        name = formatting.upper_first(m.label)
        for group, value in (
            ("full sample", m.full_sample),
            ("compliers", m.compliers),
            ("always-takers", m.always_takers),
            ("never-takers", m.never_takers),
        ):
            if finite_or_none(value) is not None:
                continue
            why = f"no {group} in the sample" if empty.get(group) else "not computed"
            notes.append(f"{name}, {group}: {why}, so no mean.")
        if finite_or_none(m.compliers) is not None and finite_or_none(m.compliers_se) is None:
            notes.append(f"{name}, compliers: no bootstrap standard error was computed.")
    return notes


def _mean_row(m: ComplierMean) -> ComplierMeanRow:
    return ComplierMeanRow(
        label=m.label,
        full_sample=finite_or_none(m.full_sample),
        compliers=finite_or_none(m.compliers),
        compliers_se=finite_or_none(m.compliers_se),
        always_takers=finite_or_none(m.always_takers),
        never_takers=finite_or_none(m.never_takers),
    )


def bin_text(b: DensityBin) -> str:
    """A bin of the outcome in words: "40.0 to 46.7", or "value 3.00" for a one-value bin."""
    if b.lower == b.upper:
        return f"value {formatting.fmt_num(b.lower)}"
    return f"{formatting.fmt_num(b.lower)} to {formatting.fmt_num(b.upper)}"


def negative_bands(implication: LateImplication) -> tuple[str, ...]:
    """The bands lying wholly below zero, as "treated, 40.0 to 46.7" (treated first)."""
    treated = [f"treated, {bin_text(b)}" for b in implication.bins if b.treated_high < 0]
    untreated = [f"untreated, {bin_text(b)}" for b in implication.bins if b.untreated_high < 0]
    return tuple(treated + untreated)


def distribution_text(test: TestResult, draws: int) -> str:
    """A test's reference distribution in words; bootstrap tests name their draws."""
    if test.distribution == "bootstrap":
        return f"bootstrap, {formatting.fmt_int(draws)} draws"
    return formatting.fmt_distribution(test)


def late_implication_reading(implication: LateImplication, alpha: float) -> str:
    """Reading of the negative bins and the Kitagawa (2015) test; never claims the LATE
    assumptions hold."""
    level = fmt_level_pct(alpha)
    band = formatting.fmt_pct(implication.band_level)
    count, total = implication.negative_bins, len(implication.bins)
    bins = f"{count} of {total} bins" if count != 1 else f"1 of {total} bins"
    verb = "has" if count == 1 else "have"
    test = implication.test
    if isinstance(test, NotApplicable):
        head = f"The Kitagawa test could not be computed ({test.reason.rstrip('.')})."
        if count:
            return (
                f"{head} {formatting.upper_first(bins)} {verb} a {band} band wholly below zero: "
                "evidence against the LATE assumptions, although pointwise bands over many "
                "bins can fall below zero by chance."
            )
        return f"{head} No bin's {band} band lies wholly below zero."
    p = formatting.p_phrase(test.p_value)
    if test.p_value < alpha and count:
        return (
            f"{formatting.upper_first(bins)} {verb} a {band} band wholly below zero, and the "
            f"Kitagawa test rejects at the {level} level (p {p}): the implied complier masses "
            "are negative where the LATE assumptions say they cannot be. This is evidence "
            "against at least one of exclusion, independence and monotonicity; the data do "
            "not say which."
        )
    if test.p_value < alpha:
        return (
            f"No single bin's {band} band lies wholly below zero, but the Kitagawa test, which "
            f"weighs all bins and their unions together, rejects at the {level} level (p {p}): "
            "evidence against at least one of exclusion, independence and monotonicity."
        )
    if count:
        return (
            f"{formatting.upper_first(bins)} {verb} a {band} band wholly below zero, but the "
            f"bands are pointwise: over {total} bins in two panels some can fall below zero by "
            f"chance, and the Kitagawa test, which accounts for this, does not reject at the "
            f"{level} level (p {p}). Treat those bins as a warning, not as a finding."
        )
    return (
        f"No bin's {band} band lies wholly below zero, and the Kitagawa test does not reject "
        f"at the {level} level (p {p}). This is consistent with the LATE assumptions but does "
        "not establish them."
    )


def late_implication_view(
    implication: LateImplication | NotApplicable, alpha: float
) -> LateImplicationView | NotApplicable:
    """The implication with its bands below zero listed and its reading (n/a passed on)."""
    if isinstance(implication, NotApplicable):
        return implication
    test = implication.test
    return LateImplicationView(
        implication=implication,
        bins=len(implication.bins),
        distribution=(
            distribution_text(test, implication.draws) if isinstance(test, TestResult) else ""
        ),
        negative=negative_bands(implication),
        reading=late_implication_reading(implication, alpha),
    )


def complier_analysis_view(analysis: ComplierAnalysis, alpha: float) -> ComplierAnalysisView:
    """Shares, covariate means and the LATE implication, with notes and readings."""
    share_notes = [
        "Always-takers and never-takers: shares without standard errors (only the complier "
        "share is bootstrapped)."
    ]
    if finite_or_none(analysis.shares.compliers_se) is None:
        share_notes.append("Compliers: no bootstrap standard error was computed.")
    else:
        share_notes.append(
            f"Standard error from {formatting.fmt_int(analysis.draws)} bootstrap draws (seed "
            f"{analysis.seed})."
        )
    return ComplierAnalysisView(
        analysis=analysis,
        show_treatment_label=treatment_label_differs(analysis),
        shares=share_rows(analysis),
        share_notes=tuple(share_notes),
        reading=complier_reading(analysis),
        means=tuple(_mean_row(m) for m in analysis.means),
        mean_notes=tuple(_mean_notes(analysis)),
        late=late_implication_view(analysis.late_implication, alpha),
    )


def complier_view(results: StudyResults, alpha: float) -> ComplierView | None:
    """The complier subsection; None when the spec defines no binary treatment."""
    balance = results.balance
    if isinstance(balance, NotApplicable) or balance.compliers is None:
        return None
    content: ComplierAnalysisView | NotApplicable = (
        balance.compliers
        if isinstance(balance.compliers, NotApplicable)
        else complier_analysis_view(balance.compliers, alpha)
    )
    return ComplierView(
        anchor=COMPLIERS_ID,
        title=SUBSECTION_TITLES[COMPLIERS_ID],
        intro=COMPLIER_TYPES_INTRO,
        content=content,
    )
