"""Bad input through the command line: exit code 2, a message naming the problem, no bundle.

Each case writes a spec (and usually a small CSV) to a temporary folder, runs
``reportkit run`` in-process and checks the exit code, that the message names the file,
field or column, that no traceback is printed and that no bundle (or partial folder) is left.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest


def write_data(folder: Path, n: int = 240, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    df = pd.DataFrame(
        {
            "y": rng.normal(size=n),
            "d": rng.normal(size=n),
            "z1": rng.normal(size=n),
            "z2": rng.normal(size=n),
            "x1": rng.normal(size=n),
            "region": rng.choice(["north", "south", "east"], size=n),
            "site": rng.integers(0, 12, size=n),
            "word": rng.choice(["a", "b"], size=n),
        }
    )
    df["d"] = df["d"] + df["z1"] + 0.5 * df["z2"]
    df["y"] = df["y"] + df["d"]
    df.to_csv(folder / "data.csv", index=False)
    return df


BASE_MODEL = """\
model:
  outcome: y
  endogenous: [d]
  instruments: [z1, z2]
  controls: [x1]
"""


def spec_text(
    model: str = BASE_MODEL, data: str = "data:\n  path: data.csv\n", extra: str = ""
) -> str:
    return "study:\n  title: Test study\n" + data + model + "run:\n  output: out\n" + extra


def run_cli(folder: Path, spec: str) -> subprocess.CompletedProcess[str]:
    (folder / "spec.yaml").write_text(spec)
    return subprocess.run(
        [sys.executable, "-m", "reportkit", "run", "spec.yaml", "--no-pdf"],
        cwd=folder,
        capture_output=True,
        text=True,
        timeout=300,
    )


def assert_clean_failure(
    folder: Path, proc: subprocess.CompletedProcess[str], *needles: str
) -> None:
    assert proc.returncode == 2, proc.stderr + proc.stdout
    assert "Traceback" not in proc.stderr
    for needle in needles:
        assert needle in proc.stderr, f"{needle!r} not in: {proc.stderr}"
    assert not (folder / "out").exists()
    assert not [p for p in folder.iterdir() if p.name.startswith(".out")]


CASES: dict[str, tuple[str, tuple[str, ...]]] = {
    "unknown key": (
        spec_text(extra="colour: blue\n"),
        ("colour",),
    ),
    "misspelt column": (
        spec_text(model=BASE_MODEL.replace("z2]", "zz2]")),
        ("zz2", "z2"),
    ),
    "variable in two roles": (
        spec_text(model=BASE_MODEL.replace("controls: [x1]", "controls: [x1, z1]")),
        ("z1", "two roles"),
    ),
    "fewer instruments than endogenous": (
        spec_text(
            model=BASE_MODEL.replace("endogenous: [d]", "endogenous: [d, x1]")
            .replace("instruments: [z1, z2]", "instruments: [z1]")
            .replace("controls: [x1]\n", "")
        ),
        ("instrument",),
    ),
    "non-numeric instrument": (
        spec_text(model=BASE_MODEL.replace("z2]", "word]")),
        ("word",),
    ),
    "all rows filtered out": (
        spec_text(
            data="data:\n  path: data.csv\n  filters:\n"
            "    - {column: x1, keep_if: greater_than, value: 1000}\n"
        ),
        ("filter",),
    ),
    "missing data file": (
        spec_text(data="data:\n  path: nowhere.csv\n"),
        ("nowhere.csv",),
    ),
    "checksum mismatch": (
        spec_text(data="data:\n  path: data.csv\n  sha256: " + "ab" * 32 + "\n"),
        ("checksum",),
    ),
    "single cluster": (
        spec_text(model=BASE_MODEL + "  cluster_by: [const_cluster]\n"),
        ("const_cluster",),
    ),
    "YAML syntax error": (
        "study:\n  title: [unclosed\n",
        ("spec.yaml", "line"),
    ),
    "empty spec": (
        "",
        ("spec.yaml",),
    ),
    "bad estimator name": (
        spec_text(extra="estimators: [ols, tsls]\n"),
        ("tsls", "2sls"),
    ),
    "misspelt column in a control variant": (
        spec_text(extra="robustness:\n  control_sets:\n    - {name: more, add: [x11]}\n"),
        ("robustness.control_sets[0].add[0]", "x11", "x1"),
    ),
    "misspelt column in a falsification filter": (
        spec_text(
            extra="balance:\n  falsification:\n    - name: none\n"
            "      filters: [{column: regoin, keep_if: equal_to, value: north}]\n"
        ),
        ("balance.falsification[0].filters[0].column", "regoin", "region"),
    ),
    "binary treatment that is not 0/1": (
        spec_text(model=BASE_MODEL + "  binary_treatment: {column: x1}\n"),
        ("model.binary_treatment.column", "x1", "0 and 1"),
    ),
    "binary outcome that is not 0/1": (
        spec_text(extra="robustness:\n  binary_outcome: {outcome: x1}\n"),
        ("robustness.binary_outcome.outcome", "x1"),
    ),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_input_exits_2(tmp_path: Path, case: str) -> None:
    df = write_data(tmp_path)
    if case == "single cluster":
        df["const_cluster"] = 1
        df.to_csv(tmp_path / "data.csv", index=False)
    spec, needles = CASES[case]
    proc = run_cli(tmp_path, spec)
    assert_clean_failure(tmp_path, proc, *needles)


def test_check_command_names_a_misspelt_variant_column(tmp_path: Path) -> None:
    write_data(tmp_path)
    spec = spec_text(extra="robustness:\n  control_sets:\n    - {name: more, add: [x11]}\n")
    (tmp_path / "spec.yaml").write_text(spec)
    proc = subprocess.run(
        [sys.executable, "-m", "reportkit", "check", "spec.yaml"],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert proc.returncode == 2
    assert "robustness.control_sets[0].add[0]" in proc.stderr + proc.stdout
    assert "Traceback" not in proc.stderr


def test_unreadable_data_file(tmp_path: Path) -> None:
    (tmp_path / "data.parquet").write_bytes(b"this is not parquet at all")
    proc = run_cli(tmp_path, spec_text(data="data:\n  path: data.parquet\n"))
    assert_clean_failure(tmp_path, proc, "data.parquet")


def test_constant_instrument(tmp_path: Path) -> None:
    df = write_data(tmp_path)
    df["z2"] = 1.0
    df.to_csv(tmp_path / "data.csv", index=False)
    proc = run_cli(tmp_path, spec_text())
    assert_clean_failure(tmp_path, proc, "z2")


def test_collinear_instruments(tmp_path: Path) -> None:
    df = write_data(tmp_path)
    df["z2"] = 2.0 * df["z1"] - 1.0
    df.to_csv(tmp_path / "data.csv", index=False)
    proc = run_cli(tmp_path, spec_text())
    assert_clean_failure(tmp_path, proc, "z2")


def test_instrument_collinear_with_fixed_effect(tmp_path: Path) -> None:
    df = write_data(tmp_path)
    df["z2"] = df["region"].map({"north": 1.0, "south": 2.5, "east": -1.0})
    df.to_csv(tmp_path / "data.csv", index=False)
    model = BASE_MODEL + "  fixed_effects: [region]\n"
    proc = run_cli(tmp_path, spec_text(model=model))
    assert_clean_failure(tmp_path, proc, "z2")


def test_output_folder_exists(tmp_path: Path) -> None:
    write_data(tmp_path)
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "keep.txt").write_text("earlier work")
    proc = run_cli(tmp_path, spec_text())
    assert proc.returncode == 2
    assert "out" in proc.stderr and "--overwrite" in proc.stderr
    assert (tmp_path / "out" / "keep.txt").read_text() == "earlier work"


def test_unexpected_internal_error_exit_1(tmp_path: Path) -> None:
    """A directory given as the spec is a user error (2), never a traceback."""
    (tmp_path / "adir.yaml").mkdir()
    proc = subprocess.run(
        [sys.executable, "-m", "reportkit", "run", "adir.yaml"],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr


def test_help_is_quick_and_lists_commands() -> None:
    proc = subprocess.run(
        [sys.executable, "-m", "reportkit", "--help"], capture_output=True, text=True, timeout=120
    )
    assert proc.returncode == 0
    for cmd in ("run", "demo", "check", "schema"):
        assert cmd in proc.stdout


def test_schema_command_prints_json() -> None:
    import json

    proc = subprocess.run(
        [sys.executable, "-m", "reportkit", "schema"], capture_output=True, text=True, timeout=120
    )
    assert proc.returncode == 0
    doc = json.loads(proc.stdout)
    assert "properties" in doc and "model" in doc["properties"]
