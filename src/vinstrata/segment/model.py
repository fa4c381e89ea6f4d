"""The style model: what segmentation learns, saved as plain data.

A model folder (``DIR/model``, the folder every ``--model`` option takes) holds
JSON, NPY and Parquet files only; loading it never executes code:

=====================  ======================================================
``model.json``         format version, software versions, config, seed, input
                       file and SHA-256, analyte specs and units, the fitted
                       transform, clustering parameters, styles, outlier
                       reference, the names users gave styles (``vinstrata
                       name``) and the previous model its styles were
                       matched to (``--previous``); the SHA-256 and size
                       of every other file and a checksum of itself
``rows.parquet``       every input row: file row, lot id, status, detail
``lots.parquet``       the used training lots: id, grade, style assignment,
                       ``in_fit`` (fitted on, or assigned as a new lot above
                       ``segment.fit_sample``)
``values.parquet``     their analytes in canonical units (NaN where missing)
``flags.parquet``      their per-cell states (ok, missing, censored, ...)
``extra.parquet``      passthrough columns of every input row
``scaled.npy``         scaled (and imputed) chemistry, lots x analytes
``space.npy``          clustering-space coordinates
``map2d.npy``          the 2-D map for plots
``clusters.npy``       raw HDBSCAN labels (to verify a rebuilt clusterer);
                       -2 for lots outside the fitted sample
``memberships.npy``    soft membership of each lot to each style
``styles.parquet``     the style table; ``style_stats.parquet`` per-analyte
                       medians and quartiles; ``sweep.parquet`` the cluster-size
                       sweep
=====================  ======================================================

A model folder is whole or refused. ``model.json``, written last, lists every
other file with its SHA-256 and size (``"files"``) and carries a checksum of
its own other keys (``"checksum"``); :func:`load_model` reads each file once,
checks it against the list before parsing those very bytes, and refuses a
missing, extra (hidden names aside), truncated or changed file, or an edited
``model.json``, naming the first file that disagrees. A ``model.json`` without
the list comes from an older vinstrata and is refused with the advice to
segment again. The SHA-256 of ``model.json`` is the model's fingerprint
(:attr:`StyleModel.fingerprint`): the output manifests name their model by it.

:func:`save_model` never writes into a model folder in place. It builds the
new model in a sibling folder (``.vinstrata-new-<pid>-<token>-model``, same
parent, so renames stay atomic), then swaps it in: the old folder is renamed
aside (``.vinstrata-old-...-model``), the new one renamed into place, the old
one removed (:func:`vinstrata.folders.swap_folder`). A reader therefore sees
the complete old model or the complete new one. A process killed while
building leaves only a sibling that the next writer removes; one killed
between the two renames leaves no ``model`` but the complete old one aside,
which :func:`load_model` and the next save put back
(:func:`vinstrata.folders.recover_folder`) once its writer is gone, so the
folder always loads as the old fit or the new one. A load that meets a swap in
progress (``model.json`` changes while its files are read) reads again.

The HDBSCAN prediction structures cannot be stored as plain data; they are
rebuilt on demand (:func:`vinstrata.segment.rebuild_clusterer`) by refitting
HDBSCAN on the stored clustering coordinates of the fitted lots with the stored
parameters, which is deterministic, and the rebuilt labels are checked against
``clusters.npy``; so is the k-d tree new lots are placed with
(:mod:`vinstrata.segment.reference`).
"""

from __future__ import annotations

import io
import json
import platform
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from vinstrata.config import Config, parse_config
from vinstrata.errors import InputError
from vinstrata.folders import (
    file_entry,
    new_folder,
    recover_folder,
    sha256_bytes,
    sha256_file,
)
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
class SegmentParams:
    """The clustering settings a model was fitted with, as resolved for its lots.

    ``"auto"`` settings are stored as the values they resolved to; the keys of
    :meth:`to_dict` are those of ``params`` in ``model.json``.
    """

    space: str
    components: int
    neighbours: int
    epochs: int
    min_cluster_size: int
    min_samples: int
    seed: int
    size_choice: str  # "sweep" or "fixed"
    merge_valley: float
    n_clusters: int
    cluster_styles: tuple[str, ...]  # style id of each HDBSCAN cluster ("" for none)
    one_style: bool
    map_min_dist: float

    def to_dict(self) -> dict[str, Any]:
        """Plain data for ``model.json``."""
        out = {f.name: getattr(self, f.name) for f in fields(self)}
        out["cluster_styles"] = list(self.cluster_styles)
        return out

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> SegmentParams:
        """Read the ``params`` of ``model.json`` back.

        Raises
        ------
        InputError
            A key is missing.
        """
        types = {"space": str, "components": int, "neighbours": int, "epochs": int,
                 "min_cluster_size": int, "min_samples": int, "seed": int, "size_choice": str,
                 "merge_valley": float, "n_clusters": int, "map_min_dist": float}
        missing = [key for key in (*types, "cluster_styles") if key not in data]
        if missing:
            raise InputError(f"model.json: params lack {', '.join(missing)}; segment again")
        values: dict[str, Any] = {key: kind(data[key]) for key, kind in types.items()}
        return cls(cluster_styles=tuple(str(s) for s in data["cluster_styles"]),
                   one_style=bool(data.get("one_style", False)), **values)


