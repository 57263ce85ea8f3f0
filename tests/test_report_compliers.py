"""Tests of the falsification subsamples and the complier analysis in the appendix.

The results come from ``results_example`` and ``compliers_example`` (illustrative numbers
for layout only), varied here to reach every branch: a subsample whose first stage is not
zero, one whose reduced form moves, one that could not be estimated, a complier analysis
that does not apply, a LATE implication with a negative bin. These tests check what the
appendix shows and how, never whether a number is right: the computations are tested
against outside references in their own tests. The readings are this project's own
wordings; which assumptions a complier analysis rests on follows the textbook account
(Imbens & Angrist 1994; Kitagawa 2015 for the testable implication, from memory).
"""

from __future__ import annotations

import re
from functools import cache
from html import escape

import jinja2
import pytest
from compliers_example import (
    count_negative_bins,
    example_compliers,
    example_falsification,
    kitagawa_test,
)
from markupsafe import escape as html_escape
from results_example import example_balance, example_results
from test_report_balance import _Attributes, _row, _section, _Tables, _tables, _text

from reportkit import disclosures as ds
from reportkit import results as rs
from reportkit.report.balance_sections import (
    COMPLIERS_ID,
    FALSIFICATION_CAUTION,
    FALSIFICATION_ID,
    LATE_IMPLICATION_CAUTION,
    SUBSECTION_TITLES,
    falsification_readings,
    late_implication_reading,
)
from reportkit.report.complier_figures import (
    COMPLIER_MASSES_KEY,
    complier_figure,
    complier_masses_figure,
    complier_masses_svg,
)
from reportkit.report.figures import FigureImage, make_figures
from reportkit.report.html import (
    ENTRY_TEMPLATE,
    RunInfo,
    build_context,
    environment,
    expected_figures,
    render_html,
)

RUN = RunInfo(
    reportkit_version="0.1.0", command="reportkit run analysis.yaml", generated_on="2024-06-01"
)
BALANCE_ID = "as-good-as-random"
NA = rs.NotApplicable
DASH = "\N{EM DASH}"


def _results(**changes: object) -> rs.StudyResults:
    """The example with falsification subsamples and compliers, then ``changes`` to balance."""
    update: dict[str, object] = {
        "falsification": example_falsification(),
        "compliers": example_compliers(),
    }
    update.update(changes)
    return example_results(balance=example_balance().model_copy(update=update))


@cache
def _figures() -> dict[str, FigureImage]:
    """Every figure of the full example, drawn once. Variants are rendered with these too
    (a superset of the keys any variant needs): the tests of a variant's text do not look at
    its figures, and drawing them all for each variant would make this file slow."""
    return make_figures(_results())


def _render(results: rs.StudyResults) -> str:
    return render_html(results, RUN, _figures())


def _subsection(page: str, anchor: str) -> str:
    """The balance section from the subsection's heading to the next h3 (or the end)."""
    section = _section(page, BALANCE_ID)
    start = section.index(f'<h3 id="{anchor}">')
    end = section.find("<h3", start + 1)
    return section[start : end if end > 0 else len(section)]


def _block(fragment: str, name: str) -> str:
    """One falsification subsample: from its h4 heading to the next h4 (or the end)."""
    start = fragment.index(f"<h4>{name}</h4>")
    end = fragment.find("<h4>", start + 1)
    return fragment[start : end if end > 0 else len(fragment)]


def _with_implication(**changes: object) -> rs.ComplierAnalysis:
    compliers = example_compliers()
    assert isinstance(compliers.late_implication, rs.LateImplication)
    return compliers.model_copy(
        update={"late_implication": compliers.late_implication.model_copy(update=changes)}
    )


def _negative_bins() -> list[rs.DensityBin]:
    """The example's bins with the untreated mass of the second bin (35 to 40) below zero."""
    bins = list(example_compliers().late_implication.bins)  # type: ignore[union-attr]
    bins[1] = bins[1].model_copy(
        update={"untreated": -0.02, "untreated_low": -0.03, "untreated_high": -0.008}
    )
    return bins


def _rejecting() -> rs.ComplierAnalysis:
    bins = _negative_bins()
    return _with_implication(
        bins=bins, negative_bins=count_negative_bins(bins), test=kitagawa_test(4.1, 0.012)
    )


@pytest.fixture(scope="module")
def page() -> str:
    return _render(_results())


# --------------------------------------------------------------------------- falsification


