"""Probit and logit maximum likelihood, batched over bootstrap draws; the bivariate probit.

Written by hand because no library fits many weight vectors at once: statsmodels fits one
weight vector per call, so a bootstrap of B draws would refit B times and read every row
B times per Newton step. Here each bootstrap draw is a vector of frequency weights (how
often each row, or each cluster's rows, was drawn) over the SAME rows, so one Newton step
for all draws is a few matrix products over blocks of rows: the information matrices are
(draws x rows) @ (rows x column pairs), the gradients (draws x rows) @ (rows x columns).
Rows are processed in blocks and draws in chunks, so memory stays bounded. A column that
differs by draw (a first-stage residual re-estimated in each draw) enters as a "draw
column" (``DrawColumns``).

Methods: Newton-Raphson with step halving on the probit and logit log-likelihoods (Amemiya
1985, Advanced Econometrics, ch. 9; the likelihoods are globally concave, Amemiya 1981);
the bivariate normal distribution function through Owen's T function (Owen 1956); the
recursive bivariate probit likelihood with an endogenous binary regressor (Heckman 1978;
Maddala 1983, Limited-Dependent and Qualitative Variables in Econometrics) with its
analytic gradient and Hessian, the correlation estimated through atanh(rho).
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Literal, Protocol

import numpy as np
from scipy import special

Link = Literal["probit", "logit"]

TOLERANCE = 1e-10  # Newton stops once every step is below this times (1 + max |param|)
MAX_ITERATIONS = 100
MAX_HALVINGS = 40
BLOCK_ELEMENTS = 1 << 18  # one (draws x rows) block of float64: 2 MiB, stays in cache
ROW_COUNT_BYTES = 64 << 20  # row-resampling counts held at once (int32, draws x rows)
MAX_DRAWS_PER_CHUNK = 64
RANK_TOLERANCE = 1e-12  # relative eigenvalue below which a direction counts as unidentified
_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)
_PROBIT_TAIL = -30.0  # below this, log Phi and phi / Phi come from log_ndtr
_NOT_CONVERGED = (
    "did not converge within {iters} Newton iterations; this usually means that some "
    "regressor or combination of regressors predicts {what} perfectly (perfect prediction), "
    "so that a coefficient runs off to infinity. Drop or merge the offending columns or "
    "categories"
)


# --------------------------------------------------------------------------- links
def link_cdf(link: Link, eta: np.ndarray) -> np.ndarray:
    """P(outcome = 1) at index ``eta``."""
    return special.ndtr(eta) if link == "probit" else special.expit(eta)


def link_density(link: Link, eta: np.ndarray) -> np.ndarray:
    """Derivative of ``link_cdf`` in the index."""
    if link == "probit":
        return np.exp(-0.5 * eta * eta - _LOG_SQRT_2PI)
    p = special.expit(eta)
    return p * (1.0 - p)


def link_terms(
    link: Link, y: np.ndarray, eta: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per-row log-likelihood, its derivative in the index, and minus its second derivative.

    ``y`` (rows,) holds 0/1 and broadcasts against ``eta`` (..., rows). The probit terms use
    log Phi and the inverse Mills ratio from ``log_ndtr`` far in the lower tail, so they stay
    finite where Phi underflows.
    """
    q = 2.0 * y - 1.0
    t = eta * q
    if link == "probit":
        with np.errstate(divide="ignore", invalid="ignore", under="ignore"):
            cdf = special.ndtr(t)
            ratio = np.square(t)
            ratio *= -0.5
            ratio -= _LOG_SQRT_2PI
            np.exp(ratio, out=ratio)
            ratio /= cdf
            ll = np.log(cdf, out=cdf)
        tail = t < _PROBIT_TAIL
        if tail.any():
            # beyond -1e5 (P < exp(-5e9)) the row is held at -1e5: only a rejected trial
            # step gets there, and the clip keeps phi / Phi from overflowing
            tt = np.maximum(t[tail], -1e5)
            log_cdf = special.log_ndtr(tt)
            ll[tail] = log_cdf
            ratio[tail] = np.exp(-0.5 * tt * tt - _LOG_SQRT_2PI - log_cdf)
        score = ratio * q
        t += ratio
        t *= ratio  # curvature: ratio * (ratio + t)
        return ll, score, t
    p = special.expit(eta)
    ll = np.abs(t)
    np.negative(ll, out=ll)
    np.exp(ll, out=ll)
    np.log1p(ll, out=ll)
    ll += np.maximum(-t, 0.0)
    np.negative(ll, out=ll)
    score = y - p
    p *= 1.0 - p
    return ll, score, p


