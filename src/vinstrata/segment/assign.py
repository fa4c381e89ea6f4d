"""Assigning lots to styles: HDBSCAN's prediction, soft membership, typicality.

Fitting and placing assign lots the same way, through :func:`assign_lots`:

* HDBSCAN's word on each lot (a :class:`Prediction`): its style, or none for
  HDBSCAN noise, with its strength of membership; for training lots the fit's
  own labels (:func:`training_prediction`), for new lots HDBSCAN's approximate
  prediction against the rebuilt clusterer (:func:`predict_styles`);
* its nearest style: its own, or for a lot without one the style of its
  largest soft membership;
* its outlier score against the nearest style's shape (typicality, judged in
  the scaled chemistry, :mod:`vinstrata.segment.typicality`);
* the "fits no style" rule: a lot scoring above the outlier cutoff is
  unassigned. An unassigned lot keeps its nearest style, and its membership is
  its soft membership to that style.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from vinstrata.errors import InputError
from vinstrata.segment.membership import (
    Reach,
    SoftTables,
    predict_clusters,
    reach,
    soft_membership,
    soft_tables,
)
from vinstrata.segment.model import StyleModel
from vinstrata.segment.sweep import fit_hdbscan
from vinstrata.segment.typicality import StyleShape

SoftMembership = Callable[[np.ndarray], np.ndarray]  # lot rows -> their membership to each style


@dataclass(frozen=True)
class Prediction:
    """HDBSCAN's word on each lot, before typicality is judged.

    Attributes
    ----------
    style_index : ndarray of int
        The lot's style, -1 for HDBSCAN noise.
    strength : ndarray of float
        HDBSCAN's strength of membership in that style.
    soft : callable
        Rows (indices) -> their soft membership to every style, computed only
        for the lots that need it.
    """

    style_index: np.ndarray
    strength: np.ndarray
    soft: SoftMembership


@dataclass(frozen=True)
class Assignment:
    """Each lot's style after typicality.

    Attributes
    ----------
    style_index : ndarray of int
        The lot's style, -1 for unassigned (HDBSCAN noise or fits no style).
    nearest_index : ndarray of int
        Its own style, or for an unassigned lot the style it resembles most.
    membership : ndarray of float
        HDBSCAN's strength of membership, or for an unassigned lot its soft
        membership to the nearest style.
    outlier_score : ndarray of float
        Typicality against the nearest style, as a z.
    fits_none : ndarray of bool
        Outlier score above the cutoff.
    """

    style_index: np.ndarray
    nearest_index: np.ndarray
    membership: np.ndarray
    outlier_score: np.ndarray
    fits_none: np.ndarray


def score_lots(shapes: Sequence[StyleShape], nearest: np.ndarray, scaled: np.ndarray,
               scores: np.ndarray, rows: np.ndarray | None = None) -> np.ndarray:
    """Outlier scores of lots against their nearest style's shape, written into ``scores``.

    Parameters
    ----------
    shapes : sequence of StyleShape
        One per style, in style-index order.
    nearest : ndarray of int
        Each lot's nearest style.
    scaled : ndarray
        The lots' scaled chemistry.
    scores : ndarray of float
        Filled in place for the scored lots.
    rows : ndarray of bool, optional
        Score only these lots (all when None).

    Returns
    -------
    ndarray of float
        ``scores``.
    """
    for s, shape in enumerate(shapes):
        mask = nearest == s if rows is None else rows & (nearest == s)
        if mask.any():
            scores[mask] = shape.score(scaled[mask])
    return scores


def assign_lots(prediction: Prediction, shapes: Sequence[StyleShape], scaled: np.ndarray,
                cutoff: float) -> Assignment:
    """Assign lots to styles: HDBSCAN's prediction, then the "fits no style" rule.

    Parameters
    ----------
    prediction : Prediction
        HDBSCAN's styles, strengths and soft membership of the lots.
    shapes : sequence of StyleShape
        Each style's typicality shape, in style-index order.
    scaled : ndarray
        The lots' scaled chemistry, in the rows of ``prediction``.
    cutoff : float
        Outlier score above which a lot fits no style (``segment.outlier_cutoff``).

    Returns
    -------
    Assignment
    """
    predicted = prediction.style_index
    nearest = predicted.copy()
    membership = prediction.strength.copy()
    loose = np.flatnonzero(predicted < 0)
    if loose.size:
        _to_nearest_soft(prediction.soft, loose, nearest, membership, pick=True)
    scores = score_lots(shapes, nearest, scaled, np.empty(len(predicted)))
    fits_none = scores > cutoff
    turned = np.flatnonzero(fits_none & (predicted >= 0))
    if turned.size:  # styled by HDBSCAN but unlike its style's chemistry: unassigned too
        _to_nearest_soft(prediction.soft, turned, nearest, membership, pick=False)
    return Assignment(style_index=np.where(fits_none, -1, predicted), nearest_index=nearest,
                      membership=membership, outlier_score=scores, fits_none=fits_none)


def _to_nearest_soft(soft: SoftMembership, rows: np.ndarray, nearest: np.ndarray,
                     membership: np.ndarray, pick: bool) -> None:
    """Give ``rows`` their soft membership to their nearest style (picked first if ``pick``)."""
    vectors = soft(rows)
    if pick:
        nearest[rows] = np.argmax(vectors, axis=1)
    membership[rows] = vectors[np.arange(rows.size), nearest[rows]]


# --------------------------------------------------------------------------- HDBSCAN's numbering


def label_order(clusterer: object, space: np.ndarray) -> np.ndarray:
    """The fit's label (``labels_``) of each cluster as hdbscan's prediction functions number it.

    hdbscan's prediction data selects its clusters from the condensed tree again and
    numbers them in its own order, which can differ from ``labels_`` (seen on fits
    holding several small clusters): label p of ``approximate_predict`` and column p
    of a membership vector then belong to another cluster than label p of the fit, and
    new lots land in the wrong style. The fit's own lots tell which is which: each
    prediction label maps to the fit label most of its training lots carry (-1 when
    none does).

    Parameters
    ----------
    clusterer : hdbscan.HDBSCAN
        Fitted, with prediction data.
    space : ndarray
        The training lots' clustering-space coordinates (the data it was fitted on).

    Returns
    -------
    ndarray of int, one entry per prediction cluster
    """
    labels = np.asarray(clusterer.labels_)
    predicted, _ = predict_clusters(soft_tables(clusterer), space)  # approximate_predict
    n_predicted = len(clusterer.prediction_data_.exemplars)
    order = np.full(n_predicted, -1, dtype=int)
    for p in range(n_predicted):
        theirs = labels[(predicted == p) & (labels >= 0)]
        if theirs.size:
            order[p] = int(np.bincount(theirs).argmax())
    return order


def _in_fit_order(style_of_cluster: Sequence[int], order: np.ndarray) -> list[int]:
    """The style of each prediction cluster, from the style of each fit cluster."""
    return [int(style_of_cluster[c]) if c >= 0 else -1 for c in order]


# --------------------------------------------------------------------------- training lots


def _sum_by_style(vectors: np.ndarray, style_of_cluster: Sequence[int], n_styles: int
                  ) -> np.ndarray:
    """Cluster memberships summed over each style's clusters (a cluster of style -1 is left out)."""
    out = np.zeros((len(vectors), n_styles))
    for c, s in enumerate(style_of_cluster):
        if s >= 0:
            out[:, s] += vectors[:, c]
    return out


