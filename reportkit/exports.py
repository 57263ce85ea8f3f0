"""Table exports for papers: CSV and LaTeX fragments ready to \\input.

Built from the results object only. CSV holds full precision (repr of the float); the
LaTeX fragments hold rounded numbers (3 decimals for coefficients, standard errors in
parentheses) and escape every text that came from the spec or the data.
"""

from __future__ import annotations

import csv
import io

from reportkit.results import StudyResults

LATEX_SPECIAL = {
    "\\": r"\textbackslash{}",
    "&": r"\&",
    "%": r"\%",
    "$": r"\$",
    "#": r"\#",
    "_": r"\_",
    "{": r"\{",
    "}": r"\}",
    "~": r"\textasciitilde{}",
    "^": r"\textasciicircum{}",
    "<": r"\textless{}",
    ">": r"\textgreater{}",
}


def latex_escape(text: str) -> str:
    return "".join(LATEX_SPECIAL.get(ch, ch) for ch in text)


def _csv(rows: list[list[object]]) -> str:
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerows(rows)
    return buf.getvalue()


def estimates_csv(results: StudyResults) -> str:
    rows: list[list[object]] = [
        [
            "estimator",
            "variable",
            "estimate",
            "std_error",
            "ci_lower",
            "ci_upper",
            "p_value",
            "n_obs",
            "covariance",
        ]
    ]
    for est in results.estimates:
        for c in est.coefficients:
            rows.append(
                [
                    est.label,
                    c.name,
                    repr(c.estimate),
                    repr(c.std_error),
                    repr(c.ci_lower),
                    repr(c.ci_upper),
                    repr(c.p_value),
                    est.n_obs,
                    est.covariance,
                ]
            )
    return _csv(rows)


def first_stage_csv(results: StudyResults) -> str:
    rows: list[list[object]] = [
        [
            "equation",
            "instrument",
            "estimate",
            "std_error",
            "p_value",
            "partial_r2",
            "f_main_covariance",
            "f_classical",
        ]
    ]
    for fs in results.first_stages:
        for c in fs.coefficients:
            rows.append(
                [
                    f"first stage: {fs.endogenous}",
                    c.instrument,
                    repr(c.estimate),
                    repr(c.std_error),
                    repr(c.p_value),
                    repr(fs.partial_r2),
                    repr(fs.f_main.statistic),
                    repr(fs.f_classical.statistic),
                ]
            )
    for c in results.reduced_form.coefficients:
        rows.append(
            [
                f"reduced form: {results.model.outcome}",
                c.instrument,
                repr(c.estimate),
                repr(c.std_error),
                repr(c.p_value),
                "",
                repr(results.reduced_form.joint_test.statistic),
                "",
            ]
        )
    return _csv(rows)


def _f3(x: float) -> str:
    return f"{x:.3f}"


def estimates_latex(results: StudyResults) -> str:
    """A tabular environment: one column per estimator, SE in parentheses below."""
    ests = results.estimates
    lines = [
        "% Main estimates written by reportkit; standard errors in parentheses.",
        "\\begin{tabular}{l" + "c" * len(ests) + "}",
        "\\hline",
        " & " + " & ".join(latex_escape(e.label) for e in ests) + " \\\\",
        "\\hline",
    ]
    for j, name in enumerate(results.model.endogenous):
        label = latex_escape(results.model.labels.get(name, name))
        lines.append(
            label + " & " + " & ".join(_f3(e.coefficients[j].estimate) for e in ests) + " \\\\"
        )
        lines.append(
            " & " + " & ".join(f"({_f3(e.coefficients[j].std_error)})" for e in ests) + " \\\\"
        )
    lines.append("\\hline")
    lines.append(
        "Observations & " + " & ".join(f"{e.n_obs:,}".replace(",", "{,}") for e in ests) + " \\\\"
    )
    lines.append("\\hline")
    lines.append("\\end{tabular}")
    return "\n".join(lines) + "\n"


def first_stage_latex(results: StudyResults) -> str:
    fss = results.first_stages
    lines = [
        "% First stages written by reportkit; standard errors in parentheses.",
        "\\begin{tabular}{l" + "c" * len(fss) + "}",
        "\\hline",
        " & "
        + " & ".join(
            latex_escape(results.model.labels.get(f.endogenous, f.endogenous)) for f in fss
        )
        + " \\\\",
        "\\hline",
    ]
    for i, name in enumerate(results.model.instruments):
        label = latex_escape(results.model.labels.get(name, name))
        lines.append(
            label + " & " + " & ".join(_f3(f.coefficients[i].estimate) for f in fss) + " \\\\"
        )
        lines.append(
            " & " + " & ".join(f"({_f3(f.coefficients[i].std_error)})" for f in fss) + " \\\\"
        )
    lines.append("\\hline")
    lines.append("Partial $R^2$ & " + " & ".join(_f3(f.partial_r2) for f in fss) + " \\\\")
    lines.append(
        "F (main covariance) & " + " & ".join(f"{f.f_main.statistic:.2f}" for f in fss) + " \\\\"
    )
    lines.append("\\hline")
    lines.append("\\end{tabular}")
    return "\n".join(lines) + "\n"


def table_files(results: StudyResults) -> dict[str, str]:
    """File name (under tables/) -> content."""
    return {
        "estimates.csv": estimates_csv(results),
        "estimates.tex": estimates_latex(results),
        "first_stage.csv": first_stage_csv(results),
        "first_stage.tex": first_stage_latex(results),
    }
