"""The stages wired together, with the file I/O at the edges.

The CLI commands call these functions; so can a notebook. Each ``write_*``
function writes one command's contract files, each file whole
(:mod:`vinstrata.folders`), and returns their paths: the command's manifest is
made from that list (:meth:`vinstrata.folders.OutputFolder.commit`).
"""

from __future__ import annotations

import dataclasses
import json
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import pandas as pd

from vinstrata.config import Config
from vinstrata.errors import InputError
from vinstrata.folders import Identity, OutputFolder, held_back, write_bytes
from vinstrata.progress import Reporter
from vinstrata.read import quality
from vinstrata.read.ingest import ReadLimits, read_table
from vinstrata.read.lots import UNASSIGNED, LotTable
from vinstrata.read.validate import load_lots, validate
from vinstrata.segment.fit import fit_styles
from vinstrata.segment.model import StyleModel, save_model, saved_fingerprint
from vinstrata.segment.outputs import lot_styles, style_table
from vinstrata.tables import plain_frame, write_csv, write_lot_table, write_parquet

if TYPE_CHECKING:
    from collections.abc import Iterator

    from vinstrata.place.placing import Placements
    from vinstrata.place.stream import Batches, FileScan, PlaceTally, Runner
    from vinstrata.profile.drivers import Profiles

CHECK_FILES = ("quality_summary.csv", "quality_analytes.csv", "row_status.csv")


def _with_sheet(config: Config, sheet: str | None) -> Config:
    """The config with ``ingest.sheet`` replaced by a ``--sheet`` given on the command line."""
    if sheet is None:
        return config
    return dataclasses.replace(config, ingest=dataclasses.replace(config.ingest, sheet=sheet))


def load(path: str | Path, config: Config, sheet: str | None = None,
         require_grade: bool = True) -> LotTable:
    """Read and validate a lot file (``sheet`` overrides ``ingest.sheet``).

    Rejected rows are left to the caller to report (``check`` prints them,
    the other commands call :func:`warn_rejections` naming their output file).
    """
    return load_lots(str(path), _with_sheet(config, sheet), require_grade=require_grade,
                     reporter=Reporter.command_line(quiet=True))


def warn_rejections(table: LotTable, rep: Reporter, where: str = "row_status.csv") -> None:
    """Why most rows were rejected (:func:`warn_hints`), then one line for the rejected rows,
    by reason."""
    warn_hints(table, rep)
    note = quality.rejection_note(table, where)
    if note:
        rep.warn(note)


def warn_hints(table: LotTable, rep: Reporter) -> None:
    """A warning for each column whose values fit another unit, or that alone rejects nearly
    every row (:func:`vinstrata.read.hints.rejection_hints`)."""
    from vinstrata.read.hints import rejection_hints

    for line in rejection_hints(table):
        rep.warn(line)


def note_analytes(table: LotTable, config: Config, rep: Reporter) -> None:
    """Say which columns were taken as analytes when the config lets the engine find them."""
    if not config.columns.analytes:
        rep.line(f"  analytes found in {table.source.name} (no [columns] analytes in the "
                 f"config): {', '.join(table.analytes)}")


def _safe(config: Config | None) -> bool:
    """``[output] spreadsheet_safe`` of the run (on when no config is given)."""
    return True if config is None else config.output.spreadsheet_safe


def write_check(table: LotTable, out: str | Path, config: Config | None = None) -> list[Path]:
    """``quality_summary.csv``, ``quality_analytes.csv`` and ``row_status.csv``."""
    out = Path(out)
    safe = _safe(config)
    return [
        write_csv(quality.summary(table), out / CHECK_FILES[0], spreadsheet_safe=safe),
        write_csv(quality.analyte_summary(table), out / CHECK_FILES[1], spreadsheet_safe=safe),
        write_csv(quality.row_status(table), out / CHECK_FILES[2], spreadsheet_safe=safe),
    ]


def segment(table: LotTable, config: Config, rep: Reporter | None = None) -> StyleModel:
    """Fit the styles (see :func:`vinstrata.segment.fit_styles`)."""
    return fit_styles(table, config, rep)