def group_memberships(clusterer: object, group_of_cluster: np.ndarray, n_groups: int,
                      space: np.ndarray) -> np.ndarray:
    """Soft membership of every training lot to every group (sum over the group's clusters).

    Parameters
    ----------
    clusterer : hdbscan.HDBSCAN
        Fitted, with prediction data.
    group_of_cluster : ndarray of int
        Joined group of each cluster (-1: a dissolved cluster, left out).
    n_groups : int
        Number of groups.
    space : ndarray
        The lots' clustering-space coordinates (the data the clusterer was fitted on).

    Returns
    -------
    ndarray, shape (n, n_groups)
        Not normalised: a lot's memberships of dissolved clusters are left out.
    """
    import hdbscan

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        vectors = np.asarray(hdbscan.all_points_membership_vectors(clusterer), dtype=float)
    groups = _in_fit_order([int(g) for g in group_of_cluster], label_order(clusterer, space))
    return _sum_by_style(vectors.reshape(len(space), -1), groups, n_groups)


def training_prediction(clusterer: object, space: np.ndarray, groups: np.ndarray,
                        clusters: np.ndarray, probabilities: np.ndarray,
                        group_of_cluster: np.ndarray, n_groups: int
                        ) -> tuple[Prediction, np.ndarray]:
    """HDBSCAN's word on its own training lots, in the joined groups of the fit.

    Parameters
    ----------
    clusterer : hdbscan.HDBSCAN
        The final fit (prediction data is generated on it when needed).
    space : ndarray
        The clustering-space coordinates it was fitted on.
    groups : ndarray of int
        Joined group of each lot, -1 for noise.
    clusters, probabilities : ndarray
        HDBSCAN's labels and strengths.
    group_of_cluster : ndarray of int
        Joined group of each cluster.
    n_groups : int
        Number of joined groups (0 or 1: one style).

    Returns
    -------
    prediction : Prediction
    soft : ndarray, shape (n_lots, max(n_groups, 1))
        Soft membership of every lot to every group (not normalised).
    """
    n = len(clusters)
    if n_groups <= 1:
        # one style: HDBSCAN noise only marks the seams between the fragments
        soft = np.ones((n, 1))
        strength = np.where(clusters >= 0, probabilities, 1.0)
        groups = np.zeros(n, dtype=int)
    else:
        clusterer.generate_prediction_data()
        soft = group_memberships(clusterer, group_of_cluster, n_groups, space)
        strength = probabilities
    return Prediction(groups, np.asarray(strength, dtype=float), lambda rows: soft[rows]), soft


