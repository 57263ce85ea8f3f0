"""Restricted wild (cluster) bootstrap of the 2SLS t test, every draw at once.

Method: the WRE ("wild restricted efficient") bootstrap of Davidson & MacKinnon (2010,
"Wild bootstrap tests for IV regression", Journal of Business & Economic Statistics 28(1),
128-144, section 3), for one endogenous regressor x, q excluded instruments Z, the included
exogenous columns W (constant, controls, fixed effects) and the null beta = beta0:

1. restricted structural residuals u~ = y - x beta0 - W alpha~ (least squares on W);
2. efficient reduced form: the regression of x on [W, Z, u~] gives pi~ (the coefficients
   on Z), and the reduced-form residuals are v~ = x - W gamma~ - Z pi~. These are the
   regression's residuals *plus* delta~ u~: the part of x that moves with u~ stays in v~,
   so that the bootstrap errors keep the correlation between the two equations;
3. draw b: u* = u~ w_bg and v* = v~ w_bg with the same draw w_bg for every row of cluster
   g (each row its own draw without clusters), x* = W gamma~ + Z pi~ + v*,
   y* = x* beta0 + W alpha~ + u*;
4. the 2SLS fit of y* on [x*, W] with instruments [Z, W] (the controls and fixed effects
   re-estimated in every bootstrap sample), beta* and t* = (beta* - beta0) / se*, se*
   cluster-robust (heteroskedasticity-robust HC1 without clusters) with the engine's
   small-sample factor (``engine/covariance.py``): (n - 1) / (n - k) x G / (G - 1), or
   n / (n - k);
5. symmetric p-value: the share of draws with |t*| >= |t|.

Residuals are not rescaled (u* = u~ w, v* = v~ w). A constant factor on u~ would change no
t* (beta* - beta0 and the residuals e* both scale with it); a factor on v~ would change the
bootstrap first stage. Steps 1-3 follow the paper's section 3 from memory (the stored
copies searched held only its opening page); the definition of v~ in step 2 was checked
against an independent public implementation (Roodman's WildBootTests.jl, whose
reduced-form residual is Y2 - X Pi, Pi from the regression on the instruments that
controls for the restricted residuals).

Draws: Rademacher (+1 or -1, each with probability 1/2) or Webb (2014) six-point
(+-sqrt(1/2), +-1, +-sqrt(3/2), each 1/6; for few clusters, where Rademacher has only
2^G distinct draws). They are defined by ONE uniform matrix U = default_rng(seed).random(
(draws, G)), mapped elementwise: Rademacher w = -1 if U < 1/2 else +1; Webb w = the
(floor(6 U) + 1)-th of (-sqrt(3/2), -1, -sqrt(1/2), sqrt(1/2), 1, sqrt(3/2)). When G is
large U is generated a few rows at a time: numpy's generator fills doubles in row-major
order from one 64-bit output each, so consecutive row blocks are the same matrix as the
single call.

Re-partialling, in the partialled space. ``Moments`` holds y, x and z = M_W Z, partialled
on W in the sqrt(weight)-transformed space (Frisch-Waugh-Lovell), and there u~ and v~ are
the columns y - x beta0 and x - z pi~ (both are orthogonal to W already). Step 4 is the
2SLS of M_W y* on M_W x* with instruments z. The wild multiplication breaks the
orthogonality: u* and v* are not orthogonal to W. With d* = beta* - beta0 and
r* = u* - d* v*:

- z'M_W = z', so z'x* = z'z pi~ + z'v*: Pi* = (z'z)^-1 z'x*, A* = x*'P_z x* = Pi*'z'x* and
  d* = Pi*'z'u* / A* need no re-partialling;
- the residual is e* = M_W r* - d* z pi~, and the score sum of unit h (a cluster, or a row)
  is s_h = Pi*'z_h'e*_h = Pi*'(M_W Z^(h))'r* - d* Pi*'z_h'z_h pi~, where Z^(h) is z with
  the rows outside unit h set to zero. Since r* is built unit by unit,
  (M_W Z^(h))'u* = sum_g w_g A[h, g] with A[h, g] = (M_W Z^(h))_g'u~_g (q numbers; C[h, g]
  likewise with v~), and s_h = Pi*'sum_g w_g (A[h, g] - d* C[h, g]) - d* Pi*'z_h'z_h pi~;
- se*^2 = factor x sum_h s_h^2 / A*^2.

Dropping P_W (A[h, g] = 0 for g != h, A[h, h] = z_h'u~_h) gives the partialled-space
shortcut, which leaves out - Pi*'(P_W Z^(h))'r*. With few clusters and many columns in W
that matters. In the tests' simulation (10 clusters of 30 rows, 3 cluster-correlated
controls and a 6-level fixed effect, 9 columns in W; 199 Webb draws; five sets of 1,000
replications) the shortcut rejected a true null at 5% in 8.2-9.3% of replications, the
re-partialled bootstrap here in 5.6-6.8% (6.4% over 5,000), the cluster t test with normal
critical values in 13.8-16.7%. Five exact ways to compute the sums over g, each vectorised
over draws (``_choose_path``):

- no fixed effects, "low rank": P_W = Q Q' with Q = ``partialler.q`` (orthonormal, n x r,
  transformed space), so A[h, g] = [g = h] z_h'u~_h - (Q_h'z_h)'(Q_g'u~_g): per-unit sums
  from one O(n r q) pass, then O(G r q) per draw;
- fixed effects, G q <= draws and the (G, G, q) arrays A and C within COUPLING_BYTES,
  "coupled": M_W Z^(h) for every unit and instrument by the engine's partialler
  (``residualize_transformed``) on the (n, G q) matrix of masked instrument columns, a few
  units at a time (MASK_CHUNK_BYTES, MASK_COLUMNS: 12 columns at n = 10^6, about 450 MB at
  the peak), then A = per-unit sums of u~ (M_W Z^(h)) and C likewise: G q absorption
  passes once, then O(G^2 q) per draw. The absorption passes are nearly its whole cost (at
  n = 10^6, 50 clusters, 2 instruments and a 1,000-level fixed effect: about 2.2-3.2 s of
  CPU for the 100 columns, about 60% in pyhdfe's group sums, 25-30% in the projection on
  the controls);
- fixed effects otherwise, "per draw": d* is known before the residuals are needed, so
  M_W r* is absorbed directly for a chunk of draws at a time: one absorption pass per
  draw, O(n) per draw.
- clusters and exactly one fixed-effect dimension whose codes are given (``fixed_effects``),
  "one effect": in the transformed space P_W = P_F + Q Q', with (P_F v)_i = s_i sum_{j in l(i)}
  s_j v_j / D[l], D[l] = sum_{j in l} s_j^2 and s the square roots of the normalised
  weights (the weighted within transformation ``absorb.py`` asks of pyhdfe; Q spans the
  absorbed controls, orthogonal to the dummies, without the constant, which the effect
  absorbs). So (P_W Z^(h))'u~^(g) = sum_l A[h, l] B[g, l] / D[l] + F_h'E_g with the
  per-(unit, level) sums A[h, l] = sum_{i in h, l} s_i z_i and B[g, l] = sum_{i in g, l}
  s_i u~_i: the coupled path's A and C from one O(n q) pass and a sparse product over
  the (unit, level) pairs that occur, no absorption pass (at n = 10^6 with 50 clusters
  and a 1,000-level effect about as long as the main fit), then O(G^2 q) per draw. Taken
  when A and C fit COUPLING_BYTES and either the coupled path would be (G q <= draws) or
  G^2 q <= n (r + 2) (the work per draw at most that of re-partialling one draw); else
  the rule above. Not at observation level: there the per-draw path wins over G = n
  coupling terms, and M_W r* in closed form was measured no cheaper than pyhdfe's
  within transformation (20,000 rows, 999 draws: 0.62-0.65 s against 0.53-0.69 s).

Observation level (each row its own unit, G = n). P_W Z^(i) = (column i of P_W) z_i', so
the exact score is s_i = Pi*'z_i ((M_W r*)_i - d* (z pi~)_i): every row of every draw needs
(P_W r*)_i, a leverage-weighted mix of the whole draw; no per-row sums give it. Up to
EXACT_ROWS_LIMIT rows it is computed exactly by the paths above (one unit per row). Above
it the cost (one absorption pass over n rows per draw with fixed effects, O(n) per draw in
closed form with one too, O(draws n r q) without) is not cheap, and the partialled-space
algorithm below is used. It replaces the exact residual e*_i = (M_W r*)_i - d* (z pi~)_i by
e~*_i = w_i r~_i - d* (z pi~)_i (r~ = u~ - d* v~), omitting p*_i = (P_W r*)_i; beta*, Pi*
and the data's t statistic are exact. As the draws have unit variance and E[w_i p*_i] =
h_ii r~_i (h = P_W, h_ii the leverage of row i in W, sum_i h_ii = k_W the columns of W),
to first order the exact meat
is smaller by the share (2 sum_i h_ii zeta_i^2 r~_i^2 - sum_i zeta_i^2 sum_j h_ij^2 r~_j^2)
/ sum_i zeta_i^2 r~_i^2 (zeta_i = Pi*'z_i), of order k_W / n, with fluctuations O(sqrt(k_W)
/ n): the approximate |t*| are too small by O(k_W / n), and the bootstrap leans toward
over-rejection. Per draw, by the triangle inequality in the zeta-weighted norm,
|t*_approx / t*_exact - 1| <= ||zeta p*|| / ||zeta e~*||. Measured (invented designs with
200 to 4,000 rows, 3 to 8 controls, one or two fixed effects, weights; k_W / n from 0.002
to 0.045; 995 draws each, 5 data sets x 199): |t*| smaller by 0.8 k_W / n on average, at
most 4.3 k_W / n.

The partialled-space algorithm: with per-row sums a_i = z_i u~_i, c_i = z_i v~_i and
m_i = z_i z_i'pi~ from one pass over the rows,

    z'x* = z'z pi~ + sum_i w_i c_i,   Pi* = (z'z)^-1 z'x*,   A* = Pi*'z'x*,
    d* = Pi*' sum_i w_i a_i / A*,
    s_i = w_i Pi*'(a_i - d* c_i) - d* Pi*'m_i,
    sum_i s_i^2 = quadratic forms in Pi* of sum_i w_i^2 a_i a_i', ... , sum_i m_i m_i',

and every draw-dependent sum is a (draws x n) by (n x columns) matrix product with O(q^2)
columns. Draws are processed in chunks and rows in blocks, so memory stays bounded
whatever the number of draws (about 380 MB at n = 10^6 with two instruments, 150 MB of it
the per-row columns, which are kept between chunks only when they fit in 256 MB).

Written by hand: no library on the project's list has a wild bootstrap for IV.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Protocol

import numpy as np
import scipy.sparse

from reportkit.engine.covariance import ClusterIndex
from reportkit.engine.moments import Moments

WEIGHT_NAMES: tuple[str, ...] = ("rademacher", "webb")
REFERENCE = "Davidson & MacKinnon 2010"

# draw values by index: Rademacher index = [U >= 1/2], Webb index = floor(6 U)
DRAW_VALUES: dict[str, np.ndarray] = {
    "rademacher": np.array([-1.0, 1.0]),
    "webb": np.array([-math.sqrt(1.5), -1.0, -math.sqrt(0.5), math.sqrt(0.5), 1.0, math.sqrt(1.5)]),
}

# memory bounds: the draw indices of one chunk of draws (int8, draws x units), the uniform
# numbers generated at once (float64, rows x units) and the draw values of one block of
# units for the matrix products (float64, draws of the chunk x units of the block)
INDEX_CHUNK_BYTES = 64 * 2**20
UNIFORM_CHUNK_BYTES = 32 * 2**20
BLOCK_BYTES = 16 * 2**20
MIN_BLOCK_UNITS = 1_024
# the per-unit columns (units x (2q + 5 q(q + 1) / 2) doubles) are built once when they fit
# in this, else rebuilt block by block for each chunk of draws
COLUMNS_KEEP_BYTES = 256 * 2**20
# the exact paths: the float64 work arrays of one chunk of draws (low rank, coupled); the
# columns absorbed at once (masked instruments, or the draws of the per-draw path), at most
# MASK_CHUNK_BYTES (the partialler makes a few copies of them) and MASK_COLUMNS (wide
# enough for pyhdfe's row gathers to read whole cache lines; more only adds memory); the
# largest (G, G, q) coupling arrays A and C (together) the coupled path keeps
WORK_BYTES = 32 * 2**20
MASK_CHUNK_BYTES = 96 * 2**20
MASK_COLUMNS = 16
COUPLING_BYTES = 256 * 2**20
# observation level: exact up to this many rows, the partialled-space algorithm above
EXACT_ROWS_LIMIT = 20_000
# a draw whose |t*| is within this relative distance of |t| counts as at least as extreme
# (the draw w = 1 everywhere reproduces the data, and rounding must not decide its side)
TIE_TOLERANCE = 1e-10


@dataclass(frozen=True)
class WildBootstrapArrays:
    """The t statistic of beta = beta0, its bootstrap p-value and the bootstrap draws of t."""

    t_statistic: float
    p_value: float
    draws: int
    weights: str
    n_clusters: int | None  # None: observation level (HC1)
    t_draws: np.ndarray  # (draws,) bootstrap t statistics, in draw order


@dataclass(frozen=True)
class _Restricted:
    """Rows of the restricted fit: u~, v~, z pi~ (n,) and pi~ (q,)."""

    u: np.ndarray
    v: np.ndarray
    xhat: np.ndarray
    pi: np.ndarray


@dataclass(frozen=True)
class _UnitSums:
    """Per-unit sums (G, q): a = Z_g'u~_g, c = Z_g'v~_g, m = Z_g'Z_g pi~."""

    a: np.ndarray
    c: np.ndarray
    m: np.ndarray

    @property
    def n_units(self) -> int:
        return int(self.a.shape[0])


