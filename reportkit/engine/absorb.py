"""Partialling out the constant, the exogenous controls and absorbed fixed effects.

By the Frisch-Waugh-Lovell theorem the coefficients of every k-class estimator (OLS,
2SLS, LIML) on the endogenous regressors, and their covariances, are unchanged when the
outcome, the endogenous regressors and the excluded instruments are replaced by their
residuals on the included exogenous variables W (controls, constant, fixed effects),
because W is part of both the regressor and the instrument set. Everything downstream
therefore works with a few partialled columns.

Weights are handled by the usual transformation: every column is multiplied by the
square root of the weights (normalised to mean one, as linearmodels does), after which
all estimators are unweighted. In that transformed space the projection on
W_t = sqrt(w) W is computed as sqrt(w) times the *weighted* residual on W.

Fixed effects are absorbed with pyhdfe (within transformation for one dimension, the
method of alternating projections for more; Guimaraes & Portugal 2010, Correia 2017),
never with dummy columns. The degrees of freedom the fixed effects use are pyhdfe's
(exact for one and two dimensions; Abowd, Creecy & Kramarz 2002 for connected sets).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from reportkit.engine.design import Design

# convergence tolerance of the alternating projections (several fixed effects); tight
# enough that estimates agree with a dummy-variable regression to about 1e-10
MAP_TOLERANCE = 1e-13
MAP_ITERATION_LIMIT = 100_000


@dataclass(frozen=True)
class Partialler:
    """The linear map v -> M_W v in the sqrt(weight)-transformed space.

    ``sqrt_w`` is None without weights. ``q`` is an orthonormal basis of the
    (transformed, fixed-effect-absorbed) controls and constant, so that
    M_W v = A(v) - q (q' A(v)), with A the fixed-effect absorption.
    """

    sqrt_w: np.ndarray | None
    weights_normalised: np.ndarray | None
    q: np.ndarray  # (n, r) orthonormal columns
    absorber: object | None = field(repr=False)
    df_absorbed: int  # columns used by W: constant + kept controls + fixed-effect levels
    kept_controls: tuple[int, ...]

    def transform(self, v: np.ndarray) -> np.ndarray:
        """Original-unit columns -> partialled, transformed columns."""
        v = np.asarray(v, dtype=float)
        one_d = v.ndim == 1
        m = v.reshape(v.shape[0], -1)
        if self.absorber is not None:
            m = self._absorb(m)
        if self.sqrt_w is not None:
            m = m * self.sqrt_w[:, None]
        m = m - self.q @ (self.q.T @ m) if self.q.shape[1] else m
        return m[:, 0] if one_d else m

    def residualize_transformed(self, v: np.ndarray) -> np.ndarray:
        """M_W applied to columns that already live in the transformed space."""
        m = np.asarray(v, dtype=float).reshape(v.shape[0], -1)
        if self.absorber is not None:
            if self.sqrt_w is not None:
                m = self._absorb(m / self.sqrt_w[:, None]) * self.sqrt_w[:, None]
            else:
                m = self._absorb(m)
        m = m - self.q @ (self.q.T @ m) if self.q.shape[1] else m
        return m[:, 0] if v.ndim == 1 else m

    def _absorb(self, m: np.ndarray) -> np.ndarray:
        kwargs = {}
        if self.weights_normalised is not None:
            kwargs["weights"] = self.weights_normalised[:, None]
        return np.asarray(self.absorber.residualize(m, **kwargs), dtype=float)  # type: ignore[attr-defined]


def fixed_effect_absorber(codes: np.ndarray, tolerance: float = MAP_TOLERANCE) -> object:
    """pyhdfe's absorber for integer fixed-effect codes (singletons already removed).

    Within transformation for one dimension, alternating projections for several
    (Guimaraes & Portugal 2010); ``degrees`` is the columns the effects use up.
    """
    import pyhdfe

    several = codes.shape[1] > 1
    return pyhdfe.create(
        codes,
        drop_singletons=False,
        residualize_method="map" if several else "within",
        options={"tol": tolerance, "iteration_limit": MAP_ITERATION_LIMIT} if several else None,
    )


def normalised_weights(weights: np.ndarray | None) -> np.ndarray | None:
    """Weights scaled to mean one (the convention of linearmodels; scale-free results)."""
    if weights is None:
        return None
    w = np.asarray(weights, dtype=float)
    return w / w.mean()


def build_partialler(design: Design, collinear_tol: float = 1e-9) -> Partialler:
    """Set up the projection off the constant, the controls and the fixed effects.

    Controls that are collinear with the constant, the fixed effects or earlier controls
    are detected by a pivoted QR and left out (the data stage reports them first; this
    is the engine's own guard), and the degrees of freedom count only the kept ones.
    """
    import scipy.linalg

    w = normalised_weights(design.weights)
    sqrt_w = None if w is None else np.sqrt(w)
    n = design.n
    absorber = None
    fe_df = 0
    if design.fixed_effects.shape[1]:
        absorber = fixed_effect_absorber(design.fixed_effects)
        fe_df = int(absorber.degrees)
        if int(getattr(absorber, "singletons", 0) or 0):
            # pyhdfe's degrees leave out singleton levels; the data stage must drop them
            raise ValueError("Design.fixed_effects has singleton groups; drop them first")

    c = design.controls
    if design.has_constant:
        c = np.column_stack([np.ones(n), c]) if c.size else np.ones((n, 1))
    if c.shape[1] == 0:
        q = np.zeros((n, 0))
        kept: tuple[int, ...] = ()
    else:
        cm = c
        if absorber is not None:
            kwargs = {} if w is None else {"weights": w[:, None]}
            cm = np.asarray(absorber.residualize(cm, **kwargs), dtype=float)
        if sqrt_w is not None:
            cm = cm * sqrt_w[:, None]
        scale = np.linalg.norm(c, axis=0) if w is None else np.sqrt((c * c).T @ w)
        qfull, r, piv = scipy.linalg.qr(cm, mode="economic", pivoting=True, overwrite_a=cm is not c)
        del cm
        diag = np.abs(np.diag(r))
        ref = max(float(scale.max()), 1e-300)
        rank = int(np.sum(diag > collinear_tol * ref))
        keep_cols = np.sort(piv[:rank])
        # the first `rank` columns of the pivoted Q span exactly the kept columns
        q = qfull if rank == qfull.shape[1] else np.ascontiguousarray(qfull[:, :rank])
        offset = 1 if design.has_constant else 0
        kept = tuple(int(j) - offset for j in keep_cols if j >= offset)
        del qfull
    df = fe_df + q.shape[1]
    return Partialler(
        sqrt_w=sqrt_w,
        weights_normalised=w,
        q=q,
        absorber=absorber,
        df_absorbed=df,
        kept_controls=kept,
    )
