"""Segmenting a range into styles from its chemistry alone.

Fitting the styles of a range: :func:`fit_styles` runs the stage end to end on a
validated lot table:

1. transform and robust scaling (:mod:`vinstrata.segment.transform`), missing cells imputed;
2. the clustering space: UMAP of the scaled chemistry (:mod:`vinstrata.segment.embed`),
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
   by the outlier score of :mod:`vinstrata.segment.typicality` (a robust Mahalanobis
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

import numpy as np
import pandas as pd

from vinstrata.config import AUTO, Config
from vinstrata.errors import InputError
from vinstrata.progress import Reporter
from vinstrata.read.lots import UNASSIGNED, LotTable
from vinstrata.segment import embed
from vinstrata.segment.assign import group_memberships
from vinstrata.segment.model import StyleModel, software_versions
from vinstrata.segment.styles import describe_styles
from vinstrata.segment.sweep import (
    choose_size,
    default_min_samples,
    evaluate,
    fit_hdbscan,
    sweep_labels,
    sweep_sizes,
    sweep_table,
)
from vinstrata.segment.transform import censored_at_limit, fit_scaler, scale_chemistry
from vinstrata.segment.typicality import fit_shape

MIN_LOTS = 10  # fewer used lots than this cannot be segmented


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
        soft = group_memberships(clusterer, final.group_of_cluster, n_groups, n)
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
