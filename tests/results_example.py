"""A complete, plausible StudyResults built by hand, for layout tests of the report only.

The numbers are illustrative: they are not the output of any estimation and are checked
against nothing. Within one coefficient they are kept consistent (statistic = estimate /
std_error, a normal p-value and interval) so that the appendix reads sensibly. The
scenario is invented: an evening-tutoring pilot where a voucher lottery and the distance
to the nearest tutoring centre shift the hours a pupil attends.

Shape: one endogenous regressor, two instruments (over-identified by one), a cluster
covariance, and one NotApplicable entry (the Sargan test, not reported with a cluster
covariance).
"""

from __future__ import annotations

import hashlib
import math
from typing import Any

from reportkit.results import (
    BinnedScatter,
    CodingNote,
    Coefficient,
    Conventions,
    CrossCheck,
    Diagnostics,
    EstimatorResult,
    FirstStage,
    FirstStageCoefficient,
    InputFile,
    MissingCount,
    ModelDescription,
    NotApplicable,
    Provenance,
    ReducedForm,
    SampleAccount,
    SampleStep,
    StudyInfo,
    StudyResults,
    TestResult,
)

Z_95 = 1.959963984540054
CLUSTER_COV = "cluster-robust, by school (61 clusters)"
LABELS = {
    "maths_score": "maths score",
    "tutoring_hours": "tutoring hours per week",
    "voucher_won": "voucher lottery win",
    "distance_km": "distance to the nearest centre (km)",
    "age": "age in years",
    "prior_score": "previous year's maths score",
    "grade": "school grade",
    "district": "district",
    "school_id": "school",
}


def _normal_p(z: float) -> float:
    return math.erfc(abs(z) / math.sqrt(2.0))


def _coef(name: str, estimate: float, std_error: float) -> Coefficient:
    z = estimate / std_error
    return Coefficient(
        name=name,
        label=LABELS[name],
        estimate=estimate,
        std_error=std_error,
        statistic=z,
        p_value=_normal_p(z),
        ci_lower=estimate - Z_95 * std_error,
        ci_upper=estimate + Z_95 * std_error,
    )


def _fs_coef(name: str, estimate: float, std_error: float) -> FirstStageCoefficient:
    return FirstStageCoefficient(
        instrument=name,
        label=LABELS[name],
        estimate=estimate,
        std_error=std_error,
        p_value=_normal_p(estimate / std_error),
        sign="positive" if estimate > 0 else "negative",
    )


def _binned(instrument: str, slope: float, spread: float) -> BinnedScatter:
    x = [spread * (i - 9.5) / 9.5 for i in range(20)]
    wiggle = [0.12 * math.sin(1.7 * i) for i in range(20)]
    return BinnedScatter(
        instrument=instrument,
        x=x,
        y=[0.02 + slope * xi + w for xi, w in zip(x, wiggle, strict=True)],
        count=[231 + (i * 7) % 5 for i in range(20)],
        slope=slope,
        intercept=0.02,
    )


def _estimator(
    estimator: str, label: str, estimate: float, std_error: float, kappa: float | None
) -> EstimatorResult:
    return EstimatorResult(
        estimator=estimator,  # type: ignore[arg-type]
        label=label,
        coefficients=[_coef("tutoring_hours", estimate, std_error)],
        kappa=kappa,
        n_obs=4624,
        df_model=18,
        covariance=CLUSTER_COV,
        sigma=11.83 if estimator == "ols" else 12.41,
    )


