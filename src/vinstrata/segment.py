"""Segmenting a range into styles from its chemistry alone.

:func:`fit_styles` runs the stage end to end on a validated lot table:

1. transform and robust scaling (:mod:`vinstrata.transform`), missing cells imputed;
2. the clustering space: UMAP of the scaled chemistry (:mod:`vinstrata.embed`),
   or the scaled chemistry itself with ``segment.space = "chemistry"``;
3. HDBSCAN (the hdbscan package) in that space;
4. one style split in two by the embedding is joined again. UMAP with
   min_dist 0 tears even a single cloud of lots into pieces, so two clusters
   are kept apart only when the scaled chemistry itself shows a valley between
   them: along Fisher's discriminant axis of the two clusters (Ledoit-Wolf
   shrunk covariance), the smoothed density of their lots must dip below
   ``segment.merge_valley`` (0.5) times the
   lower of the two peaks (a single unimodal cloud shows no valley along any
   straight line). A range with no real structure so comes out as one style,
   and then HDBSCAN's noise lots, which only mark the seams between the
   fragments, join that style;
5. with ``min_cluster_size = "auto"`` steps 3 and 4 run for each candidate size
   and the one kept has the highest relative validity of its joined clusters
   (the density-based validity approximation that hdbscan's
   ``relative_validity_`` computes, after Moulavi et al. 2014, meant for
   comparing settings on the same data); candidates within 0.02 of the best
   count as ties, and a tie goes to fewer unassigned lots, then to the larger
   size;
6. lots that fit no style: UMAP also pulls lots unlike any style into the
   nearest cluster, or gathers lots of random chemistry into clusters of their
   own. A group spread wider than the range itself (:func:`drop_diffuse`) is
   no style and is dissolved; and typicality is judged in the scaled chemistry,
   by the outlier score of :mod:`vinstrata.typicality` (a robust Mahalanobis
   distance to the style). HDBSCAN noise lots and lots scoring above
   ``segment.outlier_cutoff`` are ``unassigned``; they keep their nearest style
   and their soft membership to every style;
7. styles get ids S1 ... Sk, largest first, names from the robust z of their
   medians against the whole range, and a trust verdict: a style with fewer
   than ``segment.min_style_lots`` lots, or (with grades) fewer than
   ``profile.min_band_lots`` lots in its top or bottom band, is untrusted;
8. a seeded 2-D UMAP map of all lots for the plots.

Values written below a detection limit enter the chemistry at the limit itself,
whatever ``ingest.censored`` stores: the lab says only that they are below it,
and half the limit would open a gap between censored and measured lots that
the embedding would turn into a style of its own.

Grades are never used to form styles; they only enter the trust verdict.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from sklearn.covariance import ledoit_wolf

from vinstrata import embed
from vinstrata.analytes import KINDS_BY_KEY
from vinstrata.bands import band_counts, lot_bands
from vinstrata.cells import CENSORED_BELOW
from vinstrata.config import AUTO, Config
from vinstrata.errors import InputError
from vinstrata.lots import USED, LotTable
from vinstrata.model import UNASSIGNED, StyleModel, software_versions
from vinstrata.progress import Reporter
from vinstrata.transform import ChemistryScaler, fit_scaler, impute
from vinstrata.typicality import StyleShape, fit_shape

TIE = 0.02  # relative-validity difference treated as a tie in the sweep
DIFFUSE = 1.1  # a group spread wider than the range itself (median IQR ratio) is no style
MIN_LOTS = 10  # fewer used lots than this cannot be segmented
NAME_Z = 0.5  # |robust z| of a style median worth naming
NAME_Z_WEAK = 0.25  # named as "moderately" when a style has fewer than two strong terms
NAME_TERMS = 3


# --------------------------------------------------------------------------- chemistry


def censored_at_limit(values: pd.DataFrame, flags: pd.DataFrame, policy: str) -> pd.DataFrame:
    """Values for distances: a cell censored below a limit is placed at the limit."""
    share = 0.5 if policy == "half_limit" else 1.0
    out = values.copy()
    for name in values.columns:
        if name in flags.columns:
            below = (flags[name] == CENSORED_BELOW).to_numpy()
            if below.any():
                column = out[name].to_numpy(dtype=float).copy()
                column[below] = column[below] / share
                out[name] = column
    return out


def scale_chemistry(values: pd.DataFrame, flags: pd.DataFrame, scaler: ChemistryScaler,
                    config: Config, reference: np.ndarray | None = None) -> np.ndarray:
    """Scaled, imputed chemistry of lots, as segmentation and placing both see it."""
    at_limit = censored_at_limit(values, flags, config.ingest.censored)
    return impute(scaler.transform(at_limit), reference, config.segment.impute_neighbours)


# --------------------------------------------------------------------------- HDBSCAN


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


def lot_groups(clusters: np.ndarray, group_of_cluster: np.ndarray) -> np.ndarray:
    """Group of each lot from its cluster (-1 stays -1, so do clusters of group -1)."""
    if not group_of_cluster.size:
        return np.full(len(clusters), -1)
    return np.where(clusters >= 0, group_of_cluster[np.maximum(clusters, 0)], -1)


def spread(scaled: np.ndarray) -> float:
    """Median over analytes of the interquartile range, in units of the range's own IQR."""
    q25, q75 = np.quantile(scaled, [0.25, 0.75], axis=0)
    return float(np.median(q75 - q25))


