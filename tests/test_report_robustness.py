"""Tests of the appendix section "How much does the answer move?".

The StudyResults come from ``results_example`` with ``robustness_example`` (illustrative
numbers for layout only), varied here to reach every branch: a variant that could not run,
values a variant does not provide, parts not computed, the whole section not computed, text
with markup, several endogenous regressors. These tests check what the appendix shows and
how, never whether a number is right (the variant computations are tested against outside
references in their own tests). The expected strings below are worked out by hand from the
example's numbers (the arithmetic is in the comments); intervals are normal, estimate -/+
1.959964 standard errors. The wordings are this project's own.
"""

from __future__ import annotations

import re
from functools import lru_cache
from html import escape
from html.parser import HTMLParser

import jinja2
import pytest
from results_example import CLUSTER_COV, LABELS, example_results, example_strength
from robustness_example import (
    MASTER_SEED,
    example_cluster_influence,
    example_robustness,
    example_sensitivity,
    example_wild_bootstrap,
    sensitivity_estimate,
    value,
)

from reportkit import results as rs
from reportkit.report import formatting as fm
from reportkit.report.figures import make_figures
from reportkit.report.html import (
    ENTRY_TEMPLATE,
    SECTIONS,
    RunInfo,
    build_context,
    environment,
    expected_figures,
    render_html,
)
from reportkit.report.robustness_figures import (
    BINARY_KEY,
    binary_panels,
    binary_rows,
    breakdown_edge,
    influence_key,
    robustness_figure_keys,
    robustness_figures,
    sensitivity_key,
    variants_key,
)
from reportkit.report.robustness_sections import (
    BINARY_CAUTION,
    SENSITIVITY_CAUTION,
    VARIANTS_CAUTION,
    YOUNG_CONTEXT,
    ComparisonRow,
    bootstrap_reading,
    breakdown_reading,
    comparison_reading,
    influence_reading,
)
from reportkit.seeds import derive_seed

RUN = RunInfo(
    reportkit_version="0.1.0", command="reportkit run analysis.yaml", generated_on="2024-06-01"
)
SECTION_ID = "robustness"
TITLE = "How much does the answer move?"
NA = rs.NotApplicable
DASH = "\N{EM DASH}"
ROBUSTNESS_KEYS = [
    "robustness-variants-1",
    BINARY_KEY,
    "robustness-cluster-influence-1",
    "robustness-exclusion-1",
]


# --------------------------------------------------------------------------- helpers


def _results(**changes: object) -> rs.StudyResults:
    """The example with the robustness part changed (``robustness`` itself, or its fields)."""
    if "robustness" in changes:
        return example_results(robustness=changes["robustness"])
    return example_results(robustness=example_robustness().model_copy(update=changes))


@lru_cache(maxsize=1)
def _other_figures() -> dict:
    """The figures of the other sections, which the variations here leave unchanged."""
    return {
        key: fig
        for key, fig in make_figures(_results()).items()
        if not key.startswith("robustness")
    }


def _figures(results: rs.StudyResults) -> dict:
    return {**_other_figures(), **robustness_figures(results)}


def _render(results: rs.StudyResults) -> str:
    return render_html(results, RUN, _figures(results))


def _section(page: str, section_id: str = SECTION_ID) -> str:
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
    """Every table's class and body rows; each cell as its text parts (span lines kept apart).

    Also counts header cells without a scope and collects image alt texts and event-handler
    attributes.
    """

    def __init__(self) -> None:
        super().__init__()
        self.tables: list[tuple[str, list[list[list[str]]]]] = []
        self._in_body = False
        self._row: list[list[str]] | None = None
        self._cell: list[str] | None = None
        self.th_without_scope = 0
        self.alts: list[str] = []
        self.event_handlers: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        found = dict(attrs)
        self.event_handlers += [name for name, _ in attrs if name.startswith("on")]
        if tag == "img":
            self.alts.append(found.get("alt") or "")
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


def _parse(fragment: str) -> _Tables:
    parser = _Tables()
    parser.feed(fragment)
    return parser


def _tables(fragment: str, css_class: str) -> list[list[list[list[str]]]]:
    return [rows for cls, rows in _parse(fragment).tables if css_class in cls.split()]


