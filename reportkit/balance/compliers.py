"""Who are the compliers? Shares, covariate means and the LATE implication for a binary
instrument Z and a binary treatment D, without controls.

1. Shares (Imbens & Angrist 1994; Angrist, Imbens & Rubin 1996), monotonicity assumed:
   always-takers P(D=1|Z=0), never-takers P(D=0|Z=1), compliers P(D=1|Z=1) - P(D=1|Z=0).
2. Covariate means among compliers by Abadie's (2003) kappa weighting with P(Z=1) = p
   constant: kappa = 1 - D(1-Z)/(1-p) - (1-D)Z/p and mean_C(X) = E[kappa X] / E[kappa]
   (E[kappa] is the complier share). Always-takers' mean is the mean among D=1, Z=0,
   never-takers' among D=0, Z=1. Each covariate uses the rows where it is present.
3. The implied complier outcome masses per bin and Kitagawa's (2015) test of the same
   implication (``compliers_density``, ``compliers_kitagawa``).

Every quantity is a ratio of weighted totals over arm x treatment groups, so the point
estimates and the bootstrap (rows, or whole clusters, resampled; ``compliers_resample``)
share one code path: the same function of the totals, applied to the sample's totals and
to each draw's. Standard errors are the standard deviation of the draws (leaving out
draws where a quantity is undefined), bands are percentile bands. No library computes
kappa-weighted complier means, implied masses or Kitagawa's test, hence this module.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from reportkit.balance.compliers_density import (
    OFF_TREATED,
    OFF_UNTREATED,
    ON_TREATED,
    ON_UNTREATED,
    OutcomeBins,
    density_bins,
    make_outcome_bins,
)
from reportkit.balance.compliers_kitagawa import kitagawa_test
from reportkit.balance.compliers_resample import Tally, Units, bootstrap_totals
from reportkit.results import (
    ComplierAnalysis,
    ComplierMean,
    ComplierShares,
    LateImplication,
    NotApplicable,
)

# A first stage this close to zero is zero up to rounding: there are no compliers.
_NO_COMPLIERS = 1e-12

CONDITIONING = (
    "Unconditional: no controls or fixed effects are used in this section. That is right "
    "when the instrument is assigned at random without conditioning (for example by a "
    "lottery); when it is as good as random only given the controls, these shares, means "
    "and outcome masses are an approximation."
)


def _binary(values: np.ndarray, role: str) -> np.ndarray:
    array = np.asarray(values, dtype=float).reshape(-1)
    if not np.all((array == 0.0) | (array == 1.0)):
        raise ValueError(f"the complier analysis needs {role} coded exactly 0/1")
    return array


def _shares(totals: np.ndarray) -> dict[str, np.ndarray]:
    """Arm sizes and treated shares from (..., 4) totals by arm x treatment group."""
    on = totals[..., ON_UNTREATED] + totals[..., ON_TREATED]
    off = totals[..., OFF_UNTREATED] + totals[..., OFF_TREATED]
    with np.errstate(divide="ignore", invalid="ignore"):
        treated_on = totals[..., ON_TREATED] / on
        treated_off = totals[..., OFF_TREATED] / off
    return {"on": treated_on, "off": treated_off, "compliers": treated_on - treated_off}


def _means(counts: np.ndarray, sums: np.ndarray) -> dict[str, np.ndarray]:
    """Full-sample, complier, always- and never-taker means of a covariate from (..., 4)
    weighted counts and weighted sums by arm x treatment group (rows where present).

    With p = P(Z=1) estimated on those rows, E[kappa X] = E[X] - E[D(1-Z)X] / (1-p) -
    E[(1-D)ZX] / p = mean(X) - S(D=1,Z=0) / W(Z=0) - S(D=0,Z=1) / W(Z=1), S the weighted
    sums of X and W the weight totals, and E[kappa] = 1 - P(D=1|Z=0) - P(D=0|Z=1), the
    complier share on those rows.
    """
    total = counts.sum(-1)
    off = counts[..., OFF_UNTREATED] + counts[..., OFF_TREATED]
    on = counts[..., ON_UNTREATED] + counts[..., ON_TREATED]
    with np.errstate(divide="ignore", invalid="ignore"):
        full = sums.sum(-1) / total
        kappa_x = full - sums[..., OFF_TREATED] / off - sums[..., ON_UNTREATED] / on
        kappa = 1.0 - counts[..., OFF_TREATED] / off - counts[..., ON_UNTREATED] / on
        compliers = np.where(kappa > _NO_COMPLIERS, kappa_x / kappa, np.nan)
        always = sums[..., OFF_TREATED] / counts[..., OFF_TREATED]
        never = sums[..., ON_UNTREATED] / counts[..., ON_UNTREATED]
    return {"full": full, "compliers": compliers, "always": always, "never": never}


def _value(x: np.ndarray | float) -> float | None:
    value = float(x)
    return value if np.isfinite(value) else None


def _std_error(draws: np.ndarray) -> float | None:
    """Standard deviation of the finite draws (ddof 1); None with fewer than two."""
    finite = draws[np.isfinite(draws)]
    return float(np.std(finite, ddof=1)) if len(finite) >= 2 else None


def complier_outcome_means(
    z: np.ndarray, d: np.ndarray, y: np.ndarray, weights: np.ndarray | None = None
) -> tuple[float, float] | None:
    """Mean treated and untreated outcome of compliers, E[Y(1)|C] and E[Y(0)|C]
    (Imbens & Rubin 1997; equal to Abadie's 2003 kappa_1 and kappa_0 weighted means):
    (E[YD|Z=1] - E[YD|Z=0]) / s and (E[Y(1-D)|Z=0] - E[Y(1-D)|Z=1]) / s, s the complier
    share, on the rows with a finite y. Their difference is the Wald ratio. None when
    s <= 0 or an arm is empty."""
    z, d = _binary(z, "the instrument"), _binary(d, "the treatment")
    y = np.asarray(y, dtype=float).reshape(-1)
    w = np.ones(len(z)) if weights is None else np.asarray(weights, dtype=float).reshape(-1)
    keep = np.isfinite(y)
    z, d, y, w = z[keep], d[keep], y[keep], w[keep]
    group = (2 * z + d).astype(np.intp)
    counts = np.bincount(group, weights=w, minlength=4)
    sums = np.bincount(group, weights=w * y, minlength=4)
    on = counts[ON_UNTREATED] + counts[ON_TREATED]
    off = counts[OFF_UNTREATED] + counts[OFF_TREATED]
    if on <= 0 or off <= 0:
        return None
    share = counts[ON_TREATED] / on - counts[OFF_TREATED] / off
    if share <= _NO_COMPLIERS:
        return None
    treated = (sums[ON_TREATED] / on - sums[OFF_TREATED] / off) / share
    untreated = (sums[OFF_UNTREATED] / off - sums[ON_UNTREATED] / on) / share
    return float(treated), float(untreated)


def complier_analysis(
    *,
    z: np.ndarray,
    d: np.ndarray,
    y: np.ndarray,
    covariates: Mapping[str, np.ndarray],
    weights: np.ndarray | None,
    clusters: np.ndarray | None,
    instrument: str,
    instrument_label: str,
    treatment: str,
    treatment_label: str,
    outcome: str,
    outcome_label: str,
    labels: Mapping[str, str],
    outcome_bins: int,
    draws: int,
    seed: int,
    level: float,
) -> ComplierAnalysis | NotApplicable:
    """Complier shares, covariate means and the LATE implication (module docstring).

    ``z`` and ``d`` must be exactly 0/1 (ValueError otherwise); ``covariates`` are NaN
    where missing; ``weights`` are positive analytic weights; ``clusters`` integer codes
    (the bootstrap then draws whole clusters). ``outcome_bins`` bins of y for the masses,
    ``draws`` bootstrap draws from ``np.random.default_rng(seed)`` (one stream for the
    standard errors and bands, an independent one for Kitagawa's test), ``level`` the
    bands' coverage. NotApplicable when the instrument takes one value only.
    """
    z, d = _binary(z, f"the instrument '{instrument}'"), _binary(d, f"'{treatment}'")
    y = np.asarray(y, dtype=float).reshape(-1)
    n = len(z)
    if draws < 2 or not 0.0 < level < 1.0 or outcome_bins < 1:
        raise ValueError("complier_analysis needs draws >= 2, 0 < level < 1, outcome_bins >= 1")
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=float).reshape(-1)
    n_on, n_off = int(np.sum(z == 1)), int(np.sum(z == 0))
    if not (np.sum(w[z == 1]) > 0 and np.sum(w[z == 0]) > 0):
        value = "1" if np.sum(w[z == 0]) <= 0 else "0"
        return NotApplicable(
            reason=f"the instrument '{instrument_label}' is {value} in every row used (with "
            "a positive weight), so the treated shares cannot be compared across its two "
            "values and the compliers cannot be described"
        )
    group = (2 * z + d).astype(np.intp)
    bins = make_outcome_bins(y, outcome_bins)
    names = list(covariates)
    tallies = [
        Tally(group=group * (bins.count + 1) + bins.index, weight=w, groups=4 * (bins.count + 1))
    ]
    for name in names:
        x = np.asarray(covariates[name], dtype=float).reshape(-1)
        present = np.isfinite(x)
        tallies.append(Tally(group=group, weight=w * present, groups=4))
        tallies.append(Tally(group=group, weight=w * np.where(present, x, 0.0), groups=4))
    totals = [tally.totals() for tally in tallies]
    units = Units.of(clusters, n)
    main_rng, null_rng = np.random.default_rng(seed).spawn(2)
    boot = bootstrap_totals(tallies, units, size=units.count, draws=draws, rng=main_rng)

    cells, boot_cells = (
        totals[0].reshape(4, bins.count + 1),
        boot[0].reshape(draws, 4, bins.count + 1),
    )
    shares = _shares(cells.sum(-1))
    boot_shares = _shares(boot_cells.sum(-1))
    complier_share = float(shares["compliers"])
    has_compliers = complier_share > _NO_COMPLIERS
    result_shares = ComplierShares(
        compliers=complier_share,
        compliers_se=_std_error(boot_shares["compliers"]),
        always_takers=float(shares["off"]),
        never_takers=float(1.0 - shares["on"]),
        treated_share_on=float(shares["on"]),
        treated_share_off=float(shares["off"]),
        n_on=n_on,
        n_off=n_off,
    )
    means = []
    for k, name in enumerate(names):
        point = _means(totals[1 + 2 * k], totals[2 + 2 * k])
        drawn = _means(boot[1 + 2 * k], boot[2 + 2 * k])
        complier_mean = _value(point["compliers"]) if has_compliers else None
        means.append(
            ComplierMean(
                covariate=name,
                label=labels.get(name, name),
                full_sample=_value(point["full"]),
                compliers=complier_mean,
                compliers_se=_std_error(drawn["compliers"]) if complier_mean is not None else None,
                always_takers=_value(point["always"]),
                never_takers=_value(point["never"]),
            )
        )
    return ComplierAnalysis(
        instrument=instrument,
        instrument_label=instrument_label,
        treatment=treatment,
        treatment_label=treatment_label,
        n_used=n,
        shares=result_shares,
        means=means,
        late_implication=_late_implication(
            z=z,
            d=d,
            y=y,
            w=w,
            units=units,
            clustered=clusters is not None,
            bins=bins,
            cells=cells,
            boot_cells=boot_cells,
            complier_share=complier_share,
            outcome=outcome,
            outcome_label=outcome_label,
            draws=draws,
            seed=seed,
            level=level,
            rng=null_rng,
        ),
        conditioning=CONDITIONING,
        draws=draws,
        seed=seed,
    )


def _late_implication(
    *,
    z: np.ndarray,
    d: np.ndarray,
    y: np.ndarray,
    w: np.ndarray,
    units: Units,
    clustered: bool,
    bins: OutcomeBins,
    cells: np.ndarray,
    boot_cells: np.ndarray,
    complier_share: float,
    outcome: str,
    outcome_label: str,
    draws: int,
    seed: int,
    level: float,
    rng: np.random.Generator,
) -> LateImplication | NotApplicable:
    """Implied masses with bands, and Kitagawa's test, on the rows with a finite outcome."""
    if complier_share <= _NO_COMPLIERS:
        return NotApplicable(
            reason="the instrument does not raise the share treated (P(D=1|Z=1) - "
            f"P(D=1|Z=0) = {complier_share:.3g}), so under monotonicity there are no "
            "compliers and their outcome distribution is not defined; if the instrument "
            "lowers treatment, code it so that 1 is the value that encourages treatment"
        )
    observed = np.isfinite(y)
    on_weight, off_weight = np.sum(w[observed & (z == 1)]), np.sum(w[observed & (z == 0)])
    if bins.count == 0 or not (on_weight > 0 and off_weight > 0):
        return NotApplicable(
            reason=f"the outcome '{outcome_label}' is missing in every row of one "
            "instrument arm, so its distribution cannot be compared across the arms"
        )
    density = density_bins(bins, cells, boot_cells, level)
    if density is None:
        return NotApplicable(
            reason="no bootstrap draw had rows in both instrument arms, so the bands of "
            "the implied outcome masses cannot be formed"
        )
    rows, negative = density
    test = kitagawa_test(
        z=z[observed],
        d=d[observed],
        y=y[observed],
        weights=w[observed],
        units=units.subset(observed),
        draws=draws,
        rng=rng,
        clustered=clustered,
    )
    return LateImplication(
        outcome=outcome,
        label=outcome_label,
        bins=rows,
        band_level=level,
        negative_bins=negative,
        test=test,
        draws=draws,
        seed=seed,
    )
