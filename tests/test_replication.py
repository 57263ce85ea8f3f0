"""REPLICATION.md: in the bundle, consistent with provenance and the bundle's files,
byte-identical across builds, and inert when spec text holds Markdown syntax.

The Markdown is read back with markdown-it-py (an independent CommonMark parser, with its
GitHub-style table rule), so "the table is not broken" means what a renderer shows.
"""

from __future__ import annotations

import hashlib
import json
import re
import shlex
from pathlib import Path

import numpy
import pytest
from markdown_it import MarkdownIt
from markdown_it.token import Token
from typer.testing import CliRunner

from reportkit import __version__, api
from reportkit.cli import app
from reportkit.replication import (
    GIB,
    OTHER_FILES,
    REPLICATION_FILE,
    RunFacts,
    memory_bucket,
    peak_memory_bytes,
    replication_markdown,
    runtime_bucket,
)
from reportkit.results import InputFile, StudyInfo, StudyResults
from reportkit.verify import Tolerance
from tests.results_example import example_results

REPO = Path(__file__).resolve().parents[1]
DEMO_SPEC = REPO / "fixtures" / "demo" / "tutoring.yaml"
DEMO_DATA = REPO / "fixtures" / "demo" / "tutoring.csv"
BUNDLE_NAME = "tutoring-appendix"


# --- reading Markdown back ----------------------------------------------------------------


def _parser() -> MarkdownIt:
    return MarkdownIt("commonmark").enable("table")


def _inline_text(token: Token) -> str:
    """What a renderer shows for an inline token: text and code spans, escapes resolved."""
    parts = []
    for child in token.children or []:
        if child.type in ("text", "text_special", "code_inline"):
            parts.append(child.content)
        elif child.type in ("softbreak", "hardbreak"):
            parts.append(" ")
    return "".join(parts)


def tables_by_heading(text: str) -> dict[str, list[list[str]]]:
    """Each level-2 heading -> the rows (header row first) of the tables under it."""
    tokens = _parser().parse(text)
    out: dict[str, list[list[str]]] = {}
    heading, row, in_h2 = "", None, False
    for token in tokens:
        if token.type == "heading_open":
            in_h2 = token.tag == "h2"
        elif token.type == "inline" and in_h2:
            heading, in_h2 = _inline_text(token), False
        elif token.type == "tr_open":
            row = []
        elif token.type == "inline" and row is not None:
            row.append(_inline_text(token))
        elif token.type == "tr_close" and row is not None:
            out.setdefault(heading, []).append(row)
            row = None
    return out


def code_blocks(text: str) -> list[str]:
    return [t.content for t in _parser().parse(text) if t.type == "fence"]


def paragraphs(text: str) -> list[str]:
    tokens = _parser().parse(text)
    return [
        _inline_text(tokens[i + 1])
        for i, t in enumerate(tokens)
        if t.type == "paragraph_open" and tokens[i + 1].type == "inline"
    ]


# --- the demo bundle, built twice ---------------------------------------------------------


