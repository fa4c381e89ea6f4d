"""Segmenting a range into styles from its chemistry alone.

Fitting the styles of a range: :func:`fit_styles` runs the stage end to end on a
validated lot table:

1. transform and robust scaling (:mod:`vinstrata.segment.transform`), missing cells imputed;
   a range of more than ``segment.fit_sample`` lots is fitted on a seeded sample
   stratified by chemistry (:mod:`vinstrata.segment.sample`), steps 2-5 run on the
   sample, and every other lot is then assigned the way ``vinstrata place`` places a
   new lot (:mod:`vinstrata.segment.reference`): the same position, style, soft
   membership and typicality; it counts in the styles' sizes and profiles like any
   other training lot;
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
6. lots that fit no style (:func:`vinstrata.segment.assign.assign_lots`, the
   rule placing applies to new lots too): UMAP also pulls lots unlike any style into the
   nearest cluster, or gathers lots of random chemistry into clusters of their
   own. A group spread as evenly as the range itself (its IQR a large share of the
   range's 1 %-99 % span, :func:`drop_diffuse`) is no style and is dissolved;
   and typicality is judged in the scaled chemistry,
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

import dataclasses
from dataclasses import dataclass

import numpy as np
import pandas as pd

from vinstrata.config import AUTO, Config
from vinstrata.errors import InputError
from vinstrata.progress import Reporter
from vinstrata.read.hints import rejection_hints
from vinstrata.read.ingest import Source
from vinstrata.read.lots import UNASSIGNED, LotTable
from vinstrata.segment import embed
from vinstrata.segment.assign import (
    Assignment,
    Predictor,
    assign_lots,
    fit_predictor,
    score_lots,
    training_prediction,
)
from vinstrata.segment.model import SegmentParams, StyleModel, software_versions
from vinstrata.segment.reference import fit_reference
from vinstrata.segment.sample import stratified_sample
from vinstrata.segment.styles import describe_styles, quantile_hints, style_band_counts
from vinstrata.segment.sweep import (
    Clustering,
    choose_size,
    default_min_samples,
    evaluate,
    fit_hdbscan,
    sweep_labels,
    sweep_sizes,
    sweep_table,
)
from vinstrata.segment.transform import (
    ChemistryScaler,
    censored_at_limit,
    fit_scaler,
    scale_chemistry,
)
from vinstrata.segment.typicality import StyleShape, fit_shape

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
    lots = _used_lots(table)
    scaler = _fit_transform(lots, config, rep)
    fitted = _fitted_rows(lots, scaler, config, rep)
    sample = lots.take(fitted)
    scaled_fit = scale_chemistry(sample.values, sample.flags, scaler, config)
    embedding = _embed_lots(scaled_fit, seg.space, seg.components, seg.neighbours, seg.epochs,
                            seg.map_min_dist, int(config.seed))
    results, clusterers = _sweep_clusters(embedding.space, scaled_fit, seg.min_cluster_size,
                                          seg.min_samples, seg.sweep, seg.merge_valley, rep)
    final = choose_size(results)
    clusterer = _final_clusterer(embedding.space, final, clusterers)
    grouped, soft, shapes = _assign_groups(embedding.space, scaled_fit, final, clusterer,
                                           seg.outlier_cutoff)
    whole = _FitLots(scaled=scaled_fit, space=embedding.space, map2d=embedding.map2d,
                     clusters=final.clusters, assignment=grouped, soft=soft,
                     in_fit=np.ones(len(fitted), dtype=bool))
    if len(fitted) < len(lots.ids):
        whole = _with_others(whole, lots, fitted, scaler, config, embedding,
                             _group_predictor(embedding.space, final, clusterer, shapes,
                                              seg.outlier_cutoff), rep)
    styles = _order_styles(whole.assignment, whole.soft, shapes, whole.scaled)
    style_frame, stats = _describe(lots, table, whole.scaled, scaler.analytes, styles, config)
    _report_styles(style_frame, rep)
    return StyleModel(
        config=config, source=table.source, specs=table.specs, scaler=scaler,
        rows=_row_status(table),
        lots=_lot_frame(lots.ids, styles, whole.clusters, whole.map2d, whole.in_fit),
        values=lots.values, flags=lots.flags.astype(str), extra=table.extra.astype(str),
        scaled=whole.scaled, space=np.asarray(whole.space, dtype=np.float32),
        map2d=np.asarray(whole.map2d, dtype=np.float32),
        clusters=whole.clusters.astype(np.int64),
        memberships=styles.soft.astype(np.float64), styles=style_frame, style_stats=stats,
        sweep=sweep_table(results, final),
        params=_segment_params(config, embedding, final, styles),
        outliers=_outlier_reference(seg.outlier_cutoff, styles),
        versions=software_versions(), has_grade=table.has_grade,
    )


# --------------------------------------------------------------------------- the steps


@dataclass(frozen=True)
class _TrainingLots:
    """The used lots of a table, numbered from 0 in file order."""

    values: pd.DataFrame
    flags: pd.DataFrame
    ids: pd.DataFrame
    source: Source

    @property
    def grades(self) -> np.ndarray:
        return self.ids["grade"].to_numpy(dtype=float)

    def take(self, rows: np.ndarray) -> _TrainingLots:
        """The lots at ``rows`` (all of them, unchanged, when ``rows`` covers every lot)."""
        if len(rows) == len(self.ids):
            return self
        return _TrainingLots(values=self.values.iloc[rows].reset_index(drop=True),
                             flags=self.flags.iloc[rows].reset_index(drop=True),
                             ids=self.ids.iloc[rows].reset_index(drop=True), source=self.source)


def _used_lots(table: LotTable) -> _TrainingLots:
    """The used lots of ``table``; refuses a table with fewer than :data:`MIN_LOTS` of them."""
    used = table.used
    n = int(used.sum())
    if n < MIN_LOTS:
        # the column behind the rejections first: "too few lots" alone hides the cause
        why = "".join(f"{line}; " for line in rejection_hints(table))
        raise InputError(f"{table.source.name}: {why}only {n} usable lots; at least {MIN_LOTS} "
                         "are needed to form styles")
    return _TrainingLots(values=table.values.loc[used].reset_index(drop=True),
                        flags=table.flags.loc[used].reset_index(drop=True),
                        ids=table.ids.loc[used].reset_index(drop=True), source=table.source)


def _fit_transform(lots: _TrainingLots, config: Config, rep: Reporter) -> ChemistryScaler:
    """The per-analyte transform and robust scaling, fitted on all the used lots."""
    seg = config.segment
    scaler, notes = fit_scaler(censored_at_limit(lots.values, lots.flags, config.ingest.censored),
                               seg.skew_threshold, dict(seg.transforms))
    for note in notes:
        rep.warn(note)
    if not scaler.transforms:
        raise InputError(f"{lots.source.name}: every analyte is constant or empty; "
                         "no chemistry to form styles from")
    return scaler


def _fitted_rows(lots: _TrainingLots, scaler: ChemistryScaler, config: Config,
                 rep: Reporter) -> np.ndarray:
    """The rows the styles are fitted on: all, or the stratified sample above ``fit_sample``."""
    n, size = len(lots.ids), int(config.segment.fit_sample)
    if n <= size:
        return np.arange(n)
    at_limit = censored_at_limit(lots.values, lots.flags, config.ingest.censored)
    points = np.nan_to_num(scaler.transform(at_limit), nan=0.0)
    rows = stratified_sample(points, size, int(config.seed))
    rep.line(f"  {n} lots: styles fitted on a stratified sample of {len(rows)}; "
             "the others are assigned as new lots are placed")
    return rows


@dataclass(frozen=True)
class _FitLots:
    """Every used lot's scaled chemistry, positions, HDBSCAN label and group assignment.

    ``clusters`` is HDBSCAN's label for the fitted lots and :data:`NOT_FITTED` for
    the others; ``in_fit`` tells them apart.
    """

    scaled: np.ndarray
    space: np.ndarray
    map2d: np.ndarray
    clusters: np.ndarray
    assignment: Assignment
    soft: np.ndarray
    in_fit: np.ndarray


NOT_FITTED = -2  # the cluster label of a lot outside the fitted sample
PLACE_BATCH = 50_000  # lots outside the sample are placed this many at a time


def _group_predictor(space: np.ndarray, final: Clustering, clusterer: object,
                     shapes: list[StyleShape], cutoff: float) -> Predictor:
    """The fit's predictor in group indices, for the lots outside the fitted sample."""
    if final.n_groups <= 1:
        return Predictor(None, (), tuple(shapes), float(cutoff))
    return fit_predictor(clusterer, space, [int(g) for g in final.group_of_cluster], shapes,
                         cutoff)


