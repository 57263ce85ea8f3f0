"""Disclosures: the identifying assumptions, what the data can show about each, and the
authors' own argument for it.

An IV estimate is causal only under assumptions that the data cannot fully check:
relevance (testable), independence (partly: balance and placebo outcomes bear on it),
the exclusion restriction (not testable: over-identification tests compare instruments
with each other) and, when the estimate is read as a local average treatment effect,
monotonicity (Imbens and Angrist 1994; Angrist, Imbens and Rubin 1996). This stage turns
the spec's ``assumptions`` section and the computed diagnostics into one
``Disclosures`` object: each assumption with a plain statement for this model, whether
data can test it and why, links to the sections of the appendix that bear on it, and the
authors' argument quoted verbatim (``None`` when they gave none, so that the appendix can
show the gap). It computes no statistics and never claims a check that was not run.

The section ids below are the anchors of the appendix (``reportkit.report.html.SECTIONS``);
they are repeated here, not imported, so that computing does not depend on rendering. A test
checks that they stay in step.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Literal

from reportkit.results import (
    AssumptionDisclosure,
    Balance,
    ComplierAnalysis,
    Diagnostics,
    Disclosures,
    EvidenceLink,
    LateImplication,
    ModelDescription,
    NotApplicable,
    Strength,
    TestResult,
    WeakIVRobust,
)
from reportkit.spec.models import Argument, AssumptionsSection

FIRST_STAGE_ID = "first-stage"
STRENGTH_ID = "instrument-strength"
WEAK_IV_ID = "weak-iv-robust"
BALANCE_ID = "as-good-as-random"
SPECIFICATION_TESTS_ID = "specification-tests"
# Every section id a disclosure may link to.
EVIDENCE_SECTION_IDS = (FIRST_STAGE_ID, STRENGTH_ID, WEAK_IV_ID, BALANCE_ID, SPECIFICATION_TESTS_ID)
# Subsections of the balance section a disclosure may link to (the anchors of
# ``reportkit.report.balance_sections``, repeated here; a test checks they stay in step).
FALSIFICATION_ID = "falsification-subsamples"
COMPLIERS_ID = "compliers"
EVIDENCE_SUBSECTION_IDS = (FALSIFICATION_ID, COMPLIERS_ID)

NOT_PROOF_CAUTION = (
    "The diagnostics in this appendix cannot establish that an instrument is valid. They are "
    "evidence about the data; the claim that the instruments identify a causal effect rests "
    "on the assumptions listed here, and for most of them on the authors' argument alone."
)
RELEVANCE_ONLY_CAUTION = (
    "A strong first stage shows relevance only. A large F says the instruments move the "
    "endogenous regressor; it says nothing about whether they are excluded or independent."
)
LATE_CAUTION = (
    "Under these assumptions and monotonicity, 2SLS estimates a local average treatment "
    "effect (LATE): the average effect for the compliers, whose treatment the instruments "
    "change (Imbens and Angrist 1994). With several instruments or a treatment that takes "
    "many values it is a weighted average of such local effects (Angrist and Imbens 1995). "
    "It need not equal the average effect in the whole population."
)
HOMOGENEOUS_CAUTION = (
    "The authors do not read the estimate as a local effect for compliers. Without "
    "monotonicity, 2SLS recovers the causal effect only if that effect is the same for "
    "every unit (homogeneous effects); if effects differ, the estimate is a weighted average "
    "whose weights need not all be positive."
)
NOT_ADVICE_CAUTION = (
    "This appendix is not advice. It documents one specification and the evidence the data "
    "give about it; whether the assumptions hold is for the authors to argue and for "
    "referees and readers to judge."
)


def build_disclosures(
    assumptions: AssumptionsSection,
    *,
    model: ModelDescription,
    strength: Strength,
    weak_iv: WeakIVRobust | NotApplicable,
    diagnostics: Diagnostics,
    balance: Balance | NotApplicable,
) -> Disclosures:
    """One disclosure per identifying assumption, with the authors' arguments and cautions.

    ``model`` gives the labels of the outcome, endogenous regressors and instruments used in
    the statements; the other arguments are the computed parts of the results, used only to
    decide which sections of the appendix hold evidence and to word the links.
    """
    words = _Words.of(model)
    items = [
        _relevance(assumptions.relevance, words, strength, weak_iv),
        _independence(assumptions.independence, words, balance),
        _exclusion(assumptions.exclusion_restriction, words, diagnostics, balance),
    ]
    if assumptions.late_claimed:
        items.append(_monotonicity(assumptions.monotonicity, words, balance))
    for number, extra in enumerate(assumptions.additional, start=1):
        items.append(
            _disclosure(
                f"additional-{number}",
                extra.name,
                statement="An assumption the authors name in addition to the standard ones; "
                "their argument below says what it requires.",
                testable="no",
                why="No check of this assumption is computed in this appendix.",
                evidence=[],
                argument=extra,
            )
        )
    cautions = [
        NOT_PROOF_CAUTION,
        RELEVANCE_ONLY_CAUTION,
        LATE_CAUTION if assumptions.late_claimed else HOMOGENEOUS_CAUTION,
        NOT_ADVICE_CAUTION,
    ]
    return Disclosures(
        items=items,
        stated=sum(item.argument is not None for item in items),
        total=len(items),
        cautions=cautions,
    )


@dataclass(frozen=True)
class _Words:
    """The model's parts in words: labels joined as a sentence does."""

    outcome: str
    endogenous: str
    instruments: str
    n_endogenous: int
    n_instruments: int
    conditional: bool

    @classmethod
    def of(cls, model: ModelDescription) -> _Words:
        if not model.endogenous or not model.instruments:
            raise ValueError(
                "build_disclosures needs at least one endogenous regressor and one instrument "
                "in the model description"
            )
        return cls(
            outcome=_label(model.outcome, model.labels),
            endogenous=_join([_label(n, model.labels) for n in model.endogenous]),
            instruments=_join([_label(n, model.labels) for n in model.instruments]),
            n_endogenous=len(model.endogenous),
            n_instruments=len(model.instruments),
            conditional=bool(model.controls or model.fixed_effects),
        )

    def subject(self, singular: str, plural: str) -> str:
        """'The instrument - x - shifts' or 'The instruments - x and y - shift' (dashes, as
        labels often hold parentheses)."""
        if self.n_instruments == 1:
            return f"The instrument \u2014 {self.instruments} \u2014 {singular}"
        return f"The instruments \u2014 {self.instruments} \u2014 {plural}"

    @property
    def given_controls(self) -> str:
        return ", given the controls and fixed effects" if self.conditional else ""


