"""The tF procedure (Lee, McCrary, Moreira & Porter 2022, "Valid t-ratio inference for IV").

With one endogenous regressor and one instrument, the usual 2SLS t-ratio is kept, but it is
read against a critical value c(F) that depends on the first-stage F instead of against
1.96: the test of beta = b rejects when |t| > c(F), and the interval is estimate +/- c(F) SE.
c(F) is infinite for F <= z^2 (3.84 at the 5% level), decreases with F, and equals the
normal critical value from some F on (104.7 at the 5% level; at 1% it stays above 2.576
at every F). How c(F) is computed is in ``tf_curve.py``; the 90%, 95% and 99% curves are
read from reportkit/checks/data/tf_critical_values.json (written by
benchmarks/make_tf_table.py), other levels are computed on first use.

The F must be the first-stage F computed with the same covariance as the 2SLS standard
error (robust, cluster or classical): the paper's result holds for that pairing.

Several instruments: the paper derives and proves the size guarantee for one instrument,
where the t-ratio depends on the data only through the Anderson-Rubin and first-stage
t-ratios. With several instruments the 2SLS t-ratio depends on more nuisance parameters
than the F summarises, and no F-based critical-value function is known to control its size.
``tf_inference`` therefore returns NotApplicable when ``n_instruments`` > 1 rather than a
number with a caveat; the Anderson-Rubin set is the weak-instrument-robust answer there.

The adjusted p-value is the smallest level at which the tF test rejects beta = 0: with
c_alpha the curve at level 1 - alpha, p = inf{alpha : |t| > c_alpha(F)}. It is at least the
normal p-value 2 Phi(-|t|) (c >= z) and at least 2 Phi(-sqrt F) (no finite c below z^2),
and it equals the normal p-value where F is past the point at which c_alpha reaches z. It is
found by root-finding over the level, computing each level's curve (about 0.1 s each).
"""

from __future__ import annotations

import json
import math
from functools import cache, lru_cache
from pathlib import Path

import numpy as np
from scipy import optimize, special, stats

from reportkit.checks.tf_curve import CriticalCurve, node_grid, solve_curve
from reportkit.results import Interval, NotApplicable, TFResult

TABLE_FILE = Path(__file__).parent / "data" / "tf_critical_values.json"
Z_MIN = 0.05  # curves are computed for z in [Z_MIN, Z_MAX]: levels 0.04 to 1 - 1e-299
Z_MAX = 37.0
_LEVEL_MATCH = 1e-12
_NO_FINITE_C = 1e12  # stands for an infinite critical value in root-finding


def _z(level: float) -> float:
    if not 0 < level < 1:
        raise ValueError(f"level must be strictly between 0 and 1, got {level}")
    z = float(stats.norm.isf((1 - level) / 2))
    if not Z_MIN <= z <= Z_MAX:
        raise ValueError(
            f"tF critical values are computed for levels from {_level(Z_MIN):.3f} to "
            f"1 - {2 * stats.norm.sf(Z_MAX):.0e}; got {level}"
        )
    return z


def _level(z: float) -> float:
    return float(1 - 2 * stats.norm.sf(z))


@cache
def _tabulated() -> dict[float, CriticalCurve]:
    data = json.loads(TABLE_FILE.read_text(encoding="utf-8"))
    return {
        float(row["level"]): CriticalCurve(
            z=float(row["z"]), s=np.array(row["s"], dtype=float), c=np.array(row["c"])
        )
        for row in data["levels"]
    }


@lru_cache(maxsize=64)
def _computed(z: float) -> CriticalCurve:
    return solve_curve(z, node_grid(z))


def critical_curve(level: float) -> CriticalCurve:
    """The tF curve at ``level`` (confidence level, e.g. 0.95): from the table when the
    level is one of its levels, otherwise computed (and kept for the process)."""
    z = _z(level)
    for tab_level, curve in _tabulated().items():
        if abs(tab_level - level) < _LEVEL_MATCH:
            return curve
    return _computed(z)


def tf_critical_value(f: float, level: float = 0.95) -> float | None:
    """The tF critical value c(F) for the 2SLS t-ratio given the first-stage F ``f``.

    None when F <= z^2 (3.84 at 95%): no finite critical value, the tF interval is the
    whole line. Lee, McCrary, Moreira & Porter (2022).
    """
    curve = critical_curve(level)
    if not (math.isfinite(f) and f > curve.z**2):
        return None
    return curve.at_sqrt_f(math.sqrt(f))


def _c_at(z: float, sqrt_f: float) -> float:
    """c at level z and sqrt(F) = sqrt_f; a huge number where no finite one exists."""
    if sqrt_f <= z:
        return _NO_FINITE_C
    for curve in _tabulated().values():
        if curve.z == z:
            value = curve.at_sqrt_f(sqrt_f)
            break
    else:
        value = _computed(z).at_sqrt_f(sqrt_f)
    return _NO_FINITE_C if value is None else min(value, _NO_FINITE_C)