def _with_others(sample: _FitLots, lots: _TrainingLots, fitted: np.ndarray,
                 scaler: ChemistryScaler, config: Config, embedding: _Embedding,
                 predictor: Predictor, rep: Reporter) -> _FitLots:
    """Every used lot: the fitted sample as fitted, the others placed against it.

    The others go through :meth:`vinstrata.segment.reference.FitReference.locate`,
    the path new lots take in ``vinstrata place``.
    """
    n = len(lots.ids)
    others = np.setdiff1d(np.arange(n), fitted)
    reference = fit_reference(sample.scaled, embedding.space, embedding.map2d,
                              config.segment.space, embedding.neighbours, predictor)
    n_groups = sample.soft.shape[1]
    scaled = np.empty((n, sample.scaled.shape[1]))
    space = np.empty((n, embedding.space.shape[1]), dtype=np.float32)
    map2d = np.empty((n, 2), dtype=np.float32)
    soft = np.empty((n, n_groups))
    clusters = np.full(n, NOT_FITTED, dtype=np.int64)
    parts = {f.name: np.empty(n, dtype=getattr(sample.assignment, f.name).dtype)
             for f in dataclasses.fields(Assignment)}
    for name, part in parts.items():
        part[fitted] = getattr(sample.assignment, name)
    scaled[fitted], space[fitted], map2d[fitted] = sample.scaled, sample.space, sample.map2d
    soft[fitted], clusters[fitted] = sample.soft, sample.clusters
    for start in range(0, len(others), PLACE_BATCH):
        rows = others[start:start + PLACE_BATCH]
        part = lots.take(rows)
        chem = scale_chemistry(part.values, part.flags, scaler, config, reference=sample.scaled)
        located = reference.locate(chem)
        scaled[rows], space[rows], map2d[rows] = chem, located.space, located.map_xy
        soft[rows] = located.prediction.soft(np.arange(len(rows)))
        for name, values in parts.items():
            values[rows] = getattr(located.assignment, name)
        rep.bar(min(start + PLACE_BATCH, len(others)), len(others), "  assigning the others")
    return _FitLots(scaled=scaled, space=space, map2d=map2d, clusters=clusters,
                    assignment=Assignment(**parts), soft=soft,
                    in_fit=np.isin(np.arange(n), fitted))


