"""REPLICATION.md: the block authors paste into their replication package's README.

Built from the results, a few facts about the run (``RunFacts``) and the bundle files
already rendered, so that the list of tables and figures names only files that exist. Five
parts: what the appendix documents, the data files (checksums from
``results.provenance.inputs``), what it takes to run (software, operating system, run time
and peak memory), the commands that reproduce it, and where each table and figure of the
appendix sits in the bundle.

Deterministic: the same inputs on the same machine give the same bytes. Nothing is dated
but the appendix's own date; run time and peak memory are rounded up to coarse steps
(``runtime_bucket``, ``memory_bucket``) so that the last second or megabyte of a run does
not change the file. The section of each figure is read from the rendered appendix.html
(where the figure's ``data:`` URI sits), so the map follows the appendix as laid out.

Written by hand: the text is a few string templates, and no Markdown library escapes
text for GitHub-flavoured table cells (pipes, line breaks) and code spans.
"""

from __future__ import annotations

import html
import platform
import re
import shlex
import sys
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import PurePosixPath

from reportkit.report.figures import svg_data_uri
from reportkit.report.formatting import fmt_ci, fmt_int, fmt_num, fmt_pct, label
from reportkit.report.html import headline_estimate
from reportkit.results import StudyResults
from reportkit.verify import RESOLVED_SPEC, RESULTS, Tolerance

REPLICATION_FILE = "REPLICATION.md"
HTML_FILE = "appendix.html"
APPENDIX_FILES = (HTML_FILE, "appendix.pdf")
OTHER_FILES = "(no section of this appendix)"

GIB = 1024**3  # "GB" in the memory steps means 2**30 bytes
RUNTIME_STEPS: tuple[tuple[float, str], ...] = (
    (60.0, "under 1 minute"),
    (300.0, "under 5 minutes"),
    (1800.0, "under 30 minutes"),
    (7200.0, "under 2 hours"),
)
RUNTIME_ABOVE = "over 2 hours"
MEMORY_STEPS: tuple[tuple[int, str], ...] = (
    (1 * GIB, "under 1 GB"),
    (4 * GIB, "under 4 GB"),
    (16 * GIB, "under 16 GB"),
)
MEMORY_ABOVE = "16 GB or more"
MEMORY_UNKNOWN = "not measured on this operating system"

# Table exports (file stem under tables/) -> (appendix section id, what the table holds).
# A stem without an entry goes to the section whose id is the stem ("_" read as "-"); a
# table whose section the appendix does not show is listed under OTHER_FILES.
TABLE_SECTIONS: dict[str, tuple[str, str]] = {
    "estimates": ("main-estimates", "Estimates by estimator"),
    "first_stage": ("first-stage", "First-stage and reduced-form coefficients"),
    "specifications": ("specifications", "Estimates across specifications"),
    "variants": ("robustness", "The estimate under each robustness variant"),
}
AUTHORS_PROMPT = (
    "**Instruction to the authors (replace this line):** state where and under which "
    "terms the data can be obtained, and who may obtain them."
)


@dataclass(frozen=True)
class RunFacts:
    """What the results do not hold about a run; given by the caller.

    ``data_path`` is ``data.path`` as written in the bundle's spec.resolved.yaml (relative
    to the bundle folder); ``seconds`` the run's total wall time; ``peak_memory_bytes``
    None where the operating system does not report it.
    """

    reportkit_version: str
    generated_on: str
    bundle_name: str
    data_path: str
    seconds: float
    peak_memory_bytes: int | None
    operating_system: str
    machine: str


def runtime_bucket(seconds: float) -> str:
    """The run time rounded up to a coarse step ("under 5 minutes" for 60 s to < 300 s)."""
    for limit, text in RUNTIME_STEPS:
        if seconds < limit:
            return text
    return RUNTIME_ABOVE


