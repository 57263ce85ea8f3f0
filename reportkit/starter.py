"""A starter spec for a data file: what ``reportkit new DATAFILE`` writes.

The starter is valid YAML with the parts that can be known from the file filled in
(study title from the file name, data path relative to the spec, the file's SHA-256, a
seed derived from that checksum, an output folder) and the parts only the authors can
decide left commented out: the model, the estimators and inference, balance, and the
arguments for the assumptions. ``model`` is required, so the untouched starter fails
``load_spec`` with the ordinary "missing model" error rather than validating with
placeholders that would be silently wrong.

Every column is listed in the comment block under the model: its type, missing count,
distinct values, range and a few examples, and a guess at its role. The guesses are our
own heuristics from the values alone (column names are never read, since they cannot be
trusted): unique per row -> identifier; 0/1 -> binary; few text levels -> categorical
control or fixed effect; many repeated levels -> fixed effect or cluster; negative
round codes (-99, -999, ...) -> possible missing-value codes. Common practice, no source.

The text is deterministic: the same file gives the same starter, byte for byte.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
import textwrap
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
import pandas as pd

from reportkit.data.readers import FORMATS, check_source, read_table
from reportkit.data.values import column_kind
from reportkit.errors import DataError, OutputError

ColumnType = Literal["numeric", "boolean", "text", "date"]

FEW_LEVELS = 12  # at most this many levels: a categorical control is plausible
EXAMPLES = 3  # example values shown per column
LINE_WIDTH = 100  # comment lines are wrapped to this width
SUSPECT_CODES = (-9.0, -99.0, -999.0, -9999.0, -8.0, -88.0, -888.0, -97.0, -98.0)
_PLAIN_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_.\-]*")
_YAML_WORDS = {"true", "false", "null"}  # plain words YAML 1.2 (ruamel's default) reads as values
_TYPES: dict[str, ColumnType] = {
    "number": "numeric",
    "boolean": "boolean",
    "text": "text",
    "datetime": "date",
}


@dataclass(frozen=True)
class ColumnProfile:
    """What the starter says about one column: facts from the values, and a guess."""

    name: str
    type: ColumnType
    missing: int
    distinct: int
    value_range: tuple[str, str] | None  # smallest and largest, for numbers and dates
    examples: tuple[str, ...]  # the first distinct values, in file order
    guess: str  # a guessed role, phrased as a question
    notes: tuple[str, ...]  # e.g. possible missing-value codes


def default_spec_path(data_path: Path) -> Path:
    """``<data file stem>.yaml`` next to the data file."""
    return data_path.with_suffix(".yaml")


def seed_from_checksum(sha256: str) -> int:
    """The run seed: the first 8 hexadecimal digits of the data's SHA-256, as a number."""
    return int(sha256[:8], 16)


def file_sha256(path: Path) -> str:
    """SHA-256 of ``path`` (lower-case hex), read in 1 MiB chunks (FIPS 180-4, 2015)."""
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        while chunk := handle.read(1 << 20):
            digest.update(chunk)
    return digest.hexdigest()


def profile_columns(frame: pd.DataFrame) -> tuple[ColumnProfile, ...]:
    """One profile per column of ``frame`` (as ``read_table`` returns it), in file order."""
    return tuple(_profile(str(name), frame[name], len(frame)) for name in frame.columns)


def write_starter(data_path: Path, output: Path | None = None, overwrite: bool = False) -> Path:
    """Write the starter spec for ``data_path`` and return its path.

    Raises ``DataError`` when the data cannot be read and ``OutputError`` when the spec
    file exists (unless ``overwrite``) or cannot be written; nothing is written then.
    """
    check_data_file(data_path)  # the cheap checks first
    target = output if output is not None else default_spec_path(data_path)
    if target.is_dir():
        raise OutputError(
            f"'{target}' is a folder; give the path of the spec file to write, e.g. "
            f"--output {target / default_spec_path(data_path).name}"
        )
    if target.exists() and not overwrite:
        raise _exists(target)
    if not target.parent.is_dir():
        raise OutputError(
            f"cannot write '{target.name}': the folder '{target.parent}' does not exist; "
            "create it first or choose another --output"
        )
    text = starter_text(data_path, target)
    _write_text(target, text, overwrite)
    return target


def _exists(target: Path) -> OutputError:
    return OutputError(
        f"'{target}' exists already and is left as it is; choose another name with "
        "--output, or replace it with --overwrite"
    )


