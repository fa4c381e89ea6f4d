"""Lots assigned to a fitted model's styles: HDBSCAN rebuilt, soft membership, typicality."""

from __future__ import annotations

import warnings

import numpy as np

from vinstrata.errors import InputError
from vinstrata.segment.model import StyleModel
from vinstrata.segment.sweep import fit_hdbscan
from vinstrata.segment.typicality import StyleShape


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


def group_memberships(clusterer: object, group_of_cluster: np.ndarray, n_groups: int,
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
