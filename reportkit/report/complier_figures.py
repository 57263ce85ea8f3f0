"""Figure of the implied complier outcome masses, the testable implication of the LATE
assumptions for a binary treatment and a binary instrument.

Under exclusion, independence and monotonicity, the share of rows that are compliers with
an outcome in a bin can be computed among the treated, P(Y in bin, D=1 | Z=1) -
P(Y in bin, D=1 | Z=0), and among the untreated, P(Y in bin, D=0 | Z=0) -
P(Y in bin, D=0 | Z=1); both are probability masses, so neither may be negative
(Imbens & Rubin 1997; the test over all bins is Kitagawa 2015). The figure draws both per
bin, in two panels sharing one vertical scale: a bar per bin, its bootstrap band as a
vertical line, a zero line, and bars whose band lies wholly below zero hatched in a
warning colour, so that they stand out in greyscale too. The bars stand side by side at
equal width with the bin edges marked on the axis: a bar's height is a mass, not a
density, so drawing wide bins wide would overstate them.

The SVG is deterministic in the same way as the other figures: it is drawn with the
drawing helpers of ``figures.py`` (fixed hash salt, no date, fixed size, fonts and palette),
so that every figure of the appendix shares one style. The numbers come from
``LateImplication`` only; nothing is computed here beyond the sums and ranges quoted in the
alt text.
"""

from __future__ import annotations

import math
from itertools import pairwise
from typing import TYPE_CHECKING, Any

from reportkit.report.balance_sections import bin_text
from reportkit.report.figures import (
    INK,
    POINTS,
    ZERO_LINE,
    FigureImage,
    figure_style,
    new_figure,
    tidy_axes,
    to_svg,
    wrap_label,
)
from reportkit.report.formatting import and_join, fmt_ci, fmt_int, fmt_num, fmt_pct
from reportkit.results import (
    Balance,
    ComplierAnalysis,
    DensityBin,
    LateImplication,
    NotApplicable,
)

if TYPE_CHECKING:
    from matplotlib.axes import Axes

COMPLIER_MASSES_KEY = "complier-outcome-masses"

MASSES_SIZE = (6.8, 3.4)  # inches, both panels
BAR_SHARE = 0.82  # share of its slot a bar fills (bins are drawn side by side, equal width)
MAX_TICK_LABELS = 14  # more bin edges than this: label every k-th
NEGATIVE_FILL = "#ecd3cc"  # pale brick: a bar whose band lies wholly below zero
NEGATIVE_EDGE = "#9a3b2e"  # brick, the appendix's warning colour
BAND_COLOUR = INK
MASS_LABEL = "implied complier mass"
NEGATIVE_LABEL = "band wholly below zero"

# Panel: (title, attribute of the mass, of the band's lower end, of its upper end).
PANELS = (
    ("Compliers when treated", "treated", "treated_low", "treated_high"),
    ("Compliers when untreated", "untreated", "untreated_low", "untreated_high"),
)


def _check_bins(bins: list[DensityBin]) -> None:
    """Refuse bins that cannot be drawn: none, unordered, or numbers that are not finite.

    A bin is an interval [lower, upper) or, for an outcome with few distinct values, one
    value (lower = upper).
    """
    if not bins:
        raise ValueError("the LATE implication has no outcome bins; there is nothing to draw")
    for b in bins:
        values = [getattr(b, name) for name in DensityBin.model_fields]
        if not all(math.isfinite(v) for v in values):
            raise ValueError(
                f"the outcome bin {b.lower!r} to {b.upper!r} has a value that is not finite"
            )
        if b.upper < b.lower:
            raise ValueError(
                f"an outcome bin must have lower <= upper, got {b.lower!r} to {b.upper!r}"
            )
    for left, right in pairwise(bins):
        if right.lower < left.upper or (right.lower == left.upper == right.upper):
            raise ValueError("the outcome bins overlap or are not in increasing order")