def memory_bucket(peak_bytes: int | None) -> str:
    """Peak memory rounded up to a coarse step ("under 4 GB" for 1 GB to < 4 GB)."""
    if peak_bytes is None:
        return MEMORY_UNKNOWN
    for limit, text in MEMORY_STEPS:
        if peak_bytes < limit:
            return text
    return MEMORY_ABOVE


def peak_memory_bytes() -> int | None:
    """This process's peak resident memory so far (``getrusage``); None on Windows.

    ``ru_maxrss`` is in kilobytes on Linux and in bytes on macOS.
    """
    try:
        import resource
    except ImportError:  # Windows has no resource module
        return None
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return int(peak) if sys.platform == "darwin" else int(peak) * 1024


def measure_run_facts(
    *,
    reportkit_version: str,
    generated_on: str,
    bundle_name: str,
    data_path: str,
    seconds: float,
) -> RunFacts:
    """``RunFacts`` with peak memory, operating system and machine read from this process."""
    return RunFacts(
        reportkit_version=reportkit_version,
        generated_on=generated_on,
        bundle_name=bundle_name,
        data_path=data_path,
        seconds=seconds,
        peak_memory_bytes=peak_memory_bytes(),
        operating_system=platform.system() or "unknown",
        machine=platform.machine() or "unknown",
    )


# --- Markdown escaping ------------------------------------------------------------------

_MARKDOWN_SPECIAL = re.compile(r"([\\`*_\[\]<>|~&#])")


def one_line(text: str) -> str:
    """Line breaks, tabs and runs of spaces collapsed to one space (a table row is a line)."""
    return " ".join(text.split())


def md_text(text: str) -> str:
    """Text from the spec or the data as inert Markdown inline text, table-safe."""
    return _MARKDOWN_SPECIAL.sub(r"\\\1", one_line(text))


def md_code(text: str, *, in_table: bool = False) -> str:
    """Text as a code span; in a table cell the pipes are escaped (GitHub tables)."""
    text = one_line(text)
    longest = max((len(run) for run in re.findall(r"`+", text)), default=0)
    fence = "`" * (longest + 1)
    padded = f" {text} " if text.startswith("`") or text.endswith("`") else text
    if in_table:
        padded = padded.replace("|", "\\|")
    return f"{fence}{padded}{fence}"


def md_table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> list[str]:
    """A GitHub-flavoured Markdown table; cells must already be escaped."""
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(row) + " |" for row in rows]
    return lines


def code_block(lines: Sequence[str]) -> list[str]:
    """A fenced code block longer than any backtick run inside it."""
    longest = max((len(run) for line in lines for run in re.findall(r"`+", line)), default=0)
    fence = "`" * max(3, longest + 1)
    return [fence + "bash", *lines, fence]


# --- where each table and figure sits ---------------------------------------------------


@dataclass(frozen=True)
class AppendixSection:
    position: int
    id: str
    title: str


@dataclass(frozen=True)
class MapRow:
    order: tuple[int, int, str]
    section: str
    item: str
    files: tuple[str, ...]


_SECTION = re.compile(r'<section id="([^"]+)"[^>]*>\s*<h2[^>]*>(.*?)</h2>', re.DOTALL)
_CAPTION = re.compile(r"<figcaption[^>]*>(.*?)</figcaption>", re.DOTALL)
_SENTENCE_END = re.compile(r"(?<=[.!?])\s+(?=[A-Z])")
_TAG = re.compile(r"<[^>]+>")


def _plain(fragment: str) -> str:
    return one_line(html.unescape(_TAG.sub("", fragment)))


def appendix_sections(page: str) -> list[AppendixSection]:
    """The numbered sections of appendix.html in order, titles as shown ("4 Main ...")."""
    return [
        AppendixSection(m.start(), m.group(1), _plain(m.group(2))) for m in _SECTION.finditer(page)
    ]


