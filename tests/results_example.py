"""A complete, plausible StudyResults built by hand, for layout tests of the report only.

The numbers are illustrative: they are not the output of any estimation and are checked
against nothing. Within one coefficient they are kept consistent (statistic = estimate /
std_error, a normal p-value and interval) so that the appendix reads sensibly. The
scenario is invented: an evening-tutoring pilot where a voucher lottery and the distance
to the nearest tutoring centre shift the hours a pupil attends.

Shape: one endogenous regressor, two instruments (over-identified by one), a cluster
covariance, and NotApplicable entries where a cluster covariance rules a statistic out
(Sargan, Basmann, the CLR test) or two instruments make it degenerate (the C statistics).
The strength and weak-instrument-robust parts are kept consistent with the first stage and
the 2SLS estimate (see ``example_strength`` and ``example_weak_iv``). The balance part
(``example_balance``) is illustrative too: the lottery looks balanced, the distance less so.
The disclosures are built by ``reportkit.disclosures.build_disclosures`` from
``example_assumptions`` (invented arguments; monotonicity has none).
"""

from __future__ import annotations

import hashlib
import math
from typing import Any

from reportkit.disclosures import build_disclosures
from reportkit.results import (
    Balance,
    BalanceCell,
    BalanceRow,
    BinnedScatter,
    CodingNote,
    Coefficient,
    ConfidenceSet,
    Conventions,
    CriticalValue,
    CriticalValueTable,
    CrossCheck,
    Diagnostics,
    EffectiveF,
    EndogenousStrength,
    EstimatorResult,
    FirstStage,
    FirstStageCoefficient,
    GroupMean,
    InputFile,
    InstrumentCoefficient,
    InstrumentValidity,
    Interval,
    JointBalance,
    MissingCount,
    ModelDescription,
    NotApplicable,
    OutcomeIndex,
    PlaceboResult,
    Provenance,
    PValueCurve,
    ReducedForm,
    SampleAccount,
    SampleStep,
    Statistic,
    Strength,
    StrengthVerdict,
    StudyInfo,
    StudyResults,
    TestResult,
    TFResult,
    WeakIVRobust,
)
from reportkit.spec.models import Argument, AssumptionsSection

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
    "free_meals": "eligible for free school meals",
    "reading_before": "reading score in the year before the pilot",
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
            basmann=NotApplicable(reason="assumes independent, homoskedastic errors"),
            hansen_j=hansen,
            instrument_validity=[
                InstrumentValidity(
                    instrument=name,
                    label=LABELS.get(name, name),
                    test=NotApplicable(
                        reason="with two instruments and one endogenous regressor, dropping "
                        "one leaves the model just-identified; the C statistic equals Hansen J"
                    ),
                )
                for name in ("voucher_won", "distance_km")
            ],
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
        "strength": example_strength(),
        "weak_iv": example_weak_iv(),
        "balance": example_balance(),
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
    parts.setdefault(
        "robustness", NotApplicable(reason="robustness variants are not part of this example")
    )
    parts.update(overrides)
    if "disclosures" not in parts:
        parts["disclosures"] = build_disclosures(
            example_assumptions(),
            model=parts["model"],
            strength=parts["strength"],
            weak_iv=parts["weak_iv"],
            diagnostics=parts["diagnostics"],
            balance=parts["balance"],
        )
    return StudyResults(**parts)


def example_assumptions() -> AssumptionsSection:
    """Illustrative arguments for three assumptions; monotonicity is left without one."""
    return AssumptionsSection(
        relevance=Argument(
            argument="Winning a voucher makes tutoring free, and a shorter trip makes it easier "
            "to attend."
        ),
        independence=Argument(
            argument="The voucher lottery was drawn by the pilot's office among all applicants; "
            "distance is argued to be unrelated to ability once district and prior scores are "
            "held fixed.",
            references=["Pilot operations manual (invented), section 2"],
        ),
        exclusion_restriction=Argument(
            argument="A voucher can only be spent on tutoring hours, and distance to a centre "
            "matters for schooling only through attendance.",
        ),
    )


