"""Sensitivity of the 2SLS estimate to a bounded failure of the exclusion restriction.

Conley, Hansen & Rossi (2012), "Plausibly exogenous": the model is
y = X beta + Z gamma + W delta + e, where gamma, the instruments' direct effects on the
outcome, is not assumed to be zero but to lie in a box given by the authors. Two answers:

- union of confidence intervals (UCI): for each gamma in the box, the 2SLS of y - Z gamma on
  X (same controls, weights and covariance as the main estimate) gives an interval; the UCI
  is their union, a valid interval for beta whatever gamma in the box is true;
- local-to-zero (LTZ): gamma ~ N(mu, Omega), independent of the data, so that beta-hat is
  approximately N(beta + A mu, V + A Omega A') with A = (X'P_Z X)^-1 X'P_Z Z and V the
  2SLS covariance; the interval is (beta-hat - A mu) +/- z sqrt(diag(V + A Omega A')).

Also reported, per instrument: the breakdown value (the smallest direct effect of that
instrument alone at which the interval first covers zero) and the curve of the estimate
and its interval against that instrument's direct effect.

Written by hand: no library in our stack implements these. Everything follows from two
linear facts. Partialling out W and the sqrt-weight transform are linear, so
M_W (y - Z gamma) = m.y - m.z gamma and each gamma is the engine's 2SLS on the moments with
y replaced. And 2SLS is linear in y, so beta(gamma) = beta(0) - A gamma and the residual
e(gamma) = e(0) - (Z - X A) gamma are affine in gamma; every covariance the engine computes
(classical: e'e; robust and cluster: sums of the scores (P_Z X)_i e_i) then makes the
variance of coefficient j a quadratic form var_j(gamma) = (1, gamma)' Q_j (1, gamma).

Why the box's vertices suffice. For the classical, robust and one-way cluster covariances
Q_j is a sum of squares, positive semi-definite, so sqrt(var_j) is a seminorm of an affine
function of gamma and is convex: the lower end beta_j(gamma) - z sqrt(var_j(gamma)) is
concave and the upper end convex, and over the box the smallest lower end and the largest
upper end are attained at vertices. The UCI therefore evaluates the 2^r vertices (r =
instruments given a range) exactly, each with the engine's own 2SLS; as the box is
connected and the ends continuous, the union is one interval. The same concavity makes
the breakdown search one root-find (brentq) per direction: along gamma_k = s t (t >= 0)
the end nearer zero, signed to be positive at t = 0, is concave in t, so it crosses zero
at most once on [0, T], and only if it is <= 0 at T (T = 100 times the largest absolute
bound of that instrument's range).

Two-way clustering (Cameron, Gelbach & Miller 2011) gives Q_j = Q_1 + Q_2 - Q_12, which
need not be positive semi-definite (common with fewer than about 20 clusters in a
dimension). Each Q_j is then checked; when one is not, the vertex rule is not exact: the
UCI is also searched on a grid of about 4,096 points over the box (vertices included) and
polished from the best grid point by a bounded local search (L-BFGS-B; Byrd, Lu, Nocedal
& Zhu 1995), and the breakdown is found by a scan of 513 points along each direction
followed by bisection. Where var_j(gamma) < 0 no interval exists: such a gamma counts as
covering zero for the breakdown, makes the UCI unbounded on both sides (None), and is
left out of the curve; a negative variance at gamma = 0 (the main estimate's) makes the
local-to-zero interval unbounded too.

The curve and the breakdown search use the quadratic forms (one residual pass for all of
them, instead of one 2SLS per point: the grid may have 1,001 points per instrument); they
are algebraically identical to the engine's 2SLS on y - Z gamma, which the tests confirm.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, replace

import numpy as np
from scipy import optimize, stats

from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.estimators import EstimateArrays, tsls
from reportkit.engine.moments import Moments
from reportkit.results import (
    DirectEffectSensitivity,
    ExclusionSensitivity,
    Interval,
    SensitivityPoint,
)

DirectEffectRange = tuple[float, float, float | None, float | None]

PRIOR_SD_FRACTION = 0.25  # default prior sd: a quarter of the range (range = mean +/- 2 sd)
BREAKDOWN_SEARCH_FACTOR = 100.0  # search up to this multiple of the range's largest bound
FALLBACK_GRID_BUDGET = 4096  # grid points over the box when the vertex rule is not exact
FALLBACK_SCAN_POINTS = 513  # scan points along a direction when the ends are not concave
PSD_TOLERANCE = 1e-10  # relative, for the two-way check of the quadratic forms


@dataclass(frozen=True)
class _Family:
    """2SLS as a function of the ranged direct effects gamma (r of them).

    estimate(gamma) = base + shift @ gamma; var_j(gamma) = v' forms[j] v with v = (1, gamma).
    ``exact_vertices`` is True when every form is positive semi-definite.
    """

    base: np.ndarray  # (p,)
    shift: np.ndarray  # (p, r) = -A restricted to the ranged instruments
    forms: np.ndarray  # (p, 1 + r, 1 + r)
    exact_vertices: bool

    def ends(self, gamma: np.ndarray, zcrit: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Estimate, lower and upper end for gamma of shape (..., r); each (..., p)."""
        g = np.asarray(gamma, dtype=float)
        est = self.base + g @ self.shift.T
        v = np.concatenate([np.ones((*g.shape[:-1], 1)), g], axis=-1)
        var = np.einsum("...s,jst,...t->...j", v, self.forms, v)
        with np.errstate(invalid="ignore"):
            half = zcrit * np.sqrt(var)
        return est, est - half, est + half