def wild_bootstrap_tsls(
    m: Moments,
    *,
    cluster_codes: np.ndarray | None,
    k: int,
    draws: int,
    weights: str,
    seed: int,
    beta0: float = 0.0,
    fixed_effects: np.ndarray | None = None,
) -> WildBootstrapArrays:
    """WRE bootstrap p-value of the 2SLS t test of beta = beta0 (Davidson & MacKinnon 2010).

    ``cluster_codes``: (n,) or (n, 1) codes of one cluster dimension, or None for the
    observation-level bootstrap with HC1 standard errors. ``k``: model columns for the
    small-sample factor (1 + m.k_exog). ``weights``: "rademacher" or "webb". Every
    bootstrap sample is re-partialled on the controls and fixed effects (exact), except at
    observation level above EXACT_ROWS_LIMIT rows (see the module docstring).
    ``fixed_effects``: the design's (n, f) integer fixed-effect codes (those ``m`` absorbed);
    with exactly one dimension the fixed-effect projection is applied in closed form (the
    "one effect" paths) instead of by absorption passes; None or f != 1: the general paths.
    """
    if m.p != 1:
        raise ValueError(f"the wild bootstrap takes one endogenous regressor; this model has {m.p}")
    if weights not in WEIGHT_NAMES:
        raise ValueError(
            f"wild bootstrap weights must be one of {', '.join(WEIGHT_NAMES)}; got {weights!r}"
        )
    if int(draws) != draws or draws < 1:
        raise ValueError(f"the number of bootstrap draws must be a positive integer; got {draws}")
    draws = int(draws)
    n = m.n
    if not 1 <= k < n:
        raise ValueError(f"k (model columns) must be between 1 and n - 1 = {n - 1}; got {k}")
    index = _cluster_index(cluster_codes, n)
    levels = _one_effect_levels(m, fixed_effects)
    if index is None:
        factor = n / (n - k)
    else:
        g = index.n_groups
        factor = (n - 1) / (n - k) * g / (g - 1)

    fit = _restricted_fit(m, beta0)
    path = _choose_path(m, index, draws, levels is not None)
    if path == "partialled":
        sums = _unit_sums(m, fit, None)
        t_draws = _partialled_t(sums, m.zz_inv, factor, draws, weights, seed)
    else:
        units = index if index is not None else _row_index(n)
        sums = _unit_sums(m, fit, units)
        scores: _Scores
        if path == "low rank":
            scores = _LowRankScores(m, fit, sums, units)
        elif path == "coupled":
            scores = _CoupledScores(m, fit, sums, units)
        elif path == "one effect":
            scores = _OneEffectScores(m, fit, sums, units, _one_effect(m, levels))
        else:
            scores = _PerDrawScores(m, fit, sums, units)
        t_draws = _exact_t(scores, sums, m.zz_inv, factor, draws, weights, seed)
    t_stat = _data_t(sums, m.zz_inv, factor)
    extreme = np.abs(t_draws) >= abs(t_stat) * (1 - TIE_TOLERANCE)
    return WildBootstrapArrays(
        t_statistic=t_stat,
        p_value=float(np.mean(extreme)),
        draws=draws,
        weights=weights,
        n_clusters=None if index is None else index.n_groups,
        t_draws=t_draws,
    )