def _sha(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def example_results(**overrides: Any) -> StudyResults:
    """An illustrative StudyResults; keyword arguments replace top-level fields."""
    hansen = TestResult(
        name="Hansen J",
        statistic=0.84,
        distribution="chi2",
        df=[1.0],
        p_value=0.3594,
        covariance=CLUSTER_COV,
        null="the excluded instruments are uncorrelated with the structural error",
        reference="Hansen (1982)",
    )
    parts: dict[str, Any] = {
        "study": StudyInfo(
            title="Evening tutoring and maths scores: a voucher-lottery pilot",
            authors=["A. Example", "B. Placeholder-Author"],
            summary=(
                "Pupils in an invented pilot could win a voucher for evening tutoring. "
                "We estimate the effect of weekly tutoring hours on end-of-year maths scores."
            ),
        ),
        "model": ModelDescription(
            outcome="maths_score",
            endogenous=["tutoring_hours"],
            instruments=["voucher_won", "distance_km"],
            controls=["age", "prior_score", "grade"],
            fixed_effects=["district"],
            cluster_by=["school_id"],
            weights=None,
            labels=dict(LABELS),
            n_instruments=2,
            n_endogenous=1,
            overidentification_degree=1,
        ),
        "conventions": Conventions(
            covariance="cluster",
            covariance_description=(
                "Cluster-robust by school: errors may be correlated within a school and "
                "heteroskedastic, independent across schools."
            ),
            small_sample="Variance scaled by G/(G-1) x (N-1)/(N-K), G clusters, K columns.",
            reference_distribution=(
                "Normal for coefficients; F for first-stage joint tests; chi-squared for "
                "over-identification and endogeneity tests."
            ),
            confidence_level=0.95,
        ),
        "sample": SampleAccount(
            rows_read=5212,
            steps=[
                SampleStep(
                    step="Keep rows where grade is one of 7, 8, 9",
                    rows_removed=412,
                    rows_remaining=4800,
                ),
                SampleStep(
                    step="Remove rows with a missing value in a model column",
                    rows_removed=173,
                    rows_remaining=4627,
                ),
                SampleStep(
                    step="Remove singleton fixed-effect groups", rows_removed=3, rows_remaining=4624
                ),
            ],
            missing_by_column=[
                MissingCount(column="prior_score", rows_removed=121),
                MissingCount(column="distance_km", rows_removed=40),
                MissingCount(column="tutoring_hours", rows_removed=12),
            ],
            singletons_removed=3,
            rows_used=4624,
            clusters_used=[61],
            fixed_effect_levels=[12],
            codings=[
                CodingNote(column="grade", coding="one indicator per level; 7 is the reference"),
                CodingNote(column="voucher_won", coding="yes = 1, no = 0"),
            ],
            dropped_columns=[
                CodingNote(column="urban", coding="constant in the estimation sample")
            ],
        ),
        "estimates": [
            _estimator("ols", "OLS", 0.92, 0.11, 0.0),
            _estimator("2sls", "2SLS", 1.64, 0.41, 1.0),
            _estimator("liml", "LIML", 1.71, 0.44, 1.0031),
            _estimator("gmm", "GMM", 1.60, 0.39, None).model_copy(update={"hansen_j": hansen}),
        ],
        "first_stages": [
            FirstStage(
                endogenous="tutoring_hours",
                label=LABELS["tutoring_hours"],
                coefficients=[
                    _fs_coef("voucher_won", 2.35, 0.31),
                    _fs_coef("distance_km", -0.18, 0.05),
                ],
                partial_r2=0.061,
                f_main=TestResult(
                    name="First-stage F",
                    statistic=31.4,
                    distribution="F",
                    df=[2.0, 60.0],
                    p_value=4.1e-10,
                    covariance=CLUSTER_COV,
                    null="the excluded instruments' coefficients are all zero",
                    reference="Wald test with a cluster covariance (Liang and Zeger, 1986)",
                ),
                f_classical=TestResult(
                    name="First-stage F",
                    statistic=44.8,
                    distribution="F",
                    df=[2.0, 4606.0],
                    p_value=5.6e-20,
                    covariance="classical (independent, homoskedastic errors)",
                    null="the excluded instruments' coefficients are all zero",
                    reference="classical F test",
                ),
                binned=[_binned("voucher_won", 2.35, 0.6), _binned("distance_km", -0.18, 6.0)],
            )
        ],
        "reduced_form": ReducedForm(
            coefficients=[
                _fs_coef("voucher_won", 3.85, 1.12),
                _fs_coef("distance_km", -0.29, 0.10),
            ],
            joint_test=TestResult(
                name="Reduced-form joint test",
                statistic=7.9,
                distribution="F",
                df=[2.0, 60.0],
                p_value=0.00091,
                covariance=CLUSTER_COV,
                null="the excluded instruments do not shift the outcome",
                reference="Wald test with a cluster covariance (Liang and Zeger, 1986)",
            ),
        ),
        "ols_2sls_ratio": [1.64 / 0.92],
        "diagnostics": Diagnostics(
            sargan=NotApplicable(
                reason="assumes independent, homoskedastic errors; with a cluster "
                "covariance the Hansen J is the over-identification test"
            ),
            hansen_j=hansen,
            endogeneity=TestResult(
                name="Durbin-Wu-Hausman",
                statistic=3.41,
                distribution="chi2",
                df=[1.0],
                p_value=0.0648,
                covariance=CLUSTER_COV,
                null="the endogenous regressor is exogenous (OLS is consistent)",
                reference="Durbin (1954); Wu (1973); Hausman (1978)",
            ),
        ),
        "provenance": Provenance(
            inputs=[
                InputFile(
                    role="data",
                    name="tutoring_pilot.csv",
                    sha256=_sha("illustrative data"),
                    size_bytes=402_118,
                ),
                InputFile(
                    role="specification",
                    name="analysis.yaml",
                    sha256=_sha("illustrative spec"),
                    size_bytes=1_377,
                ),
            ],
            python="3.11.7",
            packages={
                "numpy": "2.4.6",
                "scipy": "1.17.1",
                "pandas": "3.1.1",
                "linearmodels": "7.1",
                "matplotlib": "3.11.2",
                "weasyprint": "70.0",
            },
            seed=20240601,
            crosschecks=[
                CrossCheck(
                    estimator="2SLS",
                    max_rel_diff_estimate=3.1e-12,
                    max_rel_diff_std_error=8.4e-11,
                    agrees=True,
                ),
                CrossCheck(
                    estimator="LIML",
                    max_rel_diff_estimate=6.0e-10,
                    max_rel_diff_std_error=2.2e-9,
                    agrees=True,
                ),
                CrossCheck(
                    estimator="GMM",
                    max_rel_diff_estimate=1.4e-9,
                    max_rel_diff_std_error=5.7e-9,
                    agrees=True,
                ),
            ],
        ),
    }
    parts.update(overrides)
    return StudyResults(**parts)