def _sensitivity_matrix(m: Moments) -> np.ndarray:
    """A = (X'P_Z X)^-1 X'P_Z Z, (p, q); X'P_Z Z = X'Z."""
    return np.linalg.solve(m.xpx, m.zx.T)


def _family(m: Moments, cov: CovarianceSpec, base: EstimateArrays, cols: list[int]) -> _Family:
    """The estimate and the variance quadratic forms with the engine's 2SLS conventions."""
    n, p = m.n, m.p
    k = p + m.k_exog
    a_inv = np.linalg.inv(m.xpx)  # the 2SLS bread (estimators.kclass with kappa = 1)
    sens = _sensitivity_matrix(m)[:, cols]  # (p, r)
    resid0 = m.y - m.x @ base.params
    # e(gamma) = e(0) - (Z - X A) gamma: columns of e's coefficients on (1, gamma)
    blocks = np.column_stack([resid0, -(m.z[:, cols] - m.x @ sens)])  # (n, 1 + r)
    nb = blocks.shape[1]
    if cov.kind == "classical":
        ee = blocks.T @ blocks / (n - k)
        forms = np.diag(a_inv)[:, None, None] * ee[None, :, :]
    else:
        scores = (blocks[:, :, None] * m.xhat[:, None, :]).reshape(n, nb * p)
        meat = cov.meat(scores, k).reshape(nb, p, nb, p)
        forms = np.einsum("ja,satb,jb->jst", a_inv, meat, a_inv)
    forms = (forms + np.swapaxes(forms, 1, 2)) / 2
    exact = True
    if cov.kind == "cluster" and len(cov.clusters) == 2:
        for form in forms:
            eig = np.linalg.eigvalsh(form)
            if eig[0] < -PSD_TOLERANCE * max(float(np.abs(eig).max()), 1e-300):
                exact = False
    return _Family(base=base.params, shift=-sens, forms=forms, exact_vertices=exact)


def _embed(gamma_r: np.ndarray, cols: list[int], q: int) -> np.ndarray:
    full = np.zeros(q)
    full[cols] = gamma_r
    return full


def _tsls_ends(
    m: Moments, cov: CovarianceSpec, gamma: np.ndarray, zcrit: float
) -> tuple[np.ndarray, np.ndarray]:
    """Ends of the engine's 2SLS interval for y - Z gamma (gamma a full q-vector); NaN where
    the (two-way) variance is negative."""
    fit = tsls(replace(m, y=m.y - m.z @ gamma), cov)
    with np.errstate(invalid="ignore"):
        se = np.sqrt(np.diag(fit.cov))
    return fit.params - zcrit * se, fit.params + zcrit * se


def _vertices(lower: np.ndarray, upper: np.ndarray) -> np.ndarray:
    """The box's distinct vertices, (<= 2^r, r)."""
    choices = [sorted({float(lo), float(hi)}) for lo, hi in zip(lower, upper, strict=True)]
    return np.array(list(itertools.product(*choices)), dtype=float).reshape(
        -1 if choices else 1, len(choices)
    )