def _row(rows: list[list[list[str]]], title_start: str) -> list[list[str]]:
    matches = [row for row in rows if row[0] and row[0][0].startswith(title_start)]
    assert len(matches) == 1, f"{len(matches)} rows start with {title_start!r}"
    return matches[0]


def _replace_variant(key: str, **changes: object) -> list[rs.Variant]:
    variants = example_robustness().variants
    assert any(v.key == key for v in variants), key
    return [v.model_copy(update=changes) if v.key == key else v for v in variants]


@pytest.fixture(scope="module")
def results() -> rs.StudyResults:
    return _results()


@pytest.fixture(scope="module")
def figures(results: rs.StudyResults) -> dict:
    return make_figures(results)


@pytest.fixture(scope="module")
def page(results: rs.StudyResults, figures: dict) -> str:
    return render_html(results, RUN, figures)


@pytest.fixture(scope="module")
def section(page: str) -> str:
    return _section(page)


# --------------------------------------------------------------------------- place


def test_section_title_place_and_contents(page: str) -> None:
    ids = [s.id for s in SECTIONS]
    assert {s.id: s.title for s in SECTIONS}[SECTION_ID] == TITLE
    assert ids.index(SECTION_ID) == ids.index("specification-tests") + 1
    assert ids.index("cannot-tell") == ids.index(SECTION_ID) + 1
    assert page.count(f'<section id="{SECTION_ID}"') == 1
    heading = re.search(rf'<h2 id="{SECTION_ID}-heading">(.*?)</h2>', page)
    assert heading is not None
    assert TITLE in heading.group(1)
    contents = page[page.index('<nav id="contents"') : page.index("</nav>")]
    assert (SECTION_ID, TITLE) in re.findall(r'<a href="#([^"]+)">([^<]*)</a>', contents)


def test_subsections_in_order(section: str) -> None:
    headings = re.findall(r"<h3>([^<]*)</h3>", section)
    assert headings == [
        "The estimate under each variant",
        "Models for a binary outcome",
        "Leaving out one cluster at a time",
        "Wild bootstrap p-value",
        "Sensitivity to violations of the exclusion restriction",
    ]
    assert "<h4>" not in section  # one endogenous regressor: no per-regressor headings


# --------------------------------------------------------------------------- comparison


def test_main_row_first_then_groups_in_order(section: str) -> None:
    rows = _tables(section, "robustness-comparison")[0]
    # 1.64 -/+ 1.96 x 0.41 = [0.836, 2.44]
    assert rows[0] == [
        ["Main estimate (2SLS)"],
        ["1.64"],
        ["0.410"],
        ["[0.836, 2.44]"],
        ["4,624"],
        ["as in the main specification"],
        ["reference"],
    ]
    groups = [row[0][0] for row in rows if len(row) == 1]
    assert groups == [
        "Other estimators",
        "Other instrument sets",
        "Other standard errors",
        "Other samples",
        "Other control sets",
    ]
    assert "Control-function probit" not in _text(
        section[section.index("robustness-comparison") : section.index("robustness-binary")]
    )


def test_every_variant_appears_with_its_numbers(section: str) -> None:
    rows = _tables(section, "robustness-comparison")[0]
    robustness = example_robustness()
    main = robustness.main[0]
    compared = [v for v in robustness.variants if v.group != "binary"]
    assert len(rows) == 1 + len(compared) + 5  # main, variants, five group headings
    for variant in compared:
        assert not isinstance(variant.values, NA)
        item = variant.values[0]
        assert item.std_error is not None and main.std_error is not None
        assert item.ci_lower is not None and item.ci_upper is not None
        assert variant.n_obs is not None
        difference = item.estimate - main.estimate
        row = _row(rows, variant.name)
        assert row[1:] == [
            [fm.fmt_num(item.estimate)],
            [fm.fmt_num(item.std_error)],
            [fm.fmt_ci(item.ci_lower, item.ci_upper)],
            [fm.fmt_int(variant.n_obs)],
            [variant.estimand],
            [fm.fmt_num(difference), f"{fm.fmt_num(difference / main.std_error, 2)} main SE"],
        ]
        assert variant.description in row[0]


