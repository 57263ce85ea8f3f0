"""Leave-one-cluster-out influence: how far the 2SLS estimate moves when a cluster is dropped.

Young (2022, "Consistency without inference: instrumental variables in practical
application", European Economic Review) finds that the significance of many published IV
estimates hinges on one or two clusters or observations. Each cluster of the model's
cluster variable (with two-way clustering, the one with fewer clusters) is left out in
turn and the model re-estimated with the same covariance on the remaining rows; rows
left alone in a fixed-effect group are dropped as in the data stage. The estimates are
exact refits, not a one-step approximation, so the number of clusters is capped.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from reportkit.balance.rows import recode
from reportkit.coefficients import coefficient_rows, finite_coefficient_rows
from reportkit.data.singletons import singleton_rows
from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.design import Design
from reportkit.engine.estimators import EstimateArrays, tsls
from reportkit.engine.moments import compute_moments
from reportkit.results import ClusterDrop, ClusterInfluence, Coefficient, NotApplicable

MAX_CLUSTERS = 200  # exact refits; beyond this the section says why it was skipped


def _without(design: Design, keep: np.ndarray) -> Design:
    """The design on the rows ``keep``, codes renumbered, singletons dropped iteratively."""
    fe = recode(design.fixed_effects[keep])
    drop = singleton_rows(fe)
    rows = np.flatnonzero(keep)[~drop]
    return replace(
        design,
        y=design.y[rows],
        endog=design.endog[rows],
        instruments=design.instruments[rows],
        controls=design.controls[rows],
        fixed_effects=recode(design.fixed_effects[rows]),
        clusters=recode(design.clusters[rows]),
        weights=None if design.weights is None else design.weights[rows],
    )


def cluster_influence(
    design: Design,
    kind: str,
    main: EstimateArrays,
    *,
    cluster_labels: list[list[str]],
    labels: dict[str, str],
    level: float,
) -> list[ClusterInfluence] | NotApplicable:
    """One ``ClusterInfluence`` per endogenous regressor (see the module docstring).

    ``cluster_labels[d][code]`` is the value in the file of cluster code ``code`` of
    cluster dimension ``d``, so the table can name the clusters.
    """
    if kind != "cluster" or design.clusters.shape[1] == 0:
        return NotApplicable(
            reason="the model has no clusters; leave-one-cluster-out needs model.cluster_by"
        )
    dim = design.coarsest_cluster
    assert dim is not None
    g_count = int(design.clusters[:, dim].max()) + 1
    name = design.cluster_names[dim]
    if g_count > MAX_CLUSTERS:
        return NotApplicable(
            reason=f"{name} has {g_count:,} clusters; leaving each out is limited to "
            f"{MAX_CLUSTERS} clusters (one exact refit each)"
        )
    if g_count < 3:
        return NotApplicable(
            reason=f"{name} has {g_count} clusters; leaving one out would leave fewer than two"
        )
    main_rows = coefficient_rows(main, design.endog_names, labels, level)
    codes = design.clusters[:, dim]
    per_cluster: list[tuple[int, int, list[Coefficient]]] = []
    for g in range(g_count):
        keep = codes != g
        sub = _without(design, keep)
        cov = CovarianceSpec.build("cluster", sub.clusters)
        try:
            rows = finite_coefficient_rows(
                tsls(compute_moments(sub), cov), design.endog_names, labels, level
            )
        except (np.linalg.LinAlgError, ValueError):
            rows = None
        if rows is None:
            return NotApplicable(
                reason=f"leaving out the {name} cluster '{cluster_labels[dim][g]}' leaves a "
                "sample where 2SLS is not defined (singular first stage)"
            )
        per_cluster.append((g, int((~keep).sum()), rows))
    out = []
    for j, endog in enumerate(design.endog_names):
        base = main_rows[j]
        base_significant = base.ci_lower > 0 or base.ci_upper < 0
        drops = []
        for g, n_rows, rows in per_cluster:
            c = rows[j]
            drops.append(
                ClusterDrop(
                    cluster=cluster_labels[dim][g],
                    n_rows=n_rows,
                    estimate=c.estimate,
                    shift=c.estimate - base.estimate,
                    std_error=c.std_error,
                    significant=c.ci_lower > 0 or c.ci_upper < 0,
                )
            )
        drops.sort(key=lambda d: (-abs(d.shift), d.cluster))
        estimates = [d.estimate for d in drops]
        out.append(
            ClusterInfluence(
                endogenous=endog,
                label=labels.get(endog, endog),
                cluster_variable=name,
                n_clusters=g_count,
                drops=drops,
                lowest=min(estimates),
                highest=max(estimates),
                significance_changes=sum(d.significant != base_significant for d in drops),
            )
        )
    return out
