"""Figures of the section on robustness variants, drawn from a ``StudyResults`` only.

- The variants: every variant's estimate of one endogenous regressor's coefficient with its
  interval on one axis, grouped (other estimators, instrument sets, inference, samples,
  control sets), with lines at the main 2SLS estimate and at zero. One figure per
  endogenous regressor.
- The models for a binary outcome, apart from the main estimate and one panel with its own
  axis per estimand: they estimate other quantities, which need not share units.
- Leave-one-cluster-out: every estimate with one cluster left out, sorted, with the
  full-sample estimate and zero marked (how much hinges on single clusters; Young 2022).
- Sensitivity to violations of the exclusion restriction: the estimate and its interval
  against the direct effect allowed for one instrument, one panel per instrument with a
  range (Conley, Hansen & Rossi 2012).

Variants without an estimate are not drawn (the table gives their reason). The figures use
the style helpers of ``reportkit.report.figures`` (fixed SVG hash salt, no date, fixed size,
fonts and palette), so the same results give byte-identical SVG.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from reportkit.report.figures import (
    FIT_LINE,
    GRID,
    INK,
    IV_COLOURS,
    OLS_COLOUR,
    POINTS,
    ZERO_LINE,
    FigureImage,
    figure_style,
    new_figure,
    tidy_axes,
    to_svg,
    wrap_label,
)
from reportkit.report.formatting import (
    and_join,
    fmt_ci,
    fmt_int,
    fmt_interval,
    fmt_num,
    fmt_pct,
    label,
    upper_first,
)
from reportkit.results import (
    ClusterInfluence,
    ExclusionSensitivity,
    NotApplicable,
    Robustness,
    SensitivityPoint,
    StudyResults,
    Variant,
    VariantValue,
)

if TYPE_CHECKING:
    from matplotlib.axes import Axes

BINARY_KEY = "robustness-binary-outcome"
GROUP_ORDER = ("estimator", "instruments", "inference", "sample", "controls")
GROUP_TITLES = {
    "estimator": "Other estimators",
    "instruments": "Other instrument sets",
    "inference": "Other standard errors",
    "sample": "Other samples",
    "controls": "Other control sets",
    "binary": "Models for a binary outcome",
}
GROUP_COLOURS = {
    "main": IV_COLOURS["2sls"],
    "estimator": IV_COLOURS["liml"],
    "instruments": FIT_LINE,
    "inference": OLS_COLOUR,
    "sample": IV_COLOURS["gmm"],
    "controls": POINTS,
    "binary": IV_COLOURS["2sls"],
}
MAIN_LINE = IV_COLOURS["2sls"]
BAND_FILL = "#dbe8ed"  # the interval band of the sensitivity curve (pale blue-teal)
BREAKDOWN_LINE = "#9a3b2e"  # muted brick: where the interval first covers zero

PLOT_WIDTH = 6.4  # inches
ROW_HEIGHT = 0.3  # inches per plotted row
BASE_HEIGHT = 1.5  # inches for the axis, title and legend
INFLUENCE_SIZE = (6.4, 3.0)  # inches
SENSITIVITY_PANEL = (3.4, 3.0)  # inches per panel
LABEL_WIDTH = 34  # characters per line of a row label
PANEL_BASE = 0.75  # inches per binary-outcome panel for its title and axis


def variants_key(index: int) -> str:
    """Figure key (and file stem) of the variant plot of main quantity ``index``."""
    return f"robustness-variants-{index + 1}"


def influence_key(index: int) -> str:
    """Figure key of the leave-one-cluster-out plot of ``cluster_influence[index]``."""
    return f"robustness-cluster-influence-{index + 1}"


def sensitivity_key(index: int) -> str:
    """Figure key of the exclusion-sensitivity plot of ``sensitivity[index]``."""
    return f"robustness-exclusion-{index + 1}"


@dataclass(frozen=True)
class PlotRow:
    """One drawn row: its label, group and value (interval ends None when not computed)."""

    label: str
    group: str
    estimate: float
    ci_lower: float | None
    ci_upper: float | None
    panel: str = ""  # binary-outcome models: the estimand, one panel (and axis) each


def finite(x: float | None) -> bool:
    return x is not None and math.isfinite(x)


def value_for(variant: Variant, quantity: str) -> VariantValue | None:
    """The variant's value of ``quantity``; None when the variant has no values at all.

    A variant that has values but none for ``quantity`` is an error of the computation.
    """
    if isinstance(variant.values, NotApplicable):
        return None
    for item in variant.values:
        if item.quantity == quantity:
            return item
    raise ValueError(
        f"the robustness variant '{variant.key}' has no value for '{quantity}'; every "
        "variant outside the binary-outcome group needs one value per endogenous regressor"
    )


def _interval(item: VariantValue) -> tuple[float | None, float | None]:
    if finite(item.ci_lower) and finite(item.ci_upper):
        return item.ci_lower, item.ci_upper
    return None, None


def variant_rows(robustness: Robustness, quantity: str) -> list[PlotRow]:
    """The drawn rows of one quantity: the main estimate, then each group's variants with
    an estimate (binary-outcome models excluded)."""
    main = next((m for m in robustness.main if m.quantity == quantity), None)
    if main is None:
        raise ValueError(f"the robustness results have no main estimate of '{quantity}'")
    rows = [PlotRow("Main 2SLS", "main", main.estimate, *_interval(main))]
    for group in GROUP_ORDER:
        for variant in robustness.variants:
            if variant.group != group:
                continue
            item = value_for(variant, quantity)
            if item is not None and finite(item.estimate):
                rows.append(PlotRow(variant.name, group, item.estimate, *_interval(item)))
    return rows


def binary_rows(robustness: Robustness) -> list[PlotRow]:
    """The drawn rows of the binary-outcome models: one per value with an estimate."""
    rows = []
    for variant in robustness.variants:
        if variant.group != "binary" or isinstance(variant.values, NotApplicable):
            continue
        several = len(variant.values) > 1
        for item in variant.values:
            if finite(item.estimate):
                name = f"{variant.name}: {item.quantity}" if several else variant.name
                rows.append(
                    PlotRow(name, "binary", item.estimate, *_interval(item), variant.estimand)
                )
    return rows


def has_variants_figure(robustness: Robustness, quantity: str) -> bool:
    """Is there a variant to draw beside the main estimate of ``quantity``?"""
    return len(variant_rows(robustness, quantity)) > 1


def _sensitivity_panels(
    sensitivity: ExclusionSensitivity,
) -> list[tuple[str, list[SensitivityPoint]]]:
    """(label, curve points sorted by gamma) per instrument with a range of direct effects."""
    panels = []
    for entry in sensitivity.ranges:
        points = sorted(
            (p for p in sensitivity.curve if p.instrument == entry.instrument),
            key=lambda p: p.gamma,
        )
        if entry.upper > entry.lower and len(points) >= 2:
            panels.append((entry.label, points))
    return panels


def robustness_figure_keys(results: StudyResults) -> list[str]:
    """Keys of the robustness figures the appendix places, in order."""
    robustness = results.robustness
    if not isinstance(robustness, Robustness):
        return []
    keys = [
        variants_key(i)
        for i, main in enumerate(robustness.main)
        if has_variants_figure(robustness, main.quantity)
    ]
    if binary_rows(robustness):
        keys.append(BINARY_KEY)
    if not isinstance(robustness.cluster_influence, NotApplicable):
        keys += [
            influence_key(i)
            for i, influence in enumerate(robustness.cluster_influence)
            if influence.drops
        ]
    if not isinstance(robustness.sensitivity, NotApplicable):
        keys += [
            sensitivity_key(i)
            for i, entry in enumerate(robustness.sensitivity)
            if _sensitivity_panels(entry)
        ]
    return keys


# --------------------------------------------------------------------------- row plots


def _layout(rows: Sequence[PlotRow]) -> tuple[list[float], list[tuple[float, str, bool]]]:
    """Row positions from the top, and the y ticks (position, text, is a group heading)."""
    positions: list[float] = []
    ticks: list[tuple[float, str, bool]] = []
    y = -1.0
    previous = None
    for row in rows:
        if row.group != previous and row.group in GROUP_ORDER:
            y += 1.4 if previous is not None else 1.0
            ticks.append((y, GROUP_TITLES[row.group], True))
        y += 1.0
        positions.append(y)
        ticks.append((y, wrap_label(row.label, LABEL_WIDTH), False))
        previous = row.group
    return positions, ticks


def _draw_rows(ax: Axes, rows: Sequence[PlotRow], main: float | None) -> float:
    """Dots and interval lines, first row on top, lines at ``main`` and zero; the depth."""
    positions, ticks = _layout(rows)
    for row, pos in zip(rows, positions, strict=True):
        colour = GROUP_COLOURS.get(row.group, INK)
        if row.ci_lower is not None and row.ci_upper is not None:
            ax.plot([row.ci_lower, row.ci_upper], [pos, pos], color=colour, linewidth=2.0)
        marker = "D" if row.group == "main" else "o"
        ax.plot([row.estimate], [pos], marker=marker, markersize=6, color=colour)
    if main is not None:
        ax.axvline(main, color=MAIN_LINE, linewidth=1.0, label="main 2SLS estimate")
    ax.axvline(0.0, color=ZERO_LINE, linewidth=0.9, linestyle=(0, (4, 3)), label="zero")
    ax.set_yticks([t[0] for t in ticks], [t[1] for t in ticks])
    for tick, (_, _, heading) in zip(ax.get_yticklabels(), ticks, strict=True):
        if heading:
            tick.set_fontweight("bold")
    depth = positions[-1] + 1.0
    ax.set_ylim(depth - 0.3, -0.7)
    tidy_axes(ax)
    ax.grid(False, axis="y")
    ax.tick_params(axis="y", length=0)
    return depth


def _row_plot(rows: Sequence[PlotRow], title: str, x_label: str, main: float | None) -> str:
    """A grouped dot-and-interval plot on one axis; each group under a bold heading."""
    positions, _ = _layout(rows)
    height = BASE_HEIGHT + ROW_HEIGHT * (positions[-1] + 1.0)
    with figure_style():
        fig = new_figure(PLOT_WIDTH, height)
        ax = fig.subplots()
        _draw_rows(ax, rows, main)
        ax.set_xlabel(wrap_label(x_label, 60))
        ax.set_title(wrap_label(title, 60), loc="left")
        fig.legend(loc="outside lower center", ncols=2, frameon=False, fontsize=8)
        return to_svg(fig)


def binary_panels(rows: Sequence[PlotRow]) -> list[tuple[str, list[PlotRow]]]:
    """The binary-outcome rows by estimand, in order of first appearance: one panel each."""
    panels: dict[str, list[PlotRow]] = {}
    for row in rows:
        panels.setdefault(row.panel, []).append(row)
    return list(panels.items())


def binary_svg(robustness: Robustness) -> str:
    """SVG of the binary-outcome models: one panel, with its own axis, per estimand."""
    panels = binary_panels(binary_rows(robustness))
    if not panels:
        raise ValueError("no binary-outcome model has an estimate; there is nothing to draw")
    heights = [PANEL_BASE + ROW_HEIGHT * (len(rows) + 0.5) for _, rows in panels]
    with figure_style():
        fig = new_figure(PLOT_WIDTH, sum(heights) + 0.5)
        axes = fig.subplots(len(panels), 1, squeeze=False, height_ratios=heights)
        for ax, (estimand, rows) in zip(axes[:, 0], panels, strict=True):
            _draw_rows(ax, rows, None)
            ax.set_title(wrap_label(upper_first(estimand), 50), loc="left", fontsize=8.5)
        axes[-1][0].set_xlabel("Estimate, in the units of each panel's estimand")
        handles, texts = axes[0][0].get_legend_handles_labels()
        fig.legend(handles, texts, loc="outside lower center", frameon=False, fontsize=8)
        return to_svg(fig)


def _range_text(rows: Sequence[PlotRow]) -> str:
    low = min(rows, key=lambda r: r.estimate)
    high = max(rows, key=lambda r: r.estimate)
    return f"from {fmt_num(low.estimate)} ({low.label}) to {fmt_num(high.estimate)} ({high.label})"


def _excludes_zero(row: PlotRow) -> bool | None:
    if row.ci_lower is None or row.ci_upper is None:
        return None
    return row.ci_lower > 0.0 or row.ci_upper < 0.0


def _zero_count(rows: Sequence[PlotRow], what: str) -> str:
    """How many of the rows' intervals exclude zero, in a sentence."""
    with_interval = [r for r in rows if _excludes_zero(r) is not None]
    if not with_interval:
        return f"No interval was computed for the {what}."
    count = sum(bool(_excludes_zero(r)) for r in with_interval)
    return (
        f"Of the {what}' intervals, {fmt_int(count)} of {fmt_int(len(with_interval))} exclude zero."
    )


