"""The stages wired together, with the file I/O at the edges.

The CLI commands call these functions; so can a notebook. Each ``write_*``
function writes one command's contract files.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import pandas as pd

from vinstrata.config import Config
from vinstrata.errors import InputError
from vinstrata.progress import Reporter
from vinstrata.read import quality
from vinstrata.read.ingest import read_table
from vinstrata.read.lots import UNASSIGNED, LotTable
from vinstrata.read.validate import load_lots, validate
from vinstrata.segment.fit import fit_styles
from vinstrata.segment.model import StyleModel, save_model
from vinstrata.segment.outputs import lot_styles, style_table
from vinstrata.tables import write_csv

if TYPE_CHECKING:
    from vinstrata.place.placing import Placements
    from vinstrata.profile.drivers import Profiles

CHECK_FILES = ("quality_summary.csv", "quality_analytes.csv", "row_status.csv")


def _with_sheet(config: Config, sheet: str | None) -> Config:
    """The config with ``ingest.sheet`` replaced by a ``--sheet`` given on the command line."""
    if sheet is None:
        return config
    return dataclasses.replace(config, ingest=dataclasses.replace(config.ingest, sheet=sheet))


def load(path: str | Path, config: Config, sheet: str | None = None,
         require_grade: bool = True) -> LotTable:
    """Read and validate a lot file (``sheet`` overrides ``ingest.sheet``)."""
    return load_lots(str(path), _with_sheet(config, sheet), require_grade=require_grade)


def warn_rejections(table: LotTable, rep: Reporter, where: str = "row_status.csv") -> None:
    """One warning line for the rejected rows, by reason."""
    counts = quality.reason_counts(table.ids["status"])
    if len(counts):
        parts = ", ".join(f"{count} {reason}" for reason, count in counts.items())
        rep.warn(f"{table.source.name}: {int(counts.sum())} of {table.n_rows} rows rejected "
                 f"({parts}); see {where}")


def note_analytes(table: LotTable, config: Config, rep: Reporter) -> None:
    """Say which columns were taken as analytes when the config lets the engine find them."""
    if not config.columns.analytes:
        rep.line(f"  analytes found in {table.source.name} (no [columns] analytes in the "
                 f"config): {', '.join(table.analytes)}")


def write_check(table: LotTable, out: str | Path) -> list[Path]:
    """``quality_summary.csv``, ``quality_analytes.csv`` and ``row_status.csv``."""
    out = Path(out)
    return [
        write_csv(quality.summary(table), out / CHECK_FILES[0]),
        write_csv(quality.analyte_summary(table), out / CHECK_FILES[1]),
        write_csv(quality.row_status(table), out / CHECK_FILES[2]),
    ]


def segment(table: LotTable, config: Config, rep: Reporter | None = None) -> StyleModel:
    """Fit the styles (see :func:`vinstrata.segment.fit_styles`)."""
    return fit_styles(table, config, rep)


def write_segment(model: StyleModel, out: str | Path) -> list[Path]:
    """``lot_styles.csv``, ``styles.csv``, ``sweep.csv`` and the ``model/`` folder."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    save_model(model, out / "model")
    return [
        write_csv(lot_styles(model), out / "lot_styles.csv"),
        write_csv(style_table(model), out / "styles.csv"),
        write_csv(model.sweep, out / "sweep.csv"),
    ]


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


def profile(model: StyleModel, config: Config | None = None,
            rep: Reporter | None = None, for_placing: bool = False) -> Profiles:
    """Profile the styles (see :func:`vinstrata.profile.profile_styles`).

    ``for_placing`` skips what placing new lots does not use (the pooled rows,
    the intervals of the cuts); the drivers and cuts are the same.
    """
    from vinstrata.profile.drivers import profile_styles

    return profile_styles(model, config, rep, pooled=not for_placing,
                          cut_intervals=not for_placing)


def write_profile(profiles: Profiles, out: str | Path) -> list[Path]:
    """``drivers.csv``, ``thresholds.csv``, ``contrasts.csv`` and the band tables."""
    out = Path(out)
    frames = (profiles.drivers, profiles.thresholds, profiles.contrasts, profiles.band_counts,
              profiles.band_stats)
    return [write_csv(frame, out / name) for frame, name in zip(frames, PROFILE_FILES)]


def load_new(path: str | Path, model: StyleModel, config: Config,
             sheet: str | None = None) -> LotTable:
    """Read new lots through the training front door, refusing a file that does not fit."""
    from vinstrata.place.match import check_columns

    config = _with_sheet(config, sheet)
    raw = read_table(path, sheet=config.ingest.sheet, delimiter=config.ingest.delimiter)
    check_columns(raw, model, config)
    return validate(raw, config, require_grade=False)


def place(table: LotTable, model: StyleModel, profiles: Profiles | None,
          config: Config | None = None, rep: Reporter | None = None) -> Placements:
    """Place new lots (see :func:`vinstrata.place.place_lots`)."""
    from vinstrata.place.placing import place_lots

    return place_lots(table, model, profiles, config, rep)


