"""Table exports: CSV at full precision, LaTeX rounded and escaped, both from the results."""

from __future__ import annotations

import csv
import io

from results_example import example_results

from reportkit.exports import estimates_csv, estimates_latex, first_stage_latex, latex_escape


def test_csv_holds_every_estimate_at_full_precision() -> None:
    results = example_results()
    rows = list(csv.DictReader(io.StringIO(estimates_csv(results))))
    assert len(rows) == sum(len(e.coefficients) for e in results.estimates)
    for row, est in zip(rows, results.estimates, strict=True):
        c = est.coefficients[0]
        assert float(row["estimate"]) == c.estimate and float(row["std_error"]) == c.std_error


def test_latex_rounds_to_three_decimals_with_se_below() -> None:
    results = example_results()
    tex = estimates_latex(results)
    cells = [f"{e.coefficients[0].estimate:.3f}" for e in results.estimates]
    ses = [f"({e.coefficients[0].std_error:.3f})" for e in results.estimates]
    assert " & ".join(cells) in tex and " & ".join(ses) in tex
    assert tex.startswith("%") and "\\begin{tabular}{l" + "c" * len(results.estimates) + "}" in tex
    fs = first_stage_latex(results)
    assert f"{results.first_stages[0].f_main.statistic:.2f}" in fs


def test_latex_escapes_text_from_the_spec() -> None:
    assert latex_escape("a_b & 50% #1 {x}") == r"a\_b \& 50\% \#1 \{x\}"
    results = example_results()
    model = results.model.model_copy(update={"labels": {"tutoring_hours": "hours & $cost_1"}})
    tex = estimates_latex(
        results.model_copy(update={}) and results.model_copy(update={"model": model})
    )
    assert r"hours \& \$cost\_1" in tex


def test_variants_csv_lists_every_variant_and_reason() -> None:
    from robustness_example import example_robustness

    from reportkit.exports import variants_csv, variants_latex
    from reportkit.results import NotApplicable

    results = example_results(robustness=example_robustness())
    rob = results.robustness
    assert not isinstance(rob, NotApplicable)
    rows = list(csv.DictReader(io.StringIO(variants_csv(results))))
    expected = len(rob.main) + sum(
        1 if isinstance(v.values, NotApplicable) else len(v.values) for v in rob.variants
    )
    assert len(rows) == expected
    assert rows[0]["key"] == "main:2sls" and float(rows[0]["estimate"]) == rob.main[0].estimate
    for variant in rob.variants:
        mine = [r for r in rows if r["key"] == variant.key]
        if isinstance(variant.values, NotApplicable):
            assert mine[0]["not_applicable_reason"] == variant.values.reason
            assert mine[0]["estimate"] == ""
        else:
            assert [float(r["estimate"]) for r in mine] == [v.estimate for v in variant.values]
    tex = variants_latex(results)
    assert f"{rob.main[0].estimate:.3f}" in tex and "n/a" in tex


def test_variants_export_when_not_computed() -> None:
    from reportkit.exports import variants_csv, variants_latex
    from reportkit.results import NotApplicable

    results = example_results(robustness=NotApplicable(reason="none asked"))
    assert variants_csv(results).count("\n") == 1  # the header only
    assert "none asked" in variants_latex(results)