def _box_grid(lower: np.ndarray, upper: np.ndarray) -> np.ndarray:
    """An even grid over the box, vertices included, within FALLBACK_GRID_BUDGET points."""
    r = lower.shape[0]
    per_axis = max(2, int(round(FALLBACK_GRID_BUDGET ** (1 / r), 9)))
    axes = [np.linspace(lo, hi, per_axis) for lo, hi in zip(lower, upper, strict=True)]
    return np.array(list(itertools.product(*axes)), dtype=float).reshape(-1, r)


def _union(
    m: Moments,
    cov: CovarianceSpec,
    fam: _Family,
    cols: list[int],
    lower: np.ndarray,
    upper: np.ndarray,
    zcrit: float,
) -> list[Interval]:
    """The union of the intervals over the box, one per endogenous regressor."""
    ends = [_tsls_ends(m, cov, _embed(v, cols, m.q), zcrit) for v in _vertices(lower, upper)]
    lows = np.array([lo for lo, _ in ends])
    highs = np.array([hi for _, hi in ends])
    grid = None
    if not fam.exact_vertices and cols:
        grid = _box_grid(lower, upper)
        _, glo, ghi = fam.ends(grid, zcrit)
        lows = np.concatenate([lows, glo])
        highs = np.concatenate([highs, ghi])
    out = []
    for j in range(m.p):
        if np.isnan(lows[:, j]).any() or np.isnan(highs[:, j]).any():
            out.append(Interval(lower=None, upper=None))  # no interval somewhere in the box
            continue
        lo, hi = float(lows[:, j].min()), float(highs[:, j].max())
        if grid is not None:
            lo = min(lo, _polish(fam, j, grid[np.argmin(glo[:, j])], lower, upper, zcrit, 1))
            hi = max(hi, -_polish(fam, j, grid[np.argmax(ghi[:, j])], lower, upper, zcrit, -1))
        out.append(Interval(lower=lo, upper=hi))
    return out


def _polish(
    fam: _Family,
    j: int,
    start: np.ndarray,
    lower: np.ndarray,
    upper: np.ndarray,
    zcrit: float,
    sign: int,
) -> float:
    """Local minimum of the lower end (sign 1) or of minus the upper end (sign -1) from the
    best grid point, inside the box (L-BFGS-B); +inf if the search leaves the defined set."""

    def objective(g: np.ndarray) -> float:
        _, lo, hi = fam.ends(g, zcrit)
        return float(lo[j]) if sign == 1 else -float(hi[j])

    res = optimize.minimize(
        objective, start, method="L-BFGS-B", bounds=list(zip(lower, upper, strict=True))
    )
    value = float(res.fun)
    return value if np.isfinite(value) else np.inf


def _first_crossing(end: Callable[[float], float], limit: float, concave: bool) -> float | None:
    """Smallest t in (0, limit] where ``end`` (positive at 0) is <= 0 or undefined (NaN);
    None if there is none."""
    xtol = limit * 1e-14
    if concave:
        # concave and positive at 0: at most one crossing, and only if end(limit) <= 0
        if end(limit) > 0:
            return None
        return float(optimize.brentq(end, 0.0, limit, xtol=xtol, rtol=1e-15))

    def holds(t: float) -> bool:
        return bool(end(t) > 0)  # False for NaN: no interval there

    ts = np.linspace(0.0, limit, FALLBACK_SCAN_POINTS)
    for left, right in itertools.pairwise(ts):
        if not holds(right):
            lo, hi = float(left), float(right)
            while hi - lo > xtol:
                mid = (lo + hi) / 2
                lo, hi = (mid, hi) if holds(mid) else (lo, mid)
            return hi
    return None


def _breakdown(fam: _Family, j: int, k: int, zcrit: float, limit: float) -> float | None:
    """Smallest |gamma_k| (others 0) at which coefficient j's interval first covers zero."""
    r = fam.shift.shape[1]
    _, lo0, hi0 = fam.ends(np.zeros(r), zcrit)
    if not lo0[j] > 0 and not hi0[j] < 0:
        return 0.0  # covers zero (or no interval) already
    positive = bool(lo0[j] > 0)
    if not limit > 0:
        return None

    def nearer_end(t: float, sign: float) -> float:
        g = np.zeros(r)
        g[k] = sign * t
        _, lo, hi = fam.ends(g, zcrit)
        return float(lo[j]) if positive else -float(hi[j])

    found = []
    for sign in (1.0, -1.0):
        root = _first_crossing(lambda t, s=sign: nearer_end(t, s), limit, fam.exact_vertices)
        if root is not None:
            found.append(root)
    return min(found) if found else None