def _cluster_index(codes: np.ndarray | None, n: int) -> ClusterIndex | None:
    if codes is None:
        return None
    arr = np.asarray(codes)
    if arr.ndim == 2 and arr.shape[1] == 1:
        arr = arr[:, 0]
    if arr.ndim != 1 or arr.shape[0] != n:
        raise ValueError(
            f"cluster_codes must hold one cluster dimension for the n = {n} rows, shape (n,) "
            f"or (n, 1); got shape {np.shape(codes)}"
        )
    index = ClusterIndex.from_codes(arr)
    if index.n_groups < 2:
        raise ValueError("the wild cluster bootstrap needs at least two clusters")
    return index


def _row_index(n: int) -> ClusterIndex:
    """Each row its own unit (observation level on an exact path)."""
    return ClusterIndex(
        codes=np.arange(n), n_groups=n, summer=scipy.sparse.identity(n, format="csr")
    )


def _choose_path(
    m: Moments, index: ClusterIndex | None, draws: int, one_effect: bool = False
) -> str:
    """'partialled' (observation level, many rows), 'low rank', 'one effect' (clusters,
    exactly one fixed-effect dimension, its codes given), 'coupled' or 'per draw'."""
    if index is None and m.n > EXACT_ROWS_LIMIT:
        return "partialled"
    if m.partialler.absorber is None:
        return "low rank"
    units = m.n if index is None else index.n_groups
    columns = units * m.q
    fits = 2 * units * columns * 8 <= COUPLING_BYTES
    coupled = columns <= draws and fits
    # one effect in closed form: whenever the coupled path would be taken (same work per
    # draw, no absorption passes), or when the coupling arrays' work per draw (G^2 q) is at
    # most that of re-partialling one draw (about n (r + 2))
    r = m.partialler.q.shape[1]
    cheap = coupled or units * columns <= m.n * (r + 2)
    if one_effect and index is not None and fits and cheap:
        return "one effect"
    return "coupled" if coupled else "per draw"


