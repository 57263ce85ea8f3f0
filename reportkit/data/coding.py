"""Turn the columns of the estimation sample into the numbers the engine takes.

- Outcome, endogenous regressors, instruments, controls and weights must be numeric or
  true/false; true/false is coded 1/0 (and noted).
- A categorical control becomes one 0/1 indicator per level except the first in sorted
  order, the reference level (treatment coding with a base group; e.g. Wooldridge 2020, ch. 7).
- Fixed effects and clusters may be of any type; their values are coded 0..G-1 in
  sorted order.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from reportkit.data.values import column_kind, examples, format_level, numbers_of
from reportkit.errors import DataError
from reportkit.results import CodingNote

ROLE_WORDS: dict[str, str] = {
    "outcome": "the outcome",
    "endogenous": "an endogenous regressor",
    "instruments": "an instrument",
    "controls": "a control",
    "weights": "the weights",
    "balance": "a balance or placebo variable",
    "binary": "a binary treatment or outcome",
}


def numeric_column(
    series: pd.Series, column: str, role: str, where: str
) -> tuple[np.ndarray, CodingNote | None]:
    """The column as float64 (true/false as 1/0, with a note); text or dates are an error.

    ``role`` is the model field (outcome, endogenous, instruments, controls, weights).
    """
    kind = column_kind(series)
    part = ROLE_WORDS[role]
    if kind == "boolean":
        return numbers_of(series), CodingNote(column=column, coding="true = 1, false = 0")
    if kind == "datetime":
        raise DataError(
            f"column '{column}' holds dates, but {part} must be numeric or true/false; "
            "convert it to a number (e.g. a year or days since a start date) in the data file",
            where,
        )
    if kind == "text":
        numbers = numbers_of(series)
        words = series[np.isnan(numbers)]
        if np.isfinite(numbers).any():
            several = words.nunique() > 1
            advice = (
                f"if {examples(words)} {'mean' if several else 'means'} missing, add "
                f"{'them' if several else 'it'} to data.missing_codes; otherwise recode "
                f"{'them' if several else 'it'} as numbers"
            )
        elif role == "controls":
            advice = "to use it as a categorical control, move it to model.categorical_controls"
        else:
            advice = "recode it as numbers or true/false in the data file"
        raise DataError(
            f"column '{column}' holds text (e.g. {examples(words)}), but {part} must be "
            f"numeric or true/false; {advice}",
            where,
        )
    values = numbers_of(series)
    infinite = np.isinf(values)
    if infinite.any():
        raise DataError(
            f"column '{column}' ({part}) is infinite in {int(infinite.sum())} row(s); "
            "fix those values, list them in data.missing_codes, or remove the rows with a "
            "filter",
            where,
        )
    return values, None


def integer_codes(series: pd.Series) -> tuple[np.ndarray, list[object]]:
    """Codes 0..G-1 in sorted order of the values, and the sorted values (levels).

    Numbers, true/false and dates sort as such; anything else sorts as text.
    """
    kind = column_kind(series)
    values = series.to_numpy() if kind in ("number", "datetime") else None
    if kind == "boolean":
        values = series.astype(bool).to_numpy()
    if values is None:
        values = series.astype(str).to_numpy(dtype=object)
    codes, levels = pd.factorize(values, sort=True)
    return codes.astype(np.int64), list(levels)


def indicators(series: pd.Series, column: str) -> tuple[np.ndarray, list[str], CodingNote]:
    """0/1 indicators for every level but the first in sorted order (the reference).

    Indicator names read ``column=level``, e.g. ``income_band=low``.
    """
    codes, levels = integer_codes(series)
    names = [f"{column}={format_level(level)}" for level in levels[1:]]
    matrix = (codes[:, None] == np.arange(1, len(levels))[None, :]).astype(float)
    reference = format_level(levels[0])
    if len(levels) == 1:
        coding = f"a single level ('{reference}') in the estimation sample: no indicators"
    else:
        coding = (
            f"{len(levels)} levels; reference level '{reference}' (first in sorted order); "
            f"indicators {', '.join(names)}"
            if len(names) <= 6
            else f"{len(levels)} levels; reference level '{reference}' (first in sorted "
            f"order); {len(names)} indicators named {column}=<level>"
        )
    return matrix, names, CodingNote(column=column, coding=coding)
