"""HDBSCAN's prediction and soft membership of new lots, computed for many lots at once.

``hdbscan.approximate_predict`` and ``hdbscan.membership_vector`` (the hdbscan
package's prediction and soft clustering) loop over the points in Python, about
25 and 80 microseconds a lot: minutes for the lots outside the fitted sample of
a large range or for a million new lots. This module computes the same numbers
with array operations (:func:`predict_clusters`, :func:`soft_membership`). The
soft membership, per lot:

1. its nearest mutual-reachability neighbour among the fitted lots and the
   lambda at which it joins it (hdbscan's ``_find_neighbor_and_lambda``), capped
   at the lambda at which that neighbour leaves its own cluster;
2. the distance part: one over the distance to the nearest exemplar of each
   cluster, normalised (``dist_membership_vector``, no softmax);
3. the outlier part: for each cluster, ``max_lambda / (max_lambda - height)``,
   where ``height`` is the lambda at which the neighbour's cluster merges with
   that cluster in the condensed tree (or the lot's own lambda when one lies
   inside the other), through a softmax (``outlier_membership_vector``);
4. ``distance ** 0.5 * outlier ** 2``, normalised, times the probability of
   being in some cluster (``prob_in_some_cluster``).

The merge heights depend only on the pair of clusters, so they are tabulated
once per clusterer. ``tests/test_assign.py`` checks both against hdbscan's own
functions.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

DBL_MAX = np.finfo(np.double).max


@dataclass(frozen=True)
class SoftTables:
    """What the soft membership of new lots needs of a fitted clusterer, as arrays.

    Attributes
    ----------
    clusterer : hdbscan.HDBSCAN
        Fitted, with prediction data.
    clusters : ndarray of int
        The selected clusters (condensed-tree labels), sorted: hdbscan's column order.
    min_samples : int
    parent_of_point, lambda_of_point : ndarray
        Each fitted lot's cluster in the condensed tree and the lambda it leaves it at.
    height : ndarray, shape (n_tree_clusters, n_clusters)
        Merge lambda of a tree cluster with each selected cluster; NaN where the
        lot's own lambda applies (one cluster lies inside the other).
    leaf_max_lambda : ndarray
        ``leaf_max_lambdas`` by tree cluster (offset by the smallest cluster label).
    offset : int
        The smallest condensed-tree cluster label (the number of fitted lots).
    up, up_lambda : ndarray
        Each tree cluster's parent in the cluster tree (-1 for none) and the
        lambda it splits off at (NaN for none).
    label : ndarray of int
        Each tree cluster's prediction label (``cluster_map``), -1 for none.
    max_lambda : ndarray
        ``max_lambdas`` by tree cluster (NaN for none).
    root : int
        The root of the cluster tree.
    exemplar_trees : tuple of sklearn.neighbors.KDTree
        One over each cluster's exemplars, in column order.
    """

    clusterer: object
    clusters: np.ndarray
    min_samples: int
    parent_of_point: np.ndarray
    lambda_of_point: np.ndarray
    height: np.ndarray
    leaf_max_lambda: np.ndarray
    offset: int
    up: np.ndarray
    up_lambda: np.ndarray
    label: np.ndarray
    max_lambda: np.ndarray
    root: int
    exemplar_trees: tuple[object, ...]


def _merge_heights(parents: np.ndarray, children: np.ndarray, lambdas: np.ndarray,
                   point_cluster: int, clusters: np.ndarray) -> np.ndarray:
    """hdbscan's ``merge_height`` for one tree cluster, NaN where the lot's lambda applies."""
    parent_of = dict(zip(children.tolist(), parents.tolist()))
    lambda_of = dict(zip(children.tolist(), lambdas.tolist()))
    out = np.full(len(clusters), np.nan)
    for i, target in enumerate(clusters.tolist()):
        left, right = point_cluster, target
        took_left = took_right = False
        last = left
        while left != right:
            if left > right:
                took_left, last = True, left
                left = parent_of.get(left, left)
            else:
                took_right, last = True, right
                right = parent_of.get(right, right)
        if took_left and took_right:
            out[i] = lambda_of[last]
    return out


def soft_tables(clusterer: object) -> SoftTables:
    """Tabulate what :func:`soft_membership` needs of ``clusterer`` (once per clusterer)."""
    from sklearn.neighbors import KDTree

    data = clusterer.prediction_data_
    tree = clusterer.condensed_tree_._raw_tree
    clusters = np.array(sorted(clusterer.condensed_tree_._select_clusters()), dtype=np.intp)
    cluster_tree = data.cluster_tree
    parents = cluster_tree["parent"].astype(np.intp)
    children = cluster_tree["child"].astype(np.intp)
    lambdas = cluster_tree["lambda_val"].astype(np.float64)
    n_points = len(data.raw_data)
    offset = int(tree["parent"].min())
    top = int(max(tree["parent"].max(), tree["child"].max())) + 1
    height = np.full((max(top - offset, 1), len(clusters)), np.nan)
    for c in range(offset, top):
        height[c - offset] = _merge_heights(parents, children, lambdas, c, clusters)
    leaf_max = np.zeros(max(top - offset, 1))
    for c, value in data.leaf_max_lambdas.items():
        leaf_max[int(c) - offset] = value
    points = tree[tree["child"] < n_points]
    parent_of_point = np.zeros(n_points, dtype=np.intp)
    lambda_of_point = np.zeros(n_points)
    parent_of_point[points["child"]] = points["parent"]
    lambda_of_point[points["child"]] = points["lambda_val"]
    size = max(top - offset, 1)
    up = np.full(size, -1, dtype=np.intp)
    up_lambda = np.full(size, np.nan)
    up[children - offset] = parents
    up_lambda[children - offset] = lambdas
    label = np.full(size, -1, dtype=np.intp)
    for c, n in data.cluster_map.items():
        label[int(c) - offset] = int(n)
    max_lambda = np.full(size, np.nan)
    for c, value in data.max_lambdas.items():
        max_lambda[int(c) - offset] = value
    root = int(parents.min()) if len(parents) else offset
    return SoftTables(clusterer=clusterer, clusters=clusters,
                      min_samples=int(clusterer.min_samples or clusterer.min_cluster_size),
                      parent_of_point=parent_of_point, lambda_of_point=lambda_of_point,
                      height=height, leaf_max_lambda=leaf_max, offset=offset, up=up,
                      up_lambda=up_lambda, label=label, max_lambda=max_lambda, root=root,
                      exemplar_trees=tuple(KDTree(e) for e in data.exemplars))


@dataclass(frozen=True)
class Reach:
    """Each lot's nearest mutual-reachability neighbour among the fitted lots, and its lambda.

    The prediction and the soft membership both start from it; computing it
    once serves both.
    """

    neighbour: np.ndarray
    lam: np.ndarray

    def take(self, rows: np.ndarray) -> Reach:
        return Reach(self.neighbour[rows], self.lam[rows])


def reach(tables: SoftTables, points: np.ndarray) -> Reach:
    """:class:`Reach` of lots at ``points`` (one query of HDBSCAN's own tree)."""
    return Reach(*_neighbour_and_lambda(tables, np.asarray(points, dtype=np.float64)))


def _neighbour_and_lambda(tables: SoftTables, points: np.ndarray
                          ) -> tuple[np.ndarray, np.ndarray]:
    """Vectorised ``_find_neighbor_and_lambda``: the neighbour and the lot's lambda."""
    data = tables.clusterer.prediction_data_
    k = 2 * tables.min_samples
    dist, idx = data.tree.query(points, k=k)
    mutual = np.maximum(np.maximum(data.core_distances[idx], dist[:, [tables.min_samples]]),
                        dist)
    best = mutual.argmin(axis=1)
    rows = np.arange(len(points))
    neighbour = idx[rows, best]
    reach = mutual[rows, best]
    with np.errstate(divide="ignore"):
        lam = np.where(reach > 0.0, 1.0 / np.where(reach > 0, reach, 1.0), DBL_MAX)
    return neighbour, lam


def predict_clusters(tables: SoftTables, points: np.ndarray, near: Reach | None = None
                     ) -> tuple[np.ndarray, np.ndarray]:
    """HDBSCAN's approximate prediction of lots at ``points``, as ``hdbscan.approximate_predict``.

    The lot joins its nearest mutual-reachability neighbour's cluster, walked up
    the cluster tree while the lot's lambda lies below the lambda a cluster
    splits off at; its probability is its lambda over the cluster's largest.

    Returns
    -------
    labels : ndarray of int
        Prediction labels (``cluster_map``), -1 for noise.
    probabilities : ndarray of float
    """
    points = np.asarray(points, dtype=np.float64)
    if not len(points):
        return np.zeros(0, dtype=int), np.zeros(0)
    if not len(tables.clusterer.prediction_data_.cluster_tree):
        return np.full(len(points), -1, dtype=int), np.zeros(len(points))
    near = near or reach(tables, points)
    neighbour, lam = near.neighbour, near.lam
    cluster = tables.parent_of_point[neighbour]
    walking = tables.lambda_of_point[neighbour] > lam
    while walking.any():
        walking &= cluster > tables.root
        at = cluster[walking] - tables.offset
        steps = (tables.up[at] >= 0) & (tables.up_lambda[at] >= lam[walking])
        rows = np.flatnonzero(walking)
        cluster[rows[steps]] = tables.up[at[steps]]
        walking[rows[~steps]] = False
    labels = tables.label[cluster - tables.offset]
    top = tables.max_lambda[cluster - tables.offset]
    with np.errstate(invalid="ignore", divide="ignore"):
        prob = np.where(top > 0.0, np.minimum(top, lam) / np.where(top > 0, top, 1.0), 1.0)
    return labels.astype(int), np.where(labels >= 0, prob, 0.0)


def _distance_part(tables: SoftTables, points: np.ndarray) -> np.ndarray:
    """Normalised inverse distance to each cluster's nearest exemplar.

    One k-d tree per cluster over its exemplars (exact, the same Euclidean
    distance as hdbscan's metric; measured 1.6x faster than matrix products for
    5,000 exemplars), the clusters queried on two threads (the tree query
    releases the GIL).
    """
    from concurrent.futures import ThreadPoolExecutor

    def nearest_to(tree: object) -> np.ndarray:
        return tree.query(points, k=1)[0][:, 0]

    with ThreadPoolExecutor(max_workers=2) as pool:
        nearest = np.column_stack(list(pool.map(nearest_to, tables.exemplar_trees)))
    with np.errstate(divide="ignore"):
        inverse = np.where(nearest != 0, 1.0 / np.where(nearest != 0, nearest, 1.0),
                           DBL_MAX / nearest.shape[1])
    return inverse / inverse.sum(axis=1, keepdims=True)


def soft_membership(tables: SoftTables, points: np.ndarray, near: Reach | None = None
                    ) -> np.ndarray:
    """Soft membership of lots at ``points`` to each selected cluster, as hdbscan computes it.

    Parameters
    ----------
    tables : SoftTables
    points : ndarray, shape (n, d)
        Clustering-space coordinates.

    Returns
    -------
    ndarray, shape (n, n_clusters)
        In hdbscan's column order (``sorted(_select_clusters())``), equal to
        ``hdbscan.membership_vector(clusterer, points)``.
    """
    points = np.asarray(points, dtype=np.float64)
    if not len(points):
        return np.zeros((0, len(tables.clusters)))
    near = near or reach(tables, points)
    neighbour, lam = near.neighbour, near.lam
    own = tables.lambda_of_point[neighbour]
    lam = np.where(own <= lam, own, lam)  # membership_vector caps it at the neighbour's own
    home = tables.parent_of_point[neighbour] - tables.offset
    merged = tables.height[home]  # (n, clusters); NaN: the lot's own lambda
    # per_cluster_scores takes the lambda as a float32 (its Cython signature)
    lam32 = lam.astype(np.float32).astype(np.float64)
    max_lambda = tables.leaf_max_lambda[home][:, None]
    heights = np.where(np.isnan(merged), lam32[:, None], merged)
    denominator = max_lambda - heights
    scores = max_lambda / np.where(denominator <= 0, 1e-8, denominator)
    outlier = np.exp(scores - np.nanmax(scores, axis=1, keepdims=True))
    outlier /= outlier.sum(axis=1, keepdims=True)
    result = _distance_part(tables, points) ** 0.5 * outlier ** 2.0
    result /= result.sum(axis=1, keepdims=True)
    # prob_in_some_cluster: the lot's lambda unrounded
    full = np.where(np.isnan(merged), lam[:, None], merged)
    point_height = full.max(axis=1)
    nearest_cluster = full.argmax(axis=1)
    cluster_max = tables.leaf_max_lambda[tables.clusters[nearest_cluster] - tables.offset]
    return result * (point_height / (np.maximum(lam, cluster_max) + 1e-8))[:, None]