def test_numbers_worked_out_by_hand(section: str) -> None:
    rows = _tables(section, "robustness-comparison")[0]
    # LIML 1.71 (0.44): 1.71 -/+ 0.862 = [0.848, 2.57]; 1.71 - 1.64 = 0.07 = 0.17 x 0.41
    assert _row(rows, "LIML")[1:4] == [["1.71"], ["0.440"], ["[0.848, 2.57]"]]
    assert _row(rows, "LIML")[6] == ["0.0700", "0.17 main SE"]
    # distance alone 2.10: 2.10 - 1.64 = 0.46 = 1.12 x 0.41
    assert _row(rows, "Distance to the nearest centre alone")[6] == ["0.460", "1.1 main SE"]
    # a subsample has its own row count
    assert _row(rows, "Schools that joined in the second year")[4] == ["3,980"]
    # other standard errors: the covariance is named under the variant's name
    district = _row(rows, "Clustered by district")
    assert "standard errors: cluster-robust, by district (12 clusters)" in district[0]
    assert district[6] == ["0", "0 main SE"]
    assert not any(part.startswith("standard errors:") for part in _row(rows, "LIML")[0])


def test_reading_of_the_comparison_does_not_overclaim(section: str) -> None:
    text = _text(section)
    assert (
        "Across the 13 variants with an estimate, the estimate of the effect of tutoring hours "
        "per week ranges from 1.52 (Schools that joined in the second year) to 2.10 (Distance "
        "to the nearest centre alone); the main 2SLS estimate is 1.64." in text
    )
    assert "All have the same sign as the main estimate." in text
    assert "Of the variants' 95% intervals, 13 of 13 exclude zero; the main interval" in text
    assert VARIANTS_CAUTION in text
    assert "they do not show that the instruments are valid" in VARIANTS_CAUTION
    assert "not tests" in VARIANTS_CAUTION
    assert "its own compliers" in text  # instrument sets may differ with valid instruments


def test_comparison_reading_branches() -> None:
    def row(name: str, estimate: float | None, lower: float | None = None) -> ComparisonRow:
        upper = None if lower is None else lower + 1.0
        return ComparisonRow(
            name, "", None, "", None, None if estimate is not None else "failed",
            estimate, None, lower, upper, None, None, None,
        )  # fmt: skip

    main = row("main", 1.0, 0.5)
    mixed = comparison_reading(
        "x", main, [row("a", -0.2, -0.7), row("b", 0.8), row("c", None)], 0.9
    )
    assert "ranges from -0.200 (a) to 0.800 (b)" in mixed
    assert "1 of them has the opposite sign: a." in mixed
    assert (
        "Of the variants' 90% intervals, 0 of 1 exclude zero; the main interval excludes" in mixed
    )
    assert "1 could not run (reasons in the table)." in mixed
    assert (
        comparison_reading("x", main, [], 0.95) == "No variant of the estimate of x was computed."
    )
    assert "None of the 1 variants" in comparison_reading("x", main, [row("c", None)], 0.95)


def test_a_variant_that_could_not_run_shows_its_reason() -> None:
    reason = "the voucher lottery win is constant in these rows, so the model is not identified"
    results = _results(
        variants=_replace_variant("sample:later_schools", values=NA(reason=reason), n_obs=None)
    )
    section = _section(_render(results))
    rows = _tables(section, "robustness-comparison")[0]
    assert _row(rows, "Schools that joined in the second year")[1:] == [[f"n/a: {reason}"]]
    text = _text(section)
    assert "Across the 12 variants with an estimate" in text
    assert "1 could not run (reasons in the table)." in text
    assert "Not drawn (no estimate): Schools that joined in the second year." in section  # alt
    assert "Variants without an estimate are not drawn (see the table)." in text


def test_values_a_variant_does_not_provide_are_dashes_with_a_note() -> None:
    jive = value(1.78, None)  # no standard error, hence no interval
    results = _results(variants=_replace_variant("estimator:jive", values=[jive], n_obs=None))
    section = _section(_render(results))
    rows = _tables(section, "robustness-comparison")[0]
    assert _row(rows, "JIVE")[1:5] == [["1.78"], [DASH], [DASH], [DASH]]
    assert _row(rows, "JIVE")[6] == ["0.140", "0.34 main SE"]  # 1.78 - 1.64 = 0.14 = 0.34 SE
    text = _text(section)
    assert "A dash marks a value the variant does not provide." in text
    assert "A dot without a line has no interval." in text
    # the example itself has no dash, hence no such note
    assert "A dash marks" not in _text(_section(_render(_results())))


