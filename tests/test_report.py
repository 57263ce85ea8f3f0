"""Tests of the appendix rendering: filters, wording, HTML, figures and PDF.

The StudyResults used here come from ``results_example.example_results``: illustrative
numbers for layout only, so these tests check what the appendix shows and how, never
whether a number is right (the engine's tests do that against outside references).
Display rules checked below are the ones documented in reportkit/report/formatting.py;
three significant digits and "p < 0.001" are common practice, no source.
"""

from __future__ import annotations

import base64
import io
import itertools
import math
import os
import re
from html.parser import HTMLParser

import jinja2
import pytest
from hypothesis import given
from hypothesis import strategies as st
from results_example import example_results

from reportkit import results as rs
from reportkit.report import formatting as fm
from reportkit.report import wording
from reportkit.report.figures import make_figures, svg_data_uri
from reportkit.report.html import (
    ENTRY_TEMPLATE,
    SECTIONS,
    RunInfo,
    build_context,
    environment,
    render_html,
    template_dir,
)

RUN = RunInfo(
    reportkit_version="0.1.0", command="reportkit run analysis.yaml", generated_on="2024-06-01"
)

# Section headings and their order are fixed by the project brief for the appendix (the
# strength and weak-instrument sections by the brief of the instrument-strength work, the
# balance section by the brief of the balance work).
EXPECTED_TITLES = [
    "At a glance",
    "What was estimated",
    "How the sample was built",
    "Main estimates",
    "First stage and reduced form",
    "How strong are the instruments",
    "Inference that stays valid with weak instruments",
    "Is the instrument as good as random?",
    "Specification tests",
    "How much does the answer move?",
    "What the data cannot tell you",
    "Provenance",
]


def _test(**changes: object) -> rs.TestResult:
    base = {
        "name": "Hansen J",
        "statistic": 12.34,
        "distribution": "chi2",
        "df": [1.0],
        "p_value": 0.0004,
        "covariance": "robust",
        "null": "the instruments agree",
        "reference": "Hansen (1982)",
    }
    base.update(changes)
    return rs.TestResult(**base)


# --------------------------------------------------------------------------- filters


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        (0.8123, "0.812"),
        (-0.8123, "-0.812"),
        (1234.5, "1,235"),  # integer digits are never rounded away; half rounds up
        (-1234.5, "-1,235"),  # half rounds away from zero
        (123456.7, "123,457"),
        (12.0, "12.0"),
        (0.5, "0.500"),  # trailing zeros kept: they show the precision
        (2.675, "2.68"),  # rounds the printed decimal, not the binary float (2.67499...)
        (0.000123456, "0.000123"),
        (0.9996, "1.000"),
        (999999.7, "1,000,000"),
        (1e6, "1.00e6"),  # scientific from 1e6 up
        (-2.5e8, "-2.50e8"),
        (4.56e-5, "4.56e-5"),  # and below 1e-4
        (1.235e-5, "1.24e-5"),
        (0.0, "0"),
        (7, "7.00"),
    ],
)
def test_fmt_num(value: float, expected: str) -> None:
    assert fm.fmt_num(value) == expected


def test_fmt_num_digits_and_non_finite() -> None:
    assert fm.fmt_num(0.8123, digits=2) == "0.81"
    assert fm.fmt_num(3.14159, digits=5) == "3.1416"
    assert fm.fmt_num(math.nan) == "NaN"
    assert fm.fmt_num(math.inf) == "inf"
    assert fm.fmt_num(-math.inf) == "-inf"


@pytest.mark.parametrize("bad", [None, True, "0.5", [1.0]])
def test_fmt_num_rejects_non_numbers(bad: object) -> None:
    with pytest.raises(TypeError):
        fm.fmt_num(bad)  # type: ignore[arg-type]


def _parse(text: str) -> float:
    return float(text.replace(",", ""))


