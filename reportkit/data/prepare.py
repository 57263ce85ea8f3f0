"""The data stage: from a validated spec to the engine's ``Design`` and the sample account.

Order of work (each step's rows are counted in ``SampleAccount.steps``):

1. checksum the data file and compare it with ``data.sha256`` when given;
2. read it, and check that every column the model names exists (with a did-you-mean
   suggestion);
3. set ``data.missing_codes`` to missing in every column the model or a filter reads;
4. apply ``data.filters`` in order;
5. drop rows missing any model variable (complete cases), counted per column;
6. check and code the types (true/false as 1/0, categorical controls as indicators,
   fixed effects and clusters as 0..G-1); weights must be positive;
7. drop singleton fixed-effect groups, iteratively (Correia 2015);
8. drop constant or collinear controls; stop on a constant or collinear instrument,
   endogenous regressor or outcome (see ``screening``);
9. require at least two clusters per cluster variable.

Rows keep their order in the file throughout, so the same input gives the same arrays.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from reportkit.data.checksums import file_digest
from reportkit.data.coding import indicators, integer_codes, numeric_column
from reportkit.data.columns import unknown_column_message
from reportkit.data.filters import apply_filters
from reportkit.data.missing import drop_missing, replace_missing_codes
from reportkit.data.readers import check_source, read_table
from reportkit.data.screening import Columns, screen_columns
from reportkit.data.singletons import singleton_rows
from reportkit.data.values import format_level, format_value
from reportkit.engine.design import Design
from reportkit.errors import DataError
from reportkit.results import CodingNote, InputFile, SampleAccount, SampleStep
from reportkit.spec.loaded import FieldPath, LoadedSpec
from reportkit.spec.models import ModelSection, Spec


@dataclass(frozen=True)
class PreparedData:
    """The engine's input and the account of how the sample was built."""

    design: Design
    sample: SampleAccount
    inputs: list[InputFile]  # the data file, role "data"
    frame_columns: list[str]  # every column of the data file, in file order
    row_positions: np.ndarray  # 0-based rows of the file in the sample, in file order
    # balance and placebo columns on the estimation sample (float, NaN where missing; their
    # own missing values do not remove rows from the sample)
    extras: dict[str, np.ndarray] = field(default_factory=dict)
    # the file's value of each cluster code, per cluster variable (for naming clusters)
    cluster_levels: list[list[str]] = field(default_factory=list)


@dataclass(frozen=True)
class Variable:
    """A column named in the model, its role (the model field) and where the spec names it."""

    column: str
    role: str
    field: FieldPath


def model_variables(model: ModelSection) -> list[Variable]:
    """Every column the model uses, in model order (the order missing values are counted in)."""
    out = [Variable(model.outcome, "outcome", ("model", "outcome"))]
    for role in (
        "endogenous",
        "instruments",
        "controls",
        "categorical_controls",
        "fixed_effects",
        "cluster_by",
    ):
        for i, name in enumerate(getattr(model, role)):
            out.append(Variable(name, role, ("model", role, i)))
    if model.weights is not None:
        out.append(Variable(model.weights, "weights", ("model", "weights")))
    return out


def balance_variables(spec: Spec) -> list[Variable]:
    """Columns read only for balance and placebo checks, with where the spec names them."""
    out: list[Variable] = []
    if spec.balance.covariates is None:
        out += [
            Variable(name, "balance", ("model", "controls", i))
            for i, name in enumerate(spec.model.controls)
        ]
    else:
        out += [
            Variable(name, "balance", ("balance", "covariates", i))
            for i, name in enumerate(spec.balance.covariates)
        ]
    out += [
        Variable(name, "balance", ("balance", "pre_treatment", i))
        for i, name in enumerate(spec.balance.pre_treatment)
    ]
    out += [
        Variable(name, "balance", ("balance", "placebo_outcomes", i))
        for i, name in enumerate(spec.balance.placebo_outcomes)
    ]
    treatment = spec.model.binary_treatment
    if treatment is not None and treatment.column not in spec.model.endogenous:
        out.append(Variable(treatment.column, "binary", ("model", "binary_treatment", "column")))
    binary = spec.robustness.binary_outcome
    if binary is not None and binary.outcome != spec.model.outcome:
        out.append(Variable(binary.outcome, "binary", ("robustness", "binary_outcome", "outcome")))
    return out