def _bin_ticks(bins: list[DensityBin]) -> tuple[list[float], list[str]]:
    """Tick positions and labels of the bin axis, bar i standing at position i.

    Interval bins are marked by their edges (between the bars), one-value bins by their
    value (under the bar). With many bins only every k-th tick is labelled.
    """
    if all(b.lower == b.upper for b in bins):
        positions = [float(i) for i in range(len(bins))]
        values = [b.lower for b in bins]
    else:
        positions = [i - 0.5 for i in range(len(bins) + 1)]
        values = [b.lower for b in bins] + [bins[-1].upper]
    step = math.ceil(len(values) / MAX_TICK_LABELS)
    labels = [fmt_num(v) if i % step == 0 else "" for i, v in enumerate(values)]
    return positions, labels


def has_complier_figure(balance: Balance | NotApplicable) -> bool:
    """Is there a complier figure to draw: compliers analysed and the implication computed."""
    if not isinstance(balance, Balance) or not isinstance(balance.compliers, ComplierAnalysis):
        return False
    implication = balance.compliers.late_implication
    return isinstance(implication, LateImplication) and bool(implication.bins)


def _draw_panel(
    ax: Axes, bins: list[DensityBin], title: str, names: tuple[str, str, str], level: str
) -> None:
    """One panel: bars (hatched where the band lies wholly below zero), bands, zero line."""
    mass, low, high = names
    centres = [float(i) for i in range(len(bins))]
    widths = [BAR_SHARE] * len(bins)
    values = [getattr(b, mass) for b in bins]
    lows = [getattr(b, low) for b in bins]
    highs = [getattr(b, high) for b in bins]
    below = [h < 0 for h in highs]
    ax.axhline(0.0, color=ZERO_LINE, linewidth=1.0, zorder=1)
    if not all(below):
        ax.bar(
            [c for c, neg in zip(centres, below, strict=True) if not neg],
            [v for v, neg in zip(values, below, strict=True) if not neg],
            width=[w for w, neg in zip(widths, below, strict=True) if not neg],
            color=POINTS,
            alpha=0.85,
            linewidth=0,
            zorder=2,
            label=MASS_LABEL,
        )
    if any(below):
        ax.bar(
            [c for c, neg in zip(centres, below, strict=True) if neg],
            [v for v, neg in zip(values, below, strict=True) if neg],
            width=[w for w, neg in zip(widths, below, strict=True) if neg],
            facecolor=NEGATIVE_FILL,
            edgecolor=NEGATIVE_EDGE,
            hatch="////",
            linewidth=0.8,
            zorder=2,
            label=NEGATIVE_LABEL,
        )
    ax.vlines(
        centres, lows, highs, color=BAND_COLOUR, linewidth=1.1, zorder=3, label=f"{level} band"
    )
    ax.plot(
        centres + centres,
        lows + highs,
        linestyle="none",
        marker="_",
        markersize=5,
        color=BAND_COLOUR,
        zorder=3,
    )
    ax.set_title(title, loc="left")
    ax.set_xlim(-0.6, len(bins) - 0.4)
    ticks, labels = _bin_ticks(bins)
    ax.set_xticks(ticks, labels, rotation=60, fontsize=7)
    tidy_axes(ax)
    ax.grid(False, axis="x")


def _legend_rank(text: str) -> int:
    """Legend order: the bars, the warning bars, then the bands."""
    return {MASS_LABEL: 0, NEGATIVE_LABEL: 1}.get(text, 2)


