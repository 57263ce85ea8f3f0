"""Models for a 0/1 outcome with one endogenous regressor: control-function probit,
two-stage residual inclusion (probit or logit) and the recursive bivariate probit.

Inputs are plain arrays on the FULL design (these models are nonlinear, so nothing is
partialled out): y (n,) 0/1; d (n,) the endogenous regressor, continuous or 0/1; z (n, q)
the excluded instruments; w (n, c) the exogenous regressors including a constant and any
fixed-effect indicators. Each function returns a ``BinaryEffect``: an average effect of d
on P(y = 1) with its standard error, plus model-specific numbers in ``extra``.

Averages keep every row's own covariates and own first-stage residual (the average
structural function evaluated over the sample, Blundell & Powell 2004; Wooldridge 2010,
Econometric Analysis of Cross Section and Panel Data, 2nd ed., sect. 15.7.2): for a 0/1 d
the effect is ASF(d = 1) - ASF(d = 0), the average treatment effect; for a continuous d it
is the average derivative, i.e. the effect of raising every row's d by a small amount.

A model that does not apply, or a fit that fails (perfect prediction, no convergence),
raises ValueError with a plain sentence; the caller reports it as "not applicable".
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property
from typing import Literal

import numpy as np
from scipy import special

from reportkit.variants.binary_core import (
    BinaryFit,
    BivariateData,
    BootstrapPlan,
    Link,
    PartialEffects,
    bivariate_terms,
    check_full_rank,
    fit_batch,
    fit_binary,
    fit_bivariate_probit,
    least_squares_batch,
    link_cdf,
    link_density,
    link_terms,
    partial_effects,
    perfect_predictors,
    single_weights,
)

FirstStage = Literal["linear", "probit"]
MAX_FAILED_SHARE = 0.1  # more failed bootstrap draws than this and no standard error is given


@dataclass(frozen=True)
class BinaryEffect:
    """An average effect of the endogenous regressor on P(y = 1), with its inference."""

    name: str  # "control_function_probit" | "2sri_probit" | "2sri_logit" | "bivariate_probit"
    quantity: str
    estimate: float
    std_error: float
    std_error_method: str
    ci_lower: float  # normal approximation at ``level``
    ci_upper: float
    p_value: float
    n_obs: int
    extra: dict[str, float]


@dataclass(frozen=True)
class ColumnNames:
    """Column names, used only in messages and in ``BinaryEffect.quantity``."""

    outcome: str = "y"
    endogenous: str = "d"
    instruments: tuple[str, ...] = ()
    exogenous: tuple[str, ...] = ()

    def instrument(self, j: int) -> str:
        return self.instruments[j] if j < len(self.instruments) else f"instrument {j + 1}"

    def exog(self, j: int) -> str:
        return self.exogenous[j] if j < len(self.exogenous) else f"exogenous column {j + 1}"


# ------------------------------------------------------------------------ inputs
@dataclass(frozen=True)
class BinaryInputs:
    """Checked inputs of the models (see the module docstring), cluster codes 0..G-1."""

    y: np.ndarray
    d: np.ndarray
    z: np.ndarray
    w: np.ndarray
    weights: np.ndarray | None
    codes: np.ndarray | None
    d_binary: bool
    names: ColumnNames

    @property
    def n(self) -> int:
        return int(self.y.shape[0])

    @property
    def n_clusters(self) -> int | None:
        return None if self.codes is None else int(self.codes.max()) + 1

    @cached_property
    def x_first(self) -> np.ndarray:
        return np.column_stack([self.z, self.w])

    @property
    def first_labels(self) -> list[str]:
        nm = self.names
        return [nm.instrument(j) for j in range(self.z.shape[1])] + [
            nm.exog(j) for j in range(self.w.shape[1])
        ]

    @cached_property
    def shared_second(self) -> np.ndarray:
        """[d, w]: the second stage's columns common to all bootstrap draws."""
        return np.column_stack([self.d, self.w])

    @property
    def second_labels(self) -> list[str]:
        return [self.names.endogenous] + [self.names.exog(j) for j in range(self.w.shape[1])]

    def quantity(self) -> str:
        nm = self.names
        kind = "average treatment effect" if self.d_binary else "average partial effect"
        return f"{kind} of {nm.endogenous} on P({nm.outcome} = 1)"


