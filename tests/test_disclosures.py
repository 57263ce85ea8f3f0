"""Tests of ``reportkit.disclosures.build_disclosures``: the identifying assumptions.

Which assumptions an IV estimate rests on and which of them data can test follow the
textbook account (relevance, independence, exclusion restriction, and monotonicity for a
local average treatment effect: Imbens and Angrist 1994; Angrist, Imbens and Rubin 1996,
from memory). The model parts come from ``results_example`` (illustrative numbers, layout
only); here they are varied to reach each branch. Nothing numeric is checked: the builder
computes no statistics.
"""

from __future__ import annotations

from pathlib import Path

from results_example import example_results

from reportkit import disclosures as ds
from reportkit import results as rs
from reportkit.report.html import SECTIONS
from reportkit.spec.loader import load_spec
from reportkit.spec.models import AdditionalAssumption, Argument, AssumptionsSection

DEMO_SPEC = Path(__file__).resolve().parents[1] / "fixtures" / "demo" / "tutoring.yaml"
SECTION_IDS = {s.id for s in SECTIONS}


def _build(
    assumptions: AssumptionsSection, results: rs.StudyResults | None = None
) -> rs.Disclosures:
    results = results if results is not None else example_results()
    return ds.build_disclosures(
        assumptions,
        model=results.model,
        strength=results.strength,
        weak_iv=results.weak_iv,
        diagnostics=results.diagnostics,
        balance=results.balance,
    )


def _full() -> AssumptionsSection:
    return AssumptionsSection(
        relevance=Argument(argument="Vouchers make tutoring free."),
        independence=Argument(argument="The lottery was random.", references=["Protocol, s. 3"]),
        exclusion_restriction=Argument(argument="Vouchers buy only tutoring."),
        monotonicity=Argument(argument="No pupil attends less because of a voucher."),
    )


def _item(d: rs.Disclosures, key: str) -> rs.AssumptionDisclosure:
    (found,) = [i for i in d.items if i.key == key]
    return found


def test_every_argument_stated() -> None:
    d = _build(_full())
    assert [i.key for i in d.items] == [
        "relevance",
        "independence",
        "exclusion_restriction",
        "monotonicity",
    ]
    assert (d.stated, d.total) == (4, 4)
    assert all(i.argument is not None for i in d.items)


def test_no_argument_stated() -> None:
    d = _build(AssumptionsSection())
    assert (d.stated, d.total) == (0, 4)
    assert all(i.argument is None and i.references == [] for i in d.items)


def test_some_arguments_missing_are_counted() -> None:
    d = _build(_full().model_copy(update={"relevance": None, "monotonicity": None}))
    assert (d.stated, d.total) == (2, 4)
    assert _item(d, "relevance").argument is None
    assert _item(d, "independence").argument == "The lottery was random."


def test_testable_grades() -> None:
    # relevance is about observables; independence only partly (observables, placebos);
    # exclusion and monotonicity not at all (the standard account, from memory)
    d = _build(_full())
    grades = {i.key: i.testable for i in d.items}
    assert grades == {
        "relevance": "yes",
        "independence": "partly",
        "exclusion_restriction": "no",
        "monotonicity": "no",
    }


def test_late_not_claimed_drops_monotonicity_and_changes_the_caution() -> None:
    d = _build(_full().model_copy(update={"late_claimed": False}))
    assert [i.key for i in d.items] == ["relevance", "independence", "exclusion_restriction"]
    assert (d.stated, d.total) == (3, 3)
    assert ds.LATE_CAUTION not in d.cautions
    assert ds.HOMOGENEOUS_CAUTION in d.cautions
    # the monotonicity argument, if given anyway, is not counted
    d_claimed = _build(_full())
    assert ds.LATE_CAUTION in d_claimed.cautions
    assert ds.HOMOGENEOUS_CAUTION not in d_claimed.cautions


def test_fixed_cautions_present() -> None:
    d = _build(AssumptionsSection())
    assert d.cautions[0] == ds.NOT_PROOF_CAUTION
    assert "cannot establish that an instrument is valid" in d.cautions[0]
    assert ds.NOT_ADVICE_CAUTION in d.cautions


def test_additional_assumptions_follow_the_standard_ones() -> None:
    extra = [
        AdditionalAssumption(
            name="No spillovers between pupils",
            argument="Pupils in different schools do not share tutors.",
            references=["Survey of centres (invented)"],
        ),
        AdditionalAssumption(name="Stable tests", argument="The test did not change."),
    ]
    d = _build(AssumptionsSection(additional=extra))
    assert [i.key for i in d.items][-2:] == ["additional-1", "additional-2"]
    first = _item(d, "additional-1")
    assert first.name == "No spillovers between pupils"
    assert first.testable == "no"
    assert first.evidence == []
    assert first.references == ["Survey of centres (invented)"]
    # two additional with arguments, four standard without
    assert (d.stated, d.total) == (2, 6)


