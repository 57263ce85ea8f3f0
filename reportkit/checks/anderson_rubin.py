"""Anderson & Rubin (1949) test of a coefficient value, and its confidence set by exact inversion.

One endogenous regressor x and q excluded instruments Z, all partialled on W (controls,
constant, fixed effects). The test of beta = b is the test that the instruments'
coefficients are zero in the regression of e(b) = y - x b on Z and W, which holds under the
null however weak the instruments are:

- classical: AR(b) = [e'P_Z e / q] / [e'M_Z e / (n - k)], k = q + columns of W, read against
  F(q, n - k) (exact under normal errors);
- robust and cluster: AR(b) = g(b)' V(b)^-1 g(b) / q with g(b) = Z'e(b) (sums) and V(b) the
  covariance of the score sums z_i u_i(b) with the spec's type and small-sample factor, where
  u(b) = M_Z e(b) is the residual of that regression (the Wald form, as the classical
  denominator e'M_Z e). Read against F(q, n - k), or F(q, G - 1) with clusters (G the
  smallest number of clusters): the reading the first-stage F uses. With this form AR(b)
  tends, as |b| grows, to the first-stage F with the same covariance, so the set is
  bounded exactly when that F exceeds the same critical value.

Inversion is exact, never a grid search. Classical: {b : AR(b) <= c} is a quadratic
inequality, solved in closed form (interval, two rays, whole line or empty). Robust: g is
linear and V quadratic in b, so AR(b) <= c iff det(c V(b) - g g') >= 0 where V(b) is
positive definite; its boundary points are the real eigenvalues of a quadratic eigenvalue
problem, linearised to a 2q x 2q generalised eigenproblem; each stretch between consecutive
roots is then classified by evaluating AR at one interior point.

Written by hand: the reference library for these tests (ivmodels) is homoskedastic only and
refits from the data; here everything comes from the moments plus one residual pass.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.linalg
from scipy import optimize, stats

from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.moments import Moments
from reportkit.results import ConfidenceSet, Interval, NotApplicable, TestResult

AR_NAME = "Anderson-Rubin"
AR_REFERENCE = "Anderson & Rubin 1949"
AR_ROBUST_REFERENCE = "Anderson & Rubin 1949; robust score form: Andrews, Stock & Sun 2019"
# eigenvalues of the linearised problem whose imaginary part is below this (relative to
# 1 + |value|) are kept as candidate boundaries: a spurious candidate only splits a stretch
# that is then merged back, a missed one would lose a piece of the set
IMAGINARY_TOLERANCE = 1e-6
# V(b) is treated as singular when its smallest eigenvalue (after scaling to unit
# diagonal) is below this
SINGULAR_TOLERANCE = 1e-10


class SingularScoreCovariance(Exception):
    """V(b), the covariance of the instrument-score sums, is not positive definite."""


def null_text(label: str, b: float) -> str:
    return f"the coefficient on {label} equals {b:g}"


# --- sets: pieces and shapes ---------------------------------------------------------


def pieces_from_stretches(roots: list[float], accepted: list[bool]) -> list[Interval]:
    """Sorted disjoint pieces from sorted boundary candidates and the status of each stretch.

    ``accepted[j]`` is the status of the stretch between roots[j - 1] and roots[j]
    (accepted[0] the ray below the first root, accepted[-1] the ray above the last).
    Adjacent accepted stretches merge (their shared root was a tangency or spurious).
    """
    if len(accepted) != len(roots) + 1:
        raise ValueError("one status per stretch is needed")
    pieces: list[Interval] = []
    start: float | None = None
    inside = False
    for j, ok in enumerate(accepted):
        lower = roots[j - 1] if j > 0 else None
        if ok and not inside:
            start, inside = lower, True
        elif not ok and inside:
            pieces.append(Interval(lower=start, upper=lower))
            inside = False
    if inside:
        pieces.append(Interval(lower=start, upper=None))
    return pieces


def set_shape(pieces: list[Interval]) -> str:
    """'interval', 'two_rays', 'ray', 'whole_line', 'empty' or 'union'."""
    if not pieces:
        return "empty"
    if len(pieces) == 1:
        lo, hi = pieces[0].lower, pieces[0].upper
        if lo is None and hi is None:
            return "whole_line"
        if lo is None or hi is None:
            return "ray"
        return "interval"
    if len(pieces) == 2 and pieces[0].lower is None and pieces[1].upper is None:
        return "two_rays"
    return "union"


def stretch_points(roots: np.ndarray) -> np.ndarray:
    """One interior point of each stretch between sorted roots (and of the two rays)."""
    if roots.size == 0:
        return np.array([0.0])
    step = 1.0 + float(np.max(np.abs(roots))) + float(roots[-1] - roots[0])
    mids = (roots[:-1] + roots[1:]) / 2
    return np.concatenate([[roots[0] - step], mids, [roots[-1] + step]])


def quadratic_roots(a2: float, a1: float, a0: float) -> np.ndarray:
    """Real roots of a2 t^2 + a1 t + a0 (numerically stable form), sorted."""
    scale = max(abs(a2), abs(a1), abs(a0))
    if scale == 0:
        return np.zeros(0)
    if abs(a2) <= 1e-14 * scale:
        return np.zeros(0) if a1 == 0 else np.array([-a0 / a1])
    disc = a1 * a1 - 4 * a2 * a0
    if disc < 0:
        return np.zeros(0)
    h = -(a1 + math.copysign(math.sqrt(disc), a1)) / 2
    if h == 0:
        return np.array([0.0])
    return np.sort(np.array([h / a2, a0 / h]))


# --- the test --------------------------------------------------------------------------


@dataclass(frozen=True)
class ArReading:
    """The reference distribution AR/q is read against: F(q, df_den)."""

    q: int
    df_den: int
    rule: str  # in words, for the set's method and the test's null

    def critical(self, level: float) -> float:
        return float(stats.f.isf(1 - level, self.q, self.df_den))

    def p_value(self, stat: float | np.ndarray) -> np.ndarray:
        return np.asarray(stats.f.sf(stat, self.q, self.df_den), dtype=float)


@dataclass(frozen=True)
class ClassicalAR:
    """AR(b) in t = (b - center) / scale: e'P_Z e and e'M_Z e as quadratics in t."""

    reading: ArReading
    center: float
    scale: float
    pz: tuple[float, float, float]  # e'P_Z e = pz0 + pz1 t + pz2 t^2
    mz: tuple[float, float, float]  # e'M_Z e = mz0 + mz1 t + mz2 t^2

    def statistic(self, b: np.ndarray | float) -> np.ndarray:
        """AR(b) in the F form: [e'P_Z e / q] / [e'M_Z e / (n - k)]."""
        t = (np.asarray(b, dtype=float) - self.center) / self.scale
        num = self.pz[0] + t * (self.pz[1] + t * self.pz[2])
        den = self.mz[0] + t * (self.mz[1] + t * self.mz[2])
        return (np.maximum(num, 0.0) / self.reading.q) / (den / self.reading.df_den)

    def at_infinity(self) -> float:
        """Limit of AR(b) as |b| grows: the classical first-stage F."""
        return (self.pz[2] / self.reading.q) / (self.mz[2] / self.reading.df_den)

    def invert(self, level: float) -> list[Interval]:
        """{b : AR(b) <= c} in closed form: a2 t^2 + a1 t + a0 <= 0."""
        kappa = self.reading.critical(level) * self.reading.q / self.reading.df_den
        a0, a1, a2 = (p - kappa * m for p, m in zip(self.pz, self.mz, strict=True))
        size = abs(self.pz[2]) + kappa * abs(self.mz[2])
        if abs(a2) <= 1e-12 * size:  # degenerate: linear in t
            if a1 == 0:
                pieces_t = [(None, None)] if a0 <= 0 else []
            elif a1 > 0:
                pieces_t = [(None, -a0 / a1)]
            else:
                pieces_t = [(-a0 / a1, None)]
        else:
            roots = quadratic_roots(a2, a1, a0)
            if a2 > 0:
                pieces_t = [] if roots.size == 0 else [(roots[0], roots[-1])]
            elif roots.size < 2 or roots[0] == roots[1]:
                pieces_t = [(None, None)]
            else:
                pieces_t = [(None, roots[0]), (roots[1], None)]
        return [Interval(lower=self._to_b(lo), upper=self._to_b(hi)) for lo, hi in pieces_t]

    def _to_b(self, t: float | None) -> float | None:
        return None if t is None else float(self.center + self.scale * t)


@dataclass(frozen=True)
class RobustAR:
    """AR(b) = g' V^-1 g in t = (b - center) / scale, g linear and V quadratic in t."""

    reading: ArReading
    center: float
    scale: float
    g0: np.ndarray  # g(t) = g0 + t g1
    g1: np.ndarray
    v0: np.ndarray  # V(t) = v0 + t v1 + t^2 v2
    v1: np.ndarray
    v2: np.ndarray

    def _stat_t(self, t: float) -> float:
        v = self.v0 + t * (self.v1 + t * self.v2)
        g = self.g0 + t * self.g1
        d = 1.0 / np.sqrt(np.abs(np.diag(v)))
        try:
            chol = scipy.linalg.cholesky(d[:, None] * v * d[None, :], lower=True)
        except (np.linalg.LinAlgError, ValueError) as exc:  # not PD, or not finite
            raise SingularScoreCovariance(t) from exc
        if np.min(np.diag(chol)) ** 2 < SINGULAR_TOLERANCE:
            raise SingularScoreCovariance(t)
        w = scipy.linalg.solve_triangular(chol, d * g, lower=True)
        return float(w @ w) / self.reading.q

    def statistic(self, b: np.ndarray | float) -> np.ndarray:
        """AR(b) / q (F form). Raises SingularScoreCovariance where V(b) is singular."""
        t = (np.atleast_1d(np.asarray(b, dtype=float)) - self.center) / self.scale
        out = np.array([self._stat_t(float(ti)) for ti in t])
        return out if np.ndim(b) else out[:1].reshape(())

    def at_infinity(self) -> float:
        """Limit of AR(b)/q as |b| grows: the first-stage Wald / q with this covariance."""
        return float(self.g1 @ np.linalg.solve(self.v2, self.g1)) / self.reading.q

    def boundary_candidates(self, crit: float) -> np.ndarray:
        """Real roots t of det(c V(t) - g(t) g(t)') = 0, c = q x critical value.

        The quadratic matrix polynomial P(t) = P0 + t P1 + t^2 P2 is linearised as
        [[0, I], [-P0, -P1]] w = t [[I, 0], [0, P2]] w with w = (v, t v).
        """
        c = crit * self.reading.q
        p0 = c * self.v0 - np.outer(self.g0, self.g0)
        p1 = c * self.v1 - np.outer(self.g0, self.g1) - np.outer(self.g1, self.g0)
        p2 = c * self.v2 - np.outer(self.g1, self.g1)
        d = 1.0 / np.sqrt(np.diag(self.v0))  # balance: same roots, better conditioning
        p0, p1, p2 = (d[:, None] * p * d[None, :] for p in (p0, p1, p2))
        q = p0.shape[0]
        eye, zero = np.eye(q), np.zeros((q, q))
        lhs = np.block([[zero, eye], [-p0, -p1]])
        rhs = np.block([[eye, zero], [zero, p2]])
        (alpha, beta) = scipy.linalg.eig(lhs, rhs, right=False, homogeneous_eigvals=True)
        finite = np.abs(beta) > 1e-13 * np.abs(alpha)
        vals = alpha[finite] / beta[finite]
        real = np.abs(vals.imag) <= IMAGINARY_TOLERANCE * (1 + np.abs(vals.real))
        roots = np.unique(np.sort(vals.real[real]))
        return np.array([self._polish(float(r), crit) for r in roots])

    def _polish(self, t: float, crit: float) -> float:
        """Refine a root by bracketing AR(t) = crit where it changes sign."""
        half = 1e-5 * (1 + abs(t))
        lo, hi = t - half, t + half
        try:
            flo, fhi = self._stat_t(lo) - crit, self._stat_t(hi) - crit
        except SingularScoreCovariance:
            return t
        if flo == 0 or fhi == 0 or (flo > 0) == (fhi > 0):
            return t
        return float(
            optimize.brentq(lambda s: self._stat_t(s) - crit, lo, hi, xtol=1e-14, rtol=1e-15)
        )

    def invert(self, level: float) -> list[Interval]:
        """{b : AR(b) <= c}: classify each stretch between boundary candidates."""
        crit = self.reading.critical(level)
        roots = np.sort(self.boundary_candidates(crit))
        accepted = [self._stat_t(float(t)) <= crit for t in stretch_points(roots)]
        roots_b = [float(self.center + self.scale * r) for r in roots]
        return pieces_from_stretches(roots_b, accepted)


