"""Inference on one endogenous coefficient that stays valid however weak the instruments are.

Gathers, for a model with one endogenous regressor:
- the Anderson & Rubin (1949) test of beta = 0 and its exact confidence set, with the spec's
  covariance (``anderson_rubin.py``);
- Moreira's (2003) conditional likelihood ratio test and set, homoskedastic case only
  (``clr.py``);
- the tF procedure of Lee, McCrary, Moreira & Porter (2022) (``tf.py``);
- the p-values of both tests over a range of hypothesised values, for the figure.

Everything comes from the moment engine (plus one residual pass for robust and cluster
covariances), never from refitting on a grid. With several endogenous regressors joint
sets are not reported (see ``weak_iv_inference``).
"""

from __future__ import annotations

import math

import numpy as np

from reportkit.checks.anderson_rubin import (
    ArProblem,
    SingularScoreCovariance,
    anderson_rubin_p_values,
    anderson_rubin_problem,
    anderson_rubin_set,
    anderson_rubin_test,
)
from reportkit.checks.clr import (
    ClrProblem,
    clr_not_applicable,
    clr_problem,
    clr_set,
    clr_test,
)
from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.estimators import EstimateArrays
from reportkit.engine.moments import Moments
from reportkit.results import (
    ConfidenceSet,
    NotApplicable,
    PValueCurve,
    TestResult,
    TFResult,
    WeakIVRobust,
)

CURVE_POINTS = 201  # odd: the 2SLS estimate is the middle point
CURVE_MARGIN = 0.25  # share of the widest finite bound's distance added on each side
CURVE_MIN_HALF_WIDTH_SE = 3.0  # at least +/- 3 standard errors around the estimate
CURVE_UNBOUNDED_HALF_WIDTH_SE = 10.0  # +/- 10 standard errors when no bound is finite


def weak_iv_inference(
    m: Moments,
    cov: CovarianceSpec,
    cov_label: str,
    endog_names: tuple[str, ...],
    labels: dict[str, str],
    level: float,
    tsls: EstimateArrays,
    first_stage_f: float,
) -> WeakIVRobust | NotApplicable:
    """Anderson-Rubin, CLR and tF inference on the single endogenous coefficient.

    ``first_stage_f`` is the first-stage F with the spec's covariance (for tF);
    ``tsls`` the 2SLS fit (estimate and standard error for tF, centre of the curve).
    """
    if m.p != 1:
        return NotApplicable(
            reason=f"the model has {m.p} endogenous regressors: joint Anderson-Rubin and "
            "conditional likelihood ratio sets for several coefficients are not reported, "
            "nor tF, which is for one coefficient; the instrument-strength statistics "
            "(Cragg-Donald, Kleibergen-Paap, conditional first-stage F) are still reported"
        )
    name = endog_names[0]
    label = labels.get(name, name)

    ar = anderson_rubin_problem(m, cov)
    ar_zero = anderson_rubin_test(ar, 0.0, cov_label, label)
    ar_set = anderson_rubin_set(ar, level, cov_label)

    clr: ClrProblem | None = clr_problem(m) if cov.kind == "classical" else None
    if clr is None:
        clr_zero: TestResult | NotApplicable = clr_not_applicable(cov.kind)
        clr_cs: ConfidenceSet | NotApplicable = clr_not_applicable(cov.kind)
    else:
        clr_zero = clr_test(clr, 0.0, label)
        clr_cs = clr_set(clr, level)

    estimate = float(tsls.params[0])
    std_error = float(math.sqrt(max(float(tsls.cov[0, 0]), 0.0)))
    curve = None
    if not isinstance(ar, NotApplicable) and not isinstance(ar_set, NotApplicable):
        curve = p_value_curve(ar, clr, [ar_set, clr_cs], estimate, std_error)

    return WeakIVRobust(
        endogenous=name,
        label=label,
        ar_test_zero=ar_zero,
        anderson_rubin=ar_set,
        clr_test_zero=clr_zero,
        clr=clr_cs,
        tf=_tf(estimate, std_error, first_stage_f, level, m.q),
        curve=curve,
    )


def _tf(
    estimate: float, std_error: float, first_stage_f: float, level: float, n_instruments: int
) -> TFResult | NotApplicable:
    """Lee, McCrary, Moreira & Porter (2022) tF, from ``reportkit.checks.tf``."""
    from reportkit.checks.tf import tf_inference

    return tf_inference(
        estimate, std_error, first_stage_f, level=level, n_instruments=n_instruments
    )


def curve_grid(
    sets: list[ConfidenceSet | NotApplicable], estimate: float, std_error: float
) -> np.ndarray:
    """Hypothesised values centred on the 2SLS estimate, wide enough to show every finite
    bound of the sets with a margin (or +/- 10 standard errors when none is finite)."""
    se = std_error if math.isfinite(std_error) and std_error > 0 else max(1.0, abs(estimate))
    bounds = [
        b
        for s in sets
        if isinstance(s, ConfidenceSet)
        for piece in s.pieces
        for b in (piece.lower, piece.upper)
        if b is not None
    ]
    if bounds:
        reach = max(abs(b - estimate) for b in bounds)
        half = max((1 + CURVE_MARGIN) * reach, CURVE_MIN_HALF_WIDTH_SE * se)
    else:
        half = CURVE_UNBOUNDED_HALF_WIDTH_SE * se
    return estimate + np.linspace(-half, half, CURVE_POINTS)


def p_value_curve(
    ar: ArProblem,
    clr: ClrProblem | None,
    sets: list[ConfidenceSet | NotApplicable],
    estimate: float,
    std_error: float,
) -> PValueCurve | None:
    """Anderson-Rubin (and CLR, when it applies) p-values over a grid of beta0 values."""
    grid = curve_grid(sets, estimate, std_error)
    try:
        ar_p = anderson_rubin_p_values(ar, grid)
    except SingularScoreCovariance:
        return None
    clr_p = None if clr is None else [float(v) for v in clr.p_values(grid)]
    return PValueCurve(
        beta0=[float(b) for b in grid],
        anderson_rubin=[float(v) for v in ar_p],
        clr=clr_p,
    )