def complier_masses_svg(implication: LateImplication) -> str:
    """SVG of the implied complier masses per outcome bin, treated and untreated panels."""
    bins = implication.bins
    _check_bins(bins)
    level = fmt_pct(implication.band_level)
    with figure_style():
        fig = new_figure(*MASSES_SIZE)
        axes = fig.subplots(1, 2, sharey=True, squeeze=False)[0]
        for ax, (title, *names) in zip(axes, PANELS, strict=True):
            _draw_panel(ax, bins, title, (names[0], names[1], names[2]), level)
            ax.set_xlabel(wrap_label(f"{implication.label}, by bin"))
        axes[0].set_ylabel("Implied complier mass")
        found: dict[str, Any] = {}
        for ax in axes:
            for handle, text in zip(*ax.get_legend_handles_labels(), strict=True):
                found.setdefault(text, handle)
        labels = sorted(found, key=_legend_rank)
        fig.legend(
            [found[text] for text in labels],
            labels,
            loc="outside lower center",
            ncols=3,
            frameon=False,
            fontsize=8,
        )
        return to_svg(fig)


def _panel_alt(bins: list[DensityBin], title: str, mass: str) -> str:
    values = [getattr(b, mass) for b in bins]
    return (
        f"{title}: from {fmt_num(min(values))} to {fmt_num(max(values))}, adding up to "
        f"{fmt_num(math.fsum(values))}"
    )


def _complier_alt(analysis: ComplierAnalysis, implication: LateImplication) -> str:
    bins = implication.bins
    level = fmt_pct(implication.band_level)
    panels = "; ".join(_panel_alt(bins, title.lower(), mass) for title, mass, _, _ in PANELS)
    flagged = [
        f"{title.lower()}, {bin_text(b)} ({fmt_num(getattr(b, mass))} "
        f"{fmt_ci(getattr(b, low), getattr(b, high))})"
        for title, mass, low, high in PANELS
        for b in bins
        if getattr(b, high) < 0
    ]
    text = [
        f"Two bar charts of the implied share of compliers with {implication.label} in each of "
        f"{fmt_int(len(bins))} bins from {fmt_num(bins[0].lower)} to {fmt_num(bins[-1].upper)}: "
        f"compliers when treated (left) and when untreated (right), each bar with a {level} "
        f"bootstrap band ({fmt_int(implication.draws)} draws).",
        f"The masses run {panels} (each sum estimates the complier share, "
        f"{fmt_num(analysis.shares.compliers)}).",
        f"Bands wholly below zero: {and_join(flagged)}."
        if flagged
        else "No band lies wholly below zero.",
    ]
    return " ".join(text)


def complier_masses_figure(analysis: ComplierAnalysis) -> FigureImage:
    """The complier figure as a ``FigureImage`` with its alt text and caption."""
    implication = analysis.late_implication
    if not isinstance(implication, LateImplication):
        raise ValueError(
            f"the LATE implication was not computed ({implication.reason}); there is no "
            "complier figure to draw"
        )
    level = fmt_pct(implication.band_level)
    caption = (
        f"Implied share of the rows that are compliers with {implication.label} in each bin. "
        f"Left, among the treated: the share treated with the outcome in the bin when "
        f"{analysis.instrument_label} is on, minus that share when it is off. Right, among the "
        "untreated: the share untreated with the outcome in the bin when it is off, minus that "
        "share when it is on. Under the LATE assumptions no bar can be negative. Bins stand "
        "side by side at equal width, the axis marking their edges. Vertical "
        f"lines are pointwise {level} bootstrap bands ({fmt_int(implication.draws)} draws, seed "
        f"{implication.seed}); a hatched bar has a band wholly below zero. The horizontal line "
        "marks zero."
    )
    return FigureImage(
        key=COMPLIER_MASSES_KEY,
        svg=complier_masses_svg(implication),
        alt=_complier_alt(analysis, implication),
        caption=caption,
    )


def complier_figure(balance: Balance | NotApplicable) -> FigureImage | None:
    """The complier figure, or None when there is none to draw (see ``has_complier_figure``)."""
    if not isinstance(balance, Balance) or not isinstance(balance.compliers, ComplierAnalysis):
        return None
    if not has_complier_figure(balance):
        return None
    return complier_masses_figure(balance.compliers)
