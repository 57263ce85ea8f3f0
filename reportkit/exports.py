"""Table exports for papers: CSV and LaTeX fragments ready to \\input.

Built from the results object only. CSV holds full precision (repr of the float); the
LaTeX fragments hold rounded numbers (3 decimals for coefficients, standard errors in
parentheses) and escape every text that came from the spec or the data.
"""

from __future__ import annotations

import csv
import io

from reportkit.results import NotApplicable, StudyResults

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


def _row(label: str, cells: list[str]) -> str:
    return label + " & " + " & ".join(cells) + " \\\\"


def _latex_table(
    what: str,
    headers: list[str],
    coefficient_rows: list[tuple[str, list[tuple[float, float]]]],
    footer_rows: list[tuple[str, list[str]]],
) -> str:
    """A tabular: one column per header, each coefficient with its SE in parentheses below."""
    lines = [
        f"% {what} written by reportkit; standard errors in parentheses.",
        "\\begin{tabular}{l" + "c" * len(headers) + "}",
        "\\hline",
        _row("", [latex_escape(h) for h in headers]),
        "\\hline",
    ]
    for label, cells in coefficient_rows:
        lines.append(_row(latex_escape(label), [_f3(est) for est, _ in cells]))
        lines.append(_row("", [f"({_f3(se)})" for _, se in cells]))
    lines.append("\\hline")
    lines += [_row(label, cells) for label, cells in footer_rows]
    lines += ["\\hline", "\\end{tabular}"]
    return "\n".join(lines) + "\n"


def estimates_latex(results: StudyResults) -> str:
    """One column per estimator, SE in parentheses below."""
    ests = results.estimates
    labels = results.model.labels
    return _latex_table(
        "Main estimates",
        [e.label for e in ests],
        [
            (
                labels.get(name, name),
                [(e.coefficients[j].estimate, e.coefficients[j].std_error) for e in ests],
            )
            for j, name in enumerate(results.model.endogenous)
        ],
        [("Observations", [f"{e.n_obs:,}".replace(",", "{,}") for e in ests])],
    )


def first_stage_latex(results: StudyResults) -> str:
    """One column per endogenous regressor, instrument coefficients with SE below."""
    fss = results.first_stages
    labels = results.model.labels
    return _latex_table(
        "First stages",
        [labels.get(f.endogenous, f.endogenous) for f in fss],
        [
            (
                labels.get(name, name),
                [(f.coefficients[i].estimate, f.coefficients[i].std_error) for f in fss],
            )
            for i, name in enumerate(results.model.instruments)
        ],
        [
            ("Partial $R^2$", [_f3(f.partial_r2) for f in fss]),
            ("F (main covariance)", [f"{f.f_main.statistic:.2f}" for f in fss]),
        ],
    )


def _num(x: float | None) -> str:
    return "" if x is None else repr(x)


def variants_csv(results: StudyResults) -> str:
    """Every robustness variant, one row per variant and quantity (the main 2SLS first)."""
    rows: list[list[object]] = [
        [
            "key",
            "group",
            "variant",
            "quantity",
            "estimate",
            "std_error",
            "ci_lower",
            "ci_upper",
            "p_value",
            "n_obs",
            "estimand",
            "covariance",
            "not_applicable_reason",
        ]
    ]
    rob = results.robustness
    if isinstance(rob, NotApplicable):
        return _csv(rows)
    main_n = results.sample.rows_used
    for v in rob.main:
        rows.append(
            ["main:2sls", "main", "2SLS (main)", v.quantity, repr(v.estimate), _num(v.std_error),
             _num(v.ci_lower), _num(v.ci_upper), _num(v.p_value), main_n, "coefficient",
             results.conventions.covariance_description, ""]
        )  # fmt: skip
    for variant in rob.variants:
        common = [variant.key, variant.group, variant.name]
        if isinstance(variant.values, NotApplicable):
            rows.append(
                [*common, "", "", "", "", "", "", variant.n_obs or "", variant.estimand,
                 variant.covariance, variant.values.reason]
            )  # fmt: skip
            continue
        for v in variant.values:
            rows.append(
                [*common, v.quantity, repr(v.estimate), _num(v.std_error), _num(v.ci_lower),
                 _num(v.ci_upper), _num(v.p_value), variant.n_obs or "", variant.estimand,
                 variant.covariance, ""]
            )  # fmt: skip
    return _csv(rows)


def variants_latex(results: StudyResults) -> str:
    """Rows: the main 2SLS and each variant; columns: one per endogenous regressor."""
    rob = results.robustness
    labels = results.model.labels
    names = results.model.endogenous
    headers = [labels.get(n, n) for n in names]
    if isinstance(rob, NotApplicable):
        return f"% Robustness variants not computed: {rob.reason}\n"
    coefficient_rows: list[tuple[str, list[tuple[float, float]]]] = [
        ("2SLS (main)", [(v.estimate, v.std_error or float("nan")) for v in rob.main])
    ]
    notes: list[tuple[str, list[str]]] = []
    for variant in rob.variants:
        values = variant.values
        linear = not isinstance(values, NotApplicable) and [v.quantity for v in values] == names
        if linear and not isinstance(values, NotApplicable):
            coefficient_rows.append(
                (variant.name, [(v.estimate, v.std_error or float("nan")) for v in values])
            )
        elif isinstance(values, NotApplicable):
            notes.append((latex_escape(variant.name), ["n/a"] * len(names)))
    return _latex_table("Robustness variants (linear models)", headers, coefficient_rows, notes)


def table_files(results: StudyResults) -> dict[str, str]:
    """File name (under tables/) -> content."""
    return {
        "estimates.csv": estimates_csv(results),
        "estimates.tex": estimates_latex(results),
        "first_stage.csv": first_stage_csv(results),
        "first_stage.tex": first_stage_latex(results),
        "variants.csv": variants_csv(results),
        "variants.tex": variants_latex(results),
    }