# ----------------------------------------------------------------- draw weights / columns
class DrawWeights(Protocol):
    """Frequency (times sampling) weights of several draws over the same rows."""

    @property
    def n_draws(self) -> int: ...

    def block(self, draws: np.ndarray, start: int, stop: int) -> np.ndarray:
        """(len(draws), stop - start) float64 weights of rows start..stop."""
        ...


class DrawColumns(Protocol):
    """Regressor columns whose values differ by draw (e.g. a re-estimated residual)."""

    @property
    def n_columns(self) -> int: ...

    def block(self, draws: np.ndarray, start: int, stop: int) -> np.ndarray:
        """(len(draws), n_columns, stop - start) float64 values of rows start..stop."""
        ...


@dataclass(frozen=True)
class RowWeights:
    """One weight per draw and row: (draws, n) counts or weights, times ``base``."""

    matrix: np.ndarray
    base: np.ndarray | None = None

    @property
    def n_draws(self) -> int:
        return int(self.matrix.shape[0])

    def block(self, draws: np.ndarray, start: int, stop: int) -> np.ndarray:
        out = self.matrix[draws, start:stop].astype(np.float64)
        if self.base is not None:
            out *= self.base[start:stop]
        return out


@dataclass(frozen=True)
class ClusterWeights:
    """One count per draw and cluster, (draws, G), given to every row of the cluster."""

    counts: np.ndarray
    codes: np.ndarray  # (n,) cluster codes 0..G-1
    base: np.ndarray | None = None

    @property
    def n_draws(self) -> int:
        return int(self.counts.shape[0])

    def block(self, draws: np.ndarray, start: int, stop: int) -> np.ndarray:
        out = np.take(self.counts[draws], self.codes[start:stop], axis=1)
        if self.base is not None:
            out *= self.base[start:stop]
        return out


def single_weights(n: int, weights: np.ndarray | None) -> RowWeights:
    """The weights of one ordinary fit (all ones when ``weights`` is None)."""
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=np.float64)
    return RowWeights(w[None, :])