def _relevance(
    argument: Argument | None,
    words: _Words,
    strength: Strength,
    weak_iv: WeakIVRobust | NotApplicable,
) -> AssumptionDisclosure:
    if words.n_endogenous == 1:
        statement = f"{words.subject('shifts', 'shift')} {words.endogenous}{words.given_controls}."
    else:
        statement = (
            f"{words.subject('shifts', 'shift')} the endogenous regressors "
            f"({words.endogenous}){words.given_controls}, and do so in enough independent ways "
            "to separate each of them: the first-stage coefficients have full rank."
        )
    evidence = [
        EvidenceLink(
            section_id=FIRST_STAGE_ID,
            text="The instruments' first-stage coefficients, first-stage F and partial "
            f"R-squared measure how much they move {words.endogenous}.",
        ),
        EvidenceLink(
            section_id=STRENGTH_ID,
            text="Strength graded against today's standards (robust and effective F with "
            f"their critical values); the verdict here: {strength.verdict.level}.",
        ),
    ]
    if isinstance(weak_iv, WeakIVRobust):
        evidence.append(
            EvidenceLink(
                section_id=WEAK_IV_ID,
                text="Confidence sets that stay valid however weak the instruments are, "
                "so inference does not lean on relevance being strong.",
            )
        )
    return _disclosure(
        "relevance",
        "Relevance",
        statement=statement,
        testable="yes",
        why="Relevance is a statement about observed variables: the first stage "
        "estimates it directly, and weak relevance is measured by the strength statistics.",
        evidence=evidence,
        argument=argument,
    )


def _independence(
    argument: Argument | None, words: _Words, balance: Balance | NotApplicable
) -> AssumptionDisclosure:
    statement = (
        f"{words.subject('is', 'are')} as good as randomly assigned"
        f"{words.given_controls}: unrelated to the unobserved causes of {words.outcome} and of "
        f"{words.endogenous}."
    )
    why = (
        "If the instruments were as good as random, characteristics fixed before they "
        "could act would be balanced across their values and outcomes measured before "
        "treatment would not move with them. Such checks can cast doubt on independence but "
        "cannot establish it, because the unobserved causes cannot be checked."
    )
    evidence: list[EvidenceLink] = []
    if isinstance(balance, NotApplicable):
        why += (
            " No such evidence is shown in this appendix: covariate balance was not "
            f"computed ({balance.reason.rstrip('.')})."
        )
    else:
        parts = []
        if balance.rows:
            parts.append(f"{_count(len(balance.rows), 'covariate')} compared across values")
        if balance.placebo:
            placebo = _count(len(balance.placebo), "placebo outcome")
            parts.append(f"{placebo} that the instruments should not move")
        shown = _join(parts) if parts else "the balance checks"
        evidence.append(
            EvidenceLink(
                section_id=BALANCE_ID,
                text=f"Balance on observables: {shown}.",
            )
        )
    return _disclosure(
        "independence",
        "Independence",
        statement=statement,
        testable="partly",
        why=why,
        evidence=evidence,
        argument=argument,
    )