def _section_at(sections: Sequence[AppendixSection], position: int) -> int | None:
    found = None
    for index, section in enumerate(sections):
        if section.position <= position:
            found = index
    return found


def _figure_row(page: str, sections: list[AppendixSection], path: str, svg: bytes) -> MapRow:
    position = page.find(svg_data_uri(svg.decode("utf-8"))) if page else -1
    index = _section_at(sections, position) if position >= 0 else None
    if index is None:
        item = "Figure (not placed in the appendix)"
        return MapRow((len(sections), 1, path), OTHER_FILES, item, (path,))
    return MapRow((index, position, path), sections[index].title, _caption(page, position), (path,))


def _caption(page: str, position: int) -> str:
    """The first sentence of the caption of the figure whose image starts at ``position``."""
    end = page.find("</figure>", position)
    found = _CAPTION.search(page, position, end) if end >= 0 else None
    if found is None:
        return "Figure"
    first = _SENTENCE_END.split(_plain(found.group(1)), maxsplit=1)[0]
    return f"Figure: {first}"


def appendix_map(files: Mapping[str, bytes]) -> list[MapRow]:
    """Each table (its CSV and LaTeX files) and figure of the bundle with its section."""
    page = files[HTML_FILE].decode("utf-8") if HTML_FILE in files else ""
    sections = appendix_sections(page)
    by_id = {s.id: i for i, s in enumerate(sections)}
    tables: dict[str, list[str]] = {}
    for path in sorted(files):
        if path.startswith("tables/"):
            tables.setdefault(PurePosixPath(path).stem, []).append(path)
    rows = []
    for stem, paths in tables.items():
        section_id, what = TABLE_SECTIONS.get(stem, (stem.replace("_", "-"), stem))
        index = by_id.get(section_id)
        title = sections[index].title if index is not None else OTHER_FILES
        order = (index if index is not None else len(sections), 0, stem)
        rows.append(MapRow(order, title, f"Table: {what}", tuple(paths)))
    for path in sorted(files):
        if path.startswith("figures/") and path.endswith(".svg"):
            rows.append(_figure_row(page, sections, path, files[path]))
    return sorted(rows, key=lambda r: r.order)


# --- the document -----------------------------------------------------------------------


def _present(files: Mapping[str, bytes], names: Sequence[str]) -> str:
    """The names of ``names`` that are bundle files, as code spans joined by commas."""
    return ", ".join(md_code(name) for name in names if name in files)


def _overview(results: StudyResults, facts: RunFacts, files: Mapping[str, bytes]) -> list[str]:
    study, model = results.study, results.model
    authors = ", ".join(md_text(a) for a in study.authors)
    by = f" by {authors}" if authors else ""
    head = headline_estimate(results)
    level = fmt_pct(results.conventions.confidence_level)
    effects = "; ".join(
        f"{md_text(c.label)}: {fmt_num(c.estimate)} ({level} confidence interval "
        f"{fmt_ci(c.ci_lower, c.ci_upper)})"
        for c in head.coefficients
    )
    outcome = md_text(label(model.outcome, model.labels))
    return [
        "## Overview",
        "",
        f'The appendix "{md_text(study.title)}"{by} documents an instrumental-variables '
        f"analysis of {outcome}: its estimates, first stage and reduced form, the diagnostics "
        "of the instruments, robustness checks and the assumptions no data can test. Its "
        f"headline estimate is the {md_text(head.label)} effect of {effects}, from "
        f"{fmt_int(head.n_obs)} rows. The appendix ({_present(files, APPENDIX_FILES)}), its "
        f"tables and figures and {md_code(RESULTS)} were generated by reportkit "
        f"{md_text(facts.reportkit_version)} on {facts.generated_on} from the files below.",
    ]


