"""``reportkit new DATAFILE``: the starter spec.

Each file type is written by its own library (pandas for CSV/TSV/Parquet/.dta, pyreadstat
for .sav) and the column listing in the starter is checked against pandas' own reading of
the frame (types from pandas' dtype predicates, missing counts from ``isna``). The role
guesses are our own heuristics (common practice, no source): the tests check that each
kind of column gets the guess it was built for, and that names are not read. The starter
must fail ``load_spec`` with the ordinary missing-model error until the model is filled
in, and pass ``reportkit check`` once it is.
"""

from __future__ import annotations

import hashlib
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pyreadstat
import pytest
from typer.testing import CliRunner

from reportkit.cli import app
from reportkit.errors import DataError, OutputError, SpecError
from reportkit.spec.loader import load_spec
from reportkit.spec.yaml_io import parse_yaml
from reportkit.starter import profile_columns, starter_text, write_starter, yaml_name

REPO = Path(__file__).resolve().parents[1]
N = 300
LISTING = re.compile(
    r"^#   (?P<name>\S+)\s+(?P<type>numeric|boolean|text|date); (?P<missing>[\d,]+) missing; "
    r"(?P<distinct>[\d,]+) distinct",
    re.MULTILINE,
)


def make_frame(seed: int = 11) -> pd.DataFrame:
    """Invented data: an instrument z moves d, d moves y; plus columns of every kind."""
    rng = np.random.default_rng(seed)
    z = rng.integers(0, 2, size=N)
    x = rng.normal(size=N)
    d = 0.8 * z + 0.3 * x + rng.normal(size=N)
    y = 1.5 * d + 0.5 * x + rng.normal(size=N)
    y[[3, 17, 41]] = np.nan
    region = rng.choice(["north", "south", "east", "west"], size=N).astype(object)
    region[[5, 6]] = ""  # empty text: missing in every format
    frame = pd.DataFrame(
        {
            "record": [f"R{i:04d}" for i in range(N)],  # text, unique per row
            "serial": np.arange(1000, 1000 + N),  # whole numbers, unique per row
            "y": y,
            "d": d,
            "z": z,
            "x": x,
            "region": region,
            "site": [f"site{i % 30:02d}" for i in range(N)],  # 30 levels, 10 rows each
            # a misleading name: the values are continuous, and the guess must follow them
            "id": rng.normal(size=N),
        }
    )
    return frame


def expected_listing(frame: pd.DataFrame) -> dict[str, tuple[str, int]]:
    """Type and missing count per column, from pandas alone (empty text counts as missing)."""
    out: dict[str, tuple[str, int]] = {}
    for name in frame.columns:
        col = frame[name]
        if pd.api.types.is_string_dtype(col.dtype):
            col = col.replace("", np.nan)
        if pd.api.types.is_bool_dtype(col.dtype):
            kind = "boolean"
        elif pd.api.types.is_numeric_dtype(col.dtype):
            kind = "numeric"
        elif pd.api.types.is_datetime64_any_dtype(col.dtype):
            kind = "date"
        else:
            kind = "text"
        out[str(name)] = (kind, int(col.isna().sum()))
    return out


def listed(text: str) -> dict[str, tuple[str, int]]:
    return {
        m["name"]: (m["type"], int(m["missing"].replace(",", ""))) for m in LISTING.finditer(text)
    }


def guesses(text: str) -> dict[str, str]:
    """The first comment line after each column's facts: its guessed role."""
    lines = text.splitlines()
    out = {}
    for i, line in enumerate(lines):
        m = LISTING.match(line)
        if m:
            out[m["name"]] = lines[i + 1].lstrip("# ").strip()
    return out


def write_data(folder: Path, suffix: str, frame: pd.DataFrame | None = None) -> Path:
    frame = make_frame() if frame is None else frame
    path = folder / f"survey{suffix}"
    if suffix == ".csv":
        frame.to_csv(path, index=False)
    elif suffix == ".tsv":
        frame.to_csv(path, sep="\t", index=False)
    elif suffix == ".parquet":
        frame.to_parquet(path, index=False)
    elif suffix == ".dta":
        frame.to_stata(path, write_index=False, version=118)
    elif suffix == ".sav":
        pyreadstat.write_sav(frame, str(path))
    return path