def test_evidence_links_point_to_sections_of_the_appendix() -> None:
    assert set(ds.EVIDENCE_SECTION_IDS) <= SECTION_IDS
    d = _build(_full())
    links = [link.section_id for item in d.items for link in item.evidence]
    assert links and set(links) <= SECTION_IDS
    relevance = [e.section_id for e in _item(d, "relevance").evidence]
    assert relevance[:2] == ["first-stage", "instrument-strength"]
    exclusion = [e.section_id for e in _item(d, "exclusion_restriction").evidence]
    assert exclusion == ["specification-tests", "as-good-as-random"]
    assert [e.section_id for e in _item(d, "independence").evidence] == ["as-good-as-random"]
    # monotonicity: its testable implications are not computed, so no evidence is claimed
    assert _item(d, "monotonicity").evidence == []
    assert "not checked in this appendix" in _item(d, "monotonicity").testable_why


def test_without_balance_independence_has_no_evidence_and_says_why() -> None:
    reason = "no balance covariates, pre-treatment variables or placebo outcomes were given"
    results = example_results(balance=rs.NotApplicable(reason=reason))
    d = _build(_full(), results)
    independence = _item(d, "independence")
    assert independence.evidence == []
    assert "No such evidence is shown in this appendix" in independence.testable_why
    assert reason in independence.testable_why
    assert [e.section_id for e in _item(d, "exclusion_restriction").evidence] == [
        "specification-tests"
    ]


def test_without_placebo_outcomes_exclusion_does_not_link_to_balance() -> None:
    base = example_results()
    assert isinstance(base.balance, rs.Balance)
    balance = base.balance.model_copy(update={"placebo": []})
    d = _build(_full(), example_results(balance=balance))
    assert [e.section_id for e in _item(d, "exclusion_restriction").evidence] == [
        "specification-tests"
    ]
    assert "placebo" not in _item(d, "independence").evidence[0].text


def test_just_identified_says_no_overidentification_test() -> None:
    base = example_results()
    na = rs.NotApplicable(reason="just-identified")
    diagnostics = base.diagnostics.model_copy(update={"hansen_j": na, "sargan": na, "basmann": na})
    d = _build(_full(), example_results(diagnostics=diagnostics))
    text = _item(d, "exclusion_restriction").evidence[0].text
    assert text.startswith("No over-identification test could be computed")
    with_test = _item(_build(_full()), "exclusion_restriction").evidence[0].text
    assert "Hansen J" in with_test


def test_weak_iv_link_only_when_computed() -> None:
    results = example_results(weak_iv=rs.NotApplicable(reason="two endogenous regressors"))
    ids = [e.section_id for e in _item(_build(_full(), results), "relevance").evidence]
    assert "weak-iv-robust" not in ids
    assert "weak-iv-robust" in [e.section_id for e in _item(_build(_full()), "relevance").evidence]


def test_statements_use_the_model_labels_and_agree_in_number() -> None:
    results = example_results()
    d = _build(_full(), results)
    labels = results.model.labels
    exclusion = _item(d, "exclusion_restriction").statement
    for name in ("maths_score", "tutoring_hours", "voucher_won", "distance_km"):
        assert labels[name] in exclusion
    assert "The instruments" in exclusion and " affect " in exclusion
    one = results.model.model_copy(
        update={"instruments": ["voucher_won"], "n_instruments": 1, "overidentification_degree": 0}
    )
    single = _build(_full(), example_results(model=one))
    statement = _item(single, "relevance").statement
    assert statement.startswith("The instrument \u2014 voucher lottery win \u2014 shifts ")
    assert "distance" not in statement


def test_arguments_are_quoted_verbatim() -> None:
    text = (
        'Winners\' hours rose "sharply" <script>alert(1)</script> & more;\n'
        "  indented line  with  spaces, and non-ASCII: \u00e9l\u00e8ve \u2264 1."
    )
    refs = ["Smith & Jones (invented), p. <12>", "Second reference"]
    d = _build(AssumptionsSection(exclusion_restriction=Argument(argument=text, references=refs)))
    item = _item(d, "exclusion_restriction")
    assert item.argument == text
    assert item.references == refs


def test_demo_spec_leaves_monotonicity_without_argument() -> None:
    assumptions = load_spec(DEMO_SPEC).spec.assumptions
    assert assumptions.late_claimed
    assert assumptions.monotonicity is None
    d = _build(assumptions)
    assert (d.stated, d.total) == (3, 4)
    independence = _item(d, "independence")
    assert independence.argument is not None
    assert "drawn at random" in independence.argument
    assert independence.references
