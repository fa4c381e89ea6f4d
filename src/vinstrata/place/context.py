"""What placing needs of a model, built once and reused for every batch of new lots.

Placing a batch of lots asks the same things of the model every time: the
fitted lots' k-d tree and the rebuilt HDBSCAN predictor
(:class:`vinstrata.segment.reference.FitReference`), a tree over the
clustering space for the nearest historical lots, one tree per style over its
graded lots for the band shares, the atypical line and the driver scales.
Building them costs about a second for the demo model (HDBSCAN's rebuild is
most of it); :class:`PlacingContext` holds them so that a file placed in
batches, or on many workers, pays that once per process.
"""

from __future__ import annotations

from dataclasses import dataclass

from vinstrata.config import Config
from vinstrata.place.flags import DriverScale, driver_scales
from vinstrata.place.neighbours import PoolLookup, style_pools
from vinstrata.profile.drivers import Profiles
from vinstrata.segment import embed
from vinstrata.segment.model import StyleModel
from vinstrata.segment.reference import FitReference, model_reference
from vinstrata.segment.typicality import atypical_line
from vinstrata.settings import PlaceSettings


@dataclass(frozen=True)
class PlacingContext:
    """A model made ready for placing: everything per-model that placing a batch reads.

    Attributes
    ----------
    model : StyleModel
    profiles : Profiles or None
        For the driver flags.
    config : Config
        The place and limits settings (the model's own when none was given).
    settings : PlaceSettings
    reference : FitReference
        The fitted lots' tree and HDBSCAN predictor.
    space_index : NeighbourIndex
        Over every historical lot's clustering-space position (the nearest lots).
    band_pools : tuple
        Each historical lot's grade band and, per style, its graded lots with a tree
        over them (:func:`vinstrata.place.neighbours.style_pools`).
    line : float
        The atypical line: the training lots' percentile of the outlier score.
    scales : dict or None
        Style id -> driver scale (:func:`vinstrata.place.flags.driver_scales`).
    """

    model: StyleModel
    profiles: Profiles | None
    config: Config
    settings: PlaceSettings
    reference: FitReference
    space_index: embed.NeighbourIndex
    band_pools: PoolLookup
    line: float
    scales: dict[str, DriverScale] | None


def placing_context(model: StyleModel, profiles: Profiles | None = None,
                    config: Config | None = None) -> PlacingContext:
    """Build the :class:`PlacingContext` of ``model`` (once per model and process).

    Parameters
    ----------
    model : StyleModel
    profiles : Profiles, optional
    config : Config, optional
        The model's config when None.

    Returns
    -------
    PlacingContext
    """
    config = config or model.config
    settings = PlaceSettings.from_config(config, model.source.sha256)
    lots = model.lots
    line = atypical_line(lots["outlier_score"].to_numpy(dtype=float),
                         settings.atypical_percentile)
    return PlacingContext(
        model=model, profiles=profiles, config=config, settings=settings,
        reference=model_reference(model), space_index=embed.NeighbourIndex(model.space),
        band_pools=style_pools(model, settings.bands, settings.include_unassigned), line=line,
        scales=driver_scales(model, profiles) if profiles is not None else None)
