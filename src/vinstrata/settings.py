"""The settings each result was computed with, kept with it and written beside its files.

A model keeps its config and clustering parameters; profiles and placements
keep theirs here, so that whatever reads a result back (the briefing above
all) states the numbers the result was made with, not those of the config
at hand. Both records are plain data: :meth:`to_dict` gives JSON-ready
values, :meth:`from_dict` reads them back and refuses a record with a key
missing or of the wrong type.
"""

from __future__ import annotations

import dataclasses
import typing
from dataclasses import dataclass
from typing import Any

from vinstrata.config import Bands, Config
from vinstrata.errors import InputError


class _Record:
    """Plain-data round trip shared by the settings records."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready plain data."""
        return _plain(self)

    @classmethod
    def from_dict(cls, data: Any, where: str = "settings") -> Any:
        """Read :meth:`to_dict` back.

        Parameters
        ----------
        data : dict
            As :meth:`to_dict` gave it (read from JSON).
        where : str
            Names the source in errors.

        Raises
        ------
        InputError
            A key is missing or a value has the wrong type.
        """
        return _record(cls, data, where)


@dataclass(frozen=True)
class ProfileSettings(_Record):
    """What a profile run was computed with: ``[profile]``, ``[bands]``, seed and model.

    ``model_sha256`` is the SHA-256 of the model's input file ("" for lots
    profiled without a model).
    """

    bootstrap: int
    fdr: float
    ci_level: float
    min_band_lots: int
    target_quantiles: tuple[float, ...]
    include_unassigned: bool
    bands: Bands
    seed: int
    model_sha256: str = ""

    @classmethod
    def from_config(cls, config: Config, model_sha256: str = "") -> ProfileSettings:
        """The settings of ``config`` for profiling the lots of a model.

        Parameters
        ----------
        config : Config
        model_sha256 : str
            The SHA-256 of the model's input file.

        Returns
        -------
        ProfileSettings
        """
        prof = config.profile
        return cls(bootstrap=int(prof.bootstrap), fdr=float(prof.fdr),
                   ci_level=float(prof.ci_level), min_band_lots=int(prof.min_band_lots),
                   target_quantiles=tuple(float(q) for q in prof.target_quantiles),
                   include_unassigned=bool(prof.include_unassigned), bands=config.bands,
                   seed=int(config.seed), model_sha256=model_sha256)


@dataclass(frozen=True)
class PlaceSettings(_Record):
    """What a placing run was computed with: ``[place]``, bands, market, seed and model."""

    atypical_percentile: float
    z_flag: float
    neighbours: int
    band_neighbours: int
    bands: Bands
    include_unassigned: bool
    market: str
    seed: int
    model_sha256: str = ""

    @classmethod
    def from_config(cls, config: Config, model_sha256: str = "") -> PlaceSettings:
        """The settings of ``config`` for placing lots against a model.

        Parameters
        ----------
        config : Config
        model_sha256 : str
            The SHA-256 of the model's input file.

        Returns
        -------
        PlaceSettings
        """
        place = config.place
        return cls(atypical_percentile=float(place.atypical_percentile),
                   z_flag=float(place.z_flag), neighbours=int(place.neighbours),
                   band_neighbours=int(place.band_neighbours), bands=config.bands,
                   include_unassigned=bool(config.profile.include_unassigned),
                   market=config.limits.market, seed=int(config.seed),
                   model_sha256=model_sha256)


def _plain(record: Any) -> dict[str, Any]:
    def plain(value: Any) -> Any:
        if isinstance(value, dict):
            return {str(k): plain(v) for k, v in value.items()}
        if isinstance(value, (list, tuple)):
            return [plain(v) for v in value]
        return value

    return plain(dataclasses.asdict(record))


_SCALARS: dict[type, tuple[type, ...]] = {
    bool: (bool,), int: (int,), float: (int, float), str: (str,),
}


def _record(cls: type, data: Any, where: str) -> Any:
    """A frozen record of ``cls`` from plain data, each value checked against its field type."""
    if not isinstance(data, dict):
        raise InputError(f"{where}: expected a table of settings")
    hints = typing.get_type_hints(cls)
    values = {}
    for f in dataclasses.fields(cls):
        if f.name not in data:
            if f.default is not dataclasses.MISSING or f.default_factory is not dataclasses.MISSING:
                continue
            raise InputError(f"{where}: no '{f.name}'")
        values[f.name] = _value(hints[f.name], data[f.name], f"{where}: '{f.name}'")
    return cls(**values)


def _value(hint: Any, value: Any, where: str) -> Any:
    if dataclasses.is_dataclass(hint):
        return _record(hint, value, where)
    if typing.get_origin(hint) is tuple:
        item = typing.get_args(hint)[0]
        if not isinstance(value, list):
            raise InputError(f"{where}: expected a list")
        return tuple(_value(item, v, where) for v in value)
    kinds = _SCALARS.get(hint)
    if kinds is None:  # pragma: no cover - every field type is listed above
        raise TypeError(f"no reader for {hint!r}")
    if not isinstance(value, kinds) or (hint is not bool and isinstance(value, bool)):
        raise InputError(f"{where}: expected {hint.__name__}, got {value!r}")
    return hint(value)