def fill_in_model(text: str) -> str:
    """What a user does: uncomment the model lines and name the columns."""
    replacements = {
        "# model:": "model:",
        "#   outcome:": "  outcome: y",
        "#   endogenous: []": "  endogenous: [d]",
        "#   instruments: []": "  instruments: [z]",
        "#   controls: []": "  controls: [x]",
        "#   categorical_controls: []": "  categorical_controls: [region]",
        "#   cluster_by: []": "  cluster_by: [site]",
    }
    for old, new in replacements.items():
        text, count = re.subn("^" + re.escape(old), new, text, count=1, flags=re.MULTILINE)
        assert count == 1, old
    return text


def subprocess_env() -> dict[str, str]:
    # the repository's package first, whatever copy may be installed
    paths = [str(REPO), os.environ.get("PYTHONPATH", "")]
    return {**os.environ, "PYTHONPATH": os.pathsep.join(p for p in paths if p)}


# --- every file type ----------------------------------------------------------------------


@pytest.mark.parametrize("suffix", [".csv", ".tsv", ".parquet", ".dta", ".sav"])
def test_each_file_type_lists_every_column_as_pandas_reads_it(tmp_path: Path, suffix: str) -> None:
    frame = make_frame()
    data = write_data(tmp_path, suffix, frame)
    spec = write_starter(data)
    assert spec == tmp_path / "survey.yaml"
    text = spec.read_text(encoding="utf-8")
    assert listed(text) == expected_listing(frame)
    assert list(listed(text)) == list(frame.columns)  # file order
    assert f"  sha256: {hashlib.sha256(data.read_bytes()).hexdigest()}\n" in text
    assert f'  path: "survey{suffix}"' in text


def test_listing_of_booleans_dates_and_counts_matches_pandas(tmp_path: Path) -> None:
    rng = np.random.default_rng(5)
    flags = pd.array(rng.integers(0, 2, size=N).astype(bool), dtype="boolean")
    flags[[0, 9]] = pd.NA
    frame = pd.DataFrame(
        {
            "flag": flags,
            "when": pd.to_datetime("2021-03-01") + pd.to_timedelta(rng.integers(0, 90, N), "D"),
            "score": rng.normal(size=N),
        }
    )
    frame.loc[[4, 8, 15, 16], "when"] = pd.NaT
    data = write_data(tmp_path, ".parquet", frame)
    text = starter_text(data, tmp_path / "survey.yaml")
    assert listed(text) == {"flag": ("boolean", 2), "when": ("date", 4), "score": ("numeric", 0)}
    when = frame["when"].dropna()
    assert f"{when.min():%Y-%m-%d} to {when.max():%Y-%m-%d}" in text
    profiles = {p.name: p for p in profile_columns(pd.read_parquet(data))}
    assert profiles["when"].distinct == frame["when"].nunique()
    assert profiles["score"].distinct == frame["score"].nunique()
    assert profiles["flag"].guess.startswith("binary (0/1)")
    assert profiles["when"].guess.startswith("date")


# --- the guesses --------------------------------------------------------------------------


def test_guesses_follow_the_values_not_the_names(tmp_path: Path) -> None:
    text = starter_text(write_data(tmp_path, ".csv"), tmp_path / "survey.yaml")
    guess = guesses(text)
    assert guess["record"] == "identifier? (unique per row): leave it out of the model"
    assert guess["serial"].startswith("identifier? (whole numbers, unique per row)")
    assert guess["z"].startswith("binary (0/1)")
    assert guess["region"] == "categorical control or fixed effect? (text with 4 levels)"
    assert guess["site"] == "cluster or fixed effect? (text with 30 levels, about 10 rows each)"
    for name in ("y", "d", "x", "id"):  # 'id' is continuous: its name must not decide
        assert guess[name].startswith("continuous"), name
    assert "only a guess" in text and "names are not read" in text