def _prior(rng: DirectEffectRange) -> tuple[float, float]:
    """(mean, sd) of the local-to-zero prior, defaults filled in."""
    lower, upper, mean, sd = rng
    return (
        float(mean) if mean is not None else (lower + upper) / 2,
        float(sd) if sd is not None else PRIOR_SD_FRACTION * (upper - lower),
    )


def exclusion_sensitivity(
    m: Moments,
    cov: CovarianceSpec,
    *,
    ranges: Mapping[int, DirectEffectRange],
    instrument_names: Sequence[str],
    endog_names: Sequence[str],
    labels: Mapping[str, str],
    level: float,
    grid_points: int,
    covariance_text: str,
) -> list[ExclusionSensitivity]:
    """Union-of-intervals and local-to-zero inference with the instruments' direct effects
    bounded (Conley, Hansen & Rossi 2012), one result per endogenous regressor.

    ``ranges`` maps an instrument's column index to (lower, upper, prior_mean, prior_sd);
    the prior defaults are the midpoint and (upper - lower) / 4. Instruments not listed have
    no direct effect. Intervals are normal-based at ``level``, as the main estimates are.
    """
    if len(instrument_names) != m.q or len(endog_names) != m.p:
        raise ValueError("instrument_names and endog_names must match the moments' columns")
    cols = sorted(ranges)
    for c in cols:
        if not 0 <= c < m.q:
            raise ValueError(f"direct-effect range for instrument column {c}: no such column")
        if ranges[c][1] < ranges[c][0]:
            raise ValueError(f"direct-effect range for instrument column {c}: upper < lower")
    if grid_points < 2:
        raise ValueError("grid_points must be at least 2")
    zcrit = float(stats.norm.ppf(0.5 + level / 2))
    lower = np.array([float(ranges[c][0]) for c in cols])
    upper = np.array([float(ranges[c][1]) for c in cols])
    priors = np.array([_prior(ranges[c]) for c in cols]).reshape(-1, 2)
    means, sds = priors[:, 0], priors[:, 1]
    base = tsls(m, cov)
    fam = _family(m, cov, base, cols)

    union = _union(m, cov, fam, cols, lower, upper, zcrit)

    # local to zero: estimate shifted by -A mu, variance V + A Omega A' (Omega diagonal)
    ltz_est = base.params + fam.shift @ means
    main_var = np.diag(base.cov)
    ltz_var = main_var + (fam.shift**2) @ (sds**2)
    ltz = [
        Interval(lower=float(e - zcrit * np.sqrt(v)), upper=float(e + zcrit * np.sqrt(v)))
        if v0 >= 0
        else Interval(lower=None, upper=None)  # a negative two-way variance V: no interval
        for e, v, v0 in zip(ltz_est, ltz_var, main_var, strict=True)
    ]

    # curves: one instrument moving over its range, the others at zero
    curves = []
    for i in range(len(cols)):
        g = np.zeros((grid_points, len(cols)))
        g[:, i] = np.linspace(lower[i], upper[i], grid_points)
        curves.append((cols[i], g[:, i], *fam.ends(g, zcrit)))

    out = []
    for j, endog in enumerate(endog_names):
        rows = [
            DirectEffectSensitivity(
                instrument=instrument_names[c],
                label=labels.get(instrument_names[c], instrument_names[c]),
                lower=float(lower[i]),
                upper=float(upper[i]),
                prior_mean=float(means[i]),
                prior_sd=float(sds[i]),
                breakdown=_breakdown(
                    fam, j, i, zcrit, BREAKDOWN_SEARCH_FACTOR * max(abs(lower[i]), abs(upper[i]))
                ),
            )
            for i, c in enumerate(cols)
        ]
        curve = [
            SensitivityPoint(
                instrument=instrument_names[c],
                gamma=float(gam[t]),
                estimate=float(est[t, j]),
                ci_lower=float(lo[t, j]),
                ci_upper=float(hi[t, j]),
            )
            for c, gam, est, lo, hi in curves
            for t in range(grid_points)
            if not np.isnan(lo[t, j])  # no interval where a two-way variance is negative
        ]
        out.append(
            ExclusionSensitivity(
                endogenous=endog,
                label=labels.get(endog, endog),
                ranges=rows,
                union_interval=union[j],
                local_to_zero=ltz[j],
                local_to_zero_estimate=float(ltz_est[j]),
                curve=curve,
                covariance=covariance_text,
                level=level,
            )
        )
    return out
