"""One balance or placebo regression through the moment engine, with its guards.

Every regression here is a ``Design`` handed to the same engine as the main estimates
(``compute_moments`` then ``fit_on_instruments``), so weights, absorbed fixed effects,
controls and the covariance (classical, HC1 or cluster-robust, with the engine's small-
sample factors) are treated exactly as in the main tables. The regressors of interest go
in the design's instrument slot; the engine partials out the constant (or the fixed
effects) and any controls and regresses the partialled dependent column on them.

Degenerate data never raise and never produce a non-finite number: a dependent variable
or regressor that does not vary in the rows used (after the fixed effects), regressors
that are collinear, fewer rows than columns, a single cluster, or an exact fit give
``NotApplicable`` with the reason in words. Where asked (the joint balance test), constant
or collinear regressors are dropped instead, and the caller names them.

The joint test of several coefficients is the Wald (1943) statistic with the spec's
covariance divided by their number, read against F with the engine's denominator
degrees of freedom (n - k, or G - 1 with clusters, G the smallest cluster count).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from reportkit.balance.rows import Rows
from reportkit.engine.covariance import CovarianceSpec, CovType
from reportkit.engine.design import Design
from reportkit.engine.firststage import LinearFit, fit_on_instruments
from reportkit.engine.moments import Moments, compute_moments
from reportkit.results import InstrumentCoefficient, NotApplicable, TestResult

# relative size below which a partialled column counts as zero (as in engine/absorb.py)
DEGENERATE_TOL = 1e-9
# relative eigenvalue below which a covariance matrix counts as singular (as in checks/)
SINGULAR_TOL = 1e-10


@dataclass(frozen=True)
class Regression:
    """A fitted balance or placebo regression and what it used."""

    fit: LinearFit
    moments: Moments  # z holds only the kept regressors
    cov: CovarianceSpec
    covariance: str  # the covariance in words, with this subset's cluster counts
    kept: tuple[int, ...]  # regressor columns used, in the given order
    constant: tuple[int, ...]  # regressor columns dropped: no variation in these rows
    collinear: tuple[int, ...]  # regressor columns dropped: collinear with earlier ones
    n: int
    absorbs_fixed_effects: bool

    @property
    def std_errors(self) -> np.ndarray:
        return np.sqrt(np.diag(self.fit.cov))


def plural(names: list[str]) -> str:
    """'a', 'a and b', 'a, b and c'."""
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]


def _after(rows: Rows, has_controls: bool) -> str:
    if rows.fixed_effects.shape[1] and has_controls:
        return " once the controls and fixed effects are partialled out"
    if rows.fixed_effects.shape[1]:
        return " within the fixed-effect groups"
    if has_controls:
        return " once the controls are partialled out"
    return ""


def _scales(values: np.ndarray, sqrt_w: np.ndarray | None) -> np.ndarray:
    """Norms of the (weight-transformed) raw columns: the yardstick for 'zero'."""
    v = values if sqrt_w is None else values * sqrt_w[:, None]
    return np.sqrt(np.sum(v * v, axis=0))


def _screen(z: np.ndarray, scales: np.ndarray) -> tuple[list[int], list[int], list[int]]:
    """Split columns into kept, constant (nothing left after partialling) and collinear.

    Columns are taken in order; one is collinear when its part orthogonal to the kept
    ones is below ``DEGENERATE_TOL`` of its raw size (Gram-Schmidt, orthogonalised twice
    for stability), so the earlier of two collinear columns is the one kept.
    """
    kept: list[int] = []
    constant: list[int] = []
    collinear: list[int] = []
    basis = np.zeros((z.shape[0], 0))
    for j in range(z.shape[1]):
        col = z[:, j]
        limit = DEGENERATE_TOL * scales[j]
        if scales[j] == 0 or np.linalg.norm(col) <= limit:
            constant.append(j)
            continue
        r = col - basis @ (basis.T @ col)
        r = r - basis @ (basis.T @ r)
        size = float(np.linalg.norm(r))
        if size <= limit:
            collinear.append(j)
            continue
        kept.append(j)
        basis = np.column_stack([basis, r / size])
    return kept, constant, collinear


def regress(
    rows: Rows,
    y: np.ndarray,
    regressors: np.ndarray,
    *,
    kind: CovType,
    y_name: str,
    regressor_names: list[str],
    where: str,
    cluster_names: tuple[str, ...] = (),
    controls: np.ndarray | None = None,
    endog: np.ndarray | None = None,
    drop_degenerate: bool = False,
) -> Regression | NotApplicable:
    """Regress ``y`` on ``regressors`` (rows already selected) with the engine.

    ``controls`` are partialled out with the constant or the fixed effects of ``rows``;
    ``endog`` only rides along (for a 2SLS on the same moments). ``where`` describes the
    rows for the reasons, e.g. 'in the 812 rows where age is present'.
    """
    n = rows.n
    if n == 0:
        lead = "no row is left" if rows.singletons else "there are no rows"
        return NotApplicable(reason=f"{lead} {where}")
    if kind == "cluster":
        for j, count in enumerate(int(c.max()) + 1 for c in rows.clusters.T):
            if count < 2:
                name = cluster_names[j] if j < len(cluster_names) else "the cluster variable"
                return NotApplicable(
                    reason=f"there is a single cluster of {name} ({where}); cluster-robust "
                    "standard errors need at least two"
                )
    cov = CovarianceSpec.build(kind, rows.clusters if kind == "cluster" else None)
    c = np.zeros((n, 0)) if controls is None else controls
    design = Design(
        y=y,
        endog=np.zeros((n, 0)) if endog is None else endog,
        instruments=regressors,
        controls=c,
        fixed_effects=rows.fixed_effects,
        clusters=rows.clusters,
        weights=rows.weights,
        outcome_name=y_name,
        endog_names=tuple(f"endogenous {j}" for j in range(0 if endog is None else endog.shape[1])),
        instrument_names=tuple(regressor_names),
        control_names=tuple(f"control {j}" for j in range(c.shape[1])),
        fixed_effect_names=tuple(f"effect {j}" for j in range(rows.fixed_effects.shape[1])),
        cluster_names=tuple(f"cluster {j}" for j in range(rows.clusters.shape[1])),
    )
    m = compute_moments(design)
    after = _after(rows, c.shape[1] > 0)
    sqrt_w = m.partialler.sqrt_w
    if np.linalg.norm(m.y) <= DEGENERATE_TOL * _scales(y[:, None], sqrt_w)[0]:
        return NotApplicable(reason=f"{y_name} does not vary{after} ({where})")
    kept, constant, collinear = _screen(m.z, _scales(regressors, sqrt_w))
    if (constant or collinear) and not drop_degenerate:
        parts = []
        if constant:
            names = [regressor_names[j] for j in constant]
            verb = "does" if len(names) == 1 else "do"
            parts.append(f"{plural(names)} {verb} not vary{after} ({where})")
        if collinear:
            names = [regressor_names[j] for j in collinear]
            verb = "is" if len(names) == 1 else "are"
            parts.append(f"{plural(names)} {verb} collinear with the other regressors ({where})")
        return NotApplicable(reason="; ".join(parts))
    if not kept:
        return NotApplicable(reason=f"none of {plural(regressor_names)} varies{after} ({where})")
    mk = Moments(
        y=m.y, x=m.x, z=np.ascontiguousarray(m.z[:, kept]), k_exog=m.k_exog, partialler=m.partialler
    )
    k = len(kept) + m.k_exog
    if n - k < 1:
        return NotApplicable(
            reason=f"the regression of {y_name} needs {k} columns (the constant or fixed-effect "
            f"levels included) but has only {n} rows {where}"
        )
    try:
        fit = fit_on_instruments(mk, mk.y, cov)
    except np.linalg.LinAlgError:
        fit = None
    exact = fit is not None and math.sqrt(max(fit.rss, 0.0)) <= DEGENERATE_TOL * math.sqrt(fit.tss)
    if fit is None or exact or not _usable(fit):
        return NotApplicable(
            reason=f"the regression of {y_name} fits it exactly or its covariance is "
            f"degenerate {where}, so standard errors are not defined"
        )
    return Regression(
        fit=fit,
        moments=mk,
        cov=cov,
        covariance=cov.describe(cluster_names),
        kept=tuple(kept),
        constant=tuple(constant),
        collinear=tuple(collinear),
        n=n,
        absorbs_fixed_effects=rows.fixed_effects.shape[1] > 0,
    )


def _usable(fit: LinearFit) -> bool:
    """Finite coefficients and positive, finite variances."""
    var = np.diag(fit.cov)
    return bool(np.all(np.isfinite(fit.coef)) and np.all(np.isfinite(var)) and np.all(var > 0))


def coefficients(
    reg: Regression, names: list[str], labels: dict[str, str]
) -> list[InstrumentCoefficient]:
    """One entry per kept regressor; p-values from the normal distribution."""
    se = reg.std_errors
    out = []
    for i, j in enumerate(reg.kept):
        est, s = float(reg.fit.coef[i]), float(se[i])
        out.append(
            InstrumentCoefficient(
                instrument=names[j],
                label=labels.get(names[j], names[j]),
                estimate=est,
                std_error=s,
                p_value=float(2 * stats.norm.sf(abs(est / s))),
            )
        )
    return out


def joint_test(reg: Regression, *, name: str, null: str) -> TestResult | NotApplicable:
    """Wald test that every kept coefficient is zero, as F = Wald / d."""
    d = len(reg.kept)
    if reg.cov.kind == "cluster":
        g = reg.cov.min_clusters
        assert g is not None
        if g - 1 <= d:
            return NotApplicable(
                reason=f"a joint test of {d} coefficient(s) with a cluster-robust covariance "
                f"needs more than {d} independent cluster contrasts, but {g} clusters give "
                f"{g - 1}; it needs at least {d + 2} clusters"
            )
    v = reg.fit.cov
    # judged on standardised coefficients, so the verdict does not depend on units
    scale = np.sqrt(np.diag(v))
    eig = np.linalg.eigvalsh(v / np.outer(scale, scale))
    if not eig.min() > SINGULAR_TOL * eig.max():
        return NotApplicable(
            reason="the covariance of the coefficients is singular for these data, so the "
            "joint Wald test is not defined"
        )
    wald = float(reg.fit.coef @ np.linalg.solve(v, reg.fit.coef))
    f = wald / d
    df2 = reg.fit.df_denominator
    p = float(stats.f.sf(f, d, df2))
    if not (np.isfinite(f) and np.isfinite(p)):
        return NotApplicable(reason="the joint Wald test is not defined for these data")
    return TestResult(
        name=name,
        statistic=f,
        distribution="F",
        df=[float(d), float(df2)],
        p_value=p,
        covariance=reg.covariance,
        null=null,
        reference="Wald test",
    )