@given(st.floats(allow_nan=False, allow_infinity=False, min_value=-1e12, max_value=1e12))
def test_fmt_num_keeps_three_significant_digits(x: float) -> None:
    # At least 3 significant digits: the shown value is within half a unit in the third
    # significant digit, i.e. a relative error of at most 0.5e-2.
    shown = _parse(fm.fmt_num(x))
    assert math.copysign(1.0, shown) == math.copysign(1.0, x) or shown == 0.0
    assert abs(shown - x) <= 0.005 * abs(x) * (1 + 1e-9)


@pytest.mark.parametrize(
    ("p", "expected"),
    [
        (0.0, "< 0.001"),
        (1e-12, "< 0.001"),
        (0.000999, "< 0.001"),
        (0.001, "0.001"),  # the threshold itself is shown as a number
        (0.0014, "0.001"),
        (0.0015, "0.002"),
        (0.04999, "0.050"),
        (0.05, "0.050"),
        (0.5, "0.500"),
        (0.9996, "1.000"),
        (1.0, "1.000"),
        (math.nan, "NaN"),
    ],
)
def test_fmt_p(p: float, expected: str) -> None:
    assert fm.fmt_p(p) == expected


@pytest.mark.parametrize("bad", [-0.01, 1.01, math.inf])
def test_fmt_p_rejects_values_that_are_not_probabilities(bad: float) -> None:
    with pytest.raises(ValueError, match="not a probability"):
        fm.fmt_p(bad)


def test_p_phrase() -> None:
    assert fm.p_phrase(0.0002) == "< 0.001"
    assert fm.p_phrase(0.042) == "= 0.042"


def test_fmt_int() -> None:
    assert fm.fmt_int(1234567) == "1,234,567"
    assert fm.fmt_int(-1234) == "-1,234"
    assert fm.fmt_int(0) == "0"
    for bad in (3.0, True, None):
        with pytest.raises(TypeError):
            fm.fmt_int(bad)  # type: ignore[arg-type]


def test_fmt_ci() -> None:
    assert fm.fmt_ci(-0.1234, 5.678) == "[-0.123, 5.68]"
    assert fm.fmt_ci(-math.inf, 2.0) == "[-inf, 2.00]"
    assert fm.fmt_ci(0.12345, 0.5, digits=2) == "[0.12, 0.50]"


def test_fmt_pct_and_df() -> None:
    assert fm.fmt_pct(0.95) == "95%"
    assert fm.fmt_pct(0.025, digits=1) == "2.5%"
    assert fm.fmt_df([2.0, 4606.0]) == "2, 4,606"
    assert fm.fmt_df([1.5]) == "1.50"


def test_fmt_distribution() -> None:
    assert fm.fmt_distribution(_test()) == "chi-squared, 1 df"
    assert fm.fmt_distribution(_test(distribution="F", df=[2.0, 60.0])) == "F, 2 and 60 df"
    assert fm.fmt_distribution(_test(distribution="normal", df=[])) == "standard normal"


def test_label_falls_back_to_the_column_name() -> None:
    labels = {"hrs": "tutoring hours", "blank": "  "}
    assert fm.label("hrs", labels) == "tutoring hours"
    assert fm.label("dist", labels) == "dist"
    assert fm.label("blank", labels) == "blank"


def test_fmt_test_shows_not_applicable_with_its_reason() -> None:
    assert fm.fmt_test(rs.NotApplicable(reason="just-identified")) == "n/a: just-identified"
    assert fm.fmt_test(_test()) == "12.3, p < 0.001"
    assert fm.fmt_test(_test(p_value=0.2)) == "12.3, p = 0.200"
    with pytest.raises(TypeError):
        fm.fmt_test(None)  # type: ignore[arg-type]


def test_and_join_and_upper_first() -> None:
    assert fm.and_join(["a"]) == "a"
    assert fm.and_join(["a", "b"]) == "a and b"
    assert fm.and_join(["a", "b", "c"]) == "a, b and c"
    with pytest.raises(ValueError):
        fm.and_join([])
    assert fm.upper_first("tutoring Hours") == "Tutoring Hours"
    assert fm.upper_first("") == ""


# --------------------------------------------------------------------------- wording