def _one_effect_levels(m: Moments, fixed_effects: np.ndarray | None) -> np.ndarray | None:
    """The (n,) level codes when ``fixed_effects`` has exactly one dimension, else None."""
    if fixed_effects is None:
        return None
    arr = np.asarray(fixed_effects)
    if arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim != 2 or arr.shape[0] != m.n:
        raise ValueError(
            f"fixed_effects must hold the design's integer fixed-effect codes for the n = {m.n} "
            f"rows, shape (n, f); got shape {np.shape(fixed_effects)}"
        )
    if (arr.shape[1] > 0) != (m.partialler.absorber is not None):
        raise ValueError(
            f"fixed_effects has {arr.shape[1]} dimension(s) but the moments were partialled "
            f"{'with' if m.partialler.absorber is not None else 'without'} fixed effects; pass "
            "the codes of the design the moments were computed from"
        )
    if arr.shape[1] != 1:
        return None
    if not np.issubdtype(arr.dtype, np.integer):
        raise ValueError(f"fixed_effects must be integer codes; got dtype {arr.dtype}")
    return arr[:, 0]


def _restricted_fit(m: Moments, beta0: float) -> _Restricted:
    """Restricted residuals and the efficient reduced form (steps 1 and 2)."""
    q = m.q
    z = m.z
    x = m.x[:, 0]
    u = m.y - x * beta0  # restricted structural residuals (already orthogonal to W)
    zu = z.T @ u
    # OLS of x on [Z, u~]: normal equations from the cross-products
    lhs = np.empty((q + 1, q + 1))
    lhs[:q, :q] = m.zz
    lhs[:q, q] = lhs[q, :q] = zu
    lhs[q, q] = u @ u
    rhs = np.append(m.zx[:, 0], u @ x)
    pi = np.linalg.solve(lhs, rhs)[:q]
    xhat = z @ pi
    v = x - xhat  # v~ = x - Z pi~: the OLS residuals plus delta~ u~
    return _Restricted(u=u, v=v, xhat=xhat, pi=pi)


