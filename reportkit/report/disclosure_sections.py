"""What the section "What the data cannot tell you" shows, chosen in Python.

The identifying assumptions come from ``StudyResults.disclosures`` (built by
``reportkit.disclosures``). Here each evidence link is resolved to the title of the section
it points to (an id that is not a section of the appendix is an error, not a dead link), a
missing argument is paired with the spec key that would hold it, and the count line of
"At a glance" is worded. The template only lays these out; the authors' words stay
verbatim and are escaped by the environment like all other text.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

from reportkit.results import AssumptionDisclosure, Disclosures

# What the data can do about an assumption, as the table shows it.
TESTABLE_LABELS = {"yes": "Yes", "partly": "Partly", "no": "No"}
# Keys of the spec's ``assumptions`` section that hold an argument (the others are additional).
STANDARD_KEYS = ("relevance", "independence", "exclusion_restriction", "monotonicity")


@dataclass(frozen=True)
class EvidenceView:
    """A link to a section of the appendix and what it shows about the assumption."""

    section_id: str
    section_title: str
    text: str


@dataclass(frozen=True)
class AssumptionView:
    item: AssumptionDisclosure
    testable_label: str
    evidence: list[EvidenceView]
    spec_key: str | None = None
    """Where the missing argument would go in the spec (None for additional assumptions)."""


@dataclass(frozen=True)
class DisclosuresView:
    intro: list[str]
    items: list[AssumptionView]
    closing: list[str]
    glance: str
    missing_names: list[str]


def disclosure_glance(disclosures: Disclosures) -> str:
    """The line of "At a glance": how many identifying assumptions lack an argument."""
    total = disclosures.total
    missing = total - disclosures.stated
    if total == 0:
        raise ValueError("the disclosures list no identifying assumption; nothing to count")
    if missing == 0:
        if total == 1:
            return "The 1 identifying assumption has a stated argument"
        return f"All {total} identifying assumptions have a stated argument"
    verb = "has" if missing == 1 else "have"
    return f"{missing} of {total} identifying assumptions {verb} no stated argument"


def disclosures_view(
    disclosures: Disclosures, section_titles: Mapping[str, str]
) -> DisclosuresView:
    """The section's content: evidence links resolved against ``section_titles`` (id -> title).

    The first caution opens the section; the others (what the estimate means, not advice)
    close it, after the assumptions they refer to.
    """
    items = []
    for item in disclosures.items:
        evidence = []
        for link in item.evidence:
            if link.section_id not in section_titles:
                raise ValueError(
                    f"the disclosure of '{item.name}' links to a section '{link.section_id}' "
                    f"that the appendix does not have (sections: {', '.join(section_titles)})"
                )
            evidence.append(
                EvidenceView(link.section_id, section_titles[link.section_id], link.text)
            )
        spec_key = f"assumptions.{item.key}" if item.key in STANDARD_KEYS else None
        items.append(AssumptionView(item, TESTABLE_LABELS[item.testable], evidence, spec_key))
    return DisclosuresView(
        intro=list(disclosures.cautions[:1]),
        items=items,
        closing=list(disclosures.cautions[1:]),
        glance=disclosure_glance(disclosures),
        missing_names=[i.name for i in disclosures.items if i.argument is None],
    )