def test_falsification_subsection_follows_the_placebo_outcomes(page: str) -> None:
    section = _section(page, BALANCE_ID)
    headings = re.findall(r"<h3[^>]*>([^<]*)</h3>", section)
    assert headings[-2:] == [SUBSECTION_TITLES[FALSIFICATION_ID], SUBSECTION_TITLES[COMPLIERS_ID]]
    assert section.index("Placebo outcomes") < section.index(f'id="{FALSIFICATION_ID}"')
    assert page.count(f'id="{FALSIFICATION_ID}"') == 1
    assert page.count(f'id="{COMPLIERS_ID}"') == 1


def test_falsification_subsample_shows_name_rows_n_and_both_regressions(page: str) -> None:
    fragment = _subsection(page, FALSIFICATION_ID)
    late = _block(fragment, "Late applicants")
    text = _text(late)
    assert "Pupils who applied after every tutoring place was taken" in text
    assert "keep application_week greater than 6" in text
    assert "Rows used 587" in text
    assert "Covariance cluster-robust, by school (61 clusters)" in text
    first = _tables(late, "falsification-first-stage")[0]
    # 0.06 / 0.19 and -0.012 / 0.031: normal p-values 0.752 and 0.699
    assert _row(first, "voucher lottery win")[1:] == [["0.0600"], ["0.190"], ["0.752"]]
    assert _row(first, "distance to the nearest centre")[1:] == [["-0.0120"], ["0.0310"], ["0.699"]]
    joint = [rows for rows in _tables(late, "balance-joint-test")]
    # F = mean of the squared t-ratios = 0.125; F(2, 48) survival function 0.883
    assert _row(joint[0], "First stage: tutoring hours")[1:4] == [
        ["0.125"],
        ["F, 2 and 48 df"],
        ["0.883"],
    ]
    reduced = _tables(late, "falsification-reduced-form")[0]
    assert _row(reduced, "voucher lottery win")[1:] == [["0.350"], ["1.21"], ["0.772"]]
    assert _row(joint[1], "Reduced form")[1:4] == [["0.0974"], ["F, 2 and 48 df"], ["0.907"]]
    assert "Reduced form: maths score regressed on the instruments (587 rows)" in text
    # two filters, one line each
    evening = _block(fragment, "Compulsory evening study")
    assert (
        '<span class="line">keep school_type equal to boarding</span>'
        '<span class="line">keep grade greater than 7</span>'
    ) in evening


def test_falsification_readings_do_not_overclaim(page: str) -> None:
    fragment = _subsection(page, FALSIFICATION_ID)
    late = _text(_block(fragment, "Late applicants"))
    assert "As the design expects, no first stage is detected in these rows" in late
    assert "A first stage too small to detect cannot be ruled out." in late
    assert "consistent with the exclusion restriction but cannot prove it: with 587 rows" in late
    evening = _block(fragment, "Compulsory evening study")
    assert "does not serve as a falsification test" in _text(evening)
    assert "The instruments move tutoring hours per week in these rows" in _text(evening)
    readings = evening.split(f'<p class="caution-inline">{FALSIFICATION_CAUTION}')[0]
    assert readings.count('<p class="caution-inline">') == 2  # both readings flagged
    assert _text(fragment).endswith(FALSIFICATION_CAUTION)
    assert "consistent with the exclusion restriction but cannot prove it" in FALSIFICATION_CAUTION


def test_reduced_form_far_from_zero_without_first_stage_is_evidence_against() -> None:
    late = example_falsification()[0]
    moved = late.model_copy(
        update={
            "reduced_form_test": late.reduced_form_test.model_copy(  # type: ignore[union-attr]
                update={"statistic": 6.2, "p_value": 0.004}
            )
        }
    )
    fragment = _subsection(_render(_results(falsification=[moved])), FALSIFICATION_ID)
    text = _text(fragment)
    assert "Yet the instruments shift maths score here (reduced form rejected at the 5% level)" in (
        text
    )
    assert "evidence against the exclusion restriction" in text
    assert "Reduced form 6.20 F, 2 and 48 df 0.004" in text