@dataclass(frozen=True)
class Source:
    """The data file read once: its digest and its raw table (shared by variant samples)."""

    digest: InputFile
    frame: pd.DataFrame
    file_name: str


def read_source(loaded: LoadedSpec) -> Source:
    """Checksum and read the spec's data file (DataError naming the file on failure)."""
    path = loaded.resolve_path(loaded.spec.data.path)
    digest = _checked_digest(loaded, path)
    frame = read_table(path, loaded.where(("data", "path")))
    return Source(digest=digest, frame=frame, file_name=path.name)


def _shown_name(loaded: LoadedSpec, path: Path) -> str:
    """The data file's name in results: as written in the spec, unless that is absolute."""
    written = Path(loaded.spec.data.path)
    return path.name if written.is_absolute() else written.as_posix()


def _checked_digest(loaded: LoadedSpec, path: Path) -> InputFile:
    where_path = loaded.where(("data", "path"))
    check_source(path, where_path)
    try:
        digest = file_digest(path, role="data", name=_shown_name(loaded, path))
    except OSError as exc:
        raise DataError(
            f"cannot open '{path.name}' ({exc.strerror or exc}); check the file's "
            "permissions and data.path",
            where_path,
        ) from exc
    expected = loaded.spec.data.sha256
    if expected is not None and expected.lower() != digest.sha256:
        raise DataError(
            f"checksum mismatch for '{path.name}': expected {expected.lower()}, found "
            f"{digest.sha256}; the data file changed since the spec was written. Use the "
            "file the spec was written for, or, if the change is intended, update data.sha256",
            loaded.where(("data", "sha256")),
        )
    return digest


def _check_columns_exist(
    loaded: LoadedSpec, variables: list[Variable], columns: list[str], file_name: str
) -> None:
    for variable in variables:
        if variable.column not in columns:
            raise DataError(
                unknown_column_message(variable.column, columns, file_name),
                loaded.where(variable.field),
            )


def _filtered_out(steps: list[SampleStep], rows_read: int) -> str:
    removed = "; ".join(f"'{s.step}' removed {s.rows_removed}" for s in steps[1:])
    return (
        f"no rows are left after the filters ({rows_read} rows read; {removed}); check the "
        "filters' columns and values against the data"
    )


def _all_missing(frame: pd.DataFrame, columns: list[str]) -> str:
    counts = frame[columns].isna().sum()
    worst = counts[counts > 0].sort_values(ascending=False, kind="stable").head(3)
    listed = ", ".join(f"'{c}' in {int(k)} of {len(frame)}" for c, k in worst.items())
    return (
        f"every row misses at least one model variable (missing most often: {listed}); "
        "check data.missing_codes and that these columns hold the data you expect"
    )


def _check_single_levels(frame: pd.DataFrame, loaded: LoadedSpec) -> None:
    """With several fixed effects, one taking a single value only repeats the others."""
    model = loaded.spec.model
    if len(model.fixed_effects) < 2:
        return
    for k, name in enumerate(model.fixed_effects):
        values = frame[name]
        if values.nunique(dropna=True) == 1:
            raise DataError(
                f"fixed effect '{name}' takes a single value ({format_value(values.iloc[0])}) "
                "in the sample, so it adds nothing to the other fixed effects; remove it "
                "from model.fixed_effects",
                loaded.where(("model", "fixed_effects", k)),
            )


def _numeric_roles(
    frame: pd.DataFrame, variables: list[Variable], loaded: LoadedSpec
) -> tuple[dict[str, np.ndarray], list[CodingNote]]:
    """Float arrays of the outcome, regressors, instruments, controls and weights."""
    arrays: dict[str, np.ndarray] = {}
    notes: list[CodingNote] = []
    for v in variables:
        if v.role not in ("outcome", "endogenous", "instruments", "controls", "weights"):
            continue
        values, note = numeric_column(frame[v.column], v.column, v.role, loaded.where(v.field))
        arrays[v.column] = values
        if note is not None:
            notes.append(note)
    weights = loaded.spec.model.weights
    if weights is not None:
        bad = ~(arrays[weights] > 0)
        if bad.any():
            raise DataError(
                f"weights must be positive, but column '{weights}' is zero or negative in "
                f"{int(bad.sum())} row(s) (smallest {format_value(arrays[weights].min())}); "
                f"fix those values, or keep only positive weights with a filter "
                f"(column: {weights}, keep_if: greater_than, value: 0)",
                loaded.where(("model", "weights")),
            )
    return arrays, notes