@dataclass(frozen=True)
class StyleModel:
    """A fitted segmentation of a range into styles.

    Row order of ``lots``, ``values``, ``flags`` and of every array is the same:
    the used training lots in file order. ``rows`` and ``extra`` hold every input
    row, used or rejected, in file order. ``fingerprint`` names the saved
    model (the SHA-256 of its ``model.json``) once it has been loaded from disk.
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
    params: SegmentParams
    outliers: dict[str, Any]
    versions: dict[str, str] = field(default_factory=software_versions)
    has_grade: bool = False
    # style id -> the name its user gave it (``vinstrata name``); ``styles["style_name"]``
    # holds it, the generated phrase stays in ``styles["generated_name"]``
    user_names: dict[str, str] = field(default_factory=dict)
    # the previous model its styles were matched to (``--previous``), empty for none
    previous: dict[str, Any] = field(default_factory=dict)
    # SHA-256 of the model.json it was loaded from; empty for a fit not read back from disk
    fingerprint: str = field(default="", compare=False)

    @property
    def analytes(self) -> tuple[str, ...]:
        """Analytes the styles were formed on (constant ones dropped)."""
        return self.scaler.analytes

    @property
    def in_fit(self) -> np.ndarray:
        """Which lots the styles were fitted on (all, unless the range exceeded
        ``segment.fit_sample``: then the sample, and the others were assigned as
        new lots are)."""
        if "in_fit" in self.lots.columns:
            return self.lots["in_fit"].to_numpy(dtype=bool)
        return np.ones(len(self.lots), dtype=bool)

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


def _checksum(meta: dict[str, Any]) -> str:
    """SHA-256 of model.json's keys but ``checksum`` in one canonical form: edits show."""
    rest = {key: value for key, value in meta.items() if key != "checksum"}
    text = json.dumps(rest, sort_keys=True, separators=(",", ":"), default=_json_default,
                      allow_nan=True)
    return sha256_bytes(text.encode("utf-8"))


def save_model(model: StyleModel, folder: str | Path) -> Path:
    """Write the model as plain data into ``folder``, replacing any model there whole.

    The files are written into a new folder beside ``folder``, ``model.json``
    last with the SHA-256 and size of every other file, and the new folder is
    swapped in (see the module docstring). The same model gives the same bytes.

    Parameters
    ----------
    model : StyleModel
    folder : str or Path
        The model folder (its parent is created).

    Returns
    -------
    Path
        ``folder``.
    """
    folder = Path(folder)
    meta = {
        "format_version": FORMAT_VERSION,
        "versions": model.versions,
        "config": model.config.to_dict(),
        "source": vars(model.source),
        "specs": [s.to_dict() for s in model.specs],
        "scaler": model.scaler.to_dict(),
        "params": model.params.to_dict(),
        "outliers": model.outliers,
        "has_grade": model.has_grade,
        "user_names": dict(sorted(model.user_names.items())),
        "previous": model.previous,
    }
    with new_folder(folder) as build:
        for name in _FRAMES:
            frame = getattr(model, name).copy()
            frame.columns = [str(c) for c in frame.columns]
            frame.to_parquet(build / f"{name}.parquet", index=False)
        for name in _ARRAYS:
            np.save(build / f"{name}.npy", np.ascontiguousarray(getattr(model, name)),
                    allow_pickle=False)
        # model.json last, listing the rest: a folder without it is never swapped in
        meta["files"] = {path.name: file_entry(path) for path in sorted(build.iterdir())}
        meta["checksum"] = _checksum(meta)
        text = json.dumps(meta, indent=2, sort_keys=True, default=_json_default, allow_nan=True)
        (build / "model.json").write_text(text + "\n", encoding="utf-8")
    return folder


def saved_fingerprint(folder: str | Path) -> str:
    """The fingerprint of the model saved in ``folder``: the SHA-256 of its ``model.json``.

    For a folder this process has just saved and holds; :func:`load_model`
    gives the fingerprint of what it read.
    """
    return sha256_file(Path(folder) / "model.json")


# --------------------------------------------------------------------------- loading


def _config_from_stored(data: dict[str, Any]) -> Config:
    raw = {k: v for k, v in data.items() if k not in ("source",)}
    limits = dict(raw.get("limits", {}))
    overrides = limits.pop("overrides", {}) or {}
    limits.update(overrides)
    raw["limits"] = limits
    return parse_config(raw, str(data.get("source", "model config")))


class _Swapped(Exception):
    """The model folder was replaced while it was read (a save in another process)."""