def drop_diffuse(scaled: np.ndarray, clusters: np.ndarray, group_of_cluster: np.ndarray
                 ) -> np.ndarray:
    """Dissolve groups spread wider than the range itself; renumber the others.

    A style is a part of the range, so its lots cannot spread wider than the
    whole range does. Lots of random chemistry scattered over the range, which
    UMAP gathers into clusters of their own, do: their median IQR across
    analytes exceeds the range's (the scaled chemistry has IQR 1 by
    construction) by more than 10 %. Their clusters get group -1.
    """
    n_groups = int(group_of_cluster.max() + 1) if group_of_cluster.size else 0
    if n_groups < 2:
        return group_of_cluster
    groups = lot_groups(clusters, group_of_cluster)
    keep = [g for g in range(n_groups) if spread(scaled[groups == g]) <= DIFFUSE]
    if not keep:
        return group_of_cluster
    renumber = {g: k for k, g in enumerate(keep)}
    return np.array([renumber.get(int(g), -1) for g in group_of_cluster], dtype=int)


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


# --------------------------------------------------------------------------- joining split styles


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


# --------------------------------------------------------------------------- names and trust


def style_phrase(kind_key: str, label: str, z: float) -> str:
    """"high alcohol", "low pH", "deep colour", "moderately high alcohol"."""
    kind = KINDS_BY_KEY.get(kind_key)
    if kind is not None:
        word = kind.high_word if z > 0 else kind.low_word
    else:
        word = "high" if z > 0 else "low"
    if abs(z) < NAME_Z:
        word = f"moderately {word}"
    return f"{word} {label}"


def name_styles(medians_z: pd.DataFrame, labels: dict[str, tuple[str, str]]) -> dict[str, str]:
    """Short descriptive, unique names from each style's robust z of medians.

    Parameters
    ----------
    medians_z : DataFrame
        Styles x analytes, robust z of the style's median against the range.
    labels : dict
        Analyte -> (catalogue kind, readable label).

    Returns
    -------
    dict
        Style id -> name, unique within the run. Up to three analytes with
        |z| >= 0.5 are named, strongest first; a style with fewer than two
        fills up with analytes of |z| >= 0.25 ("moderately high ..."); more terms
        are added where two styles would share a name; a style with none is
        "typical of the range".
    """
    ranked = {}
    for style, row in medians_z.iterrows():
        order = row.abs().sort_values(ascending=False, kind="stable")
        strong = [a for a in order.index if abs(row[a]) >= NAME_Z]
        weak = [a for a in order.index if NAME_Z_WEAK <= abs(row[a]) < NAME_Z]
        ranked[style] = strong + weak[: max(0, 2 - len(strong))]
    names: dict[str, str] = {}
    for terms in range(NAME_TERMS, NAME_TERMS + 4):
        names = {}
        for style, row in medians_z.iterrows():
            chosen = ranked[style][:terms]
            names[str(style)] = " · ".join(
                style_phrase(labels[a][0], labels[a][1], float(row[a])) for a in chosen
            ) or "typical of the range"
        if len(set(names.values())) == len(names):
            return names
    counts: dict[str, int] = {}
    for name in names.values():
        counts[name] = counts.get(name, 0) + 1
    return {s: (n if counts[n] == 1 else f"{n} ({s})") for s, n in names.items()}