# --------------------------------------------------------------------------- new lots


@dataclass(frozen=True)
class Predictor:
    """HDBSCAN's prediction for lots it was not fitted on, built once per model.

    Fitting (for the lots outside the fitted sample) and placing (for new lots)
    both assign through :meth:`assign`, so a lot is treated the same whichever
    way it arrives.

    Attributes
    ----------
    clusterer : hdbscan.HDBSCAN or None
        Fitted on the fitted lots' clustering coordinates, with prediction
        data; None for a one-style model.
    style_of_cluster : tuple of int
        The style of each prediction cluster (hdbscan's own numbering,
        :func:`label_order`), -1 for a dissolved cluster.
    shapes : tuple of StyleShape
        Each style's typicality shape, in style order.
    cutoff : float
        Outlier score above which a lot fits no style.
    tables : SoftTables or None
        The clusterer's soft-membership tables (:mod:`vinstrata.segment.membership`).
    """

    clusterer: object | None
    style_of_cluster: tuple[int, ...]
    shapes: tuple[StyleShape, ...]
    cutoff: float
    tables: SoftTables | None = None

    @property
    def n_styles(self) -> int:
        return len(self.shapes)

    def soft(self, points: np.ndarray, near: Reach | None = None) -> np.ndarray:
        """Soft membership of lots at ``points`` to every style (rows sum to 1).

        ``near`` is their :class:`~vinstrata.segment.membership.Reach` when already known.
        """
        if self.clusterer is None or not len(points):
            return np.full((len(points), self.n_styles), 1.0 / max(self.n_styles, 1))
        tables = self.tables or soft_tables(self.clusterer)
        vectors = soft_membership(tables, points, near)  # hdbscan.membership_vector, vectorised
        soft = _sum_by_style(vectors.reshape(len(points), -1), self.style_of_cluster,
                             self.n_styles)
        return soft / np.maximum(soft.sum(axis=1, keepdims=True), 1e-12)

    def predict(self, space: np.ndarray) -> Prediction:
        """HDBSCAN's approximate prediction for lots at ``space``, in style order."""
        n = len(space)
        if self.clusterer is None:
            return Prediction(np.zeros(n, dtype=int), np.ones(n),
                              lambda rows: self.soft(space[rows]))
        tables = self.tables or soft_tables(self.clusterer)
        near = reach(tables, space)  # one tree query for the prediction and the soft membership
        clusters, strength = predict_clusters(tables, space, near)  # approximate_predict
        styles = np.asarray((*self.style_of_cluster, -1), dtype=int)
        return Prediction(styles[np.asarray(clusters, dtype=int)],
                          np.asarray(strength, dtype=float).copy(),
                          lambda rows: self.soft(space[rows], near.take(rows)))

    def assign(self, space: np.ndarray, scaled: np.ndarray,
               prediction: Prediction | None = None) -> Assignment:
        """Lots at ``space`` (with scaled chemistry ``scaled``) assigned to the styles.

        ``prediction`` is :meth:`predict` of ``space`` when already made.
        """
        return assign_lots(prediction or self.predict(space), self.shapes, scaled, self.cutoff)