@pytest.fixture(scope="module")
def demo_bundles(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """Two builds of the demo (no PDF), each in a folder of the same name and depth."""
    bundles = []
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SOURCE_DATE_EPOCH", "1767225600")
        loaded = api.load(DEMO_SPEC)
        for parent in ("first", "second"):
            out = tmp_path_factory.mktemp(parent) / BUNDLE_NAME
            outcome = api.run(loaded, output=out, command="reportkit demo", pdf=False)
            assert outcome.bundle is not None
            bundles.append(outcome.bundle)
    return bundles[0], bundles[1]


@pytest.fixture(scope="module")
def bundle(demo_bundles: tuple[Path, Path]) -> Path:
    return demo_bundles[0]


@pytest.fixture(scope="module")
def text(bundle: Path) -> str:
    return (bundle / REPLICATION_FILE).read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def results(bundle: Path) -> StudyResults:
    return StudyResults.from_json((bundle / "results.json").read_text())


def test_file_is_in_the_bundle_and_the_manifest(bundle: Path) -> None:
    data = (bundle / REPLICATION_FILE).read_bytes()
    manifest = json.loads((bundle / "manifest.json").read_text())
    (entry,) = [o for o in manifest["outputs"] if o["path"] == REPLICATION_FILE]
    assert entry["sha256"] == hashlib.sha256(data).hexdigest()
    assert entry["size_bytes"] == len(data)


def test_two_builds_are_byte_identical(demo_bundles: tuple[Path, Path]) -> None:
    first, second = demo_bundles
    assert (first / REPLICATION_FILE).read_bytes() == (second / REPLICATION_FILE).read_bytes()


def test_data_table_matches_provenance_and_the_file(text: str, results: StudyResults) -> None:
    header, *rows = tables_by_heading(text)["Data files"]
    assert header == ["File", "Role", "Size (bytes)", "SHA-256"]
    listed = {name: (role, int(size), sha) for name, role, size, sha in rows}
    expected = {f.name: (f.role, f.size_bytes, f.sha256) for f in results.provenance.inputs}
    assert listed == expected
    # the data file itself, hashed here with hashlib, not through reportkit
    raw = DEMO_DATA.read_bytes()
    assert listed[DEMO_DATA.name] == ("data", len(raw), hashlib.sha256(raw).hexdigest())
    # the marked instruction to the authors, and no leftover to-do marker
    prompt = [p for p in paragraphs(text) if p.startswith("Instruction to the authors")]
    assert len(prompt) == 1 and "where and under which terms" in prompt[0]
    assert "TODO" not in text


def test_every_package_appears_with_its_version(text: str, results: StudyResults) -> None:
    header, *rows = tables_by_heading(text)["Computational requirements"]
    assert header == ["Package", "Version"]
    assert dict(rows) == results.provenance.packages
    assert dict(rows)["numpy"] == numpy.__version__  # the module's own version attribute
    assert any(f"Python {results.provenance.python}" in p for p in paragraphs(text))
    assert any(
        "run time under 1 minute" in p and "peak memory under" in p for p in paragraphs(text)
    )


def test_map_lists_exactly_the_table_and_figure_files(bundle: Path, text: str) -> None:
    header, *rows = tables_by_heading(text)["List of tables and figures"]
    assert header == ["Appendix section", "Table or figure", "Files"]
    in_map = {f for _, _, files in rows for f in files.split(", ")}
    on_disk = {
        p.relative_to(bundle).as_posix()
        for folder in ("tables", "figures")
        for p in (bundle / folder).rglob("*")
        if p.is_file()
    }
    assert on_disk and in_map == on_disk
    # each row names a section heading of the appendix as rendered
    page = (bundle / "appendix.html").read_text()
    headings = {re.sub(r"<[^>]+>", "", h).strip() for h in re.findall(r"<h2[^>]*>(.*?)</h2>", page)}
    by_file = {f: section for section, _, files in rows for f in files.split(", ")}
    assert set(by_file.values()) <= headings | {OTHER_FILES}
    # every figure of the demo is placed in the appendix, so each has its section
    assert all(by_file[f] in headings for f in by_file if f.startswith("figures/"))
    assert by_file["tables/estimates.csv"].endswith("Main estimates")
    assert by_file["figures/estimates-1.svg"].endswith("Main estimates")
    assert by_file["figures/first-stage-1.svg"].endswith("First stage and reduced form")
    assert by_file["tables/variants.tex"].endswith("How much does the answer move?")


def test_instructions_reproduce_the_bundle(
    bundle: Path, text: str, results: StudyResults, monkeypatch: pytest.MonkeyPatch
) -> None:
    (block,) = code_blocks(text)
    install, rerun, verify = block.splitlines()
    assert install == f"pip install reportkit=={__version__}"
    assert rerun.startswith(f"reportkit run {BUNDLE_NAME}/spec.resolved.yaml --output ")
    assert verify == f"reportkit verify {BUNDLE_NAME}"
    words = " ".join(paragraphs(text))
    assert f"The seed is {results.provenance.seed}" in words
    assert Tolerance().describe() in words
    # the verify command, run as written from the folder holding the bundle, passes
    monkeypatch.chdir(bundle.parent)
    outcome = CliRunner().invoke(app, shlex.split(verify)[1:])
    assert outcome.exit_code == 0, outcome.output
    assert "verified" in outcome.output


# --- escaping -----------------------------------------------------------------------------


def test_pipes_newlines_and_backticks_from_the_spec_do_not_break_tables() -> None:
    title = "Pipes | in the\ntitle"
    base = example_results()
    odd = "scores|v`2`.csv"
    inputs = [
        InputFile(role="data", name=odd, sha256="a" * 64, size_bytes=123),
        InputFile(role="spec", name="study|1.yaml", sha256="b" * 64, size_bytes=45),
    ]
    results = example_results(
        study=StudyInfo(title=title, authors=["A | B"], summary="s"),
        provenance=base.provenance.model_copy(update={"inputs": inputs}),
    )
    facts = RunFacts(
        reportkit_version="0.1.0",
        generated_on="2026-01-01",
        bundle_name="my bundle|x",
        data_path="../data/scores|v`2`.csv",
        seconds=12.0,
        peak_memory_bytes=200 * 1024**2,
        operating_system="Linux",
        machine="x86_64",
    )
    files = {"tables/estimates.csv": b"x", "tables/estimates.tex": b"y"}
    markdown = replication_markdown(results, facts, files)
    tables = tables_by_heading(markdown)
    header, *rows = tables["Data files"]
    assert header == ["File", "Role", "Size (bytes)", "SHA-256"]
    assert [len(r) for r in rows] == [4, 4]
    assert [r[0] for r in rows] == [odd, "study|1.yaml"]  # shown as written, one cell each
    assert all(len(r) == 2 for r in tables["Computational requirements"])
    assert all(len(r) == 3 for r in tables["List of tables and figures"])
    # the title: one heading line and one paragraph, the pipe shown literally
    shown = "Pipes | in the title"
    h1 = next(t for t in _parser().parse(markdown) if t.type == "inline")
    assert _inline_text(h1) == f"Replication: {shown}"
    assert any(f'"{shown}" by A | B' in p for p in paragraphs(markdown))
    # the commands stay one line each and quote what the shell would split
    (block,) = code_blocks(markdown)
    assert shlex.split(block.splitlines()[2]) == ["reportkit", "verify", "my bundle|x"]


# --- rounding up run time and memory ------------------------------------------------------


@pytest.mark.parametrize(
    ("seconds", "expected"),
    [
        (0.0, "under 1 minute"),
        (59.999, "under 1 minute"),
        (60.0, "under 5 minutes"),
        (299.999, "under 5 minutes"),
        (300.0, "under 30 minutes"),
        (1799.999, "under 30 minutes"),
        (1800.0, "under 2 hours"),
        (7199.999, "under 2 hours"),
        (7200.0, "over 2 hours"),
        (86400.0, "over 2 hours"),
    ],
)
def test_runtime_bucket_boundaries(seconds: float, expected: str) -> None:
    assert runtime_bucket(seconds) == expected


@pytest.mark.parametrize(
    ("peak", "expected"),
    [
        (0, "under 1 GB"),
        (GIB - 1, "under 1 GB"),
        (GIB, "under 4 GB"),
        (4 * GIB - 1, "under 4 GB"),
        (4 * GIB, "under 16 GB"),
        (16 * GIB - 1, "under 16 GB"),
        (16 * GIB, "16 GB or more"),
        (None, "not measured on this operating system"),
    ],
)
def test_memory_bucket_boundaries(peak: int | None, expected: str) -> None:
    assert GIB == 2**30
    assert memory_bucket(peak) == expected


def test_peak_memory_agrees_with_the_kernel() -> None:
    # Linux reports the same peak resident set size as VmHWM in /proc/self/status
    # (proc(5) manual page: "VmHWM: peak resident set size"), in kB.
    status = Path("/proc/self/status")
    if not status.is_file():
        pytest.skip("no /proc: not Linux")
    measured = peak_memory_bytes()
    found = re.search(r"^VmHWM:\s+(\d+) kB$", status.read_text(), re.MULTILINE)
    assert measured is not None and found is not None
    assert measured == pytest.approx(int(found.group(1)) * 1024, rel=0.05)