def trust_notes(n_lots: np.ndarray, band_n: np.ndarray | None, config: Config) -> list[str]:
    """Why each style is untrusted ("" when trusted)."""
    floor = config.segment.min_style_lots
    min_band = config.profile.min_band_lots
    labels = config.bands.labels
    notes = []
    for i, n in enumerate(n_lots):
        reasons = []
        if n < floor:
            reasons.append(f"{n} lots (fewer than {floor})")
        if band_n is not None:
            top, bottom = int(band_n[i, -1]), int(band_n[i, 0])
            if top < min_band:
                reasons.append(f"{top} lots in the {labels[-1]} band (fewer than {min_band})")
            if bottom < min_band:
                reasons.append(f"{bottom} lots in the {labels[0]} band (fewer than {min_band})")
        notes.append("; ".join(reasons))
    return notes


# --------------------------------------------------------------------------- the stage


def fit_styles(table: LotTable, config: Config, reporter: Reporter | None = None) -> StyleModel:
    """Segment the used lots of ``table`` into styles.

    Parameters
    ----------
    table : LotTable
        Validated training lots (grades optional).
    config : Config
    reporter : Reporter, optional
        Receives progress lines and warnings (untrusted styles, dropped analytes).

    Returns
    -------
    StyleModel

    Raises
    ------
    InputError
        Fewer than 10 used lots, or no analyte left after dropping constant ones.
    """
    rep = reporter or Reporter()
    seg = config.segment
    seed = int(config.seed)
    used = table.used
    n = int(used.sum())
    if n < MIN_LOTS:
        raise InputError(f"{table.source.name}: only {n} usable lots; at least {MIN_LOTS} are "
                         "needed to form styles")
    values = table.values.loc[used].reset_index(drop=True)
    flags = table.flags.loc[used].reset_index(drop=True)
    ids = table.ids.loc[used].reset_index(drop=True)

    scaler, notes = fit_scaler(censored_at_limit(values, flags, config.ingest.censored),
                               seg.skew_threshold, dict(seg.transforms))
    for note in notes:
        rep.warn(note)
    if not scaler.transforms:
        raise InputError(f"{table.source.name}: every analyte is constant or empty; "
                         "no chemistry to form styles from")
    scaled = scale_chemistry(values, flags, scaler, config)

    # the clustering space and the map
    k_graph = min(seg.neighbours, n - 1)
    neighbours = embed.nearest(scaled, k_graph + 1)
    epochs = embed.default_epochs(n) if seg.epochs == AUTO else int(seg.epochs)
    graph = embed.fuzzy_graph(neighbours)
    jobs = [(2, seed + 1, seg.map_min_dist)]
    if seg.space == "umap":
        jobs.insert(0, (min(seg.components, max(2, n - 2)), seed, 0.0))
    embedded = embed.layouts(graph, scaled, jobs, epochs)
    map2d = embedded[-1]
    space = embedded[0] if seg.space == "umap" else scaled.astype(np.float32)

    # HDBSCAN, joined clusters, chosen size
    sizes = (sweep_sizes(n, seg.sweep) if seg.min_cluster_size == AUTO
             else [min(int(seg.min_cluster_size), n - 1)])
    candidates = [(size, min(default_min_samples(size) if seg.min_samples == AUTO
                             else int(seg.min_samples), n - 1)) for size in sizes]
    labels, trees, fitted = sweep_labels(space, candidates)
    results = []
    for i, (size, samples) in enumerate(candidates):
        results.append(evaluate(space, scaled, size, samples, seg.merge_valley,
                                *labels[(size, samples)], trees[samples]))
        rep.bar(i + 1, len(candidates), "  cluster-size sweep")
    final = choose_size(results)
    key = (final.min_cluster_size, final.min_samples)
    clusterer = fitted.get(key) or fit_hdbscan(space, *key)
    if not np.array_equal(np.asarray(clusterer.labels_), final.clusters):
        raise RuntimeError("HDBSCAN's sweep labels and its fit disagree")
    groups = final.groups
    n_groups = max(final.n_groups, 1)
    if final.n_groups <= 1:
        # one style: HDBSCAN noise only marks the seams between the fragments
        groups = np.zeros(n, dtype=int)
        soft = np.ones((n, 1))
        strength = np.where(final.clusters >= 0, final.probabilities, 1.0)
    else:
        clusterer.generate_prediction_data()
        soft = _group_memberships(clusterer, final.group_of_cluster, n_groups, n)
        strength = final.probabilities
    nearest_group = np.where(groups >= 0, groups, np.argmax(soft, axis=1))

    # typicality in the scaled chemistry: lots that fit no style
    shapes = [fit_shape(scaled[groups == g]) for g in range(n_groups)]
    scores = np.empty(n)
    for g in range(n_groups):
        mask = nearest_group == g
        scores[mask] = shapes[g].score(scaled[mask])
    groups = np.where(scores > seg.outlier_cutoff, -1, groups)

    # ids S1..Sk, largest first (ties by group order)
    group_sizes = np.bincount(groups[groups >= 0], minlength=n_groups)
    order = sorted(range(n_groups), key=lambda g: (-group_sizes[g], g))
    order = [g for g in order if group_sizes[g] > 0] or [order[0]]
    rank = {g: k for k, g in enumerate(order)}
    style_ids = [f"S{k + 1}" for k in range(len(order))]
    soft_styles = soft[:, order]
    soft_styles = soft_styles / np.maximum(soft_styles.sum(axis=1, keepdims=True), 1e-12)
    style_index = np.array([rank.get(int(g), -1) if g >= 0 else -1 for g in groups])
    nearest_index = np.array([rank[int(g)] if int(g) in rank else int(np.argmax(soft_styles[i]))
                              for i, g in enumerate(nearest_group)])
    nearest_index = np.where(style_index >= 0, style_index, nearest_index)
    membership = np.where(style_index >= 0, strength, soft_styles[np.arange(n), nearest_index])
    style_shapes = [shapes[g] for g in order]
    # a lot whose nearest group was emptied by the typicality step is scored again
    # against its nearest remaining style
    training_scores = scores.copy()
    moved = np.array([int(g) not in rank for g in nearest_group], dtype=bool)
    for s, shape in enumerate(style_shapes):
        mask = moved & (nearest_index == s)
        if mask.any():
            training_scores[mask] = shape.score(scaled[mask])

    styles, stats = describe_styles(values, scaled, scaler.analytes, style_index,
                                    nearest_index, style_ids,
                                    table, config, ids["grade"].to_numpy(dtype=float))
    for _, row in styles.iterrows():
        if not row["trusted"]:
            rep.warn(f"style {row['style']} ({row['style_name']}, {row['n_lots']} lots) is "
                     f"untrusted: {row['trust_note']}")
    if len(order) == 1:
        rep.line("  one style: the chemistry shows no separate styles")

    lots = pd.DataFrame({
        "lot_id": ids["lot_id"].astype(str), "row": ids["row"].astype(int),
        "grade": ids["grade"].astype(float),
        "style": np.array([style_ids[s] if s >= 0 else UNASSIGNED for s in style_index],
                          dtype=object),
        "style_index": style_index.astype(int), "membership": membership.astype(float),
        "outlier_score": training_scores.astype(float),
        "nearest_style": np.array(style_ids, dtype=object)[nearest_index],
        "cluster": final.clusters.astype(int),
        "map_x": map2d[:, 0].astype(float), "map_y": map2d[:, 1].astype(float),
    })
    params = {
        "space": seg.space, "components": int(space.shape[1]), "neighbours": int(k_graph),
        "epochs": int(epochs), "min_cluster_size": int(final.min_cluster_size),
        "min_samples": int(final.min_samples), "seed": seed,
        "size_choice": "sweep" if seg.min_cluster_size == AUTO else "fixed",
        "merge_valley": float(seg.merge_valley), "n_clusters": int(final.n_clusters),
        "cluster_styles": [style_ids[rank[int(g)]] if int(g) in rank else ""
                           for g in final.group_of_cluster],
        "one_style": len(order) == 1, "map_min_dist": float(seg.map_min_dist),
    }
    outliers = {
        "cutoff": float(seg.outlier_cutoff),
        "shapes": {sid: shape.to_dict() for sid, shape in zip(style_ids, style_shapes)},
    }
    rows = table.ids[["row", "lot_id", "status", "detail"]].copy()
    rows["lot_id"] = rows["lot_id"].astype(str)
    return StyleModel(
        config=config, source=table.source, specs=table.specs, scaler=scaler, rows=rows,
        lots=lots, values=values, flags=flags.astype(str), extra=table.extra.astype(str),
        scaled=scaled, space=np.asarray(space, dtype=np.float32),
        map2d=np.asarray(map2d, dtype=np.float32), clusters=final.clusters.astype(np.int64),
        memberships=soft_styles.astype(np.float64), styles=styles, style_stats=stats,
        sweep=sweep_table(results, final), params=params, outliers=outliers,
        versions=software_versions(), has_grade=table.has_grade,
    )