def example_strength() -> Strength:
    """Illustrative strength results, consistent with the example's first stage.

    With one endogenous regressor the Cragg-Donald F is the classical first-stage F and the
    Kleibergen-Paap Wald F the first-stage F with the main covariance, so those are reused.
    The effective-F critical values are invented; the Stock-Yogo values are those for one
    endogenous regressor and two instruments (Stock & Yogo 2005, from memory).
    """
    cd = Statistic(
        name="Cragg-Donald minimum-eigenvalue F",
        value=44.8,
        covariance="classical (independent, homoskedastic errors)",
        reference="Cragg & Donald 1993",
    )
    return Strength(
        per_endogenous=[
            EndogenousStrength(
                endogenous="tutoring_hours",
                label=LABELS.get("tutoring_hours", "tutoring_hours"),
                partial_r2=0.061,
                shea_partial_r2=0.061,
                sanderson_windmeijer=NotApplicable(
                    reason="one endogenous regressor: the conditional F is the first-stage F"
                ),
                effective_f=EffectiveF(
                    value=28.9,
                    k_eff=1.4,
                    critical_values=[
                        CriticalValue(
                            criterion="2SLS Nagar bias at most 10% of the worst-case benchmark",
                            estimator="2sls",
                            kind="nagar_bias",
                            threshold=0.10,
                            value=21.4,
                            exceeded=True,
                        ),
                        CriticalValue(
                            criterion="2SLS Nagar bias at most 20% of the worst-case benchmark",
                            estimator="2sls",
                            kind="nagar_bias",
                            threshold=0.20,
                            value=13.2,
                            exceeded=True,
                        ),
                    ],
                    covariance=CLUSTER_COV,
                ),
            )
        ],
        cragg_donald=cd,
        kleibergen_paap_f=Statistic(
            name="Kleibergen-Paap rk Wald F",
            value=31.4,
            covariance=CLUSTER_COV,
            reference="Kleibergen & Paap 2006",
        ),
        kleibergen_paap_lm=TestResult(
            name="Kleibergen-Paap rk LM",
            statistic=27.3,
            distribution="chi2",
            df=[2.0],
            p_value=math.exp(-27.3 / 2.0),  # chi-squared with 2 df: survival exp(-x/2)
            covariance=CLUSTER_COV,
            null="the model is under-identified",
            reference="Kleibergen & Paap 2006",
        ),
        stock_yogo=CriticalValueTable(
            statistic_name="Cragg-Donald minimum-eigenvalue F",
            statistic=44.8,
            rows=[
                CriticalValue(
                    criterion="2SLS size at most 10% (nominal 5%)",
                    estimator="2sls",
                    kind="size",
                    threshold=0.10,
                    value=19.93,
                    exceeded=True,
                ),
                CriticalValue(
                    criterion="2SLS size at most 15% (nominal 5%)",
                    estimator="2sls",
                    kind="size",
                    threshold=0.15,
                    value=11.59,
                    exceeded=True,
                ),
                CriticalValue(
                    criterion="LIML size at most 10% (nominal 5%)",
                    estimator="liml",
                    kind="size",
                    threshold=0.10,
                    value=8.68,
                    exceeded=True,
                ),
            ],
            source="Stock & Yogo 2005",
            note="critical values assume independent, homoskedastic errors",
        ),
        verdict=StrengthVerdict(
            level="strong",
            summary=(
                "The effective F (28.9) exceeds its critical value for a 2SLS Nagar bias of at "
                "most 10% of the worst-case benchmark (21.4)."
            ),
        ),
    )


# The illustrative Anderson-Rubin statistic: a floor (the instruments' disagreement) plus a
# quadratic around the 2SLS estimate, steeper on the left, so the set is asymmetric.
AR_FLOOR = 0.84
AR_CENTRE = 1.64
AR_SCALE = (0.42, 0.47)  # left, right
CHI2_2_95 = -2.0 * math.log(0.05)  # 95% quantile of chi-squared with 2 df


def _ar_statistic(beta0: float) -> float:
    scale = AR_SCALE[0] if beta0 < AR_CENTRE else AR_SCALE[1]
    return AR_FLOOR + ((beta0 - AR_CENTRE) / scale) ** 2


def _chi2_2_p(x: float) -> float:
    return math.exp(-x / 2.0)  # survival function of chi-squared with 2 df


def example_ar_set() -> Interval:
    """The illustrative 95% Anderson-Rubin set, where the statistic is below its critical value."""
    half = math.sqrt(CHI2_2_95 - AR_FLOOR)
    return Interval(lower=AR_CENTRE - AR_SCALE[0] * half, upper=AR_CENTRE + AR_SCALE[1] * half)


