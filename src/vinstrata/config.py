"""The run configuration: one typed, validated place for every setting.

A config is a TOML file; ``configs/default.toml`` documents every key. This
module turns it into frozen dataclasses and refuses, in one line naming the
file, the key and what was expected, a config that lacks a required key, has
an unknown key or holds a value of the wrong type. Every other module reads
settings only from a :class:`Config`.
"""

from __future__ import annotations

import dataclasses
import math
import sys
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

from vinstrata.errors import InputError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as tomllib

AUTO = "auto"


# --------------------------------------------------------------------------- sections


@dataclass(frozen=True)
class Columns:
    """Which file columns hold what (``[columns]``)."""

    lot_id: str
    grade: str = ""
    analytes: tuple[str, ...] = ()
    passthrough: tuple[str, ...] = ()


@dataclass(frozen=True)
class Bands:
    """Grade bands (``[bands]``): global cuts or per-style quantiles."""

    cuts: tuple[float, ...] = (14.0, 16.0)
    labels: tuple[str, ...] = ("bottom", "middle", "top")
    mode: str = "global"
    quantiles: tuple[float, ...] = (0.2, 0.8)


@dataclass(frozen=True)
class Ingest:
    """How files are read and cells parsed (``[ingest]``)."""

    delimiter: str = AUTO
    decimal: str = AUTO
    sheet: str = ""
    censored: str = "half_limit"
    max_missing_share: float = 0.25
    duplicate_ids: str = "keep_first"
    max_unpacked_mb: int = 512
    max_cells: int = 50_000_000
    max_columns: int = 5000
    max_cell_kb: int = 64


@dataclass(frozen=True)
class Derived:
    """Analytes computed from others (``[derived]``), opt-in."""

    add: tuple[str, ...] = ()
    so2_pka: float = 1.81


@dataclass(frozen=True)
class Segment:
    """Transform, clustering space and HDBSCAN settings (``[segment]``)."""

    space: str = "umap"
    components: int = 8
    neighbours: int = 15
    epochs: int | str = AUTO
    min_cluster_size: int | str = AUTO
    min_samples: int | str = AUTO
    sweep: tuple[float, ...] = (0.005, 0.01, 0.02, 0.035, 0.05, 0.08)
    merge_valley: float = 0.5
    min_style_lots: int = 30
    outlier_cutoff: float = 3.5
    skew_threshold: float = 1.0
    transforms: Mapping[str, str] = field(default_factory=dict)
    impute_neighbours: int = 5
    map_min_dist: float = 0.1


@dataclass(frozen=True)
class Profile:
    """Within-style driver statistics (``[profile]``)."""

    bootstrap: int = 2000
    min_band_lots: int = 10
    fdr: float = 0.05
    ci_level: float = 0.95
    target_quantiles: tuple[float, ...] = (0.1, 0.9)
    include_unassigned: bool = False


@dataclass(frozen=True)
class Place:
    """Placing new lots (``[place]``)."""

    neighbours: int = 5
    band_neighbours: int = 15
    atypical_percentile: float = 95.0
    z_flag: float = 3.0


@dataclass(frozen=True)
class LimitSet:
    """One market's screening limits; see :mod:`vinstrata.place.limits` for sources."""

    va_max_red: float
    va_max_white_rose: float
    so2_max_red_dry: float
    so2_max_red_sweet: float
    so2_max_white_rose_dry: float
    so2_max_white_rose_sweet: float
    sweet_from_sugar: float
    sweet_inclusive: bool
    sulfite_label_from: float
    sulfite_label_inclusive: bool


@dataclass(frozen=True)
class Limits:
    """Screening limits (``[limits]``) and per-market overrides."""

    market: str = "eu"
    colour_column: str = ""
    default_colour: str = ""
    molecular_so2_min_red: float = 0.5
    molecular_so2_min_white_rose: float = 0.8
    overrides: Mapping[str, Mapping[str, float | bool]] = field(default_factory=dict)


@dataclass(frozen=True)
class Report:
    """Briefing settings (``[report]``)."""

    title: str = "Range briefing"
    producer: str = ""
    top_drivers: int = 3


@dataclass(frozen=True)
class Output:
    """How output files are written (``[output]``)."""

    spreadsheet_safe: bool = True


