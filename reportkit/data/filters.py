"""Row filters from the spec, applied in order, with the rows each one removed.

A filter is a structured condition (column, comparison, value); nothing is evaluated as
code. A comparison with a missing cell is false (as in SQL), so every filter except
``is_missing`` removes the rows where its column is missing; the step's count shows it.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd

from reportkit.data.columns import unknown_column_message
from reportkit.data.values import (
    Scalar,
    column_kind,
    examples,
    format_value,
    numbers_of,
    value_fits,
    values_mask,
)
from reportkit.errors import DataError
from reportkit.results import SampleStep
from reportkit.spec.loaded import FieldPath
from reportkit.spec.models import RowFilter

Where = Callable[[FieldPath], str]

_PHRASES: dict[str, str] = {
    "equal_to": "equal to",
    "not_equal_to": "not equal to",
    "less_than": "less than",
    "at_most": "at most",
    "greater_than": "greater than",
    "at_least": "at least",
    "one_of": "one of",
    "not_one_of": "not one of",
}
_ORDERINGS = {
    "less_than": np.less,
    "at_most": np.less_equal,
    "greater_than": np.greater,
    "at_least": np.greater_equal,
}


def describe_filter(row_filter: RowFilter) -> str:
    """The filter in words, e.g. "keep grade equal to 7" or "keep rows with income missing"."""
    comparison = row_filter.keep_if
    if comparison == "is_missing":
        return f"keep rows with {row_filter.column} missing"
    if comparison == "is_present":
        return f"keep rows with {row_filter.column} present"
    value = row_filter.value
    shown = (
        ", ".join(format_value(v) for v in value)
        if isinstance(value, list)
        else format_value(value)
    )
    return f"keep {row_filter.column} {_PHRASES[comparison]} {shown}"


def keep_mask(series: pd.Series, row_filter: RowFilter, index: int, where: Where) -> np.ndarray:
    """Boolean array of the rows ``row_filter`` keeps (``index`` is its place in data.filters)."""
    comparison = row_filter.keep_if
    present = series.notna().to_numpy()
    if comparison == "is_missing":
        return ~present
    if comparison == "is_present":
        return present
    kind = column_kind(series)
    if comparison in _ORDERINGS:
        numbers = numbers_of(series)
        if kind == "datetime" or (present & np.isnan(numbers)).any():
            held = (
                "dates" if kind == "datetime" else f"text ({examples(series[np.isnan(numbers)])})"
            )
            raise DataError(
                f"the filter '{describe_filter(row_filter)}' compares numbers, but column "
                f"'{row_filter.column}' holds {held}; use equal_to or one_of for such a "
                "column, or list text that means missing in data.missing_codes",
                where(("data", "filters", index, "keep_if")),
            )
        bound = row_filter.value
        assert isinstance(bound, int | float)  # the spec model guarantees a number here
        with np.errstate(invalid="ignore"):
            return present & _ORDERINGS[comparison](numbers, float(bound))
    raw = row_filter.value
    values: list[Scalar] = [v for v in (raw if isinstance(raw, list) else [raw]) if v is not None]
    for value in values:
        if not value_fits(kind, value):
            held = {"number": "numbers", "boolean": "true/false", "datetime": "dates"}[kind]
            raise DataError(
                f"the filter '{describe_filter(row_filter)}' compares column "
                f"'{row_filter.column}', which holds {held}, with {format_value(value)}; "
                f"give a value of the column's kind",
                where(("data", "filters", index, "value")),
            )
    matched = values_mask(series, values, numbers_match_booleans=True)
    if comparison in ("equal_to", "one_of"):
        return matched
    return present & ~matched


def apply_filters(
    frame: pd.DataFrame,
    filters: list[RowFilter],
    file_name: str,
    where: Where,
) -> tuple[pd.DataFrame, list[SampleStep]]:
    """Apply ``filters`` in order; one ``SampleStep`` per filter. Rows keep their order.

    A filter on a column the file does not have is a ``DataError`` naming
    ``data.filters[i].column``, with the closest column name as a suggestion.
    """
    steps: list[SampleStep] = []
    for index, row_filter in enumerate(filters):
        if row_filter.column not in frame.columns:
            raise DataError(
                unknown_column_message(row_filter.column, list(frame.columns), file_name),
                where(("data", "filters", index, "column")),
            )
        keep = keep_mask(frame[row_filter.column], row_filter, index, where)
        removed = int((~keep).sum())
        frame = frame.loc[keep]
        steps.append(
            SampleStep(
                step=describe_filter(row_filter), rows_removed=removed, rows_remaining=len(frame)
            )
        )
    return frame, steps
