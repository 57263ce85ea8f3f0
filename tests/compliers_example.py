"""Illustrative falsification and complier results, built by hand for layout tests only.

The numbers are invented (the tutoring-voucher scenario of ``results_example``): they are
not the output of any estimation and are checked against nothing. They are kept internally
consistent so that the appendix reads sensibly:

- each coefficient's p-value is the normal p-value of estimate / std_error; each joint test
  treats the two instruments' t-ratios as uncorrelated (F = mean of their squares) and its
  p-value is the F survival function there (scipy.stats.f.sf);
- complier shares follow from the treated shares with the voucher on and off (compliers =
  on - off, always-takers = off, never-takers = 1 - on) and add up to one;
- each full-sample covariate mean is the share-weighted mean of the three types' means;
- the implied complier masses are the complier share times a discretised normal outcome
  distribution (tails folded into the end bins), so each panel adds up to the complier
  share; bands are the mass plus or minus 1.96 invented standard errors; the count of
  negative bins is counted from the bands.
"""

from __future__ import annotations

import math
from itertools import pairwise
from statistics import NormalDist

from results_example import CLUSTER_COV, LABELS
from scipy import stats

from reportkit.results import (
    ComplierAnalysis,
    ComplierMean,
    ComplierShares,
    DensityBin,
    FalsificationFirstStage,
    FalsificationResult,
    InstrumentCoefficient,
    LateImplication,
    TestResult,
)
from reportkit.seeds import derive_seed

MASTER_SEED = 20240601  # the provenance seed of results_example
Z_95 = 1.959963984540054
DRAWS = 499
COMPLIER_SEED = derive_seed(MASTER_SEED, "compliers")
KITAGAWA_NULL = "every implied complier mass is non-negative"

TREATED_ON, TREATED_OFF = 0.781, 0.204  # share attending any tutoring, voucher won / not
N_ON, N_OFF = 1753, 2871
COMPLIER_SHARE_SE = 0.0213
BIN_EDGES = [30.0 + 5.0 * i for i in range(13)]  # 12 bins of the maths score, 30 to 90


def _normal_p(z: float) -> float:
    return math.erfc(abs(z) / math.sqrt(2.0))


def _coef(name: str, estimate: float, std_error: float) -> InstrumentCoefficient:
    return InstrumentCoefficient(
        instrument=name,
        label=LABELS[name],
        estimate=estimate,
        std_error=std_error,
        p_value=_normal_p(estimate / std_error),
    )


def _joint(name: str, coefs: list[InstrumentCoefficient], df2: float, null: str) -> TestResult:
    statistic = sum((c.estimate / c.std_error) ** 2 for c in coefs) / len(coefs)
    return TestResult(
        name=name,
        statistic=statistic,
        distribution="F",
        df=[float(len(coefs)), df2],
        p_value=float(stats.f.sf(statistic, len(coefs), df2)),
        covariance=CLUSTER_COV,
        null=null,
        reference="Wald test with a cluster covariance (Liang and Zeger, 1986)",
    )


def _subsample(
    name: str,
    description: str,
    rows: list[str],
    n_used: int,
    first_stage: tuple[tuple[float, float], tuple[float, float]],
    reduced_form: tuple[tuple[float, float], tuple[float, float]],
    df2: float,
) -> FalsificationResult:
    hours = LABELS["tutoring_hours"]
    fs = [_coef("voucher_won", *first_stage[0]), _coef("distance_km", *first_stage[1])]
    rf = [_coef("voucher_won", *reduced_form[0]), _coef("distance_km", *reduced_form[1])]
    return FalsificationResult(
        name=name,
        description=description,
        rows=rows,
        n_used=n_used,
        first_stages=[
            FalsificationFirstStage(
                endogenous="tutoring_hours",
                label=hours,
                coefficients=fs,
                joint_test=_joint(
                    "Wald test of the instruments in the first stage",
                    fs,
                    df2,
                    f"the instruments do not move {hours} in this subsample",
                ),
            )
        ],
        reduced_form=rf,
        reduced_form_test=_joint(
            "Wald test of the instruments in the reduced form",
            rf,
            df2,
            f"the instruments do not move {LABELS['maths_score']} in this subsample",
        ),
        covariance=CLUSTER_COV,
    )


def example_falsification() -> list[FalsificationResult]:
    """Two invented falsification subsamples.

    Late applicants could not use a voucher (every place was taken): no first stage and no
    reduced form, as the design expects. Pupils with compulsory evening study were thought
    unable to attend, yet the voucher moves their hours: that subsample does not serve as a
    falsification test.
    """
    return [
        _subsample(
            "Late applicants",
            "Pupils who applied after every tutoring place was taken: a voucher could not buy "
            "them any hours.",
            ["keep application_week greater than 6"],
            587,
            ((0.06, 0.19), (-0.012, 0.031)),
            ((0.35, 1.21), (0.04, 0.12)),
            48.0,
        ),
        _subsample(
            "Compulsory evening study",
            "Pupils whose school holds compulsory evening study, assumed unable to attend a "
            "centre.",
            ["keep school_type equal to boarding", "keep grade greater than 7"],
            412,
            ((0.92, 0.21), (-0.05, 0.04)),
            ((1.8, 1.4), (-0.11, 0.16)),
            21.0,
        ),
    ]


