"""Moreira (2003) conditional likelihood ratio (CLR) test and its confidence set.

Homoskedastic errors, one endogenous regressor. With Y = [y x] partialled on W, the
reduced-form error covariance estimated by Omega = Y'M_Z Y / (n - k), k = q + columns of W,
and b0 = (1, -b):

- Q_S(b) = (n - k) b0'Y'P_Z Y b0 / b0'Y'M_Z Y b0 (q times the AR statistic's F form);
- lambda_min <= lambda_max, the eigenvalues of (n - k) (Y'M_Z Y)^-1 Y'P_Z Y, do not depend
  on b; Q_S + Q_T = lambda_min + lambda_max (trace) and Q_S Q_T - Q_ST^2 = their product;
- CLR(b) = [Q_S - Q_T + sqrt((Q_S + Q_T)^2 - 4 (Q_S Q_T - Q_ST^2))] / 2 = Q_S(b) - lambda_min.

Under the null, given Q_T = t, CLR is distributed as
(Q_1 + Q_{q-1} - t + sqrt((Q_1 + Q_{q-1} + t)^2 - 4 t Q_{q-1})) / 2 with independent
chi-squares (Moreira 2003). Its conditional p-value is the one-dimensional integral of
Andrews, Moreira & Stock (2006): with Q = Q_1 + Q_{q-1} ~ chi2(q) and B = Q_{q-1} / Q ~
Beta((q - 1)/2, 1/2) independent of Q, CLR > m iff Q > m (m + t) / (m + t (1 - B)), so
P(CLR > m | t) = E_B[ chi2_q survival at m (m + t) / (m + t (1 - B)) ], computed by adaptive
Gauss-Jacobi-type quadrature (QUADPACK's algebraic-weight rule), deterministic.

Confidence set: CLR(b) and Q_T(b) depend on b only through Q_S(b), which runs over
[lambda_min, lambda_max] as b runs over the real line and infinity (b -> +/- infinity gives
the finite limit Q_S = (n - k) x'P_Z x / x'M_Z x). The accepted values of Q_S are found on
an adaptive grid of that bounded range, each crossing of the level refined by brentq; every
boundary value maps back to b through a quadratic equation, and each stretch between the
resulting points is classified by evaluating the CLR p-value at one interior point. An
unbounded set is therefore detected exactly, without searching over large |b|.

Written by hand: no library computes CLR sets from sufficient statistics (ivmodels refits
from the data and is a test reference only).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg
from scipy import integrate, optimize, special, stats

from reportkit.checks.anderson_rubin import (
    center_and_scale,
    null_text,
    pieces_from_stretches,
    quadratic_roots,
    set_shape,
    stretch_points,
)
from reportkit.engine.moments import Moments
from reportkit.results import ConfidenceSet, NotApplicable, TestResult

CLR_NAME = "Conditional likelihood ratio"
CLR_REFERENCE = "Moreira 2003; conditional p-value: Andrews, Moreira & Stock 2006"
GRID_POINTS = 160
REFINE_STEP = 0.01  # subdivide grid cells where the p-value moves more than this
REFINE_DEPTH = 8


def clr_conditional_p_value(lr: float, qt: float, q: int) -> float:
    """P(CLR > lr | Q_T = qt) under the null with q instruments (Andrews, Moreira & Stock 2006)."""
    if not lr > 0:
        return 1.0
    if q == 1 or qt <= 0:  # q = 1: CLR = Q_S ~ chi2(1); Q_T = 0: CLR = Q_S ~ chi2(q)
        return float(stats.chi2.sf(lr, q))
    a, half_q = (q - 1) / 2, q / 2

    def survival(u: float) -> float:
        return float(special.gammaincc(half_q, lr * (lr + qt) / (lr + qt * (1 - u)) / 2))

    val, _ = integrate.quad(
        survival, 0.0, 1.0, weight="alg", wvar=(a - 1, -0.5), epsabs=0.0, epsrel=1e-10, limit=200
    )
    return float(min(1.0, max(0.0, val / special.beta(a, 0.5))))


@dataclass(frozen=True)
class ClrProblem:
    """The moments the CLR test needs: Y'P_Z Y, Y'M_Z Y (Y = [y x]) and their eigenvalues."""

    q: int
    dof: int
    ypy: np.ndarray  # (2, 2)
    ymy: np.ndarray  # (2, 2)
    lam_min: float
    lam_max: float
    center: float
    scale: float

    def q_s(self, b: np.ndarray | float) -> np.ndarray:
        b = np.asarray(b, dtype=float)
        num = self.ypy[0, 0] - 2 * b * self.ypy[0, 1] + b * b * self.ypy[1, 1]
        den = self.ymy[0, 0] - 2 * b * self.ymy[0, 1] + b * b * self.ymy[1, 1]
        return np.clip(self.dof * num / den, self.lam_min, self.lam_max)

    def q_s_at_infinity(self) -> float:
        return float(
            np.clip(self.dof * self.ypy[1, 1] / self.ymy[1, 1], self.lam_min, self.lam_max)
        )

    def p_value_of_q_s(self, qs: float) -> float:
        lr = max(qs - self.lam_min, 0.0)
        qt = max(self.lam_min + self.lam_max - qs, 0.0)
        return clr_conditional_p_value(lr, qt, self.q)

    def statistic(self, b: float) -> tuple[float, float]:
        """(CLR(b), Q_T(b))."""
        qs = float(self.q_s(b))
        return max(qs - self.lam_min, 0.0), max(self.lam_min + self.lam_max - qs, 0.0)

    def p_values(self, betas: np.ndarray) -> np.ndarray:
        return np.array([self.p_value_of_q_s(float(s)) for s in self.q_s(betas)])


def clr_problem(m: Moments) -> ClrProblem:
    if m.p != 1:
        raise ValueError("the CLR test here is for one endogenous regressor")
    p = 1
    yx = m.gram[: 1 + p, : 1 + p]
    zyx = m.gram[1 + p :, : 1 + p]
    ypy = zyx.T @ m.zz_inv @ zyx
    ypy = (ypy + ypy.T) / 2
    ymy = yx - ypy
    ymy = (ymy + ymy.T) / 2
    dof = m.n - m.q - m.k_exog
    lam = scipy.linalg.eigh(ypy, ymy / dof, eigvals_only=True)
    lam_min = max(float(lam[0]), 0.0)
    center, scale = center_and_scale(m)
    return ClrProblem(
        q=m.q,
        dof=dof,
        ypy=ypy,
        ymy=ymy,
        lam_min=lam_min,
        lam_max=max(float(lam[-1]), lam_min),
        center=center,
        scale=scale,
    )


def clr_test(problem: ClrProblem, beta0: float, label: str) -> TestResult:
    """CLR test of beta = beta0 with its conditional p-value."""
    lr, qt = problem.statistic(beta0)
    return TestResult(
        name=CLR_NAME,
        statistic=lr,
        distribution="conditional",
        df=[float(problem.q)],
        p_value=clr_conditional_p_value(lr, qt, problem.q),
        covariance="classical",
        null=null_text(label, beta0)
        + f" (p-value from the statistic's null distribution given Q_T = {qt:.4g}, which lies "
        f"between chi2(1) and chi2({problem.q}); assumes homoskedastic errors)",
        reference=CLR_REFERENCE,
    )


def _accepted_q_s(problem: ClrProblem, alpha: float) -> list[float]:
    """Values of Q_S in (lambda_min, lambda_max) where the CLR p-value crosses alpha."""
    lo, hi = problem.lam_min, problem.lam_max
    if hi - lo <= 1e-12 * max(1.0, hi):
        return []
    u = (1 - np.cos(np.linspace(0, np.pi, GRID_POINTS))) / 2  # denser near both ends
    grid = list(lo + (hi - lo) * u)
    vals = [problem.p_value_of_q_s(s) for s in grid]
    # adaptive refinement where the p-value moves fast
    for _ in range(REFINE_DEPTH):
        new_grid, new_vals, changed = [grid[0]], [vals[0]], False
        for j in range(1, len(grid)):
            if abs(vals[j] - vals[j - 1]) > REFINE_STEP:
                mid = (grid[j - 1] + grid[j]) / 2
                new_grid.append(mid)
                new_vals.append(problem.p_value_of_q_s(mid))
                changed = True
            new_grid.append(grid[j])
            new_vals.append(vals[j])
        grid, vals = new_grid, new_vals
        if not changed:
            break
    crossings = []
    for j in range(1, len(grid)):
        f0, f1 = vals[j - 1] - alpha, vals[j] - alpha
        if (f0 >= 0) != (f1 >= 0):
            crossings.append(
                float(
                    optimize.brentq(
                        lambda s: problem.p_value_of_q_s(s) - alpha,
                        grid[j - 1],
                        grid[j],
                        xtol=1e-13 * max(1.0, hi),
                        rtol=1e-14,
                    )
                )
            )
    return crossings


def clr_set(problem: ClrProblem, level: float) -> ConfidenceSet:
    """The CLR confidence set: {b : CLR p-value(b) >= 1 - level}."""
    alpha = 1 - level
    roots_t: list[float] = []
    c, s = problem.center, problem.scale
    for sigma in _accepted_q_s(problem, alpha):
        mat = problem.ypy - (sigma / problem.dof) * problem.ymy  # b0' mat b0 = 0, b = c + s t
        a0 = mat[0, 0] - 2 * c * mat[0, 1] + c * c * mat[1, 1]
        a1 = 2 * s * (c * mat[1, 1] - mat[0, 1])
        a2 = s * s * mat[1, 1]
        roots_t.extend(float(r) for r in quadratic_roots(a2, a1, a0))
    roots = np.unique(np.array(roots_t))
    points = stretch_points(roots)
    accepted = [bool(pv >= alpha) for pv in problem.p_values(c + s * points)]
    pieces = pieces_from_stretches([float(c + s * r) for r in roots], accepted)
    return ConfidenceSet(
        shape=set_shape(pieces),  # type: ignore[arg-type]
        pieces=pieces,
        level=level,
        method=(
            "inversion through Q_S(b), on which CLR(b) depends alone: the accepted range of "
            "Q_S located on an adaptive grid and refined by root finding (brentq), each "
            "boundary mapped back to b in closed form; conditional p-values by quadrature"
        ),
        covariance="classical",
        reference=CLR_REFERENCE,
    )


def clr_not_applicable(kind: str) -> NotApplicable:
    what = "cluster-robust" if kind == "cluster" else "heteroskedasticity-robust"
    return NotApplicable(
        reason="the conditional likelihood ratio test (Moreira 2003) assumes homoskedastic "
        f"errors, while this analysis uses a {what} covariance; the Anderson-Rubin test and "
        "set are computed with the chosen covariance and are the weak-instrument-robust "
        "inference to read"
    )