def write_segment(model: StyleModel, out: str | Path, config: Config | None = None,
                  formats: str = "csv") -> list[Path]:
    """The ``model/`` folder, ``lot_styles.csv``, ``styles.csv`` and ``sweep.csv``, and
    ``previous.csv`` for a model matched to a previous one (``--previous``).

    ``formats`` (``--format``: ``csv``, ``parquet`` or ``both``) says how the
    per-lot table ``lot_styles`` is written.
    """
    from vinstrata.segment.previous import previous_table

    out = Path(out)
    folder = save_model(model, out / "model")
    safe = _safe(config or model.config)
    written = [
        folder,
        *write_lot_table(lot_styles(model), out / "lot_styles.csv", formats, safe),
        write_csv(style_table(model), out / "styles.csv", spreadsheet_safe=safe),
        write_csv(model.sweep, out / "sweep.csv", spreadsheet_safe=safe),
    ]
    matched = previous_table(model)
    if matched is not None:
        written.append(write_csv(matched, out / PREVIOUS_FILE, spreadsheet_safe=safe))
    return written


PREVIOUS_FILE = "previous.csv"  # the match of a model's styles to the previous model's


def match_previous(model: StyleModel, previous: StyleModel, rep: Reporter | None = None
                   ) -> StyleModel:
    """The fit's styles matched to the previous model's (see
    :func:`vinstrata.segment.previous.match_previous`), each match on a line and each
    vanished style as a warning."""
    from vinstrata.segment import previous as prev

    matched = prev.match_previous(model, previous)
    rep = rep or Reporter()
    for kind, text in prev.match_lines(matched):
        if kind == "warn":
            rep.warn(text)
        else:
            rep.line(text)
    return matched


def run_identity(model: StyleModel, folder: str | Path | None = None) -> Identity:
    """The run a model's results belong to, for the output manifests.

    Parameters
    ----------
    model : StyleModel
    folder : str or Path, optional
        Where the model was just saved, for a model fitted in this process
        (whose :attr:`~vinstrata.segment.model.StyleModel.fingerprint` is empty).

    Returns
    -------
    Identity
        The training file's SHA-256, the seed and the model's fingerprint.
    """
    fingerprint = model.fingerprint
    if not fingerprint:
        if folder is None:
            raise ValueError("a model fitted here has no fingerprint until it is saved")
        fingerprint = saved_fingerprint(folder)
    return Identity(input_sha256=model.source.sha256, seed=model.config.seed, model=fingerprint)


def styles_text(model: StyleModel) -> str:
    """The styles as terminal lines."""
    lines = [f"{len(model.styles)} style(s) from {len(model.lots)} lots "
             f"({int((model.lots['style'] == UNASSIGNED).sum())} unassigned):"]
    for row in model.styles.itertuples():
        mark = "" if row.trusted else "  [untrusted]"
        lines.append(f"  {row.style:<4} {row.n_lots:>6} lots  {row.style_name}{mark}")
    return "\n".join(lines)


PROFILE_FILES = ("drivers.csv", "thresholds.csv", "contrasts.csv", "band_counts.csv",
                 "band_stats.csv")
PLACE_FILES = ("placements.csv", "placement_details.csv", "placement_analytes.csv",
               "placement_neighbours.csv")
PROFILE_SETTINGS = "profile_settings.json"  # what the profiles were computed with
PLACE_SETTINGS = "place_settings.json"  # what the placements were computed with


def profile(model: StyleModel, config: Config | None = None,
            rep: Reporter | None = None, for_placing: bool = False) -> Profiles:
    """Profile the styles (see :func:`vinstrata.profile.profile_styles`).

    ``for_placing`` skips what placing new lots does not use (the pooled rows,
    the intervals of the cuts); the drivers and cuts are the same.
    """
    from vinstrata.profile.drivers import profile_styles

    return profile_styles(model, config, rep, pooled=not for_placing,
                          cut_intervals=not for_placing)