def _data_files(results: StudyResults) -> list[str]:
    rows = [
        [md_code(f.name, in_table=True), md_text(f.role), str(f.size_bytes), f"`{f.sha256}`"]
        for f in results.provenance.inputs
    ]
    return [
        "## Data files",
        "",
        "The data are the authors'; their statement of where the data come from and how "
        "others can obtain them belongs in this section. The table lists every input of the "
        "run with its size and SHA-256 checksum, so that a copy can be checked byte for byte.",
        "",
        *md_table(["File", "Role", "Size (bytes)", "SHA-256"], rows),
        "",
        f"> {AUTHORS_PROMPT}",
    ]


def _requirements(results: StudyResults, facts: RunFacts) -> list[str]:
    prov = results.provenance
    rows = [[md_text(name), md_text(version)] for name, version in sorted(prov.packages.items())]
    return [
        "## Computational requirements",
        "",
        f"Software: Python {md_text(prov.python)} with the packages below (the versions of "
        "this run).",
        "",
        *md_table(["Package", "Version"], rows),
        "",
        f"This run: operating system {md_text(facts.operating_system)}, machine "
        f"architecture {md_text(facts.machine)}; run time {runtime_bucket(facts.seconds)}; "
        f"peak memory {memory_bucket(facts.peak_memory_bytes)}. Run time and memory are "
        "rounded up to coarse steps, so that this file is the same whenever the same inputs "
        "are run on the same machine.",
    ]


def _instructions(results: StudyResults, facts: RunFacts) -> list[str]:
    bundle = facts.bundle_name
    commands = [
        f"pip install reportkit=={facts.reportkit_version}",
        f"reportkit run {shlex.quote(f'{bundle}/{RESOLVED_SPEC}')} "
        f"--output {shlex.quote(f'{bundle}-rerun')}",
        f"reportkit verify {shlex.quote(bundle)}",
    ]
    tolerance = Tolerance().describe()
    return [
        "## Instructions to reproduce",
        "",
        f"From the folder that holds the bundle folder {md_code(bundle)}, with Python 3.11 or "
        "newer:",
        "",
        *code_block(commands),
        "",
        "The first command installs the reportkit version that made the appendix. The second "
        f"re-runs the whole analysis from the resolved specification {md_code(RESOLVED_SPEC)} "
        f"into a new folder; it reads the data from {md_code(facts.data_path)} (relative to "
        "the bundle folder: keep that layout, or edit `data.path` there). The third checks "
        "every checksum of the bundle, re-runs the analysis and compares each number with "
        "results.json (give the data's location with `--data` if it has moved). The seed is "
        f"{results.provenance.seed} (`run.seed` in the resolved specification); every random "
        "procedure draws from it, so a re-run repeats the same draws. The numbers are "
        f"expected to match results.json within {tolerance}, the tolerance "
        "`reportkit verify` applies; counts, text and checksums must match exactly.",
    ]


def _tables_and_figures(files: Mapping[str, bytes]) -> list[str]:
    rows = [
        [md_text(r.section), md_text(r.item), ", ".join(md_code(f, in_table=True) for f in r.files)]
        for r in appendix_map(files)
    ]
    return [
        "## List of tables and figures",
        "",
        "Where each table and figure of the appendix is in the bundle (tables as CSV and as "
        "LaTeX fragments for `\\input`, figures as SVG).",
        "",
        *md_table(["Appendix section", "Table or figure", "Files"], rows),
        "",
        "The whole appendix and every number: " + _present(files, (*APPENDIX_FILES, RESULTS)) + ".",
    ]


def replication_markdown(results: StudyResults, facts: RunFacts, files: Mapping[str, bytes]) -> str:
    """The text of REPLICATION.md; ``files`` are the bundle's other files (path -> bytes)."""
    parts = [
        [f"# Replication: {md_text(results.study.title)}"],
        _overview(results, facts, files),
        _data_files(results),
        _requirements(results, facts),
        _instructions(results, facts),
        _tables_and_figures(files),
    ]
    return "\n\n".join("\n".join(part) for part in parts) + "\n"