@dataclass(frozen=True)
class _Embedding:
    """The clustering space and the 2-D map, with the settings they resolved to."""

    space: np.ndarray
    map2d: np.ndarray
    neighbours: int
    epochs: int


def _embed_lots(scaled: np.ndarray, space: str, components: int, neighbours: int,
                epochs: int | str, map_min_dist: float, seed: int) -> _Embedding:
    """UMAP of the scaled chemistry: the clustering space (or the chemistry) and the map.

    The two layouts share one fuzzy graph; the clustering space is seeded with
    ``seed``, the map with ``seed + 1``.
    """
    n = len(scaled)
    k_graph = min(neighbours, n - 1)
    graph = embed.fuzzy_graph(embed.nearest(scaled, k_graph + 1))
    n_epochs = embed.default_epochs(n) if epochs == AUTO else int(epochs)
    jobs = [(2, seed + 1, map_min_dist)]
    if space == "umap":
        jobs.insert(0, (min(components, max(2, n - 2)), seed, 0.0))
    embedded = embed.layouts(graph, scaled, jobs, n_epochs)
    clustering = embedded[0] if space == "umap" else scaled.astype(np.float32)
    return _Embedding(space=clustering, map2d=embedded[-1], neighbours=int(k_graph),
                     epochs=int(n_epochs))


def _sweep_clusters(space: np.ndarray, scaled: np.ndarray, min_cluster_size: int | str,
                    min_samples: int | str, sweep: tuple[float, ...], merge_valley: float,
                    rep: Reporter) -> tuple[list[Clustering], dict[tuple[int, int], object]]:
    """HDBSCAN with split clusters joined, for each candidate cluster size (one when fixed).

    Returns
    -------
    results : list of Clustering
        One per candidate, in size order.
    fitted : dict
        (size, samples) -> the clusterers fitted in full on the way.
    """
    n = len(space)
    sizes = ([min(int(min_cluster_size), n - 1)] if min_cluster_size != AUTO
             else sweep_sizes(n, sweep))
    candidates = [(size, min(default_min_samples(size) if min_samples == AUTO
                             else int(min_samples), n - 1)) for size in sizes]
    labels, trees, fitted = sweep_labels(space, candidates)
    results = []
    for i, (size, samples) in enumerate(candidates):
        results.append(evaluate(space, scaled, size, samples, merge_valley,
                                *labels[(size, samples)], trees[samples]))
        rep.bar(i + 1, len(candidates), "  cluster-size sweep")
    return results, fitted