def write_profile(profiles: Profiles, out: str | Path, config: Config | None = None
                  ) -> list[Path]:
    """``drivers.csv``, ``thresholds.csv``, ``contrasts.csv``, the band tables and
    ``profile_settings.json``."""
    out = Path(out)
    frames = (profiles.drivers, profiles.thresholds, profiles.contrasts, profiles.band_counts,
              profiles.band_stats)
    written = [write_csv(frame, out / name, spreadsheet_safe=_safe(config))
               for frame, name in zip(frames, PROFILE_FILES)]
    return [*written, _write_settings(profiles.settings.to_dict(), out / PROFILE_SETTINGS)]


def load_new(path: str | Path, model: StyleModel, config: Config,
             sheet: str | None = None) -> LotTable:
    """Read new lots through the training front door, refusing a file that does not fit."""
    from vinstrata.place.match import check_columns

    config = _with_sheet(config, sheet)
    raw = read_table(path, sheet=config.ingest.sheet, delimiter=config.ingest.delimiter,
                     limits=ReadLimits.from_config(config.ingest))
    check_columns(raw, model, config)
    return validate(raw, config, require_grade=False)


def new_lot_batches(path: str | Path, model: StyleModel, config: Config, batch_rows: int,
                    sheet: str | None = None) -> Batches:
    """The new-lot file as batches of ``batch_rows`` validated rows, one pass per call.

    The file is refused first, in one line, when its analytes do not fit the
    model (:func:`vinstrata.place.match.check_columns`, on the header).

    Parameters
    ----------
    path : str or Path
        A lot file, or a dataset of them.
    model : StyleModel
    config : Config
    batch_rows : int
    sheet : str, optional
        ``--sheet``.

    Returns
    -------
    callable
        Each call starts a fresh pass: an iterator of LotTable, row numbers going on
        across batches.
    """
    from vinstrata.place.match import check_columns

    config = _with_sheet(config, sheet)
    try:
        from vinstrata.read.ingest import read_batches
        from vinstrata.read.lots import load_lot_batches  # type: ignore[attr-defined]
    except ImportError:  # the batched reader is not there: slices of the file read whole
        table = load_new(path, model, config)
        return lambda: _slices(table, batch_rows)
    limits = ReadLimits.from_config(config.ingest)
    head = next(iter(read_batches(path, 1, sheet=config.ingest.sheet,
                                  delimiter=config.ingest.delimiter, limits=limits)))
    check_columns(head, model, config)
    return lambda: load_lot_batches(path, config, batch_rows, require_grade=False)


def _slices(table: LotTable, batch_rows: int) -> Iterator[LotTable]:
    """``table`` in batches of ``batch_rows`` rows (each with its own RangeIndex)."""
    for start in range(0, max(table.n_rows, 1), batch_rows):
        part = slice(start, start + batch_rows)
        yield dataclasses.replace(
            table, **{name: getattr(table, name).iloc[part].reset_index(drop=True)
                      for name in ("ids", "values", "flags", "extra")})


def scan_new(batches: Batches, model: StyleModel, config: Config) -> FileScan:
    """Read the new lots once for the file-level checks (:func:`vinstrata.place.stream.scan_file`).
    """
    from vinstrata.place.stream import scan_file

    return scan_file(batches(), model, config.ingest.duplicate_ids)


def warn_file(scan: FileScan, batches: Batches, rep: Reporter,
              where: str = "placements.csv") -> None:
    """:func:`warn_rejections` for a file read in batches: the same lines, for the whole file."""
    from vinstrata.place.stream import file_warnings

    for line in file_warnings(scan, batches, where):
        rep.warn(line)


