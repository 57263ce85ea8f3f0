"""``reportkit verify``: a fresh bundle verifies; an edited, moved or incomplete one is named.

A small bundle is written once per module from invented data (``api.run`` without the PDF)
and copied for every test that alters it. Checksums are checked against ``hashlib``
(SHA-256, FIPS 180-4), independently of the code under test. The tolerance rule (relative
1e-9, absolute 1e-12 near zero) is common practice for deterministic linear algebra
(no source); the tests check that verify applies the stated rule, on both sides of it.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from reportkit import api
from reportkit.cli import app
from reportkit.verify import Tolerance, compare_results, verify_bundle

REPO = Path(__file__).resolve().parents[1]
DEMO_SPEC = REPO / "fixtures" / "demo" / "tutoring.yaml"

SPEC = """\
study:
  title: Verify test study
data:
  path: data.csv
model:
  outcome: y
  endogenous: [d]
  instruments: [z1, z2]
  controls: [x1]
  cluster_by: [site]
run:
  output: bundle
  seed: 7
"""


def write_data(path: Path, n: int = 300, seed: int = 11) -> None:
    """Invented data: d is endogenous (shares u with y), z1 and z2 shift d."""
    rng = np.random.default_rng(seed)
    u = rng.normal(size=n)
    df = pd.DataFrame(
        {
            "z1": rng.normal(size=n),
            "z2": rng.normal(size=n),
            "x1": rng.normal(size=n),
            "site": rng.integers(0, 15, size=n),
        }
    )
    df["d"] = df["z1"] + 0.5 * df["z2"] + u + rng.normal(size=n)
    df["y"] = 0.7 * df["d"] + 0.3 * df["x1"] + u + rng.normal(size=n)
    df.to_csv(path, index=False)


@pytest.fixture(scope="module")
def project(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A project folder: data.csv, spec.yaml and the bundle folder 'bundle' beside them."""
    folder = tmp_path_factory.mktemp("verify") / "project"
    folder.mkdir()
    write_data(folder / "data.csv")
    (folder / "spec.yaml").write_text(SPEC)
    api.run(api.load(folder / "spec.yaml"), pdf=False)
    return folder


@pytest.fixture
def copy(project: Path, tmp_path: Path) -> Path:
    """A private copy of the project folder, for tests that alter it."""
    return Path(shutil.copytree(project, tmp_path / "project"))