def variants_figure(
    robustness: Robustness, index: int, labels: Mapping[str, str], outcome: str, level: float
) -> FigureImage:
    """The variant plot of main quantity ``index`` with its alt text and caption."""
    quantity = robustness.main[index].quantity
    rows = variant_rows(robustness, quantity)
    name = label(quantity, labels)
    main = rows[0]
    variants = rows[1:]
    left_out = [
        v.name
        for v in robustness.variants
        if v.group != "binary" and value_for(v, quantity) is None
    ]
    alt = [
        f"Estimates of the effect of {name} on {outcome} under {fmt_int(len(variants))} "
        f"variants, with {fmt_pct(level)} intervals, grouped as in the table. They range "
        f"{_range_text(variants)}; the main 2SLS estimate is {fmt_num(main.estimate)}"
        + (
            f" {fmt_ci(main.ci_lower, main.ci_upper)}."
            if main.ci_lower is not None and main.ci_upper is not None
            else "."
        ),
        _zero_count(variants, "variants"),
    ]
    if left_out:
        alt.append(f"Not drawn (no estimate): {and_join(left_out)}.")
    caption = (
        f"Estimates of the effect of {name} (dots) and {fmt_pct(level)} intervals (lines) "
        "under each variant. The solid vertical line marks the main 2SLS estimate (diamond, "
        "top), the dashed one zero."
    )
    if any(v.group == "binary" for v in robustness.variants):
        caption += (
            " The models for a binary outcome are drawn separately, because they estimate "
            "other quantities."
        )
    if left_out:
        caption += " Variants without an estimate are not drawn (see the table)."
    if any(r.ci_lower is None for r in rows):
        caption += " A dot without a line has no interval."
    svg = _row_plot(
        rows,
        f"Estimate under each variant: {name}",
        f"Effect of {name} on {outcome}",
        main.estimate,
    )
    return FigureImage(variants_key(index), svg, " ".join(alt), caption)