def _type_means(
    covariate: str, compliers: float, se: float, always: float, never: float
) -> ComplierMean:
    shares = example_shares()
    full = (
        shares.compliers * compliers + shares.always_takers * always + shares.never_takers * never
    )
    return ComplierMean(
        covariate=covariate,
        label=LABELS[covariate],
        full_sample=full,
        compliers=compliers,
        compliers_se=se,
        always_takers=always,
        never_takers=never,
    )


def example_shares() -> ComplierShares:
    """Complier, always-taker and never-taker shares from the treated shares on and off."""
    return ComplierShares(
        compliers=TREATED_ON - TREATED_OFF,
        compliers_se=COMPLIER_SHARE_SE,
        always_takers=TREATED_OFF,
        never_takers=1.0 - TREATED_ON,
        treated_share_on=TREATED_ON,
        treated_share_off=TREATED_OFF,
        n_on=N_ON,
        n_off=N_OFF,
    )


def _bin_probabilities(mean: float, sd: float) -> list[float]:
    """A normal distribution over the bins, its tails folded into the end bins."""
    dist = NormalDist(mean, sd)
    cdf = [dist.cdf(edge) for edge in BIN_EDGES]
    cdf[0], cdf[-1] = 0.0, 1.0
    return [hi - lo for lo, hi in pairwise(cdf)]


def _band_se(mass: float) -> float:
    return 0.004 + 0.06 * abs(mass)


def example_bins() -> list[DensityBin]:
    """Treated compliers' scores centred on 64, untreated on 60 (sd 10); masses add to the
    complier share in each panel."""
    share = TREATED_ON - TREATED_OFF
    treated = [share * p for p in _bin_probabilities(64.0, 10.0)]
    untreated = [share * p for p in _bin_probabilities(60.0, 10.0)]
    return [
        DensityBin(
            lower=BIN_EDGES[i],
            upper=BIN_EDGES[i + 1],
            treated=t,
            treated_low=t - Z_95 * _band_se(t),
            treated_high=t + Z_95 * _band_se(t),
            untreated=u,
            untreated_low=u - Z_95 * _band_se(u),
            untreated_high=u + Z_95 * _band_se(u),
        )
        for i, (t, u) in enumerate(zip(treated, untreated, strict=True))
    ]


def count_negative_bins(bins: list[DensityBin]) -> int:
    """Bins whose treated or untreated band lies wholly below zero."""
    return sum(b.treated_high < 0 or b.untreated_high < 0 for b in bins)


def kitagawa_test(statistic: float, p_value: float) -> TestResult:
    """An invented result of Kitagawa's (2015) test, in the engine's form."""
    return TestResult(
        name="Kitagawa variance-weighted test",
        statistic=statistic,
        distribution="bootstrap",
        df=[],
        p_value=p_value,
        covariance=f"bootstrap of {N_ON + N_OFF:,} rows from the pooled sample ({DRAWS} draws)",
        null=KITAGAWA_NULL,
        reference="Kitagawa 2015",
    )


def example_late_implication() -> LateImplication:
    bins = example_bins()
    return LateImplication(
        outcome="maths_score",
        label=LABELS["maths_score"],
        bins=bins,
        band_level=0.95,
        negative_bins=count_negative_bins(bins),
        test=kitagawa_test(0.62, 0.58),
        draws=DRAWS,
        seed=COMPLIER_SEED,
    )


def example_compliers() -> ComplierAnalysis:
    """Invented complier analysis of the voucher lottery and any tutoring attendance.

    Compliers are a little younger, scored lower the year before and are more often
    eligible for free school meals than always-takers; no implied mass is negative and the
    Kitagawa test does not reject.
    """
    return ComplierAnalysis(
        instrument="voucher_won",
        instrument_label=LABELS["voucher_won"],
        treatment="tutoring_hours > 0",
        treatment_label="any tutoring",
        n_used=N_ON + N_OFF,
        shares=example_shares(),
        means=[
            _type_means("age", 13.38, 0.05, 13.51, 13.47),
            _type_means("prior_score", 60.4, 0.71, 66.9, 62.8),
            _type_means("free_meals", 0.262, 0.019, 0.151, 0.213),
        ],
        late_implication=example_late_implication(),
        conditioning="Unconditional: no controls or fixed effects are used in this analysis.",
        draws=DRAWS,
        seed=COMPLIER_SEED,
    )
