"""Read a data file into a pandas DataFrame, chosen by the file's extension.

Libraries do the parsing: pandas for .csv/.tsv, pyarrow for .parquet, pyreadstat for
Stata .dta and SPSS .sav. What is ours is a uniform result, so that later stages see
the same kinds of columns whatever the format:

- value labels stay out: labelled numeric codes stay numbers (pyreadstat's default);
- Stata's extended missing values (.a-.z) and SPSS user-defined missing values are
  missing, as their own programs treat them;
- only empty cells are missing in CSV/TSV (pandas' list of words such as "NA" or
  "null" is switched off): other codes are listed, visibly, in ``data.missing_codes``;
- an empty text value is missing in every format;
- categorical columns become their plain values, and pandas' nullable integer, float
  and boolean columns become plain numpy columns (NaN for missing);
- column names are text (a name repeated in a CSV/TSV header gets pandas' suffix,
  as in a, a.1); rows keep the file's order, numbered 0..n-1.

Every failure (unknown extension, missing file, unreadable or corrupt contents) is a
``DataError`` that names the file and says what to do.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from reportkit.errors import DataError

FORMATS: dict[str, str] = {
    ".csv": "comma-separated text (CSV)",
    ".tsv": "tab-separated text (TSV)",
    ".parquet": "Parquet",
    ".dta": "Stata .dta",
    ".sav": "SPSS .sav",
}


def check_source(path: Path, where: str | None = None) -> None:
    """Fail early, with a clear message, if ``path`` is not a readable file of a known type."""
    suffix = path.suffix.lower()
    if suffix not in FORMATS:
        known = ", ".join(FORMATS)
        raise DataError(
            f"cannot read '{path.name}': the extension '{path.suffix or '(none)'}' is not one "
            f"reportkit reads ({known}); convert the file to one of these formats and "
            "change data.path",
            where,
        )
    if not path.exists():
        raise DataError(
            f"the data file '{path.name}' does not exist (looked for it in the folder "
            f"'{path.parent.name or '.'}', relative to the spec); check data.path, which "
            "is read relative to the spec file",
            where,
        )
    if not path.is_file():
        raise DataError(f"'{path.name}' is a folder, not a data file; check data.path", where)


def read_table(path: Path, where: str | None = None) -> pd.DataFrame:
    """Read ``path`` by its extension (see the module docstring for the conventions)."""
    check_source(path, where)
    suffix = path.suffix.lower()
    try:
        frame = _read(path, suffix)
    except UnicodeDecodeError as exc:
        raise DataError(
            f"cannot read '{path.name}': it is not UTF-8 text ({exc.reason} at byte "
            f"{exc.start}); save it as UTF-8, or as Parquet, and check data.path",
            where,
        ) from exc
    except (OSError, ValueError, pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise _unreadable(path, suffix, exc, where) from exc
    except Exception as exc:  # pyreadstat and pyarrow raise their own exception classes
        if type(exc).__module__.split(".")[0] in ("pyreadstat", "pyarrow"):
            raise _unreadable(path, suffix, exc, where) from exc
        raise
    return normalize_frame(frame, path.name, where)


def _read(path: Path, suffix: str) -> pd.DataFrame:
    if suffix in (".csv", ".tsv"):
        return pd.read_csv(
            path,
            sep="," if suffix == ".csv" else "\t",
            keep_default_na=False,
            na_values=[""],
            encoding="utf-8-sig",  # a byte-order mark must not become part of a column name
            low_memory=False,  # infer each column's type from all its rows, not per chunk
        )
    if suffix == ".parquet":
        return pd.read_parquet(path, engine="pyarrow")
    import pyreadstat  # imported here: only .dta/.sav need it

    reader = pyreadstat.read_dta if suffix == ".dta" else pyreadstat.read_sav
    frame, _meta = reader(
        str(path), apply_value_formats=False, user_missing=False, dates_as_pandas_datetime=True
    )
    return frame


def _unreadable(path: Path, suffix: str, exc: BaseException, where: str | None) -> DataError:
    text = str(exc).strip().replace(str(path), path.name)  # keep machine folders out
    detail = text.splitlines()[0] if text else type(exc).__name__
    return DataError(
        f"cannot read '{path.name}' as a {FORMATS[suffix]} file ({detail}); check that the "
        "file is complete and not damaged, and that its extension in data.path matches "
        "its format",
        where,
    )


def normalize_frame(frame: pd.DataFrame, file_name: str, where: str | None = None) -> pd.DataFrame:
    """Give every reader's output the same kinds of columns (see the module docstring)."""
    columns: dict[str, pd.Series] = {}
    for position, name in enumerate(frame.columns):
        columns[str(name)] = _normalize_column(frame.iloc[:, position])
    if len(columns) < frame.shape[1]:
        names = [str(c) for c in frame.columns]
        repeated = sorted({c for c in names if names.count(c) > 1})
        raise DataError(
            f"'{file_name}' has more than one column named "
            f"{', '.join(repr(c) for c in repeated)}; give every column a distinct name",
            where,
        )
    return pd.DataFrame(columns).reset_index(drop=True)


def _normalize_column(series: pd.Series) -> pd.Series:
    dtype = series.dtype
    if isinstance(dtype, pd.CategoricalDtype):
        series = series.astype(dtype.categories.dtype if len(dtype.categories) else object)
        dtype = series.dtype
    if isinstance(dtype, pd.BooleanDtype):
        if series.isna().any():
            return series.astype(object).where(series.notna(), np.nan)
        return series.astype(bool)
    if pd.api.types.is_extension_array_dtype(dtype) and pd.api.types.is_numeric_dtype(dtype):
        if series.isna().any() or pd.api.types.is_float_dtype(dtype):
            return pd.Series(series.to_numpy(dtype=float, na_value=np.nan), index=series.index)
        return pd.Series(series.to_numpy(dtype=dtype.numpy_dtype), index=series.index)
    if pd.api.types.is_string_dtype(dtype) or pd.api.types.is_object_dtype(dtype):
        empty = series.eq("").to_numpy(dtype=bool, na_value=False)
        if empty.any():
            series = series.mask(empty)
    return series