def _listed(rows: Sequence[PlotRow]) -> str:
    return "; ".join(
        f"{r.label} {fmt_num(r.estimate)}"
        + (
            f" {fmt_ci(r.ci_lower, r.ci_upper)}"
            if r.ci_lower is not None and r.ci_upper is not None
            else ""
        )
        for r in rows
    )


def binary_figure(robustness: Robustness, level: float) -> FigureImage:
    """The binary-outcome models, one panel per estimand, with alt text and caption."""
    rows = binary_rows(robustness)
    panels = binary_panels(rows)
    left_out = [
        v.name
        for v in robustness.variants
        if v.group == "binary" and isinstance(v.values, NotApplicable)
    ]
    alt = [
        f"Estimates of the models for a binary outcome with {fmt_pct(level)} intervals, one "
        f"panel with its own axis per estimand. "
        + " ".join(f"{upper_first(estimand)}: {_listed(group)}." for estimand, group in panels),
        _zero_count(rows, "models"),
    ]
    if left_out:
        alt.append(f"Not drawn (no estimate): {and_join(left_out)}.")
    caption = (
        f"Models for a binary outcome: estimates (dots) and {fmt_pct(level)} intervals "
        "(lines). They estimate other quantities than the main estimate, so they are drawn "
        "apart from it, one panel with its own axis for each estimand (named above the "
        "panel). The dashed line marks zero."
    )
    if left_out:
        caption += " Models that could not run are not drawn."
    return FigureImage(BINARY_KEY, binary_svg(robustness), " ".join(alt), caption)


