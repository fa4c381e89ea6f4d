"""The stages wired together, with the file I/O at the edges.

The CLI commands call these functions; so can a notebook. Each ``write_*``
function writes one command's contract files.
"""

from __future__ import annotations

from pathlib import Path

from vinstrata import quality
from vinstrata.config import Config
from vinstrata.lots import LotTable
from vinstrata.model import StyleModel, save_model
from vinstrata.progress import Reporter
from vinstrata.segment import fit_styles, lot_styles, style_table
from vinstrata.tables import write_csv
from vinstrata.validate import load_lots

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