def place_stream(batches: Batches, scan: FileScan, model: StyleModel,
                 profiles: Profiles | None, config: Config, out: str | Path,
                 formats: str = "csv", rep: Reporter | None = None,
                 runner: Runner | None = None, dataset: bool = False
                 ) -> tuple[list[Path], PlaceTally]:
    """Place the new lots batch by batch and write them as they come, in bounded memory.

    Inside a :func:`vinstrata.folders.held_back` block every file keeps its
    temporary name until the block ends, so a run refused or interrupted on
    the way leaves ``out`` as it was.

    Parameters
    ----------
    batches : callable
        :func:`new_lot_batches`.
    scan : FileScan
        :func:`scan_new` of the same batches.
    model : StyleModel
    profiles : Profiles, optional
    config : Config
    out : str or Path
    formats : {"csv", "parquet", "both"}
        ``--format`` of the four per-lot tables (without ``dataset``).
    rep : Reporter, optional
    runner : callable, optional
        Places the batches (:func:`vinstrata.place.stream.local_runner` when None;
        :func:`vinstrata.place.cluster.dask_runner` on a cluster).
    dataset : bool
        Write ``placements/`` and ``placement_details/`` as Parquet datasets, one part
        per batch, and ``placement_summary.csv``, instead of the four tables.

    Returns
    -------
    paths : list of Path
        The files and folders written.
    tally : PlaceTally
        The counts and first rows for the terminal table.
    """
    from vinstrata.place.context import placing_context
    from vinstrata.place.stream import PlaceTally, check_file_units, local_runner, placed_batches

    rep = rep or Reporter()
    check_file_units(scan, model, batches)
    if not scan.used.any():
        rep.warn(f"{scan.source.name}: no usable new lots")
    settings = None
    if runner is None:
        context = placing_context(model, profiles, config)
        runner, settings = local_runner(context), context.settings
    out = Path(out)
    tally = PlaceTally()
    sink = _DatasetSink(out) if dataset else _TableSink(out, formats, _safe(config))
    try:
        for placements in placed_batches(batches, scan, runner):
            sink.write(placements)
            tally.add(placements)
            settings = placements.settings
    except BaseException:
        sink.abort()
        raise
    written = sink.close(tally)
    if settings is None:
        from vinstrata.settings import PlaceSettings

        settings = PlaceSettings.from_config(config, model.source.sha256)
    return [*written, _write_settings(settings.to_dict(), out / PLACE_SETTINGS)], tally


PLACE_DATASETS = ("placements", "placement_details")  # --engine dask: one part per batch
PLACE_SUMMARY = "placement_summary.csv"


class _TableSink:
    """The four per-lot tables, appended batch by batch."""

    def __init__(self, out: Path, formats: str, safe: bool) -> None:
        from vinstrata.tables import LotTableAppender

        self.writers = [LotTableAppender(out / name, formats, safe) for name in PLACE_FILES]

    def write(self, placements: Placements) -> None:
        frames = (placements.lots, placements.details, placements.analytes,
                  placements.neighbours)
        for writer, frame in zip(self.writers, frames):
            writer.write(frame)

    def close(self, tally: PlaceTally) -> list[Path]:
        return [path for writer in self.writers for path in writer.close()]

    def abort(self) -> None:
        for writer in self.writers:
            writer.abort()


class _DatasetSink:
    """``placements/`` and ``placement_details/`` as Parquet datasets, one part per batch
    (``part-00000.parquet`` ...), and ``placement_summary.csv``."""

    def __init__(self, out: Path) -> None:
        from contextlib import ExitStack

        from vinstrata.folders import new_folder

        self.out = out
        self.stack = ExitStack()
        self.folders = [self.stack.enter_context(new_folder(out / name))
                        for name in PLACE_DATASETS]
        self.n = 0

    def write(self, placements: Placements) -> None:
        name = f"part-{self.n:05d}.parquet"
        write_parquet(_typed_lots(placements.lots), self.folders[0] / name)
        if len(placements.details.columns):
            write_parquet(placements.details, self.folders[1] / name)
        self.n += 1

    def close(self, tally: PlaceTally) -> list[Path]:
        self.stack.close()
        summary = pd.DataFrame(
            [(style, n, atypical) for style, (n, atypical) in sorted(tally.styles.items())],
            columns=["style", "lots", "atypical"])
        summary = pd.concat([summary, pd.DataFrame(
            [("rejected", tally.rejected, 0)], columns=summary.columns)], ignore_index=True)
        return [*(self.out / name for name in PLACE_DATASETS),
                write_csv(summary, self.out / PLACE_SUMMARY)]

    def abort(self) -> None:
        import sys

        self.stack.__exit__(*sys.exc_info())


