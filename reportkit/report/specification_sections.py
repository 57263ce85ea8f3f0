"""What the section "Across specifications" shows, chosen in Python.

The cross-specification table in the layout of a paper's main table (one column per
specification, "Main" first; the headline coefficient with its standard error below and
its interval, the other estimators, strength, the Anderson-Rubin set, the
over-identification and endogeneity tests, rows used, and what each column changes), a
reading that does not overclaim, and one block per specification. The columns are built
once here (``table_columns``) and shared with the CSV and LaTeX exports, so that the
appendix and the exported tables show the same numbers. Numbers stay numbers, except
inside readings; the template formats them with the filters of
``reportkit.report.formatting``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

from reportkit.report import wording
from reportkit.report.formatting import and_join, fmt_int, fmt_num, fmt_pct, fmt_set
from reportkit.results import (
    Coefficient,
    ConfidenceSet,
    EstimatorResult,
    NotApplicable,
    SetOrNA,
    SpecificationResult,
    SpecificationSetting,
    SpecificationStrength,
    StudyResults,
    TestOrNA,
    TestResult,
    WeakIVRobust,
)

MAIN_NAME = "Main"
SPECIFICATIONS_SECTION_ID = "specifications"
SPECIFICATIONS_SECTION_TITLE = "Across specifications"
# The order in which an estimator is chosen as the headline row (as in "Main estimates").
HEADLINE_ORDER = ("2sls", "liml", "gmm", "ols")
ESTIMATOR_ORDER = ("ols", "2sls", "liml", "gmm")
# Setting rows always shown; the others only when some column changes them.
ALWAYS_SHOWN = ("instruments", "controls", "fixed_effects", "clusters", "covariance", "sample")
SETTING_ORDER = (
    "endogenous",
    "instruments",
    "controls",
    "fixed_effects",
    "clusters",
    "weights",
    "covariance",
    "sample",
)
SAME_AS_MAIN = "as Main"

CAUTION = (
    "Each column is the main specification with the choices in its last rows changed. The "
    "columns share most of their rows, so the differences between them are descriptive, not "
    "tests. Estimates that agree show that the answer does not hinge on these choices; they "
    "do not show that the instruments are valid."
)
OTHER_COMPLIERS = (
    "When the effect differs between units, each set of instruments estimates the effect for "
    "the units it moves (its own compliers; Imbens & Angrist 1994), so a difference there "
    "need not mean that an instrument is invalid, and agreement does not show that the "
    "instruments are valid."
)


# --- the columns ------------------------------------------------------------------------


@dataclass(frozen=True)
class Column:
    """One column of the cross-specification table: the main results or one specification.

    ``reason`` is set when the whole column could not be computed.
    """

    name: str
    reason: str | None
    estimates: tuple[EstimatorResult, ...]
    strength: tuple[SpecificationStrength, ...]
    anderson_rubin: SetOrNA
    overid: TestOrNA
    endogeneity: TestOrNA
    n_obs: int | None
    covariance: str
    settings: dict[str, SpecificationSetting]

    def estimate(self, estimator: str, endogenous: str) -> Coefficient | None:
        for result in self.estimates:
            if result.estimator == estimator:
                for coefficient in result.coefficients:
                    if coefficient.name == endogenous:
                        return coefficient
        return None

    def strength_of(self, endogenous: str) -> SpecificationStrength | None:
        return next((s for s in self.strength if s.endogenous == endogenous), None)


def overid_test(sargan: TestOrNA, hansen_j: TestOrNA, covariance_type: str) -> TestOrNA:
    """Hansen J, or Sargan with a classical covariance (the rule of
    ``wording.main_overid_test``, for parts that carry the two tests without Diagnostics)."""
    preferred, other = (sargan, hansen_j) if covariance_type == "classical" else (hansen_j, sargan)
    if isinstance(preferred, NotApplicable) and isinstance(other, TestResult):
        return other
    return preferred


def _main_column(results: StudyResults) -> Column:
    weak_iv = results.weak_iv
    main_settings = (
        {
            s.part: s.model_copy(update={"value": s.main, "changed": False})
            for s in results.specifications[0].settings
        }
        if results.specifications
        else {}
    )
    return Column(
        name=MAIN_NAME,
        reason=None,
        estimates=tuple(results.estimates),
        strength=tuple(
            SpecificationStrength(
                endogenous=fs.endogenous,
                label=fs.label,
                first_stage_f=fs.f_main,
                effective_f=strength.effective_f,
            )
            for fs, strength in zip(
                results.first_stages, results.strength.per_endogenous, strict=True
            )
        ),
        anderson_rubin=(
            weak_iv.anderson_rubin
            if isinstance(weak_iv, WeakIVRobust)
            else NotApplicable(reason=weak_iv.reason)
        ),
        overid=wording.main_overid_test(results.diagnostics, results.conventions.covariance),
        endogeneity=results.diagnostics.endogeneity,
        n_obs=results.sample.rows_used,
        covariance=results.conventions.covariance_description,
        settings=main_settings,
    )


def _specification_column(result: SpecificationResult) -> Column:
    estimates = result.estimates
    strength = result.strength
    return Column(
        name=result.name,
        reason=estimates.reason if isinstance(estimates, NotApplicable) else None,
        estimates=() if isinstance(estimates, NotApplicable) else tuple(estimates),
        strength=() if isinstance(strength, NotApplicable) else tuple(strength),
        anderson_rubin=result.anderson_rubin,
        overid=overid_test(result.sargan, result.hansen_j, result.covariance_type),
        endogeneity=result.endogeneity,
        n_obs=result.n_obs,
        covariance=result.covariance,
        settings={s.part: s for s in result.settings},
    )


def table_columns(results: StudyResults) -> list[Column]:
    """Main, then each specification in spec order."""
    return [_main_column(results), *(_specification_column(r) for r in results.specifications)]


def endogenous_names(results: StudyResults) -> list[tuple[str, str]]:
    """(name, label) of every endogenous regressor in any column, the main ones first."""
    out = {name: name for name in results.model.endogenous}
    for result in results.specifications:
        for name in result.model.endogenous:
            out.setdefault(name, name)
    labels = results.model.labels
    return [(name, labels.get(name) or name) for name in out]


def headline_estimator(results: StudyResults) -> str:
    """The estimator whose coefficient heads the table: 2SLS, else LIML, GMM, OLS."""
    listed = {e.estimator for e in results.estimates}
    return next(e for e in HEADLINE_ORDER if e in listed)


def other_estimators(results: StudyResults) -> list[tuple[str, str]]:
    """(key, label) of the other estimators the spec lists, in table order."""
    headline = headline_estimator(results)
    labels = {e.estimator: e.label for e in results.estimates}
    return [(e, labels[e]) for e in ESTIMATOR_ORDER if e in labels and e != headline]


def shown_settings(columns: Sequence[Column]) -> list[str]:
    """The setting rows: those always shown, and the others when some column changes them."""
    changed = {part for c in columns for part, s in c.settings.items() if s.changed}
    return [p for p in SETTING_ORDER if p in ALWAYS_SHOWN or p in changed]


# --- the table as the template lays it out ---------------------------------------------

CellKind = Literal["estimate", "interval", "number", "p", "count", "set", "text", "same", "na"]


@dataclass(frozen=True)
class Cell:
    """One cell. ``kind`` says how the template formats it: 'estimate' (value with the
    standard error below), 'interval' (value to upper), 'number', 'p', 'count', 'set'
    (a confidence set), 'text', 'same' (unchanged from Main) or 'na' (``note`` is the
    marker of the reason listed under the table; an empty marker shows a dash)."""

    kind: CellKind
    value: float | None = None
    std_error: float | None = None
    upper: float | None = None
    count: int | None = None
    confidence_set: ConfidenceSet | None = None
    text: str = ""
    note: str = ""
    changed: bool = False


@dataclass(frozen=True)
class Row:
    title: str
    cells: tuple[Cell, ...]
    detail: str = ""


@dataclass(frozen=True)
class RowGroup:
    key: str
    title: str
    rows: tuple[Row, ...]


@dataclass(frozen=True)
class Footnote:
    marker: str
    text: str


@dataclass(frozen=True)
class CrossTable:
    columns: tuple[str, ...]
    groups: tuple[RowGroup, ...]
    notes: tuple[Footnote, ...]


class _Notes:
    """Reasons for 'n/a' cells, each listed once under the table with a letter."""

    def __init__(self) -> None:
        self.reasons: dict[str, str] = {}

    def cell(self, reason: str) -> Cell:
        if reason not in self.reasons:
            index = len(self.reasons)
            marker = ""
            while True:
                marker = chr(ord("a") + index % 26) + marker
                index = index // 26 - 1
                if index < 0:
                    break
            self.reasons[reason] = marker
        return Cell("na", note=self.reasons[reason])

    def footnotes(self) -> tuple[Footnote, ...]:
        return tuple(Footnote(marker, reason) for reason, marker in self.reasons.items())


ABSENT_REASON = "this column has no such coefficient (other endogenous regressors)"


def _coefficient_cells(
    columns: Sequence[Column], estimator: str, name: str, notes: _Notes, kind: str
) -> tuple[Cell, ...]:
    cells = []
    for column in columns:
        if column.reason is not None:
            cells.append(notes.cell(column.reason))
            continue
        c = column.estimate(estimator, name)
        if c is None:
            cells.append(notes.cell(ABSENT_REASON))
        elif kind == "estimate":
            cells.append(Cell("estimate", value=c.estimate, std_error=c.std_error))
        else:
            cells.append(Cell("interval", value=c.ci_lower, upper=c.ci_upper))
    return tuple(cells)


def _test_cell(result: TestOrNA, notes: _Notes, *, p_value: bool) -> Cell:
    if isinstance(result, NotApplicable):
        return notes.cell(result.reason)
    return Cell("p", value=result.p_value) if p_value else Cell("number", value=result.statistic)


def _strength_cells(
    columns: Sequence[Column], name: str, notes: _Notes, which: str
) -> tuple[Cell, ...]:
    cells = []
    for column in columns:
        if column.reason is not None:
            cells.append(notes.cell(column.reason))
            continue
        strength = column.strength_of(name)
        if strength is None:
            cells.append(notes.cell(ABSENT_REASON))
        elif which == "first_stage":
            cells.append(Cell("number", value=strength.first_stage_f.statistic))
        elif isinstance(strength.effective_f, NotApplicable):
            cells.append(notes.cell(strength.effective_f.reason))
        else:
            cells.append(Cell("number", value=strength.effective_f.value))
    return tuple(cells)


def _set_cell(result: SetOrNA, notes: _Notes) -> Cell:
    if isinstance(result, NotApplicable):
        return notes.cell(result.reason)
    return Cell("set", confidence_set=result)


def _setting_cells(columns: Sequence[Column], part: str) -> tuple[Cell, ...]:
    cells = []
    for column in columns:
        setting = column.settings[part]
        if column.name != MAIN_NAME and not setting.changed:
            cells.append(Cell("same", text=SAME_AS_MAIN))
        else:
            cells.append(Cell("text", text=setting.value, changed=setting.changed))
    return tuple(cells)


def cross_table(results: StudyResults) -> CrossTable:
    """The cross-specification table: estimates, statistics, rows used, what changes."""
    columns = table_columns(results)
    notes = _Notes()
    level = fmt_pct(results.conventions.confidence_level)
    headline = headline_estimator(results)
    headline_label = next(e.label for e in results.estimates if e.estimator == headline)
    endogenous = endogenous_names(results)
    groups = []
    for name, label in endogenous:
        groups.append(
            RowGroup(
                f"headline-{name}",
                f"{headline_label}: {label}",
                (
                    Row(
                        "Coefficient",
                        _coefficient_cells(columns, headline, name, notes, "estimate"),
                        "standard error in parentheses",
                    ),
                    Row(
                        f"{level} interval",
                        _coefficient_cells(columns, headline, name, notes, "interval"),
                    ),
                ),
            )
        )
    others = other_estimators(results)
    if others:
        rows = []
        for key, estimator_label in others:
            for name, label in endogenous:
                title = estimator_label if len(endogenous) == 1 else f"{estimator_label}: {label}"
                rows.append(
                    Row(
                        title,
                        _coefficient_cells(columns, key, name, notes, "estimate"),
                        "standard error in parentheses",
                    )
                )
        groups.append(RowGroup("other-estimators", "Other estimators", tuple(rows)))
    statistic_rows = []
    for name, label in endogenous:
        suffix = "" if len(endogenous) == 1 else f": {label}"
        statistic_rows.append(
            Row(
                f"First-stage F{suffix}",
                _strength_cells(columns, name, notes, "first_stage"),
                "main covariance of the column",
            )
        )
        statistic_rows.append(
            Row(
                f"Effective F{suffix}",
                _strength_cells(columns, name, notes, "effective"),
                "Montiel Olea & Pflueger 2013",
            )
        )
    statistic_rows += [
        Row(
            f"Anderson-Rubin {level} set",
            tuple(_set_cell(c.anderson_rubin, notes) for c in columns),
            "valid however weak the instruments",
        ),
        Row(
            "Over-identification test, p-value",
            tuple(_test_cell(c.overid, notes, p_value=True) for c in columns),
            "Hansen J; Sargan with classical standard errors",
        ),
        Row(
            "Endogeneity test, p-value",
            tuple(_test_cell(c.endogeneity, notes, p_value=True) for c in columns),
            "Durbin-Wu-Hausman",
        ),
        Row(
            "Rows used",
            tuple(
                notes.cell(c.reason)
                if c.n_obs is None and c.reason is not None
                else Cell("count", count=c.n_obs)
                for c in columns
            ),
        ),
    ]
    groups.append(RowGroup("statistics", "Strength, tests and sample", tuple(statistic_rows)))
    if results.specifications:
        titles = {s.part: s.title for s in results.specifications[0].settings}
        groups.append(
            RowGroup(
                "settings",
                "What each column changes",
                tuple(
                    Row(titles[part], _setting_cells(columns, part))
                    for part in shown_settings(columns)
                ),
            )
        )
    return CrossTable(tuple(c.name for c in columns), tuple(groups), notes.footnotes())


# --- the reading ---------------------------------------------------------------------


def _quoted(names: Sequence[str]) -> str:
    return and_join(f"'{n}'" for n in names)


def cross_readings(results: StudyResults) -> list[str]:
    """How much the headline estimate moves across the columns, and what that can mean."""
    columns = table_columns(results)
    main, others = columns[0], columns[1:]
    headline = headline_estimator(results)
    headline_label = next(e.label for e in results.estimates if e.estimator == headline)
    level = results.conventions.confidence_level
    out = []
    for name, label in endogenous_names(results):
        base = main.estimate(headline, name)
        found = [(c.name, c.estimate(headline, name)) for c in others if c.reason is None]
        moved = [(n, c) for n, c in found if c is not None]
        if base is None or not moved:
            continue
        low = min(moved, key=lambda item: item[1].estimate)
        high = max(moved, key=lambda item: item[1].estimate)
        far = max(moved, key=lambda item: abs(item[1].estimate - base.estimate))
        shift = far[1].estimate - base.estimate
        text = (
            f"The {headline_label} estimate of the effect of {label} is {fmt_num(base.estimate)} "
        )
        if len(moved) == 1:
            text += f"in the main specification and {fmt_num(low[1].estimate)} in '{low[0]}'"
        else:
            text += (
                f"in the main specification and ranges from {fmt_num(low[1].estimate)} "
                f"('{low[0]}') to {fmt_num(high[1].estimate)} ('{high[0]}') in the other "
                f"{fmt_int(len(moved))} columns"
            )
        text += (
            f"; the largest move from the main estimate is {fmt_num(shift)}, in '{far[0]}', "
            f"{fmt_num(abs(shift) / base.std_error, 2)} main standard errors."
        )
        intervals = [c for _, c in moved] + [base]
        away = sum(not (c.ci_lower <= 0.0 <= c.ci_upper) for c in intervals)
        text += (
            f" The {fmt_pct(level)} interval excludes zero in {fmt_int(away)} of "
            f"{fmt_int(len(intervals))} columns."
        )
        out.append(text)
    instrument_changes = [c.name for c in others if _changed(c, "instruments")]
    if instrument_changes:
        verb = "uses" if len(instrument_changes) == 1 else "use"
        out.append(f"{_quoted(instrument_changes)} {verb} other instruments. {OTHER_COMPLIERS}")
    other_rows = [
        c for c in others if c.reason is None and c.n_obs is not None and c.n_obs != main.n_obs
    ]
    if other_rows:
        counts = and_join(f"{fmt_int(c.n_obs or 0)} in '{c.name}'" for c in other_rows)
        out.append(
            f"Not every column uses the same rows ({counts}, against "
            f"{fmt_int(main.n_obs or 0)} in the main specification), so part of a difference "
            "can come from the sample rather than from the choice the column changes."
        )
    failed = [c.name for c in others if c.reason is not None]
    if failed:
        out.append(
            f"{_quoted(failed)} could not be estimated; the reason is given under the table "
            "and in its subsection."
        )
    return out


def _changed(column: Column, part: str) -> bool:
    setting = column.settings.get(part)
    return setting is not None and setting.changed


# --- one block per specification --------------------------------------------------------


@dataclass(frozen=True)
class SpecificationBlock:
    """The subsection of one specification."""

    anchor: str
    result: SpecificationResult
    reason: str | None
    estimates: tuple[EstimatorResult, ...]
    strength: tuple[SpecificationStrength, ...]
    verdict_label: str | None
    verdict_summary: str | None
    anderson_rubin: str
    anderson_rubin_reading: str


def _block(index: int, result: SpecificationResult) -> SpecificationBlock:
    estimates = result.estimates
    verdict = result.verdict
    strength = result.strength
    return SpecificationBlock(
        anchor=f"{SPECIFICATIONS_SECTION_ID}-{index + 1}",
        result=result,
        reason=estimates.reason if isinstance(estimates, NotApplicable) else None,
        estimates=(
            ()
            if isinstance(estimates, NotApplicable)
            else tuple(sorted(estimates, key=lambda e: ESTIMATOR_ORDER.index(e.estimator)))
        ),
        strength=() if isinstance(strength, NotApplicable) else tuple(strength),
        verdict_label=(
            None if isinstance(verdict, NotApplicable) else wording.VERDICT_LABELS[verdict.level]
        ),
        verdict_summary=None if isinstance(verdict, NotApplicable) else verdict.summary,
        anderson_rubin=fmt_set(result.anderson_rubin),
        anderson_rubin_reading=wording.set_reading(result.anderson_rubin),
    )


# --- the whole section ----------------------------------------------------------------


@dataclass(frozen=True)
class SpecificationsView:
    table: CrossTable
    readings: tuple[str, ...]
    caution: str
    blocks: tuple[SpecificationBlock, ...]


def specifications_view(results: StudyResults) -> SpecificationsView | None:
    """The section's content; None when the spec defines no further specifications."""
    if not results.specifications:
        return None
    return SpecificationsView(
        table=cross_table(results),
        readings=tuple(cross_readings(results)),
        caution=CAUTION,
        blocks=tuple(_block(i, r) for i, r in enumerate(results.specifications)),
    )