def test_specification_sentences() -> None:
    text = " ".join(wording.specification_sentences(example_results().model))
    assert "Outcome: maths score." in text
    assert (
        "Tutoring hours per week is treated as endogenous and instrumented by voucher lottery "
        "win and distance to the nearest centre (km)." in text
    )
    assert "Controls: age in years, previous year's maths score and school grade." in text
    assert "Fixed effects absorbed: district." in text
    assert "Standard errors clustered by school." in text
    assert "over-identified by 1" in text


def test_specification_sentences_plural_and_empty_parts() -> None:
    model = example_results().model.model_copy(
        update={
            "endogenous": ["tutoring_hours", "homework"],
            "controls": [],
            "fixed_effects": [],
            "cluster_by": [],
            "n_endogenous": 2,
            "overidentification_degree": 0,
        }
    )
    text = " ".join(wording.specification_sentences(model))
    assert "Tutoring hours per week and homework are treated as endogenous" in text
    assert "Controls: none." in text
    assert "Fixed effects absorbed: none." in text
    assert "clustered" not in text
    assert "exactly identified" in text


def test_readings_do_not_overclaim() -> None:
    alpha = 0.05
    calm = wording.overid_reading(_test(p_value=0.4), alpha)
    assert "does not show that they are valid" in calm
    alarm = wording.overid_reading(_test(p_value=0.01), alpha)
    assert "different answers" in alarm
    assert "5%" in alarm
    endo = wording.endogeneity_reading(_test(p_value=0.3), alpha)
    assert "not evidence that the regressor is exogenous" in endo
    na = wording.overid_reading(rs.NotApplicable(reason="just-identified"), alpha)
    assert na == "Not reported: just-identified."


def test_main_overid_test_follows_the_covariance() -> None:
    sargan, hansen = _test(name="Sargan"), _test(name="Hansen J")
    na = rs.NotApplicable(reason="not computed")
    both = rs.Diagnostics(
        sargan=sargan, basmann=na, hansen_j=hansen, instrument_validity=na, endogeneity=na
    )
    assert wording.main_overid_test(both, "cluster") is hansen
    assert wording.main_overid_test(both, "classical") is sargan
    only_sargan = rs.Diagnostics(
        sargan=sargan, basmann=na, hansen_j=na, instrument_validity=na, endogeneity=na
    )
    assert wording.main_overid_test(only_sargan, "robust") is sargan


# --------------------------------------------------------------------------- HTML


class _Structure(HTMLParser):
    """Collects headings, table header cells, image sources and id attributes."""

    def __init__(self) -> None:
        super().__init__()
        self.headings: list[int] = []
        self.th_without_scope = 0
        self.img_sources: list[str] = []
        self.img_without_alt = 0
        self.ids: list[str] = []
        self.event_handlers: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        found = dict(attrs)
        self.event_handlers += [name for name in found if name.startswith("on")]
        if found.get("id"):
            self.ids.append(found["id"])
        if re.fullmatch(r"h[1-6]", tag):
            self.headings.append(int(tag[1]))
        if tag == "th" and not found.get("scope"):
            self.th_without_scope += 1
        if tag == "img":
            self.img_sources.append(found.get("src") or "")
            if not (found.get("alt") or "").strip():
                self.img_without_alt += 1


def _structure(html: str) -> _Structure:
    parser = _Structure()
    parser.feed(html)
    return parser


@pytest.fixture(scope="module")
def results() -> rs.StudyResults:
    return example_results()


@pytest.fixture(scope="module")
def figures(results: rs.StudyResults) -> dict:
    return make_figures(results)


@pytest.fixture(scope="module")
def html(results: rs.StudyResults, figures: dict) -> str:
    return render_html(results, RUN, figures)


def test_templates_are_found() -> None:
    assert (template_dir() / ENTRY_TEMPLATE).is_file()


def test_every_section_has_its_id_and_heading(html: str) -> None:
    assert [s.title for s in SECTIONS] == EXPECTED_TITLES
    ids = _structure(html).ids
    for section in SECTIONS:
        assert ids.count(section.id) == 1
        assert re.search(rf'<h2 id="{section.id}-heading">.*{re.escape(section.title)}</h2>', html)
        assert f'href="#{section.id}"' in html  # listed in the contents
    assert ids.count("title-block") == 1
    assert ids.count("contents") == 1
    positions = [html.index(f'id="{s.id}"') for s in SECTIONS]
    assert positions == sorted(positions)