ArProblem = ClassicalAR | RobustAR


def center_and_scale(m: Moments) -> tuple[float, float]:
    """The 2SLS estimate and its classical standard error: the natural origin and unit of b."""
    xpx, xpy = float(m.xpx[0, 0]), float(m.xpy[0])
    center = xpy / xpx if xpx > 0 else 0.0
    k = m.q + m.k_exog
    e = m.y - m.x[:, 0] * center
    s2 = float(e @ e) / max(m.n - k, 1)
    scale = math.sqrt(s2 / xpx) if xpx > 0 and s2 > 0 else 1.0
    if not math.isfinite(scale) or scale <= 0:
        scale = 1.0
    return center, scale


def anderson_rubin_problem(m: Moments, cov: CovarianceSpec) -> ArProblem | NotApplicable:
    """Set up AR(b) from the moments (plus one residual pass for robust and cluster)."""
    if m.p != 1:
        raise ValueError("the Anderson-Rubin set here is for one endogenous regressor")
    n, q = m.n, m.q
    k = q + m.k_exog
    center, scale = center_and_scale(m)
    if cov.kind == "classical":
        reading = ArReading(q=q, df_den=n - k, rule="AR/q against F(q, n - k)")
        ypy, xpy, xpx = m.ypy, float(m.xpy[0]), float(m.xpx[0, 0])
        yy, xy, xx = m.yy, float(m.xy[0]), float(m.xx[0, 0])
        # e(t) = (y - x c) - t s x
        pz = (ypy - 2 * center * xpy + center**2 * xpx, -2 * scale * (xpy - center * xpx))
        ee = (yy - 2 * center * xy + center**2 * xx, -2 * scale * (xy - center * xx))
        pz3 = (*pz, scale**2 * xpx)
        mz3 = (ee[0] - pz[0], ee[1] - pz[1], scale**2 * (xx - xpx))
        return ClassicalAR(reading=reading, center=center, scale=scale, pz=pz3, mz=mz3)

    if cov.kind == "cluster":
        g_min = int(cov.min_clusters or 0)
        if g_min <= q:
            return NotApplicable(
                reason=f"with {g_min} clusters and {q} instruments the cluster-robust "
                "covariance of the instrument-error sums has rank at most "
                f"{g_min}, so the Anderson-Rubin statistic is singular or constant in the "
                "coefficient; more clusters than instruments are needed"
            )
        reading = ArReading(q=q, df_den=g_min - 1, rule="AR/q against F(q, G - 1)")
    else:
        reading = ArReading(q=q, df_den=n - k, rule="AR/q against F(q, n - k)")
    x = m.x[:, 0]
    zx = m.zx[:, 0]
    ry = m.y - m.z @ (m.zz_inv @ m.zy)  # M_Z y
    rx = x - m.xhat[:, 0]  # M_Z x
    meat = cov.meat(np.column_stack([m.z * ry[:, None], m.z * rx[:, None]]), k)
    a, bm, cm = meat[:q, :q], meat[:q, q:], meat[q:, q:]
    bs = bm + bm.T
    # V(b) = A - b (B + B') + b^2 C, b = c + s t
    v0 = a - center * bs + center**2 * cm
    v1 = -scale * (bs - 2 * center * cm)
    v2 = scale**2 * cm
    sym = [(v + v.T) / 2 for v in (v0, v1, v2)]
    problem = RobustAR(
        reading=reading,
        center=center,
        scale=scale,
        g0=m.zy - center * zx,
        g1=-scale * zx,
        v0=sym[0],
        v1=sym[1],
        v2=sym[2],
    )
    for v in (sym[0], sym[2]):  # V at the 2SLS estimate and V's limit direction
        diag = np.diag(v)
        if np.any(diag <= 0):
            return _singular_reason(cov)
        d = 1 / np.sqrt(diag)
        if np.min(np.linalg.eigvalsh(d[:, None] * v * d[None, :])) < SINGULAR_TOLERANCE:
            return _singular_reason(cov)
    return problem