def rebuild_clusterer(model: StyleModel) -> object:
    """Refit HDBSCAN on the stored clustering coordinates, with prediction data.

    Raises
    ------
    InputError
        When the rebuilt labels differ from the stored ones (the model files
        were changed, or another hdbscan version clusters differently).
    """
    params = model.params
    clusterer = fit_hdbscan(model.space, params["min_cluster_size"], params["min_samples"],
                            prediction_data=True)
    if not np.array_equal(np.asarray(clusterer.labels_), model.clusters):
        raise InputError("model: the rebuilt HDBSCAN labels differ from the stored ones "
                         "(model files changed or another hdbscan version); segment again")
    return clusterer


def style_shapes(model: StyleModel) -> dict[str, StyleShape]:
    """The stored typicality shapes of a model's styles."""
    return {sid: StyleShape.from_dict(d) for sid, d in model.outliers["shapes"].items()}


def _group_memberships(clusterer: object, group_of_cluster: np.ndarray, n_groups: int,
                       n: int) -> np.ndarray:
    """Soft membership of every lot to every group (sum over the group's clusters)."""
    import hdbscan

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        vectors = np.asarray(hdbscan.all_points_membership_vectors(clusterer), dtype=float)
    vectors = vectors.reshape(n, -1)
    out = np.zeros((n, n_groups))
    for c, g in enumerate(group_of_cluster):
        if g >= 0:
            out[:, g] += vectors[:, c]
    return out