def _codes(frame: pd.DataFrame, names: list[str]) -> np.ndarray:
    if not names:
        return np.zeros((len(frame), 0), dtype=np.int64)
    return np.column_stack([integer_codes(frame[name])[0] for name in names]).astype(np.int64)


def _columns(arrays: dict[str, np.ndarray], names: list[str], role: str, n: int) -> Columns:
    values = np.column_stack([arrays[name] for name in names]) if names else np.zeros((n, 0))
    fields: list[FieldPath] = (
        [("model", role)] if role == "outcome" else [("model", role, i) for i in range(len(names))]
    )
    return Columns(list(names), np.ascontiguousarray(values, dtype=float), fields)


def _controls(
    frame: pd.DataFrame, arrays: dict[str, np.ndarray], model: ModelSection
) -> tuple[Columns, list[CodingNote]]:
    """Numeric controls, then the indicators of each categorical control, in spec order."""
    names = list(model.controls)
    blocks = [arrays[name][:, None] for name in names]
    fields: list[FieldPath] = [("model", "controls", i) for i in range(len(names))]
    notes = []
    for i, column in enumerate(model.categorical_controls):
        matrix, indicator_names, note = indicators(frame[column], column)
        notes.append(note)
        blocks.append(matrix)
        names += indicator_names
        fields += [("model", "categorical_controls", i)] * len(indicator_names)
    values = np.hstack(blocks) if blocks else np.zeros((len(frame), 0))
    return Columns(names, np.ascontiguousarray(values, dtype=float), fields), notes


def _drop_singletons(
    frame: pd.DataFrame, arrays: dict[str, np.ndarray], loaded: LoadedSpec
) -> tuple[pd.DataFrame, dict[str, np.ndarray], int]:
    """Drop rows alone in a fixed-effect group, iteratively (Correia 2015)."""
    fixed_effects = loaded.spec.model.fixed_effects
    _check_single_levels(frame, loaded)
    alone = singleton_rows(_codes(frame, fixed_effects))
    frame = frame.loc[~alone]
    if frame.empty:
        raise DataError(
            "every row is alone in one of its fixed-effect groups, so the fixed effects fit "
            "every row exactly and nothing is left to estimate; use fewer or coarser fixed "
            "effects in model.fixed_effects",
            loaded.where(("model", "fixed_effects")),
        )
    _check_single_levels(frame, loaded)
    return frame, {name: values[~alone] for name, values in arrays.items()}, int(alone.sum())


def _cluster_counts(frame: pd.DataFrame, clusters: np.ndarray, loaded: LoadedSpec) -> list[int]:
    """Clusters per cluster variable; cluster-robust covariance needs at least two."""
    cluster_by = loaded.spec.model.cluster_by
    counts = [int(clusters[:, k].max()) + 1 for k in range(clusters.shape[1])]
    for k, count in enumerate(counts):
        if count < 2:
            name = cluster_by[k]
            raise DataError(
                f"cluster-robust covariance needs at least 2 clusters, but the estimation "
                f"sample has only 1 value of '{name}' ({format_value(frame[name].iloc[0])}); "
                "cluster by a finer variable in model.cluster_by, or remove model.cluster_by "
                "and choose inference.covariance: robust",
                loaded.where(("model", "cluster_by", k)),
            )
    return counts