def _is_binary(v: np.ndarray) -> bool:
    return bool(np.isin(v, (0.0, 1.0)).all())


def prepare_inputs(
    y: np.ndarray,
    d: np.ndarray,
    z: np.ndarray,
    w: np.ndarray,
    weights: np.ndarray | None,
    clusters: np.ndarray | None,
    names: ColumnNames | None,
) -> BinaryInputs:
    """Checked float arrays; ValueError with a plain sentence for unusable input."""
    nm = names or ColumnNames()
    y = np.asarray(y, dtype=np.float64)
    d = np.asarray(d, dtype=np.float64)
    z = np.asarray(z, dtype=np.float64)
    w = np.asarray(w, dtype=np.float64)
    z = z[:, None] if z.ndim == 1 else z
    w = w[:, None] if w.ndim == 1 else w
    n = y.shape[0]
    if y.ndim != 1 or d.shape != (n,) or z.shape[0] != n or w.shape[0] != n:
        raise ValueError("y, d, z and w must have the same number of rows")
    if z.shape[1] == 0:
        raise ValueError("these models need at least one excluded instrument")
    for label, arr in (("outcome", y), ("endogenous regressor", d), ("instruments", z)):
        if not np.isfinite(arr).all():
            raise ValueError(f"the {label} contain missing or infinite values")
    if not np.isfinite(w).all():
        raise ValueError("the exogenous regressors contain missing or infinite values")
    if not _is_binary(y):
        bad = y[~np.isin(y, (0.0, 1.0))][0]
        raise ValueError(
            f"the outcome {nm.outcome} takes values other than 0 and 1 (e.g. {bad:g}); "
            "these models need a 0/1 outcome"
        )
    if y.min() == y.max():
        raise ValueError(f"the outcome {nm.outcome} is {y[0]:g} in every row")
    if d.min() == d.max():
        raise ValueError(f"the endogenous regressor {nm.endogenous} is constant")
    wt = None
    if weights is not None:
        wt = np.asarray(weights, dtype=np.float64)
        if wt.shape != (n,) or not np.isfinite(wt).all() or (wt <= 0).any():
            raise ValueError("the weights must be positive and finite, one per row")
    codes = None
    if clusters is not None:
        codes = np.unique(np.asarray(clusters), return_inverse=True)[1].astype(np.int64)
        if int(codes.max()) + 1 < 2:
            raise ValueError("clustered standard errors need at least two clusters")
    k = 1 + z.shape[1] + w.shape[1] + 1
    if n <= k:
        raise ValueError(f"{n} rows are too few for {k} coefficients")
    return BinaryInputs(y, d, z, w, wt, codes, _is_binary(d), nm)


def _check_perfect(y: np.ndarray, x: np.ndarray, labels: list[str], what: str) -> None:
    found = perfect_predictors(y, x, None)
    if found:
        j, value, outcome = found[0]
        raise ValueError(
            f"{labels[j]} predicts {what} perfectly: in every row where {labels[j]} is "
            f"{value}, {what} is {outcome} (perfect prediction), so its coefficient would be "
            "infinite. Drop that column, or merge its category with another"
        )


# ------------------------------------------------------------------ small numerics
def _outer_sum(u: np.ndarray, codes: np.ndarray | None) -> np.ndarray:
    """Sum over rows (or clusters) of outer products of ``u`` (n, m), with the usual
    small-sample factor n / (n - 1), or G / (G - 1) for clusters (common practice, no
    source)."""
    n = u.shape[0]
    if codes is None:
        return (u.T @ u) * (n / (n - 1))
    g = int(codes.max()) + 1
    sums = np.column_stack([np.bincount(codes, u[:, j], minlength=g) for j in range(u.shape[1])])
    return (sums.T @ sums) * (g / (g - 1))


