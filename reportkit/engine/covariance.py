"""Covariance of score sums: classical, heteroskedasticity-robust, one- and two-way cluster.

Every estimator's covariance here is a sandwich bread^-1 meat bread^-1; estimators
differ only in the bread and in which score vectors enter the meat. This module computes
the meat (the covariance of the score sums) and the small-sample factor, with the
conventions of linearmodels' ``debiased=True`` (stated once in the report):

- classical: s^2 = e'e / (n - k)
- robust (White 1980, HC1): sum_i s_i s_i' * n / (n - k)
- cluster (Liang & Zeger 1986): sum_g S_g S_g' * (n - 1) / (n - k) * G / (G - 1)
- two-way cluster (Cameron, Gelbach & Miller 2011): V_1 + V_2 - V_12, each term with
  its own G in the factor above, V_12 clustered on the intersection of the two.

k counts every column the model uses, absorbed fixed effects and the constant included.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
import scipy.sparse

CovType = Literal["classical", "robust", "cluster"]

COVARIANCE_DESCRIPTIONS: dict[str, str] = {
    "classical": "classical (errors assumed independent and homoskedastic)",
    "robust": "heteroskedasticity-robust (White 1980, HC1 small-sample factor)",
    "cluster": "cluster-robust (Liang & Zeger 1986)",
}


@dataclass(frozen=True)
class ClusterIndex:
    """Integer cluster codes for one dimension, with a sparse summing matrix."""

    codes: np.ndarray  # (n,) ints 0..G-1
    n_groups: int
    summer: scipy.sparse.csr_matrix  # (G, n), sums rows by cluster

    @classmethod
    def from_codes(cls, codes: np.ndarray) -> ClusterIndex:
        uniq, inv = np.unique(np.asarray(codes), return_inverse=True)
        n = inv.shape[0]
        g = uniq.shape[0]
        summer = scipy.sparse.csr_matrix(
            (np.ones(n), (inv, np.arange(n))), shape=(g, n), dtype=float
        )
        return cls(codes=inv, n_groups=g, summer=summer)

    def sums(self, scores: np.ndarray) -> np.ndarray:
        """(n, k) scores -> (G, k) cluster sums."""
        return np.asarray(self.summer @ scores)


@dataclass(frozen=True)
class CovarianceSpec:
    """Which covariance to compute, with its cluster structure prepared once."""

    kind: CovType
    clusters: tuple[ClusterIndex, ...] = ()  # one or two dimensions for 'cluster'
    intersection: ClusterIndex | None = None  # two-way only

    @classmethod
    def build(cls, kind: CovType, cluster_codes: np.ndarray | None = None) -> CovarianceSpec:
        if kind != "cluster":
            return cls(kind=kind)
        if cluster_codes is None or cluster_codes.ndim != 2 or cluster_codes.shape[1] not in (1, 2):
            raise ValueError("cluster covariance needs one or two columns of cluster codes")
        dims = tuple(
            ClusterIndex.from_codes(cluster_codes[:, j]) for j in range(cluster_codes.shape[1])
        )
        inter = None
        if len(dims) == 2:
            a, b = dims[0].codes.astype(np.int64), dims[1].codes.astype(np.int64)
            inter = ClusterIndex.from_codes(a * (int(b.max()) + 1) + b)
        return cls(kind=kind, clusters=dims, intersection=inter)

    @property
    def n_clusters(self) -> list[int]:
        return [c.n_groups for c in self.clusters]

    @property
    def min_clusters(self) -> int | None:
        return min(self.n_clusters) if self.clusters else None

    def meat(self, scores: np.ndarray, k: int) -> np.ndarray:
        """Small-sample-scaled covariance of the score sums (robust or cluster).

        ``scores`` is (n, m): one score vector per observation; ``k`` the number of
        model columns for the small-sample factor.
        """
        n = scores.shape[0]
        if self.kind == "robust":
            return (scores.T @ scores) * (n / (n - k))
        if self.kind != "cluster":
            raise ValueError("meat() is for robust and cluster covariances")

        def one(ix: ClusterIndex) -> np.ndarray:
            s = ix.sums(scores)
            g = ix.n_groups
            return (s.T @ s) * ((n - 1) / (n - k) * g / (g - 1))

        if len(self.clusters) == 1:
            return one(self.clusters[0])
        assert self.intersection is not None
        out = one(self.clusters[0]) + one(self.clusters[1]) - one(self.intersection)
        return (out + out.T) / 2

    def raw_meat(self, scores: np.ndarray) -> np.ndarray:
        """Unscaled covariance of score sums (for GMM weight matrices and J)."""
        if self.kind == "robust":
            return scores.T @ scores
        if self.kind == "cluster":
            if len(self.clusters) == 1:
                s = self.clusters[0].sums(scores)
                return s.T @ s
            assert self.intersection is not None
            parts = [ix.sums(scores) for ix in (*self.clusters, self.intersection)]
            out = parts[0].T @ parts[0] + parts[1].T @ parts[1] - parts[2].T @ parts[2]
            return (out + out.T) / 2
        raise ValueError("raw_meat() is for robust and cluster covariances")

    def describe(self, names: tuple[str, ...] = ()) -> str:
        base = COVARIANCE_DESCRIPTIONS[self.kind]
        if self.kind == "cluster":
            by = " and ".join(names) if names else "cluster"
            way = "two-way, Cameron, Gelbach & Miller 2011; " if len(self.clusters) == 2 else ""
            counts = ", ".join(str(g) for g in self.n_clusters)
            return f"{base}, clustered by {by} ({way}{counts} clusters)"
        return base

    def small_sample_rule(self) -> str:
        if self.kind == "classical":
            return "s^2 = e'e / (n - k)"
        if self.kind == "robust":
            return "scores' covariance scaled by n / (n - k)"
        return "each cluster term scaled by (n - 1) / (n - k) x G / (G - 1)"


def sandwich(bread_inv: np.ndarray, meat: np.ndarray) -> np.ndarray:
    out = bread_inv @ meat @ bread_inv
    return (out + out.T) / 2