def test_a_variant_without_the_regressor_is_an_error() -> None:
    odd = _replace_variant("estimator:gmm", values=[value(1.6, 0.39, "homework_hours")])
    with pytest.raises(ValueError, match=r"estimator:gmm.*tutoring_hours"):
        robustness_figures(_results(variants=odd))


# --------------------------------------------------------------------------- binary outcome


def test_binary_models_have_their_own_table_and_caution(section: str) -> None:
    rows = _tables(section, "robustness-binary")[0]
    # 0.031 -/+ 1.96 x 0.009 = [0.0134, 0.0486]; no difference column (other quantities)
    assert _row(rows, "Control-function probit")[1:] == [
        ["0.0310"],
        ["0.00900"],
        ["[0.0134, 0.0486]"],
        ["4,624"],
        ["average partial effect of an hour on the probability of passing the end-of-year "
         "maths test"],
    ]  # fmt: skip
    assert _row(rows, "Bivariate probit")[1:] == [
        ["n/a: needs a binary treatment; tutoring hours per week takes many values"]
    ]
    assert _row(rows, "Linear 2SLS on the binary outcome")[5] == [
        "local effect of an hour on the probability of passing the end-of-year maths test, "
        "for compliers"
    ]
    text = _text(section)
    assert BINARY_CAUTION in text
    assert "not by themselves evidence against either" in BINARY_CAUTION
    assert "local effect for the compliers" in BINARY_CAUTION
    assert "No difference from the main estimate is shown" in text


def test_binary_values_with_several_quantities_name_each() -> None:
    both = [value(0.031, 0.009, "average partial effect"), value(0.052, 0.02, "hours_effect")]
    variants = _replace_variant("binary:control_function_probit", values=both)
    section = _section(_render(_results(variants=variants)))
    rows = _tables(section, "robustness-binary")[0]
    names = [row[0][:2] for row in rows if row[0][0] == "Control-function probit"]
    assert names == [
        ["Control-function probit", "average partial effect"],
        ["Control-function probit", "hours_effect"],
    ]


def test_without_binary_models_there_is_no_binary_part() -> None:
    variants = [v for v in example_robustness().variants if v.group != "binary"]
    results = _results(variants=variants)
    assert BINARY_KEY not in robustness_figures(results)
    section = _section(_render(results))
    assert "Models for a binary outcome" not in section
    assert BINARY_CAUTION not in _text(section)


def test_binary_figure_has_one_panel_per_estimand(figures: dict) -> None:
    panels = binary_panels(binary_rows(example_robustness()))
    assert [[r.label for r in rows] for _, rows in panels] == [
        ["Control-function probit", "2SRI probit", "2SRI logit"],
        ["Linear 2SLS on the binary outcome"],
    ]
    alt = figures[BINARY_KEY].alt
    assert (
        "Average partial effect of an hour on the probability of passing the end-of-year maths "
        "test: Control-function probit 0.0310 [0.0134, 0.0486]; 2SRI probit" in alt
    )
    # 0.034 -/+ 1.96 x 0.011 = [0.0124, 0.0556]
    assert "for compliers: Linear 2SLS on the binary outcome 0.0340 [0.0124, 0.0556]." in alt
    assert "one panel with its own axis for each estimand" in figures[BINARY_KEY].caption


# --------------------------------------------------------------------------- clusters


def test_leave_one_cluster_out_table_and_reading(section: str) -> None:
    rows = _tables(section, "cluster-influence")[0]
    assert [row[0][0] for row in rows] == ["D07", "D10", "D03", "D09", "D06"]  # largest |shift|
    # D07: 0.98 - 1.64 = -0.66; 0.98 / 0.52 = 1.88 < 1.96, so the interval includes zero
    assert rows[0][1:] == [["512"], ["0.980"], ["-0.660"], ["0.520"], ["no"]]
    text = _text(section)
    assert "Range without one cluster 0.980 to 1.93" in text
    assert "Removals that change whether the interval excludes zero 1 of 12" in text
    assert YOUNG_CONTEXT in text
    assert YOUNG_CONTEXT.startswith("Young (2022)")
    # -0.66 / 0.41 = 1.61 main standard errors
    assert "The largest shift comes from leaving out D07: -0.660, 1.61 times the main" in text
    assert "that conclusion hinges on a single cluster here" in text