def test_first_stage_not_estimated_reads_on_the_design_premise() -> None:
    late = example_falsification()[0]
    reason = "tutoring hours per week is 0 in every row of this subsample"
    stage = late.first_stages[0].model_copy(  # type: ignore[index]
        update={"coefficients": [], "joint_test": NA(reason=reason)}
    )
    variant = late.model_copy(update={"first_stages": [stage]})
    serves, first, reduced = falsification_readings(variant, "hours", "score", 0.05)
    assert serves
    assert f"could not be estimated in these rows ({reason})" in first
    assert "cannot confirm that the instruments leave hours unmoved" in first
    assert reduced.startswith("If the design is right that they do, the reduced form is not")
    assert "cannot prove it" in reduced
    fragment = _subsection(_render(_results(falsification=[variant])), FALSIFICATION_ID)
    assert "falsification-first-stage" not in fragment  # no empty coefficient table
    assert f"First stage: tutoring hours per week n/a: {reason}" in _text(fragment)
    # the whole first stage not applicable, and the reduced-form test not applicable
    whole = variant.model_copy(
        update={"first_stages": NA(reason="x"), "reduced_form_test": NA(reason="too few rows")}
    )
    serves, _, reduced = falsification_readings(whole, "hours", "score", 0.05)
    assert serves
    assert reduced == (
        "The reduced-form test could not be computed (too few rows), so this subsample gives "
        "no evidence on the exclusion restriction."
    )


def test_a_subsample_that_could_not_be_estimated_shows_its_reason_once() -> None:
    reason = "the subsample 'Empty' cannot support the model: no rows are left"
    empty = rs.FalsificationResult(
        name="Empty",
        description="",
        rows=["keep grade equal to 13"],
        n_used=0,
        first_stages=NA(reason=reason),
        reduced_form=NA(reason=reason),
        reduced_form_test=NA(reason=reason),
        covariance="",
    )
    fragment = _subsection(_render(_results(falsification=[empty])), FALSIFICATION_ID)
    block = _block(fragment, "Empty")
    assert "<table" not in block
    assert _text(block).count("no rows are left") == 1
    assert "Not estimated: The subsample 'Empty' cannot support the model" in _text(block)
    assert "gives no evidence on the exclusion restriction" in _text(block)
    assert "Covariance" not in _text(block)  # no covariance to name


def test_no_falsification_subsample_shows_no_subsection() -> None:
    page = _render(_results(falsification=[]))
    assert f'id="{FALSIFICATION_ID}"' not in page
    assert SUBSECTION_TITLES[FALSIFICATION_ID] not in page


# --------------------------------------------------------------------------- compliers


def test_complier_shares_with_treatment_instrument_and_se(page: str) -> None:
    fragment = _subsection(page, COMPLIERS_ID)
    text = _text(fragment)
    assert "Binary instrument voucher lottery win (column voucher_won)" in text
    assert "Binary treatment any tutoring (treated when tutoring_hours > 0)" in text
    assert "Rows used 4,624: 1,753 with the instrument on, 2,871 with it off" in text
    assert "Bootstrap 499 draws, seed" in text
    shares = _tables(fragment, "complier-shares")[0]
    compliers = _row(shares, "Compliers")
    # 0.781 - 0.204 = 0.577; always-takers 0.204; never-takers 1 - 0.781 = 0.219
    assert compliers[1:3] == [["0.577"], ["0.0213"]]
    assert "minus off (0.204, 2,871 rows)" in compliers[4][0]
    assert _row(shares, "Always-takers")[1:3] == [["0.204"], [DASH]]
    assert _row(shares, "Never-takers")[1:3] == [["0.219"], [DASH]]
    assert "only the complier share is bootstrapped" in text


def test_a_treatment_label_that_repeats_the_definition_is_shown_once() -> None:
    variant = example_compliers().model_copy(update={"treatment_label": "tutoring_hours > 0"})
    text = _text(_subsection(_render(_results(compliers=variant)), COMPLIERS_ID))
    assert "Binary treatment treated when tutoring_hours > 0 Rows used" in text
    assert "whether they are treated (tutoring_hours > 0)." in text
    assert text.count("tutoring_hours > 0") == 2


def test_complier_means_table_and_conditioning(page: str) -> None:
    fragment = _subsection(page, COMPLIERS_ID)
    means = _tables(fragment, "complier-means")[0]
    # full sample = 0.577 x 60.4 + 0.204 x 66.9 + 0.219 x 62.8 = 62.25
    assert _row(means, "previous year's maths score")[1:] == [
        ["62.3"],
        ["60.4", "(0.710)"],
        ["66.9"],
        ["62.8"],
    ]
    assert _row(means, "eligible for free school meals")[2] == ["0.262", "(0.0190)"]
    text = _text(fragment)
    assert "Conditioning Unconditional: no controls or fixed effects are used" in text


