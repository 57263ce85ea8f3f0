"""Lines of "At a glance" that summarise later sections: robustness variants, at a glance.

Each line is one or two plain sentences built in Python from the results, ending with a
link to the section that holds the detail (the template adds the link).
"""

from __future__ import annotations

from reportkit.report import formatting
from reportkit.results import NotApplicable, StudyResults


def robustness_glance(results: StudyResults) -> str:
    """How far the linear variants move the estimate, and the wild bootstrap p-value."""
    rob = results.robustness
    if isinstance(rob, NotApplicable):
        return f"not computed: {rob.reason}"
    labels = results.model.labels
    parts = []
    for main in rob.main:
        values = [
            value
            for variant in rob.variants
            # binary-outcome models estimate other quantities, on another outcome
            if variant.group != "binary" and not isinstance(variant.values, NotApplicable)
            for value in variant.values
            if value.quantity == main.quantity
        ]
        label = labels.get(main.quantity, main.quantity)
        if not values:
            parts.append(f"No variant of the estimate for {label} could be computed.")
            continue
        low = min(v.estimate for v in values)
        high = max(v.estimate for v in values)
        excluding = sum(
            1
            for v in values
            if v.ci_lower is not None
            and v.ci_upper is not None
            and (v.ci_lower > 0 or v.ci_upper < 0)
        )
        with_interval = sum(1 for v in values if v.ci_lower is not None and v.ci_upper is not None)
        parts.append(
            f"Across {len(values)} variants the estimate for {label} ranges from "
            f"{formatting.fmt_num(low)} to {formatting.fmt_num(high)} (main 2SLS "
            f"{formatting.fmt_num(main.estimate)}); {excluding} of {with_interval} intervals "
            "exclude zero."
        )
    if isinstance(rob.wild_bootstrap, list):
        for boot in rob.wild_bootstrap:
            unit = "cluster" if boot.level == "cluster" else "observation"
            parts.append(
                f"Wild bootstrap ({unit} level, {boot.draws:,} draws) p-value for zero effect "
                f"of {boot.label}: {formatting.fmt_p(boot.p_value)}."
            )
    return " ".join(parts)