@dataclass(frozen=True)
class Config:
    """A whole validated configuration."""

    columns: Columns
    units: Mapping[str, str] = field(default_factory=dict)
    kinds: Mapping[str, str] = field(default_factory=dict)
    bounds: Mapping[str, tuple[float, float]] = field(default_factory=dict)
    bands: Bands = field(default_factory=Bands)
    ingest: Ingest = field(default_factory=Ingest)
    derived: Derived = field(default_factory=Derived)
    segment: Segment = field(default_factory=Segment)
    profile: Profile = field(default_factory=Profile)
    place: Place = field(default_factory=Place)
    limits: Limits = field(default_factory=Limits)
    report: Report = field(default_factory=Report)
    output: Output = field(default_factory=Output)
    seed: int = 20261201
    source: str = "<defaults>"

    def to_dict(self) -> dict[str, Any]:
        """Plain-data form, stored with every model and printed in the briefing."""
        return _plain(dataclasses.asdict(self))


def _plain(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return value


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


# --------------------------------------------------------------------------- schema

_NAME = _string
_NAMES = _list_of(_string, "strings")

SCHEMA: dict[str, tuple[type, dict[str, Check], set[str]]] = {
    "columns": (
        Columns,
        {"lot_id": _NAME, "grade": _NAME, "analytes": _NAMES, "passthrough": _NAMES},
        {"lot_id"},
    ),
    "bands": (
        Bands,
        {
            "cuts": _list_of(_number, "numbers", 1),
            "labels": _list_of(_string, "strings", 2),
            "mode": _choice("global", "style_quantile"),
            "quantiles": _list_of(_between(_number, 0.0, 1.0), "numbers between 0 and 1", 1),
        },
        set(),
    ),
    "ingest": (
        Ingest,
        {
            "delimiter": _choice(AUTO, ",", ";", "\t", "tab"),
            "decimal": _choice(AUTO, ".", ","),
            "sheet": _string,
            "censored": _choice("half_limit", "limit"),
            "max_missing_share": _between(_number, 0.0, 1.0),
            "duplicate_ids": _choice("keep_first", "reject_all"),
            "max_unpacked_mb": _between(_integer, 1, 1_000_000),
            "max_cells": _between(_integer, 1000, 10**12),
            "max_columns": _between(_integer, 2, 10**7),
            "max_cell_kb": _between(_integer, 1, 10**6),
        },
        set(),
    ),
    "derived": (
        Derived,
        {
            "add": _list_of(_choice("bound_so2", "molecular_so2", "total_acidity"),
                            'names among "bound_so2", "molecular_so2", "total_acidity"'),
            "so2_pka": _between(_number, 1.0, 3.0),
        },
        set(),
    ),
    "segment": (
        Segment,
        {
            "space": _choice("umap", "chemistry"),
            "components": _between(_integer, 2, 50),
            "neighbours": _between(_integer, 2, 200),
            "epochs": _auto_or(_between(_integer, 10, 5000)),
            "min_cluster_size": _auto_or(_positive(_integer, 2)),
            "min_samples": _auto_or(_positive(_integer, 1)),
            "sweep": _list_of(_between(_number, 0.0001, 0.5), "fractions between 0 and 0.5", 1),
            "merge_valley": _between(_number, 0.0, 1.0),
            "min_style_lots": _positive(_integer, 1),
            "outlier_cutoff": _positive(_number, 0.0),
            "skew_threshold": _positive(_number, 0.0),
            "transforms": _table_of(_choice(AUTO, "log", "none"), '"auto", "log" or "none"'),
            "impute_neighbours": _between(_integer, 1, 100),
            "map_min_dist": _between(_number, 0.0, 1.0),
        },
        set(),
    ),
    "profile": (
        Profile,
        {
            "bootstrap": _between(_integer, 100, 100000),
            "min_band_lots": _positive(_integer, 2),
            "fdr": _between(_number, 0.0001, 0.5),
            "ci_level": _between(_number, 0.5, 0.999),
            "target_quantiles": _list_of(_between(_number, 0.0, 1.0), "numbers between 0 and 1", 2),
            "include_unassigned": _boolean,
        },
        set(),
    ),
    "place": (
        Place,
        {
            "neighbours": _between(_integer, 1, 100),
            "band_neighbours": _between(_integer, 1, 500),
            "atypical_percentile": _between(_number, 50.0, 100.0),
            "z_flag": _positive(_number, 0.5),
        },
        set(),
    ),
    "limits": (
        Limits,
        {
            "market": _choice("eu", "oiv", "us", "none"),
            "colour_column": _string,
            "default_colour": _choice("", "red", "white", "rose"),
            "molecular_so2_min_red": _positive(_number, 0.0),
            "molecular_so2_min_white_rose": _positive(_number, 0.0),
        },
        set(),
    ),
    "report": (
        Report,
        {"title": _string, "producer": _string, "top_drivers": _between(_integer, 1, 10)},
        set(),
    ),
    "output": (Output, {"spreadsheet_safe": _boolean}, set()),
}

_MARKETS = ("eu", "oiv", "us")
_LIMIT_KEYS: dict[str, Check] = {
    f.name: (_boolean if f.type in ("bool", bool) else _positive(_number, 0.0))
    for f in dataclasses.fields(LimitSet)
}
_TOP_TABLES = {"units": _string, "kinds": _string, "bounds": _pair}


def _fail(source: str, key: str, expected: str, value: Any = None, got: bool = True) -> InputError:
    tail = f", got {_describe(value)}" if got else ""
    return InputError(f"{source}: key '{key}': expected {expected}{tail}")


def _build_section(source: str, name: str, raw: Any) -> Any:
    cls, checks, required = SCHEMA[name]
    if not isinstance(raw, dict):
        raise _fail(source, name, "a table", raw)
    values: dict[str, Any] = {}
    for key, value in raw.items():
        if name == "limits" and key in _MARKETS:
            continue
        if key not in checks:
            known = ", ".join(sorted(checks))
            raise InputError(f"{source}: unknown key '{name}.{key}' (known keys: {known})")
        try:
            values[key] = checks[key](value)
        except _Wrong as wrong:
            raise _fail(source, f"{name}.{key}", str(wrong), value) from None
    for key in sorted(required):
        if key not in values:
            raise _fail(source, f"{name}.{key}", "a value (this key is required)", got=False)
    if name == "limits":
        values["overrides"] = _limit_overrides(source, raw)
    return cls(**values)


def _limit_overrides(source: str, raw: dict[str, Any]) -> dict[str, dict[str, Any]]:
    out: dict[str, dict[str, Any]] = {}
    for market in _MARKETS:
        table = raw.get(market)
        if table is None:
            continue
        if not isinstance(table, dict):
            raise _fail(source, f"limits.{market}", "a table", table)
        out[market] = {}
        for key, value in table.items():
            if key not in _LIMIT_KEYS:
                known = ", ".join(sorted(_LIMIT_KEYS))
                raise InputError(
                    f"{source}: unknown key 'limits.{market}.{key}' (known keys: {known})"
                )
            try:
                out[market][key] = _LIMIT_KEYS[key](value)
            except _Wrong as wrong:
                raise _fail(source, f"limits.{market}.{key}", str(wrong), value) from None
    return out


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
    values: dict[str, Any] = {"source": source}
    if "columns" not in raw:
        raise _fail(source, "columns", "a [columns] table with at least lot_id", got=False)
    for key, value in raw.items():
        if key in SCHEMA:
            values[key] = _build_section(source, key, value)
        elif key in _TOP_TABLES:
            if not isinstance(value, dict):
                raise _fail(source, key, "a table", value)
            table = {}
            for name, item in value.items():
                try:
                    table[str(name)] = _TOP_TABLES[key](item)
                except _Wrong as wrong:
                    raise _fail(source, f"{key}.{name}", str(wrong), item) from None
            values[key] = table
        elif key == "seed":
            try:
                values["seed"] = _between(_integer, 0, 2**32 - 1)(value)
            except _Wrong as wrong:
                raise _fail(source, "seed", str(wrong), value) from None
        else:
            known = ", ".join(sorted([*SCHEMA, *_TOP_TABLES, "seed"]))
            raise InputError(f"{source}: unknown key '{key}' (known keys: {known})")
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
