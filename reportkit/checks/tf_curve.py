"""The tF critical-value function c(F) of Lee, McCrary, Moreira & Porter (2022), computed.

Written by hand: no library in our stack computes it, and the paper publishes it as a table
at conventional levels; this module derives it for any level from the paper's definition,
so reportkit can state exactly what it reads the t-ratio against. ``tf.py`` uses it; the
table of the conventional levels is computed once by ``benchmarks/make_tf_table.py``.

The definition (LMMP 2022). With one instrument, asymptotically, let a be the
Anderson-Rubin t-ratio at the true coefficient (standard normal), f the first-stage t-ratio
(normal with mean f0 and variance 1, F = f^2) and rho their correlation. The 2SLS t-ratio
satisfies t^2 = a^2 / (1 - 2 rho a / f + a^2 / f^2). The worst case for size is |rho| = 1,
where a = f - f0 and the t-ratio is a function of f alone, t = f (f - f0) / f0. At level
alpha (z the two-sided normal critical value) the tF test rejects when F > z^2 and
|t| > c(F). c is infinite for F <= z^2 (rejecting there would already exceed alpha at
f0 = 0) and chosen above so that the rejection probability at rho = 1 is alpha for every
f0 > 0. Where that would need c < z, c = z is used (the test is then conservative): at the
5% level from F = 104.7 on.

Two points the paper's 1% and 5% tables do not need, settled here for every level: the
curve is clamped at z as it is computed (later points are solved given the clamped ones;
at the 5% level this gives exactly the paper's 1.96 from F = 104.7 on), and it is then
replaced by its smallest non-increasing majorant (c(F) = max of the curve over F' >= F).
Both only raise c, so the rejection probability stays at most alpha. The majorant changes
nothing at the 90%, 95% and 99% levels (checked when the table is built); it matters only
for z between about 1.97 and 2.32 (levels 95.1% to 98.0%), where the curve solved this way
touches z and later rises above it again, and raises c there by at most 0.02.

The computation (a march from the boundary). For f0 > 0 the acceptance region at rho = 1
is an interval [-n, f_u] with possibly a band (a, b) inside (z, f0) cut out: f_u is where
f (f - f0) / f0 meets c(f) (one crossing: increasing against non-increasing), n where
f (f + f0) / f0 meets c(f) on the negative side, the band where f (f0 - f) / f0 exceeds
c(f). The unknown is u(f) = 1 / c(f)^2 on nodes z < f_1 < f_2 < ..., with u(z) = 0 and u
linear between nodes. For a new node f_k and a trial u_k, f0 = f_k^2 / (f_k + c_k) makes f_k
the upper crossing, and every other boundary lies below f_k where u is known; one root-find
per node makes Phi(-n - f0) + Phi(f0 - f_k) + [Phi(b - f0) - Phi(a - f0)] equal alpha. The
march starts from the boundary expansion c(z + s) ~ z^2.5 / sqrt(2 s), s -> 0 (the loss of
acceptance f0^2 z phi(z) inside [-z, z] is made up by slivers of width s on both sides).

Reading the curve between nodes: log c is interpolated in log s (s = sqrt(F) - z) with a
monotone cubic (Fritsch & Carlson 1980, scipy's PCHIP), so c stays non-increasing and
continuous; before the first node c follows the boundary law c ~ s^-1/2; past the last node
c - z falls like 1/F, the second-order expansion of the two tails for large f0 (c - z ~
z^3 (z^2 - 4) / (2 F) when z > 2), scaled to meet the last node.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from functools import cached_property

import numpy as np
from scipy import optimize, special, stats
from scipy.interpolate import PchipInterpolator

S_MIN = 1e-6  # first node's distance sqrt(F) - z from the boundary
S_MAX = 100.0  # last node's distance sqrt(F) - z is at least this (see s_max), 1/F tail beyond
START_S = 1e-10  # the march starts here from the boundary expansion
_XTOL = 1e-14


def s_max(z: float) -> float:
    """Last node's distance sqrt(F) - z: far enough that the 1/F tail holds (f0 well past
    c^2 ~ z^2), at least S_MAX."""
    return max(S_MAX, 20 * z * z)


def node_grid(z: float) -> np.ndarray:
    """Distances s = sqrt(F) - z of the nodes: sparse near the boundary (where c ~ s^-1/2,
    which log-log interpolation reproduces) and in the tail, dense where the curve bends."""
    parts = [
        np.geomspace(S_MIN, 1e-3, 30),
        np.geomspace(1e-3, 30.0, 260),
        np.geomspace(30.0, S_MAX, 25),
    ]
    last = s_max(z)
    if last > S_MAX:
        parts.append(np.geomspace(S_MAX, last, 1 + math.ceil(25 * math.log(last / S_MAX))))
    return np.unique(np.concatenate(parts))


def march_grid(z: float, extra: int = 1500) -> np.ndarray:
    """``node_grid`` plus a finer geometric grid, to check the accuracy of the nodes (the
    march interpolates u between nodes, so its accuracy depends on their spacing)."""
    grid = node_grid(z)
    return np.unique(np.concatenate([grid, np.geomspace(grid[0], grid[-1], extra)]))


@dataclass(frozen=True, eq=False)
class CriticalCurve:
    """c(F) for one level: nodes s = sqrt(F) - z (ascending) and critical values c."""

    z: float
    s: np.ndarray
    c: np.ndarray
    majorant_raise: float = 0.0  # largest amount the non-increasing majorant raised c

    @cached_property
    def _end(self) -> int:
        """Index of the first node where c = z (c stays z after it), else the last node."""
        at_z = np.nonzero(self.c <= self.z)[0]
        return int(at_z[0]) if at_z.size else self.s.size - 1

    @cached_property
    def _pchip(self) -> PchipInterpolator:
        # the monotone cubic ends at the node where c reaches z, so that its one-sided end
        # slope, not a flat neighbour, shapes the approach to z
        end = self._end + 1
        return PchipInterpolator(np.log(self.s[:end]), np.log(self.c[:end]))

    def at_sqrt_f(self, f: float) -> float | None:
        """c at sqrt(F) = f; None when F <= z^2 (no finite critical value)."""
        s = f - self.z
        if not s > 0:
            return None
        if s < self.s[0]:
            value = float(self.c[0]) * math.sqrt(float(self.s[0]) / s)
        elif s >= self.s[self._end]:
            f_end = self.z + float(self.s[self._end])
            value = self.z + (float(self.c[self._end]) - self.z) * (f_end / f) ** 2
        else:
            value = math.exp(float(self._pchip(math.log(s))))
        return max(value, self.z)


class _Nodes:
    """u = 1/c^2 on nodes f (ascending), u(z) = 0, linear in between; grows by one node."""

    def __init__(self, z: float, f: np.ndarray, u: np.ndarray, capacity: int) -> None:
        self.z = z
        self.f = np.empty(capacity + 1)
        self.u = np.empty(capacity + 1)
        self.n = 1 + f.size
        self.f[0], self.u[0] = z, 0.0
        self.f[1 : self.n], self.u[1 : self.n] = f, u

    def push(self, f: float, u: float) -> None:
        self.f[self.n], self.u[self.n] = f, u
        self.n += 1

    def view(self, f_trial: float, u_trial: float) -> tuple[np.ndarray, np.ndarray]:
        self.f[self.n], self.u[self.n] = f_trial, u_trial
        return self.f[: self.n + 1], self.u[: self.n + 1]


def _root(fun: Callable[[float], float], a: float, b: float) -> float:
    return float(optimize.brentq(fun, a, b, xtol=_XTOL, rtol=4 * np.finfo(float).eps))


def _piece_root(
    fn: np.ndarray, un: np.ndarray, a: float, b: float, f0: float, sign: float
) -> float:
    """Root in [a, b] of x |f0 + sign x| / f0 * sqrt(u(x)) - 1, where [a, b] lies within
    one node interval (u linear there); plain floats, for speed."""
    k = int(np.searchsorted(fn, b, side="left"))
    x0, u0 = float(fn[k - 1]), float(un[k - 1])
    slope = (float(un[k]) - u0) / (float(fn[k]) - x0)

    def d(x: float) -> float:
        return x * abs(f0 + sign * x) / f0 * math.sqrt(max(u0 + (x - x0) * slope, 0.0)) - 1.0

    return _root(d, a, b)


def _rejection_rho1(z: float, fn: np.ndarray, un: np.ndarray, f0: float, f_upper: float) -> float:
    """Rejection probability at rho = 1 and first-stage mean f0 > 0 for the curve on nodes
    (fn, un) whose last node ``f_upper`` is the upper acceptance boundary."""
    v = fn * (fn + f0) / f0 * np.sqrt(un) - 1.0
    i = int(np.argmax(v > 0))
    if not v[i] > 0:  # cannot happen: at f_upper the value is at least 1
        raise RuntimeError("tF curve: no acceptance boundary on the negative side")
    n = _piece_root(fn, un, float(fn[i - 1]), float(fn[i]), f0, 1.0)
    r = float(special.ndtr(-n - f0) + special.ndtr(f0 - f_upper))
    if f0 <= z:
        return r
    # grid: the nodes inside (z, f0) and 64 equal steps, so each step lies in one piece
    inside = fn[(fn > z) & (fn < f0)]
    grid = np.unique(np.concatenate([inside, np.linspace(z, f0, 65)]))
    vals = grid * (f0 - grid) / f0 * np.sqrt(np.interp(grid, fn, un)) - 1.0
    pos = vals > 0
    idx = np.nonzero(pos[1:] != pos[:-1])[0]
    roots = [_piece_root(fn, un, float(grid[j]), float(grid[j + 1]), f0, -1.0) for j in idx]
    if len(roots) % 2:  # cannot happen: the function is -1 at z and at f0
        raise RuntimeError("tF curve: unpaired boundary of a rejection band")
    for a, b in zip(roots[0::2], roots[1::2], strict=True):
        r += float(special.ndtr(b - f0) - special.ndtr(a - f0))
    return r


def solve_curve(z: float, s_nodes: np.ndarray) -> CriticalCurve:
    """The critical-value curve at two-sided normal critical value z (level 1 - alpha with
    alpha = 2 Phi(-z)) on the nodes z + s_nodes (plus the points where it meets z)."""
    if not z > 0:
        raise ValueError("z must be positive")
    alpha = float(2 * stats.norm.sf(z))
    s_start = np.geomspace(START_S, float(s_nodes[0]), 6)[:-1]
    c_start = z**2.5 / np.sqrt(2 * s_start)
    nodes = _Nodes(z, z + s_start, 1 / c_start**2, capacity=s_start.size + 2 * s_nodes.size)
    f_last = z + float(s_start[-1])
    f0_prev = f_last**2 / (f_last + float(c_start[-1]))
    log_uz = -2 * math.log(z)  # u at c = z
    out_s: list[float] = []
    out_c: list[float] = []

    def excess(fk: float, log_u: float) -> float:
        uk = math.exp(log_u)
        f0 = fk * fk / (fk + 1 / math.sqrt(uk))
        fn, un = nodes.view(fk, uk)
        return _rejection_rho1(z, fn, un, f0, fk) - alpha

    clamped = False
    for s in s_nodes:
        fk = z + float(s)
        lo = -2 * math.log(fk * fk / f0_prev - fk) + 1e-12  # f0 just past the last node's
        e_z = excess(fk, log_uz)
        if (e_z < 0) != clamped:  # the curve meets z between the last node and this one
            f_prev = float(nodes.f[nodes.n - 1])
            fc = _root(lambda x: excess(x, log_uz), f_prev, fk)
            if f_prev + 1e-9 < fc < fk - 1e-9:  # else the node itself marks the crossing
                nodes.push(fc, math.exp(log_uz))
                out_s.append(fc - z)
                out_c.append(z)
                f0_prev = fc * fc / (fc + z)
            clamped = not clamped
            lo = -2 * math.log(fk * fk / f0_prev - fk) + 1e-12
        if clamped:
            log_u = log_uz
        else:
            e_lo = excess(fk, lo)
            if not e_lo < 0 <= e_z:
                raise RuntimeError(f"tF curve: no solution bracketed at z={z}, s={s}")
            log_u = _root(lambda x, fk=fk: excess(fk, x), lo, log_uz)
        ck = math.exp(-0.5 * log_u)
        nodes.push(fk, math.exp(log_u))
        f0_prev = fk * fk / (fk + ck)
        out_s.append(float(s))
        out_c.append(ck)
    raw = np.maximum(np.array(out_c), z)
    c = np.maximum.accumulate(raw[::-1])[::-1]  # smallest non-increasing majorant
    return CriticalCurve(z=z, s=np.array(out_s), c=c, majorant_raise=float(np.max(c - raw)))
