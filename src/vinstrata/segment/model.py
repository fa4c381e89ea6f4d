"""The style model: what segmentation learns, saved as plain data.

A model folder (``DIR/model``, the folder every ``--model`` option takes) holds
JSON, NPY and Parquet files only; loading it never executes code:

=====================  ======================================================
``model.json``         format version, software versions, config, seed, input
                       file and SHA-256, analyte specs and units, the fitted
                       transform, clustering parameters, styles, outlier
                       reference
``rows.parquet``       every input row: file row, lot id, status, detail
``lots.parquet``       the used training lots: id, grade, style assignment
``values.parquet``     their analytes in canonical units (NaN where missing)
``flags.parquet``      their per-cell states (ok, missing, censored, ...)
``extra.parquet``      passthrough columns of every input row
``scaled.npy``         scaled (and imputed) chemistry, lots x analytes
``space.npy``          clustering-space coordinates
``map2d.npy``          the 2-D map for plots
``clusters.npy``       raw HDBSCAN labels (to verify a rebuilt clusterer)
``memberships.npy``    soft membership of each lot to each style
``styles.parquet``     the style table; ``style_stats.parquet`` per-analyte
                       medians and quartiles; ``sweep.parquet`` the cluster-size
                       sweep
=====================  ======================================================

The HDBSCAN prediction structures cannot be stored as plain data; they are
rebuilt on demand (:func:`vinstrata.segment.rebuild_clusterer`) by refitting
HDBSCAN on the stored clustering coordinates with the stored parameters, which
is deterministic, and the rebuilt labels are checked against ``clusters.npy``.
"""

from __future__ import annotations

import json
import platform
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from vinstrata.config import Config, parse_config
from vinstrata.errors import InputError
from vinstrata.read.ingest import Source
from vinstrata.read.lots import UNASSIGNED, USED, AnalyteSpec  # noqa: F401 - UNASSIGNED re-exported
from vinstrata.segment.transform import ChemistryScaler

FORMAT_VERSION = 1


def software_versions() -> dict[str, str]:
    """Versions of Python and of every library whose behaviour shapes the results."""
    import importlib.metadata as md

    out = {"python": platform.python_version()}
    for dist in ("vinstrata", "numpy", "pandas", "scipy", "scikit-learn", "umap-learn",
                 "hdbscan", "numba", "matplotlib", "pyarrow"):
        try:
            out[dist] = md.version(dist)
        except md.PackageNotFoundError:
            out[dist] = "not installed"
    return out


@dataclass(frozen=True)
class StyleModel:
    """A fitted segmentation of a range into styles.

    Row order of ``lots``, ``values``, ``flags`` and of every array is the same:
    the used training lots in file order. ``rows`` and ``extra`` hold every input
    row, used or rejected, in file order.
    """

    config: Config
    source: Source
    specs: tuple[AnalyteSpec, ...]
    scaler: ChemistryScaler
    rows: pd.DataFrame
    lots: pd.DataFrame
    values: pd.DataFrame
    flags: pd.DataFrame
    extra: pd.DataFrame
    scaled: np.ndarray
    space: np.ndarray
    map2d: np.ndarray
    clusters: np.ndarray
    memberships: np.ndarray
    styles: pd.DataFrame
    style_stats: pd.DataFrame
    sweep: pd.DataFrame
    params: dict[str, Any]
    outliers: dict[str, Any]
    versions: dict[str, str] = field(default_factory=software_versions)
    has_grade: bool = False

    @property
    def analytes(self) -> tuple[str, ...]:
        """Analytes the styles were formed on (constant ones dropped)."""
        return self.scaler.analytes

    @property
    def style_ids(self) -> list[str]:
        return list(self.styles["style"])

    def style_names(self) -> dict[str, str]:
        return dict(zip(self.styles["style"], self.styles["style_name"]))

    def spec(self, name: str) -> AnalyteSpec:
        return next(s for s in self.specs if s.name == name)


# --------------------------------------------------------------------------- saving

_FRAMES = ("rows", "lots", "values", "flags", "extra", "styles", "style_stats", "sweep")
_ARRAYS = ("scaled", "space", "map2d", "clusters", "memberships")