def _write_text(target: Path, text: str, overwrite: bool) -> None:
    """Write ``text`` so that no half-written spec is left and nothing is clobbered by accident.

    With ``overwrite`` a temporary file in the same folder replaces the old one in one step;
    without it the file is created exclusively (failing if one appeared in the meantime)
    and removed again if writing fails.
    """
    temp = target.with_name(f".{target.name}.{os.getpid()}.tmp")
    created = False
    try:
        if overwrite:
            temp.write_text(text, encoding="utf-8", newline="\n")
            os.replace(temp, target)
        else:
            with target.open("x", encoding="utf-8", newline="\n") as handle:
                created = True
                handle.write(text)
    except FileExistsError as exc:
        raise _exists(target) from exc
    except OSError as exc:
        if created:
            target.unlink(missing_ok=True)
        raise OutputError(
            f"cannot write '{target}' ({exc.strerror or exc}); check that you may write "
            "to that folder, or choose another --output"
        ) from exc
    finally:
        temp.unlink(missing_ok=True)


def check_data_file(path: Path) -> None:
    """Fail with a clear message when ``path`` is missing, a folder or of an unknown type.

    The reader's own check speaks of ``data.path`` in a spec; here the path comes from the
    command line, so the messages say so.
    """
    if path.suffix.lower() not in FORMATS:
        raise DataError(
            f"cannot read '{path.name}': the extension '{path.suffix or '(none)'}' is not one "
            f"reportkit reads ({', '.join(FORMATS)}); convert the file to one of these formats"
        )
    if not path.exists():
        raise DataError(
            f"the data file '{path}' does not exist; check the path, which is read relative "
            "to the folder you run the command from"
        )
    if not path.is_file():
        raise DataError(f"'{path}' is a folder, not a data file; give the data file's path")
    check_source(path)


def starter_text(data_path: Path, spec_path: Path) -> str:
    """The starter spec for ``data_path``, to be saved as ``spec_path``."""
    check_data_file(data_path)
    frame = read_table(data_path)
    if frame.shape[0] == 0:
        raise DataError(
            f"'{data_path.name}' has column names but no rows of data; a starter spec needs "
            "the data to describe its columns; check that this is the right file"
        )
    try:
        sha = file_sha256(data_path)
    except OSError as exc:
        raise DataError(
            f"cannot open '{data_path.name}' ({exc.strerror or exc}); check that you may read it"
        ) from exc
    rel = _relative_path(data_path, spec_path)
    return _render(data_path.name, rel, sha, frame.shape, profile_columns(frame))


# --- profiling ------------------------------------------------------------------------


def _profile(name: str, series: pd.Series, n_rows: int) -> ColumnProfile:
    col_type = _TYPES[column_kind(series)]
    present = series.dropna()
    missing = int(n_rows - len(present))
    levels = pd.unique(present.to_numpy())
    distinct = len(levels)
    examples = tuple(_show(v, col_type) for v in levels[:EXAMPLES])
    value_range = None
    numbers = _as_float(present) if col_type in ("numeric", "boolean") else None
    if distinct and col_type in ("numeric", "date"):
        value_range = (_show(present.min(), col_type), _show(present.max(), col_type))
    codes = _code_notes(numbers) if col_type == "numeric" else ()
    words = _text_number_notes(present) if col_type == "text" else ()
    if words:
        guess = "numbers, once the text code(s) in the note are listed in data.missing_codes"
    elif codes:  # guess from the values that are not possible missing-value codes
        assert numbers is not None
        kept = present[~np.isin(numbers, SUSPECT_CODES)]
        guess = _guess(col_type, _as_float(kept), pd.unique(kept.to_numpy()), len(kept), n_rows)
    else:
        guess = _guess(col_type, numbers, levels, len(present), n_rows)
    notes = codes + words
    return ColumnProfile(name, col_type, missing, distinct, value_range, examples, guess, notes)


def _as_float(present: pd.Series) -> np.ndarray:
    return present.to_numpy(dtype=float)


def _whole(numbers: np.ndarray) -> bool:
    return bool(np.all(np.isfinite(numbers)) and np.all(numbers == np.round(numbers)))