@dataclass(frozen=True)
class BootstrapPlan:
    """Nonparametric bootstrap as frequency weights: rows, or whole clusters, drawn with
    replacement (Efron 1979; clusters: Cameron, Gelbach & Miller 2008).

    Draw b takes ``units`` draws with replacement from the units (rows, or clusters when
    ``clusters`` is given) with ``np.random.default_rng(seed)``, one draw after the other;
    the counts therefore do not depend on how draws are grouped into chunks.
    """

    n: int
    draws: int
    seed: int
    clusters: np.ndarray | None = None  # (n,) codes 0..G-1
    base: np.ndarray | None = None  # sampling weights, multiplied into the counts

    @property
    def n_units(self) -> int:
        return self.n if self.clusters is None else int(self.clusters.max()) + 1

    def describe(self) -> str:
        unit = "rows" if self.clusters is None else "clusters"
        return f"bootstrap ({self.draws} draws, {unit} resampled)"

    def chunk_size(self) -> int:
        if self.clusters is not None:
            return MAX_DRAWS_PER_CHUNK
        return int(min(MAX_DRAWS_PER_CHUNK, max(1, ROW_COUNT_BYTES // (4 * self.n))))

    def chunks(self) -> Iterator[tuple[int, DrawWeights]]:
        """(index of the chunk's first draw, its weights), in draw order."""
        rng = np.random.default_rng(self.seed)
        units, size = self.n_units, self.chunk_size()
        for first in range(0, self.draws, size):
            m = min(size, self.draws - first)
            dtype = np.int32 if self.clusters is None else np.float64
            counts = np.empty((m, units), dtype=dtype)
            for j in range(m):
                counts[j] = np.bincount(rng.integers(0, units, size=units), minlength=units)
            if self.clusters is None:
                yield first, RowWeights(counts, self.base)
            else:
                yield first, ClusterWeights(counts, self.clusters, self.base)

    def row_weights(self, limit: int) -> np.ndarray:
        """Dense (min(limit, draws), n) weights of the first draws, for checks."""
        rows: list[np.ndarray] = []
        for _, weights in self.chunks():
            take = min(weights.n_draws, limit - len(rows))
            block = weights.block(np.arange(take), 0, self.n)
            rows.extend(block)
            if len(rows) >= limit:
                break
        return np.array(rows)


# ------------------------------------------------------------------------- helpers
def _row_blocks(n: int, width: int) -> Iterator[tuple[int, int]]:
    step = max(64, BLOCK_ELEMENTS // max(width, 1))
    for start in range(0, n, step):
        yield start, min(n, start + step)


def _pairs(k: int) -> tuple[np.ndarray, np.ndarray]:
    return np.triu_indices(k)


def _add_draw_columns(eta: np.ndarray, coef: np.ndarray, cols: np.ndarray) -> None:
    """eta (A, rows) += sum_e coef (A, e) * cols (A, e, rows), in place."""
    for j in range(cols.shape[1]):
        eta += coef[:, j : j + 1] * cols[:, j, :]


def _unpack(packed: np.ndarray, k: int) -> np.ndarray:
    iu, ju = _pairs(k)
    out = np.empty((packed.shape[0], k, k))
    out[:, iu, ju] = packed
    out[:, ju, iu] = packed
    return out


def solve_spd(mats: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Minimum-norm solutions of a stack of positive semi-definite systems (m, k, k) x = (m, k).

    Solved in the metric of the diagonal (so that column scale does not matter), with
    eigenvalues below ``RANK_TOLERANCE`` times the largest treated as zero: a direction the
    data of a draw do not identify (a column with no weight in the draw, or indicators that
    add up to the constant once a category's clusters were all left out) gets no step, so
    the coefficients stay where they started along it.
    """
    diag = np.einsum("mkk->mk", mats)
    inv_sd = np.zeros_like(diag)
    np.divide(
        1.0, np.sqrt(diag, where=diag > 0, out=np.zeros_like(diag)), out=inv_sd, where=diag > 0
    )
    scaled = mats * inv_sd[:, :, None] * inv_sd[:, None, :]
    vals, vecs = np.linalg.eigh(scaled)
    cutoff = RANK_TOLERANCE * vals[:, -1:]
    inv_vals = np.zeros_like(vals)
    np.divide(1.0, vals, out=inv_vals, where=vals > cutoff)
    coords = np.einsum("mkj,mk->mj", vecs, rhs * inv_sd) * inv_vals
    return np.einsum("mkj,mj->mk", vecs, coords) * inv_sd


def check_full_rank(x: np.ndarray, weights: np.ndarray | None, labels: list[str]) -> None:
    """ValueError naming the columns when ``x`` has an all-zero or collinear column."""
    gram = x.T @ x if weights is None else (x * weights[:, None]).T @ x
    scale = np.sqrt(np.diag(gram))
    zero = [labels[j] for j in np.flatnonzero(scale == 0)]
    if zero:
        raise ValueError(f"the column(s) {', '.join(zero)} are zero in every row")
    corr = gram / np.outer(scale, scale)
    vals, vecs = np.linalg.eigh(corr)
    if vals[0] < 1e-10 * max(vals[-1], 1.0):
        involved = [labels[j] for j in np.flatnonzero(np.abs(vecs[:, 0]) > 1e-3)]
        raise ValueError(
            "these columns are collinear (one is a combination of the others): "
            + ", ".join(involved)
            + "; drop one of them"
        )


def perfect_predictors(
    y: np.ndarray, x: np.ndarray, weights: np.ndarray | None
) -> list[tuple[int, int, int]]:
    """0/1 columns of ``x`` on one of whose values the outcome never varies.

    Such a column predicts the outcome perfectly for those rows (quasi-complete
    separation, Albert & Anderson 1984): the maximum likelihood estimate does not exist.
    Returns (column index, its value, the outcome on those rows) for each case.
    """
    if weights is None or (weights > 0).all():
        yk, xk = y, x
    else:
        yk, xk = y[weights > 0], x[weights > 0]
    out = []
    for j in range(x.shape[1]):
        col = xk[:, j]
        ones = col == 1
        if not (ones | (col == 0)).all() or ones.all() or not ones.any():
            continue
        for value, rows in ((1, ones), (0, ~ones)):
            ys = yk[rows]
            if (ys == ys[0]).all():
                out.append((j, value, int(ys[0])))
    return out


# ------------------------------------------------------------ batched Newton-Raphson
@dataclass(frozen=True)
class BatchFit:
    """One probit or logit fit per draw."""

    params: np.ndarray  # (B, k): shared columns, then draw columns; NaN where failed
    converged: np.ndarray  # (B,) bool
    iterations: np.ndarray  # (B,) int
    log_likelihood: np.ndarray  # (B,) weighted, at the last accepted step


def _evaluate(
    y: np.ndarray,
    x: np.ndarray,
    weights: DrawWeights,
    extra: DrawColumns | None,
    link: Link,
    params: np.ndarray,
    draws: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Weighted log-likelihood (A,), gradient (A, k) and information (A, k, k) per draw."""
    n, u = x.shape
    e = 0 if extra is None else extra.n_columns
    a = draws.shape[0]
    iu, ju = _pairs(u)
    ll = np.zeros(a)
    grad = np.zeros((a, u + e))
    packed = np.zeros((a, iu.size))
    cross = np.zeros((a, e, u))
    corner = np.zeros((a, e, e))
    for start, stop in _row_blocks(n, max(a, iu.size)):
        xr = x[start:stop]
        f = weights.block(draws, start, stop)
        eta = params[:, :u] @ xr.T
        if extra is not None:
            er = extra.block(draws, start, stop)
            _add_draw_columns(eta, params[:, u:], er)
        lli, score, curv = link_terms(link, y[start:stop], eta)
        ll += np.einsum("an,an->a", f, lli)
        score *= f
        curv *= f
        grad[:, :u] += score @ xr
        packed += curv @ (xr[:, iu] * xr[:, ju])
        if extra is not None:
            grad[:, u:] += np.einsum("an,aen->ae", score, er)
            ce = curv[:, None, :] * er
            cross += (ce.reshape(-1, ce.shape[2]) @ xr).reshape(a, e, u)
            corner += np.einsum("aen,afn->aef", ce, er)
    info = np.zeros((a, u + e, u + e))
    info[:, :u, :u] = _unpack(packed, u)
    if e:
        info[:, u:, :u] = cross
        info[:, :u, u:] = cross.transpose(0, 2, 1)
        info[:, u:, u:] = corner
    return ll, grad, info


def _newton_chunk(
    y: np.ndarray,
    x: np.ndarray,
    weights: DrawWeights,
    extra: DrawColumns | None,
    link: Link,
    start: np.ndarray,
    draws: np.ndarray,
    tol: float,
    max_iter: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Newton-Raphson with step halving for the draws ``draws``, all at once."""
    beta = start.copy()
    a = draws.shape[0]
    ll, grad, info = _evaluate(y, x, weights, extra, link, beta, draws)
    done = np.zeros(a, bool)
    failed = ~np.isfinite(ll)
    iters = np.zeros(a, np.int64)
    previous = np.full(a, np.inf)  # size of the last full (unhalved) step
    for _ in range(max_iter):
        idx = np.flatnonzero(~done & ~failed)
        if idx.size == 0:
            break
        step = solve_spd(info[idx], grad[idx])
        ok = np.isfinite(step).all(axis=1)
        failed[idx[~ok]] = True
        idx, step = idx[ok], step[ok]
        size = np.abs(step).max(axis=1, initial=0.0)
        scale = 1.0 + np.abs(beta[idx]).max(axis=1, initial=0.0)
        # Newton converges quadratically: the next step would be about
        # size^2 * (size / previous^2); once that is below the tolerance, the step is
        # taken without evaluating the likelihood again
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            predicted = size * size * (size / np.square(previous[idx]))
        quadratic = (
            np.isfinite(previous[idx])
            & (size < previous[idx])
            & (size <= 1e-2 * scale)
            & (predicted <= tol * scale)
        )
        last = (size <= tol * scale) | quadratic
        iters[idx] += 1
        beta[idx[last]] += step[last]
        done[idx[last]] = True
        idx, step, size = idx[~last], step[~last], size[~last]
        if idx.size == 0:
            continue
        shrink = np.ones(idx.size)
        pending = np.arange(idx.size)
        cand = beta[idx] + step
        for _ in range(MAX_HALVINGS):
            sub = idx[pending]
            ll_c, g_c, i_c = _evaluate(y, x, weights, extra, link, cand[pending], draws[sub])
            slack = 1e-12 * (1.0 + np.abs(ll[sub]))
            good = ll_c >= ll[sub] - slack
            acc = pending[good]
            beta[idx[acc]] = cand[acc]
            ll[idx[acc]], grad[idx[acc]], info[idx[acc]] = ll_c[good], g_c[good], i_c[good]
            pending = pending[~good]
            if pending.size == 0:
                break
            shrink[pending] /= 2.0
            cand[pending] = beta[idx[pending]] + shrink[pending, None] * step[pending]
        failed[idx[pending]] = True
        previous[idx] = np.where(shrink == 1.0, size, np.inf)
    params = np.where((done & ~failed)[:, None], beta, np.nan)
    return params, done & ~failed, iters, ll


def fit_batch(
    y: np.ndarray,
    x: np.ndarray,
    weights: DrawWeights,
    *,
    link: Link,
    start: np.ndarray,
    extra: DrawColumns | None = None,
    skip: np.ndarray | None = None,
    tol: float = TOLERANCE,
    max_iter: int = MAX_ITERATIONS,
) -> BatchFit:
    """Probit or logit of ``y`` on [x, extra] once per draw of ``weights``.

    ``x`` (n, u) is shared by all draws; ``extra`` adds columns that differ by draw;
    ``start`` is (k,) or (B, k). Draws flagged in ``skip`` are not fitted (reported as
    failed). Draws that fail to converge get NaN parameters; nothing is raised here.
    """
    b = weights.n_draws
    k = x.shape[1] + (0 if extra is None else extra.n_columns)
    start = np.broadcast_to(np.asarray(start, dtype=np.float64), (b, k))
    params = np.full((b, k), np.nan)
    converged = np.zeros(b, bool)
    iterations = np.zeros(b, np.int64)
    ll = np.full(b, np.nan)
    todo = np.arange(b) if skip is None else np.flatnonzero(~skip)
    for first in range(0, todo.size, MAX_DRAWS_PER_CHUNK):
        draws = todo[first : first + MAX_DRAWS_PER_CHUNK]
        p, c, it, lk = _newton_chunk(y, x, weights, extra, link, start[draws], draws, tol, max_iter)
        params[draws], converged[draws], iterations[draws], ll[draws] = p, c, it, lk
    return BatchFit(params, converged, iterations, ll)


@dataclass(frozen=True)
class BinaryFit:
    """One weighted probit or logit fit."""

    link: str
    params: np.ndarray  # (k,)
    log_likelihood: float
    information: np.ndarray  # (k, k): minus the Hessian of the weighted log-likelihood
    iterations: int


def fit_binary(
    y: np.ndarray,
    x: np.ndarray,
    *,
    link: Link,
    weights: np.ndarray | None = None,
    start: np.ndarray | None = None,
    what: str = "the outcome",
) -> BinaryFit:
    """Weighted probit or logit by Newton-Raphson (one draw of ``fit_batch``).

    Raises ValueError with a plain sentence when the fit does not converge (usually
    perfect prediction). ``what`` names the outcome in that message.
    """
    n, k = x.shape
    w = single_weights(n, weights)
    fit = fit_batch(y, x, w, link=link, start=np.zeros(k) if start is None else start)
    if not fit.converged[0]:
        raise ValueError(
            f"the {link} fit of {what} " + _NOT_CONVERGED.format(iters=MAX_ITERATIONS, what=what)
        )
    params = fit.params[0]
    ll, _, info = _evaluate(y, x, w, None, link, params[None, :], np.zeros(1, np.int64))
    return BinaryFit(link, params, float(ll[0]), info[0], int(fit.iterations[0]))


def least_squares_batch(target: np.ndarray, x: np.ndarray, weights: DrawWeights) -> np.ndarray:
    """Weighted least-squares coefficients of ``target`` on ``x``, one row per draw."""
    n, k = x.shape
    b = weights.n_draws
    draws = np.arange(b)
    iu, ju = _pairs(k)
    packed = np.zeros((b, iu.size))
    xty = np.zeros((b, k))
    for start, stop in _row_blocks(n, max(b, iu.size)):
        xr = x[start:stop]
        f = weights.block(draws, start, stop)
        packed += f @ (xr[:, iu] * xr[:, ju])
        f *= target[start:stop]
        xty += f @ xr
    return solve_spd(_unpack(packed, k), xty)


@dataclass(frozen=True)
class PartialEffects:
    """Average partial effect of one column per draw, and for a 0/1 column the average
    structural function with that column set to 1 and to 0 for every row."""

    ape: np.ndarray  # (B,)
    asf_one: np.ndarray | None
    asf_zero: np.ndarray | None


def partial_effects(
    x: np.ndarray,
    weights: DrawWeights,
    *,
    link: Link,
    params: np.ndarray,
    column: int,
    binary: bool,
    extra: DrawColumns | None = None,
) -> PartialEffects:
    """Weighted sample averages of the effect of column ``column`` of ``x`` on P(y = 1).

    Each row keeps its own values of the other regressors (draw columns included, e.g. its
    first-stage residual): for a 0/1 column the effect is mean F(index with it at 1) minus
    mean F(index with it at 0); for a continuous column the mean derivative b f(index).
    """
    n, u = x.shape
    b = weights.n_draws
    draws = np.arange(b)
    total = np.zeros(b)
    one = np.zeros(b)
    zero = np.zeros(b)
    coef = params[:, column][:, None]
    for start, stop in _row_blocks(n, b):
        xr = x[start:stop]
        f = weights.block(draws, start, stop)
        eta = params[:, :u] @ xr.T
        if extra is not None:
            _add_draw_columns(eta, params[:, u:], extra.block(draws, start, stop))
        total += f.sum(axis=1)
        if binary:
            dr = xr[:, column]
            one += np.einsum("an,an->a", f, link_cdf(link, eta + coef * (1.0 - dr)))
            zero += np.einsum("an,an->a", f, link_cdf(link, eta - coef * dr))
        else:
            one += np.einsum("an,an->a", f, link_density(link, eta))
    if binary:
        return PartialEffects(one / total - zero / total, one / total, zero / total)
    return PartialEffects(params[:, column] * one / total, None, None)


# ------------------------------------------------------------- bivariate normal, probit
def bvn_cdf(h: np.ndarray, k: np.ndarray, r: np.ndarray | float) -> np.ndarray:
    """P(X <= h, Y <= k) for standard normals with correlation r, |r| < 1.

    Owen (1956): Phi2(h, k; r) = [Phi(h) + Phi(k)] / 2 - T(h, a_h) - T(k, a_k) - beta, with
    a_h = (k - r h) / (h s), a_k = (h - r k) / (k s), s = sqrt(1 - r^2), and beta = 1/2
    when hk < 0 or (hk = 0 and h + k < 0), else 0. An exact zero is moved to 1e-150 (the
    function is continuous there) so that the ratios stay defined.
    """
    h = np.where(h == 0.0, 1e-150, h)
    k = np.where(k == 0.0, 1e-150, k)
    s = np.sqrt(1.0 - np.square(r))
    with np.errstate(over="ignore", divide="ignore"):
        t1 = special.owens_t(h, (k - r * h) / (h * s))
        t2 = special.owens_t(k, (h - r * k) / (k * s))
    hk = h * k
    beta = np.where((hk < 0) | ((hk == 0) & (h + k < 0)), 0.5, 0.0)
    p = 0.5 * (special.ndtr(h) + special.ndtr(k)) - t1 - t2 - beta
    return np.clip(p, 0.0, 1.0)


@dataclass(frozen=True)
class BivariateData:
    """Recursive bivariate probit: y on [d, w] (x_outcome), d on [z, w] (x_treatment)."""

    y: np.ndarray
    d: np.ndarray
    x_outcome: np.ndarray
    x_treatment: np.ndarray
    weights: np.ndarray | None

    @property
    def k_outcome(self) -> int:
        return int(self.x_outcome.shape[1])

    @property
    def k(self) -> int:
        return self.k_outcome + int(self.x_treatment.shape[1]) + 1


@dataclass(frozen=True)
class BivariateTerms:
    """Log-likelihood and derivatives at one parameter vector [b, g, atanh(rho)]."""

    log_likelihood: float
    gradient: np.ndarray  # (k,)
    information: np.ndarray | None  # (k, k): minus the Hessian
    scores: np.ndarray | None  # (n, k): per-row weighted scores


def bivariate_terms(
    data: BivariateData, params: np.ndarray, *, hessian: bool = True, scores: bool = False
) -> BivariateTerms:
    """Weighted log-likelihood sum_i w_i log Phi2(q1 e1, q2 e2, q1 q2 rho), analytic
    gradient and Hessian (q = 2 * outcome - 1; e1, e2 the two indexes; rho = tanh(t)).

    With P = Phi2(a, b, r), s^2 = 1 - r^2 and f the bivariate normal density:
    P_a = phi(a) Phi((b - r a) / s), P_r = f (Plackett 1954), P_aa = -a P_a - r f,
    P_ab = f, P_ar = -f (a - r b) / s^2, P_rr = f [r / s^2 + (ab s^2 - r Q) / s^4] with
    Q = a^2 - 2 r a b + b^2; second derivatives of log P follow as P_xy / P - P_x P_y / P^2.
    """
    k1 = data.k_outcome
    x1, x2 = data.x_outcome, data.x_treatment
    b, g, t = params[:k1], params[k1:-1], float(params[-1])
    rho = math.tanh(t)
    q1 = 2.0 * data.y - 1.0
    q2 = 2.0 * data.d - 1.0
    a = q1 * (x1 @ b)
    c = q2 * (x2 @ g)
    r = q1 * q2 * rho
    s2 = 1.0 - rho * rho
    s = math.sqrt(s2)
    w = np.ones(data.y.shape[0]) if data.weights is None else data.weights
    with np.errstate(under="ignore", divide="ignore", invalid="ignore"):
        p = np.maximum(bvn_cdf(a, c, r), np.finfo(float).tiny)
        pa = link_density("probit", a) * special.ndtr((c - r * a) / s)
        pc = link_density("probit", c) * special.ndtr((a - r * c) / s)
        quad = a * a - 2.0 * r * a * c + c * c
        f = np.exp(-quad / (2.0 * s2)) / (2.0 * math.pi * s)
        la, lc, lr = pa / p, pc / p, f / p
    dt = 1.0 - rho * rho  # d rho / d t
    g1 = w * q1 * la
    g2 = w * q2 * lc
    gt = w * q1 * q2 * lr * dt
    grad = np.concatenate([g1 @ x1, g2 @ x2, [gt.sum()]])
    ll = float(w @ np.log(p))
    info = None
    if hessian:
        l_aa = (-a * pa - r * f) / p - la * la
        l_cc = (-c * pc - r * f) / p - lc * lc
        l_ac = lr - la * lc
        l_ar = -lr * (a - r * c) / s2 - la * lr
        l_cr = -lr * (c - r * a) / s2 - lc * lr
        l_rr = lr * (r / s2 + (a * c * s2 - r * quad) / (s2 * s2)) - lr * lr
        h11 = w * l_aa
        h22 = w * l_cc
        h12 = w * q1 * q2 * l_ac
        h1t = w * q2 * l_ar * dt
        h2t = w * q1 * l_cr * dt
        htt = w * (l_rr * dt * dt - 2.0 * rho * dt * q1 * q2 * lr)
        hess = np.empty((data.k, data.k))
        hess[:k1, :k1] = (x1 * h11[:, None]).T @ x1
        hess[k1:-1, k1:-1] = (x2 * h22[:, None]).T @ x2
        hess[:k1, k1:-1] = (x1 * h12[:, None]).T @ x2
        hess[k1:-1, :k1] = hess[:k1, k1:-1].T
        hess[:k1, -1] = hess[-1, :k1] = h1t @ x1
        hess[k1:-1, -1] = hess[-1, k1:-1] = h2t @ x2
        hess[-1, -1] = htt.sum()
        info = -hess
    sc = None
    if scores:
        sc = np.column_stack([x1 * g1[:, None], x2 * g2[:, None], gt])
    return BivariateTerms(ll, grad, info, sc)


@dataclass(frozen=True)
class BivariateFit:
    params: np.ndarray  # [b (outcome equation), g (treatment equation), atanh(rho)]
    log_likelihood: float
    gradient: np.ndarray
    information: np.ndarray
    iterations: int


MAX_ATANH_RHO = 7.0  # |rho| > 0.999998: correlation at the boundary


def _ascent_direction(info: np.ndarray, grad: np.ndarray) -> np.ndarray:
    """Newton step; where minus the Hessian is not positive definite (away from the
    optimum, the bivariate likelihood is not concave), its eigenvalues are made positive."""
    try:
        chol = np.linalg.cholesky(info)
        return np.linalg.solve(chol.T, np.linalg.solve(chol, grad))
    except np.linalg.LinAlgError:
        vals, vecs = np.linalg.eigh(info)
        floor = 1e-8 * max(float(np.abs(vals).max()), 1.0)
        vals = np.maximum(np.abs(vals), floor)
        return vecs @ ((vecs.T @ grad) / vals)


def fit_bivariate_probit(
    data: BivariateData, start: np.ndarray, *, tol: float = TOLERANCE
) -> BivariateFit:
    """Maximum likelihood of the recursive bivariate probit by Newton-Raphson with the
    analytic Hessian and step halving. ValueError when it does not converge or when the
    correlation runs to +-1."""
    theta = np.asarray(start, dtype=np.float64).copy()
    terms = bivariate_terms(data, theta)
    for it in range(1, MAX_ITERATIONS + 1):
        assert terms.information is not None
        step = _ascent_direction(terms.information, terms.gradient)
        if not np.isfinite(step).all():
            break
        scale = 1.0
        for _ in range(MAX_HALVINGS):
            cand = theta + scale * step
            new = bivariate_terms(data, cand)
            if np.isfinite(new.log_likelihood) and new.log_likelihood >= (
                terms.log_likelihood - 1e-12 * (1.0 + abs(terms.log_likelihood))
            ):
                break
            scale /= 2.0
        else:
            break
        theta, terms = cand, new
        if abs(theta[-1]) > MAX_ATANH_RHO:
            raise ValueError(
                "the bivariate probit's error correlation runs to +-1, so the model is not "
                "identified in these data (often a weak instrument for the treatment)"
            )
        if np.abs(scale * step).max() <= tol * (1.0 + np.abs(theta).max()):
            assert terms.information is not None
            return BivariateFit(theta, terms.log_likelihood, terms.gradient, terms.information, it)
    raise ValueError(
        "the bivariate probit "
        + _NOT_CONVERGED.format(iters=MAX_ITERATIONS, what="the outcome or the treatment")
    )