def test_complier_reading_names_the_late_and_monotonicity(page: str) -> None:
    text = _text(_subsection(page, COMPLIERS_ID))
    assert "The LATE is the average effect for the compliers, about 58% of the rows used" in text
    assert "may differ from the full sample, as the table of covariate means shows" in text
    assert "identified only under monotonicity (no defiers)" in text


def test_missing_means_are_dashes_with_notes() -> None:
    compliers = example_compliers()
    means = list(compliers.means)
    means[0] = means[0].model_copy(update={"always_takers": None})
    means[1] = means[1].model_copy(update={"compliers_se": None})
    shares = compliers.shares.model_copy(update={"always_takers": 0.0})
    variant = compliers.model_copy(update={"means": means, "shares": shares})
    fragment = _subsection(_render(_results(compliers=variant)), COMPLIERS_ID)
    table = _tables(fragment, "complier-means")[0]
    assert _row(table, "age in years")[3] == [DASH]
    assert _row(table, "previous year's maths score")[2] == ["60.4"]
    text = _text(fragment)
    assert "Age in years, always-takers: no always-takers in the sample, so no mean." in text
    assert "Previous year's maths score, compliers: no bootstrap standard error" in text


def test_no_compliers_in_this_direction_is_said() -> None:
    compliers = example_compliers()
    shares = compliers.shares.model_copy(
        update={"compliers": -0.02, "treated_share_on": 0.30, "treated_share_off": 0.32}
    )
    text = _text(
        _subsection(
            _render(_results(compliers=compliers.model_copy(update={"shares": shares}))),
            COMPLIERS_ID,
        )
    )
    assert "is not higher with voucher lottery win on than off (0.300 against 0.320)" in text
    assert "The LATE is the average effect" not in text


def test_compliers_not_applicable_shows_the_reason() -> None:
    page = _render(_results(compliers=NA(reason="the instrument is not binary")))
    fragment = _subsection(page, COMPLIERS_ID)
    assert "Not computed: The instrument is not binary." in _text(fragment)
    assert "<table" not in fragment
    results = _results(compliers=NA(reason="x"))
    assert COMPLIER_MASSES_KEY not in expected_figures(results)
    assert complier_figure(results.balance) is None


def test_compliers_none_shows_nothing_about_compliers() -> None:
    results = _results(compliers=None)
    assert COMPLIER_MASSES_KEY not in expected_figures(results)
    page = _render(results)
    assert f'id="{COMPLIERS_ID}"' not in page
    assert "always-takers" not in _section(page, BALANCE_ID).lower()
    assert 'href="#compliers"' not in page
    monotonicity = next(i for i in results.disclosures.items if i.key == "monotonicity")
    assert monotonicity.evidence == []


# --------------------------------------------------------------------------- LATE implication


def test_late_implication_shows_count_test_and_readings(page: str) -> None:
    fragment = _subsection(page, COMPLIERS_ID)
    text = _text(fragment)
    assert "Bins with a band wholly below zero 0 of 12" in text
    assert "pointwise 95%, 499 bootstrap draws" in text
    test = _row(_tables(fragment, "late-test")[0], "Kitagawa")
    assert test[1:4] == [["0.620"], ["bootstrap, 499 draws"], ["0.580"]]
    assert "Null hypothesis: every implied complier mass is non-negative." in text
    assert "does not reject at the 5% level (p = 0.580)" in text
    assert "consistent with the LATE assumptions but does not establish them" in text
    assert LATE_IMPLICATION_CAUTION in text
    assert "passing does not establish monotonicity" in LATE_IMPLICATION_CAUTION
    figure = _figures()[COMPLIER_MASSES_KEY]
    assert f'<img src="{figure.data_uri}"' in fragment


def test_negative_bins_and_a_rejecting_test_are_evidence_against() -> None:
    fragment = _subsection(_render(_results(compliers=_rejecting())), COMPLIERS_ID)
    text = _text(fragment)
    assert "Bins with a band wholly below zero 1 of 12 untreated, 35.0 to 40.0" in text
    assert "1 of 12 bins has a 95% band wholly below zero, and the Kitagawa test rejects" in text
    assert "evidence against at least one of exclusion, independence and monotonicity" in text
    assert "does not establish them" not in text.replace(LATE_IMPLICATION_CAUTION, "")