def example_weak_iv() -> WeakIVRobust:
    """Illustrative weak-IV-robust results (invented; consistent with the 2SLS estimate 1.64)."""
    ar_zero = TestResult(
        name="Anderson-Rubin test of a zero effect",
        statistic=_ar_statistic(0.0),
        distribution="chi2",
        df=[2.0],
        p_value=_chi2_2_p(_ar_statistic(0.0)),
        covariance=CLUSTER_COV,
        null="the coefficient is zero",
        reference="Anderson & Rubin 1949",
    )
    grid = [round(-1.0 + 0.05 * i, 10) for i in range(101)]
    tf_critical = 2.31  # invented, of the size the tF table gives for F near 30
    return WeakIVRobust(
        endogenous="tutoring_hours",
        label=LABELS.get("tutoring_hours", "tutoring_hours"),
        ar_test_zero=ar_zero,
        anderson_rubin=ConfidenceSet(
            shape="interval",
            pieces=[example_ar_set()],
            level=0.95,
            method="closed-form inversion of the test",
            covariance=CLUSTER_COV,
            reference="Anderson & Rubin 1949",
        ),
        clr_test_zero=NotApplicable(
            reason="the CLR test assumes independent, homoskedastic errors"
        ),
        clr=NotApplicable(reason="the CLR test assumes independent, homoskedastic errors"),
        tf=TFResult(
            first_stage_f=31.4,
            critical_value=tf_critical,
            t_statistic=1.64 / 0.41,
            p_value_adjusted=0.002,
            interval=Interval(lower=1.64 - tf_critical * 0.41, upper=1.64 + tf_critical * 0.41),
        ),
        curve=PValueCurve(
            beta0=grid,
            anderson_rubin=[_chi2_2_p(_ar_statistic(b)) for b in grid],
            clr=None,
        ),
    )


def example_weak_iv_with_clr() -> WeakIVRobust:
    """The weak-IV example as with a classical covariance: CLR test, set and curve present.

    The CLR numbers are invented: p_CLR = 1.2 p_AR^1.15, a curve a little narrower than the
    Anderson-Rubin one, and the set is where that is above 0.05.
    """
    base = example_weak_iv()
    if base.curve is None:
        raise ValueError("the weak-IV example has no curve")
    classical = "classical (independent, homoskedastic errors)"
    clr_curve = [min(1.0, 1.2 * p**1.15) for p in base.curve.anderson_rubin]
    ar_cut = -2.0 * math.log((0.05 / 1.2) ** (1 / 1.15))  # AR statistic where p_CLR = 0.05
    half = math.sqrt(ar_cut - AR_FLOOR)
    return base.model_copy(
        update={
            "clr_test_zero": TestResult(
                name="Conditional likelihood ratio test of a zero effect",
                statistic=14.2,
                distribution="chi2",
                df=[1.0],
                p_value=0.0003,
                covariance=classical,
                null="the coefficient is zero",
                reference="Moreira 2003",
            ),
            "clr": ConfidenceSet(
                shape="interval",
                pieces=[
                    Interval(
                        lower=AR_CENTRE - AR_SCALE[0] * half, upper=AR_CENTRE + AR_SCALE[1] * half
                    )
                ],
                level=0.95,
                method="inversion of the test over a grid refined at the boundary",
                covariance=classical,
                reference="Moreira 2003",
            ),
            "curve": base.curve.model_copy(update={"clr": clr_curve}),
        }
    )


# --- is the instrument as good as random? (illustrative) -------------------------------

LOTTERY_GROUPS = ("value 0", "value 1")
_KM = LABELS["distance_km"]  # interval groups name the instrument, as the engine writes them
DISTANCE_GROUPS = (
    f"{_KM} <= 1.80",
    f"1.80 < {_KM} <= 3.40",
    f"3.40 < {_KM} <= 5.90",
    f"{_KM} > 5.90",
)


def _instrument_coef(name: str, estimate: float, std_error: float) -> InstrumentCoefficient:
    return InstrumentCoefficient(
        instrument=name,
        label=LABELS[name],
        estimate=estimate,
        std_error=std_error,
        p_value=_normal_p(estimate / std_error),
    )


def _balance_cell(
    instrument: str,
    groups: tuple[str, ...],
    means: list[float],
    counts: list[int],
    pooled_sd: float,
    unconditional: tuple[float, float],
    conditional: tuple[float, float],
) -> BalanceCell:
    """One covariate against one instrument; difference and standardized difference derived."""
    difference = means[-1] - means[0]
    return BalanceCell(
        instrument=instrument,
        groups=[
            GroupMean(group=g, mean=m, n=n) for g, m, n in zip(groups, means, counts, strict=True)
        ],
        difference=difference,
        std_difference=difference / pooled_sd,
        unconditional=_instrument_coef(instrument, *unconditional),
        conditional=_instrument_coef(instrument, *conditional),
    )


def _quarters(n: int) -> list[int]:
    base, extra = divmod(n, 4)
    return [base + (1 if i < extra else 0) for i in range(4)]