def _json_default(value: Any) -> Any:
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating,)):
        return float(value)
    if isinstance(value, np.ndarray):
        return value.tolist()
    raise TypeError(f"not plain data: {type(value).__name__}")


def save_model(model: StyleModel, folder: str | Path) -> Path:
    """Write the model as plain data into ``folder`` (created if needed)."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    meta = {
        "format_version": FORMAT_VERSION,
        "versions": model.versions,
        "config": model.config.to_dict(),
        "source": vars(model.source),
        "specs": [s.to_dict() for s in model.specs],
        "scaler": model.scaler.to_dict(),
        "params": model.params,
        "outliers": model.outliers,
        "has_grade": model.has_grade,
    }
    text = json.dumps(meta, indent=2, sort_keys=True, default=_json_default, allow_nan=True)
    (folder / "model.json").write_text(text + "\n", encoding="utf-8")
    for name in _FRAMES:
        frame = getattr(model, name).copy()
        frame.columns = [str(c) for c in frame.columns]
        frame.to_parquet(folder / f"{name}.parquet", index=False)
    for name in _ARRAYS:
        np.save(folder / f"{name}.npy", np.ascontiguousarray(getattr(model, name)),
                allow_pickle=False)
    return folder


# --------------------------------------------------------------------------- loading


def _config_from_stored(data: dict[str, Any]) -> Config:
    raw = {k: v for k, v in data.items() if k not in ("source",)}
    limits = dict(raw.get("limits", {}))
    overrides = limits.pop("overrides", {}) or {}
    limits.update(overrides)
    raw["limits"] = limits
    return parse_config(raw, str(data.get("source", "model config")))


def load_model(folder: str | Path) -> StyleModel:
    """Read a model folder written by :func:`save_model`.

    Raises
    ------
    InputError
        The folder is missing, incomplete, of another format version, or its
        files disagree in size.
    """
    folder = Path(folder)
    meta_path = folder / "model.json"
    if not folder.is_dir():
        raise InputError(f"{folder}: model folder not found (give the model/ folder written "
                         "by 'vinstrata segment')")
    if not meta_path.exists():
        raise InputError(f"{folder}: not a model folder (no model.json)")
    try:
        meta = json.loads(meta_path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        raise InputError(f"{meta_path}: unreadable model description ({exc})") from None
    version = meta.get("format_version")
    if version != FORMAT_VERSION:
        raise InputError(f"{meta_path}: model format version {version}, this vinstrata reads "
                         f"version {FORMAT_VERSION}; segment the range again")
    parts: dict[str, Any] = {}
    for name in _FRAMES:
        path = folder / f"{name}.parquet"
        if not path.exists():
            raise InputError(f"{folder}: model file {path.name} is missing")
        parts[name] = pd.read_parquet(path)
    for name in _ARRAYS:
        path = folder / f"{name}.npy"
        if not path.exists():
            raise InputError(f"{folder}: model file {path.name} is missing")
        try:
            parts[name] = np.load(path, allow_pickle=False)
        except ValueError as exc:
            raise InputError(f"{path}: unreadable array ({exc})") from None
    n = len(parts["lots"])
    if parts["extra"].shape[1] == 0:
        # a table without columns keeps no row count in Parquet
        parts["extra"] = pd.DataFrame(index=pd.RangeIndex(len(parts["rows"])))
    for name in ("values", "flags", "scaled", "space", "map2d", "clusters", "memberships"):
        if len(parts[name]) != n:
            raise InputError(f"{folder}: model file {name} holds {len(parts[name])} lots, "
                             f"lots.parquet {n}")
    if len(parts["extra"]) != len(parts["rows"]) or (parts["rows"]["status"] == USED).sum() != n:
        raise InputError(f"{folder}: model files rows.parquet, extra.parquet and lots.parquet "
                         "disagree")
    parts["extra"] = parts["extra"].astype(object)
    return StyleModel(
        config=_config_from_stored(meta["config"]),
        source=Source(**meta["source"]),
        specs=tuple(AnalyteSpec.from_dict(s) for s in meta["specs"]),
        scaler=ChemistryScaler.from_dict(meta["scaler"]),
        params=meta["params"], outliers=meta["outliers"], versions=meta["versions"],
        has_grade=bool(meta.get("has_grade", False)),
        **parts,
    )
