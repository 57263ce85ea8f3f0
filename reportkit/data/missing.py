"""Missing values: codes that mean "missing", and the rows dropped for them.

Missing codes apply to every column (see ``values.values_mask`` for how numbers and
text meet). A text column that held codes and holds only numbers once they are removed
becomes numeric, as it would have been read had the codes been empty cells.

Rows missing any model variable are dropped (complete-case analysis). Each dropped row
is counted once, against the *first* of its missing variables in model order (outcome,
endogenous, instruments, controls, categorical controls, fixed effects, clusters,
weights), so the per-column counts add up to the rows dropped.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from reportkit.data.values import Scalar, column_kind, values_mask
from reportkit.results import MissingCount


def replace_missing_codes(
    frame: pd.DataFrame, codes: Sequence[Scalar], only: Sequence[str] | None = None
) -> tuple[pd.DataFrame, list[str]]:
    """``frame`` with every cell equal to a code set missing, and the columns turned numeric.

    ``only`` limits the work to the columns a caller will read (the result is the same
    for them, and a wide file is not scanned in full).
    """
    if not codes:
        return frame, []
    columns: dict[str, pd.Series] = {}
    made_numeric: list[str] = []
    wanted = set(frame.columns if only is None else only)
    for name in frame.columns:
        series = frame[name]
        if name not in wanted:
            columns[name] = series
            continue
        hit = values_mask(series, list(codes), numbers_match_booleans=False)
        if hit.any():
            series = series.mask(hit)
            if column_kind(series) == "text":
                numbers = pd.to_numeric(series, errors="coerce")
                if numbers.notna().sum() == series.notna().sum():
                    series = numbers.astype(float)
                    made_numeric.append(name)
        columns[name] = series
    return pd.DataFrame(columns, index=frame.index), made_numeric


def drop_missing(
    frame: pd.DataFrame, columns: Sequence[str]
) -> tuple[pd.DataFrame, list[MissingCount]]:
    """Drop rows missing any of ``columns``; count each against its first missing column."""
    if not columns:
        return frame, []
    missing = frame[list(columns)].isna().to_numpy()
    any_missing = missing.any(axis=1)
    first = missing.argmax(axis=1)
    counts = np.bincount(first[any_missing], minlength=len(columns))
    kept = frame.loc[~any_missing]
    return kept, [
        MissingCount(column=name, rows_removed=int(count))
        for name, count in zip(columns, counts, strict=True)
    ]