def _final_clusterer(space: np.ndarray, final: Clustering,
                     fitted: dict[tuple[int, int], object]) -> object:
    """The HDBSCAN fit of the chosen candidate, checked against the sweep's labels."""
    key = (final.min_cluster_size, final.min_samples)
    clusterer = fitted.get(key) or fit_hdbscan(space, *key)
    if not np.array_equal(np.asarray(clusterer.labels_), final.clusters):
        raise RuntimeError("HDBSCAN's sweep labels and its fit disagree")
    return clusterer


def _assign_groups(space: np.ndarray, scaled: np.ndarray, final: Clustering, clusterer: object,
                   cutoff: float) -> tuple[Assignment, np.ndarray, list[StyleShape]]:
    """The lots assigned to the chosen candidate's joined groups, before they become styles.

    Returns the assignment in group indices, the soft membership of each lot to
    each group and each group's typicality shape (fitted on its HDBSCAN members).
    """
    prediction, soft = training_prediction(
        clusterer, space, final.groups, final.clusters,
        final.probabilities, final.group_of_cluster, final.n_groups)
    shapes = [fit_shape(scaled[prediction.style_index == g])
              for g in range(max(final.n_groups, 1))]
    return assign_lots(prediction, shapes, scaled, cutoff), soft, shapes


@dataclass(frozen=True)
class _StyleOrder:
    """The styles S1 ... Sk, largest first, and the lots assigned to them.

    Attributes
    ----------
    ids : list of str
        ``S1`` ... ``Sk``.
    order : list of int
        The joined group behind each style.
    assignment : Assignment
        The lots in style indices.
    soft : ndarray
        Soft membership of each lot to each style (rows sum to 1).
    shapes : list of StyleShape
        Each style's typicality shape.
    """

    ids: list[str]
    order: list[int]
    assignment: Assignment
    soft: np.ndarray
    shapes: list[StyleShape]

    @property
    def rank(self) -> dict[int, int]:
        """Style index of each group that became a style."""
        return {g: k for k, g in enumerate(self.order)}


def _order_styles(grouped: Assignment, soft: np.ndarray, shapes: list[StyleShape],
                  scaled: np.ndarray) -> _StyleOrder:
    """Number the groups S1 ... Sk, largest first (ties by group order), after typicality.

    A group the typicality step emptied is no style; a lot whose nearest group
    it was takes its nearest remaining style (by soft membership) and is scored
    again against it.

    Parameters
    ----------
    grouped : Assignment
        The lots assigned in group indices.
    soft : ndarray
        Soft membership of each lot to each group.
    shapes : list of StyleShape
        Each group's typicality shape.
    scaled : ndarray
        The lots' scaled chemistry.

    Returns
    -------
    _StyleOrder
    """
    groups, nearest_group = grouped.style_index, grouped.nearest_index
    sizes = np.bincount(groups[groups >= 0], minlength=len(shapes))
    order = sorted(range(len(shapes)), key=lambda g: (-sizes[g], g))
    order = [g for g in order if sizes[g] > 0] or [order[0]]
    rank = {g: k for k, g in enumerate(order)}
    soft_styles = soft[:, order]
    soft_styles = soft_styles / np.maximum(soft_styles.sum(axis=1, keepdims=True), 1e-12)
    style_index = np.array([rank.get(int(g), -1) if g >= 0 else -1 for g in groups])
    nearest = np.array([rank[int(g)] if int(g) in rank else int(np.argmax(soft_styles[i]))
                        for i, g in enumerate(nearest_group)])
    nearest = np.where(style_index >= 0, style_index, nearest)
    membership = np.where(style_index >= 0, grouped.membership,
                          soft_styles[np.arange(len(groups)), nearest])
    style_shapes = [shapes[g] for g in order]
    moved = np.array([int(g) not in rank for g in nearest_group], dtype=bool)
    scores = score_lots(style_shapes, nearest, scaled, grouped.outlier_score.copy(), rows=moved)
    assignment = Assignment(style_index=style_index, nearest_index=nearest,
                            membership=membership, outlier_score=scores,
                            fits_none=grouped.fits_none)
    return _StyleOrder(ids=[f"S{k + 1}" for k in range(len(order))], order=order,
                      assignment=assignment, soft=soft_styles, shapes=style_shapes)