def test_headings_descend_one_level_at_a_time(html: str) -> None:
    levels = _structure(html).headings
    assert levels[0] == 1
    assert levels.count(1) == 1
    for before, after in itertools.pairwise(levels):
        assert after <= before + 1


def test_tables_have_scoped_header_cells_and_wrappers(html: str) -> None:
    assert _structure(html).th_without_scope == 0
    assert html.count("<table") == html.count('<div class="table-wrap">')


def test_html_is_self_contained(html: str) -> None:
    assert "http://" not in html
    assert "https://" not in html
    assert "<script" not in html.lower()
    assert "<link" not in html.lower()
    assert "@import" not in html
    assert "<style>" in html
    sources = _structure(html).img_sources
    assert sources
    assert all(src.startswith("data:image/svg+xml;base64,") for src in sources)


def test_html_is_deterministic(results: rs.StudyResults, figures: dict, html: str) -> None:
    assert render_html(results, RUN, figures) == html


def test_numbers_and_run_facts_are_shown(html: str) -> None:
    assert "1.64" in html  # the illustrative 2SLS estimate
    assert "[0.836, 2.44]" in html  # its interval, 1.64 +/- 1.96 x 0.41
    assert "4,624" in html
    assert "61 (school)" in html
    assert "Generated on 2024-06-01" in html
    assert "reportkit run analysis.yaml" in html
    assert "20240601" in html  # the seed
    assert "full design" in html  # how linearmodels was given the cross-check


def test_not_applicable_entries_show_their_reason(html: str) -> None:
    assert "n/a: assumes independent, homoskedastic errors" in html
    assert "n/a: not k-class" in html  # GMM has no kappa


def test_crosscheck_not_applicable_and_missing_ratio_are_explained() -> None:
    variant = example_results(
        provenance=example_results().provenance.model_copy(
            update={"crosschecks": rs.NotApplicable(reason="sample above the quick re-fit size")}
        ),
        ols_2sls_ratio=[None],
    )
    page = render_html(variant, RUN, make_figures(variant))
    assert "n/a: sample above the quick re-fit size" in page
    assert "n/a: the OLS estimate is zero or OLS was not estimated" in page


def test_text_from_the_spec_and_data_is_escaped() -> None:
    script = "<script>alert(1)</script>"
    image = '<img src=x onerror="alert(2)">'
    base = example_results()
    labels = dict(base.model.labels, voucher_won=image, maths_score=script)
    variant = example_results(
        study=rs.StudyInfo(title=script, authors=[image], summary=f"{script} & {image}"),
        model=base.model.model_copy(update={"labels": labels}),
    )
    page = render_html(variant, RUN, make_figures(variant))
    assert script not in page
    assert image not in page
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "&lt;img src=x onerror=&#34;alert(2)&#34;&gt;" in page
    assert "<script" not in page.lower()
    structure = _structure(page)
    assert structure.event_handlers == []
    assert all(src.startswith("data:") for src in structure.img_sources)


def test_strict_undefined_raises_on_a_missing_variable(results, figures) -> None:
    env = environment()
    assert env.undefined is jinja2.StrictUndefined
    assert env.autoescape is True
    context = build_context(results, RUN, figures)
    del context["level"]
    with pytest.raises(jinja2.UndefinedError, match="level"):
        env.get_template(ENTRY_TEMPLATE).render(context)
    with pytest.raises(jinja2.UndefinedError):
        env.from_string("{{ results.study.no_such_field }}").render(results=results)


def test_filters_refuse_none_instead_of_printing_a_blank() -> None:
    with pytest.raises(TypeError, match="None"):
        environment().from_string("{{ x | fmt_num }}").render(x=None)


