"""Check, before any computing, that every column the spec's other sections name exists.

Falsification subsamples, sample variants, control variants, alternative clusters and the
model parts and filters of further specifications each name columns; a typo there is an
input error (exit code 2, naming the field and the closest column), not a variant shown
as "not applicable" at the end of a long run.
"""

from __future__ import annotations

from reportkit.data.columns import unknown_column_message
from reportkit.errors import DataError
from reportkit.spec.loaded import FieldPath, LoadedSpec


def named_columns(loaded: LoadedSpec) -> list[tuple[str, FieldPath]]:
    """Columns named outside the model and balance sections, with their fields."""
    spec = loaded.spec
    out: list[tuple[str, FieldPath]] = []
    for i, sub in enumerate(spec.balance.falsification):
        out += [
            (f.column, ("balance", "falsification", i, "filters", j, "column"))
            for j, f in enumerate(sub.filters)
        ]
    rob = spec.robustness
    for i, sub in enumerate(rob.samples):
        out += [
            (f.column, ("robustness", "samples", i, "filters", j, "column"))
            for j, f in enumerate(sub.filters)
        ]
    for i, variant in enumerate(rob.control_sets):
        out += [(c, ("robustness", "control_sets", i, "add", j)) for j, c in enumerate(variant.add)]
    for i, names in enumerate(rob.alternative_clusters):
        out += [(c, ("robustness", "alternative_clusters", i, j)) for j, c in enumerate(names)]
    for i, specification in enumerate(spec.specifications):
        for key, value in specification.model.replacements().items():
            if isinstance(value, str):  # the weights column
                out.append((value, ("specifications", i, "model", key)))
            elif value is not None:
                out += [(c, ("specifications", i, "model", key, j)) for j, c in enumerate(value)]
        out += [
            (f.column, ("specifications", i, "filters", j, "column"))
            for j, f in enumerate(specification.filters or [])
        ]
    return out


def check_named_columns(loaded: LoadedSpec, columns: list[str], file_name: str) -> None:
    """DataError naming the spec field when a named column is not in the file."""
    for column, field in named_columns(loaded):
        if column not in columns:
            raise DataError(unknown_column_message(column, columns, file_name), loaded.where(field))