def describe_styles(values: pd.DataFrame, scaled: np.ndarray, analytes: tuple[str, ...],
                    style_index: np.ndarray, nearest_index: np.ndarray, style_ids: list[str],
                    table: LotTable, config: Config, grades: np.ndarray
                    ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The style table (ids, names, sizes, trust, medians) and per-analyte statistics.

    Returns
    -------
    styles : DataFrame
        ``style, style_name, n_lots, share, trusted``, the median of each analyte
        in canonical units, then ``trust_note`` and (with grades) ``n_bottom``,
        ``n_top``.
    stats : DataFrame
        Long table ``style, analyte, n, q25, median, q75, robust_z``; robust z is
        the style's median in the scaled chemistry (its median's distance from
        the range's median in IQRs of the transformed analyte).
    """
    n = len(values)
    n_styles = len(style_ids)
    counts = np.bincount(style_index[style_index >= 0], minlength=n_styles)
    z = pd.DataFrame(
        [[float(np.median(scaled[style_index == s, j])) if counts[s] else 0.0
          for j in range(len(analytes))] for s in range(n_styles)],
        index=style_ids, columns=list(analytes),
    )
    spec_of = {s.name: s for s in table.specs}
    names = name_styles(z, {a: (spec_of[a].kind, spec_of[a].label) for a in analytes})
    band_n = None
    if table.has_grade and np.isfinite(grades).any():
        # band counts as the profiles will see them (their home styles and bands)
        ids = np.array(style_ids, dtype=object)
        labels = np.where(style_index >= 0, ids[np.maximum(style_index, 0)], UNASSIGNED)
        home, bands = lot_bands(grades, labels, ids[nearest_index], config.bands,
                                config.profile.include_unassigned)
        band_n = np.array([band_counts(bands[home == sid], len(config.bands.labels))
                           for sid in style_ids])
    notes = trust_notes(counts, band_n, config)
    styles = pd.DataFrame({
        "style": style_ids, "style_name": [names[s] for s in style_ids],
        "n_lots": counts.astype(int), "share": np.round(counts / max(n, 1), 6),
        "trusted": [not note for note in notes],
    })
    stat_rows = []
    all_names = [s.name for s in table.specs]
    for s, style in enumerate(style_ids):
        mask = style_index == s
        for name in all_names:
            x = values.loc[mask, name].to_numpy(dtype=float)
            x = x[np.isfinite(x)]
            q = np.quantile(x, [0.25, 0.5, 0.75]) if x.size else [np.nan] * 3
            stat_rows.append({
                "style": style, "analyte": name, "n": int(x.size), "q25": float(q[0]),
                "median": float(q[1]), "q75": float(q[2]),
                "robust_z": float(z.loc[style, name]) if name in z.columns else np.nan,
            })
    stats = pd.DataFrame(stat_rows)
    medians = stats.pivot(index="style", columns="analyte", values="median").reindex(
        index=style_ids, columns=all_names)
    styles = pd.concat([styles, medians.reset_index(drop=True)], axis=1)
    styles["trust_note"] = notes
    if band_n is not None:
        styles["n_bottom"] = band_n[:, 0].astype(int)
        styles["n_top"] = band_n[:, -1].astype(int)
    return styles, stats


# --------------------------------------------------------------------------- output tables

LOT_STYLE_COLUMNS = ("lot_id", "status", "style", "style_name", "membership", "outlier_score",
                     "nearest_style", "map_x", "map_y")
STYLE_COLUMNS = ("style", "style_name", "n_lots", "share", "trusted")


def lot_styles(model: StyleModel) -> pd.DataFrame:
    """``lot_styles.csv``: one row per input row, rejected rows with empty style fields.

    Columns ``lot_id, status, style, style_name, membership, outlier_score,
    nearest_style, map_x, map_y``, then the passthrough columns, then ``trusted``.
    """
    rows = model.rows.reset_index(drop=True)
    out = pd.DataFrame({"lot_id": rows["lot_id"].astype(str), "status": rows["status"]})
    for column in LOT_STYLE_COLUMNS[2:]:
        out[column] = pd.Series([None] * len(rows), dtype=object)
    used = (rows["status"] == USED).to_numpy()
    names = model.style_names()
    trusted = dict(zip(model.styles["style"], model.styles["trusted"]))
    lots = model.lots
    out.loc[used, "style"] = lots["style"].to_numpy()
    out.loc[used, "style_name"] = [names.get(s, "") for s in lots["style"]]
    for column in ("membership", "outlier_score", "map_x", "map_y"):
        values = pd.Series([np.nan] * len(rows), dtype=float)
        values[used] = np.round(lots[column].to_numpy(dtype=float), 6)
        out[column] = values
    out.loc[used, "nearest_style"] = lots["nearest_style"].to_numpy()
    extra = model.extra.reset_index(drop=True)
    for column in extra.columns:
        out[column] = extra[column].to_numpy()
    out["trusted"] = pd.Series([None] * len(rows), dtype=object)
    out.loc[used, "trusted"] = [bool(trusted[s]) if s in trusted else None
                                for s in lots["style"]]
    return out


def style_table(model: StyleModel) -> pd.DataFrame:
    """``styles.csv``: ``style, style_name, n_lots, share, trusted``, then the median of
    each analyte (canonical units), then ``trust_note`` and the band counts."""
    return model.styles.copy()