def _verified_files(folder: Path) -> tuple[dict[str, Any], dict[str, bytes], str]:
    """model.json, the bytes of every file it lists (checked against it) and its fingerprint."""
    meta_path = folder / "model.json"
    if not meta_path.is_file():
        raise InputError(f"{folder}: not a model folder (no model.json)")
    try:
        raw = meta_path.read_bytes()
        meta = json.loads(raw.decode("utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"{meta_path}: unreadable model description ({exc})") from None
    if not isinstance(meta, dict):
        raise InputError(f"{meta_path}: not a model description")
    version = meta.get("format_version")
    if version != FORMAT_VERSION:
        raise InputError(f"{meta_path}: model format version {version}, this vinstrata reads "
                         f"version {FORMAT_VERSION}; segment the range again")
    listed = meta.get("files")
    if not isinstance(listed, dict):
        raise InputError(f"{folder}: written by an older vinstrata (model.json lists no files "
                         "to check them by); run 'vinstrata segment' again to refit it")
    if meta.get("checksum") != _checksum(meta):
        raise InputError(f"{meta_path}: changed after it was written (its checksum disagrees); "
                         "run 'vinstrata segment' again")
    needed = {f"{name}.parquet" for name in _FRAMES} | {f"{name}.npy" for name in _ARRAYS}
    unlisted = sorted(needed - set(listed))
    if unlisted:
        raise InputError(f"{meta_path}: lists no {unlisted[0]}; run 'vinstrata segment' again")
    # hidden names (.DS_Store and the like) are the file browser's, not the model's
    present = {p.name for p in folder.iterdir() if not p.name.startswith(".")} - {"model.json"}
    blobs: dict[str, bytes] = {}
    for name in sorted(set(listed) | present):
        entry = listed.get(name)
        problem = ""
        if entry is None:
            problem = "is not listed in model.json"
        elif name not in present:
            problem = "is missing"
        else:
            try:
                data = (folder / name).read_bytes()
            except FileNotFoundError:
                problem = "is missing"
            except OSError as exc:
                problem = f"is unreadable ({exc.strerror})"
            else:
                if not isinstance(entry, dict) or len(data) != entry.get("size"):
                    size = entry.get("size") if isinstance(entry, dict) else None
                    problem = f"holds {len(data)} bytes, model.json lists {size}"
                elif sha256_bytes(data) != entry.get("sha256"):
                    problem = "differs from its SHA-256 in model.json"
                else:
                    blobs[name] = data
        if problem:
            try:
                swapped = meta_path.read_bytes() != raw
            except OSError:
                swapped = True
            if swapped:
                raise _Swapped
            raise InputError(f"{folder}: model file {name} {problem}: a mixed, truncated or "
                             "edited model; run 'vinstrata segment' again")
    return meta, blobs, sha256_bytes(raw)


def load_model(folder: str | Path) -> StyleModel:
    """Read a model folder written by :func:`save_model`, checking every file first.

    Parameters
    ----------
    folder : str or Path

    Returns
    -------
    StyleModel
        With :attr:`StyleModel.fingerprint` set.

    Raises
    ------
    InputError
        The folder is missing, of another format version, written by an older
        vinstrata, or one of its files is missing, extra, truncated or changed
        (the message names the first such file).
    """
    folder = Path(folder)
    for _ in range(3):
        # a swap cut short between its renames left the old model aside: put it back
        if not folder.is_dir() and not (recover_folder(folder, wait=2.0) and folder.is_dir()):
            raise InputError(f"{folder}: model folder not found (give the model/ folder written "
                             "by 'vinstrata segment')")
        try:
            meta, blobs, fingerprint = _verified_files(folder)
            break
        except _Swapped:
            continue
    else:
        raise InputError(f"{folder}: the model was replaced while it was read, three times; "
                         "try again when 'vinstrata segment' has finished")
    parts: dict[str, Any] = {}
    try:
        for name in _FRAMES:
            parts[name] = pd.read_parquet(io.BytesIO(blobs[f"{name}.parquet"]))
        for name in _ARRAYS:
            parts[name] = np.load(io.BytesIO(blobs[f"{name}.npy"]), allow_pickle=False)
    except (ValueError, OSError) as exc:  # listed as it is, yet not what save_model writes
        raise InputError(f"{folder}: unreadable model file ({exc.__class__.__name__}); run "
                         "'vinstrata segment' again") from None
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
    parts["extra"] = parts["extra"].astype(str)
    return StyleModel(
        config=_config_from_stored(meta["config"]),
        source=Source(**meta["source"]),
        specs=tuple(AnalyteSpec.from_dict(s) for s in meta["specs"]),
        scaler=ChemistryScaler.from_dict(meta["scaler"]),
        params=SegmentParams.from_dict(meta["params"]), outliers=meta["outliers"],
        versions=meta["versions"],
        has_grade=bool(meta.get("has_grade", False)), fingerprint=fingerprint,
        user_names={str(k): str(v) for k, v in (meta.get("user_names") or {}).items()},
        previous=dict(meta.get("previous") or {}),
        **parts,
    )