@pytest.mark.parametrize(
    ("negative", "test", "expected"),
    [
        (1, kitagawa_test(0.9, 0.41), "Treat those bins as a warning, not as a finding."),
        (0, kitagawa_test(5.3, 0.006), "No single bin's 95% band lies wholly below zero, but"),
        (2, NA(reason="the instrument varies within clusters"), "could not be computed"),
        (0, NA(reason="no usable draw"), "No bin's 95% band lies wholly below zero."),
    ],
)
def test_late_implication_readings(negative: int, test: rs.TestOrNA, expected: str) -> None:
    implication = _with_implication(negative_bins=negative, test=test).late_implication
    assert isinstance(implication, rs.LateImplication)
    reading = late_implication_reading(implication, 0.05)
    assert expected in reading
    assert "establish them" not in reading or "does not establish" in reading


def test_late_implication_not_applicable_shows_the_reason_and_no_figure() -> None:
    reason = "the outcome takes one value only"
    results = _results(
        compliers=example_compliers().model_copy(update={"late_implication": NA(reason=reason)})
    )
    assert COMPLIER_MASSES_KEY not in expected_figures(results)
    assert complier_figure(results.balance) is None
    fragment = _subsection(_render(results), COMPLIERS_ID)
    assert f"Not computed: {reason[0].upper()}{reason[1:]}." in _text(fragment)
    assert "<img" not in fragment
    assert "complier-shares" in fragment  # the rest of the analysis is still shown


# --------------------------------------------------------------------------- figure


def test_figure_is_deterministic_svg_with_alt_text() -> None:
    compliers = example_compliers()
    implication = compliers.late_implication
    assert isinstance(implication, rs.LateImplication)
    first = complier_masses_svg(implication)
    assert first == complier_masses_svg(implication)
    assert first.startswith("<?xml")
    assert "<dc:date>" not in first
    figure = complier_masses_figure(compliers)
    assert figure.svg == first
    assert figure.filename == "complier-outcome-masses.svg"
    assert _figures()[COMPLIER_MASSES_KEY].svg == first  # what make_figures places
    # each panel adds up to the complier share, 0.781 - 0.204
    assert "adding up to 0.577" in figure.alt
    assert "12 bins from 30.0 to 90.0" in figure.alt
    assert "No band lies wholly below zero." in figure.alt
    assert "95% bootstrap band (499 draws)" in figure.alt
    assert "no bar can be negative" in figure.caption


def test_figure_marks_bands_below_zero() -> None:
    figure = complier_masses_figure(_rejecting())
    assert (
        "Bands wholly below zero: compliers when untreated, 35.0 to 40.0 "
        "(-0.0200 [-0.0300, -0.00800])." in figure.alt
    )
    assert "band wholly below zero" in figure.svg  # the legend entry is drawn as text paths
    assert figure.svg != complier_masses_figure(example_compliers()).svg


def test_figure_of_an_outcome_with_few_values_and_bad_bins() -> None:
    compliers = example_compliers()
    points = [
        rs.DensityBin(
            lower=float(v),
            upper=float(v),
            treated=m,
            treated_low=m - 0.02,
            treated_high=m + 0.02,
            untreated=m,
            untreated_low=m - 0.02,
            untreated_high=m + 0.02,
        )
        for v, m in zip(range(5), [0.05, 0.2, 0.15, -0.03, 0.2], strict=True)
    ]
    figure = complier_masses_figure(_with_implication(bins=points))
    assert figure.svg.startswith("<?xml")
    assert "compliers when treated, value 3.00 (-0.0300 [-0.0500, -0.0100])" in figure.alt
    implication = compliers.late_implication
    assert isinstance(implication, rs.LateImplication)
    backwards = implication.model_copy(update={"bins": implication.bins[::-1]})
    with pytest.raises(ValueError, match="increasing order"):
        complier_masses_svg(backwards)
    with pytest.raises(ValueError, match="no outcome bins"):
        complier_masses_svg(implication.model_copy(update={"bins": []}))


def test_missing_complier_figure_is_an_error() -> None:
    results = _results()
    assert COMPLIER_MASSES_KEY in expected_figures(results)
    figures = {k: v for k, v in _figures().items() if k != COMPLIER_MASSES_KEY}
    with pytest.raises(ValueError, match=COMPLIER_MASSES_KEY):
        render_html(results, RUN, figures)


# --------------------------------------------------------------------------- disclosures