def test_influence_reading_branches() -> None:
    influence = example_cluster_influence()
    calm = influence.model_copy(update={"significance_changes": 0})
    assert "No single removal changes" in influence_reading(calm, 1.64, 0.41)
    many = influence.model_copy(update={"significance_changes": 3})
    assert "Removing any one of 3 clusters changes" in influence_reading(many, 1.64, None)
    assert "times the main standard error" not in influence_reading(many, 1.64, None)


# --------------------------------------------------------------------------- bootstrap


def test_wild_bootstrap_beside_the_conventional_p_value(section: str) -> None:
    rows = _tables(section, "wild-bootstrap")[0]
    seed = derive_seed(MASTER_SEED, "wild-bootstrap:tutoring_hours")
    # t = 1.64 / 0.41 = 4.00; conventional p = 2 x (1 - Phi(4)) = 6.3e-5; bootstrap 2/999
    assert rows[0][:4] == [
        ["tutoring hours per week"],
        ["4.00"],
        ["< 0.001", CLUSTER_COV],
        ["0.002"],
    ]
    assert rows[0][4] == [
        "999 draws; Rademacher weights (+1 or -1, each with probability one half); weights "
        f"drawn per cluster (61 clusters); seed {seed}",
        "method: Davidson & MacKinnon 2010",
    ]
    text = _text(section)
    assert "Cameron, Gelbach & Miller 2008" in text
    assert "Davidson & MacKinnon 2010" in text
    assert (
        "With 61 clusters, the wild bootstrap p-value is 0.002, the conventional one < 0.001"
        in text
    )
    assert "both reject a zero effect at the 5% level" in text


def test_bootstrap_readings_when_they_disagree_or_stand_alone() -> None:
    result = example_wild_bootstrap().model_copy(update={"p_value": 0.081, "clusters": 9})
    text = bootstrap_reading(result, 0.032, 0.05)
    assert text.startswith("With 9 clusters, the wild bootstrap p-value is 0.081")
    assert "they disagree at the 5% level (only the conventional test rejects" in text
    assert "the bootstrap is the more reliable of the two" in text
    alone = bootstrap_reading(result.model_copy(update={"level": "observation"}), None, 0.05)
    assert alone.startswith("Resampling single observations")
    assert alone.endswith("it does not reject a zero effect at the 5% level.")


# --------------------------------------------------------------------------- sensitivity


def test_exclusion_sensitivity_tables_and_readings(section: str) -> None:
    ranges = _tables(section, "exclusion-ranges")[0]
    # breakdown: (1.64 - 1.96 x 0.41) / 0.40 = 2.09
    assert ranges[0] == [["voucher lottery win"], ["[0, 1.00]"], ["0.500"], ["0.250"], ["2.09"]]
    intervals = _tables(section, "exclusion-intervals")[0]
    # union: [1.64 - 0.40 - 0.804, 1.64 + 0.804]; local to zero: 1.64 - 0.40 x 0.5 = 1.44,
    # se sqrt(0.41^2 + (0.40 x 0.25)^2) = 0.422, so [0.613, 2.27]
    assert intervals == [
        [["No direct effect (main 2SLS)"], ["1.64"], ["[0.836, 2.44]"], ["no"]],
        [["Union over the allowed ranges"], ["no single estimate"], ["[0.436, 2.44]"], ["no"]],
        [["Local to zero (normal prior on the direct effects)"], ["1.44"], ["[0.613, 2.27]"],
         ["no"]],
    ]  # fmt: skip
    text = _text(section)
    assert "the union of the 95% intervals is [0.436, 2.44], which excludes zero" in text
    assert "a direct effect of 2.09 in absolute value" in text
    assert "the allowed range stays below that size (at most 1.00)" in text
    assert SENSITIVITY_CAUTION in text
    assert "a judgement the data cannot make" in SENSITIVITY_CAUTION
    assert "Conley, Hansen & Rossi 2012" in text


