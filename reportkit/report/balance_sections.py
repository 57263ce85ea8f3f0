"""What the section "Is the instrument as good as random?" shows, chosen in Python.

One table of covariate means per instrument (the groups of the instrument as columns), the
joint tests with their readings, the outcome index, the placebo outcomes and the line of
"At a glance". Values that could not be computed (an empty group's mean, a difference
without a first or last mean) are kept as ``None`` here and shown by the template as a
dash, each explained by a note built below: never an empty cell. Numbers stay numbers;
the template formats them with the filters of ``reportkit.report.formatting``.
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
    InstrumentCoefficient,
    NotApplicable,
    OutcomeIndex,
    PlaceboResult,
    StudyResults,
    TestOrNA,
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
    )


def balance_glance(results: StudyResults, alpha: float) -> str:
    """The balance line of "At a glance" (see ``wording.balance_glance``), or n/a with why."""
    balance = results.balance
    if isinstance(balance, NotApplicable):
        return f"n/a: {balance.reason}"
    return wording.balance_glance([(j.label, j.test) for j in balance.joint], alpha)
