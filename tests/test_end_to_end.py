"""End to end: the demo bundle, its schema, its PDF, determinism and escaping."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import jsonschema
import pytest

from reportkit import api
from reportkit import results as rs
from reportkit.results import StudyResults, json_schema

REPO = Path(__file__).resolve().parents[1]
DEMO_SPEC = REPO / "fixtures" / "demo" / "tutoring.yaml"
BUNDLE_FILES = {
    "appendix.html",
    "appendix.pdf",
    "results.json",
    "spec.resolved.yaml",
    "manifest.json",
    "REPLICATION.md",
    "tables/estimates.csv",
    "tables/estimates.tex",
    "tables/first_stage.csv",
    "tables/first_stage.tex",
    "tables/variants.csv",
    "tables/variants.tex",
}


@pytest.fixture(scope="module")
def demo_bundle(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("demo") / "bundle"
    proc = subprocess.run(
        [sys.executable, "-m", "reportkit", "demo", str(out)],
        capture_output=True,
        text=True,
        timeout=600,
        env={**__import__("os").environ, "SOURCE_DATE_EPOCH": "1767225600"},
    )
    assert proc.returncode == 0, proc.stderr
    return out


@pytest.mark.slow
def test_demo_writes_every_bundle_file(demo_bundle: Path) -> None:
    files = {str(p.relative_to(demo_bundle)) for p in demo_bundle.rglob("*") if p.is_file()}
    assert files >= BUNDLE_FILES
    assert any(f.startswith("figures/") and f.endswith(".svg") for f in files)
    manifest = json.loads((demo_bundle / "manifest.json").read_text())
    listed = {o["path"] for o in manifest["outputs"]}
    assert listed == files - {"manifest.json"}
    assert [o["path"] for o in manifest["outputs"]] == sorted(listed)


@pytest.mark.slow
def test_demo_results_validate_against_schema(demo_bundle: Path) -> None:
    doc = json.loads((demo_bundle / "results.json").read_text())
    jsonschema.validate(doc, json_schema())
    StudyResults.from_json((demo_bundle / "results.json").read_text())


@pytest.mark.slow
def test_demo_recovers_the_true_effect(demo_bundle: Path) -> None:
    # Simulation recovery on our invented demo data (fixtures/demo/README.md: TRUE_EFFECT).
    results = StudyResults.from_json((demo_bundle / "results.json").read_text())
    by = {e.estimator: e.coefficients[0] for e in results.estimates}
    true_effect = 0.8
    assert by["2sls"].ci_lower < true_effect < by["2sls"].ci_upper
    # OLS is biased upwards by motivation in the simulation
    assert by["ols"].estimate > true_effect + 2 * by["2sls"].std_error
    # the run-time cross-check with linearmodels agrees
    assert isinstance(results.provenance.crosschecks, list)
    assert results.provenance.crosschecks and all(c.agrees for c in results.provenance.crosschecks)


@pytest.mark.slow
def test_demo_falsification_compliers_and_variants(demo_bundle: Path) -> None:
    # Simulation facts of the invented demo (fixtures/demo/make_demo_data.py): the full-day
    # programme pupils' hours depend on neither instrument; winning the lottery is random,
    # so the complier share is the first-stage effect of winning on "any tutoring"; every
    # linear variant keeps the true effect 0.8 inside a 99.9% band of the main estimate.
    results = StudyResults.from_json((demo_bundle / "results.json").read_text())
    balance = results.balance
    assert not isinstance(balance, rs.NotApplicable)
    (falsification,) = balance.falsification
    assert falsification.n_used == 480
    assert not isinstance(falsification.first_stages, rs.NotApplicable)
    stage_test = falsification.first_stages[0].joint_test
    assert isinstance(stage_test, rs.TestResult) and stage_test.p_value > 0.05
    compliers = balance.compliers
    assert isinstance(compliers, rs.ComplierAnalysis)
    shares = compliers.shares
    assert shares.compliers == pytest.approx(shares.treated_share_on - shares.treated_share_off)
    assert 0.15 < shares.compliers < 0.35 and shares.compliers_se is not None
    late = compliers.late_implication
    assert isinstance(late, rs.LateImplication) and late.negative_bins == 0
    rob = results.robustness
    assert isinstance(rob, rs.Robustness)
    keys = {v.key for v in rob.variants}
    assert {"estimator:liml", "estimator:jive", "inference:cluster:district"} <= keys
    assert "binary:bivariate_probit" in keys and "sample:trim:0.01" in keys
    liml = next(v for v in rob.variants if v.key == "estimator:liml")
    assert isinstance(liml.values, list)
    assert liml.values[0].estimate == pytest.approx(rob.main[0].estimate, abs=0.05)
    assert isinstance(rob.wild_bootstrap, list) and rob.wild_bootstrap[0].clusters == 40
    assert isinstance(rob.sensitivity, list) and rob.sensitivity[0].union_interval.lower is not None
    assert isinstance(rob.cluster_influence, list) and rob.cluster_influence[0].n_clusters == 40


@pytest.mark.slow
def test_demo_pdf_opens_and_has_sections(demo_bundle: Path) -> None:
    from pypdf import PdfReader

    reader = PdfReader(str(demo_bundle / "appendix.pdf"))
    assert len(reader.pages) >= 2
    text = " ".join(page.extract_text() for page in reader.pages)
    for title in ("Main estimates", "First stage", "Provenance"):
        assert title.lower() in text.lower()


@pytest.mark.slow
def test_two_runs_are_byte_identical(
    demo_bundle: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # every file of the bundle, the PDF and the manifest included: same inputs, same bytes
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1767225600")
    loaded = api.load(DEMO_SPEC)
    # same folder name and command line as the first run (both are shown in the outputs)
    outcome = api.run(
        loaded,
        output=tmp_path / demo_bundle.name,
        command=f"reportkit demo {demo_bundle}",
        pdf=True,
    )
    assert outcome.bundle is not None
    first = {p.relative_to(demo_bundle): p for p in demo_bundle.rglob("*") if p.is_file()}
    second = {p.relative_to(outcome.bundle): p for p in outcome.bundle.rglob("*") if p.is_file()}
    assert sorted(first) == sorted(second)
    differing = [
        str(rel)
        for rel, path in sorted(first.items())
        if path.read_bytes() != second[rel].read_bytes()
    ]
    assert not differing, f"files differ between two runs: {differing}"


def test_injection_in_title_and_label_is_inert(tmp_path: Path) -> None:
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(5)
    n = 200
    df = pd.DataFrame({"z": rng.normal(size=n), "u": rng.normal(size=n)})
    df["d"] = df["z"] + df["u"] + rng.normal(size=n)
    df["y"] = df["d"] + df["u"] + rng.normal(size=n)
    df.to_csv(tmp_path / "data.csv", index=False)
    evil = "<script>alert(1)</script>"
    spec = {
        "study": {"title": f"Study {evil}", "authors": ['<img src=x onerror="alert(2)">']},
        "data": {"path": "data.csv"},
        "model": {
            "outcome": "y",
            "endogenous": ["d"],
            "instruments": ["z"],
            "labels": {"d": f"Dose {evil}"},
        },
        "run": {"output": "out", "crosscheck": "never"},
    }
    loaded = api.load_dict(spec, base_dir=tmp_path)
    outcome = api.run(loaded, pdf=False)
    assert outcome.bundle is not None
    html = (outcome.bundle / "appendix.html").read_text()
    assert evil not in html
    assert "<img src=x" not in html
    assert "&lt;script&gt;" in html
