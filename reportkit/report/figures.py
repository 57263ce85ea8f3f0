"""Figures of the appendix, drawn with matplotlib from a ``StudyResults`` only.

Two kinds, one figure per endogenous regressor each:

- the first stage: binned means of the endogenous regressor against each instrument
  (both residualised, Frisch-Waugh-Lovell), with the fitted first-stage line;
- the estimates: each estimator's point estimate with its confidence interval.

And one figure of weak-instrument-robust inference, when it was computed: the
Anderson-Rubin (Anderson & Rubin, 1949) and, when present, the conditional likelihood
ratio (Moreira, 2003) p-values against the hypothesised coefficient, with the test level
drawn as a line and the confidence sets (the values not rejected) shaded.

And one figure of covariate balance, when it was computed: the standardized difference
of each covariate between the last and first group of each instrument, with a band at
|d| <= 0.1 (a common rule of thumb, no source; not a test).

Output is SVG text, byte-identical for the same results: the SVG hash salt is fixed,
the date is left out of the metadata, and figure size, fonts and palette are fixed.
Figures are built on ``matplotlib.figure.Figure`` directly (no pyplot), so no global
figure state is touched and no GUI backend is needed. For HTML and PDF they are used as
``data:`` URIs in ``<img>``: inlined ``<svg>`` makes weasyprint warn on every render.
"""

from __future__ import annotations

import base64
import io
import math
import textwrap
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from reportkit.report import wording
from reportkit.report.formatting import (
    and_join,
    fmt_ci,
    fmt_int,
    fmt_level,
    fmt_num,
    fmt_p,
    fmt_pct,
    fmt_set,
    label,
    upper_first,
)
from reportkit.results import (
    Balance,
    BinnedScatter,
    Coefficient,
    ConfidenceSet,
    EstimatorResult,
    FirstStage,
    NotApplicable,
    PValueCurve,
    SetOrNA,
    StudyResults,
    WeakIVRobust,
)

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

# Our palette: calm, print-friendly, distinguishable in greyscale by lightness.
INK = "#2b3640"  # text and axes
GRID = "#dde3e6"
ZERO_LINE = "#9aa5ab"
POINTS = "#3d7c8c"  # binned means (deep teal)
FIT_LINE = "#b5763a"  # fitted first-stage line (muted amber)
OLS_COLOUR = "#7d8a93"  # OLS: slate, the non-causal benchmark
IV_COLOURS = {"2sls": "#2f5f73", "liml": "#5b8c6e", "gmm": "#8a6a9a"}  # blue, sage, heather

AR_COLOUR = IV_COLOURS["2sls"]  # Anderson-Rubin p-value curve
CLR_COLOUR = FIT_LINE  # conditional likelihood ratio p-value curve
AR_SET_FILL = "#dbe8ed"  # shaded Anderson-Rubin set (pale blue-teal)
LEVEL_LINE = "#5f6b73"

ESTIMATOR_NAMES = {"ols": "OLS", "2sls": "2SLS", "liml": "LIML", "gmm": "GMM"}
ESTIMATOR_ORDER = ("ols", "2sls", "liml", "gmm")

PANEL_SIZE = (3.4, 3.1)  # inches, one first-stage panel
WRAP_WIDTH = 44  # characters per line of a panel title or axis label
ESTIMATES_WIDTH = 6.4  # inches
ESTIMATES_ROW_HEIGHT = 0.42  # inches per estimator
ESTIMATES_BASE_HEIGHT = 1.3  # inches for axis and margins
CURVE_SIZE = (6.4, 3.3)  # inches, the p-value curve

P_VALUE_CURVE_KEY = "weak-iv-p-values"
BALANCE_KEY = "balance-std-differences"