def _unit_sums(m: Moments, fit: _Restricted, index: ClusterIndex | None) -> _UnitSums:
    """The per-unit sums a, c, m (per row when ``index`` is None)."""
    q = m.q
    scores = np.empty((m.n, 3 * q))
    for j, col in enumerate((fit.u, fit.v, fit.xhat)):
        np.multiply(m.z, col[:, None], out=scores[:, j * q : (j + 1) * q])
    if index is not None:
        scores = index.sums(scores)
    return _UnitSums(a=scores[:, :q], c=scores[:, q : 2 * q], m=scores[:, 2 * q :])


def _data_t(sums: _UnitSums, zz_inv: np.ndarray, factor: float) -> float:
    """The data's t statistic: the draw w = 1 for every unit (x* = x, y* = y, no leak)."""
    zx = sums.m.sum(axis=0) + sums.c.sum(axis=0)  # z'x
    pi = zz_inv @ zx
    a_star = float(zx @ pi)
    d = float(pi @ sums.a.sum(axis=0)) / a_star
    s = (sums.a - d * (sums.c + sums.m)) @ pi
    return d / math.sqrt(factor * float(s @ s) / a_star**2)


# --- exact paths -----------------------------------------------------------------------


@dataclass(frozen=True)
class _DrawFit:
    """The bootstrap 2SLS of a chunk of draws: Pi* (b, q), A* and d* = beta* - beta0 (b,)."""

    pi: np.ndarray
    a_star: np.ndarray
    d: np.ndarray


class _Scores(Protocol):
    """Per-unit score sums s (b, G) of a chunk of draws w (b, G), re-partialled."""

    draws_per_chunk: int  # draws whose work arrays fit the memory bounds together

    def scores(self, w: np.ndarray, fit: _DrawFit) -> np.ndarray: ...


@dataclass(frozen=True)
class _ControlSums:
    """Per-unit sums on the basis Q of the absorbed controls: F_h = Q_h'Z_h (G, r q; index
    k q + j for column k of Q and instrument j), E_u = Q_g'u~_g and E_v = Q_g'v~_g (G, r)."""

    f: np.ndarray
    e_u: np.ndarray
    e_v: np.ndarray


