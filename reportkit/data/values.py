"""What kind of values a column holds, and which of its cells equal a value from the spec.

Spec values (missing codes, filter values) are plain YAML scalars, while file columns
come typed by their reader; the comparison here makes them meet sensibly: the code -99
matches -99 in a numeric column and the text "-99" (or "-99.0") in a text column, and
the text "7" matches the number 7. A missing cell never equals anything. Nothing from a
spec is ever evaluated as code.
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np
import pandas as pd

ColumnKind = Literal["boolean", "number", "datetime", "text"]
Scalar = str | int | float | bool


def column_kind(series: pd.Series) -> ColumnKind:
    """Classify a column by its dtype, or by its values for object columns.

    A column whose only non-missing values are True/False is boolean even when missing
    cells forced pandas to store it as ``object`` (as ``read_csv`` does).
    """
    dtype = series.dtype
    if pd.api.types.is_bool_dtype(dtype):
        return "boolean"
    if pd.api.types.is_numeric_dtype(dtype):
        return "number"
    if pd.api.types.is_datetime64_any_dtype(dtype) or pd.api.types.is_timedelta64_dtype(dtype):
        return "datetime"
    if pd.api.types.is_object_dtype(dtype):
        inferred = pd.api.types.infer_dtype(series, skipna=True)
        if inferred == "boolean":
            return "boolean"
        if inferred in ("integer", "floating", "mixed-integer-float", "decimal"):
            return "number"
    return "text"


def numbers_of(series: pd.Series) -> np.ndarray:
    """The column as float64: booleans as 1/0, text parsed where it is a number, else NaN."""
    kind = column_kind(series)
    if kind == "boolean":
        return series.astype(float).to_numpy(dtype=float)
    if kind == "datetime":
        return np.full(len(series), np.nan)
    if pd.api.types.is_numeric_dtype(series.dtype):
        return series.to_numpy(dtype=float, na_value=np.nan)
    return pd.to_numeric(series, errors="coerce").to_numpy(dtype=float, na_value=np.nan)


def as_number(value: Scalar) -> float | None:
    """A spec value as a number, or None (booleans are not numbers here)."""
    if isinstance(value, bool):
        return None
    if isinstance(value, int | float):
        return float(value)
    try:
        number = float(value.strip())
    except ValueError:
        return None
    return number if math.isfinite(number) else None


def as_boolean(value: Scalar, numbers_match_booleans: bool) -> bool | None:
    """A spec value as True/False: booleans, the words true/false, and 1/0 when allowed."""
    if isinstance(value, bool):
        return value
    if isinstance(value, str) and value.strip().lower() in ("true", "false"):
        return value.strip().lower() == "true"
    if numbers_match_booleans:
        number = as_number(value)
        if number in (0.0, 1.0):
            return number == 1.0
    return None


def as_timestamp(value: Scalar) -> pd.Timestamp | None:
    """A spec value as a date-time when it is text that parses as one."""
    if not isinstance(value, str):
        return None
    try:
        stamp = pd.Timestamp(value)
    except (ValueError, TypeError):
        return None
    return None if pd.isna(stamp) else stamp


def value_fits(kind: ColumnKind, value: Scalar) -> bool:
    """Whether ``value`` can be compared with a column of ``kind`` at all."""
    if kind == "boolean":
        return as_boolean(value, numbers_match_booleans=True) is not None
    if kind == "number":
        return as_number(value) is not None
    if kind == "datetime":
        return as_timestamp(value) is not None
    return True


def values_mask(
    series: pd.Series, values: list[Scalar], *, numbers_match_booleans: bool
) -> np.ndarray:
    """Boolean array: cells equal to any of ``values``. Missing cells are never equal.

    ``numbers_match_booleans`` lets 1/0 match True/False (wanted in a filter such as
    "keep treated equal to 1", unwanted for missing codes, where the code 0 must not
    wipe out every False).
    """
    kind = column_kind(series)
    present = series.notna().to_numpy()
    mask = np.zeros(len(series), dtype=bool)
    if kind == "boolean":
        for value in values:
            target = as_boolean(value, numbers_match_booleans)
            if target is not None:
                mask |= (series == target).to_numpy(dtype=bool)
        return present & mask
    if kind == "number":
        targets = [n for n in (as_number(v) for v in values) if n is not None]
        if targets:
            mask = np.isin(numbers_of(series), targets)
        return present & mask
    if kind == "datetime":
        for value in values:
            stamp = as_timestamp(value)
            if stamp is None:
                continue
            try:
                mask |= (series == stamp).to_numpy(dtype=bool)
            except TypeError:  # time-zone aware against naive, or the reverse
                continue
        return present & mask
    strings = series.astype(str)
    words = [v for v in values if not isinstance(v, bool)]
    if words:
        mask |= strings.isin([str(v) for v in words]).to_numpy(dtype=bool)
        targets = [n for n in (as_number(v) for v in words) if n is not None]
        if targets:
            # parse each distinct text once: columns are long, their distinct values few
            distinct = pd.Series(pd.unique(strings[present]))
            parsed = pd.to_numeric(distinct, errors="coerce").to_numpy(dtype=float)
            hits = distinct[np.isin(parsed, targets)]
            if len(hits):
                mask |= strings.isin(hits).to_numpy(dtype=bool)
    flags = ["true" if v else "false" for v in values if isinstance(v, bool)]
    if flags:
        mask |= strings.str.strip().str.lower().isin(flags).to_numpy(dtype=bool)
    return present & mask


def format_value(value: object) -> str:
    """A value as written in labels and messages: 7 not 7.0, 'north' quoted, true/false."""
    if isinstance(value, bool | np.bool_):
        return "true" if value else "false"
    if isinstance(value, int | np.integer):
        return str(int(value))
    if isinstance(value, float | np.floating):
        f = float(value)
        return str(int(f)) if f.is_integer() and abs(f) < 1e15 else repr(f)
    if isinstance(value, pd.Timestamp):
        return value.isoformat()
    return f"'{value}'"


def format_level(value: object) -> str:
    """A category level as used in indicator names: like ``format_value`` but unquoted."""
    text = format_value(value)
    return text[1:-1] if text.startswith("'") and text.endswith("'") else text


def examples(values: pd.Series, limit: int = 3) -> str:
    """The first few distinct values, formatted, for an error message."""
    seen = list(dict.fromkeys(values.dropna().tolist()))[:limit]
    return ", ".join(format_value(v) for v in seen)