BALANCE_WIDTH = 6.4  # inches
BALANCE_BASE_HEIGHT = 1.5  # inches for axis, title and legend
BALANCE_ROW_HEIGHT = 0.2  # inches per marker row within a covariate
BALANCE_ROW_PAD = 0.25  # inches between covariates
BALANCE_MIN_SPAN = 0.25  # the x-axis shows at least -0.25..0.25, so the band is visible
BAND_FILL = "#e3eee6"  # pale sage: the rule-of-thumb band
BALANCE_STYLES = (  # (colour, marker) per instrument, distinguishable without colour
    (IV_COLOURS["2sls"], "o"),
    (FIT_LINE, "s"),
    (IV_COLOURS["gmm"], "D"),
    (IV_COLOURS["liml"], "^"),
    (OLS_COLOUR, "v"),
)

_RC: dict[str, Any] = {
    "svg.hashsalt": "reportkit",
    "svg.fonttype": "path",
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans"],
    "font.size": 9,
    "axes.titlesize": 9.5,
    "axes.labelsize": 9,
    "xtick.labelsize": 8,
    "ytick.labelsize": 8.5,
    "axes.edgecolor": INK,
    "axes.labelcolor": INK,
    "text.color": INK,
    "xtick.color": INK,
    "ytick.color": INK,
    "axes.linewidth": 0.7,
    "path.simplify": False,
}


@dataclass(frozen=True)
class FigureImage:
    """One rendered figure: SVG text, alt text for screen readers, a caption."""

    key: str
    svg: str
    alt: str
    caption: str

    @property
    def data_uri(self) -> str:
        return svg_data_uri(self.svg)

    @property
    def filename(self) -> str:
        """File name in the bundle's figures folder, e.g. "estimates-1.svg"."""
        return f"{self.key}.svg"


def svg_data_uri(svg: str) -> str:
    """The SVG as a ``data:image/svg+xml;base64,...`` URI for ``<img src>``."""
    encoded = base64.b64encode(svg.encode("utf-8")).decode("ascii")
    return f"data:image/svg+xml;base64,{encoded}"


def estimates_key(index: int) -> str:
    """Figure key (and file stem) of the estimates figure of endogenous regressor ``index``."""
    return f"estimates-{index + 1}"


def first_stage_key(index: int) -> str:
    """Figure key (and file stem) of the first-stage figure of endogenous regressor ``index``."""
    return f"first-stage-{index + 1}"


@contextmanager
def figure_style() -> Iterator[None]:
    """The appendix's matplotlib settings (fonts, colours, SVG hash salt) for every figure."""
    import matplotlib

    with matplotlib.rc_context(_RC):
        yield


def new_figure(width: float, height: float) -> Figure:
    """A figure of ``width`` x ``height`` inches, not registered with pyplot (no global state)."""
    from matplotlib.figure import Figure

    return Figure(figsize=(width, height), dpi=100, layout="constrained")


def to_svg(fig: Figure) -> str:
    """The figure as SVG text without a date, so the same figure gives the same bytes."""
    buffer = io.StringIO()
    fig.savefig(buffer, format="svg", metadata={"Date": None})
    return buffer.getvalue()


def tidy_axes(ax: Axes) -> None:
    """No top or right spine, a light grid behind the data."""
    ax.spines["top"].set_visible(False)
    ax.spines["right"].set_visible(False)
    ax.grid(True, color=GRID, linewidth=0.6)
    ax.set_axisbelow(True)


def wrap_label(text: str, width: int = WRAP_WIDTH) -> str:
    """Wrap a label for a figure; a dollar sign is escaped so it is not read as mathtext."""
    plain = text.replace("$", r"\$")
    return "\n".join(textwrap.wrap(plain, width, break_on_hyphens=False)) or plain


def _draw_binned(ax: Axes, binned: BinnedScatter, x_label: str, y_label: str) -> None:
    largest = max(binned.count) if binned.count else 1
    sizes = [14 + 46 * c / largest for c in binned.count]
    ax.scatter(binned.x, binned.y, s=sizes, color=POINTS, alpha=0.85, linewidths=0)
    lo, hi = min(binned.x), max(binned.x)
    pad = 0.04 * (hi - lo) if hi > lo else 0.5
    xs = [lo - pad, hi + pad]
    ax.plot(xs, [binned.intercept + binned.slope * x for x in xs], color=FIT_LINE, linewidth=1.6)
    ax.set_title(wrap_label(f"{x_label}: fitted slope {fmt_num(binned.slope)}"), loc="left")
    ax.set_xlabel(wrap_label(f"{x_label} (adjusted)"))
    ax.set_ylabel(wrap_label(f"{y_label} (adjusted)"))
    tidy_axes(ax)


