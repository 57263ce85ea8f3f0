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