def test_breakdown_readings() -> None:
    entry = example_sensitivity().ranges[0]
    inside = breakdown_reading(entry.model_copy(update={"breakdown": 0.8}), "maths score")
    assert "the allowed range reaches that size (at most 1.00)" in inside
    never = breakdown_reading(entry.model_copy(update={"breakdown": None}), "maths score")
    assert "excludes zero for every direct effect of this instrument alone up to 100" in never
    zero = breakdown_reading(entry.model_copy(update={"breakdown": 0.0}), "maths score")
    assert "includes zero even without any direct effect" in zero
    section = _section(
        _render(
            _results(
                sensitivity=[
                    example_sensitivity().model_copy(
                        update={"ranges": [entry.model_copy(update={"breakdown": None})]}
                    )
                ]
            )
        )
    )
    assert _tables(section, "exclusion-ranges")[0][0][4] == [
        "not reached within 100 times the range's largest bound"
    ]


def test_breakdown_is_marked_on_the_side_where_the_interval_reaches_zero() -> None:
    half = 1.959964 * 0.41
    points = [
        rs.SensitivityPoint(
            instrument="voucher_won",
            gamma=g / 4,
            estimate=sensitivity_estimate(g / 4),
            ci_lower=sensitivity_estimate(g / 4) - half,
            ci_upper=sensitivity_estimate(g / 4) + half,
        )
        for g in range(-12, 13)
    ]
    # the estimate falls with gamma, so its interval reaches zero at +2.09, not at -2.09
    assert breakdown_edge(points, 2.09) == 2.09
    assert breakdown_edge(points, 3.5) is None  # outside the range drawn
    assert breakdown_edge(points, None) is None
    # the example's curve stops at a direct effect of 1, below the breakdown value 2.09
    assert breakdown_edge(example_sensitivity().curve, 2.09) is None


def test_a_single_allowed_value_has_no_panel() -> None:
    entry = example_sensitivity().ranges[0].model_copy(update={"lower": 0.5, "upper": 0.5})
    sensitivity = example_sensitivity().model_copy(update={"ranges": [entry]})
    results = _results(sensitivity=[sensitivity])
    assert sensitivity_key(0) not in robustness_figure_keys(results)
    section = _section(_render(results))
    assert "[0.500, 0.500]" in _text(section)


# --------------------------------------------------------------------------- not computed


def test_section_not_computed_is_one_line() -> None:
    reason = "no robustness variant was requested in the specification"
    results = _results(robustness=NA(reason=reason))
    figures = make_figures(results)
    assert not [key for key in figures if key.startswith("robustness")]
    section = _section(render_html(results, RUN, figures))
    body = section[section.index("</h2>") + len("</h2>") :].strip()
    assert body.count("<p") == 1
    assert "<h3" not in body and "<table" not in body and "<img" not in body
    assert _text(body) == "Not reported: No robustness variant was requested in the specification."


def test_parts_not_computed_show_their_reasons() -> None:
    results = _results(
        cluster_influence=NA(reason="the main covariance is not clustered"),
        wild_bootstrap=NA(reason="turned off in the specification"),
        sensitivity=NA(reason="no direct effects were given"),
    )
    assert robustness_figure_keys(results) == ["robustness-variants-1", BINARY_KEY]
    section = _section(_render(results))
    text = _text(section)
    assert "Leaving out one cluster at a time Not computed: the main covariance is not" in text
    assert "Wild bootstrap p-value Not computed: turned off in the specification" in text
    assert "restriction Not computed: no direct effects were given" in text
    assert "cluster-influence" not in section and "wild-bootstrap" not in section
    assert SENSITIVITY_CAUTION not in text


# --------------------------------------------------------------------------- figures


def test_figure_keys_are_expected_and_placed(
    results: rs.StudyResults, figures: dict, section: str
) -> None:
    assert robustness_figure_keys(results) == ROBUSTNESS_KEYS
    assert [k for k in expected_figures(results) if k.startswith("robustness")] == ROBUSTNESS_KEYS
    assert [variants_key(0), influence_key(0), sensitivity_key(0)] == [
        ROBUSTNESS_KEYS[0],
        ROBUSTNESS_KEYS[2],
        ROBUSTNESS_KEYS[3],
    ]
    for key in ROBUSTNESS_KEYS:
        assert figures[key].filename == f"{key}.svg"
        assert f'<img src="{figures[key].data_uri}"' in section
    without = {k: v for k, v in figures.items() if k != "robustness-exclusion-1"}
    with pytest.raises(ValueError, match="robustness-exclusion-1"):
        render_html(results, RUN, without)