def test_possible_missing_codes_are_pointed_out(tmp_path: Path) -> None:
    frame = pd.DataFrame(
        {
            "income": [12.5, -99, 30.1, 22.0, -99, 18.2] * 10,
            "count_as_text": ["3", "4", "NA", "5", "6", "7"] * 10,
            "offer": [0, 1, -99, 1, 0, 1] * 10,
        }
    )
    text = starter_text(write_data(tmp_path, ".csv", frame), tmp_path / "survey.yaml")
    # the guess leaves the possible codes out: without -99, 'offer' is 0/1
    assert guesses(text)["offer"].startswith("binary (0/1)")
    assert "note: -99 occurs 10 time(s)" in text
    assert "note: -99 occurs 20 time(s): a missing-value code?" in text
    assert 'note: numbers stored as text: "NA" occurs 10 time(s)' in " ".join(text.split())


# --- loading --------------------------------------------------------------------------------


def test_untouched_starter_fails_with_the_missing_model_error(tmp_path: Path) -> None:
    spec = write_starter(write_data(tmp_path, ".csv"))
    with pytest.raises(SpecError) as info:
        load_spec(spec)
    assert str(info.value) == (
        "survey.yaml, model: required section 'model' is missing; add a top-level 'model:' "
        "section (The structural equation and the instrument set)."
    )


def test_model_uncommented_but_not_filled_in_does_not_load(tmp_path: Path) -> None:
    # no placeholder may validate: uncommenting the model as written must fail
    spec = write_starter(write_data(tmp_path, ".csv"))
    lines = spec.read_text().splitlines()
    start = lines.index(next(line for line in lines if line.startswith("# model:")))
    for i in range(start, start + 8):
        lines[i] = lines[i][2:]
    spec.write_text("\n".join(lines) + "\n")
    with pytest.raises(SpecError) as info:
        load_spec(spec)
    assert "model.outcome" in str(info.value)
    assert "model.endogenous" in str(info.value)


def test_filled_in_model_loads_and_passes_check(tmp_path: Path) -> None:
    data = write_data(tmp_path, ".csv")
    spec = write_starter(data)
    spec.write_text(fill_in_model(spec.read_text()))
    loaded = load_spec(spec)
    sha = hashlib.sha256(data.read_bytes()).hexdigest()
    assert loaded.spec.data.sha256 == sha
    assert loaded.spec.run.seed == int(sha[:8], 16)
    assert loaded.spec.run.output == "survey-appendix"
    assert loaded.spec.study.title == "survey"
    assert loaded.spec.model.cluster_by == ["site"]
    proc = subprocess.run(
        [sys.executable, "-m", "reportkit", "check", spec.name],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=300,
        env=subprocess_env(),
    )
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "spec: survey.yaml is valid" in proc.stdout
    assert f"rows used: {N - 3 - 2:,}" in proc.stdout  # 3 missing outcomes, 2 missing regions


def test_assumption_prompts_load_once_answered(tmp_path: Path) -> None:
    spec = write_starter(write_data(tmp_path, ".csv"))
    text = fill_in_model(spec.read_text())
    keys = ("relevance", "independence", "exclusion_restriction", "monotonicity")
    for key in keys:
        assert f"#   {key}:\n" in text
    text = text.replace("# assumptions:", "assumptions:")
    for key in keys:
        text = text.replace(f"#   {key}:\n", f"  {key}:\n")
    text = re.sub(r'^#     argument: ""', '    argument: "Because."', text, flags=re.MULTILINE)
    spec.write_text(text)
    assumptions = load_spec(spec).spec.assumptions
    for key in keys:
        assert getattr(assumptions, key).argument == "Because."


def test_spec_in_another_folder_points_back_to_the_data(tmp_path: Path) -> None:
    data = write_data(tmp_path, ".parquet")
    (tmp_path / "specs").mkdir()
    spec = write_starter(data, output=tmp_path / "specs" / "first.yaml")
    assert '  path: "../survey.parquet"' in spec.read_text()
    spec.write_text(fill_in_model(spec.read_text()))
    assert load_spec(spec).spec.data.path == "../survey.parquet"


# --- the command line -----------------------------------------------------------------------


def test_command_writes_the_starter_and_says_what_to_do_next(tmp_path: Path) -> None:
    write_data(tmp_path, ".csv")
    proc = subprocess.run(
        [sys.executable, "-m", "reportkit", "new", "survey.csv"],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=300,
        env=subprocess_env(),
    )
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "starter spec written to survey.yaml" in proc.stdout
    assert "edit the model section" in proc.stdout
    assert "then run: reportkit check survey.yaml" in proc.stdout
    assert (tmp_path / "survey.yaml").is_file()