def test_evidence_links_point_to_the_subsections(page: str) -> None:
    assert set(ds.EVIDENCE_SUBSECTION_IDS) == set(SUBSECTION_TITLES)
    assert (ds.FALSIFICATION_ID, ds.COMPLIERS_ID) == (FALSIFICATION_ID, COMPLIERS_ID)
    results = _results()
    items = {i.key: i for i in results.disclosures.items}
    exclusion = [e.section_id for e in items["exclusion_restriction"].evidence]
    assert exclusion == ["specification-tests", BALANCE_ID, FALSIFICATION_ID]
    assert "2 falsification subsamples of rows" in items["exclusion_restriction"].evidence[2].text
    monotonicity = items["monotonicity"]
    assert [e.section_id for e in monotonicity.evidence] == [COMPLIERS_ID]
    assert "finding none does not establish monotonicity" in monotonicity.evidence[0].text
    assert "checked in this appendix" in monotonicity.testable_why
    assert monotonicity.testable == "no"
    cannot = _section(page, "cannot-tell")
    for anchor in (FALSIFICATION_ID, COMPLIERS_ID):
        assert f'<a href="#{anchor}">{escape(SUBSECTION_TITLES[anchor])}</a>' in cannot
        assert f'id="{anchor}"' in page


def test_monotonicity_link_without_the_implication_says_why() -> None:
    reason = "the outcome takes one value only"
    results = _results(
        compliers=example_compliers().model_copy(update={"late_implication": NA(reason=reason)})
    )
    (item,) = [i for i in results.disclosures.items if i.key == "monotonicity"]
    assert f"could not be checked ({reason})" in item.evidence[0].text
    assert "not checked in this appendix" in item.testable_why
    results = _results(compliers=NA(reason="the instrument is not binary"), falsification=[])
    items = {i.key: i for i in results.disclosures.items}
    assert items["monotonicity"].evidence == []
    assert FALSIFICATION_ID not in [e.section_id for e in items["exclusion_restriction"].evidence]


# --------------------------------------------------------------------------- safety and layout


def test_text_from_the_spec_and_data_is_escaped() -> None:
    script = "<script>alert(1)</script>"
    image = '<img src=x onerror="alert(2)">'
    late = example_falsification()[0].model_copy(
        update={"name": script, "description": image, "rows": [f"keep note equal to {script}"]}
    )
    compliers = example_compliers()
    means = [compliers.means[0].model_copy(update={"label": image}), *compliers.means[1:]]
    implication = compliers.late_implication
    assert isinstance(implication, rs.LateImplication)
    variant = compliers.model_copy(
        update={
            "treatment": f"hours > 0 {script}",
            "treatment_label": image,
            "instrument_label": script,
            "conditioning": image,
            "means": means,
            "late_implication": implication.model_copy(update={"label": f"score $ {script}"}),
        }
    )
    results = _results(falsification=[late], compliers=variant)
    page = _render(results)
    assert script not in page
    assert image not in page
    assert "<script" not in page.lower()
    section = _section(page, BALANCE_ID)
    assert f"<h4>{escape(script, quote=True)}</h4>" in section
    assert str(html_escape(image)) in section
    assert f"<code>hours &gt; 0 {escape(script, quote=True)}</code>" in section
    attributes = _Attributes()
    attributes.feed(page)
    assert attributes.event_handlers == []
    drawn = complier_figure(results.balance)  # labels with markup still draw
    assert drawn is not None
    assert drawn.svg.startswith("<?xml")


@pytest.mark.parametrize("variant", ["full", "rejecting", "not applicable", "not estimated"])
def test_tables_have_scoped_headers_and_wrappers(variant: str) -> None:
    empty = example_falsification()[0].model_copy(
        update={
            "first_stages": NA(reason="x"),
            "reduced_form": NA(reason="x"),
            "reduced_form_test": NA(reason="x"),
        }
    )
    results = {
        "full": _results,
        "rejecting": lambda: _results(compliers=_rejecting()),
        "not applicable": lambda: _results(compliers=NA(reason="the instrument is not binary")),
        "not estimated": lambda: _results(falsification=[empty]),
    }[variant]()
    page = _render(results)
    parser = _Tables()
    parser.feed(page)
    assert parser.th_without_scope == 0
    assert page.count("<table") == page.count('<div class="table-wrap">')


def test_print_css_keeps_complier_rows_whole(page: str) -> None:
    style = page[page.index("<style>") : page.index("</style>")]
    rule = re.search(r"table\.complier-means tr[^{]*\{([^}]*)\}", style)
    assert rule is not None
    assert "break-inside: avoid" in rule.group(1)


def test_strict_undefined_covers_the_complier_figure() -> None:
    results = _results()
    context = build_context(results, RUN, _figures())
    broken = {k: v for k, v in context.items() if k != "complier_figure"}
    with pytest.raises(jinja2.UndefinedError, match="complier_figure"):
        environment().get_template(ENTRY_TEMPLATE).render(broken)