def test_svgs_are_deterministic(results: rs.StudyResults, figures: dict) -> None:
    again = robustness_figures(results)
    for key in ROBUSTNESS_KEYS:
        svg = figures[key].svg
        assert svg.startswith("<?xml")
        assert "<dc:date>" not in svg
        assert again[key].svg == svg, key
    assert len({figures[key].svg for key in ROBUSTNESS_KEYS}) == len(ROBUSTNESS_KEYS)


def test_alt_texts_summarise_the_estimates(figures: dict, section: str) -> None:
    variants = figures["robustness-variants-1"].alt
    assert "under 13 variants, with 95% intervals" in variants
    assert "from 1.52 (Schools that joined in the second year) to 2.10 (Distance" in variants
    assert "the main 2SLS estimate is 1.64 [0.836, 2.44]" in variants
    assert "Of the variants' intervals, 13 of 13 exclude zero." in variants
    binary = figures[BINARY_KEY].alt
    assert "2SRI probit 0.0300 [0.0104, 0.0496]" in binary  # 0.030 -/+ 1.96 x 0.010
    assert "Not drawn (no estimate): Bivariate probit." in binary
    influence = figures["robustness-cluster-influence-1"].alt
    assert "from 0.980 to 1.93, against 1.64 in the full sample" in influence
    assert "1 of the removals change whether the interval excludes zero" in influence
    exclusion = figures["robustness-exclusion-1"].alt
    # at a direct effect of 1: 1.64 - 0.40 = 1.24, [0.436, 2.04]
    assert "from 1.64 [0.836, 2.44] to 1.24 [0.436, 2.04]" in exclusion
    assert "The interval excludes zero throughout the ranges drawn." in exclusion
    alts = _parse(section).alts
    assert len(alts) == len(ROBUSTNESS_KEYS)
    assert all(alt.strip() for alt in alts)


# --------------------------------------------------------------------------- safety, layout


def test_text_from_the_spec_is_escaped() -> None:
    script = "<script>alert(1)</script>"
    image = '<img src=x onerror="alert(2)">'
    variants = _replace_variant("controls:reading", name=script, description=image)
    variants = [
        v.model_copy(update={"values": NA(reason=image)}) if v.key == "sample:trim_0.01" else v
        for v in variants
    ]
    influence = example_cluster_influence()
    drops = [influence.drops[0].model_copy(update={"cluster": script}), *influence.drops[1:]]
    results = _results(
        variants=variants,
        cluster_influence=[influence.model_copy(update={"drops": drops})],
    )
    figures = _figures(results)
    page = render_html(results, RUN, figures)
    assert script not in page
    assert image not in page
    assert "<script" not in page.lower()
    section = _section(page)
    assert escape(script, quote=True) in section
    assert "n/a: &lt;img src=x onerror=&#34;alert(2)&#34;&gt;" in section
    assert _parse(page).event_handlers == []
    assert figures["robustness-variants-1"].svg  # markup in names still draws
    assert script in figures["robustness-cluster-influence-1"].alt  # escaped by the template


