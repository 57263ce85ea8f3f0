"""An illustrative ``Robustness`` part for the layout tests of the appendix.

The numbers are illustrative: they are not the output of any estimation and are checked
against nothing. They are kept internally consistent so that the section reads sensibly:
every interval is estimate -/+ 1.96 standard errors with a normal p-value, differences and
shifts are taken from the main 2SLS estimate of ``results_example`` (1.64, standard error
0.41, 4,624 rows, clustered by school), the leave-one-cluster-out rows add up to the
sample, and the exclusion-sensitivity numbers follow one invented linear relation between
the voucher's allowed direct effect and the estimate. The scenario is the invented
tutoring pilot of ``results_example``.

Shape: five groups of variants and the binary-outcome models (bivariate probit could not
run: the treatment is not binary), leave-one-cluster-out over the 12 districts (the
alternative clustering; one removal loses significance), a wild cluster bootstrap over the
61 schools of the main covariance, and exclusion sensitivity for one instrument.
"""

from __future__ import annotations

import math

from results_example import CLUSTER_COV, LABELS, Z_95

from reportkit.results import (
    ClusterDrop,
    ClusterInfluence,
    DirectEffectSensitivity,
    ExclusionSensitivity,
    Interval,
    NotApplicable,
    Robustness,
    SensitivityPoint,
    Variant,
    VariantValue,
    WildBootstrapResult,
)
from reportkit.seeds import derive_seed

MAIN_ESTIMATE = 1.64
MAIN_SE = 0.41
MAIN_N = 4624
MASTER_SEED = 20240601  # the example's provenance seed
DISTRICT_COV = "cluster-robust, by district (12 clusters)"
TWO_WAY_COV = "cluster-robust, two-way by school (61) and district (12)"
ENDOGENOUS = "tutoring_hours"

# Exclusion sensitivity of the voucher lottery: the estimate falls by SLOPE per point of
# direct effect of a voucher on the maths score (invented), the standard error is unchanged.
SENSITIVITY_SLOPE = 0.40
VOUCHER_RANGE = (0.0, 1.0)
VOUCHER_PRIOR = (0.5, 0.25)  # midpoint and a quarter of the width (the spec's default)
SENSITIVITY_GRID = 41


def normal_p(z: float) -> float:
    """Two-sided p-value of a standard-normal statistic."""
    return math.erfc(abs(z) / math.sqrt(2.0))


def value(estimate: float, std_error: float | None, quantity: str = ENDOGENOUS) -> VariantValue:
    """A variant value with a normal 95% interval and p-value (none without a standard error)."""
    if std_error is None:
        return VariantValue(
            quantity=quantity,
            estimate=estimate,
            std_error=None,
            ci_lower=None,
            ci_upper=None,
            p_value=None,
        )
    return VariantValue(
        quantity=quantity,
        estimate=estimate,
        std_error=std_error,
        ci_lower=estimate - Z_95 * std_error,
        ci_upper=estimate + Z_95 * std_error,
        p_value=normal_p(estimate / std_error),
    )


def _variant(
    key: str,
    name: str,
    description: str,
    estimand: str,
    values: list[VariantValue] | NotApplicable,
    n_obs: int | None = MAIN_N,
    covariance: str = CLUSTER_COV,
) -> Variant:
    return Variant(
        key=key,
        group=key.split(":", 1)[0],  # type: ignore[arg-type]
        name=name,
        description=description,
        estimand=estimand,
        n_obs=n_obs,
        covariance=covariance,
        values=values,
    )


LATE_BOTH = "local effect for pupils whose hours the two instruments move"