# --------------------------------------------------------------------------- influence


def influence_svg(influence: ClusterInfluence, full_estimate: float) -> str:
    """SVG of every leave-one-cluster-out estimate, sorted; filled where the interval
    excludes zero."""
    drops = sorted(influence.drops, key=lambda d: (d.estimate, d.cluster))
    ranks = list(range(1, len(drops) + 1))
    with figure_style():
        fig = new_figure(*INFLUENCE_SIZE)
        ax = fig.subplots()
        ax.axhline(full_estimate, color=MAIN_LINE, linewidth=1.0, label="full sample")
        ax.axhline(0.0, color=ZERO_LINE, linewidth=0.9, linestyle=(0, (4, 3)), label="zero")
        for significant, text, face in (
            (True, "interval excludes zero", POINTS),
            (False, "interval includes zero", "white"),
        ):
            chosen = [
                (r, d.estimate)
                for r, d in zip(ranks, drops, strict=True)
                if d.significant is significant
            ]
            if chosen:
                ax.plot(
                    [r for r, _ in chosen],
                    [e for _, e in chosen],
                    linestyle="none",
                    marker="o",
                    markersize=5.5,
                    markerfacecolor=face,
                    markeredgecolor=POINTS,
                    label=text,
                )
        values = [d.estimate for d in drops] + [full_estimate, 0.0]
        low, high = min(values), max(values)
        pad = 0.08 * (high - low) if high > low else 0.5
        ax.set_ylim(low - pad, high + pad)
        ax.set_xlim(0.3, len(drops) + 0.7)
        ax.set_xlabel(
            f"Clusters of {influence.cluster_variable}, sorted by the estimate without them"
        )
        ax.set_ylabel(wrap_label(f"Effect of {influence.label}", 40))
        ax.set_title(
            f"Leaving out one of {fmt_int(influence.n_clusters)} clusters at a time", loc="left"
        )
        tidy_axes(ax)
        ax.grid(False, axis="x")
        fig.legend(loc="outside lower center", ncols=4, frameon=False, fontsize=8)
        return to_svg(fig)


