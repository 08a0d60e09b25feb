"""Folds and resamples that keep a cluster's rows together.

A cluster is a set of rows that belong together: the visits of one person,
the patients of one site, the admissions of one period.  When the study
names a cluster column (``data.cluster_column``), the validations deal whole
clusters to folds (the internal validation's k-fold cross-validation) and
draw whole clusters (the bootstrap), so no cluster is both in a training set
and in the data it is tested on.  Inside the derivation procedure (the
selection's and the penalty's folds) whole clusters are dealt only when a
cluster is a person (``data.cluster_kind: person``); sites and periods are
split by rows there (see :func:`riskvet.modelling.derive.derive`).

:func:`cluster_codes` numbers clusters in order of first appearance, so that
data with one row per cluster get code i for row i: the cluster bootstrap of
such data is then the row bootstrap, draw for draw.
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np
import pandas as pd

from ..errors import DesignError, problem

__all__ = ["cluster_codes", "cluster_members", "draw_clusters", "cluster_folds"]


def cluster_codes(labels: Any) -> np.ndarray:
    """Cluster labels as codes 0..G-1, numbered in order of first appearance.

    Parameters
    ----------
    labels : array-like, shape (n,)
        Any hashable label per row (site names, person ids, period numbers).

    Returns
    -------
    ndarray of int64, shape (n,)
    """
    values = np.asarray(labels, dtype=object)
    if values.ndim != 1:
        raise DesignError(problem("clusters", allowed="one label per row (a 1-d array)", received=f"shape {values.shape}"))
    missing = np.flatnonzero(pd.isna(values)) if values.size else np.array([], dtype=np.int64)
    if missing.size:
        raise DesignError(problem("clusters", allowed="a cluster label for every row (none missing)",
                                  received=f"{missing.size} missing, rows {(missing[:5] + 1).tolist()}"))
    seen: dict[Any, int] = {}
    return np.fromiter((seen.setdefault(v, len(seen)) for v in values.tolist()), dtype=np.int64, count=values.shape[0])


def cluster_members(codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Rows of every cluster: (rows sorted by cluster, start of each cluster in them); cluster g is rows[start[g]:start[g+1]]."""
    codes = np.asarray(codes, dtype=np.int64)
    rows = np.argsort(codes, kind="stable")
    start = np.concatenate([[0], np.cumsum(np.bincount(codes, minlength=int(codes.max()) + 1 if codes.size else 0))])
    return rows, start


def draw_clusters(rng: np.random.Generator, members: tuple[np.ndarray, np.ndarray]) -> np.ndarray:
    """One cluster bootstrap resample: G clusters drawn with replacement, returned as the rows they bring.

    Parameters
    ----------
    rng : numpy.random.Generator
        The replicate's stream; exactly ``G`` integers in ``[0, G)`` are drawn
        from it (the same call as the row bootstrap's ``n`` integers in
        ``[0, n)``).
    members : tuple
        From :func:`cluster_members`.

    Returns
    -------
    ndarray of int64
        The rows of the drawn clusters, cluster by cluster in the order
        drawn; a cluster drawn twice brings its rows twice.

    Notes
    -----
    The cluster (or "case resampling at the top level") bootstrap resamples
    the independent units, so the dependence of rows within a cluster is
    kept in every resample (Davison & Hinkley 1997, section 3.8; Field &
    Welsh 2007).

    References
    ----------
    Davison AC, Hinkley DV. Bootstrap Methods and their Application.
    Cambridge University Press, 1997.

    Field CA, Welsh AH. Bootstrapping clustered data. Journal of the Royal
    Statistical Society, Series B 2007;69(3):369-390.
    """
    rows, start = members
    G = start.shape[0] - 1
    drawn = rng.integers(0, G, size=G)
    lengths = start[drawn + 1] - start[drawn]
    # the rows of drawn cluster c are rows[start[c] : start[c] + length]; build them without a Python loop
    offsets = np.repeat(start[drawn] - np.concatenate([[0], np.cumsum(lengths)[:-1]]), lengths)
    return rows[np.arange(int(lengths.sum())) + offsets]


def cluster_folds(codes: np.ndarray, y: np.ndarray, n_folds: int, rng: np.random.Generator,
                  levels: Sequence[str] | None = None, *, where: str = "n_folds") -> np.ndarray:
    """Fold of each row, dealing whole clusters to folds.

    Parameters
    ----------
    codes : array of int, shape (n,)
        Cluster code of every row (:func:`cluster_codes`).
    y : array of int, shape (n,)
        Outcome codes; clusters are dealt in order of their mean outcome, so
        that each fold gets a similar mix (an approximate stratification).
    n_folds : int
        Folds; at most the number of clusters.
    rng : numpy.random.Generator
        Source of the random order of the clusters.
    levels : sequence of str, optional
        Level names for the message.
    where : str
        The option named in the message.

    Returns
    -------
    ndarray of int64, shape (n,)

    Raises
    ------
    DesignError
        Fewer clusters than folds.

    Notes
    -----
    The clusters are put in random order, then (stably) in order of their
    mean outcome code, and dealt to folds in turn: 0, 1, ..., k-1, 0, 1, ...
    Every row of a cluster gets its cluster's fold (common practice for
    grouped cross-validation).
    """
    codes = np.asarray(codes, dtype=np.int64)
    y = np.asarray(y)
    G = int(codes.max()) + 1 if codes.size else 0
    present = np.unique(codes)
    if present.size < n_folds:
        raise DesignError(problem(
            where, allowed=f"at most the number of clusters ({present.size}): whole clusters are dealt to folds",
            received=f"{n_folds} folds",
        ))
    size = np.bincount(codes, minlength=G)
    mean_y = np.bincount(codes, weights=y, minlength=G) / np.maximum(size, 1)
    order = present[rng.permutation(present.size)]
    order = order[np.argsort(mean_y[order], kind="stable")]
    fold_of = np.full(G, -1, dtype=np.int64)
    fold_of[order] = np.arange(order.size) % n_folds
    return fold_of[codes]