def _typed_lots(lots: pd.DataFrame) -> pd.DataFrame:
    """``placements`` with its placement columns typed, so that every part of a dataset
    has the same schema whether or not its batch placed a lot."""
    out = lots.copy()
    for column in ("membership", "outlier_score", "share_top"):
        out[column] = pd.to_numeric(out[column], errors="coerce").astype(float)
    for column in ("atypical", "trusted"):
        out[column] = out[column].astype("boolean")
    for column in ("style", "style_name", "nearest_lots", "indicative_band", "flags"):
        out[column] = out[column].astype("string")
    return out


def place(table: LotTable, model: StyleModel, profiles: Profiles | None,
          config: Config | None = None, rep: Reporter | None = None) -> Placements:
    """Place new lots (see :func:`vinstrata.place.place_lots`)."""
    from vinstrata.place.placing import place_lots

    return place_lots(table, model, profiles, config, rep)


def write_place(placements: Placements, out: str | Path, config: Config | None = None,
                formats: str = "csv") -> list[Path]:
    """``placements.csv``, its detail tables and ``place_settings.json``.

    ``formats`` (``--format``: ``csv``, ``parquet`` or ``both``) says how the
    four per-lot tables are written.
    """
    out = Path(out)
    frames = (placements.lots, placements.details, placements.analytes, placements.neighbours)
    written = [path for frame, name in zip(frames, PLACE_FILES)
               for path in write_lot_table(frame, out / name, formats, _safe(config))]
    return [*written, _write_settings(placements.settings.to_dict(), out / PLACE_SETTINGS)]


def model_config(model: StyleModel, config: Config | None) -> Config:
    """The config a later stage runs with: the given one, checked against the model."""
    if config is None:
        return model.config
    names = [s.name for s in model.specs if not s.derived]
    wanted = list(config.columns.analytes)
    if wanted and wanted != names:
        missing = [a for a in names if a not in wanted]
        extra = [a for a in wanted if a not in names]
        raise InputError(f"{config.source}: [columns] analytes differ from the model's: missing "
                         f"{', '.join(missing) or 'none'}; not in the model "
                         f"{', '.join(extra) or 'none'}")
    return config


def brief(path: str | Path, model: StyleModel, profiles: Profiles | None,
          placements: Placements | None, config: Config | None = None,
          previous: StyleModel | None = None) -> Path:
    """Write the briefing PDF (see :func:`vinstrata.report.write_briefing`); with
    ``previous``, the model its styles were matched to, it gains the page "since the
    previous model"."""
    from vinstrata.report import write_briefing

    return write_briefing(path, model, profiles, placements, config, previous=previous)


def _read(folder: Path, name: str, command: str) -> pd.DataFrame:
    path = folder / name
    parquet = path.with_suffix(".parquet")
    if not path.exists() and parquet.exists():  # written with --format parquet
        try:
            return pd.read_parquet(parquet)
        except (OSError, ValueError) as exc:
            raise InputError(f"{parquet}: unreadable ({exc.__class__.__name__})") from None
    if not path.exists():
        raise InputError(f"{folder}: no {name} (give the folder written by 'vinstrata "
                         f"{command}')")
    try:
        return plain_frame(pd.read_csv(path, keep_default_na=False, na_values=[""]))
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: unreadable ({exc.__class__.__name__})") from None


def _booleans(frame: pd.DataFrame, *columns: str) -> pd.DataFrame:
    for column in columns:
        if column in frame.columns:
            frame[column] = frame[column].astype(str).str.lower().isin(["true", "1"])
    return frame


