"""Table exports for papers: CSV and LaTeX fragments ready to \\input.

Built from the results object only. CSV holds full precision (repr of the float); the
LaTeX fragments hold rounded numbers (3 decimals for coefficients, standard errors in
parentheses) and escape every text that came from the spec or the data.
"""

from __future__ import annotations

import csv
import io

from reportkit.report.specification_sections import (
    Cell,
    Column,
    cross_table,
    table_columns,
)
from reportkit.results import ConfidenceSet, NotApplicable, StudyResults, TestOrNA

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


# --- the cross-specification table -------------------------------------------------------

SPECIFICATION_COLUMNS = [
    "column",
    "specification",
    "quantity",
    "variable",
    "estimate",
    "std_error",
    "ci_lower",
    "ci_upper",
    "statistic",
    "df",
    "p_value",
    "n_obs",
    "covariance",
    "note",
]


def _bound(x: float | None, infinite: str) -> str:
    return infinite if x is None else repr(x)


def _set_rows(cs: ConfidenceSet | NotApplicable) -> list[tuple[str, str, str]]:
    """(ci_lower, ci_upper, note) per piece of a confidence set; unbounded ends as -inf/inf."""
    if isinstance(cs, NotApplicable):
        return [("", "", cs.reason)]
    if not cs.pieces:
        return [("", "", cs.shape)]
    return [(_bound(p.lower, "-inf"), _bound(p.upper, "inf"), cs.shape) for p in cs.pieces]


def _test_row(test: TestOrNA) -> tuple[str, str, str, str]:
    """(statistic, df, p_value, note) of a test."""
    if isinstance(test, NotApplicable):
        return ("", "", "", test.reason)
    return (repr(test.statistic), ";".join(repr(d) for d in test.df), repr(test.p_value), "")


def _column_rows(number: int, column: Column) -> list[list[object]]:
    lead = [number, column.name]
    n_obs = "" if column.n_obs is None else column.n_obs
    if column.reason is not None:
        return [[*lead, "not estimated", "", "", "", "", "", "", "", "", "", "", column.reason]]
    rows: list[list[object]] = []
    for est in column.estimates:
        for c in est.coefficients:
            rows.append(
                [*lead, est.label, c.name, repr(c.estimate), repr(c.std_error), repr(c.ci_lower),
                 repr(c.ci_upper), repr(c.statistic), "", repr(c.p_value), n_obs, est.covariance,
                 ""]
            )  # fmt: skip
    for s in column.strength:
        statistic, df, p_value, note = _test_row(s.first_stage_f)
        rows.append(
            [*lead, "first-stage F", s.endogenous, "", "", "", "", statistic, df, p_value, n_obs,
             s.first_stage_f.covariance, note]
        )  # fmt: skip
        eff = s.effective_f
        rows.append(
            [*lead, "effective F", s.endogenous, "", "", "", "",
             "" if isinstance(eff, NotApplicable) else repr(eff.value), "", "", n_obs,
             "" if isinstance(eff, NotApplicable) else eff.covariance,
             eff.reason if isinstance(eff, NotApplicable) else ""]
        )  # fmt: skip
    ar = column.anderson_rubin
    variable = column.strength[0].endogenous if len(column.strength) == 1 else ""
    for lower, upper, note in _set_rows(ar):
        rows.append(
            [*lead, "Anderson-Rubin set", variable, "", "", lower, upper, "", "", "", n_obs,
             "" if isinstance(ar, NotApplicable) else ar.covariance, note]
        )  # fmt: skip
    for what, test in (("over-identification", column.overid), ("endogeneity", column.endogeneity)):
        statistic, df, p_value, note = _test_row(test)
        name = what if isinstance(test, NotApplicable) else f"{what}: {test.name}"
        covariance = "" if isinstance(test, NotApplicable) else test.covariance
        rows.append(
            [*lead, name, "", "", "", "", "", statistic, df, p_value, n_obs, covariance, note]
        )
    rows.append([*lead, "rows used", "", "", "", "", "", "", "", "", n_obs, column.covariance, ""])
    return rows