def influence_figure(
    influence: ClusterInfluence, index: int, full_estimate: float, cluster_label: str
) -> FigureImage:
    """The leave-one-cluster-out figure with its alt text and caption."""
    if not influence.drops:
        raise ValueError(f"no cluster was left out for '{influence.endogenous}'")
    top = max(influence.drops, key=lambda d: abs(d.shift))
    changes = influence.significance_changes
    alt = (
        f"The estimate of the effect of {influence.label} with each of the "
        f"{fmt_int(len(influence.drops))} clusters of {cluster_label} left out in turn, sorted: "
        f"from {fmt_num(influence.lowest)} to {fmt_num(influence.highest)}, against "
        f"{fmt_num(full_estimate)} in the full sample. The largest shift, "
        f"{fmt_num(top.shift)}, comes from leaving out {top.cluster}. "
        + (
            "No single removal changes whether the interval excludes zero."
            if changes == 0
            else f"{fmt_int(changes)} of the removals change whether the interval excludes zero."
        )
    )
    caption = (
        f"Each dot is the estimate with one cluster of {cluster_label} left out, sorted from "
        "lowest to highest; filled where its interval excludes zero, hollow where it includes "
        "zero. The solid line marks the full-sample estimate, the dashed one zero."
    )
    return FigureImage(influence_key(index), influence_svg(influence, full_estimate), alt, caption)