def _singular_reason(cov: CovarianceSpec) -> NotApplicable:
    if cov.kind == "cluster" and len(cov.clusters) == 2:
        why = (
            "the two-way cluster-robust covariance of the instrument-error sums (Cameron, "
            "Gelbach & Miller 2011) is not positive definite: it is a sum and difference of "
            "one-way covariances and can be indefinite when there are few clusters"
        )
    else:
        what = "cluster-robust" if cov.kind == "cluster" else "heteroskedasticity-robust"
        why = (
            f"the {what} covariance of the instrument-error sums is singular (too few "
            "clusters, or too few observations with non-zero instrument values)"
        )
    return NotApplicable(
        reason=f"{why}, so the Anderson-Rubin statistic cannot be computed with this covariance"
    )


def anderson_rubin_test(
    problem: ArProblem | NotApplicable, beta0: float, covariance: str, label: str
) -> TestResult | NotApplicable:
    """The Anderson-Rubin test of beta = beta0 (F form: AR/q)."""
    if isinstance(problem, NotApplicable):
        return problem
    try:
        stat = float(problem.statistic(beta0))
    except SingularScoreCovariance:
        return NotApplicable(
            reason="the covariance of the instrument-error sums is singular at the "
            "hypothesised value, so the Anderson-Rubin statistic cannot be computed there"
        )
    r = problem.reading
    return TestResult(
        name=AR_NAME,
        statistic=stat,
        distribution="F",
        df=[float(r.q), float(r.df_den)],
        p_value=float(r.p_value(stat)),
        covariance=covariance,
        null=null_text(label, beta0) + f" ({r.rule}; valid however weak the instruments)",
        reference=AR_REFERENCE if isinstance(problem, ClassicalAR) else AR_ROBUST_REFERENCE,
    )