def write_place(placements: Placements, out: str | Path) -> list[Path]:
    """``placements.csv`` and its detail tables."""
    out = Path(out)
    frames = (placements.lots, placements.details, placements.analytes, placements.neighbours)
    return [write_csv(frame, out / name) for frame, name in zip(frames, PLACE_FILES)]


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
          placements: Placements | None, config: Config | None = None) -> Path:
    """Write the briefing PDF (see :func:`vinstrata.report.write_briefing`)."""
    from vinstrata.report import write_briefing

    return write_briefing(path, model, profiles, placements, config)


def _read(folder: Path, name: str, command: str) -> pd.DataFrame:
    path = folder / name
    if not path.exists():
        raise InputError(f"{folder}: no {name} (give the folder written by 'vinstrata "
                         f"{command}')")
    try:
        return pd.read_csv(path, keep_default_na=False, na_values=[""])
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: unreadable ({exc.__class__.__name__})") from None


def _booleans(frame: pd.DataFrame, *columns: str) -> pd.DataFrame:
    for column in columns:
        if column in frame.columns:
            frame[column] = frame[column].astype(str).str.lower().isin(["true", "1"])
    return frame


def read_profile(folder: str | Path) -> Profiles:
    """Read the files written by :func:`write_profile` back."""
    from vinstrata.profile.drivers import Profiles

    folder = Path(folder)
    frames = [_read(folder, name, "profile") for name in PROFILE_FILES]
    drivers = _booleans(frames[0], "is_driver", "trusted")
    drivers["note"] = drivers["note"].fillna("").astype(str)
    thresholds = _booleans(frames[1], "trusted")
    thresholds["direction"] = thresholds["direction"].fillna("").astype(str)
    contrasts = frames[2].fillna("")
    return Profiles(drivers=drivers, thresholds=thresholds, contrasts=contrasts,
                    band_counts=_booleans(frames[3], "trusted"), band_stats=frames[4])


def read_place(folder: str | Path) -> Placements:
    """Read the files written by :func:`write_place` back."""
    from vinstrata.place.placing import Placements

    folder = Path(folder)
    frames = [_read(folder, name, "place") for name in PLACE_FILES]
    lots = _booleans(frames[0], "atypical", "trusted")
    for column in ("lot_id", "style", "indicative_band", "flags", "status"):
        lots[column] = lots[column].fillna("").astype(str)
    details = frames[1]
    details["lot_id"] = details["lot_id"].astype(str)
    for column in ("flags_text", "flags_short"):
        details[column] = details[column].fillna("").astype(str)
    return Placements(lots=lots, details=details, analytes=frames[2], neighbours=frames[3])


# --------------------------------------------------------------------------- run


@dataclass(frozen=True)
class RunResult:
    """What ``vinstrata run`` made."""

    model: StyleModel
    profiles: Profiles | None
    placements: Placements | None
    briefing: Path


def fresh_folder(parent: Path) -> Path:
    """A new ``vinstrata-run-N`` folder name under ``parent`` (not created)."""
    n = 1
    while (parent / f"vinstrata-run-{n}").exists():
        n += 1
    return parent / f"vinstrata-run-{n}"


def demo_inputs(folder: Path) -> tuple[str, str]:
    """Write the shipped demo range (the generator's defaults) and return its two files."""
    from vinstrata.demo import generate_demo, write_demo

    paths = write_demo(folder, generate_demo())
    return str(paths["lots"]), str(paths["new_lots"])


def run_all(lots: str | Path, new_lots: str | Path | None, config: Config, out: Path,
            rep: Reporter, sheet: str | None = None) -> RunResult:
    """Every stage in one go, every contract file written into ``out``."""
    out.mkdir(parents=True, exist_ok=True)
    with rep.stage("check: read and validate the lots"):
        table = load(lots, config, sheet=sheet, require_grade=bool(config.columns.grade))
        write_check(table, out)
    note_analytes(table, config, rep)
    warn_rejections(table, rep)
    with rep.stage("segment: transform, UMAP, HDBSCAN"):
        model = segment(table, config, rep)
        write_segment(model, out)
    profiles = None
    if model.has_grade:
        with rep.stage("profile: effect sizes, bootstrap, thresholds"):
            profiles = profile(model, config, rep)
            write_profile(profiles, out)
    else:
        rep.warn("no grade column: styles only, no drivers profiled")
    placements = None
    if new_lots is not None:
        with rep.stage("place: new lots against their styles"):
            new_table = load_new(new_lots, model, config, sheet=sheet)
            warn_rejections(new_table, rep, where="placements.csv")
            placements = place(new_table, model, profiles, config, rep)
            write_place(placements, out)
    with rep.stage("brief: the PDF"):
        path = brief(out / "briefing.pdf", model, profiles, placements, config)
    return RunResult(model=model, profiles=profiles, placements=placements, briefing=path)