def _exclusion(
    argument: Argument | None,
    words: _Words,
    diagnostics: Diagnostics,
    balance: Balance | NotApplicable,
) -> AssumptionDisclosure:
    statement = (
        f"{words.subject('affects', 'affect')} {words.outcome} only through "
        f"{words.endogenous}, by no other path{words.given_controls}."
    )
    overid = [
        test
        for test in (diagnostics.hansen_j, diagnostics.sargan, diagnostics.basmann)
        if isinstance(test, TestResult)
    ]
    if overid:
        spec_text = (
            f"Over-identification tests ({_join([t.name for t in overid])}) compare the "
            "instruments with each other: they can detect instruments that disagree, not a "
            "violation that all instruments share, and a non-rejection does not show that "
            "the restriction holds."
        )
    else:
        spec_text = (
            "No over-identification test could be computed for this model (see the notes "
            "there), and none could detect a violation shared by all instruments."
        )
    evidence = [EvidenceLink(section_id=SPECIFICATION_TESTS_ID, text=spec_text)]
    if isinstance(balance, Balance) and balance.placebo:
        evidence.append(
            EvidenceLink(
                section_id=BALANCE_ID,
                text="Placebo outcomes: an effect of the instruments on an outcome they "
                "cannot have caused casts doubt on the exclusion restriction (or on "
                "independence); no effect does not establish it.",
            )
        )
    if isinstance(balance, Balance) and balance.falsification:
        subsamples = _count(len(balance.falsification), "falsification subsample")
        evidence.append(
            EvidenceLink(
                section_id=FALSIFICATION_ID,
                text=f"{subsamples} of rows where the instruments should not move "
                f"{words.endogenous}: there, a reduced form far from zero is evidence against "
                "the exclusion restriction; one near zero does not establish it.",
            )
        )
    return _disclosure(
        "exclusion_restriction",
        "Exclusion restriction",
        statement=statement,
        testable="no",
        why=(
            "It concerns the unobserved causes of the outcome. Over-identification tests "
            "can only compare the instruments with each other, so they cannot detect a "
            "violation the instruments share, and in a just-identified model there is nothing "
            "to compare. Placebo outcomes can only cast doubt on it."
        ),
        evidence=evidence,
        argument=argument,
    )


def _monotonicity(
    argument: Argument | None, words: _Words, balance: Balance | NotApplicable
) -> AssumptionDisclosure:
    why = (
        "It concerns how each unit would respond to other instrument values, which "
        "is never observed. It has testable implications in some designs (for a binary "
        "treatment, e.g. Kitagawa 2015), but they are not checked in this appendix yet."
    )
    evidence: list[EvidenceLink] = []
    compliers = balance.compliers if isinstance(balance, Balance) else None
    if isinstance(compliers, ComplierAnalysis):
        implication = compliers.late_implication
        text = (
            "Shares of compliers, always-takers and never-takers (which describe groups of "
            "units only under monotonicity)"
        )
        if isinstance(implication, LateImplication):
            text += (
                " and the testable implication of the LATE assumptions (Kitagawa 2015): "
                "negative implied complier masses would count against monotonicity, exclusion "
                "or independence, while finding none does not establish monotonicity."
            )
            why = (
                "It concerns how each unit would respond to other instrument values, which "
                "is never observed. For a binary treatment and instrument it has a testable "
                "implication (Kitagawa 2015), checked in this appendix: some violations break "
                "it, but passing does not establish monotonicity."
            )
        else:
            text += (
                "; the testable implication of the LATE assumptions could not be checked "
                f"({implication.reason.rstrip('.')})."
            )
        evidence.append(EvidenceLink(section_id=COMPLIERS_ID, text=text))
    return _disclosure(
        "monotonicity",
        "Monotonicity",
        statement=(
            f"{words.subject('moves', 'move')} every unit's "
            f"{words.endogenous} in the same direction, or not at all: no one is pushed the "
            "other way (no defiers)."
        ),
        testable="no",
        why=why,
        evidence=evidence,
        argument=argument,
    )


def _disclosure(
    key: str,
    name: str,
    *,
    statement: str,
    testable: Literal["no", "partly", "yes"],
    why: str,
    evidence: list[EvidenceLink],
    argument: Argument | None,
) -> AssumptionDisclosure:
    """One assumption with the authors' argument quoted verbatim (None when missing)."""
    return AssumptionDisclosure(
        key=key,
        name=name,
        statement=statement,
        testable=testable,
        testable_why=why,
        evidence=evidence,
        argument=None if argument is None else argument.argument,
        references=[] if argument is None else list(argument.references),
    )


def _label(name: str, labels: Mapping[str, str]) -> str:
    text = labels.get(name, "")
    return text if text.strip() else name


def _join(words: Sequence[str]) -> str:
    if len(words) <= 1:
        return "".join(words)
    return ", ".join(words[:-1]) + " and " + words[-1]


def _count(n: int, noun: str) -> str:
    return f"{n} {noun}" if n == 1 else f"{n} {noun}s"