def test_missing_figure_is_an_error(results: rs.StudyResults, figures: dict) -> None:
    partial = {k: v for k, v in figures.items() if k != "first-stage-1"}
    with pytest.raises(ValueError, match="first-stage-1"):
        render_html(results, RUN, partial)


def test_run_info_needs_an_iso_date() -> None:
    for bad in (
        "1 June 2024",
        "2024-6-1",
        "20240601",
        "2024-W22-6",
        "2024-02-30",
        "2024-06-01T10:00",
    ):
        with pytest.raises(ValueError, match="YYYY-MM-DD"):
            RunInfo(reportkit_version="0.1.0", command="x", generated_on=bad)


# --------------------------------------------------------------------------- figures


def test_figures_are_deterministic_svg(results: rs.StudyResults, figures: dict) -> None:
    assert sorted(figures) == [
        "balance-std-differences",
        "estimates-1",
        "first-stage-1",
        "weak-iv-p-values",
    ]
    again = make_figures(results)
    for key, figure in figures.items():
        assert figure.svg.startswith("<?xml")
        assert "<svg" in figure.svg
        assert again[key].svg == figure.svg
        assert "<dc:date>" not in figure.svg
        assert 'id="DejaVuSans-' in figure.svg  # glyphs drawn from the fixed font


def test_figures_as_data_uris(figures: dict) -> None:
    assert {f.filename for f in figures.values()} == {
        "balance-std-differences.svg",
        "estimates-1.svg",
        "first-stage-1.svg",
        "weak-iv-p-values.svg",
    }
    for figure in figures.values():
        uri = figure.data_uri
        assert uri == svg_data_uri(figure.svg)
        prefix = "data:image/svg+xml;base64,"
        assert uri.startswith(prefix)
        assert base64.b64decode(uri[len(prefix) :]).decode("utf-8") == figure.svg


def test_figures_have_alt_text_with_the_numbers(figures: dict) -> None:
    estimates = figures["estimates-1"].alt
    for name in ("OLS", "2SLS", "LIML", "GMM"):
        assert name in estimates
    assert "[0.836, 2.44]" in estimates
    first_stage = figures["first-stage-1"].alt
    assert "voucher lottery win" in first_stage
    assert "slope 2.35" in first_stage


def test_first_stage_without_bins_has_no_figure() -> None:
    base = example_results()
    variant = example_results(first_stages=[base.first_stages[0].model_copy(update={"binned": []})])
    figures = make_figures(variant)
    assert "first-stage-1" not in figures
    page = render_html(variant, RUN, figures)
    assert "No binned scatter was computed" in page


def test_dollar_signs_in_labels_do_not_break_figures() -> None:
    base = example_results()
    labels = dict(base.model.labels, maths_score="earnings ($) per $ spent")
    variant = example_results(model=base.model.model_copy(update={"labels": labels}))
    assert make_figures(variant)["estimates-1"].svg


# --------------------------------------------------------------------------- PDF


def test_pdf_refuses_urls_other_than_data() -> None:
    from reportkit.report.pdf import RefusedURLError, render_pdf

    page = '<html><body><p>x</p><img src="http://example.invalid/logo.png"></body></html>'
    with pytest.raises(RefusedURLError, match=r"example\.invalid"):
        render_pdf(page)


@pytest.mark.slow
def test_pdf_renders_and_is_byte_identical(html: str) -> None:
    from pypdf import PdfReader

    from reportkit.report.pdf import render_pdf

    environment_before = os.environ.get("SOURCE_DATE_EPOCH")
    first = render_pdf(html)
    second = render_pdf(html)
    assert os.environ.get("SOURCE_DATE_EPOCH") == environment_before
    assert first == second
    assert first.startswith(b"%PDF-")
    reader = PdfReader(io.BytesIO(first))
    assert len(reader.pages) > 1
    text = " ".join(" ".join(page.extract_text().split()) for page in reader.pages)
    for title in EXPECTED_TITLES:
        assert title in text
    assert "page 1 of" in text
    assert reader.metadata is not None
    assert reader.metadata.creation_date is not None
    assert reader.metadata.creation_date.strftime("%Y-%m-%d") == RUN.generated_on