def anderson_rubin_set(
    problem: ArProblem | NotApplicable, level: float, covariance: str
) -> ConfidenceSet | NotApplicable:
    """The exact Anderson-Rubin confidence set at the given confidence level."""
    if isinstance(problem, NotApplicable):
        return problem
    r = problem.reading
    if isinstance(problem, ClassicalAR):
        pieces = problem.invert(level)
        method = (
            f"exact inversion ({r.rule}): the values b with AR(b) at most the critical "
            "value, a quadratic inequality in b solved in closed form"
        )
        reference = AR_REFERENCE
    else:
        try:
            pieces = problem.invert(level)
        except SingularScoreCovariance:
            return NotApplicable(
                reason="the covariance of the instrument-error sums is not positive definite "
                "for some coefficient values (too few clusters, or a two-way cluster "
                "covariance that is not positive definite), so the Anderson-Rubin set "
                "cannot be computed with this covariance"
            )
        method = (
            f"exact inversion ({r.rule}): boundaries are the real roots of "
            "det(c V(b) - g(b) g(b)') = 0, from a linearised quadratic eigenvalue problem; "
            "each stretch between them checked at one interior point"
        )
        reference = AR_ROBUST_REFERENCE
    return ConfidenceSet(
        shape=set_shape(pieces),  # type: ignore[arg-type]
        pieces=pieces,
        level=level,
        method=method,
        covariance=covariance,
        reference=reference,
    )


def anderson_rubin_p_values(problem: ArProblem, betas: np.ndarray) -> np.ndarray:
    """AR p-values over a grid of hypothesised values (for the p-value curve)."""
    return problem.reading.p_value(problem.statistic(np.asarray(betas, dtype=float)))