def _f_test(name: str, statistic: float, df: list[float], p_value: float, null: str) -> TestResult:
    return TestResult(
        name=name,
        statistic=statistic,
        distribution="F",
        df=df,
        p_value=p_value,
        covariance=CLUSTER_COV,
        null=null,
        reference="Wald test with a cluster covariance (Liang and Zeger, 1986)",
    )


def example_balance() -> Balance:
    """Illustrative balance results: three covariates (one pre-treatment), two instruments.

    Invented numbers. The voucher lottery (binary) is grouped by its two values, the distance
    (continuous) by quartiles. Within a cell the difference is the last group's mean minus
    the first and the standardized difference that over an invented pooled standard
    deviation; group counts add up to the covariate's rows. The joint-test p-values are
    the F survival function at the stated statistic (scipy.stats.f.sf), so that they read
    consistently; nothing here was estimated.
    """
    n, n_meals = 4624, 4511
    lottery_n, lottery_meals_n = [2871, 1753], [2801, 1710]
    rows = [
        BalanceRow(
            covariate="age",
            label=LABELS["age"],
            kind="control",
            n_used=n,
            cells=[
                _balance_cell(
                    "voucher_won",
                    LOTTERY_GROUPS,
                    [13.42, 13.45],
                    lottery_n,
                    0.94,
                    (0.03, 0.031),
                    (0.027, 0.029),
                ),
                _balance_cell(
                    "distance_km",
                    DISTANCE_GROUPS,
                    [13.39, 13.44, 13.45, 13.47],
                    _quarters(n),
                    0.94,
                    (0.011, 0.008),
                    (0.006, 0.008),
                ),
            ],
        ),
        BalanceRow(
            covariate="prior_score",
            label=LABELS["prior_score"],
            kind="control",
            n_used=n,
            cells=[
                _balance_cell(
                    "voucher_won",
                    LOTTERY_GROUPS,
                    [61.8, 62.3],
                    lottery_n,
                    14.6,
                    (0.5, 0.52),
                    (0.44, 0.49),
                ),
                _balance_cell(
                    "distance_km",
                    DISTANCE_GROUPS,
                    [63.5, 62.4, 61.6, 60.9],
                    _quarters(n),
                    14.6,
                    (-0.42, 0.19),
                    (-0.21, 0.17),
                ),
            ],
        ),
        BalanceRow(
            covariate="free_meals",
            label=LABELS["free_meals"],
            kind="pre_treatment",
            n_used=n_meals,
            cells=[
                _balance_cell(
                    "voucher_won",
                    LOTTERY_GROUPS,
                    [0.231, 0.224],
                    lottery_meals_n,
                    0.42,
                    (-0.007, 0.014),
                    (-0.005, 0.013),
                ),
                _balance_cell(
                    "distance_km",
                    DISTANCE_GROUPS,
                    [0.198, 0.219, 0.236, 0.262],
                    _quarters(n_meals),
                    0.42,
                    (0.011, 0.004),
                    (0.006, 0.004),
                ),
            ],
        ),
    ]
    joint_null = "the covariates are jointly unrelated to the instrument"
    tutoring = _coef("tutoring_hours", 0.09, 0.21)
    return Balance(
        rows=rows,
        joint=[
            JointBalance(
                instrument="voucher_won",
                label=LABELS["voucher_won"],
                test=_f_test("Joint balance test", 0.41, [3.0, 60.0], 0.7464, joint_null),
            ),
            JointBalance(
                instrument="distance_km",
                label=LABELS["distance_km"],
                test=_f_test("Joint balance test", 3.18, [3.0, 60.0], 0.0303, joint_null),
            ),
        ],
        outcome_index=OutcomeIndex(
            coefficients=[
                _instrument_coef("voucher_won", 0.21, 0.35),
                _instrument_coef("distance_km", -0.16, 0.07),
            ],
            joint_test=_f_test(
                "Outcome-index joint test",
                2.74,
                [2.0, 60.0],
                0.0727,
                "the instruments are unrelated to the outcome predicted from the covariates",
            ),
            r2_prediction=0.41,
        ),
        placebo=[
            PlaceboResult(
                outcome="reading_before",
                label=LABELS["reading_before"],
                n_used=4388,
                reduced_form=[
                    _instrument_coef("voucher_won", 0.31, 0.62),
                    _instrument_coef("distance_km", -0.05, 0.09),
                ],
                joint_test=_f_test(
                    "Placebo reduced-form joint test",
                    0.27,
                    [2.0, 60.0],
                    0.7643,
                    "the instruments do not shift the placebo outcome",
                ),
                tsls=[tutoring],
            )
        ],
        covariance=CLUSTER_COV,
        conditioning="the district fixed effects",
    )