def _two_endogenous() -> rs.StudyResults:
    """The example with a second endogenous regressor (homework hours) in every part."""
    base = example_results()
    labels = dict(LABELS, homework_hours="homework hours per week")
    homework = rs.Coefficient(
        name="homework_hours",
        label="homework hours per week",
        estimate=0.5,
        std_error=0.25,
        statistic=2.0,
        p_value=0.0455,
        ci_lower=0.01,
        ci_upper=0.99,
    )
    estimates = [
        e.model_copy(update={"coefficients": [*e.coefficients, homework]}) for e in base.estimates
    ]
    fs = base.first_stages[0]
    second_fs = fs.model_copy(
        update={"endogenous": "homework_hours", "label": "homework hours per week", "binned": []}
    )
    per = example_strength().per_endogenous[0]
    robustness = example_robustness()
    variants = []
    for i, v in enumerate(robustness.variants):
        if v.group != "binary" and not isinstance(v.values, NA):
            v = v.model_copy(
                update={"values": [*v.values, value(0.5 + 0.01 * i, 0.25, "homework_hours")]}
            )
        variants.append(v)
    influence = example_cluster_influence()
    sensitivity = example_sensitivity()
    return example_results(
        model=base.model.model_copy(
            update={
                "endogenous": ["tutoring_hours", "homework_hours"],
                "labels": labels,
                "n_endogenous": 2,
                "overidentification_degree": 0,
            }
        ),
        estimates=estimates,
        first_stages=[fs, second_fs],
        ols_2sls_ratio=[1.78, None],
        strength=example_strength().model_copy(
            update={
                "per_endogenous": [
                    per,
                    per.model_copy(
                        update={"endogenous": "homework_hours", "label": "homework hours per week"}
                    ),
                ]
            }
        ),
        weak_iv=NA(reason="computed for a single endogenous regressor; this model has two"),
        robustness=robustness.model_copy(
            update={
                "main": [*robustness.main, value(0.5, 0.25, "homework_hours")],
                "variants": variants,
                "cluster_influence": [
                    influence,
                    influence.model_copy(
                        update={"endogenous": "homework_hours", "label": "homework hours per week"}
                    ),
                ],
                "sensitivity": [
                    sensitivity,
                    sensitivity.model_copy(
                        update={"endogenous": "homework_hours", "label": "homework hours per week"}
                    ),
                ],
            }
        ),
    )


def test_several_endogenous_regressors_get_one_block_each() -> None:
    results = _two_endogenous()
    keys = robustness_figure_keys(results)
    assert keys == [
        "robustness-variants-1",
        "robustness-variants-2",
        BINARY_KEY,
        "robustness-cluster-influence-1",
        "robustness-cluster-influence-2",
        "robustness-exclusion-1",
        "robustness-exclusion-2",
    ]
    figures = make_figures(results)
    section = _section(render_html(results, RUN, figures))
    assert re.findall(r"<h4>([^<]*)</h4>", section) == [
        "Tutoring hours per week",
        "Homework hours per week",
        "Tutoring hours per week",
        "Homework hours per week",
    ]
    tutoring, homework = _tables(section, "robustness-comparison")
    assert _row(tutoring, "Main estimate")[1:3] == [["1.64"], ["0.410"]]
    # homework: main 0.5 (0.25), interval 0.5 -/+ 0.49 = [0.0100, 0.990]
    assert _row(homework, "Main estimate")[1:4] == [["0.500"], ["0.250"], ["[0.0100, 0.990]"]]
    # LIML is the first variant (i = 0): 0.50, difference 0, 0 main SE
    assert _row(homework, "LIML")[1] == ["0.500"]
    assert _row(homework, "LIML")[6] == ["0", "0 main SE"]
    # GMM is the fourth (i = 3): 0.53 - 0.50 = 0.03 = 0.12 x 0.25
    assert _row(homework, "GMM")[6] == ["0.0300", "0.12 main SE"]
    assert _row(tutoring, "GMM")[1] == ["1.60"]
    assert "the effect of homework hours per week ranges from 0.500 (LIML)" in _text(section)
    assert "homework hours per week" in figures["robustness-variants-2"].alt
    assert len(_tables(section, "robustness-binary")) == 1  # binary models once, not per block


@pytest.mark.parametrize("variant", ["example", "parts not computed", "not computed"])
def test_tables_have_scoped_headers_and_wrappers(variant: str, page: str) -> None:
    if variant == "parts not computed":
        page = _render(_results(cluster_influence=NA(reason="x"), wild_bootstrap=NA(reason="y")))
    elif variant == "not computed":
        page = _render(_results(robustness=NA(reason="z")))
    assert _parse(page).th_without_scope == 0
    assert page.count("<table") == page.count('<div class="table-wrap">')


def test_print_css_keeps_variant_rows_whole(page: str) -> None:
    style = page[page.index("<style>") : page.index("</style>")]
    rule = re.search(r"table\.robustness-comparison tr,[^{]*\{([^}]*)\}", style)
    assert rule is not None
    assert "break-inside: avoid" in rule.group(1)


def test_strict_undefined_covers_the_robustness_context(
    results: rs.StudyResults, figures: dict
) -> None:
    context = build_context(results, RUN, figures)
    broken = {k: v for k, v in context.items() if k != "robustness_view"}
    with pytest.raises(jinja2.UndefinedError, match="robustness_view"):
        environment().get_template(ENTRY_TEMPLATE).render(broken)