def tf_p_value(t_statistic: float, first_stage_f: float) -> float | None:
    """Smallest level at which the tF test rejects (t = estimate / SE under the null).

    None when it is below 2 Phi(-Z_MAX) (about 1e-299), outside the levels computed.
    """
    t = abs(t_statistic)
    if not (math.isfinite(t) and math.isfinite(first_stage_f)) or first_stage_f <= 0:
        return None
    r = math.sqrt(first_stage_f)
    floor = max(float(special.ndtr(-t)), float(special.ndtr(-r))) * 2  # p >= both
    z_hi = min(t, r)
    if z_hi <= Z_MIN:
        return min(1.0, floor)
    if z_hi > Z_MAX:
        if _c_at(Z_MAX, r) < t:
            return None
        z_hi = Z_MAX
    elif t < r and _c_at(t, r) <= t:  # F is past the point where c_alpha reaches z
        return float(2 * special.ndtr(-t))
    # c_z(sqrt F) increases in z, from about z at small z to no finite value at sqrt F;
    # the root is usually just below z_hi, so bracket it from there
    step = 0.05 * z_hi
    z_lo = max(Z_MIN, z_hi - step)
    while z_lo > Z_MIN and _c_at(z_lo, r) >= t:
        z_hi, step = z_lo, 2 * step
        z_lo = max(Z_MIN, z_lo - step)
    z_star = optimize.brentq(lambda z: _c_at(z, r) - t, z_lo, z_hi, xtol=1e-9, rtol=1e-9)
    return float(2 * special.ndtr(-z_star))


def tf_inference(
    estimate: float,
    std_error: float,
    first_stage_f: float,
    level: float = 0.95,
    *,
    n_instruments: int = 1,
) -> TFResult | NotApplicable:
    """tF inference on one 2SLS coefficient (Lee, McCrary, Moreira & Porter 2022).

    ``first_stage_f`` must be the first-stage F with the covariance of ``std_error``.
    Returns the t-ratio for beta = 0, c(F), the interval estimate +/- c(F) SE and the
    adjusted p-value; NotApplicable with several instruments (see the module docstring),
    with a standard error that is not positive, or when F <= z^2 (no finite c(F)).
    """
    if n_instruments != 1:
        return NotApplicable(
            reason=f"the model has {n_instruments} instruments: the tF critical values are "
            "derived for one instrument, and with several the F does not pin down the "
            "distribution of the 2SLS t-ratio; see the Anderson-Rubin set instead"
        )
    if not (math.isfinite(std_error) and std_error > 0 and math.isfinite(estimate)):
        return NotApplicable(reason="the 2SLS standard error is zero or not finite")
    if not (math.isfinite(first_stage_f) and first_stage_f >= 0):
        return NotApplicable(reason="the first-stage F is not a finite, non-negative number")
    z = _z(level)
    t = estimate / std_error
    p = tf_p_value(t, first_stage_f)
    c = tf_critical_value(first_stage_f, level)
    pct = f"{100 * level:g}%"
    if c is None:
        p_text = "" if p is None else f" (adjusted p-value {p:.3g})"
        return NotApplicable(
            reason=f"the first-stage F ({first_stage_f:.3g}) is not above {z * z:.3g}, the "
            f"square of the normal critical value at the {pct} level: the tF critical "
            f"value is infinite, so the tF {pct} confidence interval is the whole real "
            f"line and the tF test cannot reject beta = 0 at this level{p_text}"
        )
    half = c * std_error
    return TFResult(
        first_stage_f=first_stage_f,
        critical_value=c,
        t_statistic=t,
        p_value_adjusted=p,
        interval=Interval(lower=estimate - half, upper=estimate + half),
        note=_note(c, z, level)
        + (
            ""
            if p is not None
            else f" The adjusted p-value is below {2 * stats.norm.sf(Z_MAX):.0e}, the "
            "smallest level computed."
        ),
    )


def _note(c: float, z: float, level: float) -> str:
    curve = critical_curve(level)
    pct = f"{100 * level:g}%"
    at_z = np.nonzero(curve.c <= z)[0]
    if at_z.size:
        f_z = (z + float(curve.s[at_z[0]])) ** 2
        tail = f"it equals the normal {z:.3g} from F = {f_z:.4g} on"
    else:
        tail = f"at this level it stays above the normal {z:.3g} at every F"
    adjust = (
        f"the 2SLS standard error is in effect scaled by {c / z:.3g}"
        if c > z
        else "no adjustment is needed at this F"
    )
    return (
        f"tF critical value at the {pct} level: {c:.3g} ({adjust}); {tail}. The first-stage "
        "F is the one computed with the same covariance as the 2SLS standard error."
    )
