"""Tests of the appendix parts on instrument strength and weak-instrument-robust inference.

The StudyResults come from ``results_example`` (illustrative numbers for layout only), varied
here to reach every branch: statistics that do not apply, every shape of confidence set,
several endogenous regressors. These tests check what the appendix shows and how, never
whether a number is right (the engine's tests do that against outside references).
The set notation ("[a, b]", "(-inf, a] U [b, +inf)") is ordinary interval notation; the
wordings are this project's own; two decimals for critical values follow how Stock & Yogo
(2005, Tables 5.1-5.4) print them.
"""

from __future__ import annotations

import base64
import re
from html import escape
from html.parser import HTMLParser
from statistics import NormalDist

import jinja2
import pytest
from results_example import (
    CLUSTER_COV,
    example_results,
    example_strength,
    example_weak_iv,
    example_weak_iv_with_clr,
)

from reportkit import results as rs
from reportkit.report import formatting as fm
from reportkit.report import wording
from reportkit.report.figures import (
    P_VALUE_CURVE_KEY,
    make_figures,
    p_value_curve_figure,
    p_value_curve_svg,
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
STRENGTH_ID = "instrument-strength"
WEAK_IV_ID = "weak-iv-robust"
NA = rs.NotApplicable


def _render(results: rs.StudyResults) -> str:
    return render_html(results, RUN, make_figures(results))


def _section(page: str, section_id: str) -> str:
    start = page.index(f'<section id="{section_id}"')
    return page[start : page.index("</section>", start)]


def _text(fragment: str) -> str:
    """The visible text of an HTML fragment, tags removed and whitespace collapsed."""
    parser = _TextOnly()
    parser.feed(fragment)
    return " ".join("".join(parser.parts).split())


class _TextOnly(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.parts: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag not in ("strong", "em", "span", "code", "a"):  # block boundaries read as spaces
            self.parts.append(" ")

    def handle_endtag(self, tag: str) -> None:
        self.handle_starttag(tag, [])

    def handle_data(self, data: str) -> None:
        self.parts.append(data)


class _Tables(HTMLParser):
    """Every table's class, and its body rows as lists of cell texts."""

    def __init__(self) -> None:
        super().__init__()
        self.tables: list[tuple[str, list[list[str]]]] = []
        self._in_body = False
        self._row: list[str] | None = None
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
        if tag == "th" and not found.get("scope"):
            self.th_without_scope += 1

    def handle_endtag(self, tag: str) -> None:
        if tag == "tbody":
            self._in_body = False
        elif tag in ("td", "th") and self._cell is not None and self._row is not None:
            self._row.append(" ".join("".join(self._cell).split()))
            self._cell = None
        elif tag == "tr" and self._row is not None:
            self.tables[-1][1].append(self._row)
            self._row = None

    def handle_data(self, data: str) -> None:
        if self._cell is not None:
            self._cell.append(data)


def _tables(fragment: str) -> _Tables:
    parser = _Tables()
    parser.feed(fragment)
    return parser


def _rows(fragment: str, css_class: str) -> list[list[str]]:
    found = [rows for cls, rows in _tables(fragment).tables if css_class in cls.split()]
    assert found, f"no table of class {css_class}"
    return [row for rows in found for row in rows]


def _row(rows: list[list[str]], title_start: str) -> list[str]:
    matches = [row for row in rows if row[0].startswith(title_start)]
    assert len(matches) == 1, f"{len(matches)} rows start with {title_start!r}"
    return matches[0]


@pytest.fixture(scope="module")
def page() -> str:
    return _render(example_results())


def _with_weak_iv(**changes: object) -> rs.StudyResults:
    return example_results(weak_iv=example_weak_iv().model_copy(update=changes))


def _with_strength(**changes: object) -> rs.StudyResults:
    return example_results(strength=example_strength().model_copy(update=changes))


def _cs(shape: str, pieces: list[tuple[float | None, float | None]]) -> rs.ConfidenceSet:
    return rs.ConfidenceSet(
        shape=shape,  # type: ignore[arg-type]
        pieces=[rs.Interval(lower=lo, upper=hi) for lo, hi in pieces],
        level=0.95,
        method="closed-form inversion of the test",
        covariance=CLUSTER_COV,
        reference="Anderson & Rubin 1949",
    )


def _test(name: str, statistic: float, p_value: float, df: list[float]) -> rs.TestResult:
    return rs.TestResult(
        name=name,
        statistic=statistic,
        distribution="chi2" if len(df) == 1 else "F",
        df=df,
        p_value=p_value,
        covariance=CLUSTER_COV,
        null="the instrument is uncorrelated with the structural error",
        reference="Eichenbaum, Hansen & Singleton 1988",
    )


# --------------------------------------------------------------------------- sections


def test_new_sections_have_ids_headings_and_places(page: str) -> None:
    ids = [s.id for s in SECTIONS]
    titles = {s.id: s.title for s in SECTIONS}
    assert titles[STRENGTH_ID] == "How strong are the instruments"
    assert titles[WEAK_IV_ID] == "Inference that stays valid with weak instruments"
    # after the first stage, strength first, then weak-IV-robust inference
    assert ids.index(STRENGTH_ID) == ids.index("first-stage") + 1
    assert ids.index(WEAK_IV_ID) == ids.index(STRENGTH_ID) + 1
    for section_id in (STRENGTH_ID, WEAK_IV_ID):
        assert page.count(f'id="{section_id}"') == 1
        assert f'href="#{section_id}"' in page  # in the contents list
        heading = re.search(rf'<h2 id="{section_id}-heading">(.*?)</h2>', page)
        assert heading is not None
        assert titles[section_id] in heading.group(1)
    strength = _text(_section(page, STRENGTH_ID))
    for sub in ("Each first stage", "All first stages together", "Stock-Yogo critical values"):
        assert sub in strength
    assert "Verdict" in strength


# --------------------------------------------------------------------------- strength


def test_per_endogenous_table_shows_each_measure_with_its_criterion(page: str) -> None:
    rows = _rows(_section(page, STRENGTH_ID), "strength-measures")
    assert _row(rows, "Partial R-squared")[1] == "0.0610"
    shea = _row(rows, "Shea partial R-squared")
    assert shea[1] == "0.0610"
    assert "Shea 1997" in shea[0]
    assert "with one endogenous regressor the two are equal" in shea[2]
    main = _row(rows, "First-stage F, main covariance")
    assert main[1] == "31.4"  # results.first_stages[0].f_main
    assert "F, 2 and 60 df" in main[2]
    assert main[3] == "p < 0.001: rejected at the 5% level"
    assert main[4] == CLUSTER_COV
    classical = _row(rows, "First-stage F, classical")
    assert classical[1] == "44.8"
    assert classical[4].startswith("classical")
    effective = _row(rows, "Effective F")
    assert "Montiel Olea & Pflueger 2013" in effective[0]
    assert effective[1] == "28.9"
    assert "effective degrees of freedom 1.40" in effective[2]
    assert (
        "2SLS Nagar bias at most 10% of the worst-case benchmark: 21.40, exceeded" in effective[2]
    )
    assert effective[3] == "exceeds 2 of 2 critical values"
    conditional = _row(rows, "Conditional F")
    assert "n/a: one endogenous regressor" in conditional[1]
    for row in rows:  # every measure that applies names what it is read against
        assert row[1].startswith("n/a:") or row[2]


def test_system_statistics_show_covariance_reference_and_criterion(page: str) -> None:
    rows = _rows(_section(page, STRENGTH_ID), "strength-system")
    cd = _row(rows, "Cragg-Donald")
    assert "Cragg & Donald 1993" in cd[0]
    assert cd[1] == "44.8"
    assert "Stock & Yogo 2005 critical values" in cd[2]
    assert "independent, homoskedastic errors" in cd[2]
    assert cd[3] == "exceeds 3 of 3 critical values"
    assert cd[4].startswith("classical")
    kp_f = _row(rows, "Kleibergen-Paap rk Wald F")
    assert "Kleibergen & Paap 2006" in kp_f[0]
    assert kp_f[1] == "31.4"
    assert "no tabulated critical values" in kp_f[2]
    assert "read the effective F instead" in kp_f[2]
    assert kp_f[4] == CLUSTER_COV
    kp_lm = _row(rows, "Kleibergen-Paap rk LM")
    assert "chi-squared, 2 df" in kp_lm[2]
    assert "under-identified" in kp_lm[2]
    assert kp_lm[3] == "p < 0.001: rejected at the 5% level"
    assert wording.UNDERIDENTIFICATION_NOTE in _text(_section(page, STRENGTH_ID))


def test_stock_yogo_table_with_source_and_iid_note(page: str) -> None:
    section = _section(page, STRENGTH_ID)
    rows = _rows(section, "critical-values")
    # Stock & Yogo (2005), Table 5.2, one endogenous regressor, two instruments: 19.93
    # and 11.59 for 2SLS size 10% and 15%; Table 5.4: 8.68 for LIML size 10% (from memory).
    assert rows == [
        ["2SLS size at most 10% (nominal 5%)", "19.93", "yes"],
        ["2SLS size at most 15% (nominal 5%)", "11.59", "yes"],
        ["LIML size at most 10% (nominal 5%)", "8.68", "yes"],
    ]
    text = _text(section)
    assert "Cragg-Donald minimum-eigenvalue F = 44.8 against the critical values" in text
    assert "Source: Stock & Yogo 2005. Critical values assume independent, homoskedastic" in text


def test_verdict_sentence_and_the_relevance_reading(page: str) -> None:
    text = _text(_section(page, STRENGTH_ID))
    assert "Strong instruments. The effective F (28.9) exceeds its critical value" in text
    assert (
        "A strong first stage shows relevance; it says nothing about the exclusion restriction."
        in text
    )


@pytest.mark.parametrize(
    ("level", "expected"),
    [
        ("strong", "Strong instruments."),
        ("moderate", "Instruments of moderate strength."),
        ("weak", "Weak instruments."),
    ],
)
def test_verdict_levels(level: str, expected: str) -> None:
    verdict = rs.StrengthVerdict(level=level, summary="The effective F (4.10) is below 21.4.")  # type: ignore[arg-type]
    page = _render(_with_strength(verdict=verdict))
    for section_id in (STRENGTH_ID, "at-a-glance"):
        text = _text(_section(page, section_id))
        assert f"{expected} The effective F (4.10) is below 21.4." in text
    strength = _text(_section(page, STRENGTH_ID))
    assert ("rely on the inference that stays valid" in strength) == (level == "weak")
    assert ("may be somewhat too narrow" in strength) == (level == "moderate")


def test_strength_statistics_that_do_not_apply_show_their_reasons() -> None:
    eff_na = NA(reason="effective F is defined for one endogenous regressor")
    per = example_strength().per_endogenous[0].model_copy(update={"effective_f": eff_na})
    results = _with_strength(
        per_endogenous=[per],
        kleibergen_paap_f=NA(reason="with a classical covariance it equals the Cragg-Donald F"),
        kleibergen_paap_lm=NA(reason="not computed with a classical covariance"),
        stock_yogo=NA(reason="no tabulated values for 40 instruments"),
    )
    section = _section(_render(results), STRENGTH_ID)
    text = _text(section)
    assert "n/a: effective F is defined for one endogenous regressor" in text
    assert "n/a: with a classical covariance it equals the Cragg-Donald F" in text
    assert "n/a: not computed with a classical covariance" in text
    assert "n/a: no tabulated values for 40 instruments" in text
    cd = _row(_rows(section, "strength-system"), "Cragg-Donald")
    assert cd[2] == "no tabulated critical values: no tabulated values for 40 instruments"
    assert cd[3] == "\N{EM DASH}"  # no outcome without critical values
    assert "critical-values" not in section


def test_statistic_notes_are_listed_under_their_table() -> None:
    cd = example_strength().cragg_donald.model_copy(
        update={"note": "equals the classical first-stage F with one endogenous regressor"}
    )
    section = _section(_render(_with_strength(cragg_donald=cd)), STRENGTH_ID)
    notes = re.search(r'<ul class="table-notes">(.*?)</ul>', section, re.S)
    assert notes is not None
    assert _text(notes.group(1)) == (
        "Cragg-Donald minimum-eigenvalue F: equals the classical first-stage F with one "
        "endogenous regressor."
    )
    assert '<ul class="table-notes">' not in _section(_render(example_results()), STRENGTH_ID)


def test_critical_value_not_exceeded_is_said() -> None:
    base = example_strength().per_endogenous[0]
    assert isinstance(base.effective_f, rs.EffectiveF)
    low = base.effective_f.model_copy(
        update={
            "value": 15.0,
            "critical_values": [
                base.effective_f.critical_values[0].model_copy(update={"exceeded": False}),
                base.effective_f.critical_values[1],
            ],
        }
    )
    results = _with_strength(per_endogenous=[base.model_copy(update={"effective_f": low})])
    effective = _row(_rows(_section(_render(results), STRENGTH_ID), "strength-measures"), "Eff")
    assert "benchmark: 21.40, not exceeded" in effective[2]
    assert effective[3] == "exceeds 1 of 2 critical values"


def _two_endogenous() -> rs.StudyResults:
    """The example with a second endogenous regressor (homework hours), just-identified."""
    base = example_results()
    labels = dict(base.model.labels, homework_hours="homework hours per week")
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
    sw = rs.TestResult(
        name="Sanderson-Windmeijer conditional F",
        statistic=12.6,
        distribution="F",
        df=[1.0, 60.0],
        p_value=0.00076,
        covariance=CLUSTER_COV,
        null="this regressor is not identified, given the others",
        reference="Sanderson & Windmeijer 2016",
    )
    eff_na = NA(reason="the effective F is defined for one endogenous regressor")
    first = example_strength().per_endogenous[0]
    per = [
        first.model_copy(
            update={"shea_partial_r2": 0.031, "sanderson_windmeijer": sw, "effective_f": eff_na}
        ),
        first.model_copy(
            update={
                "endogenous": "homework_hours",
                "label": "homework hours per week",
                "partial_r2": 0.044,
                "shea_partial_r2": 0.022,
                "sanderson_windmeijer": sw,
                "effective_f": eff_na,
            }
        ),
    ]
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
        strength=example_strength().model_copy(update={"per_endogenous": per}),
        weak_iv=NA(reason="computed for a single endogenous regressor; this model has two"),
    )


def test_several_endogenous_regressors_get_one_table_each() -> None:
    page = _render(_two_endogenous())
    section = _section(page, STRENGTH_ID)
    assert "Each first stage: tutoring hours per week" in section
    assert "Each first stage: homework hours per week" in section
    tables = [rows for cls, rows in _tables(section).tables if "strength-measures" in cls]
    assert len(tables) == 2
    shea = _row(tables[1], "Shea partial R-squared")
    assert shea[1] == "0.0220"
    assert "far below it" in shea[2]
    conditional = _row(tables[1], "Conditional F")
    assert "Sanderson & Windmeijer 2016" in conditional[0]
    assert conditional[1] == "12.6"
    assert "this regressor is not identified" in conditional[2]
    assert conditional[3] == "p < 0.001: rejected at the 5% level"
    kp_f = _row(_rows(section, "strength-system"), "Kleibergen-Paap rk Wald F")
    assert "read the effective F instead" not in kp_f[2]


def test_strength_for_an_endogenous_without_first_stage_is_an_error() -> None:
    per = example_strength().per_endogenous[0].model_copy(update={"endogenous": "unknown"})
    with pytest.raises(ValueError, match="'unknown'"):
        _render(_with_strength(per_endogenous=[per]))


# --------------------------------------------------------------------------- confidence sets

SHAPES = [
    ("interval", [(0.31, 1.58)], "[0.310, 1.58]"),
    ("two_rays", [(None, -0.42), (2.5, None)], "(-inf, -0.420] U [2.50, +inf)"),
    ("ray", [(0.12, None)], "[0.120, +inf)"),
    ("ray", [(None, 3.7)], "(-inf, 3.70]"),
    ("whole_line", [], "all values (the data do not bound the effect)"),
    ("whole_line", [(None, None)], "all values (the data do not bound the effect)"),
    (
        "empty",
        [],
        "empty: no value of the coefficient is consistent with all instruments at this level "
        "\N{EM DASH} evidence against the model's over-identifying restrictions",
    ),
    (
        "union",
        [(None, -2.0), (0.5, 1.5), (4.0, None)],
        "(-inf, -2.00] U [0.500, 1.50] U [4.00, +inf)",
    ),
    ("union", [(-1.0, 0.0), (1.0, 2.0)], "[-1.00, 0] U [1.00, 2.00]"),
]


@pytest.mark.parametrize(("shape", "pieces", "expected"), SHAPES)
def test_each_set_shape_has_its_own_text(
    shape: str, pieces: list[tuple[float | None, float | None]], expected: str
) -> None:
    cs = _cs(shape, pieces)
    assert fm.fmt_set(cs) == expected
    page = _render(_with_weak_iv(anderson_rubin=cs))
    ar_row = _row(_rows(_section(page, WEAK_IV_ID), "confidence-sets"), "Anderson-Rubin")
    assert ar_row[1] == expected
    assert ar_row[2] == "yes"  # valid with weak instruments
    glance = _text(_section(page, "at-a-glance"))
    assert f"Anderson-Rubin, valid with weak instruments: {expected}" in glance
    assert "2SLS, conventional: [0.836, 2.44]" in glance
    reading = wording.set_reading(cs)
    assert escape(reading, quote=False) in page


@pytest.mark.parametrize(
    ("shape", "words"),
    [
        ("interval", "A bounded interval"),
        ("two_rays", "bound the effect in neither direction"),
        ("ray", "on one side only"),
        ("whole_line", "too weak for the data to say anything"),
        ("empty", "This does not mean the effect is known precisely"),
        ("union", "do not form one range"),
    ],
)
def test_set_readings_differ_by_shape_and_do_not_overclaim(shape: str, words: str) -> None:
    pieces = {
        "interval": [(0.0, 1.0)],
        "two_rays": [(None, 0.0), (1.0, None)],
        "ray": [(0.0, None)],
        "whole_line": [],
        "empty": [],
        "union": [(0.0, 1.0), (2.0, 3.0)],
    }[shape]
    reading = wording.set_reading(_cs(shape, pieces))
    assert words in reading
    assert "valid instrument" not in reading
    assert "proves" not in reading


@pytest.mark.parametrize(
    ("shape", "pieces"),
    [
        ("interval", [(None, 1.0)]),
        ("interval", [(0.0, 1.0), (2.0, 3.0)]),
        ("two_rays", [(0.0, 1.0), (2.0, None)]),
        ("ray", [(0.0, 1.0)]),
        ("whole_line", [(0.0, None)]),
        ("empty", [(0.0, 1.0)]),
        ("union", []),
    ],
)
def test_a_set_whose_pieces_contradict_its_shape_is_refused(
    shape: str, pieces: list[tuple[float | None, float | None]]
) -> None:
    with pytest.raises(ValueError, match=f"shape '{shape}'"):
        fm.fmt_set(_cs(shape, pieces))


def test_fmt_set_not_applicable_and_wrong_type() -> None:
    assert fm.fmt_set(NA(reason="CLR assumes homoskedastic errors")) == (
        "n/a: CLR assumes homoskedastic errors"
    )
    with pytest.raises(TypeError):
        fm.fmt_set(rs.Interval(lower=0.0, upper=1.0))  # type: ignore[arg-type]


# --------------------------------------------------------------------------- weak-IV section


def test_weak_iv_section_shows_tests_sets_and_tf(page: str) -> None:
    section = _section(page, WEAK_IV_ID)
    tests = _rows(section, "weak-iv-tests")
    ar = _row(tests, "Anderson-Rubin")
    assert ar[1] == "16.1"
    assert ar[2] == "chi-squared, 2 df"
    assert ar[3] == "< 0.001"
    clr = _row(tests, "Conditional likelihood ratio")
    assert clr[1] == "n/a: the CLR test assumes independent, homoskedastic errors"
    sets = _rows(section, "confidence-sets")
    assert _row(sets, "2SLS, conventional")[1:3] == ["[0.836, 2.44]", "no"]
    assert _row(sets, "Anderson-Rubin")[1] == "[0.687, 2.71]"
    assert _row(sets, "Conditional likelihood ratio")[1].startswith("n/a: the CLR test")
    # tF interval of the example: 1.64 -/+ 2.31 x 0.41
    assert _row(sets, "tF")[1:3] == ["[0.693, 2.59]", "yes"]
    text = _text(section)
    assert "Adjusted critical value 2.31 (the conventional test uses 1.96)" in text
    assert "2SLS t-ratio 4.00" in text
    assert "Adjusted p-value 0.002" in text
    assert "at 4.00 it rejects a zero effect at the 5% level" in text
    assert wording.AR_OVERID_NOTE in text  # the example is over-identified
    assert "A zero effect is rejected at the 5% level" in text


def test_clr_results_are_shown_when_present() -> None:
    page = _render(example_results(weak_iv=example_weak_iv_with_clr()))
    section = _section(page, WEAK_IV_ID)
    clr = _row(_rows(section, "weak-iv-tests"), "Conditional likelihood ratio")
    assert clr[1:4] == ["14.2", "chi-squared, 1 df", "< 0.001"]
    clr_set = _row(_rows(section, "confidence-sets"), "Conditional likelihood ratio")
    assert clr_set[1] == "[0.731, 2.66]"
    assert clr_set[3].startswith("classical")
    assert (
        "Conditional likelihood ratio (Moreira 2003): the values of the coefficient that the "
        "test does not reject, found by inversion of the test over a grid" in _text(section)
    )
    assert "Conditional likelihood ratio set" in _text(section)


def test_without_2sls_the_conventional_interval_is_explained() -> None:
    base = example_results()
    results = example_results(estimates=[e for e in base.estimates if e.estimator != "2sls"])
    page = _render(results)
    glance = _text(_section(page, "at-a-glance"))
    assert "2SLS, conventional: n/a: 2SLS was not estimated" in glance
    sets = _rows(_section(page, WEAK_IV_ID), "confidence-sets")
    assert _row(sets, "2SLS, conventional")[1] == "n/a: 2SLS was not estimated"


def test_weak_iv_not_applicable_is_shown_prominently() -> None:
    reason = "computed for a single endogenous regressor; this model has two"
    results = _two_endogenous()
    figures = make_figures(results)
    assert P_VALUE_CURVE_KEY not in figures
    page = render_html(results, RUN, figures)
    section = _section(page, WEAK_IV_ID)
    assert '<div class="caution not-computed">' in section
    assert f"Not reported: {fm.sentence(reason)}" in _text(section)
    assert "<table" not in section
    glance = _text(_section(page, "at-a-glance"))
    assert f"Anderson-Rubin, valid with weak instruments: n/a: {reason}" in glance


def test_tf_without_interval_and_tf_not_applicable() -> None:
    tf = example_weak_iv().tf
    assert isinstance(tf, rs.TFResult)
    no_interval = tf.model_copy(update={"first_stage_f": 3.1, "interval": None, "note": ""})
    section = _section(_render(_with_weak_iv(tf=no_interval)), WEAK_IV_ID)
    assert wording.TF_NO_INTERVAL in _text(section)
    na = NA(reason="the tF adjustment is derived for a single instrument")
    section = _section(_render(_with_weak_iv(tf=na)), WEAK_IV_ID)
    assert _row(_rows(section, "confidence-sets"), "tF")[1] == (
        "n/a: the tF adjustment is derived for a single instrument"
    )


def test_zero_test_readings_do_not_overclaim() -> None:
    alpha = 0.05
    no = wording.zero_test_reading(_test("AR", 1.2, 0.55, [2.0]), alpha)
    assert "not evidence that the effect is zero" in no
    yes = wording.zero_test_reading(_test("AR", 12.0, 0.002, [2.0]), alpha)
    assert "does not depend on the instruments being strong" in yes
    assert "depend on their being valid" in yes
    assert wording.zero_test_reading(NA(reason="x"), alpha) == "Not reported: x."


def test_tf_reading_compares_with_the_normal_critical_value() -> None:
    # 1.959963984540054: scipy.stats.norm.ppf(0.975) (reference library value)
    assert abs(wording.normal_critical_value(0.95) - 1.959963984540054) < 1e-12
    assert abs(wording.normal_critical_value(0.90) - NormalDist().inv_cdf(0.95)) < 1e-12
    tf = example_weak_iv().tf
    assert isinstance(tf, rs.TFResult)
    weak = tf.model_copy(update={"t_statistic": 2.2})
    assert "at 2.20 it does not reject a zero effect" in wording.tf_reading(weak, 0.95)
    assert "instead of the usual 1.96" in wording.tf_reading(weak, 0.95)


# --------------------------------------------------------------------------- figure


def test_p_value_figure_is_deterministic_svg_as_data_uri(page: str) -> None:
    weak_iv = example_weak_iv()
    first = p_value_curve_svg(weak_iv, 0.95)
    assert first == p_value_curve_svg(weak_iv, 0.95)
    assert first.startswith("<?xml")
    assert "<dc:date>" not in first
    figure = make_figures(example_results())[P_VALUE_CURVE_KEY]
    assert figure.filename == "weak-iv-p-values.svg"
    prefix = "data:image/svg+xml;base64,"
    assert figure.data_uri.startswith(prefix)
    assert base64.b64decode(figure.data_uri[len(prefix) :]).decode("utf-8") == figure.svg
    section = _section(page, WEAK_IV_ID)
    assert f'<img src="{figure.data_uri}"' in section


def test_p_value_figure_alt_text_has_the_numbers() -> None:
    alt = p_value_curve_figure(example_weak_iv(), 0.95).alt
    assert "101 values from -1.00 to 4.00" in alt
    assert "A dotted line marks p = 0.05" in alt
    assert "[0.687, 2.71]" in alt
    assert "At zero it is < 0.001" in alt
    assert "CLR" not in alt
    with_clr = p_value_curve_figure(example_weak_iv_with_clr(), 0.95)
    assert "its 95% set is [0.731, 2.66]" in with_clr.alt
    assert "hatched band is the CLR set" in with_clr.caption
    assert with_clr.svg != p_value_curve_svg(example_weak_iv(), 0.95)


def test_p_value_figure_draws_every_set_shape() -> None:
    drawn = set()
    for shape, pieces, _ in SHAPES:
        weak_iv = example_weak_iv().model_copy(update={"anderson_rubin": _cs(shape, pieces)})
        drawn.add(p_value_curve_svg(weak_iv, 0.95))
        caption = p_value_curve_figure(weak_iv, 0.95).caption
        assert ("the 95% Anderson-Rubin set is empty" in caption) == (shape == "empty")
        assert ("(shaded)" in caption) == (shape != "empty")
    assert len(drawn) == len(SHAPES) - 1  # the two ways of writing the whole line look alike


def test_no_curve_no_figure_and_a_bad_curve_is_refused() -> None:
    results = _with_weak_iv(curve=None)
    figures = make_figures(results)
    assert P_VALUE_CURVE_KEY not in figures
    assert "No p-value curve was computed." in _section(
        render_html(results, RUN, figures), WEAK_IV_ID
    )
    bad = rs.PValueCurve(beta0=[0.0, 1.0, 2.0], anderson_rubin=[0.1, 0.2], clr=None)
    with pytest.raises(ValueError, match="3 hypothesised values"):
        p_value_curve_svg(example_weak_iv().model_copy(update={"curve": bad}), 0.95)


def test_missing_p_value_figure_is_an_error() -> None:
    results = example_results()
    figures = {k: v for k, v in make_figures(results).items() if k != P_VALUE_CURVE_KEY}
    with pytest.raises(ValueError, match=P_VALUE_CURVE_KEY):
        render_html(results, RUN, figures)


# --------------------------------------------------------------------------- specification tests


def test_basmann_row_and_c_statistics_reasons(page: str) -> None:
    section = _section(page, "specification-tests")
    rows = _rows(section, "tests")
    assert _row(rows, "Basmann")[1] == "n/a: assumes independent, homoskedastic errors"
    c_rows = _rows(section, "c-statistics")
    assert [row[0] for row in c_rows] == [
        "voucher lottery win",
        "distance to the nearest centre (km)",
    ]
    assert all(row[1].startswith("n/a: with two instruments") for row in c_rows)
    assert wording.C_TEST_CAUTION in _text(section)
    assert "assuming that all the other instruments are valid" in wording.C_TEST_CAUTION


def test_c_statistics_table_with_results_and_whole_list_not_applicable() -> None:
    entries = [
        rs.InstrumentValidity(
            instrument="voucher_won",
            label="voucher lottery win",
            test=_test("C statistic", 0.61, 0.4348, [1.0]),
        ),
        rs.InstrumentValidity(
            instrument="distance_km",
            label="distance to the nearest centre (km)",
            test=NA(reason="dropping it leaves too few instruments"),
        ),
    ]
    base = example_results()
    basmann = _test("Basmann", 0.83, 0.3622, [1.0])
    diagnostics = base.diagnostics.model_copy(
        update={"instrument_validity": entries, "basmann": basmann}
    )
    section = _section(_render(example_results(diagnostics=diagnostics)), "specification-tests")
    c_rows = _rows(section, "c-statistics")
    assert c_rows[0] == ["voucher lottery win", "0.610", "1", "0.435", CLUSTER_COV]
    assert c_rows[1] == [
        "distance to the nearest centre (km)",
        "n/a: dropping it leaves too few instruments",
    ]
    assert _row(_rows(section, "tests"), "Basmann")[1:4] == ["0.830", "chi-squared, 1 df", "0.362"]
    whole = base.diagnostics.model_copy(
        update={"instrument_validity": NA(reason="just-identified: nothing to compare")}
    )
    section = _section(_render(example_results(diagnostics=whole)), "specification-tests")
    assert "n/a: just-identified: nothing to compare" in _text(section)
    assert "c-statistics" not in section


# --------------------------------------------------------------------------- whole page


VARIANTS = {
    "example": example_results,
    "clr": lambda: example_results(weak_iv=example_weak_iv_with_clr()),
    "two endogenous": _two_endogenous,
    "whole line": lambda: _with_weak_iv(anderson_rubin=_cs("whole_line", [])),
    "nothing applies": lambda: _with_strength(
        kleibergen_paap_f=NA(reason="a"),
        kleibergen_paap_lm=NA(reason="b"),
        stock_yogo=NA(reason="c"),
    ),
}


@pytest.mark.parametrize("name", sorted(VARIANTS))
def test_tables_are_accessible_and_the_page_self_contained(name: str) -> None:
    page = _render(VARIANTS[name]())
    parsed = _tables(page)
    assert parsed.th_without_scope == 0
    assert page.count("<table") == page.count('<div class="table-wrap">')
    assert "http://" not in page
    assert "https://" not in page
    sources = re.findall(r'<img src="([^"]*)"', page)
    assert sources
    assert all(src.startswith("data:image/svg+xml;base64,") for src in sources)


def test_strict_undefined_covers_the_new_context() -> None:
    results = example_results()
    context = build_context(results, RUN, make_figures(results))
    for key in ("strength_blocks", "weak_iv_readings", "glance_interval", "instrument_validity"):
        broken = {k: v for k, v in context.items() if k != key}
        with pytest.raises(jinja2.UndefinedError, match=key):
            environment().get_template(ENTRY_TEMPLATE).render(broken)


# --------------------------------------------------------------------------- filters


def test_interval_fixed_level_yes_no_and_sentence_filters() -> None:
    assert fm.fmt_interval(rs.Interval(lower=-0.1234, upper=5.678)) == "[-0.123, 5.68]"
    assert fm.fmt_interval(rs.Interval(lower=None, upper=2.0)) == "(-inf, 2.00]"
    assert fm.fmt_interval(rs.Interval(lower=2.0, upper=None)) == "[2.00, +inf)"
    assert fm.fmt_fixed(19.93) == "19.93"
    assert fm.fmt_fixed(8.675) == "8.68"  # halves round up on the printed decimal
    assert fm.fmt_fixed(1234.5, 1) == "1,234.5"
    assert fm.fmt_level(0.05) == "0.05"
    assert fm.fmt_level(round(1 - 0.975, 10)) == "0.025"
    with pytest.raises(ValueError):
        fm.fmt_level(1.0)
    assert fm.yes_no(True) == "yes"
    assert fm.yes_no(False) == "no"
    with pytest.raises(TypeError):
        fm.yes_no(1)  # type: ignore[arg-type]
    assert fm.sentence("critical values assume iid errors") == (
        "Critical values assume iid errors."
    )
    assert fm.sentence("Already a sentence.") == "Already a sentence."


def test_exceeded_count_and_test_outcome() -> None:
    cv = example_strength().stock_yogo
    assert isinstance(cv, rs.CriticalValueTable)
    assert wording.exceeded_count(cv.rows) == "exceeds 3 of 3 critical values"
    none = [row.model_copy(update={"exceeded": False}) for row in cv.rows[:1]]
    assert wording.exceeded_count(none) == "exceeds none of its 1 critical value"
    assert wording.exceeded_count([]) == "no critical values computed"
    assert wording.test_outcome(_test("x", 1.0, 0.3, [1.0]), 0.05) == (
        "p = 0.300: not rejected at the 5% level"
    )
