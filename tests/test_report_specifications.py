"""Tests of the appendix section "Across specifications" and its table exports.

The results come from running the invented demo spec (fixtures/demo/tutoring.yaml, three
further specifications), varied here to reach other branches: no specifications, a
specification that could not run, names with markup. These tests check what the appendix
shows and how, never whether a number is right (the specifications' numbers are checked
against linearmodels and statsmodels in tests/test_specifications.py). The wordings are
this project's own.
"""

from __future__ import annotations

import re
from html import unescape
from pathlib import Path

import pytest

from reportkit import api
from reportkit import results as rs
from reportkit.exports import specifications_latex
from reportkit.report import formatting as fm
from reportkit.report.figures import make_figures
from reportkit.report.html import SECTIONS, RunInfo, render_html, sections_for
from reportkit.report.specification_sections import (
    CAUTION,
    OTHER_COMPLIERS,
    cross_readings,
    cross_table,
    specifications_view,
)

REPO = Path(__file__).resolve().parents[1]
DEMO_SPEC = REPO / "fixtures" / "demo" / "tutoring.yaml"
RUN = RunInfo(reportkit_version="0.1.0", command="reportkit demo", generated_on="2024-06-01")
SECTION = '<section id="specifications"'
TITLE = "Across specifications"


@pytest.fixture(scope="module")
def results() -> rs.StudyResults:
    return api.analyse(api.load(DEMO_SPEC))


@pytest.fixture(scope="module")
def figures(results: rs.StudyResults) -> dict:
    return make_figures(results)


@pytest.fixture(scope="module")
def html(results: rs.StudyResults, figures: dict) -> str:
    return render_html(results, RUN, figures)


def _section(page: str) -> str:
    start = page.index(SECTION)
    return page[start : page.index("</section>", start)]


def _text(fragment: str) -> str:
    return " ".join(unescape(re.sub(r"<[^>]+>", " ", fragment)).split())


def _contents(page: str) -> list[str]:
    start = page.index('<nav id="contents"')
    nav = page[start : page.index("</nav>", start)]
    return [_text(item) for item in re.findall(r"<li>(.*?)</li>", nav)]


def _numbered(page: str) -> list[str]:
    found = re.findall(r"<h2 id=\"([^\"]+)-heading\">(.*?)</h2>", page)
    return [_text(h) for anchor, h in found if anchor != "contents"]


def test_section_follows_main_estimates_with_the_demo_spec(html: str) -> None:
    titles = [s.title for s in SECTIONS]
    at = titles.index("Main estimates") + 1
    expected = [*titles[:at], TITLE, *titles[at:]]
    assert _contents(html) == expected
    assert _numbered(html) == [f"{i} {t}" for i, t in enumerate(expected, start=1)]
    assert html.count(SECTION) == 1


def test_section_is_omitted_without_specifications(results: rs.StudyResults, figures: dict) -> None:
    bare = results.model_copy(update={"specifications": []})
    assert sections_for(bare) == SECTIONS
    assert specifications_view(bare) is None
    page = render_html(bare, RUN, figures)
    body = page[page.index("</style>") :]  # the inlined CSS names the section in a comment
    assert SECTION not in body and TITLE not in body
    assert _contents(page) == [s.title for s in SECTIONS]
    assert _numbered(page)[4] == "5 First stage and reduced form"


def test_table_has_one_column_per_specification_main_first(
    results: rs.StudyResults, html: str
) -> None:
    section = _section(html)
    names = ["Main", "Lottery only", "Without the grade-6 score", "No district effects"]
    header = _text(re.search(r"<thead>(.*?)</thead>", section, re.DOTALL).group(1))  # type: ignore[union-attr]
    assert header == " ".join(f"({i}) {n}" for i, n in enumerate(names, start=1))
    # the headline row: each column's 2SLS coefficient and standard error, as formatted
    coefficients = [
        next(e for e in results.estimates if e.estimator == "2sls").coefficients[0],
        *(
            next(e for e in r.estimates if e.estimator == "2sls").coefficients[0]  # type: ignore[union-attr]
            for r in results.specifications
        ),
    ]
    row = re.search(r"<tr><th scope=\"row\">Coefficient.*?</tr>", section, re.DOTALL)
    assert row is not None
    expected = " ".join(
        f"{fm.fmt_num(c.estimate)} ({fm.fmt_num(c.std_error)})" for c in coefficients
    )
    assert _text(row.group(0)).endswith(expected)
    text = _text(section)
    for title in (
        "Other estimators",
        "First-stage F",
        "Effective F",
        "Anderson-Rubin 95% set",
        "Over-identification test, p-value",
        "Endogeneity test, p-value",
        "Rows used",
        "What each column changes",
        "Instruments",
        "Controls",
        "Fixed effects",
        "Clusters",
        "Standard errors",
        "Sample",
    ):
        assert title in text
    # the lottery alone is just-identified: its over-identification cell says n/a, and why
    assert "n/a: The model is just-identified" in text


