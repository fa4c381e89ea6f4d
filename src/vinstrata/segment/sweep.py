"""The HDBSCAN cluster-size sweep: candidates, their relative validity and the pick."""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from vinstrata.segment.joins import drop_diffuse, fill_noise, join_split_clusters, lot_groups

TIE = 0.02  # relative-validity difference treated as a tie in the sweep


@dataclass(frozen=True)
class Clustering:
    """One candidate: HDBSCAN in the clustering space, clusters joined where no valley."""

    min_cluster_size: int
    min_samples: int
    clusters: np.ndarray  # raw HDBSCAN labels, -1 noise
    group_of_cluster: np.ndarray  # joined group of each cluster
    probabilities: np.ndarray
    validity: float
    noise_share: float

    @property
    def n_clusters(self) -> int:
        return int(self.group_of_cluster.size)

    @property
    def n_groups(self) -> int:
        return int(self.group_of_cluster.max() + 1) if self.group_of_cluster.size else 0

    @property
    def groups(self) -> np.ndarray:
        """Joined group of each lot, -1 for HDBSCAN noise and for diffuse groups."""
        return lot_groups(self.clusters, self.group_of_cluster)


def default_min_samples(min_cluster_size: int) -> int:
    """``min_samples = "auto"``: 10, or the cluster size when that is smaller."""
    return int(min(10, min_cluster_size))