def _normal_effect(
    name: str,
    quantity: str,
    estimate: float,
    se: float,
    method: str,
    level: float,
    n_obs: int,
    extra: dict[str, float],
) -> BinaryEffect:
    crit = float(special.ndtri(0.5 + level / 2.0))
    p = float(2.0 * special.ndtr(-abs(estimate / se))) if se > 0 else math.nan
    return BinaryEffect(
        name=name,
        quantity=quantity,
        estimate=float(estimate),
        std_error=float(se),
        std_error_method=method,
        ci_lower=float(estimate - crit * se),
        ci_upper=float(estimate + crit * se),
        p_value=p,
        n_obs=n_obs,
        extra=extra,
    )


def _covariance_words(inp: BinaryInputs) -> str:
    g = inp.n_clusters
    return f"cluster-robust ({g} clusters)" if g is not None else "heteroskedasticity-robust"


# ------------------------------------------------------------- two-step estimators
@dataclass(frozen=True)
class ResidualColumn:
    """The first-stage residual d - fitted of each bootstrap draw, a draw column."""

    d: np.ndarray
    x: np.ndarray
    coef: np.ndarray  # (draws, k_first)
    first_stage: FirstStage

    @property
    def n_columns(self) -> int:
        return 1

    def block(self, draws: np.ndarray, start: int, stop: int) -> np.ndarray:
        fitted = self.coef[draws] @ self.x[start:stop].T
        if self.first_stage == "probit":
            fitted = special.ndtr(fitted)
        return (self.d[start:stop] - fitted)[:, None, :]


@dataclass(frozen=True)
class TwoStepFit:
    """First stage, residual, and the second-stage fit on [d, w, residual]."""

    first_stage: FirstStage
    first: np.ndarray  # (k_first,) coefficients on [z, w]
    first_fit: BinaryFit | None  # the probit first stage, if any
    residual: np.ndarray  # (n,)
    x_second: np.ndarray  # (n, k): [d, w, residual]
    second: BinaryFit
    effects: PartialEffects


def fit_two_step(inp: BinaryInputs, first_stage: FirstStage, link: Link) -> TwoStepFit:
    x1 = inp.x_first
    check_full_rank(x1, inp.weights, inp.first_labels)
    sw = single_weights(inp.n, inp.weights)
    first_fit = None
    if first_stage == "linear":
        first = least_squares_batch(inp.d, x1, sw)[0]
        residual = inp.d - x1 @ first
    else:
        _check_perfect(inp.d, x1, inp.first_labels, inp.names.endogenous)
        first_fit = fit_binary(
            inp.d, x1, link="probit", weights=inp.weights, what=inp.names.endogenous
        )
        first = first_fit.params
        residual = inp.d - special.ndtr(x1 @ first)
    x2 = np.column_stack([inp.shared_second, residual])
    labels = [*inp.second_labels, "the first-stage residual"]
    check_full_rank(x2, inp.weights, labels)
    _check_perfect(inp.y, x2, labels, inp.names.outcome)
    second = fit_binary(inp.y, x2, link=link, weights=inp.weights, what=inp.names.outcome)
    effects = partial_effects(
        x2, sw, link=link, params=second.params[None, :], column=0, binary=inp.d_binary
    )
    return TwoStepFit(first_stage, first, first_fit, residual, x2, second, effects)


COVARIANCE_BLOCK_ROWS = 1 << 16  # rows per block of the two-step covariance passes


class _ScoreSums:
    """Accumulates sum_i u_i u_i' (rows) or the per-cluster sums of u_i, block by block."""

    def __init__(self, m: int, n: int, codes: np.ndarray | None) -> None:
        self.n, self.codes = n, codes
        self.groups = 0 if codes is None else int(codes.max()) + 1
        self.total = np.zeros((m, m)) if codes is None else np.zeros((self.groups, m))

    def add(self, u: np.ndarray, start: int, stop: int) -> None:
        if self.codes is None:
            self.total += u.T @ u
            return
        c = self.codes[start:stop]
        for j in range(u.shape[1]):
            self.total[:, j] += np.bincount(c, u[:, j], minlength=self.groups)

    def meat(self) -> np.ndarray:
        """With the small-sample factor n / (n - 1), or G / (G - 1) for clusters (common
        practice, no source)."""
        if self.codes is None:
            return self.total * (self.n / (self.n - 1))
        return (self.total.T @ self.total) * (self.groups / (self.groups - 1))