def example_variants() -> list[Variant]:
    """Variants in five groups plus the binary-outcome models (bivariate probit n/a)."""
    passed = "passing the end-of-year maths test"
    ape = f"average partial effect of an hour on the probability of {passed}"
    return [
        _variant(
            "estimator:liml",
            "LIML",
            "limited-information maximum likelihood",
            LATE_BOTH,
            [value(1.71, 0.44)],
        ),
        _variant(
            "estimator:fuller_1",
            "Fuller (1)",
            "Fuller's modified LIML, constant 1",
            LATE_BOTH,
            [value(1.69, 0.43)],
        ),
        _variant(
            "estimator:fuller_4",
            "Fuller (4)",
            "Fuller's modified LIML, constant 4",
            LATE_BOTH,
            [value(1.63, 0.40)],
        ),
        _variant("estimator:gmm", "GMM", "two-step efficient GMM", LATE_BOTH, [value(1.60, 0.39)]),
        _variant(
            "estimator:jive",
            "JIVE",
            "jackknife instrumental variables",
            LATE_BOTH,
            [value(1.78, 0.49)],
        ),
        _variant(
            "instruments:only:voucher_won",
            "Voucher lottery win alone",
            "the distance instrument dropped",
            "local effect for pupils the lottery moves",
            [value(1.58, 0.45)],
        ),
        _variant(
            "instruments:only:distance_km",
            "Distance to the nearest centre alone",
            "the lottery instrument dropped",
            "local effect for pupils distance moves",
            [value(2.10, 0.95)],
        ),
        _variant(
            "inference:district",
            "Clustered by district",
            "the main 2SLS estimate, standard errors clustered by district",
            LATE_BOTH,
            [value(MAIN_ESTIMATE, 0.47)],
            covariance=DISTRICT_COV,
        ),
        _variant(
            "inference:school+district",
            "Clustered by school and district",
            "the main 2SLS estimate, two-way clustered standard errors",
            LATE_BOTH,
            [value(MAIN_ESTIMATE, 0.49)],
            covariance=TWO_WAY_COV,
        ),
        _variant(
            "sample:later_schools",
            "Schools that joined in the second year",
            "first-year pilot schools left out",
            LATE_BOTH,
            [value(1.52, 0.46)],
            n_obs=3980,
        ),
        _variant(
            "sample:trim_0.01",
            "Outcome trimmed 1% each tail",
            "the lowest and highest 1% of maths scores left out",
            LATE_BOTH,
            [value(1.58, 0.40)],
            n_obs=4532,
        ),
        _variant(
            "controls:no_prior",
            "Without the previous year's score",
            "previous year's maths score removed from the controls",
            LATE_BOTH,
            [value(1.95, 0.43)],
        ),
        _variant(
            "controls:reading",
            "With the earlier reading score",
            "reading score in the year before the pilot added",
            LATE_BOTH,
            [value(1.61, 0.41)],
            n_obs=4388,
        ),
        _variant(
            "binary:control_function_probit",
            "Control-function probit",
            "probit with the first-stage residual added (Rivers & Vuong 1988)",
            ape,
            [value(0.031, 0.009, "average partial effect")],
        ),
        _variant(
            "binary:2sri_probit",
            "2SRI probit",
            "two-stage residual inclusion, probit (Terza, Basu & Rathouz 2008)",
            ape,
            [value(0.030, 0.010, "average partial effect")],
        ),
        _variant(
            "binary:2sri_logit",
            "2SRI logit",
            "two-stage residual inclusion, logit (Terza, Basu & Rathouz 2008)",
            ape,
            [value(0.032, 0.010, "average partial effect")],
        ),
        _variant(
            "binary:bivariate_probit",
            "Bivariate probit",
            "joint probit of passing and of the treatment",
            "average treatment effect",
            NotApplicable(
                reason="needs a binary treatment; tutoring hours per week takes many values"
            ),
            n_obs=None,
        ),
        _variant(
            "binary:linear_2sls",
            "Linear 2SLS on the binary outcome",
            "the main 2SLS model with the pass indicator as outcome",
            f"local effect of an hour on the probability of {passed}, for compliers",
            [value(0.034, 0.011)],
        ),
    ]


# Leave-one-district-out estimates (invented): rows per district, estimate, standard error.
DISTRICT_DROPS = (
    ("D01", 402, 1.66, 0.42),
    ("D02", 377, 1.59, 0.42),
    ("D03", 365, 1.71, 0.43),
    ("D04", 441, 1.62, 0.42),
    ("D05", 318, 1.64, 0.41),
    ("D06", 396, 1.70, 0.43),
    ("D07", 512, 0.98, 0.52),  # the one district the estimate's distance from zero hinges on
    ("D08", 350, 1.68, 0.42),
    ("D09", 389, 1.57, 0.42),
    ("D10", 333, 1.93, 0.44),
    ("D11", 371, 1.61, 0.42),
    ("D12", 370, 1.66, 0.42),
)