def test_reading_does_not_overclaim(results: rs.StudyResults, html: str) -> None:
    text = _text(_section(html))
    assert CAUTION in text
    readings = cross_readings(results)
    assert readings[0].startswith("The 2SLS estimate of the effect of Tutoring hours attended is ")
    assert "main standard errors" in readings[0]
    # 'Lottery only' changes the instruments: other compliers
    assert readings[1] == f"'Lottery only' uses other instruments. {OTHER_COMPLIERS}"
    # 'Lottery only' and 'Without the grade-6 score' keep rows the main model drops
    assert "Not every column uses the same rows" in readings[2]
    for reading in readings:
        assert unescape(reading) in text
    for word in ("proves", "confirms", "valid instruments"):
        assert word not in text


def test_one_subsection_per_specification(results: rs.StudyResults, html: str) -> None:
    section = _section(html)
    for i, result in enumerate(results.specifications, start=1):
        heading = re.search(rf'<h3 id="specifications-{i}">(.*?)</h3>', section)
        assert heading is not None and _text(heading.group(1)) == f"({i + 1}) {result.name}"
        assert result.description in _text(section)
        for change in result.changes:
            assert fm.upper_first(change) in _text(section)
        assert not isinstance(result.verdict, rs.NotApplicable)
        assert result.verdict.summary in _text(section)
        assert f"Anderson-Rubin 95% set: {fm.fmt_set(result.anderson_rubin)}." in _text(section)


def test_a_specification_that_could_not_run_shows_its_reason(
    results: rs.StudyResults, figures: dict
) -> None:
    reason = "this specification's sample cannot support the model: no rows are left"
    na = rs.NotApplicable(reason=reason)
    broken = results.specifications[0].model_copy(
        update={
            "n_obs": None,
            "covariance": "",
            **{
                key: na
                for key in (
                    "estimates",
                    "strength",
                    "verdict",
                    "anderson_rubin",
                    "sargan",
                    "hansen_j",
                    "endogeneity",
                )
            },
        }
    )
    variant = results.model_copy(update={"specifications": [broken, *results.specifications[1:]]})
    table = cross_table(variant)
    column = [row.cells[1] for group in table.groups for row in group.rows]
    numeric = [c for c in column if c.kind not in ("text", "same")]
    assert {c.kind for c in numeric} == {"na"}
    (note,) = [n for n in table.notes if n.marker == numeric[0].note]
    assert note.text == reason
    text = _text(_section(render_html(variant, RUN, figures)))
    assert f"Not estimated: {fm.sentence(reason)}" in text
    assert "'Lottery only' could not be estimated" in text


def test_names_and_descriptions_are_escaped(results: rs.StudyResults, figures: dict) -> None:
    name = '<script>alert("x")</script> & 50% #1'
    first = results.specifications[0].model_copy(
        update={"name": name, "description": "<b>bold</b> claim"}
    )
    variant = results.model_copy(update={"specifications": [first, *results.specifications[1:]]})
    page = render_html(variant, RUN, figures)
    assert "<script>alert" not in page and "<b>bold</b>" not in page
    assert "&lt;script&gt;alert(&#34;x&#34;)&lt;/script&gt; &amp; 50% #1" in page
    latex = specifications_latex(variant)
    assert r"\textless{}script\textgreater{}alert(" in latex
    assert r"\& 50\% \#1" in latex


def test_latex_has_the_paper_layout(results: rs.StudyResults) -> None:
    latex = specifications_latex(results)
    lines = latex.splitlines()
    assert lines[lines.index("\\hline") + 1] == " & (1) & (2) & (3) & (4) \\\\"
    assert " & Main & Lottery only & Without the grade-6 score & No district effects \\\\" in lines
    head = next(i for i, line in enumerate(lines) if line.startswith("2SLS: "))
    main = next(e for e in results.estimates if e.estimator == "2sls").coefficients[0]
    assert lines[head].split(" & ")[1] == f"{main.estimate:.3f}"
    assert lines[head + 1].split(" & ")[1] == f"({main.std_error:.3f})"
    assert lines[-1] == "\\end{tabular}"