def first_stage_svg(first_stage: FirstStage, labels: Mapping[str, str]) -> str:
    """SVG of the binned first-stage scatter, one panel per instrument."""
    if not first_stage.binned:
        raise ValueError(f"first stage of '{first_stage.endogenous}' has no binned scatter")
    panels = len(first_stage.binned)
    columns = min(panels, 2)
    rows = -(-panels // columns)
    with figure_style():
        fig = new_figure(PANEL_SIZE[0] * columns, PANEL_SIZE[1] * rows)
        axes = fig.subplots(rows, columns, squeeze=False)
        for position, binned in enumerate(first_stage.binned):
            ax = axes[position // columns][position % columns]
            _draw_binned(ax, binned, label(binned.instrument, labels), first_stage.label)
        for position in range(panels, rows * columns):
            axes[position // columns][position % columns].set_visible(False)
        return to_svg(fig)


def _first_stage_alt(first_stage: FirstStage, labels: Mapping[str, str]) -> str:
    parts = [
        f"{label(b.instrument, labels)}: {fmt_int(len(b.x))} bins of "
        f"{fmt_int(sum(b.count))} rows, fitted slope {fmt_num(b.slope)}"
        for b in first_stage.binned
    ]
    return (
        f"Binned scatter of {first_stage.label} against each instrument, both adjusted "
        "for the controls, fixed effects and other instruments (residualised, then shifted "
        "back to their means), with the fitted line. " + "; ".join(parts) + "."
    )


def _ordered(estimates: list[EstimatorResult]) -> list[EstimatorResult]:
    return sorted(estimates, key=lambda e: ESTIMATOR_ORDER.index(e.estimator))


def estimates_svg(results: StudyResults, index: int) -> str:
    """SVG of every estimator's estimate and interval for endogenous regressor ``index``."""
    name = results.model.endogenous[index]
    estimates = _ordered(results.estimates)
    level = fmt_pct(results.conventions.confidence_level)
    height = ESTIMATES_BASE_HEIGHT + ESTIMATES_ROW_HEIGHT * len(estimates)
    with figure_style():
        fig = new_figure(ESTIMATES_WIDTH, height)
        ax = fig.subplots()
        positions = list(range(len(estimates)))[::-1]  # first estimator on top
        for y, result in zip(positions, estimates, strict=True):
            coef = _coefficient(result, name)
            colour = IV_COLOURS.get(result.estimator, OLS_COLOUR)
            ax.plot([coef.ci_lower, coef.ci_upper], [y, y], color=colour, linewidth=2.2)
            ax.plot(
                [coef.estimate], [y], marker="o", markersize=6.5, color=colour, linestyle="none"
            )
        ax.axvline(0.0, color=ZERO_LINE, linewidth=0.9, linestyle=(0, (4, 3)))
        ax.set_yticks(positions, [ESTIMATOR_NAMES[e.estimator] for e in estimates])
        ax.set_ylim(-0.7, len(estimates) - 0.3)
        outcome = label(results.model.outcome, results.model.labels)
        effect = f"Effect of {_coefficient(estimates[0], name).label} on {outcome}"
        ax.set_xlabel(wrap_label(effect, 90))
        ax.set_title(f"Estimates with {level} confidence intervals", loc="left")
        tidy_axes(ax)
        ax.grid(False, axis="y")
        ax.tick_params(axis="y", length=0)
        return to_svg(fig)


def _coefficient(result: EstimatorResult, name: str) -> Coefficient:
    for coef in result.coefficients:
        if coef.name == name:
            return coef
    raise ValueError(f"{result.label} has no coefficient for '{name}'")


def _estimates_alt(results: StudyResults, index: int) -> str:
    name = results.model.endogenous[index]
    level = fmt_pct(results.conventions.confidence_level)
    parts = []
    for result in _ordered(results.estimates):
        coef = _coefficient(result, name)
        parts.append(
            f"{ESTIMATOR_NAMES[result.estimator]} {fmt_num(coef.estimate)} "
            f"{fmt_ci(coef.ci_lower, coef.ci_upper)}"
        )
    coef_label = _coefficient(results.estimates[0], name).label
    return (
        f"Estimates of the effect of {coef_label} with {level} confidence intervals: "
        + "; ".join(parts)
        + "."
    )


def _check_curve(curve: PValueCurve) -> None:
    n = len(curve.beta0)
    if n < 2:
        raise ValueError("the p-value curve needs at least two hypothesised values")
    lengths = [len(curve.anderson_rubin)] + ([] if curve.clr is None else [len(curve.clr)])
    if any(length != n for length in lengths):
        raise ValueError(
            f"the p-value curve has {n} hypothesised values but p-value lists of length "
            f"{', '.join(str(length) for length in lengths)}"
        )


def _shade_set(ax: Axes, cs: SetOrNA, span: tuple[float, float], **style: Any) -> bool:
    """Shade the pieces of a confidence set that fall in the plotted range; True if any did."""
    if not isinstance(cs, ConfidenceSet):
        return False
    if cs.shape == "whole_line":
        bounds = [span]
    else:
        bounds = [
            (span[0] if p.lower is None else p.lower, span[1] if p.upper is None else p.upper)
            for p in cs.pieces
        ]
    drawn = False
    for lower, upper in bounds:
        lo, hi = max(lower, span[0]), min(upper, span[1])
        if lo <= hi:
            ax.axvspan(lo, hi, **(style if not drawn else {**style, "label": "_nolegend_"}))
            drawn = True
    return drawn


def p_value_curve_svg(weak_iv: WeakIVRobust, confidence_level: float) -> str:
    """SVG of the weak-instrument-robust p-values against the hypothesised coefficient."""
    curve = weak_iv.curve
    if curve is None:
        raise ValueError(f"no p-value curve was computed for '{weak_iv.endogenous}'")
    _check_curve(curve)
    alpha = round(1.0 - confidence_level, 10)
    span = (min(curve.beta0), max(curve.beta0))
    with figure_style():
        fig = new_figure(*CURVE_SIZE)
        ax = fig.subplots()
        _shade_set(
            ax,
            weak_iv.anderson_rubin,
            span,
            color=AR_SET_FILL,
            linewidth=0,
            label=f"Anderson-Rubin {fmt_pct(confidence_level)} set",
        )
        if curve.clr is not None:
            _shade_set(
                ax,
                weak_iv.clr,
                span,
                facecolor="none",
                edgecolor=CLR_COLOUR,
                hatch="////",
                linewidth=0,
                alpha=0.55,
                label=f"CLR {fmt_pct(confidence_level)} set",
            )
        ax.plot(
            curve.beta0,
            curve.anderson_rubin,
            color=AR_COLOUR,
            linewidth=1.8,
            label="Anderson-Rubin p-value",
        )
        if curve.clr is not None:
            ax.plot(
                curve.beta0,
                curve.clr,
                color=CLR_COLOUR,
                linewidth=1.6,
                linestyle=(0, (5, 2.5)),
                label="CLR p-value",
            )
        ax.axhline(
            alpha,
            color=LEVEL_LINE,
            linewidth=0.9,
            linestyle=(0, (1, 2)),
            label=f"p = {fmt_level(alpha)} (1 \N{MINUS SIGN} {fmt_pct(confidence_level)})",
        )
        if span[0] < 0.0 < span[1]:
            ax.axvline(0.0, color=ZERO_LINE, linewidth=0.9, linestyle=(0, (4, 3)))
        ax.set_xlim(*span)
        ax.set_ylim(0.0, 1.0)
        ax.set_xlabel(wrap_label(f"Hypothesised coefficient of {weak_iv.label}", 90))
        ax.set_ylabel("p-value")
        ax.set_title("Which coefficient values the data reject", loc="left")
        tidy_axes(ax)
        fig.legend(loc="outside lower center", ncols=2, frameon=False, fontsize=8)
        return to_svg(fig)


def _p_value_at(beta0: list[float], p_values: list[float], value: float) -> float | None:
    for b, p in zip(beta0, p_values, strict=True):
        if b == value:
            return p
    return None


def _p_value_curve_alt(weak_iv: WeakIVRobust, confidence_level: float) -> str:
    curve = weak_iv.curve
    if curve is None:
        raise ValueError(f"no p-value curve was computed for '{weak_iv.endogenous}'")
    level = fmt_pct(confidence_level)
    alpha = round(1.0 - confidence_level, 10)
    peak = max(range(len(curve.beta0)), key=lambda i: curve.anderson_rubin[i])
    parts = [
        f"P-values of weak-instrument-robust tests of each hypothesised coefficient of "
        f"{weak_iv.label}, at {fmt_int(len(curve.beta0))} values from "
        f"{fmt_num(min(curve.beta0))} to {fmt_num(max(curve.beta0))}.",
        f"The Anderson-Rubin p-value is highest ({fmt_p(curve.anderson_rubin[peak])}) at "
        f"{fmt_num(curve.beta0[peak])}.",
    ]
    at_zero = _p_value_at(curve.beta0, curve.anderson_rubin, 0.0)
    if at_zero is not None:
        parts.append(f"At zero it is {fmt_p(at_zero)}.")
    parts.append(
        f"A dotted line marks p = {fmt_level(alpha)}; the shaded {level} Anderson-Rubin set is "
        f"{fmt_set(weak_iv.anderson_rubin)}."
    )
    if curve.clr is not None:
        parts.append(f"The CLR p-value is drawn dashed; its {level} set is {fmt_set(weak_iv.clr)}.")
    return " ".join(parts)


def p_value_curve_figure(weak_iv: WeakIVRobust, confidence_level: float) -> FigureImage:
    """The p-value curve as a ``FigureImage`` with its alt text and caption."""
    curve = weak_iv.curve
    if curve is None:
        raise ValueError(f"no p-value curve was computed for '{weak_iv.endogenous}'")
    level = fmt_pct(confidence_level)
    alpha = fmt_level(round(1.0 - confidence_level, 10))
    has_clr = curve.clr is not None
    caption = [
        f"P-value of the Anderson-Rubin test (solid line)"
        f"{' and of the CLR test (dashed)' if has_clr else ''} of each hypothesised value of "
        f"the coefficient of {weak_iv.label}."
    ]
    ar_set = weak_iv.anderson_rubin
    if isinstance(ar_set, ConfidenceSet) and ar_set.shape == "empty":
        caption.append(
            f"No value's p-value lies above the dotted line at {alpha}: the {level} "
            "Anderson-Rubin set is empty."
        )
    elif isinstance(ar_set, ConfidenceSet):
        caption.append(
            f"Values whose p-value lies above the dotted line at {alpha} are not rejected: "
            f"together they form the {level} Anderson-Rubin set (shaded)."
        )
    else:
        caption.append(
            f"Values whose p-value lies above the dotted line at {alpha} are not rejected."
        )
    if has_clr:
        caption.append("The hatched band is the CLR set.")
    if min(curve.beta0) < 0.0 < max(curve.beta0):
        caption.append("The dashed vertical line marks zero.")
    return FigureImage(
        key=P_VALUE_CURVE_KEY,
        svg=p_value_curve_svg(weak_iv, confidence_level),
        alt=_p_value_curve_alt(weak_iv, confidence_level),
        caption=" ".join(caption),
    )


def _balance_points(
    balance: Balance, labels: Mapping[str, str]
) -> tuple[list[str], list[str], list[list[float | None]]]:
    """Covariate labels, instrument labels and the standardized differences (None: not
    computed), indexed [covariate][instrument], instruments in the first row's order."""
    if not balance.rows:
        return [], [], []
    instruments = [cell.instrument for cell in balance.rows[0].cells]
    values: list[list[float | None]] = []
    for row in balance.rows:
        by_name = {cell.instrument: cell.std_difference for cell in row.cells}
        missing = [name for name in instruments if name not in by_name]
        if missing:
            raise ValueError(
                f"the balance row of '{row.covariate}' has no cell for {', '.join(missing)}"
            )
        values.append(
            [
                v if v is not None and math.isfinite(v) else None
                for v in (by_name[name] for name in instruments)
            ]
        )
    return (
        [row.label for row in balance.rows],
        [label(name, labels) for name in instruments],
        values,
    )


def has_balance_figure(balance: Balance | NotApplicable) -> bool:
    """Is there a balance figure to draw: balance computed, one standardized difference at least."""
    if not isinstance(balance, Balance):
        return False
    _, _, values = _balance_points(balance, {})
    return any(v is not None for row in values for v in row)


def balance_svg(balance: Balance, labels: Mapping[str, str]) -> str:
    """SVG of the standardized differences per covariate and instrument, with the band."""
    covariates, instruments, values = _balance_points(balance, labels)
    drawn = [abs(v) for row in values for v in row if v is not None]
    if not drawn:
        raise ValueError("no standardized difference was computed; there is nothing to draw")
    band = wording.STD_DIFFERENCE_BAND
    span = max(BALANCE_MIN_SPAN, 1.15 * max(drawn))
    per_covariate = BALANCE_ROW_HEIGHT * len(instruments) + BALANCE_ROW_PAD
    height = BALANCE_BASE_HEIGHT + per_covariate * len(covariates)
    with figure_style():
        fig = new_figure(BALANCE_WIDTH, height)
        ax = fig.subplots()
        ax.axvspan(
            -band,
            band,
            color=BAND_FILL,
            linewidth=0,
            label=f"|d| \N{LESS-THAN OR EQUAL TO} {fmt_num(band, 1)} (rule of thumb)",
        )
        ax.axvline(0.0, color=ZERO_LINE, linewidth=0.9, linestyle=(0, (4, 3)))
        count = len(instruments)
        offsets = [0.0] if count == 1 else [0.3 - 0.6 * j / (count - 1) for j in range(count)]
        centres = list(range(len(covariates)))[::-1]  # first covariate on top
        for j, name in enumerate(instruments):
            colour, marker = BALANCE_STYLES[j % len(BALANCE_STYLES)]
            xs = [row[j] for row in values]
            ys = [c + offsets[j] for c in centres]
            points = [(x, y) for x, y in zip(xs, ys, strict=True) if x is not None]
            ax.plot(
                [x for x, _ in points],
                [y for _, y in points],
                linestyle="none",
                marker=marker,
                markersize=6,
                color=colour,
                label=wrap_label(name, 60),
            )
        ax.set_yticks(centres, [wrap_label(c, 28) for c in covariates])
        ax.set_ylim(-0.7, len(covariates) - 0.3)
        ax.set_xlim(-span, span)
        ax.set_xlabel("Standardized difference, last group minus first (pooled SDs)")
        ax.set_title("Covariate balance across instrument groups", loc="left")
        tidy_axes(ax)
        ax.grid(False, axis="y")
        ax.tick_params(axis="y", length=0)
        fig.legend(loc="outside lower center", ncols=min(3, count + 1), frameon=False, fontsize=8)
        return to_svg(fig)


def _balance_alt(balance: Balance, labels: Mapping[str, str]) -> str:
    covariates, instruments, values = _balance_points(balance, labels)
    band = wording.STD_DIFFERENCE_BAND
    parts = []
    beyond = []
    missing = []
    for covariate, row in zip(covariates, values, strict=True):
        shown = []
        for instrument, value in zip(instruments, row, strict=True):
            if value is None:
                missing.append(f"{covariate} with {instrument}")
                continue
            shown.append(f"{instrument} {fmt_num(value)}")
            if abs(value) > band:
                beyond.append(f"{covariate} with {instrument} ({fmt_num(value)})")
        if shown:
            parts.append(f"{covariate}: {'; '.join(shown)}")
    text = [
        "Standardized differences of each covariate's mean between the last and first group "
        "of each instrument (in pooled standard deviations): " + ". ".join(parts) + ".",
        f"A band marks |d| <= {fmt_num(band, 1)}, a common rule of thumb; "
        + (
            f"outside it: {and_join(beyond)}."
            if beyond
            else "every difference drawn lies inside it."
        ),
    ]
    if missing:
        text.append(f"Not computed, so not drawn: {and_join(missing)}.")
    return " ".join(text)


def balance_figure(balance: Balance, labels: Mapping[str, str]) -> FigureImage:
    """The balance figure as a ``FigureImage`` with its alt text and caption."""
    band = fmt_num(wording.STD_DIFFERENCE_BAND, 1)
    caption = (
        "Standardized difference of each covariate's mean between the last and the first "
        "group of each instrument (for a quartile grouping, the top quarter minus the bottom "
        f"one), one marker per instrument. The shaded band marks |d| <= {band}, a common rule "
        "of thumb for a negligible imbalance; it is not a test, and a difference inside it "
        "says nothing about unobserved characteristics. The dashed line marks zero."
    )
    _, _, values = _balance_points(balance, labels)
    if any(v is None for row in values for v in row):
        caption += " Differences that could not be computed are not drawn (see the tables)."
    return FigureImage(
        key=BALANCE_KEY,
        svg=balance_svg(balance, labels),
        alt=_balance_alt(balance, labels),
        caption=caption,
    )


def make_figures(results: StudyResults) -> dict[str, FigureImage]:
    """Every figure of the appendix, keyed by ``estimates_key`` / ``first_stage_key`` /
    ``P_VALUE_CURVE_KEY`` / ``BALANCE_KEY``."""
    labels = results.model.labels
    level = fmt_pct(results.conventions.confidence_level)
    figures: dict[str, FigureImage] = {}
    for index, name in enumerate(results.model.endogenous):
        key = estimates_key(index)
        figures[key] = FigureImage(
            key=key,
            svg=estimates_svg(results, index),
            alt=_estimates_alt(results, index),
            caption=(
                f"{upper_first(label(name, labels))}: point estimates (dots) and {level} "
                "confidence intervals (lines) by estimator. The dashed line marks zero."
            ),
        )
    for index, first_stage in enumerate(results.first_stages):
        if not first_stage.binned:
            continue
        key = first_stage_key(index)
        figures[key] = FigureImage(
            key=key,
            svg=first_stage_svg(first_stage, labels),
            alt=_first_stage_alt(first_stage, labels),
            caption=(
                f"{upper_first(first_stage.label)} against each instrument, both with the "
                "controls, fixed effects and other instruments partialled out and shifted back "
                "to their sample means (hence 'adjusted'). Dots are means within bins of the "
                "instrument (area proportional to the rows in the bin); the line is the fitted "
                "first stage, whose slope is the first-stage coefficient."
            ),
        )
    weak_iv = results.weak_iv
    if isinstance(weak_iv, WeakIVRobust) and weak_iv.curve is not None:
        confidence_level = results.conventions.confidence_level
        figures[P_VALUE_CURVE_KEY] = p_value_curve_figure(weak_iv, confidence_level)
    balance = results.balance
    if isinstance(balance, Balance) and has_balance_figure(balance):
        figures[BALANCE_KEY] = balance_figure(balance, labels)
    # Imported here: complier_figures draws with this module's helpers.
    from reportkit.report.complier_figures import complier_figure

    complier = complier_figure(balance)
    if complier is not None:
        figures[complier.key] = complier
    # Imported here: robustness_figures draws with this module's helpers.
    from reportkit.report.robustness_figures import robustness_figures

    figures.update(robustness_figures(results))
    return figures


def build_figures(results: StudyResults) -> dict[str, FigureImage]:
    """Alias of ``make_figures`` (the name the bundle writer uses)."""
    return make_figures(results)


def figure_data_uris(figures: Mapping[str, FigureImage]) -> dict[str, str]:
    """The figures as ``data:`` URIs, keyed like ``figures``."""
    return {key: figure.data_uri for key, figure in figures.items()}