def _describe(lots: _TrainingLots, table: LotTable, scaled: np.ndarray,
              analytes: tuple[str, ...], styles: _StyleOrder, config: Config
              ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The style table and statistics, with the trust verdict from the band counts."""
    a = styles.assignment
    band_n = (style_band_counts(lots.grades, a.style_index, a.nearest_index, styles.ids,
                                config.bands, config.profile.include_unassigned)
              if table.has_grade else None)
    described, stats = describe_styles(lots.values, scaled, table.specs, analytes,
                                       a.style_index, styles.ids, band_n,
                                       config.segment.min_style_lots,
                                       config.profile.min_band_lots, config.bands.labels,
                                       _lot_colours(table, config))
    if band_n is not None and config.bands.mode == "global":
        # a style the global cuts leave short of top or bottom lots is told what its own
        # grade quantiles would give it, and how to switch
        per_style = dataclasses.replace(config.bands, mode="style_quantile")
        quantile_n = style_band_counts(lots.grades, a.style_index, a.nearest_index, styles.ids,
                                       per_style, config.profile.include_unassigned)
        described["trust_note"] = quantile_hints(
            list(described["trust_note"]), described["n_lots"].to_numpy(), band_n, quantile_n,
            config.segment.min_style_lots, config.profile.min_band_lots, config.bands.labels)
    return described, stats


def _lot_colours(table: LotTable, config: Config) -> np.ndarray | None:
    """The used lots' colours from ``limits.colour_column`` (normalised), None without one."""
    column = config.limits.colour_column
    if not column or column not in table.extra.columns:
        return None
    from vinstrata.place.limits import normalise_colour

    # few distinct spellings among many lots: normalise each once
    values = table.extra.loc[table.used, column].astype(str).to_numpy()
    distinct, where = np.unique(values, return_inverse=True)
    return np.array([normalise_colour(v) for v in distinct], dtype=object)[where.ravel()]


def _report_styles(styles: pd.DataFrame, rep: Reporter) -> None:
    for _, row in styles.iterrows():
        if not row["trusted"]:
            rep.warn(f"style {row['style']} ({row['style_name']}, {row['n_lots']} lots) is "
                     f"untrusted: {row['trust_note']}")
    if len(styles) == 1:
        rep.line("  one style: the chemistry shows no separate styles")


def _lot_frame(ids: pd.DataFrame, styles: _StyleOrder, clusters: np.ndarray,
               map2d: np.ndarray, in_fit: np.ndarray) -> pd.DataFrame:
    """The model's ``lots`` table: each training lot's style, membership, score and place."""
    a = styles.assignment
    return pd.DataFrame({
        "lot_id": ids["lot_id"].astype(str), "row": ids["row"].astype(int),
        "grade": ids["grade"].astype(float),
        "style": np.array([styles.ids[s] if s >= 0 else UNASSIGNED for s in a.style_index],
                          dtype=object),
        "style_index": a.style_index.astype(int), "membership": a.membership.astype(float),
        "outlier_score": a.outlier_score.astype(float),
        "nearest_style": np.array(styles.ids, dtype=object)[a.nearest_index],
        "cluster": clusters.astype(int),
        "map_x": map2d[:, 0].astype(float), "map_y": map2d[:, 1].astype(float),
        "in_fit": in_fit.astype(bool),
    })


def _segment_params(config: Config, embedding: _Embedding, final: Clustering,
                    styles: _StyleOrder) -> SegmentParams:
    """The clustering settings of the fit, as resolved (stored in ``model.json``)."""
    seg = config.segment
    rank = styles.rank
    return SegmentParams(
        space=seg.space, components=int(embedding.space.shape[1]),
        neighbours=embedding.neighbours, epochs=embedding.epochs,
        min_cluster_size=int(final.min_cluster_size), min_samples=int(final.min_samples),
        seed=int(config.seed), size_choice="sweep" if seg.min_cluster_size == AUTO else "fixed",
        merge_valley=float(seg.merge_valley), n_clusters=int(final.n_clusters),
        cluster_styles=tuple(styles.ids[rank[int(g)]] if int(g) in rank else ""
                             for g in final.group_of_cluster),
        one_style=len(styles.ids) == 1, map_min_dist=float(seg.map_min_dist),
    )


def _outlier_reference(cutoff: float, styles: _StyleOrder) -> dict[str, object]:
    """The cutoff and each style's typicality shape, for scoring new lots."""
    return {"cutoff": float(cutoff),
            "shapes": {sid: shape.to_dict() for sid, shape in zip(styles.ids, styles.shapes)}}


def _row_status(table: LotTable) -> pd.DataFrame:
    rows = table.ids[["row", "lot_id", "status", "detail"]].copy()
    rows["lot_id"] = rows["lot_id"].astype(str)
    return rows
