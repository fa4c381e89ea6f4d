"""Joining clusters the embedding split apart, and dissolving groups that are no style."""

from __future__ import annotations

import numpy as np
from sklearn.covariance import ledoit_wolf

from vinstrata.segment import embed

# A group whose IQR is this share of the range's 1 %-99 % span (median over analytes) is no
# style: lots spread evenly over the range (uniform) reach 0.5, a normal-shaped style 0.29
# even when it is the whole range, and less beside other styles.
DIFFUSE = 0.4
SPAN = (0.01, 0.99)


def lot_groups(clusters: np.ndarray, group_of_cluster: np.ndarray) -> np.ndarray:
    """Group of each lot from its cluster (-1 stays -1, so do clusters of group -1)."""
    if not group_of_cluster.size:
        return np.full(len(clusters), -1)
    return np.where(clusters >= 0, group_of_cluster[np.maximum(clusters, 0)], -1)


def spread(scaled: np.ndarray, reference: np.ndarray | None = None) -> float:
    """Median over analytes of a group's IQR, in units of the range's 1 %-99 % span.

    Parameters
    ----------
    scaled : ndarray
        The group's lots (rows) in the scaled chemistry.
    reference : ndarray, optional
        The whole range's lots; the group itself when None.

    Returns
    -------
    float
        NaN when no analyte has a span (every analyte constant over the range).
    """
    reference = scaled if reference is None else reference
    lo, hi = np.quantile(reference, SPAN, axis=0)
    q25, q75 = np.quantile(scaled, [0.25, 0.75], axis=0)
    span = hi - lo
    ratio = np.where(span > 0, (q75 - q25) / np.where(span > 0, span, 1.0), np.nan)
    return float(np.nanmedian(ratio)) if np.isfinite(ratio).any() else float("nan")


def drop_diffuse(scaled: np.ndarray, clusters: np.ndarray, group_of_cluster: np.ndarray
                 ) -> np.ndarray:
    """Dissolve groups spread as evenly as the range itself; renumber the others.

    Lots of random chemistry scattered over the range, which UMAP gathers into
    clusters of their own, have per analyte an interquartile range about half
    the range's 1 %-99 % span (what a uniform spread gives); a style, even a
    broad one holding most of the range, is peaked: a normal-shaped one has
    0.29 of its own span, and less of a range that other styles widen. A group
    whose median ratio over analytes exceeds :data:`DIFFUSE` (0.4) gets group -1.

    The yardstick is the range's span, not its IQR: a tight style sitting in the
    middle of a broad one narrows the range's IQR below the broad style's own,
    which would dissolve the broad style, while the span hardly moves.
    """
    n_groups = int(group_of_cluster.max() + 1) if group_of_cluster.size else 0
    if n_groups < 2:
        return group_of_cluster
    groups = lot_groups(clusters, group_of_cluster)
    keep = [g for g in range(n_groups)
            if not spread(scaled[groups == g], scaled) > DIFFUSE]
    if not keep:
        return group_of_cluster
    renumber = {g: k for k, g in enumerate(keep)}
    return np.array([renumber.get(int(g), -1) for g in group_of_cluster], dtype=int)


def separating_axis(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Fisher's discriminant direction between two groups (pooled, slightly shrunk covariance).

    Along any straight line a single unimodal (log-concave) cloud stays
    unimodal, so the direction that best separates two groups is where a
    real gap between them shows most clearly.
    """
    diff = np.median(b, axis=0) - np.median(a, axis=0)
    if a.shape[0] + b.shape[0] < 4:
        return diff
    centred = np.concatenate([a - a.mean(axis=0), b - b.mean(axis=0)])
    # Ledoit-Wolf shrinkage keeps the axis from fitting noise when groups are small
    within, _ = ledoit_wolf(centred, assume_centered=True)
    within = within + 1e-9 * np.eye(within.shape[0])
    return np.linalg.solve(within, diff)


def valley_ratio(a: np.ndarray, b: np.ndarray, bins: int = 120) -> float:
    """Density at the valley between two groups over the lower of their two peaks.

    Both groups are projected on their separating axis (a's median at 0, b's
    at 1); the projected density is a histogram smoothed with a Gaussian kernel
    whose bandwidth follows Silverman's rule with the groups' pooled within-group
    spread (the spread of the union would smooth a real valley away). A ratio
    near 1 means no valley: one group.
    """
    axis = separating_axis(a, b)
    ta, tb = a @ axis, b @ axis
    za, zb = float(np.median(ta)), float(np.median(tb))
    if zb == za:
        return 1.0
    ta, tb = (ta - za) / (zb - za), (tb - za) / (zb - za)
    lo, hi = -0.5, 1.5
    t = np.concatenate([ta, tb])
    t = t[(t >= lo) & (t <= hi)]
    if t.size < 4:
        return 0.0
    counts, edges = np.histogram(t, bins=bins, range=(lo, hi))
    width = edges[1] - edges[0]
    dof = max(len(ta) + len(tb) - 2, 1)
    sd = float(np.sqrt((((ta - ta.mean()) ** 2).sum() + ((tb - tb.mean()) ** 2).sum()) / dof))
    bandwidth = max(1.06 * max(sd, 1e-9) * t.size ** (-1 / 5), width)
    centres = (edges[:-1] + edges[1:]) / 2
    kernel = np.exp(-0.5 * ((centres[:, None] - centres[None, :]) / bandwidth) ** 2)
    density = kernel @ counts
    left = centres <= 0.5
    ia = int(np.argmax(np.where(left, density, -1)))
    ib = int(np.argmax(np.where(~left, density, -1)))
    peak = min(density[ia], density[ib])
    if peak <= 0:
        return 0.0
    valley = density[min(ia, ib): max(ia, ib) + 1].min()
    return float(valley / peak)


def fill_noise(space: np.ndarray, labels: np.ndarray) -> np.ndarray:
    """Labels with each HDBSCAN noise lot given the cluster of its nearest clustered lot."""
    noise = labels < 0
    if not noise.any() or noise.all():
        return labels.copy()
    found = embed.nearest(space[~noise], 1, query=space[noise])
    filled = labels.copy()
    filled[noise] = labels[~noise][found.indices[:, 0]]
    return filled


def join_split_clusters(scaled: np.ndarray, labels: np.ndarray, threshold: float
                        ) -> tuple[np.ndarray, list[tuple[int, int, float]]]:
    """Group clusters that show no valley between them in the scaled chemistry.

    ``labels`` should give noise lots their nearest cluster (:func:`fill_noise`):
    HDBSCAN leaves the lots in the seams between fragments out of its clusters,
    and leaving them out of the test too would open the very gap it looks for.

    Returns
    -------
    group_of_cluster : ndarray of int
        Group index of each cluster (0..n_clusters-1), groups numbered in the
        order of their first cluster.
    ratios : list of (cluster_a, cluster_b, ratio)
    """
    n_clusters = int(labels.max() + 1) if labels.size else 0
    parent = list(range(n_clusters))

    def root(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    ratios = []
    members = [scaled[labels == c] for c in range(n_clusters)]
    for i in range(n_clusters):
        for j in range(i + 1, n_clusters):
            ratio = valley_ratio(members[i], members[j])
            ratios.append((i, j, ratio))
            if threshold > 0 and ratio > threshold:
                parent[root(j)] = root(i)
    roots = [root(i) for i in range(n_clusters)]
    order = {r: k for k, r in enumerate(dict.fromkeys(roots))}
    return np.array([order[r] for r in roots], dtype=int), ratios