# --------------------------------------------------------------------------- sensitivity


def breakdown_edge(points: Sequence[SensitivityPoint], breakdown: float | None) -> float | None:
    """Where to mark the breakdown value on a curve sorted by gamma, or None.

    The breakdown is a size (|gamma|); its sign is the direction in which the interval
    reaches zero: of +b and -b within the curve's range, the one where the curve's interval
    at the nearest point is closest to covering zero.
    """
    if breakdown is None or not points:
        return None
    inside = [e for e in (breakdown, -breakdown) if points[0].gamma <= e <= points[-1].gamma]
    if not inside:
        return None

    def gap(edge: float) -> float:
        p = min(points, key=lambda q: abs(q.gamma - edge))
        return 0.0 if p.ci_lower <= 0.0 <= p.ci_upper else min(abs(p.ci_lower), abs(p.ci_upper))

    return min(inside, key=lambda e: (gap(e), -e))


def sensitivity_svg(sensitivity: ExclusionSensitivity, outcome: str) -> str:
    """SVG of the estimate and interval against each instrument's allowed direct effect."""
    panels = _sensitivity_panels(sensitivity)
    if not panels:
        raise ValueError(f"no instrument has a range of direct effects for '{sensitivity.label}'")
    breakdowns = {entry.label: entry.breakdown for entry in sensitivity.ranges}
    columns = min(len(panels), 2)
    rows = -(-len(panels) // columns)
    from matplotlib.ticker import MaxNLocator

    with figure_style():
        fig = new_figure(SENSITIVITY_PANEL[0] * columns, SENSITIVITY_PANEL[1] * rows + 0.4)
        axes = fig.subplots(rows, columns, squeeze=False)
        for position, (name, points) in enumerate(panels):
            ax = axes[position // columns][position % columns]
            gammas = [p.gamma for p in points]
            ax.fill_between(
                gammas,
                [p.ci_lower for p in points],
                [p.ci_upper for p in points],
                color=BAND_FILL,
                linewidth=0,
                label=f"{fmt_pct(sensitivity.level)} interval",
            )
            ax.plot(
                gammas,
                [p.estimate for p in points],
                color=MAIN_LINE,
                linewidth=1.6,
                label="estimate",
            )
            ax.axhline(0.0, color=ZERO_LINE, linewidth=0.9, linestyle=(0, (4, 3)), label="zero")
            edge = breakdown_edge(points, breakdowns.get(name))
            if edge is not None:
                ax.axvline(
                    edge,
                    color=BREAKDOWN_LINE,
                    linewidth=0.9,
                    linestyle=(0, (1, 2)),
                    label="breakdown value",
                )
            ax.set_xlim(gammas[0], gammas[-1])
            ax.xaxis.set_major_locator(MaxNLocator(nbins=5))
            low = min(0.0, *(p.ci_lower for p in points))
            high = max(0.0, *(p.ci_upper for p in points))
            pad = 0.06 * (high - low) if high > low else 0.5
            ax.set_ylim(low - pad, high + pad)
            ax.set_title(wrap_label(f"Direct effect of {name} allowed"), loc="left")
            ax.set_xlabel(wrap_label(f"Direct effect on {outcome} per unit of {name}"))
            ax.set_ylabel(wrap_label(f"Effect of {sensitivity.label}"))
            tidy_axes(ax)
            ax.grid(True, color=GRID, linewidth=0.6)
        for position in range(len(panels), rows * columns):
            axes[position // columns][position % columns].set_visible(False)
        legend: dict[str, Any] = {}
        for position in range(len(panels)):
            handles, texts = axes[position // columns][
                position % columns
            ].get_legend_handles_labels()
            for handle, text in zip(handles, texts, strict=True):
                legend.setdefault(text, handle)
        fig.legend(
            list(legend.values()),
            list(legend),
            loc="outside lower center",
            ncols=4,
            frameon=False,
            fontsize=8,
        )
        return to_svg(fig)


def sensitivity_figure(sensitivity: ExclusionSensitivity, index: int, outcome: str) -> FigureImage:
    """The exclusion-sensitivity figure with its alt text and caption."""
    panels = _sensitivity_panels(sensitivity)
    level = fmt_pct(sensitivity.level)
    parts = []
    for name, points in panels:
        first, last = points[0], points[-1]
        parts.append(
            f"for a direct effect of {name} from {fmt_num(first.gamma)} to "
            f"{fmt_num(last.gamma)}, the estimate moves from {fmt_num(first.estimate)} "
            f"{fmt_ci(first.ci_lower, first.ci_upper)} to {fmt_num(last.estimate)} "
            f"{fmt_ci(last.ci_lower, last.ci_upper)}"
        )
    covers = [
        name for name, points in panels if any(p.ci_lower <= 0.0 <= p.ci_upper for p in points)
    ]
    alt = (
        f"The estimate of the effect of {sensitivity.label} and its {level} interval when each "
        f"instrument is allowed a direct effect on {outcome}: "
        + "; ".join(parts)
        + ". "
        + (
            f"The interval includes zero somewhere in the range for {and_join(covers)}."
            if covers
            else "The interval excludes zero throughout the ranges drawn."
        )
        + f" The union of the intervals is {fmt_interval(sensitivity.union_interval)}."
    )
    caption = (
        f"The estimate (line) and its {level} interval (band) when the outcome is corrected "
        "for a given direct effect of one instrument, the others kept excluded; one panel per "
        "instrument with a range. The dashed line marks zero; a dotted vertical line marks "
        "the breakdown value, where the interval first includes zero, when it lies in the "
        "range drawn."
    )
    return FigureImage(sensitivity_key(index), sensitivity_svg(sensitivity, outcome), alt, caption)


# --------------------------------------------------------------------------- all


def full_sample_estimate(robustness: Robustness, influence: ClusterInfluence) -> float:
    """The full-sample estimate a leave-one-cluster-out analysis is compared with."""
    for main in robustness.main:
        if main.quantity == influence.endogenous:
            return main.estimate
    drop = influence.drops[0]
    return drop.estimate - drop.shift


def robustness_figures(results: StudyResults) -> dict[str, FigureImage]:
    """Every robustness figure, keyed as ``robustness_figure_keys`` lists them."""
    robustness = results.robustness
    if not isinstance(robustness, Robustness):
        return {}
    labels = results.model.labels
    outcome = label(results.model.outcome, labels)
    level = results.conventions.confidence_level
    figures: dict[str, FigureImage] = {}
    for index, main in enumerate(robustness.main):
        if has_variants_figure(robustness, main.quantity):
            figures[variants_key(index)] = variants_figure(
                robustness, index, labels, outcome, level
            )
    if binary_rows(robustness):
        figures[BINARY_KEY] = binary_figure(robustness, level)
    if not isinstance(robustness.cluster_influence, NotApplicable):
        for index, influence in enumerate(robustness.cluster_influence):
            if influence.drops:
                figures[influence_key(index)] = influence_figure(
                    influence,
                    index,
                    full_sample_estimate(robustness, influence),
                    label(influence.cluster_variable, labels),
                )
    if not isinstance(robustness.sensitivity, NotApplicable):
        for index, entry in enumerate(robustness.sensitivity):
            if _sensitivity_panels(entry):
                figures[sensitivity_key(index)] = sensitivity_figure(entry, index, outcome)
    return figures
