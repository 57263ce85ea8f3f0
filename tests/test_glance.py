"""The robustness line of "At a glance": the range of the linear variants, from the results."""

from __future__ import annotations

from results_example import example_results
from robustness_example import example_robustness

from reportkit.report import formatting
from reportkit.report.glance import robustness_glance
from reportkit.results import NotApplicable


def test_range_counts_only_linear_variants_of_the_coefficient() -> None:
    rob = example_robustness()
    text = robustness_glance(example_results(robustness=rob))
    main = rob.main[0]
    values = [
        v.estimate
        for variant in rob.variants
        if variant.group != "binary" and not isinstance(variant.values, NotApplicable)
        for v in variant.values
        if v.quantity == main.quantity
    ]
    assert f"Across {len(values)} variants" in text
    assert f"from {formatting.fmt_num(min(values))} to {formatting.fmt_num(max(values))}" in text
    binary = [
        v.estimate
        for variant in rob.variants
        if variant.group == "binary" and not isinstance(variant.values, NotApplicable)
        for v in variant.values
    ]
    assert binary and all(formatting.fmt_num(b) not in text.split("(main")[0] for b in binary)
    if isinstance(rob.wild_bootstrap, list):
        assert formatting.fmt_p(rob.wild_bootstrap[0].p_value) in text


def test_not_computed_says_why() -> None:
    results = example_results(robustness=NotApplicable(reason="the main 2SLS is not defined"))
    assert robustness_glance(results) == "not computed: the main 2SLS is not defined"