def test_no_overwrite_without_the_flag(tmp_path: Path) -> None:
    data = write_data(tmp_path, ".csv")
    first = CliRunner().invoke(app, ["new", str(data)])
    assert first.exit_code == 0, first.output
    spec = tmp_path / "survey.yaml"
    original = spec.read_text()
    spec.write_text("# my own edits\n")
    again = CliRunner().invoke(app, ["new", str(data)])
    assert again.exit_code == 2
    assert "exists already" in again.output and "--overwrite" in again.output
    assert "Traceback" not in again.output
    assert spec.read_text() == "# my own edits\n"
    with pytest.raises(OutputError):
        write_starter(data)
    forced = CliRunner().invoke(app, ["new", str(data), "--overwrite"])
    assert forced.exit_code == 0, forced.output
    assert spec.read_text() == original


@pytest.mark.parametrize(
    ("name", "content", "needle"),
    [
        ("absent.csv", None, "does not exist"),
        ("table.xlsx", b"not a table", "extension '.xlsx' is not one reportkit reads"),
        ("broken.parquet", b"not parquet at all", "cannot read 'broken.parquet' as a Parquet"),
        ("header_only.csv", b"a,b\n", "no rows of data"),
    ],
)
def test_bad_input_exits_2_and_writes_nothing(
    tmp_path: Path, name: str, content: bytes | None, needle: str
) -> None:
    if content is not None:
        (tmp_path / name).write_bytes(content)
    before = sorted(p.name for p in tmp_path.iterdir())
    result = CliRunner().invoke(app, ["new", str(tmp_path / name)])
    assert result.exit_code == 2
    assert needle in result.output
    assert "Traceback" not in result.output
    assert sorted(p.name for p in tmp_path.iterdir()) == before


def test_missing_output_folder_is_an_error(tmp_path: Path) -> None:
    data = write_data(tmp_path, ".csv")
    with pytest.raises(OutputError, match="does not exist"):
        write_starter(data, output=tmp_path / "nowhere" / "spec.yaml")
    with pytest.raises(DataError):
        write_starter(tmp_path / "survey.dat")


# --- determinism ----------------------------------------------------------------------------


def test_same_file_gives_the_same_text(tmp_path: Path) -> None:
    first = write_data(tmp_path, ".sav")
    (tmp_path / "copy").mkdir()
    # a byte-identical copy (writing .sav twice is not: the header stamps the time of writing)
    second = Path(shutil.copy(first, tmp_path / "copy" / first.name))
    assert first.read_bytes() == second.read_bytes()
    a = write_starter(first).read_bytes()
    b = write_starter(second).read_bytes()
    assert a == b
    assert write_starter(first, overwrite=True).read_bytes() == a
    # another file: another checksum, so another seed
    (tmp_path / "other").mkdir()
    other = write_data(tmp_path / "other", ".sav", make_frame(seed=12))
    seeds = {re.search(rb"\n  seed: (\d+)\n", t)[1] for t in (a, write_starter(other).read_bytes())}
    assert len(seeds) == 2


def test_awkward_names_and_values_are_written_so_that_yaml_reads_them_back(
    tmp_path: Path,
) -> None:
    awkward = ["first score", "true", "2020", "a: b", "#note", "Null", "ok_name"]
    frame = pd.DataFrame({name: np.arange(N) % 7 for name in awkward})
    frame["comment"] = ["two\nlines", "# not a comment", 'quote "q"', "x: y"] * (N // 4)
    data = write_data(tmp_path, ".parquet", frame)
    spec = write_starter(data)
    text = spec.read_text(encoding="utf-8")
    for name in [*awkward, "comment"]:
        shown = yaml_name(name)
        assert f"\n#   {shown} " in text, name
        assert parse_yaml(f"k: {shown}\n", "t.yaml").data == {"k": name}
    assert yaml_name("ok_name") == "ok_name"
    # values with line breaks or '#' stay inside their comment line: the file still parses,
    # and the only problem is the missing model
    with pytest.raises(SpecError, match="required section 'model' is missing") as info:
        load_spec(spec)
    assert "\n" not in str(info.value)