def _guess(
    col_type: ColumnType,
    numbers: np.ndarray | None,
    levels: np.ndarray,
    present: int,
    n_rows: int,
) -> str:
    """A role guessed from the values alone, phrased as a question."""
    distinct = len(levels)
    if present == 0:
        return "empty (every value is missing): leave it out"
    if distinct == 1:
        return "constant (one value): no use in the model; perhaps a row filter?"
    if col_type == "date":
        return "date: not usable in the model as it is; a row filter, or a period fixed effect?"
    if numbers is not None and set(np.unique(numbers)) <= {0.0, 1.0}:
        return "binary (0/1): instrument (e.g. an offer), treatment, outcome or control?"
    if distinct == 2:
        shown = ", ".join(_show(v, col_type) for v in levels)
        return f"two values ({shown}): recode to 0/1 for a binary role, or a categorical control?"
    unique_per_row = distinct == n_rows
    if col_type == "text":
        if unique_per_row:
            return "identifier? (unique per row): leave it out of the model"
        per_level = present / distinct
        if distinct <= FEW_LEVELS:
            return f"categorical control or fixed effect? (text with {distinct} levels)"
        return (
            f"cluster or fixed effect? (text with {distinct:,} levels, "
            f"about {_round_count(per_level)} rows each)"
        )
    assert numbers is not None
    if _whole(numbers):
        if unique_per_row:
            return "identifier? (whole numbers, unique per row): leave it out of the model"
        if distinct <= FEW_LEVELS:
            return (
                f"ordered scale or group codes? ({distinct} whole-number values): a control, "
                "or categorical control / fixed effect if the numbers are codes"
            )
        if distinct <= present / 5:
            return (
                f"count, or group codes? ({distinct:,} whole-number values, about "
                f"{_round_count(present / distinct)} rows each): a control, or a fixed "
                "effect or cluster if the numbers are codes"
            )
    return "continuous: outcome, endogenous regressor, instrument or control?"


def _code_notes(numbers: np.ndarray | None) -> tuple[str, ...]:
    """Negative round values that often stand for 'missing', with how often they occur."""
    notes: list[str] = []
    for code in SUSPECT_CODES if numbers is not None else ():
        count = int(np.sum(numbers == code))
        if count:
            notes.append(
                f"{_show(code, 'numeric')} occurs {count:,} time(s): a missing-value code? "
                "then list it in data.missing_codes"
            )
    return tuple(notes)


def _text_number_notes(present: pd.Series) -> tuple[str, ...]:
    """A text column that is mostly numbers: the few words in it may be missing-value codes."""
    if not len(present):
        return ()
    text = present.astype(str)
    words = text[pd.to_numeric(text, errors="coerce").isna().to_numpy()]
    word_levels = pd.unique(words.to_numpy())
    if len(words) > 0.2 * len(present) or not 0 < len(word_levels) <= 3:
        return ()
    return tuple(
        f"numbers stored as text: {_quote(_clip(word))} occurs {int((words == word).sum()):,} "
        "time(s); a missing-value code? then list it in data.missing_codes"
        for word in word_levels
    )


def _round_count(x: float) -> str:
    return f"{round(x):,}" if x >= 10 else f"{x:.1f}".rstrip("0").rstrip(".")


# --- showing values -------------------------------------------------------------------


def _show(value: object, col_type: ColumnType) -> str:
    """A value as it reads in a comment (one line, short)."""
    if isinstance(value, bool | np.bool_):
        return "true" if value else "false"
    if col_type == "date" and isinstance(value, pd.Timestamp | np.datetime64):
        stamp = pd.Timestamp(value)
        if stamp == stamp.normalize():
            return stamp.strftime("%Y-%m-%d")
        return stamp.isoformat()
    if isinstance(value, int | np.integer):
        return str(int(value))
    if isinstance(value, float | np.floating):
        number = float(value)
        if math.isfinite(number) and number.is_integer() and abs(number) < 1e15:
            return str(int(number))
        return f"{number:.6g}"
    return _quote(_clip(str(value)))


def _clip(text: str, limit: int = 24) -> str:
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _quote(text: str) -> str:
    """Double-quoted, escaped (a JSON string is a valid YAML double-quoted scalar)."""
    return json.dumps(text, ensure_ascii=False)


def yaml_name(name: str) -> str:
    """``name`` as it must be written in the spec: plain when safe, else double-quoted."""
    plain = _PLAIN_NAME.fullmatch(name) and name.lower() not in _YAML_WORDS
    if plain:
        try:
            float(name)
        except ValueError:
            return name
    return _quote(name)


def _relative_path(data_path: Path, spec_path: Path) -> str:
    data_abs, spec_dir = data_path.resolve(), spec_path.resolve().parent
    try:
        return Path(os.path.relpath(data_abs, spec_dir)).as_posix()
    except ValueError:  # another drive (Windows): only an absolute path can reach it
        return data_abs.as_posix()


# --- the text -------------------------------------------------------------------------


