"""Choose the instrument, rows and covariates of the complier analysis and run it.

The analysis needs a binary instrument and a binary treatment (``model.binary_treatment``).
The instrument is the one named in ``balance.compliers.instrument``, else the only
instrument that takes just the values 0 and 1. Rows where the binary treatment is missing
are left out; the bootstrap resamples the model's clusters (with two-way clustering, the
variable with fewer clusters) or rows.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from reportkit.balance.compliers import complier_analysis
from reportkit.engine.design import Design
from reportkit.results import ComplierAnalysis, NotApplicable
from reportkit.seeds import derive_seed
from reportkit.spec.models import Spec


def _is_binary(values: np.ndarray) -> bool:
    return bool(np.all((values == 0) | (values == 1)))


def choose_instrument(design: Design, chosen: str | None) -> int | NotApplicable:
    """Column of the binary instrument, or the reason there is none to use."""
    names = list(design.instrument_names)
    if chosen is not None:
        j = names.index(chosen)
        if not _is_binary(design.instruments[:, j]):
            return NotApplicable(
                reason=f"the instrument {chosen} named in balance.compliers.instrument takes "
                "other values than 0 and 1; complier types are defined for a binary instrument"
            )
        return j
    binary = [j for j in range(len(names)) if _is_binary(design.instruments[:, j])]
    if not binary:
        return NotApplicable(
            reason="no instrument takes only the values 0 and 1; complier shares and means "
            "are defined for a binary instrument"
        )
    if len(binary) > 1:
        shown = ", ".join(names[j] for j in binary)
        return NotApplicable(
            reason=f"several instruments are binary ({shown}); name the one to use in "
            "balance.compliers.instrument"
        )
    return binary[0]


def compliers_part(
    design: Design,
    treatment: tuple[np.ndarray, str] | None,
    covariates: Mapping[str, np.ndarray],
    spec: Spec,
    *,
    labels: dict[str, str],
) -> ComplierAnalysis | NotApplicable | None:
    """The complier analysis of the main sample; None when no binary treatment is defined."""
    if treatment is None:
        return None
    d_all, text = treatment
    settings = spec.balance.compliers
    j = choose_instrument(design, settings.instrument)
    if isinstance(j, NotApplicable):
        return j
    rows = np.isfinite(d_all)
    if not rows.any():
        return NotApplicable(reason=f"the binary treatment ({text}) is missing in every row")
    clusters = None
    if spec.covariance == "cluster" and design.clusters.shape[1]:
        dim = design.coarsest_cluster
        assert dim is not None
        clusters = np.unique(design.clusters[rows, dim], return_inverse=True)[1]
    instrument = design.instrument_names[j]
    seed = derive_seed(spec.run.seed, "compliers")
    return complier_analysis(
        z=design.instruments[rows, j].astype(float),
        d=d_all[rows].astype(float),
        y=design.y[rows].astype(float),
        covariates={name: np.asarray(v, dtype=float)[rows] for name, v in covariates.items()},
        weights=None if design.weights is None else design.weights[rows],
        clusters=clusters,
        instrument=instrument,
        instrument_label=labels.get(instrument, instrument),
        treatment=text,
        treatment_label=text,
        outcome=design.outcome_name,
        outcome_label=labels.get(design.outcome_name, design.outcome_name),
        labels=labels,
        outcome_bins=settings.outcome_bins,
        draws=settings.draws,
        seed=seed,
        level=spec.inference.confidence_level,
    )