def sha256_of(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def load_json(path: Path) -> Any:
    return json.loads(path.read_text())


def write_results(bundle: Path, doc: Any, *, update_manifest: bool) -> None:
    """Write results.json in its canonical form; optionally re-sign it in the manifest."""
    (bundle / "results.json").write_text(json.dumps(doc, indent=2, sort_keys=True) + "\n")
    if update_manifest:
        manifest = load_json(bundle / "manifest.json")
        for entry in manifest["outputs"]:
            if entry["path"] == "results.json":
                entry["sha256"] = sha256_of(bundle / "results.json")
                entry["size_bytes"] = (bundle / "results.json").stat().st_size
        (bundle / "manifest.json").write_text(json.dumps(manifest, indent=2, sort_keys=True))


def two_sls_index(doc: Any) -> int:
    return [e["estimator"] for e in doc["estimates"]].index("2sls")


def cli(*args: str | Path) -> Any:
    """``reportkit verify ARGS`` in-process (the subprocess route is tested separately)."""
    return CliRunner().invoke(app, ["verify", *(str(a) for a in args)])


def subprocess_env() -> dict[str, str]:
    # the repository's package first, whatever else is installed
    paths = [str(REPO), os.environ.get("PYTHONPATH", "")]
    return {**os.environ, "PYTHONPATH": os.pathsep.join(p for p in paths if p)}


# --- the bundle describes itself --------------------------------------------------------


def test_manifest_and_resolved_spec_point_from_the_bundle_to_the_inputs(project: Path) -> None:
    bundle = project / "bundle"
    manifest = load_json(bundle / "manifest.json")
    by_role = {e["role"]: e for e in manifest["inputs"]}
    assert by_role["data"]["path_from_bundle"] == "../data.csv"
    assert by_role["spec"]["path_from_bundle"] == "../spec.yaml"
    for entry in manifest["inputs"]:
        target = bundle / entry["path_from_bundle"]
        assert entry["sha256"] == sha256_of(target)  # hashlib, independent of reportkit
        assert entry["size_bytes"] == target.stat().st_size
    resolved = (bundle / "spec.resolved.yaml").read_text()
    assert "  path: ../data.csv\n" in resolved
    assert "  output: bundle\n" in resolved  # run.output left as written
    results = (bundle / "results.json").read_text()
    assert str(project) not in results and str(project.parent) not in results
    assert "path_from_bundle" not in results


def test_results_json_is_the_same_wherever_the_bundle_is_written(
    project: Path, tmp_path: Path
) -> None:
    loaded = api.load(project / "spec.yaml")
    outcome = api.run(loaded, output=tmp_path / "deeper" / "elsewhere", pdf=False)
    assert outcome.bundle is not None
    first = (project / "bundle" / "results.json").read_bytes()
    assert (outcome.bundle / "results.json").read_bytes() == first
    resolved = (outcome.bundle / "spec.resolved.yaml").read_text()
    rel = os.path.relpath((project / "data.csv").resolve(), outcome.bundle.resolve())
    assert f"  path: {Path(rel).as_posix()}\n" in resolved


# --- a fresh bundle verifies ------------------------------------------------------------


def test_fresh_bundle_verifies_through_the_command_line(project: Path) -> None:
    proc = subprocess.run(
        [sys.executable, "-m", "reportkit", "verify", "bundle"],
        cwd=project,
        capture_output=True,
        text=True,
        timeout=300,
        env=subprocess_env(),
    )
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "verified" in proc.stdout
    assert "relative 1e-09 (absolute 1e-12 near zero)" in proc.stdout
    assert "MISMATCH" not in proc.stdout


def test_fresh_bundle_report_compares_every_number(project: Path) -> None:
    report = verify_bundle(project / "bundle")
    assert report.ok, report
    assert not report.file_problems and not report.differences and not report.warnings
    # at least every coefficient's estimate, std_error, statistic, p_value and interval
    doc = load_json(project / "bundle" / "results.json")
    coefficients = sum(len(e["coefficients"]) for e in doc["estimates"])
    assert report.numbers_compared > 6 * coefficients
    manifest = load_json(project / "bundle" / "manifest.json")
    assert report.files_checked == len(manifest["outputs"]) + len(manifest["inputs"])


def test_fresh_demo_bundle_verifies(tmp_path: Path) -> None:
    outcome = api.run(api.load(DEMO_SPEC), output=tmp_path / "demo", pdf=False)
    assert outcome.bundle is not None
    report = api.verify(outcome.bundle)
    assert report.ok, report.differences[:5]
    assert report.numbers_compared > 300


# --- altered bundles fail and say where -------------------------------------------------


def test_edited_number_in_results_is_named_with_the_checksum(copy: Path) -> None:
    bundle = copy / "bundle"
    manifest_sha = {e["path"]: e["sha256"] for e in load_json(bundle / "manifest.json")["outputs"]}
    doc = load_json(bundle / "results.json")
    i = two_sls_index(doc)
    doc["estimates"][i]["coefficients"][0]["std_error"] *= 1 + 1e-6
    write_results(bundle, doc, update_manifest=False)
    result = cli(bundle)
    assert result.exit_code == 1, result.output
    path = f"estimates[{i}].coefficients[0].std_error"
    assert path in result.stdout
    assert "results.json" in result.stdout
    assert manifest_sha["results.json"] in result.stdout
    assert sha256_of(bundle / "results.json") in result.stdout
    report = verify_bundle(bundle)
    assert [d.path for d in report.differences] == [path]
    assert report.differences[0].relative_difference == pytest.approx(1e-6, rel=1e-3)
    assert [(p.name, p.problem) for p in report.file_problems] == [("results.json", "changed")]


@pytest.mark.parametrize(("relative_change", "agrees"), [(1e-12, True), (1e-7, False)])
def test_numbers_are_compared_at_the_stated_tolerance(
    copy: Path, relative_change: float, agrees: bool
) -> None:
    # results.json re-signed in the manifest, so only the number comparison can fail
    bundle = copy / "bundle"
    doc = load_json(bundle / "results.json")
    i = two_sls_index(doc)
    doc["estimates"][i]["coefficients"][0]["estimate"] *= 1 + relative_change
    write_results(bundle, doc, update_manifest=True)
    result = cli(bundle)
    assert result.exit_code == (0 if agrees else 1), result.output
    if not agrees:
        assert f"estimates[{i}].coefficients[0].estimate" in result.stdout


def test_edited_appendix_is_named(copy: Path) -> None:
    bundle = copy / "bundle"
    html = bundle / "appendix.html"
    html.write_text(html.read_text().replace("2SLS", "2SLS (edited)", 1))
    report = verify_bundle(bundle)
    assert not report.ok
    assert [(p.name, p.problem) for p in report.file_problems] == [("appendix.html", "changed")]
    assert not report.differences  # the numbers still reproduce


def test_changed_data_value_is_named_with_both_checksums(copy: Path) -> None:
    data = copy / "data.csv"
    before = sha256_of(data)
    rows = list(csv.reader(io.StringIO(data.read_text())))
    y = rows[0].index("y")
    rows[5][y] = repr(float(rows[5][y]) + 1.0)
    out = io.StringIO()
    csv.writer(out, lineterminator="\n").writerows(rows)
    data.write_text(out.getvalue())
    result = cli(copy / "bundle")
    assert result.exit_code == 1, result.output
    assert "data file 'data.csv' changed" in result.stdout
    assert before in result.stdout and sha256_of(data) in result.stdout
    report = verify_bundle(copy / "bundle")
    assert [(p.name, p.role) for p in report.file_problems] == [("data.csv", "data")]
    # one changed outcome value moves the estimates, and verify shows that too
    assert any(d.path.startswith("estimates[") for d in report.differences)


def test_data_that_no_longer_analyse_fail_with_the_reason(copy: Path) -> None:
    df = pd.read_csv(copy / "data.csv")
    df["z1"] = "text"
    df.to_csv(copy / "data.csv", index=False)
    result = cli(copy / "bundle")
    assert result.exit_code == 1, result.output
    assert "data file 'data.csv' changed" in result.stdout
    assert "the analysis stopped" in result.stdout and "z1" in result.stdout


def test_changed_spec_file_is_named(copy: Path) -> None:
    spec = copy / "spec.yaml"
    spec.write_text(spec.read_text() + "# edited after the run\n")
    result = cli(copy / "bundle")
    assert result.exit_code == 1, result.output
    assert "spec file 'spec.yaml' changed" in result.stdout


def test_package_version_difference_is_a_warning_only(copy: Path) -> None:
    bundle = copy / "bundle"
    doc = load_json(bundle / "results.json")
    doc["provenance"]["packages"]["numpy"] = "0.0.1"
    doc["provenance"]["python"] = "3.0.0"
    write_results(bundle, doc, update_manifest=True)
    result = cli(bundle)
    assert result.exit_code == 0, result.output
    assert "warnings (2;" in result.stdout
    assert "provenance.packages.numpy" in result.stdout
    assert "provenance.python" in result.stdout
    assert "verified" in result.stdout


# --- a moved bundle, unusable input -----------------------------------------------------


def test_moved_bundle_needs_and_accepts_the_data_option(copy: Path, tmp_path: Path) -> None:
    moved = tmp_path / "received" / "from-authors" / "bundle"
    moved.parent.mkdir(parents=True)
    shutil.move(copy / "bundle", moved)
    result = cli(moved)
    assert result.exit_code == 2, result.output
    assert "--data" in result.stderr and "data.csv" in result.stderr
    assert "Traceback" not in result.output
    result = cli(moved, "--data", copy / "data.csv")
    assert result.exit_code == 0, result.output
    assert "spec file 'spec.yaml' not found" in result.stdout  # a note, not a failure


def test_data_option_naming_no_file_exits_2(project: Path, tmp_path: Path) -> None:
    result = cli(project / "bundle", "--data", tmp_path / "nowhere.csv")
    assert result.exit_code == 2
    assert "nowhere.csv" in result.stderr


def test_folder_without_manifest_exits_2(tmp_path: Path) -> None:
    (tmp_path / "not-a-bundle").mkdir()
    (tmp_path / "not-a-bundle" / "results.json").write_text("{}")
    result = cli(tmp_path / "not-a-bundle")
    assert result.exit_code == 2
    assert "no manifest.json" in result.stderr and "not-a-bundle" in result.stderr
    assert "Traceback" not in result.output
    result = cli(tmp_path / "missing-folder")
    assert result.exit_code == 2
    assert "is not a folder" in result.stderr


def test_unreadable_resolved_spec_exits_2(copy: Path) -> None:
    (copy / "bundle" / "spec.resolved.yaml").write_text("study: [unclosed\n")
    result = cli(copy / "bundle")
    assert result.exit_code == 2, result.output
    assert "spec.resolved.yaml" in result.stderr


def test_verify_help_is_quick() -> None:
    start = time.perf_counter()
    proc = subprocess.run(
        [sys.executable, "-m", "reportkit", "verify", "--help"],
        capture_output=True,
        text=True,
        timeout=120,
        env=subprocess_env(),
    )
    elapsed = time.perf_counter() - start
    assert proc.returncode == 0, proc.stderr
    assert "--data" in proc.stdout
    # pandas alone takes about 1 s to import warm (LIBRARY-NOTES); help must not load it
    assert elapsed < 5.0


# --- the comparison rule itself ---------------------------------------------------------


def test_comparison_rule_on_small_trees() -> None:
    bundle = {
        "a": 1.0,
        "near_zero": 1e-13,
        "count": 3,
        "flag": True,
        "items": [{"x": 2.0}, {"x": 3.0}],
        "labels": {"my var": "A"},
        "gone": 1.0,
    }
    same = json.loads(json.dumps(bundle))
    assert compare_results(bundle, same).differences == ()
    recomputed = {
        "a": 1.0 + 2e-9,  # outside relative 1e-9
        "near_zero": -1e-13,  # inside absolute 1e-12
        "count": 4,  # whole numbers must match exactly
        "flag": 1,  # true is not the number 1
        "items": [{"x": 2.0}],  # list length
        "labels": {"my var": "B"},  # text
        "new": 0.0,  # an extra key
    }
    result = compare_results(bundle, recomputed)
    assert [d.path for d in result.differences] == [
        "a",
        "count",
        "flag",
        "gone",
        "items",
        'labels["my var"]',
        "new",
    ]
    assert result.differences[0].relative_difference == pytest.approx(2e-9, rel=1e-6)
    assert Tolerance().agree(1.0, 1.0 + 0.5e-9)
    assert not Tolerance().agree(0.0, 2e-12)


def test_software_and_cross_check_noise_are_warnings() -> None:
    base = {
        "provenance": {
            "python": "3.11.7",
            "packages": {"numpy": "2.4.6"},
            "crosschecks": [{"agrees": True, "max_rel_diff_estimate": 3e-13}],
            "inputs": [{"name": "data.csv"}],
        }
    }
    other = {
        "provenance": {
            "python": "3.12.1",
            "packages": {"numpy": "2.5.0"},
            "crosschecks": [{"agrees": True, "max_rel_diff_estimate": 9e-12}],
            "inputs": [{"name": "../data.csv"}],  # checked against the files instead
        }
    }
    result = compare_results(base, other)
    assert result.differences == ()
    assert [w.path for w in result.warnings] == [
        "provenance.crosschecks[0].max_rel_diff_estimate",
        "provenance.packages.numpy",
        "provenance.python",
    ]
    other["provenance"]["crosschecks"][0]["agrees"] = False
    assert [d.path for d in compare_results(base, other).differences] == [
        "provenance.crosschecks[0].agrees"
    ]