def fit_predictor(clusterer: object | None, space: np.ndarray,
                  style_of_cluster: Sequence[int], shapes: Sequence[StyleShape],
                  cutoff: float) -> Predictor:
    """A :class:`Predictor` from a fitted clusterer and the style of each of its fit clusters.

    Parameters
    ----------
    clusterer : hdbscan.HDBSCAN or None
        Fitted on ``space`` with prediction data; None for one style.
    space : ndarray
        The clustering coordinates it was fitted on.
    style_of_cluster : sequence of int
        The style of each fit cluster (``labels_`` numbering), -1 for none.
    shapes : sequence of StyleShape
    cutoff : float
    """
    order = (_in_fit_order(style_of_cluster, label_order(clusterer, space))
             if clusterer is not None else [])
    return Predictor(clusterer=clusterer, style_of_cluster=tuple(order), shapes=tuple(shapes),
                     cutoff=float(cutoff),
                     tables=soft_tables(clusterer) if clusterer is not None else None)


def rebuild_clusterer(model: StyleModel) -> object:
    """Refit HDBSCAN on the stored clustering coordinates of the fitted lots.

    Raises
    ------
    InputError
        When the rebuilt labels differ from the stored ones (the model files
        were changed, or another hdbscan version clusters differently).
    """
    params = model.params
    fitted = model.in_fit
    clusterer = fit_hdbscan(model.space[fitted], params.min_cluster_size, params.min_samples,
                            prediction_data=True)
    if not np.array_equal(np.asarray(clusterer.labels_), model.clusters[fitted]):
        raise InputError("model: the rebuilt HDBSCAN labels differ from the stored ones "
                         "(model files changed or another hdbscan version); segment again")
    return clusterer


def style_shapes(model: StyleModel) -> dict[str, StyleShape]:
    """The stored typicality shapes of a model's styles."""
    return {sid: StyleShape.from_dict(d) for sid, d in model.outliers["shapes"].items()}


def _style_of_cluster(model: StyleModel) -> list[int]:
    position = {sid: s for s, sid in enumerate(model.style_ids)}
    return [position.get(sid, -1) for sid in model.params.cluster_styles]


def model_predictor(model: StyleModel) -> Predictor:
    """The :class:`Predictor` of a stored model (HDBSCAN rebuilt once, deterministically)."""
    shapes = style_shapes(model)
    ordered = [shapes[sid] for sid in model.style_ids]
    cutoff = float(model.outliers["cutoff"])
    if model.params.one_style:
        return Predictor(None, (), tuple(ordered), cutoff)
    return fit_predictor(rebuild_clusterer(model), model.space[model.in_fit],
                         _style_of_cluster(model), ordered, cutoff)


def predict_styles(model: StyleModel, space: np.ndarray,
                   predictor: Predictor | None = None) -> Prediction:
    """HDBSCAN's approximate prediction for new lots at ``space`` against the stored model.

    Parameters
    ----------
    model : StyleModel
    space : ndarray
        The new lots' clustering-space coordinates.
    predictor : Predictor, optional
        The model's predictor when already built (:func:`model_predictor`).

    Returns
    -------
    Prediction
        In the model's style order; soft membership from the rebuilt clusterer.
    """
    return (predictor or model_predictor(model)).predict(space)


def place_in_styles(model: StyleModel, space: np.ndarray, scaled: np.ndarray,
                    predictor: Predictor | None = None) -> Assignment:
    """New lots assigned to the model's styles, the way its training lots were.

    Parameters
    ----------
    model : StyleModel
    space : ndarray
        The new lots' clustering-space coordinates.
    scaled : ndarray
        Their scaled chemistry.
    predictor : Predictor, optional
        The model's predictor when already built (:func:`model_predictor`).

    Returns
    -------
    Assignment
    """
    return (predictor or model_predictor(model)).assign(space, scaled)