def example_cluster_influence() -> ClusterInfluence:
    """Leaving out each of the 12 districts in turn: one removal loses significance."""
    main_significant = abs(MAIN_ESTIMATE / MAIN_SE) > Z_95
    drops = [
        ClusterDrop(
            cluster=name,
            n_rows=n,
            estimate=estimate,
            shift=estimate - MAIN_ESTIMATE,
            std_error=se,
            significant=abs(estimate / se) > Z_95,
        )
        for name, n, estimate, se in DISTRICT_DROPS
    ]
    drops.sort(key=lambda d: -abs(d.shift))  # stable: ties keep the district order
    return ClusterInfluence(
        endogenous=ENDOGENOUS,
        label=LABELS[ENDOGENOUS],
        cluster_variable="district",
        n_clusters=len(drops),
        drops=drops,
        lowest=min(d.estimate for d in drops),
        highest=max(d.estimate for d in drops),
        significance_changes=sum(d.significant != main_significant for d in drops),
    )


def example_wild_bootstrap() -> WildBootstrapResult:
    """A restricted wild cluster bootstrap over the 61 schools: 2 of 999 draws as extreme."""
    return WildBootstrapResult(
        endogenous=ENDOGENOUS,
        label=LABELS[ENDOGENOUS],
        t_statistic=MAIN_ESTIMATE / MAIN_SE,
        p_value=2 / 999,
        draws=999,
        weights="rademacher",
        level="cluster",
        clusters=61,
        seed=derive_seed(MASTER_SEED, f"wild-bootstrap:{ENDOGENOUS}"),
    )


def sensitivity_estimate(gamma: float) -> float:
    """The estimate with a direct effect ``gamma`` of the voucher removed from the outcome."""
    return MAIN_ESTIMATE - SENSITIVITY_SLOPE * gamma


def example_sensitivity() -> ExclusionSensitivity:
    """Conley-Hansen-Rossi style numbers for a voucher direct effect in [0, 1] maths points.

    Union interval: the union over the range of estimate -/+ 1.96 x 0.41. Local to zero: the
    estimate shifted by the prior mean, the variance increased by slope^2 x prior_sd^2.
    Breakdown: where the lower end of the interval reaches zero.
    """
    lower, upper = VOUCHER_RANGE
    prior_mean, prior_sd = VOUCHER_PRIOR
    half = Z_95 * MAIN_SE
    grid = [lower + (upper - lower) * i / (SENSITIVITY_GRID - 1) for i in range(SENSITIVITY_GRID)]
    ltz_estimate = sensitivity_estimate(prior_mean)
    ltz_se = math.sqrt(MAIN_SE**2 + (SENSITIVITY_SLOPE * prior_sd) ** 2)
    return ExclusionSensitivity(
        endogenous=ENDOGENOUS,
        label=LABELS[ENDOGENOUS],
        ranges=[
            DirectEffectSensitivity(
                instrument="voucher_won",
                label=LABELS["voucher_won"],
                lower=lower,
                upper=upper,
                prior_mean=prior_mean,
                prior_sd=prior_sd,
                breakdown=(MAIN_ESTIMATE - half) / SENSITIVITY_SLOPE,
            )
        ],
        union_interval=Interval(
            lower=sensitivity_estimate(upper) - half, upper=sensitivity_estimate(lower) + half
        ),
        local_to_zero=Interval(
            lower=ltz_estimate - Z_95 * ltz_se, upper=ltz_estimate + Z_95 * ltz_se
        ),
        local_to_zero_estimate=ltz_estimate,
        curve=[
            SensitivityPoint(
                instrument="voucher_won",
                gamma=g,
                estimate=sensitivity_estimate(g),
                ci_lower=sensitivity_estimate(g) - half,
                ci_upper=sensitivity_estimate(g) + half,
            )
            for g in grid
        ],
        covariance=CLUSTER_COV,
        level=0.95,
    )


def example_robustness() -> Robustness:
    """Illustrative robustness results (invented numbers; see the module docstring)."""
    return Robustness(
        main=[value(MAIN_ESTIMATE, MAIN_SE)],
        variants=example_variants(),
        cluster_influence=[example_cluster_influence()],
        wild_bootstrap=[example_wild_bootstrap()],
        sensitivity=[example_sensitivity()],
    )