def _control_sums(m: Moments, fit: _Restricted, units: ClusterIndex) -> _ControlSums:
    """F, E_u, E_v from one pass over the rows, a block of rows at a time."""
    qmat = m.partialler.q
    n_units, q, r = units.n_groups, m.q, qmat.shape[1]
    # per-unit sums of the row-wise Q_i z_i' (r x q, flattened), Q_i u~_i and Q_i v~_i
    # (column-compressed summing matrix: cheap column slices)
    width = r * q + 2 * r
    per_unit = np.zeros((n_units, width))
    summer = scipy.sparse.csc_matrix(units.summer)
    step = max(1, WORK_BYTES // (8 * max(width, 1)))
    for start in range(0, m.n, step) if r else ():
        stop = min(start + step, m.n)
        qb, zb = qmat[start:stop], m.z[start:stop]
        cols = np.empty((stop - start, width))
        for kk in range(r):
            np.multiply(zb, qb[:, kk : kk + 1], out=cols[:, kk * q : (kk + 1) * q])
        np.multiply(qb, fit.u[start:stop, None], out=cols[:, r * q : r * q + r])
        np.multiply(qb, fit.v[start:stop, None], out=cols[:, r * q + r :])
        per_unit += summer[:, start:stop] @ cols
    return _ControlSums(
        f=np.ascontiguousarray(per_unit[:, : r * q]),
        e_u=per_unit[:, r * q : r * q + r],
        e_v=per_unit[:, r * q + r :],
    )


class _LowRankScores:
    """No fixed effects: P_W = Q Q', A[h, g] = [g = h] a_h - F_h'E_g, F_h = Q_h'Z_h."""

    def __init__(self, m: Moments, fit: _Restricted, sums: _UnitSums, units: ClusterIndex):
        n_units, q, r = units.n_groups, m.q, m.partialler.q.shape[1]
        self.sums = sums
        self.r = r
        ctl = _control_sums(m, fit, units)
        self.f, self.e_u, self.e_v = ctl.f, ctl.e_u, ctl.e_v
        self.draws_per_chunk = WORK_BYTES // (8 * n_units * (r * q + 6))

    def scores(self, w: np.ndarray, fit: _DrawFit) -> np.ndarray:
        b, q, r = w.shape[0], self.sums.a.shape[1], self.r
        d = fit.d[:, None]
        own = w * (fit.pi @ self.sums.a.T - d * (fit.pi @ self.sums.c.T))
        s = own - d * (fit.pi @ self.sums.m.T)
        if r:
            leak = w @ self.e_u - d * (w @ self.e_v)  # (b, r): Q'r*
            outer = (leak[:, :, None] * fit.pi[:, None, :]).reshape(b, r * q)
            s -= outer @ self.f.T  # Pi*'F_h'Q'r*
        return s


class _CoupledScores:
    """Fixed effects, few units: the coupling arrays A and C from masked instrument columns."""

    def __init__(self, m: Moments, fit: _Restricted, sums: _UnitSums, units: ClusterIndex):
        n, q, g = m.n, m.q, units.n_groups
        self.sums = sums
        self.q = q
        rows = np.arange(n)
        # column-compressed: the product reads the rows of the absorbed columns in order
        by_u = scipy.sparse.csc_matrix((fit.u, (units.codes, rows)), shape=(g, n))
        by_v = scipy.sparse.csc_matrix((fit.v, (units.codes, rows)), shape=(g, n))
        # column h q + j of the coupling: unit h, instrument j; rows: unit g
        self.coupling_u = np.empty((g, g * q))
        self.coupling_v = np.empty((g, g * q))
        order = np.argsort(units.codes, kind="stable")
        bounds = np.searchsorted(units.codes[order], np.arange(g + 1))
        per_chunk = max(1, min(MASK_COLUMNS, MASK_CHUNK_BYTES // (8 * n)) // q)  # units
        masked = np.empty((n, min(per_chunk, g) * q))
        for first in range(0, g, per_chunk):
            last = min(first + per_chunk, g)
            block = masked[:, : (last - first) * q]
            block.fill(0.0)
            sel = order[bounds[first] : bounds[last]]
            offset = (units.codes[sel] - first) * q
            block[sel[:, None], offset[:, None] + np.arange(q)] = m.z[sel]
            resid = m.partialler.residualize_transformed(block)  # M_W Z^(h), (n, chunk q)
            self.coupling_u[:, first * q : last * q] = by_u @ resid
            self.coupling_v[:, first * q : last * q] = by_v @ resid
            del resid
        self.draws_per_chunk = WORK_BYTES // (8 * g * (3 * q + 4))

    def scores(self, w: np.ndarray, fit: _DrawFit) -> np.ndarray:
        b, q = w.shape[0], self.q
        g = self.coupling_u.shape[0]
        t_u = (w @ self.coupling_u).reshape(b, g, q)
        t_v = (w @ self.coupling_v).reshape(b, g, q)
        d = fit.d[:, None]
        s = np.einsum("bhj,bj->bh", t_u, fit.pi) - d * np.einsum("bhj,bj->bh", t_v, fit.pi)
        s -= d * (fit.pi @ self.sums.m.T)
        return s


@dataclass(frozen=True)
class _OneEffect:
    """One fixed-effect dimension in the transformed space, where P_W = P_F + Q Q'.

    (P_F v)_i = s_i sum_{j in l(i)} s_j v_j / D[l(i)], D[l] = sum_{j in l} s_j^2, s the
    square roots of the normalised weights (ones without weights): the weighted within
    transformation that ``absorb.py`` asks of pyhdfe. Q = ``partialler.q`` spans the
    controls absorbed on the effect and weighted, so Q'F_t = 0 and Q holds no constant (the
    effect absorbs it).
    """

    levels: np.ndarray  # (n,) level codes 0..L-1
    s: np.ndarray  # (n,)
    d: np.ndarray  # (L,) sum of s^2 per level (0 for codes that do not occur)

    @property
    def n_levels(self) -> int:
        return int(self.d.shape[0])


def _one_effect(m: Moments, codes: np.ndarray | None) -> _OneEffect:
    if codes is None:  # the path is chosen only with the codes
        raise ValueError("the one-effect paths need the fixed-effect codes")
    codes = np.asarray(codes, dtype=np.int64)
    if codes.size and (codes.min() < 0 or codes.max() >= m.n):
        codes = np.unique(codes, return_inverse=True)[1].astype(np.int64)
    sqrt_w = m.partialler.sqrt_w
    s = np.ones(m.n) if sqrt_w is None else np.asarray(sqrt_w, dtype=float)
    n_levels = int(codes.max()) + 1 if codes.size else 0
    d = np.bincount(codes, weights=s * s, minlength=n_levels)
    return _OneEffect(levels=codes, s=s, d=d)


class _OneEffectScores(_CoupledScores):
    """One fixed effect, few units: the coupled path's A and C in closed form, no absorption.

    (M_W Z^(h))'r^(g) = [g = h] Z_h'r_h - sum_l A[h, l] B[g, l] / D[l] - F_h'E_g, with the
    per-(unit, level) sums A[h, l] = sum_{i in h, l} s_i z_i (q numbers) and B[g, l] =
    sum_{i in g, l} s_i r_i (r = u~ or v~), and F, E the control sums of the low-rank path:
    one O(n q) pass and a sparse product over the (unit, level) pairs that occur.
    """

    def __init__(
        self,
        m: Moments,
        fit: _Restricted,
        sums: _UnitSums,
        units: ClusterIndex,
        effect: _OneEffect,
    ):
        q, g, r = m.q, units.n_groups, m.partialler.q.shape[1]
        self.sums = sums
        self.q = q
        lv, s, n_levels = effect.levels, effect.s, effect.n_levels
        # A as (L, G q): row l, column h q + j; duplicates (rows of one pair) are summed
        a_mat = scipy.sparse.csr_matrix(
            (
                (m.z * s[:, None]).ravel(),
                (np.repeat(lv, q), (units.codes[:, None] * q + np.arange(q)).ravel()),
            ),
            shape=(n_levels, g * q),
        )
        scale = s / effect.d[lv]  # s_i / D[l(i)], D > 0 for every level that occurs
        ctl = _control_sums(m, fit, units)
        f_t = ctl.f.reshape(g, r, q).transpose(1, 0, 2).reshape(r, g * q)  # (r, G q)
        own = np.arange(g)
        coupling = []
        for resid, e, diag in ((fit.u, ctl.e_u, sums.a), (fit.v, ctl.e_v, sums.c)):
            b_mat = scipy.sparse.csr_matrix((resid * scale, (units.codes, lv)), shape=(g, n_levels))
            c = -(b_mat @ a_mat).toarray()  # (G, G q): - sum_l B[g, l] A[h, l] / D[l]
            if r:
                c -= e @ f_t
            c.reshape(g, g, q)[own, own] += diag
            coupling.append(c)
        del a_mat
        self.coupling_u, self.coupling_v = coupling
        self.draws_per_chunk = WORK_BYTES // (8 * g * (3 * q + 4))


class _PerDrawScores:
    """Fixed effects, many units: M_W r* absorbed for every draw (d* is known beforehand)."""

    def __init__(self, m: Moments, fit: _Restricted, sums: _UnitSums, units: ClusterIndex):
        self.m = m
        self.fit = fit
        self.codes = units.codes
        # one row per unit (observation level): the rows are the score sums (the meat is
        # a sum over units, so their order does not matter)
        self.by_row = units.n_groups == m.n
        # column-compressed: the product reads the score rows in order
        self.summer = scipy.sparse.csc_matrix(units.summer)
        # the draws are the columns absorbed at once: as many as the masked columns, or as
        # fit the work memory (5 copies) when that is more (fewer calls on small samples)
        self.draws_per_chunk = max(
            min(MASK_COLUMNS, MASK_CHUNK_BYTES // (8 * m.n)), WORK_BYTES // (40 * m.n)
        )

    def scores(self, w: np.ndarray, fit: _DrawFit) -> np.ndarray:
        m, rf = self.m, self.fit
        r_star = np.ascontiguousarray(w[:, self.codes].T)  # (n, b): each row's draw
        r_star *= rf.u[:, None] - rf.v[:, None] * fit.d[None, :]  # r* = u* - d* v*
        e_star = m.partialler.residualize_transformed(r_star)  # M_W r*
        del r_star
        e_star -= rf.xhat[:, None] * fit.d[None, :]  # e* = M_W r* - d* z pi~
        e_star *= m.z @ fit.pi.T  # score rows zeta_i e*_i, zeta = z Pi*
        if self.by_row:
            return e_star.T
        return np.asarray(self.summer @ e_star).T


def _exact_t(
    scores: _Scores,
    sums: _UnitSums,
    zz_inv: np.ndarray,
    factor: float,
    draws: int,
    weights: str,
    seed: int,
) -> np.ndarray:
    """t* of every draw on an exact path, a chunk of draws at a time."""
    units = sums.n_units
    chunk = max(1, min(draws, scores.draws_per_chunk, INDEX_CHUNK_BYTES // units))
    rng = np.random.default_rng(seed)
    buffer = np.empty((max(1, min(chunk, UNIFORM_CHUNK_BYTES // (8 * units))), units))
    values = DRAW_VALUES[weights]
    zz_pi = sums.m.sum(axis=0)
    out = np.empty(draws)
    for first in range(0, draws, chunk):
        rows = min(chunk, draws - first)
        w = values[_draw_indices(rng, buffer, rows, weights)]
        zx = zz_pi + w @ sums.c  # z'x*
        pi = zx @ zz_inv  # zz_inv is symmetric
        a_star = np.einsum("ij,ij->i", zx, pi)
        d = np.einsum("ij,ij->i", pi, w @ sums.a) / a_star
        s = scores.scores(w, _DrawFit(pi=pi, a_star=a_star, d=d))
        meat = np.einsum("ij,ij->i", s, s)
        out[first : first + rows] = d / np.sqrt(factor * meat / a_star**2)
    return out


# --- partialled-space algorithm (observation level, many rows) ---------------------------


@dataclass(frozen=True)
class _Constants:
    zz_inv: np.ndarray  # (q, q)
    zz_pi: np.ndarray  # (q,) Z'Z pi~ = sum_g m_g
    mm: np.ndarray  # (P,) sum_g pairs(m_g, m_g)
    factor: float  # small-sample factor of the meat


class _Columns:
    """Per-unit columns whose draw-weighted sums give every bootstrap quantity.

    ``linear`` (G, 2q + 2P), multiplied by w: a, c, pairs(a, m), pairs(c, m).
    ``square`` (G, 3P), multiplied by w^2: pairs(a, a), pairs(a, c), pairs(c, c).
    P = q(q + 1) / 2; pairs(x, y) holds the coefficients of Pi_j Pi_k (j <= k) in
    (Pi'x)(Pi'y), so that sum_g w_g (Pi'x_g)(Pi'y_g) = pairs(Pi) . sum_g w_g pairs(x_g, y_g).
    """

    def __init__(self, sums: _UnitSums, block_units: int) -> None:
        self.sums = sums
        q = sums.a.shape[1]
        self.q = q
        self.j, self.k = np.triu_indices(q)
        self.n_pairs = int(self.j.size)
        self.n_linear = 2 * q + 2 * self.n_pairs
        self.n_square = 3 * self.n_pairs
        self.blocks = [
            (start, min(start + block_units, sums.n_units))
            for start in range(0, sums.n_units, block_units)
        ]
        # the columns are kept between chunks of draws when they fit, else rebuilt
        self.keep = sums.n_units * (self.n_linear + self.n_square) * 8 <= COLUMNS_KEEP_BYTES
        self._kept: dict[int, tuple[np.ndarray, np.ndarray]] = {}

    def pairs(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        out = x[:, self.j] * y[:, self.k]
        off = self.j != self.k
        if off.any():
            out[:, off] += x[:, self.k[off]] * y[:, self.j[off]]
        return out

    def pi_pairs(self, pi: np.ndarray) -> np.ndarray:
        """(draws, q) -> (draws, P): Pi_j Pi_k for j <= k."""
        return pi[:, self.j] * pi[:, self.k]

    def block(self, start: int, stop: int) -> tuple[np.ndarray, np.ndarray]:
        """(linear, square) columns of units start..stop."""
        if start in self._kept:
            return self._kept[start]
        a, c, m = (v[start:stop] for v in (self.sums.a, self.sums.c, self.sums.m))
        lin = np.hstack([a, c, self.pairs(a, m), self.pairs(c, m)])
        sq = np.hstack([self.pairs(a, a), self.pairs(a, c), self.pairs(c, c)])
        if self.keep:
            self._kept[start] = (lin, sq)
        return lin, sq

    def totals(self) -> tuple[np.ndarray, np.ndarray]:
        """Column sums with every w = 1 (the data): square, pairs(m, m)."""
        sq = np.zeros(self.n_square)
        mm = np.zeros(self.n_pairs)
        for start, stop in self.blocks:
            sq += self.block(start, stop)[1].sum(axis=0)
            m = self.sums.m[start:stop]
            mm += self.pairs(m, m).sum(axis=0)
        return sq, mm


def _partialled_t(
    sums: _UnitSums, zz_inv: np.ndarray, factor: float, draws: int, weights: str, seed: int
) -> np.ndarray:
    """t* of every draw without re-partialling (observation level above EXACT_ROWS_LIMIT)."""
    chunk = max(1, min(draws, INDEX_CHUNK_BYTES // sums.n_units))  # draws at a time
    cols = _Columns(sums, block_units=max(MIN_BLOCK_UNITS, BLOCK_BYTES // (8 * chunk)))
    sq_tot, mm_tot = cols.totals()
    const = _Constants(zz_inv=zz_inv, zz_pi=sums.m.sum(axis=0), mm=mm_tot, factor=factor)
    rng = np.random.default_rng(seed)
    units = sums.n_units
    rademacher = weights == "rademacher"
    values = DRAW_VALUES[weights]
    buffer = np.empty((max(1, min(chunk, UNIFORM_CHUNK_BYTES // (8 * units))), units))
    out = np.empty(draws)
    for first in range(0, draws, chunk):
        rows = min(chunk, draws - first)
        idx = _draw_indices(rng, buffer, rows, weights)
        lin = np.zeros((rows, cols.n_linear))
        if rademacher:  # w^2 = 1
            sq = np.broadcast_to(sq_tot, (rows, cols.n_square))
        else:
            sq = np.zeros((rows, cols.n_square))
        for start, stop in cols.blocks:
            linear, square = cols.block(start, stop)
            block_idx = idx[:, start:stop]
            if rademacher:  # w = 2 [U >= 1/2] - 1: one cheap conversion, no table look-up
                lin += 2.0 * (block_idx.astype(np.float64) @ linear) - linear.sum(axis=0)
            else:
                w = values[block_idx]
                lin += w @ linear
                np.multiply(w, w, out=w)
                sq += w @ square
        out[first : first + rows] = _t_statistics(lin, sq, const, cols)
    return out


def _t_statistics(lin: np.ndarray, sq: np.ndarray, const: _Constants, cols: _Columns) -> np.ndarray:
    """t* for each row of draw-weighted column sums (see the module docstring)."""
    q, p = cols.q, cols.n_pairs
    sa, sc = lin[:, :q], lin[:, q : 2 * q]
    sam, scm = lin[:, 2 * q : 2 * q + p], lin[:, 2 * q + p :]
    saa, sac, scc = sq[:, :p], sq[:, p : 2 * p], sq[:, 2 * p :]
    zx = const.zz_pi + sc  # Z'x*
    pi = zx @ const.zz_inv  # first-stage coefficients Pi* (zz_inv is symmetric)
    a_star = np.einsum("ij,ij->i", zx, pi)  # x*'P_Z x*
    d = np.einsum("ij,ij->i", pi, sa) / a_star  # beta* - beta0
    pp = cols.pi_pairs(pi)

    def quad(s: np.ndarray) -> np.ndarray:
        return np.einsum("ij,ij->i", pp, np.broadcast_to(s, pp.shape))

    meat = (
        quad(saa)
        - 2 * d * quad(sac)
        + d**2 * quad(scc)
        - 2 * d * (quad(sam) - d * quad(scm))
        + d**2 * quad(const.mm)
    )
    return d / np.sqrt(const.factor * meat / a_star**2)


def _draw_indices(
    rng: np.random.Generator, buffer: np.ndarray, rows: int, weights: str
) -> np.ndarray:
    """(rows, units) int8 indices into DRAW_VALUES[weights], from rng.random a few rows at
    a time (into ``buffer``, (step, units))."""
    step, units = buffer.shape
    out = np.empty((rows, units), dtype=np.int8)
    for start in range(0, rows, step):
        stop = min(start + step, rows)
        u = rng.random(out=buffer[: stop - start])
        if weights == "rademacher":
            out[start:stop] = u >= 0.5
        else:
            u *= 6.0
            out[start:stop] = u  # truncation = floor(6 U), in 0..5 since U < 1
    return out