def sweep_sizes(n_lots: int, fractions: tuple[float, ...]) -> list[int]:
    """Candidate ``min_cluster_size`` values: shares of the lots, at least 10 (or n/3)."""
    floor = max(5, min(10, n_lots // 3))
    sizes = sorted({max(floor, int(round(f * n_lots))) for f in fractions})
    return [s for s in sizes if s < n_lots] or [max(2, n_lots // 2)]


def relative_validity(mst: np.ndarray, labels: np.ndarray) -> float:
    """hdbscan's ``relative_validity_`` for any labels on a mutual-reachability MST.

    The same formula as hdbscan's property (a fast approximation of DBCV,
    Moulavi et al. 2014), so that joined clusters can be scored too; NaN with
    fewer than two clusters.
    """
    labels = np.asarray(labels)
    sizes = np.bincount(labels + 1)
    cluster_size = sizes[1:]
    n_clusters = len(cluster_size)
    if n_clusters < 2:
        return float("nan")
    total = sizes.sum()
    dsc = np.zeros(n_clusters)
    dspc = np.full(n_clusters, np.inf)
    a, b, dist = mst[:, 0].astype(np.intp), mst[:, 1].astype(np.intp), mst[:, 2]
    la, lb = labels[a], labels[b]
    max_distance = dist.max() if dist.size else 0.0
    neither = (la != -1) & (lb != -1)
    same = neither & (la == lb)
    diff = neither & (la != lb)
    if same.any():
        np.maximum.at(dsc, la[same], dist[same])
    if diff.any():
        np.minimum.at(dspc, la[diff], dist[diff])
        np.minimum.at(dspc, lb[diff], dist[diff])
    dspc[np.isinf(dspc)] = 2 * max_distance
    denom = np.maximum(dspc, dsc)
    with np.errstate(invalid="ignore", divide="ignore"):
        v = np.where(denom > 0, (dspc - dsc) / denom, 0.0)
    return float(np.sum(cluster_size * v / total))


def fit_hdbscan(space: np.ndarray, min_cluster_size: int, min_samples: int,
                prediction_data: bool = False) -> object:
    """The hdbscan package's HDBSCAN, fitted with its minimum spanning tree kept."""
    import hdbscan

    return hdbscan.HDBSCAN(
        min_cluster_size=int(min_cluster_size), min_samples=int(min_samples),
        gen_min_span_tree=True, prediction_data=prediction_data,
    ).fit(space)


def sweep_labels(space: np.ndarray, candidates: list[tuple[int, int]]
                 ) -> tuple[dict[tuple[int, int], tuple[np.ndarray, np.ndarray]],
                            dict[int, np.ndarray], dict[tuple[int, int], object]]:
    """HDBSCAN labels and probabilities of every (min_cluster_size, min_samples) candidate.

    The mutual-reachability tree depends on min_samples only, so HDBSCAN is fitted
    once per min_samples and the tree is condensed again for each cluster size, as
    hdbscan itself does inside a fit (its ``_tree_to_labels``); where that helper
    is missing every candidate is fitted in full.

    Returns
    -------
    labels : dict
        (size, samples) -> (labels, probabilities)
    trees : dict
        samples -> minimum spanning tree (for the relative validity)
    fitted : dict
        (size, samples) -> the clusterer, for the candidates fitted in full
    """
    try:
        from hdbscan.hdbscan_ import _tree_to_labels
    except ImportError:  # pragma: no cover - other hdbscan versions
        _tree_to_labels = None
    labels: dict[tuple[int, int], tuple[np.ndarray, np.ndarray]] = {}
    trees: dict[int, np.ndarray] = {}
    fitted: dict[tuple[int, int], object] = {}
    linkage: dict[int, np.ndarray] = {}
    for size, samples in candidates:
        if samples not in trees or _tree_to_labels is None:
            clusterer = fit_hdbscan(space, size, samples)
            fitted[(size, samples)] = clusterer
            trees[samples] = clusterer.minimum_spanning_tree_.to_numpy()
            linkage[samples] = clusterer.single_linkage_tree_.to_numpy()
            labels[(size, samples)] = (np.asarray(clusterer.labels_, dtype=int),
                                       np.asarray(clusterer.probabilities_, dtype=float))
            continue
        out = _tree_to_labels(None, linkage[samples], min_cluster_size=int(size),
                              cluster_selection_method="eom")
        labels[(size, samples)] = (np.asarray(out[0], dtype=int), np.asarray(out[1], dtype=float))
    return labels, trees, fitted


def evaluate(space: np.ndarray, scaled: np.ndarray, min_cluster_size: int, min_samples: int,
             merge_valley: float, clusters: np.ndarray, probabilities: np.ndarray,
             mst: np.ndarray) -> Clustering:
    """Score one candidate: join split clusters, dissolve diffuse groups, relative validity."""
    n_clusters = int(clusters.max() + 1) if clusters.size else 0
    group_of_cluster, _ = join_split_clusters(scaled, fill_noise(space, clusters), merge_valley)
    group_of_cluster = drop_diffuse(scaled, clusters, group_of_cluster)
    groups = lot_groups(clusters, group_of_cluster) if n_clusters else clusters
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        validity = relative_validity(mst, groups)
    return Clustering(
        min_cluster_size=int(min_cluster_size), min_samples=int(min_samples), clusters=clusters,
        group_of_cluster=group_of_cluster, probabilities=probabilities,
        validity=validity, noise_share=float((clusters < 0).mean()),
    )


def choose_size(results: list[Clustering]) -> Clustering:
    """The sweep's pick: best validity, ties (within 0.02) to fewer noise, then larger size.

    When no candidate keeps two styles apart the range is one style, and the
    largest candidate size is kept.
    """
    scored = [r for r in results if math.isfinite(r.validity)]
    if not scored:
        return max(results, key=lambda r: r.min_cluster_size)
    best = max(r.validity for r in scored)
    ties = [r for r in scored if r.validity >= best - TIE]
    return min(ties, key=lambda r: (round(r.noise_share, 4), -r.min_cluster_size))


def sweep_table(results: list[Clustering], chosen: Clustering) -> pd.DataFrame:
    """The sweep as a table (written to DIR and drawn in the briefing)."""
    return pd.DataFrame({
        "min_cluster_size": [r.min_cluster_size for r in results],
        "min_samples": [r.min_samples for r in results],
        "n_clusters": [r.n_clusters for r in results],
        "n_styles": [max(r.n_groups, 1) for r in results],
        "unassigned_share": [round(r.noise_share, 6) for r in results],
        "relative_validity": [round(r.validity, 6) if math.isfinite(r.validity) else np.nan
                              for r in results],
        "chosen": [r.min_cluster_size == chosen.min_cluster_size for r in results],
    })