def _render(
    file_name: str,
    rel_path: str,
    sha: str,
    shape: tuple[int, int],
    profiles: Sequence[ColumnProfile],
) -> str:
    stem = Path(file_name).stem
    title = re.sub(r"[_\-\s]+", " ", stem).strip() or stem
    n_rows, n_cols = shape
    lines = [
        f"# Starter spec for {file_name}, written by 'reportkit new'.",
        "# Fill in the model section (commented out below: it is required, so this file",
        "# does not run until you do), then run: reportkit check <this file>",
        "# 'reportkit schema' lists every key with its meaning.",
        "",
        "study:",
        f"  title: {_quote(title)}  # from the file name: write the study's own title",
        "  authors: []",
        '  summary: ""',
        "",
        "data:",
        f"  path: {_quote(rel_path)}  # relative to this spec file",
        f"  sha256: {sha}",
        "  # ^ the data file's SHA-256 when this starter was written: a run stops if the file",
        "  #   changes; when you change the data on purpose, update it (or delete the line)",
        "  missing_codes: []  # values that mean 'missing' in any column, e.g. [-99]",
        "  filters: []  # e.g. - {column: COLUMN, keep_if: equal_to, value: 1}",
        "",
        "# model:  # required: remove the '# ' in front of these lines and name the columns",
        "#   outcome:  # one column: what the treatment is thought to change",
        "#   endogenous: []  # the treatment column(s), instrumented",
        "#   instruments: []  # the excluded instrument(s): at least one per endogenous column",
        "#   controls: []  # numeric or 0/1 exogenous controls",
        "#   categorical_controls: []  # groups coded as one indicator per level",
        "#   fixed_effects: []  # groups whose effects are absorbed (partialled out)",
        "#   cluster_by: []  # one or two group columns for clustered standard errors",
        "#   # weights: COLUMN  # optional: non-negative analytic weights",
        "#",
        f"# The columns of {file_name} ({n_rows:,} rows, {n_cols:,} columns). After each one",
        "# is a GUESS at its role from its values alone (names are not read): only a guess,",
        "# check each before you use it. Write a name as shown here.",
        "#",
    ]
    lines += _column_lines(profiles)
    lines += [
        "",
        "# estimators: [ols, 2sls, liml, gmm]  # default: all four",
        "# inference:",
        "#   covariance: robust  # classical, robust or cluster; default: cluster when",
        "#                       # model.cluster_by is given, robust otherwise",
        "#   confidence_level: 0.95",
        "# balance:",
        "#   pre_treatment: []  # columns measured before the instruments were assigned",
        "#   placebo_outcomes: []  # outcomes the instruments should not move",
        "",
        "# assumptions:  # your own argument for each assumption no data can fully test;",
        "#               # the appendix quotes it, and shows a missing one as missing",
        "#   relevance:",
        '#     argument: ""  # why the instruments move the treatment, and in which direction',
        "#   independence:",
        '#     argument: ""  # why the instruments are as good as randomly assigned',
        "#   exclusion_restriction:",
        '#     argument: ""  # why the instruments change the outcome only through the treatment',
        "#   monotonicity:",
        '#     argument: ""  # why no unit\'s treatment moves against the instrument',
        "#   late_claimed: true  # the estimate is read as an effect for compliers (LATE)",
        "",
        "run:",
        f"  output: {_quote(stem + '-appendix')}  # bundle folder, relative to this spec file",
        f"  seed: {seed_from_checksum(sha)}",
        "  # ^ the first 8 hexadecimal digits of the data file's SHA-256, read as a number,",
        "  #   so the same file gives the same seed; any whole number will do",
    ]
    return "\n".join(lines) + "\n"


def _column_lines(profiles: Sequence[ColumnProfile]) -> list[str]:
    names = [yaml_name(p.name) for p in profiles]
    width = min(max((len(n) for n in names), default=0), 28)
    lines: list[str] = []
    for name, p in zip(names, profiles, strict=True):
        facts = [p.type, f"{p.missing:,} missing", f"{p.distinct:,} distinct"]
        if p.value_range is not None:
            facts.append(f"{p.value_range[0]} to {p.value_range[1]}")
        if p.examples:
            facts.append("e.g. " + ", ".join(p.examples))
        lines.append(f"#   {name:<{width}}  " + "; ".join(facts))
        indent = f"#   {'':<{width}}    "
        for remark in (p.guess, *(f"note: {note}" for note in p.notes)):
            lines += textwrap.wrap(
                remark,
                LINE_WIDTH,
                initial_indent=indent,
                subsequent_indent=indent + "  ",
                break_long_words=False,
                break_on_hyphens=False,
            )
    return lines