def _write_settings(settings: dict[str, object], path: Path) -> Path:
    """A result's settings as JSON beside its tables (sorted keys: the same bytes every time)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    write_bytes(path, (json.dumps(settings, indent=2, sort_keys=True) + "\n").encode("utf-8"))
    return path


def _read_settings(folder: Path, name: str, command: str) -> object:
    path = folder / name
    if not path.exists():
        raise InputError(f"{folder}: no {name} (written by an older vinstrata, or not by "
                         f"'vinstrata {command}'); run 'vinstrata {command}' again")
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"{path}: unreadable ({exc.__class__.__name__})") from None


def check_results_model(folder: str | Path, command: str, model: StyleModel) -> None:
    """Refuse results in ``folder`` that another model made (by the manifest's fingerprint).

    Raises
    ------
    InputError
        ``folder`` holds no ``<command>_manifest.json`` (or ``run_manifest.json``), or it
        names another model.
    """
    from vinstrata.folders import manifest_name, read_manifest

    folder = Path(folder)
    # written by the command itself, or by 'vinstrata run', which writes every stage's files
    found = [m for m in (read_manifest(folder / manifest_name(c)) for c in (command, "run"))
             if m is not None]
    if not found:
        raise InputError(f"{folder}: no {manifest_name(command)}; these are not the results "
                         f"of 'vinstrata {command}' (run it again into this folder)")
    manifest = found[0]
    made_by = str(manifest["identity"].get("model", ""))
    if model.fingerprint and made_by != model.fingerprint:
        raise InputError(f"{folder}: these {command} results belong to another model "
                         f"({made_by[:12]}, not {model.fingerprint[:12]}); run 'vinstrata "
                         f"{command}' with this model, or leave the folder out")


def read_profile(folder: str | Path) -> Profiles:
    """Read the files written by :func:`write_profile` back, with their settings."""
    from vinstrata.profile.drivers import Profiles
    from vinstrata.settings import ProfileSettings

    folder = Path(folder)
    frames = [_read(folder, name, "profile") for name in PROFILE_FILES]
    settings = ProfileSettings.from_dict(_read_settings(folder, PROFILE_SETTINGS, "profile"),
                                         str(folder / PROFILE_SETTINGS))
    drivers = _booleans(frames[0], "is_driver", "trusted")
    drivers["note"] = drivers["note"].fillna("").astype(str)
    thresholds = _booleans(frames[1], "trusted")
    thresholds["direction"] = thresholds["direction"].fillna("").astype(str)
    contrasts = frames[2].fillna("")
    return Profiles(drivers=drivers, thresholds=thresholds, contrasts=contrasts,
                    band_counts=_booleans(frames[3], "trusted"), band_stats=frames[4],
                    settings=settings)


def _read_dataset(folder: Path) -> pd.DataFrame:
    """A Parquet dataset written one part per batch, its parts in order."""
    parts = sorted(folder.glob("part-*.parquet"))
    try:
        frames = [pd.read_parquet(part) for part in parts]
    except (OSError, ValueError) as exc:
        raise InputError(f"{folder}: unreadable ({exc.__class__.__name__})") from None
    if not frames:
        return pd.DataFrame()
    return pd.concat(frames, ignore_index=True)


def read_place(folder: str | Path) -> Placements:
    """Read the files written by :func:`write_place` (or the datasets of :func:`place_stream`)
    back, with their settings; a dataset folder has no analyte or neighbour tables."""
    from vinstrata.place.placing import Placements
    from vinstrata.settings import PlaceSettings

    folder = Path(folder)
    if (folder / PLACE_DATASETS[0]).is_dir():  # place --engine dask: Parquet datasets
        frames = [*(_read_dataset(folder / name) for name in PLACE_DATASETS),
                  pd.DataFrame(), pd.DataFrame()]
    else:
        frames = [_read(folder, name, "place") for name in PLACE_FILES]
    settings = PlaceSettings.from_dict(_read_settings(folder, PLACE_SETTINGS, "place"),
                                       str(folder / PLACE_SETTINGS))
    lots = _booleans(frames[0], "atypical", "trusted")
    for column in ("lot_id", "style", "indicative_band", "flags", "status"):
        lots[column] = lots[column].fillna("").astype(str)
    details = frames[1]
    if "lot_id" not in details:  # no lot was placed
        details = pd.DataFrame({"lot_id": [], "flags_text": [], "flags_short": []})
    details["lot_id"] = details["lot_id"].astype(str)
    for column in ("flags_text", "flags_short"):
        details[column] = details[column].fillna("").astype(str)
    return Placements(lots=lots, details=details, analytes=frames[2], neighbours=frames[3],
                      settings=settings)


# --------------------------------------------------------------------------- run


@dataclass(frozen=True)
class RunResult:
    """What ``vinstrata run`` made."""

    model: StyleModel
    profiles: Profiles | None
    placements: Placements | None
    briefing: Path


def fresh_folder(parent: Path) -> Path:
    """A new, empty ``vinstrata-run-N`` folder under ``parent`` (created here, so that two
    runs started side by side never pick the same one)."""
    n = 1
    while True:
        folder = parent / f"vinstrata-run-{n}"
        try:
            folder.mkdir(parents=True)
            return folder
        except FileExistsError:
            n += 1


def demo_inputs(folder: Path) -> tuple[str, str]:
    """Write the shipped demo range (the generator's defaults) and return its two files."""
    from vinstrata.demo import generate_demo, write_demo

    paths = write_demo(folder, generate_demo())
    return str(paths["lots"]), str(paths["new_lots"])


def run_all(lots: str | Path, new_lots: str | Path | None, config: Config, out: Path,
            rep: Reporter, sheet: str | None = None,
            folder: OutputFolder | None = None, formats: str = "csv",
            previous: StyleModel | None = None) -> RunResult:
    """Every stage in one go, every contract file written into ``out``.

    Nothing is written before every stage has its results, and the tables,
    the model and the briefing are then written under temporary names and
    renamed into place together (:func:`vinstrata.folders.held_back`), so a
    run refused or interrupted before that burst leaves ``out`` as it was.
    ``run_manifest.json`` lists what was written; every file that the
    folder's manifests list and this run did not write again is removed, so
    ``out`` holds one run only.

    Parameters
    ----------
    lots, new_lots : str or Path
        The training lots; the new lots to place (optional).
    config : Config
    out : Path
    rep : Reporter
    sheet : str, optional
        ``--sheet``.
    folder : OutputFolder, optional
        ``out`` already held by the caller (the CLI holds it from the start);
        taken here when None.
    formats : {"csv", "parquet", "both"}
        ``--format`` of the per-lot tables.
    previous : StyleModel, optional
        ``--previous``: the styles are matched to its styles
        (:func:`match_previous`) and the briefing compares the two.

    Returns
    -------
    RunResult
    """
    if folder is None:
        with OutputFolder(out, "run") as held:
            return run_all(lots, new_lots, config, out, rep, sheet, held, formats, previous)
    with rep.stage("check: read and validate the lots"):
        table = load(lots, config, sheet=sheet, require_grade=bool(config.columns.grade))
    note_analytes(table, config, rep)
    warn_rejections(table, rep)
    with rep.stage("segment: transform, UMAP, HDBSCAN"):
        model = segment(table, config, rep)
    if previous is not None:
        with rep.stage("segment: styles matched to the previous model"):
            model = match_previous(model, previous, rep)
    profiles = None
    if model.has_grade:
        with rep.stage("profile: effect sizes, bootstrap, thresholds"):
            profiles = profile(model, config, rep)
    else:
        rep.warn("no grade column: styles only, no drivers profiled")
    placements = None
    if new_lots is not None:
        with rep.stage("place: new lots against their styles"):
            new_table = load_new(new_lots, model, config, sheet=sheet)
            warn_rejections(new_table, rep, where="placements.csv")
            placements = place(new_table, model, profiles, config, rep)
    # every file under a temporary name first, then all renamed in one burst
    with held_back():
        with rep.stage("write: tables and model"):
            written = [*write_check(table, out, config),
                       *write_segment(model, out, config, formats)]
            if profiles is not None:
                written += write_profile(profiles, out, config)
            if placements is not None:
                written += write_place(placements, out, config, formats)
        with rep.stage("brief: the PDF"):
            path = brief(out / "briefing.pdf", model, profiles, placements, config,
                         previous=previous)
    folder.commit(run_identity(model, out / "model"), [*written, path], replace="all")
    return RunResult(model=model, profiles=profiles, placements=placements, briefing=path)


# --------------------------------------------------------------------------- naming styles

# files of a segment that show style names: written again when a style is named
_NAMED_TABLES = ("styles.csv", "lot_styles.csv", "lot_styles.parquet", PREVIOUS_FILE)
# results that show style names but need more than the model to be made again
_NAMED_RESULTS = (".pdf", "placements.csv", "placements.parquet")


def name_style(model_dir: str | Path, style: str, name: str,
               rep: Reporter | None = None) -> StyleModel:
    """Give a style a name of its user's (``vinstrata name``), kept in the model.

    The model is saved again whole (:func:`save_model`: its ``model.json`` lists
    its files anew). In the folder holding the model, the files of the same run
    that show style names and come from the model alone (``styles.csv``,
    ``lot_styles.csv``, ``previous.csv``) are written again, and every manifest
    entry of that run is moved to the renamed model's fingerprint, so later
    commands keep them. Placements and briefings made before show the former
    names: they stay with the former model and a warning says to make them
    again (the next command writing there replaces them).

    Parameters
    ----------
    model_dir : str or Path
        The ``model/`` folder.
    style : str
        A style id of the model.
    name : str
        The name; "" gives the style its generated name back.
    rep : Reporter, optional

    Returns
    -------
    StyleModel
        The renamed model, as saved.

    Raises
    ------
    InputError
        No model there, an unknown style, a name refused by
        :func:`vinstrata.segment.names.with_user_name`.
    """
    from vinstrata.segment.model import load_model
    from vinstrata.segment.names import with_user_name

    model_dir = Path(model_dir)
    rep = rep or Reporter()
    with OutputFolder(model_dir.parent, "name") as folder:
        model = load_model(model_dir)
        named = with_user_name(model, style, name)
        save_model(named, model_dir)
        named = dataclasses.replace(named, fingerprint=saved_fingerprint(model_dir))
        stale = _restamp(folder, model_dir, model.fingerprint, named)
    if stale:
        rep.warn(f"{', '.join(stale)} in {model_dir.parent} show the former style names; "
                 "make them again (place, brief)")
    return named


def _restamp(folder: OutputFolder, model_dir: Path, old: str, named: StyleModel) -> list[str]:
    """Move the manifest entries of the model ``old`` to the renamed model; returns the
    results left with the former names."""
    from vinstrata.folders import file_entry, write_json
    from vinstrata.segment.previous import previous_table

    safe = _safe(named.config)
    tables = {"styles.csv": style_table(named), "lot_styles.csv": lot_styles(named),
              "lot_styles.parquet": lot_styles(named), PREVIOUS_FILE: previous_table(named)}
    model_key = model_dir.name + "/"
    stale = []
    for path, data in folder.manifests():
        files = dict(data["files"])
        changed = False
        for key, entry in sorted(files.items()):
            identity = Identity.from_dict(entry.get("identity") or data["identity"])
            if not old or identity.model != old or not (folder.path / key.rstrip("/")).exists():
                continue
            if key.endswith(_NAMED_RESULTS):
                stale.append(key)
                continue
            target = folder.path / key.rstrip("/")
            if key in _NAMED_TABLES and tables.get(key) is not None:
                if key.endswith(".parquet"):
                    write_parquet(tables[key], target)
                else:
                    write_csv(tables[key], target, spreadsheet_safe=safe)
            elif key != model_key and key in _NAMED_TABLES:
                continue
            renamed = dataclasses.replace(identity, model=named.fingerprint)
            files[key] = {**file_entry(target), "identity": renamed.to_dict()}
            changed = True
        if changed:
            write_json(path, {**data, "files": files})
    return sorted(set(stale))