def specifications_csv(results: StudyResults) -> str:
    """The cross-specification table at full precision: per column (Main first) one row per
    estimator and coefficient, then its statistics (first-stage and effective F, the
    Anderson-Rubin set one row per piece, over-identification and endogeneity tests, rows
    used). Without further specifications only the Main column is written."""
    rows: list[list[object]] = [list(SPECIFICATION_COLUMNS)]
    for number, column in enumerate(table_columns(results), start=1):
        rows += _column_rows(number, column)
    return _csv(rows)


MINUS_INFINITY = r"$-\infty$"
PLUS_INFINITY = r"$\infty$"
SET_UNION = r" $\cup$ "


def _latex_piece(lower: float | None, upper: float | None) -> str:
    left = "(" + MINUS_INFINITY if lower is None else "[" + _f3(lower)
    right = PLUS_INFINITY + ")" if upper is None else _f3(upper) + "]"
    return f"{left}, {right}"


def _latex_cell(cell: Cell) -> str:
    """One cell of the LaTeX table (an 'estimate' cell's standard error goes on the next line)."""
    if cell.kind == "estimate" and cell.value is not None:
        return _f3(cell.value)
    if cell.kind == "number" and cell.value is not None:
        return f"{cell.value:.2f}"
    if cell.kind == "interval" and cell.value is not None and cell.upper is not None:
        return f"[{_f3(cell.value)}, {_f3(cell.upper)}]"
    if cell.kind == "p" and cell.value is not None:
        return "$<$0.001" if cell.value < 0.001 else f"{cell.value:.3f}"
    if cell.kind == "count" and cell.count is not None:
        return f"{cell.count:,}".replace(",", "{,}")
    if cell.kind == "set" and cell.confidence_set is not None:
        cs = cell.confidence_set
        if cs.shape in ("whole_line", "empty"):
            return "all values" if cs.shape == "whole_line" else "empty"
        return SET_UNION.join(_latex_piece(p.lower, p.upper) for p in cs.pieces)
    if cell.kind in ("text", "same"):
        return latex_escape(cell.text)
    return "n/a"


def _standard_errors(cells: tuple[Cell, ...]) -> list[str]:
    return [
        f"({_f3(c.std_error)})" if c.kind == "estimate" and c.std_error is not None else ""
        for c in cells
    ]


def specifications_latex(results: StudyResults) -> str:
    """The cross-specification table in a paper's layout: one column per specification
    (Main first), coefficients with standard errors in parentheses below, then the
    statistics and what each column changes. Reasons for 'n/a' cells are comment lines.
    Without further specifications only the Main column is written."""
    table = cross_table(results)
    k = len(table.columns)
    lines = [
        "% Estimates across specifications written by reportkit; standard errors in parentheses.",
        *(f"% n/a ({note.marker}): {' '.join(note.text.split())}" for note in table.notes),
        "\\begin{tabular}{l" + "c" * k + "}",
        "\\hline",
        _row("", [f"({i})" for i in range(1, k + 1)]),
        _row("", [latex_escape(name) for name in table.columns]),
        "\\hline",
    ]
    for group in table.groups:
        if group.key in ("statistics", "settings"):
            lines.append("\\hline")
        for i, row in enumerate(group.rows):
            # a headline group's first row is the coefficient: the group names it
            title = group.title if group.key.startswith("headline") and i == 0 else row.title
            lines.append(_row(latex_escape(title), [_latex_cell(c) for c in row.cells]))
            if any(c.kind == "estimate" for c in row.cells):
                lines.append(_row("", _standard_errors(row.cells)))
    lines += ["\\hline", "\\end{tabular}"]
    return "\n".join(lines) + "\n"


def table_files(results: StudyResults) -> dict[str, str]:
    """File name (under tables/) -> content."""
    return {
        "estimates.csv": estimates_csv(results),
        "estimates.tex": estimates_latex(results),
        "first_stage.csv": first_stage_csv(results),
        "first_stage.tex": first_stage_latex(results),
        "variants.csv": variants_csv(results),
        "variants.tex": variants_latex(results),
        "specifications.csv": specifications_csv(results),
        "specifications.tex": specifications_latex(results),
    }
