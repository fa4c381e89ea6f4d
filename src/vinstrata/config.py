"""The run configuration: one typed, validated place for every setting.

A config is a TOML file; ``configs/default.toml`` documents every key. This
module turns it into frozen dataclasses and refuses, in one line naming the
file, the key and what was expected, a config that lacks a required key, has
an unknown key or holds a value of the wrong type. Every other module reads
settings only from a :class:`Config`.

Each key is declared once, as a dataclass field made by :func:`setting`: its
default and the check its value must pass sit together, and :data:`SCHEMA`,
the parser and the test keeping ``configs/default.toml`` in step are derived
from the fields.
"""

from __future__ import annotations

import dataclasses
import math
import sys
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any, NamedTuple, get_type_hints

from vinstrata.errors import InputError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as tomllib

AUTO = "auto"


# --------------------------------------------------------------------------- value checks

Check = Callable[[Any], Any]


class _Wrong(Exception):
    """A value does not fit; carries what was expected."""


def _describe(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _string(value: Any) -> str:
    if not isinstance(value, str):
        raise _Wrong("a string")
    return value


def _integer(value: Any) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise _Wrong("an integer")
    return value


def _number(value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise _Wrong("a finite number")
    return float(value)


def _boolean(value: Any) -> bool:
    if not isinstance(value, bool):
        raise _Wrong("true or false")
    return value


def _num(value: float) -> str:
    return str(int(value)) if float(value).is_integer() else f"{value:g}"


def _positive(check: Check, minimum: float = 1) -> Check:
    def run(value: Any) -> Any:
        out = check(value)
        if out < minimum:
            raise _Wrong(f"a value of at least {_num(minimum)}")
        return out

    return run


def _between(check: Check, low: float, high: float) -> Check:
    def run(value: Any) -> Any:
        out = check(value)
        if not low <= out <= high:
            raise _Wrong(f"a value between {_num(low)} and {_num(high)}")
        return out

    return run


def _choice(*options: str) -> Check:
    def run(value: Any) -> str:
        if value not in options:
            raise _Wrong("one of " + ", ".join(f'"{o}"' for o in options))
        return value

    return run


def _auto_or(check: Check) -> Check:
    def run(value: Any) -> Any:
        if value == AUTO:
            return AUTO
        try:
            return check(value)
        except _Wrong as wrong:
            raise _Wrong(f'"auto" or {wrong}') from None

    return run


def _list_of(check: Check, what: str, min_len: int = 0) -> Check:
    def run(value: Any) -> tuple[Any, ...]:
        if not isinstance(value, list):
            raise _Wrong(f"a list of {what}")
        try:
            out = tuple(check(v) for v in value)
        except _Wrong:
            raise _Wrong(f"a list of {what}") from None
        if len(out) < min_len:
            raise _Wrong(f"a list of at least {min_len} {what}")
        return out

    return run


def _table_of(check: Check, what: str) -> Check:
    def run(value: Any) -> dict[str, Any]:
        if not isinstance(value, dict):
            raise _Wrong(f"a table of {what}")
        out = {}
        for k, v in value.items():
            try:
                out[str(k)] = check(v)
            except _Wrong as wrong:
                raise _Wrong(f"{wrong} for '{k}'") from None
        return out

    return run


def _pair(value: Any) -> tuple[float, float]:
    if not isinstance(value, list) or len(value) != 2:
        raise _Wrong("a list [low, high] of two numbers")
    low, high = (_number(v) for v in value)
    if low > high:
        raise _Wrong("a list [low, high] with low <= high")
    return (low, high)


_NAME = _string
_NAMES = _list_of(_string, "strings")
_LIMIT = _positive(_number, 0.0)


# --------------------------------------------------------------------------- declaring a key

REQUIRED: Any = dataclasses.MISSING
"""The default of a key the config must give (no default)."""


def setting(default: Any, check: Check) -> Any:
    """A config key: a dataclass field holding its default and the check of its value.

    Parameters
    ----------
    default : object
        The value when the config leaves the key out; :data:`REQUIRED` for a key
        the config must give. A dict default is copied for every instance.
    check : callable
        Takes the value as parsed from TOML and returns it in its stored form
        (lists become tuples, integers floats where a number is expected), or
        raises ``_Wrong`` saying what was expected.

    Returns
    -------
    dataclasses.Field
    """
    metadata = {"check": check}
    if isinstance(default, dict):
        return dataclasses.field(default_factory=lambda: dict(default), metadata=metadata)
    return dataclasses.field(default=default, metadata=metadata)


def _analyte_table(check: Check) -> Any:
    """A top-level table keyed by analyte (``[units]``); an error names the analyte's key."""
    return dataclasses.field(default_factory=dict, metadata={"each": check})


def _market_tables(cls: type, markets: tuple[str, ...]) -> Any:
    """``[<section>.<market>]`` tables, each holding some of the keys of ``cls``."""
    return dataclasses.field(default_factory=dict, metadata={"markets": markets, "keys": cls})


# --------------------------------------------------------------------------- sections


@dataclass(frozen=True)
class Columns:
    """Which file columns hold what (``[columns]``)."""

    lot_id: str = setting(REQUIRED, _NAME)
    grade: str = setting("", _NAME)
    analytes: tuple[str, ...] = setting((), _NAMES)
    passthrough: tuple[str, ...] = setting((), _NAMES)


@dataclass(frozen=True)
class Bands:
    """Grade bands (``[bands]``): global cuts or per-style quantiles."""

    cuts: tuple[float, ...] = setting((14.0, 16.0), _list_of(_number, "numbers", 1))
    labels: tuple[str, ...] = setting(("bottom", "middle", "top"),
                                      _list_of(_string, "strings", 2))
    mode: str = setting("global", _choice("global", "style_quantile"))
    quantiles: tuple[float, ...] = setting(
        (0.2, 0.8), _list_of(_between(_number, 0.0, 1.0), "numbers between 0 and 1", 1))


@dataclass(frozen=True)
class Ingest:
    """How files are read and cells parsed (``[ingest]``)."""

    delimiter: str = setting(AUTO, _choice(AUTO, ",", ";", "\t", "tab"))
    decimal: str = setting(AUTO, _choice(AUTO, ".", ","))
    sheet: str = setting("", _string)
    censored: str = setting("half_limit", _choice("half_limit", "limit"))
    max_missing_share: float = setting(0.25, _between(_number, 0.0, 1.0))
    duplicate_ids: str = setting("keep_first", _choice("keep_first", "reject_all"))
    max_unpacked_mb: int = setting(512, _between(_integer, 1, 1_000_000))
    max_cells: int = setting(50_000_000, _between(_integer, 1000, 10**12))
    max_columns: int = setting(5000, _between(_integer, 2, 10**7))
    max_cell_kb: int = setting(64, _between(_integer, 1, 10**6))


class _Refused(_Wrong):
    """A value refused with its own explanation instead of "expected ..."."""


_DERIVED_NAMES = _list_of(_choice("bound_so2", "molecular_so2"),
                          'names among "bound_so2", "molecular_so2"')


def _derived_names(value: Any) -> tuple[str, ...]:
    # total acidity was once derived (fixed + volatile); the name is the trade's for
    # titratable acidity, which labs report directly, so a config asking for it is told why
    if isinstance(value, list) and "total_acidity" in value:
        raise _Refused('"total_acidity" is no longer derived: labs report titratable acidity '
                       'directly, and "total acidity" is the trade\'s name for titratable '
                       "acidity (name the column titratable_acidity)")
    return _DERIVED_NAMES(value)


@dataclass(frozen=True)
class Derived:
    """Analytes computed from others (``[derived]``), opt-in."""

    add: tuple[str, ...] = setting((), _derived_names)
    so2_pka: float = setting(1.81, _between(_number, 1.0, 3.0))


@dataclass(frozen=True)
class Segment:
    """Transform, clustering space and HDBSCAN settings (``[segment]``)."""

    space: str = setting("umap", _choice("umap", "chemistry"))
    components: int = setting(8, _between(_integer, 2, 50))
    neighbours: int = setting(15, _between(_integer, 2, 200))
    epochs: int | str = setting(AUTO, _auto_or(_between(_integer, 10, 5000)))
    min_cluster_size: int | str = setting(AUTO, _auto_or(_positive(_integer, 2)))
    min_samples: int | str = setting(AUTO, _auto_or(_positive(_integer, 1)))
    sweep: tuple[float, ...] = setting(
        (0.005, 0.01, 0.02, 0.035, 0.05, 0.08),
        _list_of(_between(_number, 0.0001, 0.5), "fractions between 0 and 0.5", 1))
    merge_valley: float = setting(0.5, _between(_number, 0.0, 1.0))
    min_style_lots: int = setting(30, _positive(_integer, 1))
    outlier_cutoff: float = setting(3.5, _positive(_number, 0.0))
    skew_threshold: float = setting(1.0, _positive(_number, 0.0))
    transforms: Mapping[str, str] = setting(
        {}, _table_of(_choice(AUTO, "log", "none"), '"auto", "log" or "none"'))
    impute_neighbours: int = setting(5, _between(_integer, 1, 100))
    map_min_dist: float = setting(0.1, _between(_number, 0.0, 1.0))
    fit_sample: int = setting(25_000, _positive(_integer, 100))


@dataclass(frozen=True)
class Profile:
    """Within-style driver statistics (``[profile]``)."""

    bootstrap: int = setting(2000, _between(_integer, 100, 100000))
    min_band_lots: int = setting(10, _positive(_integer, 2))
    fdr: float = setting(0.05, _between(_number, 0.0001, 0.5))
    ci_level: float = setting(0.95, _between(_number, 0.5, 0.999))
    target_quantiles: tuple[float, ...] = setting(
        (0.1, 0.9), _list_of(_between(_number, 0.0, 1.0), "numbers between 0 and 1", 2))
    include_unassigned: bool = setting(False, _boolean)


@dataclass(frozen=True)
class Place:
    """Placing new lots (``[place]``)."""

    neighbours: int = setting(5, _between(_integer, 1, 100))
    band_neighbours: int = setting(15, _between(_integer, 1, 500))
    atypical_percentile: float = setting(95.0, _between(_number, 50.0, 100.0))
    z_flag: float = setting(3.0, _positive(_number, 0.5))
    # new lots read and placed at a time: memory grows with this, not with the file
    batch_lots: int = setting(10_000, _between(_integer, 1, 10_000_000))


@dataclass(frozen=True)
class LimitSet:
    """One market's screening limits; see :mod:`vinstrata.place.limits` for sources.

    Every value is required of a whole set (``limits.MARKETS``); a
    ``[limits.<market>]`` table of a config overrides any of them.
    """

    va_max_red: float = setting(REQUIRED, _LIMIT)
    va_max_white_rose: float = setting(REQUIRED, _LIMIT)
    so2_max_red_dry: float = setting(REQUIRED, _LIMIT)
    so2_max_red_sweet: float = setting(REQUIRED, _LIMIT)
    so2_max_white_rose_dry: float = setting(REQUIRED, _LIMIT)
    so2_max_white_rose_sweet: float = setting(REQUIRED, _LIMIT)
    sweet_from_sugar: float = setting(REQUIRED, _LIMIT)
    sweet_inclusive: bool = setting(REQUIRED, _boolean)
    sulfite_label_from: float = setting(REQUIRED, _LIMIT)
    sulfite_label_inclusive: bool = setting(REQUIRED, _boolean)


@dataclass(frozen=True)
class Limits:
    """Screening limits (``[limits]``) and per-market overrides."""

    market: str = setting("eu", _choice("eu", "oiv", "us", "none"))
    colour_column: str = setting("", _string)
    default_colour: str = setting("", _choice("", "red", "white", "rose"))
    molecular_so2_min_red: float = setting(0.5, _positive(_number, 0.0))
    molecular_so2_min_white_rose: float = setting(0.8, _positive(_number, 0.0))
    overrides: Mapping[str, Mapping[str, float | bool]] = _market_tables(
        LimitSet, ("eu", "oiv", "us"))


@dataclass(frozen=True)
class Report:
    """Briefing settings (``[report]``)."""

    title: str = setting("Range briefing", _string)
    producer: str = setting("", _string)
    top_drivers: int = setting(3, _between(_integer, 1, 10))


@dataclass(frozen=True)
class Output:
    """How output files are written (``[output]``)."""

    spreadsheet_safe: bool = setting(True, _boolean)


@dataclass(frozen=True)
class Config:
    """A whole validated configuration."""

    columns: Columns
    units: Mapping[str, str] = _analyte_table(_string)
    kinds: Mapping[str, str] = _analyte_table(_string)
    bounds: Mapping[str, tuple[float, float]] = _analyte_table(_pair)
    bands: Bands = field(default_factory=Bands)
    ingest: Ingest = field(default_factory=Ingest)
    derived: Derived = field(default_factory=Derived)
    segment: Segment = field(default_factory=Segment)
    profile: Profile = field(default_factory=Profile)
    place: Place = field(default_factory=Place)
    limits: Limits = field(default_factory=Limits)
    report: Report = field(default_factory=Report)
    output: Output = field(default_factory=Output)
    seed: int = setting(20261201, _between(_integer, 0, 2**32 - 1))
    source: str = "<defaults>"  # not a key: the file name used in messages

    def to_dict(self) -> dict[str, Any]:
        """Plain-data form, stored with every model and printed in the briefing."""
        return _plain(dataclasses.asdict(self))


def _plain(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return value


# --------------------------------------------------------------------------- schema


class Section(NamedTuple):
    """The keys of one ``[section]``, read off its dataclass."""

    cls: type
    checks: dict[str, Check]
    required: frozenset[str]


def _required(f: dataclasses.Field[Any]) -> bool:
    return f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING


def section_of(cls: type) -> Section:
    """The keys of the dataclass ``cls``: its fields made by :func:`setting`.

    Parameters
    ----------
    cls : type
        A section dataclass, e.g. :class:`Segment`.

    Returns
    -------
    Section
        The class, the check of each key and the keys without a default.
    """
    keyed = [f for f in dataclasses.fields(cls) if "check" in f.metadata]
    return Section(cls, {f.name: f.metadata["check"] for f in keyed},
                   frozenset(f.name for f in keyed if _required(f)))


def _top_keys() -> tuple[dict[str, dataclasses.Field[Any]], dict[str, Section]]:
    hints = get_type_hints(Config)
    keys: dict[str, dataclasses.Field[Any]] = {}
    sections: dict[str, Section] = {}
    for f in dataclasses.fields(Config):
        if dataclasses.is_dataclass(hints[f.name]):
            sections[f.name] = section_of(hints[f.name])
        elif not f.metadata:
            continue  # ``source``: where the config came from, not a key
        keys[f.name] = f
    return keys, sections


# _TOP: every top-level key (the sections, the analyte tables, seed) by name;
# SCHEMA: section name -> its dataclass, the check of each key and the required keys
_TOP, SCHEMA = _top_keys()


def _fail(source: str, key: str, expected: str, value: Any = None, got: bool = True) -> InputError:
    tail = f", got {_describe(value)}" if got else ""
    return InputError(f"{source}: key '{key}': expected {expected}{tail}")


def _checked(source: str, key: str, check: Check, value: Any) -> Any:
    try:
        return check(value)
    except _Refused as refused:
        raise InputError(f"{source}: key '{key}': {refused}") from None
    except _Wrong as wrong:
        raise _fail(source, key, str(wrong), value) from None


def _unknown(source: str, key: str, known: Mapping[str, Any]) -> InputError:
    return InputError(f"{source}: unknown key '{key}' (known keys: {', '.join(sorted(known))})")


def _build_section(source: str, name: str, raw: Any) -> Any:
    cls, checks, required = SCHEMA[name]
    if not isinstance(raw, dict):
        raise _fail(source, name, "a table", raw)
    grouped = [f for f in dataclasses.fields(cls) if "markets" in f.metadata]
    subtables = {market for f in grouped for market in f.metadata["markets"]}
    values: dict[str, Any] = {}
    for key, value in raw.items():
        if key in subtables:
            continue
        if key not in checks:
            raise _unknown(source, f"{name}.{key}", checks)
        values[key] = _checked(source, f"{name}.{key}", checks[key], value)
    for key in sorted(required):
        if key not in values:
            raise _fail(source, f"{name}.{key}", "a value (this key is required)", got=False)
    for f in grouped:
        values[f.name] = _build_subtables(source, name, raw, f.metadata["markets"],
                                          section_of(f.metadata["keys"]))
    return cls(**values)


def _build_subtables(source: str, name: str, raw: dict[str, Any], markets: tuple[str, ...],
                     keys: Section) -> dict[str, dict[str, Any]]:
    # a market table overrides some of that market's values: no key is required here
    out: dict[str, dict[str, Any]] = {}
    for market in markets:
        table = raw.get(market)
        if table is None:
            continue
        if not isinstance(table, dict):
            raise _fail(source, f"{name}.{market}", "a table", table)
        out[market] = {}
        for key, value in table.items():
            if key not in keys.checks:
                raise _unknown(source, f"{name}.{market}.{key}", keys.checks)
            out[market][key] = _checked(source, f"{name}.{market}.{key}", keys.checks[key],
                                        value)
    return out


def _build_analyte_table(source: str, name: str, check: Check, raw: Any) -> dict[str, Any]:
    if not isinstance(raw, dict):
        raise _fail(source, name, "a table", raw)
    return {str(key): _checked(source, f"{name}.{key}", check, value)
            for key, value in raw.items()}


def _cross_checks(source: str, config: Config) -> None:
    bands = config.bands
    if list(bands.cuts) != sorted(bands.cuts) or len(set(bands.cuts)) != len(bands.cuts):
        raise _fail(source, "bands.cuts", "strictly ascending numbers", list(bands.cuts))
    if len(bands.labels) != len(bands.cuts) + 1:
        raise _fail(source, "bands.labels", f"{len(bands.cuts) + 1} names (one more than cuts)",
                    list(bands.labels))
    if len(set(bands.labels)) != len(bands.labels):
        raise _fail(source, "bands.labels", "distinct names", list(bands.labels))
    q = bands.quantiles
    if bands.mode == "style_quantile" and (list(q) != sorted(q) or len(q) != len(bands.cuts)):
        raise _fail(source, "bands.quantiles",
                    f"{len(bands.cuts)} ascending quantiles (one per cut)", list(q))
    tq = config.profile.target_quantiles
    if len(tq) != 2 or tq[0] >= tq[1]:
        raise _fail(source, "profile.target_quantiles", "[low, high] with low < high", list(tq))
    cols = config.columns
    named = [cols.lot_id, *([cols.grade] if cols.grade else []), *cols.analytes, *cols.passthrough]
    seen: set[str] = set()
    for name in named:
        if name in seen:
            raise _fail(source, "columns", f"each column named once ('{name}' appears twice)",
                        got=False)
        seen.add(name)
    if not cols.lot_id.strip():
        raise _fail(source, "columns.lot_id", "a column name", cols.lot_id)
    colour = config.limits.colour_column
    if colour and colour not in cols.passthrough:
        # the colour reaches the screening only as a passthrough column
        raise _fail(source, "limits.colour_column", "one of the [columns] passthrough names "
                    f"({', '.join(cols.passthrough) or 'none given'})", colour)


def parse_config(raw: Mapping[str, Any], source: str = "<config>") -> Config:
    """Validate a parsed TOML mapping and build a :class:`Config`.

    Parameters
    ----------
    raw : mapping
        The TOML document as parsed by ``tomllib``.
    source : str
        File name used in error messages.

    Returns
    -------
    Config

    Raises
    ------
    InputError
        On a missing required key, an unknown key or a value of the wrong type.
    """
    for name, f in _TOP.items():
        if _required(f) and name not in raw:
            at_least = ", ".join(sorted(SCHEMA[name].required))
            raise _fail(source, name, f"a [{name}] table with at least {at_least}", got=False)
    values: dict[str, Any] = {"source": source}
    for key, value in raw.items():
        if key not in _TOP:
            raise _unknown(source, key, _TOP)
        meta = _TOP[key].metadata
        if key in SCHEMA:
            values[key] = _build_section(source, key, value)
        elif "each" in meta:
            values[key] = _build_analyte_table(source, key, meta["each"], value)
        else:
            values[key] = _checked(source, key, meta["check"], value)
    config = Config(**values)
    _cross_checks(source, config)
    return config


def load_config(path: str | Path | None = None) -> Config:
    """Read and validate a TOML config file; ``None`` reads the packaged default."""
    if path is None:
        text = resources.files("vinstrata").joinpath("configs/default.toml").read_text("utf-8")
        return parse_config(tomllib.loads(text), "default.toml")
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"{path}: config file not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read the config ({exc.__class__.__name__})") from None
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path}: not valid TOML ({exc})") from None
    return parse_config(raw, str(path))


def packaged_config(name: str) -> Config:
    """A config shipped inside the package (``default`` or ``demo``)."""
    text = resources.files("vinstrata").joinpath(f"configs/{name}.toml").read_text("utf-8")
    return parse_config(tomllib.loads(text), f"{name}.toml")


def with_overrides(config: Config, **changes: Any) -> Config:
    """A copy of ``config`` with top-level fields replaced (e.g. ``seed``)."""
    return dataclasses.replace(config, **changes)
