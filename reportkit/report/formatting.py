"""Jinja filters that turn numbers and results parts into display text.

Every number in the appendix passes through one of these functions, so the rules are
stated once and unit-tested. They return plain ``str`` (never ``Markup``): the template
environment autoescapes their output like any other text.

Rules
-----
- ``fmt_num``: ``digits`` significant digits, but the digits left of the decimal point
  are never rounded away (1234.5 -> "1,235" with 3 digits); commas group thousands;
  trailing zeros are kept, since they show the precision (0.5 -> "0.500"). Magnitudes
  of at least 1e6 or below 1e-4 are written in scientific notation ("1.23e7",
  "4.56e-5"). Halves round away from zero, applied to the shortest decimal form of the
  float (what ``repr`` prints), so 2.675 -> "2.68" as a reader expects.
- Values that are not numbers are shown, not hidden: NaN -> "NaN", infinities -> "inf"
  and "-inf". ``None`` is an error: an optional field must be handled explicitly by
  the template, never printed as a blank.
- ``fmt_p``: "< 0.001" below 0.001, otherwise three decimals.
- ``fmt_fixed``: a fixed number of decimals (two by default), for critical values, which
  their published tables print that way (19.93, 8.68).
- ``fmt_level``: a test level as its shortest decimal ("0.05", "0.025").
- Negative numbers use the ASCII hyphen-minus so that copied values paste into
  statistical software unchanged.
- Confidence sets (``fmt_set``) are written as intervals joined by "U": "[a, b]",
  "(-inf, a] U [b, +inf)", "[a, +inf)"; a set that is the whole line or empty is said
  in words, because "(-inf, +inf)" and "{}" are easy to misread.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from decimal import ROUND_HALF_UP, Decimal, localcontext

from reportkit.results import ConfidenceSet, Interval, NotApplicable, TestResult

SCIENTIFIC_ABOVE = 1e6
SCIENTIFIC_BELOW = 1e-4
P_FLOOR = 0.001

_DISTRIBUTION_NAMES = {
    "chi2": "chi-squared",
    "F": "F",
    "normal": "standard normal",
    "conditional": "conditional on Q_T (Moreira 2003), q =",
    "bootstrap": "bootstrap",
}


def _require_real(x: object, what: str) -> float:
    """Reject None, bools and non-numbers with a message naming the filter."""
    if x is None:
        raise TypeError(f"{what} got None; handle the missing value in the template")
    if isinstance(x, bool) or not isinstance(x, int | float):
        raise TypeError(f"{what} expects a number, got {type(x).__name__}")
    return float(x)


def _non_finite(x: float) -> str | None:
    if math.isnan(x):
        return "NaN"
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return None


def _round_half_up(x: float, decimals: int) -> Decimal:
    quantum = Decimal(1).scaleb(-decimals)
    return Decimal(repr(x)).quantize(quantum, rounding=ROUND_HALF_UP)


def fmt_num(x: float | int, digits: int = 3) -> str:
    """A number with ``digits`` significant digits (see the module docstring for the rule)."""
    value = _require_real(x, "fmt_num")
    if digits < 1:
        raise ValueError("fmt_num needs at least one significant digit")
    special = _non_finite(value)
    if special is not None:
        return special
    if value == 0:
        return "0"
    magnitude = abs(value)
    if magnitude >= SCIENTIFIC_ABOVE or magnitude < SCIENTIFIC_BELOW:
        with localcontext() as ctx:
            ctx.rounding = ROUND_HALF_UP
            mantissa, exponent = f"{Decimal(repr(value)):.{digits - 1}e}".split("e")
        return f"{mantissa}e{int(exponent)}"
    decimals = max(0, digits - 1 - math.floor(math.log10(magnitude)))
    return f"{_round_half_up(value, decimals):,.{decimals}f}"


def fmt_p(p: float) -> str:
    """A p-value: "< 0.001" below 0.001, otherwise three decimals ("0.042", "1.000")."""
    value = _require_real(p, "fmt_p")
    if math.isnan(value):
        return "NaN"
    if not 0.0 <= value <= 1.0:
        raise ValueError(f"fmt_p got {value!r}, which is not a probability")
    if value < P_FLOOR:
        return "< 0.001"
    return f"{_round_half_up(value, 3):.3f}"


def fmt_fixed(x: float, decimals: int = 2) -> str:
    """A number with a fixed number of decimals, halves rounded away from zero ("19.93")."""
    value = _require_real(x, "fmt_fixed")
    special = _non_finite(value)
    if special is not None:
        return special
    return f"{_round_half_up(value, decimals):,.{decimals}f}"


def fmt_level(alpha: float) -> str:
    """A test level (a probability) as its shortest decimal: 0.05 -> "0.05"."""
    value = _require_real(alpha, "fmt_level")
    if not 0.0 < value < 1.0:
        raise ValueError(f"fmt_level got {value!r}, which is not a test level")
    return format(Decimal(repr(round(value, 10))).normalize(), "f")


def fmt_int(n: int) -> str:
    """A count with thousands separated by commas ("12,345")."""
    if n is None or isinstance(n, bool) or not isinstance(n, int):
        raise TypeError(f"fmt_int expects an int, got {type(n).__name__}")
    return f"{n:,}"


def fmt_ci(lower: float, upper: float, digits: int = 3) -> str:
    """A confidence interval as "[lower, upper]", each end formatted by ``fmt_num``."""
    return f"[{fmt_num(lower, digits)}, {fmt_num(upper, digits)}]"


def fmt_pct(x: float, digits: int = 0) -> str:
    """A proportion as a percentage (0.95 -> "95%")."""
    value = _require_real(x, "fmt_pct")
    special = _non_finite(value)
    if special is not None:
        return special
    return f"{_round_half_up(100 * value, digits):.{digits}f}%"


def label(name: str, labels: Mapping[str, str]) -> str:
    """The readable label of a column, falling back to the column name itself."""
    text = labels.get(name, "")
    return text if text.strip() else name


def and_join(items: Iterable[str]) -> str:
    """Join words as a sentence does: "a", "a and b", "a, b and c"."""
    words = [str(item) for item in items]
    if not words:
        raise ValueError("and_join got an empty list; say 'none' in the template instead")
    if len(words) == 1:
        return words[0]
    return ", ".join(words[:-1]) + " and " + words[-1]


def upper_first(text: str) -> str:
    """Capitalise the first character only (Jinja's ``capitalize`` lowercases the rest)."""
    return text[:1].upper() + text[1:]


def sentence(text: str) -> str:
    """A note as a sentence: first letter capitalised, a full stop added if none ends it."""
    text = upper_first(text.strip())
    return text if not text or text.endswith((".", "!", "?")) else f"{text}."


def fmt_df(df: Sequence[float]) -> str:
    """Degrees of freedom: "2" or "2, 118" (integers without decimals)."""
    if not df:
        raise ValueError("fmt_df got no degrees of freedom")
    parts = []
    for value in df:
        number = _require_real(value, "fmt_df")
        parts.append(fmt_int(int(number)) if number.is_integer() else fmt_num(number))
    return ", ".join(parts)


def fmt_distribution(test: TestResult) -> str:
    """The reference distribution with its degrees of freedom: "F, 2 and 60 df"."""
    name = _DISTRIBUTION_NAMES[test.distribution]
    if test.distribution in ("normal", "bootstrap"):
        return name
    if test.distribution == "conditional":
        return f"{name} {and_join(fmt_df([d]) for d in test.df)}"
    return f"{name}, {and_join(fmt_df([d]) for d in test.df)} df"


def fmt_test(result: TestResult | NotApplicable) -> str:
    """A test in one phrase: "12.3, p < 0.001", or "n/a: <reason>" when it does not apply."""
    if isinstance(result, NotApplicable):
        return f"n/a: {result.reason}"
    if isinstance(result, TestResult):
        return f"{fmt_num(result.statistic)}, p {p_phrase(result.p_value)}"
    raise TypeError(f"fmt_test expects a TestResult or NotApplicable, got {type(result).__name__}")


def p_phrase(p: float) -> str:
    """A p-value to follow the letter p in running text: "= 0.042" or "< 0.001"."""
    text = fmt_p(p)
    return text if text.startswith("<") else f"= {text}"


WHOLE_LINE_TEXT = "all values (the data do not bound the effect)"
EMPTY_SET_TEXT = (
    "empty: no value of the coefficient is consistent with all instruments at this level "
    "\N{EM DASH} evidence against the model's over-identifying restrictions"
)


def fmt_interval(interval: Interval, digits: int = 3) -> str:
    """One closed interval, open-ended on a side that is unbounded: "[a, b]", "(-inf, b]"."""
    lower = "(-inf" if interval.lower is None else f"[{fmt_num(interval.lower, digits)}"
    upper = "+inf)" if interval.upper is None else f"{fmt_num(interval.upper, digits)}]"
    return f"{lower}, {upper}"


def _check_shape(cs: ConfidenceSet) -> None:
    """Refuse a set whose pieces contradict its stated shape (an engine error, not data)."""
    pieces = cs.pieces
    bounded = [p.lower is not None and p.upper is not None for p in pieces]
    fits = {
        "interval": len(pieces) == 1 and bounded[0],
        "two_rays": len(pieces) == 2
        and pieces[0].lower is None
        and pieces[0].upper is not None
        and pieces[1].lower is not None
        and pieces[1].upper is None,
        "ray": len(pieces) == 1 and (pieces[0].lower is None) != (pieces[0].upper is None),
        "whole_line": not pieces
        or (len(pieces) == 1 and pieces[0] == Interval(lower=None, upper=None)),
        "empty": not pieces,
        "union": len(pieces) >= 1,
    }[cs.shape]
    if not fits:
        shown = " U ".join(fmt_interval(p) for p in pieces) or "no pieces"
        raise ValueError(f"a confidence set of shape '{cs.shape}' cannot have the pieces {shown}")


def fmt_set(cs: ConfidenceSet | NotApplicable, digits: int = 3) -> str:
    """A confidence set in words or intervals (see the module docstring), or "n/a: <reason>"."""
    if isinstance(cs, NotApplicable):
        return f"n/a: {cs.reason}"
    if not isinstance(cs, ConfidenceSet):
        raise TypeError(
            f"fmt_set expects a ConfidenceSet or NotApplicable, got {type(cs).__name__}"
        )
    _check_shape(cs)
    if cs.shape == "whole_line":
        return WHOLE_LINE_TEXT
    if cs.shape == "empty":
        return EMPTY_SET_TEXT
    return " U ".join(fmt_interval(piece, digits) for piece in cs.pieces)


def yes_no(flag: bool) -> str:
    """A boolean as "yes" or "no" (never "True"/"False")."""
    if not isinstance(flag, bool):
        raise TypeError(f"yes_no expects a bool, got {type(flag).__name__}")
    return "yes" if flag else "no"


def is_na(result: object) -> bool:
    """Jinja test: is this entry a NotApplicable (shown with its reason)?"""
    return isinstance(result, NotApplicable)


FILTERS = {
    "fmt_num": fmt_num,
    "fmt_p": fmt_p,
    "fmt_int": fmt_int,
    "fmt_fixed": fmt_fixed,
    "fmt_level": fmt_level,
    "fmt_ci": fmt_ci,
    "fmt_pct": fmt_pct,
    "fmt_df": fmt_df,
    "fmt_distribution": fmt_distribution,
    "fmt_test": fmt_test,
    "p_phrase": p_phrase,
    "label": label,
    "and_join": and_join,
    "upper_first": upper_first,
    "sentence": sentence,
    "fmt_interval": fmt_interval,
    "fmt_set": fmt_set,
    "yes_no": yes_no,
}

TESTS = {"not_applicable": is_na}