def two_step_covariance(
    inp: BinaryInputs, fit: TwoStepFit, link: Link
) -> tuple[np.ndarray, np.ndarray]:
    """Covariance of the second-stage coefficients corrected for the estimated residual,
    and the uncorrected one (both robust, or cluster-robust when clusters are given).

    Murphy & Topel (1985) in its robust form (Newey & McFadden 1994, Theorem 6.1;
    Wooldridge 2010, sect. 12.5.2): with s1, s2 the per-row scores of the two stages,
    I1, I2 their information matrices and A21 = d(sum s2) / d(first-stage coefficients),
    b2 - b ~ I2^-1 sum_i u_i with u_i = s2_i + A21 I1^-1 s1_i; V = I2^-1 [sum u u'] I2^-1.
    Two passes over blocks of rows, so no n x k score matrix is held whole.
    """
    x1, x2 = inp.x_first, fit.x_second
    n, k1, k2 = inp.n, x1.shape[1], x2.shape[1]
    wt = np.ones(n) if inp.weights is None else inp.weights
    theta = fit.second.params[-1]
    blocks = [(a, min(n, a + COVARIANCE_BLOCK_ROWS)) for a in range(0, n, COVARIANCE_BLOCK_ROWS)]

    def parts(a: int, b: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Per-row weighted first-stage score factor, slope m = -d residual / d index,
        and the second stage's weighted score and curvature factors."""
        _, g2, c2 = link_terms(link, inp.y[a:b], x2[a:b] @ fit.second.params)
        if fit.first_stage == "linear":
            return wt[a:b] * fit.residual[a:b], np.ones(b - a), wt[a:b] * g2, wt[a:b] * c2
        index1 = x1[a:b] @ fit.first
        _, g1, _ = link_terms("probit", inp.d[a:b], index1)
        return wt[a:b] * g1, link_density("probit", index1), wt[a:b] * g2, wt[a:b] * c2

    a21 = np.zeros((k2, k1))
    info1 = np.zeros((k1, k1))
    for a, b in blocks:
        _, slope, g2, c2 = parts(a, b)
        # d s2_i / d pi' = w_i m_i [c2_i theta x2_i - g2_i e_residual] x1_i'
        a21 += (x2[a:b] * (slope * c2 * theta)[:, None]).T @ x1[a:b]
        a21[-1] -= (slope * g2) @ x1[a:b]
        if fit.first_stage == "linear":
            info1 += (x1[a:b] * wt[a:b, None]).T @ x1[a:b]
    if fit.first_fit is not None:
        info1 = fit.first_fit.information
    transfer = np.linalg.solve(info1, a21.T)  # (k1, k2): I1^-1 A21'
    corrected = _ScoreSums(k2, n, inp.codes)
    naive = _ScoreSums(k2, n, inp.codes)
    for a, b in blocks:
        g1, _, g2, _ = parts(a, b)
        s2 = x2[a:b] * g2[:, None]
        naive.add(s2, a, b)
        s2 += (x1[a:b] * g1[:, None]) @ transfer
        corrected.add(s2, a, b)
    inv2 = np.linalg.inv(fit.second.information)
    return inv2 @ corrected.meat() @ inv2, inv2 @ naive.meat() @ inv2


@dataclass(frozen=True)
class BootstrapDraws:
    """Per-draw estimates; NaN where a draw failed to converge."""

    effect: np.ndarray  # (B,) average effect of d
    params: np.ndarray  # (B, k) second-stage coefficients on [d, w, residual]
    failed: int


def bootstrap_two_step(
    y: np.ndarray,
    d: np.ndarray,
    z: np.ndarray,
    w: np.ndarray,
    *,
    first_stage: FirstStage,
    link: Link,
    plan: BootstrapPlan,
    first_start: np.ndarray,
    second_start: np.ndarray,
) -> BootstrapDraws:
    """Both stages re-estimated in every draw of ``plan``, all draws at once.

    Each draw's first stage (least squares, or a probit) gives its own residual; the second
    stage (probit or logit on [d, w, residual]) then starts from ``second_start`` (the
    full-sample estimate) and the average effect is recomputed with the draw's weights.
    """
    x1 = np.column_stack([z, w])
    shared = np.column_stack([d, w])
    binary = _is_binary(d)
    k = shared.shape[1] + 1
    effect = np.full(plan.draws, np.nan)
    params = np.full((plan.draws, k), np.nan)
    for first, weights in plan.chunks():
        m = weights.n_draws
        if first_stage == "linear":
            coef = least_squares_batch(d, x1, weights)
        else:
            coef = fit_batch(d, x1, weights, link="probit", start=first_start).params
        ok1 = np.isfinite(coef).all(axis=1)
        resid = ResidualColumn(d, x1, np.where(ok1[:, None], coef, 0.0), first_stage)
        fit = fit_batch(y, shared, weights, link=link, start=second_start, extra=resid, skip=~ok1)
        ok = fit.converged
        safe = np.where(ok[:, None], fit.params, 0.0)
        eff = partial_effects(
            shared, weights, link=link, params=safe, column=0, binary=binary, extra=resid
        )
        effect[first : first + m] = np.where(ok, eff.ape, np.nan)
        params[first : first + m] = fit.params
    return BootstrapDraws(effect, params, int(np.isnan(effect).sum()))


def _residual_inclusion(
    name: str,
    inp: BinaryInputs,
    first_stage: FirstStage,
    link: Link,
    draws: int,
    seed: int,
    level: float,
) -> BinaryEffect:
    if draws < 2:
        raise ValueError("the bootstrap needs at least 2 draws")
    fit = fit_two_step(inp, first_stage, link)
    corrected, naive = two_step_covariance(inp, fit, link)
    plan = BootstrapPlan(inp.n, draws, seed, inp.codes, inp.weights)
    boot = bootstrap_two_step(
        inp.y,
        inp.d,
        inp.z,
        inp.w,
        first_stage=first_stage,
        link=link,
        plan=plan,
        first_start=fit.first,
        second_start=fit.second.params,
    )
    if boot.failed > MAX_FAILED_SHARE * draws:
        raise ValueError(
            f"{boot.failed} of {draws} bootstrap draws failed to converge (usually perfect "
            "prediction within a draw, e.g. a small category or few clusters), so no "
            "bootstrap standard error is given"
        )
    ok = ~np.isnan(boot.effect)
    se = float(np.std(boot.effect[ok], ddof=1))
    method = plan.describe()
    if boot.failed:
        method += f"; {boot.failed} draws that failed to converge left out"
    theta = float(fit.second.params[-1])
    theta_se = float(math.sqrt(corrected[-1, -1]))
    extra = {
        "coef_endogenous": float(fit.second.params[0]),
        "coef_endogenous_se_analytic": float(math.sqrt(corrected[0, 0])),
        "coef_endogenous_se_uncorrected": float(math.sqrt(naive[0, 0])),
        "coef_endogenous_se_bootstrap": float(np.std(boot.params[ok, 0], ddof=1)),
        "coef_residual": theta,
        "coef_residual_se": theta_se,
        "coef_residual_p_value": float(2.0 * special.ndtr(-abs(theta / theta_se))),
        "draws_used": float(ok.sum()),
        "draws_failed": float(boot.failed),
    }
    if fit.effects.asf_one is not None and fit.effects.asf_zero is not None:
        extra["asf_treated"] = float(fit.effects.asf_one[0])
        extra["asf_untreated"] = float(fit.effects.asf_zero[0])
    return _normal_effect(
        name, inp.quantity(), float(fit.effects.ape[0]), se, method, level, inp.n, extra
    )


def control_function_probit(
    y: np.ndarray,
    d: np.ndarray,
    z: np.ndarray,
    w: np.ndarray,
    *,
    weights: np.ndarray | None,
    clusters: np.ndarray | None,
    draws: int,
    seed: int,
    level: float,
    names: ColumnNames | None = None,
) -> BinaryEffect:
    """Control-function probit (Rivers & Vuong 1988): least-squares first stage of d on
    [z, w], residual v; probit of y on [d, w, v].

    The effect is the average partial (or, for 0/1 d, treatment) effect over the sample's
    own (w, v) (Wooldridge 2010, sect. 15.7.2); its standard error is a bootstrap of both
    stages. ``extra`` holds the coefficient on d with its analytic two-step standard error
    (Murphy & Topel 1985, robust form) and its bootstrap one, and the coefficient on v
    with its two-step standard error and p-value: a test of exogeneity of d (under
    exogeneity the first-stage estimation does not affect it; Rivers & Vuong 1988).
    """
    inp = prepare_inputs(y, d, z, w, weights, clusters, names)
    return _residual_inclusion(
        "control_function_probit", inp, "linear", "probit", draws, seed, level
    )


def two_stage_residual_inclusion(
    y: np.ndarray,
    d: np.ndarray,
    z: np.ndarray,
    w: np.ndarray,
    *,
    link: str,
    weights: np.ndarray | None,
    clusters: np.ndarray | None,
    draws: int,
    seed: int,
    level: float,
    names: ColumnNames | None = None,
) -> BinaryEffect:
    """Two-stage residual inclusion (Terza, Basu & Rathouz 2008): first stage least squares
    (continuous d) or probit (0/1 d); the raw residual d - fitted enters a probit or logit
    (``link``) of y on [d, w, residual]. Average effect as in ``control_function_probit``,
    bootstrap standard error of both stages; the same ``extra`` entries."""
    if link not in ("probit", "logit"):
        raise ValueError(f"unknown link '{link}': use probit or logit")
    inp = prepare_inputs(y, d, z, w, weights, clusters, names)
    first: FirstStage = "probit" if inp.d_binary else "linear"
    lk: Link = "probit" if link == "probit" else "logit"
    return _residual_inclusion(f"2sri_{link}", inp, first, lk, draws, seed, level)


# ---------------------------------------------------------------- bivariate probit
@dataclass(frozen=True)
class BivariateResult:
    """The bivariate probit fit with its sandwich covariance and the treatment effect."""

    data: BivariateData
    params: np.ndarray  # [b on (d, w), g on (z, w), atanh(rho)]
    log_likelihood: float
    gradient: np.ndarray
    covariance: np.ndarray  # sandwich covariance of params
    ate: float
    ate_se: float  # delta method, covariates' sampling variation included
    ate_se_fixed: float  # delta method, covariates held fixed
    asf_treated: float
    asf_untreated: float
    iterations: int


def fit_bivariate(inp: BinaryInputs) -> BivariateResult:
    """Recursive bivariate probit by maximum likelihood and its average treatment effect.

    Start: separate probits and rho = 0. ATE = mean(Phi(b_d + w b) - Phi(w b)). Its
    standard error by the delta method through the influence function
    g' I^-1 s_i + (tau_i - ATE) / n, where g = d ATE / d params, s_i the row's score and
    tau_i its own effect: the second term carries the sampling variation of the covariates
    the ATE averages over (a delta method for a sample mean of a function of estimated
    parameters); summed by cluster when clusters are given.
    """
    nm = inp.names
    x1 = inp.shared_second
    x2 = inp.x_first
    check_full_rank(x1, inp.weights, inp.second_labels)
    check_full_rank(x2, inp.weights, inp.first_labels)
    _check_perfect(inp.y, x1, inp.second_labels, nm.outcome)
    _check_perfect(inp.d, x2, inp.first_labels, nm.endogenous)
    data = BivariateData(inp.y, inp.d, x1, x2, inp.weights)
    start_y = fit_binary(inp.y, x1, link="probit", weights=inp.weights, what=nm.outcome)
    start_d = fit_binary(inp.d, x2, link="probit", weights=inp.weights, what=nm.endogenous)
    fit = fit_bivariate_probit(data, np.concatenate([start_y.params, start_d.params, [0.0]]))
    terms = bivariate_terms(data, fit.params, hessian=False, scores=True)
    assert terms.scores is not None
    inv = np.linalg.inv(fit.information)
    infl = terms.scores @ inv  # (n, k): params - true ~ sum of rows
    covariance = _outer_sum(infl, inp.codes)
    k1 = x1.shape[1]
    b = fit.params[:k1]
    base = x1[:, 1:] @ b[1:]
    wt = np.ones(inp.n) if inp.weights is None else inp.weights
    share = wt / wt.sum()
    treated = link_cdf("probit", base + b[0])
    untreated = link_cdf("probit", base)
    tau = treated - untreated
    ate = float(share @ tau)
    dens1 = link_density("probit", base + b[0])
    grad = np.zeros(fit.params.shape[0])
    grad[0] = share @ dens1
    grad[1:k1] = (share * (dens1 - link_density("probit", base))) @ x1[:, 1:]
    fixed = infl @ grad
    full = fixed + share * (tau - ate)
    se_full = math.sqrt(float(_outer_sum(full[:, None], inp.codes)[0, 0]))
    se_fixed = math.sqrt(float(_outer_sum(fixed[:, None], inp.codes)[0, 0]))
    return BivariateResult(
        data=data,
        params=fit.params,
        log_likelihood=fit.log_likelihood,
        gradient=fit.gradient,
        covariance=covariance,
        ate=ate,
        ate_se=se_full,
        ate_se_fixed=se_fixed,
        asf_treated=float(share @ treated),
        asf_untreated=float(share @ untreated),
        iterations=fit.iterations,
    )


def bivariate_probit(
    y: np.ndarray,
    d: np.ndarray,
    z: np.ndarray,
    w: np.ndarray,
    *,
    weights: np.ndarray | None,
    clusters: np.ndarray | None,
    level: float,
    names: ColumnNames | None = None,
) -> BinaryEffect:
    """Recursive bivariate probit (y on [d, w], d on [z, w], error correlation rho) by
    full maximum likelihood; the average treatment effect with a delta-method standard
    error from the robust (or cluster-robust) sandwich around the ML Hessian. d must be
    0/1. ``extra``: rho with its standard error and the p-value of rho = 0, the
    coefficient on d, the log-likelihood, the ATE's standard error with the covariates
    held fixed."""
    inp = prepare_inputs(y, d, z, w, weights, clusters, names)
    if not inp.d_binary:
        raise ValueError(
            f"the bivariate probit needs a 0/1 treatment, but {inp.names.endogenous} takes "
            "other values"
        )
    res = fit_bivariate(inp)
    t = float(res.params[-1])
    t_se = math.sqrt(float(res.covariance[-1, -1]))
    rho = math.tanh(t)
    extra = {
        "rho": rho,
        "rho_se": (1.0 - rho * rho) * t_se,
        "rho_p_value": float(2.0 * special.ndtr(-abs(t / t_se))),
        "coef_endogenous": float(res.params[0]),
        "coef_endogenous_se": math.sqrt(float(res.covariance[0, 0])),
        "log_likelihood": res.log_likelihood,
        "ate_se_fixed_covariates": res.ate_se_fixed,
        "asf_treated": res.asf_treated,
        "asf_untreated": res.asf_untreated,
        "iterations": float(res.iterations),
    }
    method = (
        f"delta method, {_covariance_words(inp)} sandwich around the ML Hessian, "
        "sampling variation of the covariates included"
    )
    return _normal_effect(
        "bivariate_probit", inp.quantity(), res.ate, res.ate_se, method, level, inp.n, extra
    )