def prepare(loaded: LoadedSpec, source: Source | None = None) -> PreparedData:
    """Build the estimation sample of ``loaded`` and describe how it was built.

    ``source`` is the file already read (variants and subsamples re-use it; the frame is
    not modified). Raises ``DataError`` (exit code 2) with the file, field or column and
    what to do.
    """
    spec, model = loaded.spec, loaded.spec.model
    source = source if source is not None else read_source(loaded)
    digest, frame, file_name = source.digest, source.frame, source.file_name
    path = Path(file_name)
    rows_read = len(frame)
    frame_columns = [str(c) for c in frame.columns]
    if rows_read == 0:
        raise DataError(
            f"'{path.name}' has no rows of data; check data.path", loaded.where(("data", "path"))
        )
    variables = model_variables(model)
    _check_columns_exist(loaded, variables, frame_columns, path.name)
    extra_variables = balance_variables(spec)
    _check_columns_exist(loaded, extra_variables, frame_columns, path.name)
    read_columns = (
        [v.column for v in variables]
        + [f.column for f in spec.data.filters]
        + [v.column for v in extra_variables]
    )
    frame, made_numeric = replace_missing_codes(frame, spec.data.missing_codes, read_columns)

    steps = [SampleStep(step="rows read", rows_removed=0, rows_remaining=rows_read)]
    frame, filter_steps = apply_filters(frame, spec.data.filters, path.name, loaded.where)
    steps += filter_steps
    if frame.empty:
        raise DataError(_filtered_out(steps, rows_read), loaded.where(("data", "filters")))

    used = list(dict.fromkeys(v.column for v in variables))
    before_missing = frame
    frame, missing_counts = drop_missing(frame, used)
    steps.append(
        SampleStep(
            step="missing values",
            rows_removed=len(before_missing) - len(frame),
            rows_remaining=len(frame),
        )
    )
    if frame.empty:
        raise DataError(_all_missing(before_missing, used), loaded.where(("model",)))

    codings = [
        CodingNote(column=name, coding="text in the file; numbers once missing codes were removed")
        for name in used
        if name in made_numeric
    ]
    arrays, boolean_notes = _numeric_roles(frame, variables, loaded)
    codings += boolean_notes

    singletons = 0
    if model.fixed_effects:
        frame, arrays, singletons = _drop_singletons(frame, arrays, loaded)
        steps.append(
            SampleStep(
                step="singleton fixed-effect groups",
                rows_removed=singletons,
                rows_remaining=len(frame),
            )
        )

    n = len(frame)
    controls, categorical_notes = _controls(frame, arrays, model)
    codings += categorical_notes
    fixed_effects = _codes(frame, model.fixed_effects)
    clusters = _codes(frame, model.cluster_by)
    weights = arrays[model.weights] if model.weights is not None else None
    endogenous = _columns(arrays, model.endogenous, "endogenous", n)
    instruments = _columns(arrays, model.instruments, "instruments", n)
    screened = screen_columns(
        outcome=_columns(arrays, [model.outcome], "outcome", n),
        endogenous=endogenous,
        instruments=instruments,
        controls=controls,
        fixed_effects=fixed_effects,
        fixed_effect_names=list(model.fixed_effects),
        weights=weights,
        where=loaded.where,
    )
    clusters_used = _cluster_counts(frame, clusters, loaded)

    design = Design(
        y=np.ascontiguousarray(arrays[model.outcome], dtype=float),
        endog=endogenous.values,
        instruments=instruments.values,
        controls=np.ascontiguousarray(controls.values[:, screened.kept_controls]),
        fixed_effects=fixed_effects,
        clusters=clusters,
        weights=None if weights is None else np.ascontiguousarray(weights, dtype=float),
        outcome_name=model.outcome,
        endog_names=tuple(model.endogenous),
        instrument_names=tuple(model.instruments),
        control_names=tuple(controls.names[j] for j in screened.kept_controls),
        fixed_effect_names=tuple(model.fixed_effects),
        cluster_names=tuple(model.cluster_by),
    )
    sample = SampleAccount(
        rows_read=rows_read,
        steps=steps,
        missing_by_column=missing_counts,
        singletons_removed=singletons,
        rows_used=n,
        clusters_used=clusters_used,
        fixed_effect_levels=[
            int(fixed_effects[:, k].max()) + 1 for k in range(len(model.fixed_effects))
        ],
        codings=codings,
        dropped_columns=screened.dropped,
    )
    extras: dict[str, np.ndarray] = {}
    for variable in extra_variables:
        if variable.column not in extras:
            values, _ = numeric_column(
                frame[variable.column], variable.column, variable.role, loaded.where(variable.field)
            )
            extras[variable.column] = np.ascontiguousarray(values, dtype=float)
    return PreparedData(
        design=design,
        sample=sample,
        inputs=[digest],
        frame_columns=frame_columns,
        row_positions=frame.index.to_numpy(dtype=np.int64),
        extras=extras,
        cluster_levels=[
            [format_level(v) for v in integer_codes(frame[name])[1]] for name in model.cluster_by
        ],
    )
