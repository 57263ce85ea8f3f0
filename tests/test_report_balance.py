"""Tests of the appendix section "Is the instrument as good as random?".

The StudyResults come from ``results_example`` (illustrative numbers for layout only), varied
here to reach every branch: balance not computed, an empty group, statistics that do not
apply, no placebo outcome. These tests check what the appendix shows and how, never whether
a number is right (the balance computations are tested against outside references in their
own tests). The band |standardized difference| <= 0.1 is a common rule of thumb, no source;
the wordings are this project's own.
"""

from __future__ import annotations

import base64
import re
from html import escape
from html.parser import HTMLParser

import jinja2
import pytest
from results_example import CLUSTER_COV, example_balance, example_results

from reportkit import results as rs
from reportkit.report import wording
from reportkit.report.balance_sections import (
    balance_table,
    instrument_order,
    short_group_names,
)
from reportkit.report.figures import (
    BALANCE_KEY,
    balance_figure,
    balance_svg,
    make_figures,
)
from reportkit.report.html import (
    ENTRY_TEMPLATE,
    SECTIONS,
    RunInfo,
    build_context,
    environment,
    render_html,
)

RUN = RunInfo(
    reportkit_version="0.1.0", command="reportkit run analysis.yaml", generated_on="2024-06-01"
)
BALANCE_ID = "as-good-as-random"
TITLE = "Is the instrument as good as random?"
NA = rs.NotApplicable
DASH = "\N{EM DASH}"


def _render(results: rs.StudyResults) -> str:
    return render_html(results, RUN, make_figures(results))


def _section(page: str, section_id: str) -> str:
    start = page.index(f'<section id="{section_id}"')
    return page[start : page.index("</section>", start)]


