"""Tests of the appendix section on identifying assumptions ("What the data cannot tell you")
and of its line in "At a glance".

The StudyResults come from ``results_example`` (illustrative, layout only), with the
disclosures rebuilt from varied ``assumptions`` sections. These tests check what the HTML
shows: each assumption, a missing argument shown prominently, the authors' words quoted
verbatim and escaped, their references, and links to sections that exist. The wordings are
this project's own.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from html.parser import HTMLParser

import pytest
from markupsafe import escape
from results_example import example_results

from reportkit import results as rs
from reportkit.disclosures import build_disclosures
from reportkit.report.disclosure_sections import disclosure_glance, disclosures_view
from reportkit.report.figures import FigureImage, make_figures
from reportkit.report.html import SECTIONS, RunInfo, render_html
from reportkit.spec.models import AdditionalAssumption, Argument, AssumptionsSection

RUN = RunInfo(
    reportkit_version="0.1.0", command="reportkit run analysis.yaml", generated_on="2024-06-01"
)
SECTION_ID = "cannot-tell"
INJECTION = '<script>alert("x")</script><img src=x onerror=alert(1)>'


@pytest.fixture(scope="module")
def figures() -> Mapping[str, FigureImage]:
    # the figures depend on the numbers only; the disclosures vary below
    return make_figures(example_results())


def _results(assumptions: AssumptionsSection) -> rs.StudyResults:
    base = example_results()
    disclosures = build_disclosures(
        assumptions,
        model=base.model,
        strength=base.strength,
        weak_iv=base.weak_iv,
        diagnostics=base.diagnostics,
        balance=base.balance,
    )
    return example_results(disclosures=disclosures)


def _section(page: str, section_id: str) -> str:
    match = re.search(rf'<section id="{section_id}".*?</section>', page, flags=re.S)
    assert match, f"section {section_id} not found"
    return match.group(0)


def _article(section: str, key: str) -> str:
    match = re.search(
        rf'<article class="assumption" id="assumption-{key}".*?</article>', section, flags=re.S
    )
    assert match, f"assumption {key} not found"
    return match.group(0)


class _Ids(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.ids: set[str] = set()
        self.hrefs: list[str] = []
        self.scripts = 0

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        values = dict(attrs)
        if values.get("id"):
            self.ids.add(str(values["id"]))
        if tag == "a" and str(values.get("href", "")).startswith("#"):
            self.hrefs.append(str(values["href"])[1:])
        if tag == "script":
            self.scripts += 1


def test_section_lists_every_assumption(figures: Mapping[str, FigureImage]) -> None:
    page = render_html(example_results(), RUN, figures)
    section = _section(page, SECTION_ID)
    for key, name in [
        ("relevance", "Relevance"),
        ("independence", "Independence"),
        ("exclusion_restriction", "Exclusion restriction"),
        ("monotonicity", "Monotonicity"),
    ]:
        article = _article(section, key)
        assert f">{name}</h3>" in article
        assert "What it says" in article and "Can the data test it?" in article
    assert '<strong class="testable testable-yes">Yes.</strong>' in _article(section, "relevance")
    assert 'testable-partly">Partly.</strong>' in _article(section, "independence")
    assert 'testable-no">No.</strong>' in _article(section, "exclusion_restriction")
    # the fixed cautions stay in the section
    assert "cannot establish that an instrument is valid" in section
    assert "local average treatment effect" in section
    assert "not advice" in section


def test_missing_argument_is_shown_prominently(figures: Mapping[str, FigureImage]) -> None:
    # example_assumptions leaves monotonicity without an argument
    section = _section(render_html(example_results(), RUN, figures), SECTION_ID)
    missing = _article(section, "monotonicity")
    assert '<div class="argument-missing">' in missing
    assert "<strong>No argument given by the authors.</strong>" in missing
    assert "<code>assumptions.monotonicity</code>" in missing
    assert "The authors argue" not in missing
    stated = _article(section, "relevance")
    assert "argument-missing" not in stated
    assert "No argument given" not in stated


def test_arguments_are_attributed_in_a_blockquote_with_references(
    figures: Mapping[str, FigureImage],
) -> None:
    argument = "Lottery winners\nwere drawn  publicly."
    references = ["Protocol of the draw (invented), section 2", "Second source (invented)"]
    results = _results(
        AssumptionsSection(independence=Argument(argument=argument, references=references))
    )
    article = _article(_section(render_html(results, RUN, figures), SECTION_ID), "independence")
    quote = re.search(r'<blockquote class="authors-argument">.*?</blockquote>', article, re.S)
    assert quote
    assert '<p class="attribution">The authors argue:</p>' in quote.group(0)
    # verbatim: the line break and the double space survive (shown with white-space: pre-line)
    assert f'<p class="argument-text">{argument}</p>' in quote.group(0)
    for reference in references:
        assert f"<li>{reference}</li>" in quote.group(0)


def test_injection_in_an_argument_is_escaped(figures: Mapping[str, FigureImage]) -> None:
    results = _results(
        AssumptionsSection(
            exclusion_restriction=Argument(argument=INJECTION, references=[INJECTION]),
            additional=[AdditionalAssumption(name=INJECTION, argument="a & b")],
        )
    )
    page = render_html(results, RUN, figures)
    assert INJECTION not in page
    # the environment escapes with markupsafe (a double quote becomes &#34;)
    assert str(escape(INJECTION)) in _article(_section(page, SECTION_ID), "exclusion_restriction")
    assert "a &amp; b" in page
    parser = _Ids()
    parser.feed(page)
    assert parser.scripts == 0


def test_evidence_links_resolve_to_sections(figures: Mapping[str, FigureImage]) -> None:
    page = render_html(example_results(), RUN, figures)
    section = _section(page, SECTION_ID)
    parser = _Ids()
    parser.feed(section)
    assert {
        "first-stage",
        "instrument-strength",
        "as-good-as-random",
        "specification-tests",
    } <= set(parser.hrefs)
    whole = _Ids()
    whole.feed(page)
    assert set(parser.hrefs) <= whole.ids
    titles = {s.id: s.title for s in SECTIONS}
    assert f'<a href="#first-stage">{titles["first-stage"]}</a>' in section


def test_unknown_section_id_is_an_error() -> None:
    d = example_results().disclosures
    bad_item = d.items[0].model_copy(
        update={"evidence": [rs.EvidenceLink(section_id="nowhere", text="x")]}
    )
    bad = d.model_copy(update={"items": [bad_item]})
    with pytest.raises(ValueError, match="nowhere"):
        disclosures_view(bad, {s.id: s.title for s in SECTIONS})


def test_no_evidence_is_said_not_left_blank(figures: Mapping[str, FigureImage]) -> None:
    section = _section(render_html(example_results(), RUN, figures), SECTION_ID)
    assert "None: no section of this appendix bears on it." in _article(section, "monotonicity")


@pytest.mark.parametrize(
    ("assumptions", "line"),
    [
        (AssumptionsSection(), "4 of 4 identifying assumptions have no stated argument"),
        (
            AssumptionsSection(
                relevance=Argument(argument="a"),
                independence=Argument(argument="b"),
            ),
            "2 of 4 identifying assumptions have no stated argument",
        ),
        (
            AssumptionsSection(
                relevance=Argument(argument="a"),
                independence=Argument(argument="b"),
                exclusion_restriction=Argument(argument="c"),
            ),
            "1 of 4 identifying assumptions has no stated argument",
        ),
        (
            AssumptionsSection(
                relevance=Argument(argument="a"),
                independence=Argument(argument="b"),
                exclusion_restriction=Argument(argument="c"),
                late_claimed=False,
            ),
            "All 3 identifying assumptions have a stated argument",
        ),
    ],
)
def test_count_line_in_at_a_glance(
    figures: Mapping[str, FigureImage], assumptions: AssumptionsSection, line: str
) -> None:
    results = _results(assumptions)
    assert disclosure_glance(results.disclosures) == line
    glance = _section(render_html(results, RUN, figures), "at-a-glance")
    assert re.search(rf'<a href="#{SECTION_ID}"( class="warn")?>{line}</a>', glance)
    assert ('class="warn"' in glance.split("Identifying assumptions")[1].split("</dd>")[0]) == (
        not line.startswith("All")
    )
