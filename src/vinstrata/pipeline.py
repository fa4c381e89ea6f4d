"""The stages wired together, with the file I/O at the edges.

The CLI commands call these functions; so can a notebook. Each ``write_*``
function writes one command's contract files.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from vinstrata import quality
from vinstrata.config import Config
from vinstrata.errors import InputError
from vinstrata.ingest import read_table
from vinstrata.lots import LotTable
from vinstrata.model import StyleModel, save_model
from vinstrata.progress import Reporter
from vinstrata.segment import fit_styles, lot_styles, style_table
from vinstrata.tables import write_csv
from vinstrata.validate import load_lots, validate

if TYPE_CHECKING:
    from vinstrata.place import Placements
    from vinstrata.profile import Profiles

CHECK_FILES = ("quality_summary.csv", "quality_analytes.csv", "row_status.csv")


def load(path: str | Path, config: Config, sheet: str | None = None,
         require_grade: bool = True) -> LotTable:
    """Read and validate a lot file (``sheet`` overrides ``ingest.sheet``)."""
    if sheet is not None:
        import dataclasses

        config = dataclasses.replace(config, ingest=dataclasses.replace(config.ingest,
                                                                         sheet=sheet))
    return load_lots(str(path), config, require_grade=require_grade)


def warn_rejections(table: LotTable, rep: Reporter) -> None:
    """One warning line for the rejected rows, by reason."""
    counts = quality.reason_counts(table.ids["status"])
    if len(counts):
        parts = ", ".join(f"{count} {reason}" for reason, count in counts.items())
        rep.warn(f"{table.source.name}: {int(counts.sum())} of {table.n_rows} rows rejected "
                 f"({parts}); see row_status.csv")


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


def describe_styles(model: StyleModel) -> str:
    """The styles as terminal lines."""
    lines = [f"{len(model.styles)} style(s) from {len(model.lots)} lots "
             f"({int((model.lots['style'] == 'unassigned').sum())} unassigned):"]
    for row in model.styles.itertuples():
        mark = "" if row.trusted else "  [untrusted]"
        lines.append(f"  {row.style:<4} {row.n_lots:>6} lots  {row.style_name}{mark}")
    return "\n".join(lines)


PROFILE_FILES = ("drivers.csv", "thresholds.csv", "contrasts.csv", "band_counts.csv",
                 "band_stats.csv")
PLACE_FILES = ("placements.csv", "placement_details.csv", "placement_analytes.csv",
               "placement_neighbours.csv")


def profile(model: StyleModel, config: Config | None = None,
            rep: Reporter | None = None) -> Profiles:
    """Profile the styles (see :func:`vinstrata.profile.profile_styles`)."""
    from vinstrata.profile import profile_styles

    return profile_styles(model, config, rep)


def write_profile(profiles: Profiles, out: str | Path) -> list[Path]:
    """``drivers.csv``, ``thresholds.csv``, ``contrasts.csv`` and the band tables."""
    out = Path(out)
    frames = (profiles.drivers, profiles.thresholds, profiles.contrasts, profiles.band_counts,
              profiles.band_stats)
    return [write_csv(frame, out / name) for frame, name in zip(frames, PROFILE_FILES)]


def load_new(path: str | Path, model: StyleModel, config: Config,
             sheet: str | None = None) -> LotTable:
    """Read new lots through the training front door, refusing a file that does not fit."""
    from vinstrata.place import check_columns

    if sheet is not None:
        import dataclasses

        config = dataclasses.replace(config, ingest=dataclasses.replace(config.ingest,
                                                                         sheet=sheet))
    raw = read_table(path, sheet=config.ingest.sheet, delimiter=config.ingest.delimiter)
    check_columns(raw, model, config)
    return validate(raw, config, require_grade=False)


def place(table: LotTable, model: StyleModel, profiles: Profiles | None,
          config: Config | None = None, rep: Reporter | None = None) -> Placements:
    """Place new lots (see :func:`vinstrata.place.place_lots`)."""
    from vinstrata.place import place_lots

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
