"""Instrument strength: partial and Shea R-squared, conditional, effective and rank F statistics.

All statistics come from the moment engine's partialled columns (controls, constant and
fixed effects already removed, weights already applied), with k = q + columns of W in
every small-sample factor, as in the first stages (``engine/firststage.py``):

- partial R-squared of each first stage, 1 - RSS/TSS, and Shea's (1997) partial
  R-squared, [(X'X)^-1]_jj / [(X'P_Z X)^-1]_jj (the form of Godfrey 1999);
- Sanderson & Windmeijer (2016) conditional F for each of several endogenous regressors:
  x_j is regressed by 2SLS on the others, and the residual's regression on the
  instruments gives Wald / (q - p + 1) with the spec's covariance, read against
  F(q - p + 1, n - k), or F(q - p + 1, G - 1) with clusters;
- Montiel Olea & Pflueger (2013) effective F, one endogenous regressor (``effective_f.py``);
- Cragg & Donald (1993) minimum-eigenvalue F (classical): the smallest eigenvalue of
  S^-1/2 X'P_Z X S^-1/2 / q with S the first-stage residual covariance, divisor n - k,
  which is the classical first-stage F when p = 1;
- Kleibergen & Paap (2006) rk statistics for the null rank(Pi) = p - 1, with
  Theta = R Pi L^-T (R'R = Z'Z, LL' = X'X, the partialled cross-products), lambda the
  projection of Theta on its smallest singular direction and its orthogonal complement,
  and the covariance of lambda mapped from the covariance of vec(Pi). The LM version uses
  the scores z_i x_i' (errors under Pi = 0) without small-sample factor, chi2(q - p + 1);
  the Wald version the first-stage residual scores with the spec's small-sample factor,
  reported as rk Wald / q, which is the first-stage Wald / q when p = 1. Under the
  classical covariance the same formulas give Anderson's (1951) canonical-correlation LM
  (n times the smallest squared canonical correlation) and the Cragg-Donald F, so the
  report shows the Anderson LM and no separate rank Wald F.

With clusters, a statistic that rests on a cluster-robust covariance of d first-stage
coefficients needs more than d independent cluster contrasts (G - 1 > d); otherwise it
is reported as not applicable, with the reason.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg
from scipy import stats

from reportkit.checks.effective_f import effective_f
from reportkit.checks.stock_yogo import stock_yogo_table
from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.firststage import fit_on_instruments
from reportkit.engine.moments import Moments
from reportkit.results import (
    CriticalValueTable,
    EffectiveF,
    EndogenousStrength,
    NotApplicable,
    Statistic,
    StatOrNA,
    Strength,
    StrengthVerdict,
    TestOrNA,
    TestResult,
)

RANK_NULL = (
    "the first-stage coefficient matrix has reduced rank, so the coefficients of the "
    "endogenous regressors are not identified"
)
SW_NULL = (
    "given the other endogenous regressors, the instruments carry no information about "
    "this one (the first-stage coefficient matrix loses rank in its direction)"
)
# relative tolerance below which an eigenvalue of a covariance counts as zero
SINGULAR_TOL = 1e-10


def instrument_strength(
    m: Moments,
    cov: CovarianceSpec,
    cov_label: str,
    endog_names: tuple[str, ...],
    labels: dict[str, str],
) -> Strength:
    """Every instrument-strength statistic for one specification, with a verdict."""
    per_endogenous = [
        EndogenousStrength(
            endogenous=name,
            label=labels.get(name, name),
            partial_r2=partial_r2(m, j),
            shea_partial_r2=shea_partial_r2(m, j),
            sanderson_windmeijer=sanderson_windmeijer(m, j, cov, cov_label),
            effective_f=_effective_f(m, cov, cov_label),
        )
        for j, name in enumerate(endog_names)
    ]
    cd = cragg_donald(m)
    kp_f, kp_lm = kleibergen_paap(m, cov, cov_label)
    sy = _stock_yogo(m, cd, cov)
    return Strength(
        per_endogenous=per_endogenous,
        cragg_donald=cd,
        kleibergen_paap_f=kp_f,
        kleibergen_paap_lm=kp_lm,
        stock_yogo=sy,
        verdict=strength_verdict(m, cov, per_endogenous, cd, kp_f, sy),
    )


# --- per endogenous regressor ----------------------------------------------------------


def partial_r2(m: Moments, j: int) -> float:
    """1 - RSS/TSS of the first stage of endogenous regressor j, W partialled out."""
    x = m.x[:, j]
    resid = x - m.xhat[:, j]
    return 1.0 - float(resid @ resid) / float(x @ x)


def shea_partial_r2(m: Moments, j: int) -> float:
    """Shea (1997) partial R-squared of endogenous regressor j (Godfrey 1999 form)."""
    xx_inv = np.linalg.inv(m.xx)
    xpx_inv = np.linalg.inv(m.xpx)
    return float(xx_inv[j, j] / xpx_inv[j, j])


def sanderson_windmeijer(m: Moments, j: int, cov: CovarianceSpec, cov_label: str) -> TestOrNA:
    """Sanderson & Windmeijer (2016) conditional F for endogenous regressor j."""
    if m.p == 1:
        return NotApplicable(
            reason="with one endogenous regressor the conditional F is the first-stage F "
            "itself; it is reported only when there are several"
        )
    d1 = m.q - m.p + 1
    na = _too_few_clusters(cov, m.q, "the conditional F")
    if na:
        return na
    others = [i for i in range(m.p) if i != j]
    # 2SLS of x_j on the other endogenous regressors with the instruments Z
    a = m.xpx[np.ix_(others, others)]
    delta = np.linalg.solve(a, m.xpx[others, j])
    resid = m.x[:, j] - m.x[:, others] @ delta
    fit = fit_on_instruments(m, resid, cov)
    na = _singular(m, fit.cov, "the covariance of the conditional first-stage coefficients")
    if na:
        return na
    f = fit.wald / d1
    return TestResult(
        name="Sanderson-Windmeijer conditional F",
        statistic=f,
        distribution="F",
        df=[float(d1), float(fit.df_denominator)],
        p_value=float(stats.f.sf(f, d1, fit.df_denominator)),
        covariance=cov_label,
        null=SW_NULL,
        reference="Sanderson & Windmeijer 2016",
    )


def _effective_f(m: Moments, cov: CovarianceSpec, cov_label: str) -> EffectiveF | NotApplicable:
    if m.p != 1:
        return NotApplicable(
            reason="the effective F (Montiel Olea & Pflueger 2013) is defined for one "
            "endogenous regressor; with several, read the conditional F of each and the "
            "Kleibergen-Paap or Cragg-Donald F"
        )
    na = _too_few_clusters(cov, m.q, "the effective F")
    if na:
        return na
    fit = fit_on_instruments(m, m.x[:, 0], cov)
    return effective_f(m.zz, fit.coef, fit.cov, cov_label)


# --- rank statistics -------------------------------------------------------------------


def cragg_donald(m: Moments) -> Statistic:
    """Cragg & Donald (1993) minimum-eigenvalue F, classical covariance."""
    k = m.q + m.k_exog
    v = m.x - m.xhat
    sigma = (v.T @ v) / (m.n - k)
    eig = scipy.linalg.eigh(m.xpx, (sigma + sigma.T) / 2, eigvals_only=True)
    return Statistic(
        name="Cragg-Donald F (minimum eigenvalue)",
        value=float(eig.min()) / m.q,
        covariance="classical",
        reference="Cragg & Donald 1993; Stock & Yogo 2005",
        note=(
            "smallest eigenvalue of S^-1/2 X'P_Z X S^-1/2 / q, S the first-stage residual "
            "covariance with divisor n - k; equals the classical first-stage F with one "
            "endogenous regressor; assumes independent, homoskedastic errors"
        ),
    )


def rank_statistic(m: Moments, meat: np.ndarray) -> float | None:
    """Kleibergen & Paap (2006) rk statistic for rank(Pi) = p - 1.

    ``meat`` is the (pq, pq) covariance of the score sums vec(Z'E), E the first-stage
    errors (residuals, or X itself under Pi = 0), ordered endogenous-major as vec(Pi).
    None when the covariance of the statistic is singular.
    """
    p = m.p
    r = np.linalg.cholesky(m.zz).T  # r'r = Z'Z
    ell = np.linalg.cholesky(m.xx)  # ell ell' = X'X
    f = np.linalg.inv(ell)  # f X'X f' = I
    theta = r @ m.pi @ f.T
    u, _, vt = np.linalg.svd(theta)
    u_perp = u[:, p - 1 :]  # left singular vectors beyond the first p - 1
    v_min = vt[-1]  # right singular vector of the smallest singular value
    lam = u_perp.T @ theta @ v_min
    # vec(Theta) = (F kron R) vec(Pi), vec(Pi) = (I kron (Z'Z)^-1) vec(Z'X): combined,
    # vec(Theta) = (F kron R^-T) vec(Z'X), and lambda = (v' kron U_perp') vec(Theta)
    r_inv_t = np.linalg.inv(r).T
    mapping = np.kron(v_min[None, :], u_perp.T) @ np.kron(f, r_inv_t)
    omega = mapping @ meat @ mapping.T
    omega = (omega + omega.T) / 2
    eig = np.linalg.eigvalsh(omega)
    if eig.max() <= 0 or eig.min() <= SINGULAR_TOL * eig.max():
        return None
    return float(lam @ np.linalg.solve(omega, lam))


def kleibergen_paap(m: Moments, cov: CovarianceSpec, cov_label: str) -> tuple[StatOrNA, TestOrNA]:
    """The rk Wald F and the rk LM under-identification test (Kleibergen & Paap 2006)."""
    p, q = m.p, m.q
    df = q - p + 1
    k = q + m.k_exog
    if cov.kind == "classical":
        sxx = m.xx / m.n  # errors under Pi = 0 are the partialled X themselves
        lm = rank_statistic(m, np.kron(sxx, m.zz))
        f_na = NotApplicable(
            reason="under the classical covariance the rank Wald F is the Cragg-Donald F, "
            "reported above"
        )
        if lm is None:
            return f_na, NotApplicable(reason="the endogenous regressors are degenerate")
        return f_na, TestResult(
            name="Anderson canonical-correlation LM (under-identification)",
            statistic=lm,
            distribution="chi2",
            df=[float(df)],
            p_value=float(stats.chi2.sf(lm, df)),
            covariance="classical",
            null=RANK_NULL,
            reference="Anderson 1951 (classical form of the Kleibergen & Paap 2006 rk LM)",
        )
    na = _too_few_clusters(cov, p * q, "the Kleibergen-Paap statistics")
    if na:
        return na, na
    resid = m.x - m.xhat
    wald = rank_statistic(m, cov.meat(_scores(m.z, resid), k))
    lm = rank_statistic(m, cov.raw_meat(_scores(m.z, m.x)))
    singular = NotApplicable(
        reason=f"the {cov.kind} covariance of the rank statistic is singular or not positive "
        "definite for these data, so it is not defined"
    )
    f_out: StatOrNA = singular
    if wald is not None:
        f_out = Statistic(
            name="Kleibergen-Paap rk Wald F",
            value=wald / q,
            covariance=cov_label,
            reference="Kleibergen & Paap 2006",
            note=(
                "rk Wald statistic / q, first-stage residual scores with the covariance's "
                "small-sample factor; with one endogenous regressor it is the first-stage "
                "Wald / q"
            ),
        )
    lm_out: TestOrNA = singular
    if lm is not None:
        lm_out = TestResult(
            name="Kleibergen-Paap rk LM (under-identification)",
            statistic=lm,
            distribution="chi2",
            df=[float(df)],
            p_value=float(stats.chi2.sf(lm, df)),
            covariance=cov_label,
            null=RANK_NULL,
            reference="Kleibergen & Paap 2006",
        )
    return f_out, lm_out


def _scores(z: np.ndarray, e: np.ndarray) -> np.ndarray:
    """(n, p q) scores e_ij z_i, endogenous-major: the order of vec(Z'E)."""
    return np.column_stack([z * e[:, [j]] for j in range(e.shape[1])])


# --- Stock-Yogo and the verdict --------------------------------------------------------


def _stock_yogo(
    m: Moments, cd: Statistic, cov: CovarianceSpec
) -> CriticalValueTable | NotApplicable:
    table = stock_yogo_table(m.p, m.q, cd.value, cd.name)
    if isinstance(table, CriticalValueTable) and cov.kind != "classical":
        extra = (
            "The Cragg-Donald F assumes independent, homoskedastic errors; this "
            f"specification uses a {cov.kind} covariance because it does not. Comparing the "
            "Kleibergen-Paap F with these values instead is common practice without formal "
            "justification."
        )
        table = table.model_copy(update={"note": f"{table.note} {extra}".strip()})
    return table


def strength_verdict(
    m: Moments,
    cov: CovarianceSpec,
    per_endogenous: list[EndogenousStrength],
    cd: Statistic,
    kp_f: StatOrNA,
    sy: CriticalValueTable | NotApplicable,
) -> StrengthVerdict:
    """One level and one sentence naming the statistic, its value and the criterion."""
    if m.p == 1:
        return _verdict_one(per_endogenous[0].effective_f)
    if cov.kind == "classical":
        stat: Statistic = cd
    elif isinstance(kp_f, Statistic):
        stat = kp_f
    else:
        return StrengthVerdict(
            level="weak",
            summary=(
                f"The Kleibergen-Paap F could not be computed ({kp_f.reason}); instrument "
                "strength is not established, so rely on weak-instrument-robust inference."
            ),
        )
    # common practice, no source: reading the (robust) rank F against the Stock-Yogo 2SLS
    # size critical values, 10% for 'strong' and 20% for 'moderate'
    cv10 = _size_value(sy, 0.10)
    if cv10 is None:
        # common practice, no source: the rule-of-thumb 10 (Staiger & Stock 1997 for one
        # endogenous regressor) when no Stock-Yogo value is available; never 'strong'
        why = (
            sy.reason
            if isinstance(sy, NotApplicable)
            else f"none is tabulated for {m.p} endogenous regressors and {m.q} instruments"
        )
        level = "moderate" if stat.value > 10 else "weak"
        return StrengthVerdict(
            level=level,
            summary=(
                f"{stat.name} = {stat.value:.2f}, {'above' if stat.value > 10 else 'below'} "
                f"the rule-of-thumb value 10, which cannot show that the instruments are "
                f"strong (no Stock-Yogo 2SLS size critical value: {why})."
            ),
        )
    cv20 = _size_value(sy, 0.20)
    if stat.value > cv10:
        level, where = "strong", f"above the Stock-Yogo critical value {cv10:.2f}"
    elif cv20 is not None and stat.value > cv20:
        level = "moderate"
        where = f"below the critical value {cv10:.2f} but above {cv20:.2f} (20% size)"
    else:
        level, where = "weak", f"below the Stock-Yogo critical value {cv10:.2f}"
    return StrengthVerdict(
        level=level,
        summary=(
            f"{stat.name} = {stat.value:.2f}, {where} for a nominal 5% 2SLS Wald test with "
            "actual size at most 10% (Stock & Yogo 2005)."
        ),
    )


def _verdict_one(ef: EffectiveF | NotApplicable) -> StrengthVerdict:
    if isinstance(ef, NotApplicable):
        return StrengthVerdict(
            level="weak",
            summary=(
                f"The effective F could not be computed ({ef.reason}); instrument strength "
                "is not established, so rely on weak-instrument-robust inference."
            ),
        )
    by_tau = {round(c.threshold, 6): c.value for c in ef.critical_values}
    cv10, cv20 = by_tau[0.1], by_tau[0.2]
    if ef.value > cv10:
        level, where = "strong", f"above the critical value {cv10:.2f}"
    elif ef.value > cv20:
        level = "moderate"
        where = f"below the critical value {cv10:.2f} but above {cv20:.2f} (tau = 20%)"
    else:
        level, where = "weak", f"below the critical value {cv10:.2f}"
    return StrengthVerdict(
        level=level,
        summary=(
            f"Effective F (Montiel Olea & Pflueger 2013) = {ef.value:.2f}, {where} of the 5% "
            "test of the null that the 2SLS Nagar bias exceeds tau = 10% of the worst-case "
            "benchmark."
        ),
    )


def _size_value(sy: CriticalValueTable | NotApplicable, threshold: float) -> float | None:
    if not isinstance(sy, CriticalValueTable):
        return None
    for row in sy.rows:
        if row.estimator == "2sls" and row.kind == "size" and abs(row.threshold - threshold) < 1e-9:
            return row.value
    return None


# --- guards ----------------------------------------------------------------------------


def _too_few_clusters(cov: CovarianceSpec, d: int, what: str) -> NotApplicable | None:
    if cov.kind != "cluster":
        return None
    g = cov.min_clusters
    assert g is not None
    if g - 1 > d:
        return None
    return NotApplicable(
        reason=f"{what} rests on a cluster-robust covariance of {d} first-stage "
        f"coefficient(s), which {g} clusters estimate from only {g - 1} independent "
        f"cluster contrast(s); it needs at least {d + 2} clusters"
    )


def _singular(m: Moments, v: np.ndarray, what: str) -> NotApplicable | None:
    """Not applicable when the (q, q) covariance v of instrument coefficients is singular.

    Checked on orthonormalised instruments (R v R', R'R = Z'Z), so the verdict does not
    depend on the instruments' units.
    """
    r = np.linalg.cholesky(m.zz).T
    w = r @ v @ r.T
    eig = np.linalg.eigvalsh((w + w.T) / 2)
    if eig.max() > 0 and eig.min() > SINGULAR_TOL * eig.max():
        return None
    return NotApplicable(reason=f"{what} is singular or not positive definite for these data")
