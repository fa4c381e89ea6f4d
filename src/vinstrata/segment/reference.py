"""The fitted lots that other lots are placed among, built once per model.

A lot the styles were not fitted on (a new lot, or a training lot outside the
fitted sample of a large range, ``segment.fit_sample``) is placed in four steps,
the same for both:

1. its scaled chemistry, missing cells imputed from the fitted lots;
2. its nearest fitted lots in the scaled chemistry (a k-d tree,
   :class:`vinstrata.segment.embed.NeighbourIndex`, built once);
3. its clustering-space and map positions, the membership-weighted mean of
   those neighbours' positions (:func:`vinstrata.segment.embed.interpolate`), or
   its scaled chemistry itself with ``segment.space = "chemistry"``;
4. its style through HDBSCAN's prediction and the "fits no style" rule
   (:class:`vinstrata.segment.assign.Predictor`).

:class:`FitReference` holds what those steps need, so that placing many lots
in batches (or on many workers) builds the tree and rebuilds HDBSCAN once.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from vinstrata.segment import embed
from vinstrata.segment.assign import Assignment, Prediction, Predictor, model_predictor
from vinstrata.segment.model import StyleModel


@dataclass(frozen=True)
class Located:
    """Where lots went: clustering-space and map positions, HDBSCAN's word, their styles."""

    space: np.ndarray
    map_xy: np.ndarray
    prediction: Prediction
    assignment: Assignment


@dataclass(frozen=True)
class FitReference:
    """The fitted lots and the HDBSCAN predictor that other lots are placed with.

    Attributes
    ----------
    scaled : ndarray
        The fitted lots' scaled chemistry (also the imputation reference).
    space, map2d : ndarray
        Their clustering-space and 2-D map coordinates.
    space_kind : str
        ``segment.space``: ``"umap"`` or ``"chemistry"``.
    neighbours : int
        Nearest fitted lots a position is interpolated from (the graph's k).
    index : NeighbourIndex
        Over ``scaled``.
    predictor : Predictor
    """

    scaled: np.ndarray
    space: np.ndarray
    map2d: np.ndarray
    space_kind: str
    neighbours: int
    index: embed.NeighbourIndex
    predictor: Predictor

    def locate(self, scaled: np.ndarray) -> Located:
        """Positions and styles of lots with scaled chemistry ``scaled`` (steps 2-4)."""
        found = self.index.query(scaled, self.neighbours)
        if self.space_kind == "umap":
            space = embed.interpolate(found, self.space)
        else:
            space = np.asarray(scaled, dtype=np.float32)
        prediction = self.predictor.predict(space)
        return Located(space=space, map_xy=embed.interpolate(found, self.map2d),
                       prediction=prediction,
                       assignment=self.predictor.assign(space, scaled, prediction))


def fit_reference(scaled: np.ndarray, space: np.ndarray, map2d: np.ndarray, space_kind: str,
                  neighbours: int, predictor: Predictor) -> FitReference:
    """A :class:`FitReference` over fitted lots (their index built here)."""
    return FitReference(scaled=scaled, space=space, map2d=map2d, space_kind=space_kind,
                        neighbours=min(int(neighbours), len(scaled)),
                        index=embed.NeighbourIndex(scaled), predictor=predictor)


def model_reference(model: StyleModel, predictor: Predictor | None = None) -> FitReference:
    """The :class:`FitReference` of a stored model: its fitted lots, tree and predictor."""
    fitted = model.in_fit
    return fit_reference(model.scaled[fitted], model.space[fitted], model.map2d[fitted],
                         model.params.space, model.params.neighbours,
                         predictor or model_predictor(model))
