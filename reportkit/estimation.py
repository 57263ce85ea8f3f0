"""The estimation stage: Design -> main estimates, first stages, reduced form, basic tests.

Pure function from the engine's input and a few options to typed result parts. The
numbers come from ``reportkit.engine``; this module turns arrays into labelled
coefficients, intervals and tests (normal reference distribution for coefficients:
IV estimators have no exact small-sample t distribution, and the small-sample factors
are already in the standard errors).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from reportkit.checks.endogeneity import durbin_wu_hausman
from reportkit.checks.overid import hansen_j, sargan
from reportkit.checks.overid_extra import basmann, c_statistics
from reportkit.checks.strength import instrument_strength
from reportkit.checks.weak_iv import weak_iv_inference
from reportkit.coefficients import coefficient_rows
from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.crosscheck import CrossCheckRow, run_crosscheck, should_run
from reportkit.engine.design import Design
from reportkit.engine.estimators import ESTIMATOR_FUNCTIONS, ESTIMATOR_LABELS, EstimateArrays
from reportkit.engine.firststage import LinearFit, binned_first_stage, fit_on_instruments
from reportkit.engine.moments import Moments, compute_moments
from reportkit.results import (
    BinnedScatter,
    Conventions,
    Diagnostics,
    EstimatorResult,
    FirstStage,
    FirstStageCoefficient,
    NotApplicable,
    ReducedForm,
    Strength,
    TestResult,
    WeakIVRobust,
)

REFERENCE_DISTRIBUTION = (
    "standard normal for coefficients (z statistics, intervals estimate +/- z x SE); "
    "F and chi-squared for joint tests"
)


@dataclass(frozen=True)
class EstimationOutput:
    estimates: list[EstimatorResult]
    first_stages: list[FirstStage]
    reduced_form: ReducedForm
    ratio: list[float | None]
    diagnostics: Diagnostics
    conventions: Conventions
    crosschecks: list[CrossCheckRow] | NotApplicable
    fits: dict[str, EstimateArrays]
    strength: Strength
    weak_iv: WeakIVRobust | NotApplicable
    moments: Moments
    cov: CovarianceSpec


def _label(name: str, labels: dict[str, str]) -> str:
    return labels.get(name, name)


def _sign(x: float) -> str:
    return "positive" if x > 0 else "negative" if x < 0 else "zero"


def _instrument_coefs(
    fit: LinearFit, names: tuple[str, ...], labels: dict[str, str]
) -> list[FirstStageCoefficient]:
    se = np.sqrt(np.diag(fit.cov))
    return [
        FirstStageCoefficient(
            instrument=name,
            label=_label(name, labels),
            estimate=float(fit.coef[i]),
            std_error=float(se[i]),
            p_value=float(2 * stats.norm.sf(abs(fit.coef[i] / se[i]))),
            sign=_sign(float(fit.coef[i])),  # type: ignore[arg-type]
        )
        for i, name in enumerate(names)
    ]


def _f_test(wald: float, q: int, df2: int, covariance: str, what: str) -> TestResult:
    f = wald / q
    return TestResult(
        name=f"F on the excluded instruments ({what})",
        statistic=f,
        distribution="F",
        df=[float(q), float(df2)],
        p_value=float(stats.f.sf(f, q, df2)),
        covariance=covariance,
        null="the excluded instruments' coefficients are all zero",
        reference="Wald test / number of instruments",
    )


def estimate(
    design: Design,
    *,
    covariance: str,
    estimators: list[str],
    confidence_level: float,
    labels: dict[str, str],
    crosscheck: str = "auto",
) -> EstimationOutput:
    """Fit every requested estimator, the first stages and the reduced form."""
    m = compute_moments(design)
    cov = CovarianceSpec.build(
        covariance,  # type: ignore[arg-type]
        design.clusters if covariance == "cluster" else None,
    )
    cov_label = cov.describe(design.cluster_names)
    fits = {name: ESTIMATOR_FUNCTIONS[name](m, cov) for name in estimators}
    # two-step GMM is fitted for Hansen's J even when it is not among the reported estimators
    gmm_fit = fits["gmm"] if "gmm" in fits else ESTIMATOR_FUNCTIONS["gmm"](m, cov)
    j_test = hansen_j(m, gmm_fit, covariance, cov_label)
    estimates = [
        EstimatorResult(
            estimator=name,  # type: ignore[arg-type]
            label=ESTIMATOR_LABELS[name],
            coefficients=coefficient_rows(fit, design.endog_names, labels, confidence_level),
            kappa=fit.kappa,
            n_obs=design.n,
            df_model=fit.k,
            covariance=cov_label,
            sigma=fit.sigma,
            hansen_j=j_test if name == "gmm" else None,
        )
        for name, fit in fits.items()
    ]
    first_stages = _first_stages(design, m, cov, cov_label, labels)
    rf_fit = fit_on_instruments(m, m.y, cov)
    reduced = ReducedForm(
        coefficients=_instrument_coefs(rf_fit, design.instrument_names, labels),
        joint_test=_f_test(rf_fit.wald, m.q, rf_fit.df_denominator, cov_label, "main covariance"),
    )
    tsls_fit = fits["2sls"] if "2sls" in fits else ESTIMATOR_FUNCTIONS["2sls"](m, cov)
    tsls_params = tsls_fit.params
    ratio: list[float | None] = []
    for j in range(m.p):
        if "ols" in fits and "2sls" in fits and fits["ols"].params[j] != 0:
            ratio.append(float(fits["2sls"].params[j] / fits["ols"].params[j]))
        else:
            ratio.append(None)
    diagnostics = Diagnostics(
        sargan=sargan(m, tsls_params),
        basmann=basmann(m, tsls_params),
        hansen_j=j_test,
        instrument_validity=c_statistics(m, cov, cov_label, design.instrument_names, labels),
        endogeneity=durbin_wu_hausman(m, cov, cov_label),
    )
    strength = instrument_strength(m, cov, cov_label, design.endog_names, labels)
    weak_iv = weak_iv_inference(
        m,
        cov,
        cov_label,
        design.endog_names,
        labels,
        confidence_level,
        tsls_fit,
        first_stages[0].f_main.statistic,
    )
    conventions = Conventions(
        covariance=covariance,
        covariance_description=cov_label,
        small_sample=(
            f"{cov.small_sample_rule()}, where n is the number of observations and k counts "
            "every column of the model: endogenous regressors, controls, the constant and "
            "each absorbed fixed-effect level (as in a dummy-variable regression)"
        ),
        reference_distribution=REFERENCE_DISTRIBUTION,
        confidence_level=confidence_level,
    )
    run_it, why_not = should_run(crosscheck, design)
    checks: list[CrossCheckRow] | NotApplicable
    if run_it:
        checks = run_crosscheck(design, m, fits, covariance)
    else:
        checks = NotApplicable(reason=why_not)
    return EstimationOutput(
        estimates=estimates,
        first_stages=first_stages,
        reduced_form=reduced,
        ratio=ratio,
        diagnostics=diagnostics,
        conventions=conventions,
        crosschecks=checks,
        fits=fits,
        strength=strength,
        weak_iv=weak_iv,
        moments=m,
        cov=cov,
    )


def _first_stages(
    design: Design, m: Moments, cov: CovarianceSpec, cov_label: str, labels: dict[str, str]
) -> list[FirstStage]:
    out = []
    for j, name in enumerate(design.endog_names):
        fit = fit_on_instruments(m, m.x[:, j], cov)
        bins = binned_first_stage(m, design.endog, design.instruments, j, design.weights)
        out.append(
            FirstStage(
                endogenous=name,
                label=_label(name, labels),
                coefficients=_instrument_coefs(fit, design.instrument_names, labels),
                partial_r2=fit.partial_r2,
                f_main=_f_test(fit.wald, m.q, fit.df_denominator, cov_label, "main covariance"),
                f_classical=_f_test(
                    fit.wald_classical, m.q, fit.df_denominator_classical, "classical", "classical"
                ),
                binned=[
                    BinnedScatter(
                        instrument=design.instrument_names[b.instrument_index],
                        x=[float(v) for v in b.x],
                        y=[float(v) for v in b.y],
                        count=[int(c) for c in b.count],
                        slope=b.slope,
                        intercept=b.intercept,
                    )
                    for b in bins
                ],
            )
        )
    return out