class _TextOnly(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.parts: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag not in ("strong", "em", "span", "code", "a"):
            self.parts.append(" ")

    def handle_endtag(self, tag: str) -> None:
        self.handle_starttag(tag, [])

    def handle_data(self, data: str) -> None:
        self.parts.append(data)


def _text(fragment: str) -> str:
    parser = _TextOnly()
    parser.feed(fragment)
    return " ".join("".join(parser.parts).split())


class _Tables(HTMLParser):
    """Every table's class and body rows; each cell as its text parts (span lines kept apart)."""

    def __init__(self) -> None:
        super().__init__()
        self.tables: list[tuple[str, list[list[list[str]]]]] = []
        self._in_body = False
        self._row: list[list[str]] | None = None
        self._cell: list[str] | None = None
        self.th_without_scope = 0

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        found = dict(attrs)
        if tag == "table":
            self.tables.append((found.get("class") or "", []))
        elif tag == "tbody":
            self._in_body = True
        elif tag == "tr" and self._in_body:
            self._row = []
        elif tag in ("td", "th") and self._row is not None:
            self._cell = []
        elif tag == "span" and self._cell is not None:
            self._cell.append("|")
        if tag == "th" and not found.get("scope"):
            self.th_without_scope += 1

    def handle_endtag(self, tag: str) -> None:
        if tag == "tbody":
            self._in_body = False
        elif tag in ("td", "th") and self._cell is not None and self._row is not None:
            parts = [" ".join(p.split()) for p in "".join(self._cell).split("|")]
            self._row.append([p for p in parts if p])
            self._cell = None
        elif tag == "tr" and self._row is not None:
            self.tables[-1][1].append(self._row)
            self._row = None

    def handle_data(self, data: str) -> None:
        if self._cell is not None:
            self._cell.append(data)


class _Attributes(HTMLParser):
    """Collects the names of event-handler attributes (onclick, onerror, ...)."""

    def __init__(self) -> None:
        super().__init__()
        self.event_handlers: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.event_handlers += [name for name, _ in attrs if name.startswith("on")]


def _tables(fragment: str, css_class: str) -> list[list[list[list[str]]]]:
    parser = _Tables()
    parser.feed(fragment)
    return [rows for cls, rows in parser.tables if css_class in cls.split()]


def _row(rows: list[list[list[str]]], title_start: str) -> list[list[str]]:
    matches = [row for row in rows if row[0] and row[0][0].startswith(title_start)]
    assert len(matches) == 1, f"{len(matches)} rows start with {title_start!r}"
    return matches[0]


def _with_balance(**changes: object) -> rs.StudyResults:
    return example_results(balance=example_balance().model_copy(update=changes))


def _with_cell(row_index: int, cell_index: int, **changes: object) -> rs.StudyResults:
    """The example with one balance cell changed."""
    balance = example_balance()
    row = balance.rows[row_index]
    cells = list(row.cells)
    cells[cell_index] = cells[cell_index].model_copy(update=changes)
    rows = list(balance.rows)
    rows[row_index] = row.model_copy(update={"cells": cells})
    return example_results(balance=balance.model_copy(update={"rows": rows}))


def _empty_last_group() -> rs.StudyResults:
    """Free school meals against distance: the last quartile has no rows with the covariate."""
    cell = example_balance().rows[2].cells[1]
    groups = [
        g if i < len(cell.groups) - 1 else g.model_copy(update={"mean": None, "n": 0})
        for i, g in enumerate(cell.groups)
    ]
    return _with_cell(2, 1, groups=groups, difference=None, std_difference=None)


def _test(statistic: float, p_value: float) -> rs.TestResult:
    return rs.TestResult(
        name="Joint balance test",
        statistic=statistic,
        distribution="F",
        df=[3.0, 60.0],
        p_value=p_value,
        covariance=CLUSTER_COV,
        null="the covariates are jointly unrelated to the instrument",
        reference="Wald test",
    )


@pytest.fixture(scope="module")
def page() -> str:
    return _render(example_results())


# --------------------------------------------------------------------------- place


def test_section_id_heading_and_place_in_the_contents(page: str) -> None:
    ids = [s.id for s in SECTIONS]
    assert {s.id: s.title for s in SECTIONS}[BALANCE_ID] == TITLE
    # after the weak-instrument section, before the specification tests
    assert ids.index(BALANCE_ID) == ids.index("weak-iv-robust") + 1
    assert ids.index("specification-tests") == ids.index(BALANCE_ID) + 1
    assert page.count(f'<section id="{BALANCE_ID}"') == 1
    heading = re.search(rf'<h2 id="{BALANCE_ID}-heading">(.*?)</h2>', page)
    assert heading is not None
    assert TITLE in heading.group(1)
    contents = page[page.index('<nav id="contents"') : page.index("</nav>")]
    listed = re.findall(r'<a href="#([^"]+)">([^<]*)</a>', contents)
    assert [section_id for section_id, _ in listed] == ids
    assert (BALANCE_ID, TITLE) in listed
    sections = [page.index(f'<section id="{s}"') for s in ids]
    assert sections == sorted(sections)


def test_balance_not_computed_shows_its_reason() -> None:
    reason = "no balance covariates, pre-treatment variables or placebo outcomes were given"
    results = example_results(balance=NA(reason=reason))
    figures = make_figures(results)
    assert BALANCE_KEY not in figures
    page = render_html(results, RUN, figures)
    section = _section(page, BALANCE_ID)
    assert '<div class="caution not-computed">' in section
    assert "Not reported: No balance covariates, pre-treatment variables" in _text(section)
    assert "<table" not in section
    glance = _text(_section(page, "at-a-glance"))
    assert f"Balance of the instruments n/a: {reason}" in glance


# --------------------------------------------------------------------------- tables


def test_one_balance_table_per_instrument_with_means_differences_and_coefficients(
    page: str,
) -> None:
    section = _section(page, BALANCE_ID)
    tables = _tables(section, "balance")
    assert len(tables) == 2
    lottery, distance = tables
    text = _text(section)
    assert "Covariate means by voucher lottery win" in text
    assert "Covariate means by distance to the nearest centre (km)" in text
    # group headers in the order the results give them
    head = section[section.index("Covariate means by distance") :]
    head = head[: head.index("</thead>")]
    # the instrument's label in the group names is written as x, and the note says so
    assert re.findall(r'class="num group-name">([^<]*)<', head) == [
        "x &lt;= 1.80",
        "1.80 &lt; x &lt;= 3.40",
        "3.40 &lt; x &lt;= 5.90",
        "x &gt; 5.90",
    ]
    age = _row(lottery, "age in years")
    assert age[0] == ["age in years", "control in the model; 4,624 rows"]
    assert age[1:3] == [["13.4", "n = 2,871"], ["13.5", "n = 1,753"]]
    assert age[3] == ["0.0300"]  # 13.45 - 13.42
    assert age[4] == ["0.0319"]  # 0.03 / 0.94
    assert age[5] == ["0.0300", "(0.0310)", "p = 0.333"]
    assert age[6] == ["0.0270", "(0.0290)", "p = 0.352"]
    meals = _row(distance, "eligible for free school meals")
    assert meals[0][1] == "pre-treatment, not a control; 4,511 rows"
    assert [cell[1] for cell in meals[1:5]] == ["n = 1,128", "n = 1,128", "n = 1,128", "n = 1,127"]
    prior = _row(distance, "previous year's maths score")
    assert prior[5:7] == [["-2.60"], ["-0.178"]]  # 60.9 - 63.5, then / 14.6
    # beyond the rule-of-thumb band: shown in bold, and explained once
    assert "<strong>-0.178</strong>" in section
    assert "<strong>0.0342</strong>" not in section
    assert wording.STD_DIFFERENCE_BAND_TEXT in text
    assert "Groups of distance to the nearest centre (km), written with x for its value;" in text
    assert "the mean in the last group (x > 5.90) minus the first (x <= 1.80)" in text
    assert "the mean in the last group (value 1) minus the first (value 0)" in text


def test_coefficient_not_applicable_shows_its_reason() -> None:
    reason = "constant within districts: absorbed by the fixed effects"
    page = _render(_with_cell(2, 1, conditional=NA(reason=reason)))
    distance = _tables(_section(page, BALANCE_ID), "balance")[1]
    meals = _row(distance, "eligible for free school meals")
    assert meals[8] == [f"n/a: {reason}"]
    assert meals[7] == ["0.0110", "(0.00400)", "p = 0.006"]


def test_an_empty_group_is_a_dash_with_a_note_not_an_empty_cell() -> None:
    section = _section(_render(_empty_last_group()), BALANCE_ID)
    distance = _tables(section, "balance")[1]
    meals = _row(distance, "eligible for free school meals")
    assert meals[4] == [DASH, "n = 0"]  # the empty group
    assert meals[1][0] == "0.198"  # the others keep their means
    assert meals[5] == [DASH]  # no difference
    assert meals[6] == [DASH]  # no standardized difference
    assert meals[7] == ["0.0110", "(0.00400)", "p = 0.006"]
    for table in _tables(section, "balance"):
        for row in table:
            assert all(cell for cell in row), f"an empty cell in {row}"
    text = _text(section)
    assert "A dash marks a value that could not be computed" in text
    assert (
        "Eligible for free school meals, group x > 5.90: no rows with this covariate (n = 0), "
        "so no mean." in text
    )
    assert (
        "Eligible for free school meals: no difference or standardized difference (the first "
        "or last group has no mean)." in text
    )
    # the lottery table has no dash, hence no dash note of its own
    lottery_notes = section[section.index("Covariate means by voucher") :]
    lottery_notes = lottery_notes[: lottery_notes.index("Covariate means by distance")]
    assert "A dash marks" not in lottery_notes


def test_a_missing_standardized_difference_alone_is_explained() -> None:
    section = _section(_render(_with_cell(0, 0, std_difference=None)), BALANCE_ID)
    age = _row(_tables(section, "balance")[0], "age in years")
    assert age[3] == ["0.0300"]
    assert age[4] == [DASH]
    assert "no standardized difference (the pooled standard deviation" in _text(section)


def test_cells_that_do_not_line_up_are_refused() -> None:
    balance = example_balance()
    row = balance.rows[1]
    renamed = row.cells[1].model_copy(
        update={
            "groups": [
                g.model_copy(update={"group": f"q{i}"}) for i, g in enumerate(row.cells[1].groups)
            ]
        }
    )
    odd = balance.model_copy(
        update={
            "rows": [balance.rows[0], row.model_copy(update={"cells": [row.cells[0], renamed]})]
        }
    )
    with pytest.raises(ValueError, match="different groups"):
        balance_table(odd, "distance_km", {})
    short = balance.model_copy(
        update={"rows": [balance.rows[0], row.model_copy(update={"cells": [row.cells[0]]})]}
    )
    with pytest.raises(ValueError, match="prior_score"):
        instrument_order(short)


def test_group_names_write_the_instrument_as_x_only_where_it_stands_alone() -> None:
    label = "distance (km)"
    names = ("distance (km) <= 1.80", "1.80 < distance (km) <= 3.40", "distance (km) > 3.40")
    assert short_group_names(names, "dist", label) == (
        ("x <= 1.80", "1.80 < x <= 3.40", "x > 3.40"),
        True,
    )
    # the column name counts too; the binary grouping and numbers are left alone
    assert short_group_names(("e <= 1e+06", "e > 1e+06"), "e", "e") == (
        ("x <= 1e+06", "x > 1e+06"),
        True,
    )
    assert short_group_names(("value 0", "value 1"), "won", "lottery win") == (
        ("value 0", "value 1"),
        False,
    )
    assert short_group_names(("low distance (km)s", "high"), "dist", label)[1] is False


def test_long_group_names_may_wrap_short_ones_stay_on_one_line() -> None:
    balance = example_balance()
    table = balance_table(balance, "distance_km", example_results().model.labels)
    assert table.compact_groups
    unlabelled = balance_table(balance, "distance_km", {})  # the label is not found in them
    assert unlabelled.groups[0] == "distance to the nearest centre (km) <= 1.80"
    assert not unlabelled.compact_groups
    assert not any("written with x" in note for note in unlabelled.notes)


def test_a_column_where_nothing_applies_is_left_out_with_its_reason_once() -> None:
    reason = "the model has no fixed effects, so only the unconditional regression applies"
    balance = example_balance()
    rows = [
        row.model_copy(
            update={
                "cells": [
                    c.model_copy(update={"conditional": NA(reason=reason)}) for c in row.cells
                ]
            }
        )
        for row in balance.rows
    ]
    results = example_results(
        balance=balance.model_copy(
            update={"rows": rows, "conditioning": "nothing (no fixed effects in the model)"}
        )
    )
    section = _section(_render(results), BALANCE_ID)
    assert "Condi&shy;tional" not in section
    assert "Uncon&shy;ditional" in section
    text = _text(section)
    assert text.count(f"Conditional coefficients: n/a: {reason}.") == 2  # once per table
    assert "held fixed" not in text
    lottery = _tables(section, "balance")[0]
    assert len(_row(lottery, "age in years")) == 6  # label, two groups, two differences, one
    assert 'colspan="1" class="group-head">Coefficient on the instrument' in section


def test_coefficient_guide_says_what_was_regressed() -> None:
    several = wording.coefficient_guide("the district fixed effects", 2, True)
    assert "all the instruments together" in several
    assert "holds the other instruments fixed" in several
    assert "conditional: with the district fixed effects held fixed" in several
    one = wording.coefficient_guide("the district fixed effects", 1, False)
    assert "regressed on the instrument;" not in one
    assert "regressed on the instrument." in one
    assert "conditional" not in one


# --------------------------------------------------------------------------- joint, index, placebo


def test_joint_tests_with_readings_that_do_not_overclaim(page: str) -> None:
    section = _section(page, BALANCE_ID)
    rows = _tables(section, "balance-joint")[0]
    assert _row(rows, "voucher lottery win")[1:4] == [["0.410"], ["F, 3 and 60 df"], ["0.746"]]
    assert _row(rows, "distance to the nearest centre (km)")[3] == ["0.030"]
    text = _text(section)
    assert "No detectable joint relation between the covariates and voucher lottery win" in text
    assert "does not show that the instrument is as good as random" in text
    assert "The covariates together predict distance to the nearest centre (km)" in text
    assert wording.BALANCE_CAUTION in text
    assert wording.BALANCE_CAUTION == (
        "Balance on observed covariates is evidence, not proof: the instrument can still be "
        "related to unobserved causes of the outcome."
    )


def test_outcome_index_shows_coefficients_test_and_r_squared(page: str) -> None:
    section = _section(page, BALANCE_ID)
    rows = _tables(section, "outcome-index")[0]
    assert _row(rows, "distance to the nearest centre (km)")[1:] == [
        ["-0.160"],
        ["0.0700"],
        ["0.022"],
    ]
    text = _text(section)
    assert "predicted from the covariates alone (R-squared 0.410)" in text
    assert "Outcome index 2.74 F, 2 and 60 df 0.073" in text
    assert "No detectable relation between the instruments and the outcome index" in text
    reason = "the covariates predict none of the outcome"
    variant = _section(_render(_with_balance(outcome_index=NA(reason=reason))), BALANCE_ID)
    assert f"n/a: {reason}" in _text(variant)
    assert "outcome-index" not in variant


def test_placebo_reduced_form_and_2sls_read_as_should_be_zero(page: str) -> None:
    section = _section(page, BALANCE_ID)
    text = _text(section)
    rf = _tables(section, "placebo-reduced-form")[0]
    assert _row(rf, "voucher lottery win")[1:] == [["0.310"], ["0.620"], ["0.617"]]
    assert "Reduced form, should be zero: reading score in the year before the pilot" in text
    assert "(4,388 rows)" in text
    assert "Placebo reduced form 0.270 F, 2 and 60 df 0.764" in text
    tsls = _row(_tables(section, "placebo-tsls")[0], "tutoring hours per week")
    # 0.09 -/+ 1.96 x 0.21
    assert tsls[1:] == [["0.0900"], ["0.210"], ["[-0.322, 0.502]"], ["0.668"]]
    assert "No detectable effect of the instruments on reading score" in text
    assert "includes zero; its width shows how large a placebo effect the data could miss" in text
    assert wording.PLACEBO_CAUTION in text
    assert wording.PLACEBO_CAUTION == (
        "A placebo effect far from zero is evidence against the exclusion restriction or random "
        "assignment; one near zero is consistent with them but does not establish them."
    )


def test_placebo_variants_not_applicable_and_none() -> None:
    base = example_balance().placebo[0]
    reason = "2SLS needs a first stage on the placebo sample"
    section = _section(
        _render(_with_balance(placebo=[base.model_copy(update={"tsls": NA(reason=reason)})])),
        BALANCE_ID,
    )
    assert f"2SLS on this placebo outcome: n/a: {reason}" in _text(section)
    assert "placebo-tsls" not in section
    section = _section(_render(_with_balance(placebo=[])), BALANCE_ID)
    assert "No placebo outcome was given." in _text(section)
    assert wording.PLACEBO_CAUTION not in _text(section)


def test_placebo_readings_when_the_instruments_move_it() -> None:
    moved = wording.placebo_reading(_test(9.1, 0.0004), "reading score", 0.05)
    assert "shift reading score, which they should not (rejected at the 5% level)" in moved
    far = wording.placebo_tsls_reading(0.2, 0.9, "tutoring hours", "reading score", 0.95)
    assert "excludes zero" in far
    assert wording.placebo_tsls_reading(-0.2, 0.9, "t", "r", 0.95).count("includes zero") == 1


# --------------------------------------------------------------------------- at a glance


def test_glance_gives_the_smallest_joint_p_value_and_its_meaning(page: str) -> None:
    glance = _text(_section(page, "at-a-glance"))
    assert (
        "Balance of the instruments Smallest of 2 joint balance tests: p = 0.030, for distance "
        "to the nearest centre (km). The observed covariates predict this instrument at the 5% "
        "level" in glance
    )
    assert 'href="#as-good-as-random"' in _section(page, "at-a-glance")


def test_glance_wordings() -> None:
    calm = wording.balance_glance(
        [("lottery", _test(0.4, 0.75)), ("distance", _test(1.1, 0.35))], 0.05
    )
    assert calm.startswith("Smallest of 2 joint balance tests: p = 0.350, for distance.")
    assert "no instrument is detectably related" in calm
    assert "says nothing about unobserved ones" in calm
    one = wording.balance_glance(
        [("lottery", _test(0.4, 0.75)), ("distance", NA(reason="x"))], 0.05
    )
    assert one.startswith("Joint balance test of lottery: p = 0.750.")
    assert "No joint test applies to distance" in one
    none = wording.balance_glance([("lottery", NA(reason="too few rows"))], 0.05)
    assert none == "n/a: no joint balance test applies (lottery: too few rows)"
    assert wording.balance_glance([], 0.05) == "n/a: no joint balance test was computed"


# --------------------------------------------------------------------------- figure


def test_figure_is_deterministic_svg_as_data_uri_in_the_section(page: str) -> None:
    balance = example_balance()
    labels = example_results().model.labels
    first = balance_svg(balance, labels)
    assert first == balance_svg(balance, labels)
    assert first.startswith("<?xml")
    assert "<dc:date>" not in first
    figure = make_figures(example_results())[BALANCE_KEY]
    assert figure.svg == first
    assert figure.filename == "balance-std-differences.svg"
    prefix = "data:image/svg+xml;base64,"
    assert figure.data_uri.startswith(prefix)
    assert base64.b64decode(figure.data_uri[len(prefix) :]).decode("utf-8") == first
    assert f'<img src="{figure.data_uri}"' in _section(page, BALANCE_ID)


def test_figure_alt_text_and_caption_have_the_numbers_and_the_band() -> None:
    figure = balance_figure(example_balance(), example_results().model.labels)
    alt = figure.alt
    assert (
        "age in years: voucher lottery win 0.0319; distance to the nearest centre (km) 0.0851"
        in alt
    )
    assert "A band marks |d| <= 0.1, a common rule of thumb" in alt
    assert "outside it: previous year's maths score with distance" in alt
    assert "(-0.178)" in alt
    assert "rule of thumb" in figure.caption
    assert "it is not a test" in figure.caption


def test_figure_leaves_out_what_was_not_computed() -> None:
    results = _empty_last_group()
    assert isinstance(results.balance, rs.Balance)
    figure = balance_figure(results.balance, results.model.labels)
    assert "Not computed, so not drawn: eligible for free school meals with distance" in figure.alt
    assert "not drawn" in figure.caption
    assert figure.svg != balance_svg(example_balance(), results.model.labels)
    nothing = example_balance().model_copy(
        update={
            "rows": [
                row.model_copy(
                    update={
                        "cells": [c.model_copy(update={"std_difference": None}) for c in row.cells]
                    }
                )
                for row in example_balance().rows
            ]
        }
    )
    figures = make_figures(example_results(balance=nothing))
    assert BALANCE_KEY not in figures
    section = _section(render_html(example_results(balance=nothing), RUN, figures), BALANCE_ID)
    assert "Standardized differences</h3>" not in section


def test_missing_balance_figure_is_an_error() -> None:
    results = example_results()
    figures = {k: v for k, v in make_figures(results).items() if k != BALANCE_KEY}
    with pytest.raises(ValueError, match=BALANCE_KEY):
        render_html(results, RUN, figures)


# --------------------------------------------------------------------------- safety and layout


def test_text_in_covariate_labels_is_escaped() -> None:
    script = "<script>alert(1)</script>"
    image = '<img src=x onerror="alert(2)">'
    balance = example_balance()
    rows = [
        balance.rows[0].model_copy(update={"label": script}),
        balance.rows[1],
        balance.rows[2].model_copy(update={"label": image}),
    ]
    placebo = balance.placebo[0].model_copy(update={"label": script})
    results = _empty_last_group()
    assert isinstance(results.balance, rs.Balance)
    rows[2] = results.balance.rows[2].model_copy(update={"label": image})  # with dash notes
    variant = example_results(
        balance=balance.model_copy(
            update={"rows": rows, "placebo": [placebo], "conditioning": image}
        )
    )
    page = _render(variant)
    assert script not in page
    assert image not in page
    assert "<script" not in page.lower()
    section = _section(page, BALANCE_ID)
    assert escape(script, quote=True) in section
    assert "&lt;img src=x onerror=&#34;alert(2)&#34;&gt;, group x &gt; 5.90" in section
    attributes = _Attributes()
    attributes.feed(page)
    assert attributes.event_handlers == []
    assert make_figures(variant)[BALANCE_KEY].svg  # labels with markup still draw


@pytest.mark.parametrize(
    "variant",
    ["example", "not computed", "empty group", "no placebo"],
)
def test_tables_have_scoped_headers_and_wrappers(variant: str) -> None:
    results = {
        "example": example_results,
        "not computed": lambda: example_results(balance=NA(reason="none given")),
        "empty group": _empty_last_group,
        "no placebo": lambda: _with_balance(placebo=[], outcome_index=NA(reason="x")),
    }[variant]()
    page = _render(results)
    parser = _Tables()
    parser.feed(page)
    assert parser.th_without_scope == 0
    assert page.count("<table") == page.count('<div class="table-wrap">')


def test_print_css_keeps_balance_rows_whole(page: str) -> None:
    style = page[page.index("<style>") : page.index("</style>")]
    rule = re.search(r"table\.balance tr[^{]*\{([^}]*)\}", style)
    assert rule is not None
    assert "break-inside: avoid" in rule.group(1)


def test_strict_undefined_covers_the_balance_context() -> None:
    results = example_results()
    context = build_context(results, RUN, make_figures(results))
    for key in ("balance_view", "balance_glance", "balance_caution", "placebo_caution"):
        broken = {k: v for k, v in context.items() if k != key}
        with pytest.raises(jinja2.UndefinedError, match=key):
            environment().get_template(ENTRY_TEMPLATE).render(broken)
