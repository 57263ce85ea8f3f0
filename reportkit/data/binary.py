"""The binary treatment and binary outcome columns, on the estimation sample.

``model.binary_treatment`` defines an on/off version of the endogenous regressor (a 0/1
column, or a threshold on a numeric one); ``robustness.binary_outcome.outcome`` names a
0/1 outcome. Both are read with the balance columns (NaN where missing) and checked here:
a column that takes other values than 0 and 1 is an input error naming the field.
"""

from __future__ import annotations

import numpy as np

from reportkit.data.prepare import PreparedData
from reportkit.data.values import format_value
from reportkit.errors import DataError
from reportkit.spec.loaded import FieldPath, LoadedSpec


def _column(prepared: PreparedData, name: str) -> np.ndarray:
    design = prepared.design
    if name in prepared.extras:
        return np.asarray(prepared.extras[name], dtype=float)
    if name == design.outcome_name:
        return design.y.astype(float)
    if name in design.endog_names:
        return design.endog[:, design.endog_names.index(name)].astype(float)
    raise KeyError(name)


def _check_binary(
    values: np.ndarray, name: str, loaded: LoadedSpec, field: FieldPath, hint: str
) -> None:
    present = values[np.isfinite(values)]
    other = present[(present != 0) & (present != 1)]
    if other.size:
        shown = ", ".join(format_value(v) for v in np.unique(other)[:3])
        raise DataError(
            f"column '{name}' must take only the values 0 and 1 (or true and false), but it "
            f"also takes {shown}; {hint}",
            loaded.where(field),
        )


def binary_treatment(prepared: PreparedData, loaded: LoadedSpec) -> tuple[np.ndarray, str] | None:
    """The 0/1 treatment (NaN where missing) and its definition in words (with the column's
    label), or None if not defined."""
    spec = loaded.spec.model.binary_treatment
    if spec is None:
        return None
    label = loaded.spec.model.labels.get(spec.column, spec.column)
    values = _column(prepared, spec.column)
    if spec.treated_above is not None:
        out = np.where(np.isfinite(values), (values > spec.treated_above).astype(float), np.nan)
        return out, f"{label} > {spec.treated_above:g}"
    _check_binary(
        values,
        spec.column,
        loaded,
        ("model", "binary_treatment", "column"),
        "name a 0/1 column, or give treated_above to turn a numeric column into on/off",
    )
    return values, label


def binary_outcome(prepared: PreparedData, loaded: LoadedSpec) -> np.ndarray | None:
    """The 0/1 outcome of the binary-outcome variants (NaN where missing), or None."""
    spec = loaded.spec.robustness.binary_outcome
    if spec is None:
        return None
    values = _column(prepared, spec.outcome)
    _check_binary(
        values,
        spec.outcome,
        loaded,
        ("robustness", "binary_outcome", "outcome"),
        "name a 0/1 or true/false outcome column in robustness.binary_outcome.outcome",
    )
    return values
