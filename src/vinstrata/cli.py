"""The ``vinstrata`` command line: a thin layer over the pipeline functions.

Every command reads its inputs, calls the stage functions and writes the
contract files. Bad input ends with one line on stderr and exit code 2;
an internal fault with a short message and exit code 1 (``--debug`` shows the
traceback).
"""

from __future__ import annotations

import sys
import traceback
from pathlib import Path

import click

from vinstrata import __version__
from vinstrata.config import Config, load_config, packaged_config, with_overrides
from vinstrata.errors import InputError
from vinstrata.progress import Reporter

CONFIG_HELP = "TOML config (configs/default.toml documents every key)."


class State:
    """Options shared by every command (``--debug`` is read by :func:`main` itself)."""

    def __init__(self, quiet: bool) -> None:
        self.quiet = quiet

    def reporter(self) -> Reporter:
        return Reporter(quiet=self.quiet)


def _config(path: str | None, seed: int | None = None, fallback: str = "default") -> Config:
    config = load_config(path) if path else packaged_config(fallback)
    if seed is not None:
        config = with_overrides(config, seed=seed)
    return config


def _say(text: str) -> None:
    click.echo(text)


def _summary(rep: Reporter) -> None:
    if rep.quiet:
        return
    if rep.timings:
        click.echo(rep.timing(), err=True)
    if rep.warnings:
        click.echo(f"{len(rep.warnings)} warning(s):", err=True)
        for line in rep.warnings:
            click.echo(f"  - {line}", err=True)


@click.group(context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="vinstrata")
@click.option("--debug", is_flag=True, help="Show the traceback of an internal fault.")
@click.option("--quiet", "-q", is_flag=True, help="No progress lines on stderr.")
@click.pass_context
def cli(ctx: click.Context, debug: bool, quiet: bool) -> None:
    """Style segmentation, within-style quality drivers, new-lot placement and
    buyer briefings for wine lot tables."""
    ctx.obj = State(quiet=quiet)


# --------------------------------------------------------------------------- demo


@cli.command()
@click.option("--out", "out_dir", required=True, help="Folder to write the demo range into.")
@click.option("--lots", "n_lots", default=6000, show_default=True, help="Lots drawn from styles.")
@click.option("--seed", default=7, show_default=True, help="Seed of the generator.")
@click.option("--noise-share", default=0.0, show_default=True,
              help="Extra share of lots with random chemistry that fit no style.")
@click.option("--blank-share", default=0.004, show_default=True,
              help="Share of analyte cells left blank.")
@click.option("--bad-rows", default=12, show_default=True,
              help="Faulty rows appended (each rejection reason in turn).")
@click.option("--new", "n_new", default=50, show_default=True, help="New lots to place.")
@click.option("--styles", default="", help="Comma-separated planted styles to draw (default all).")
def demo(out_dir: str, n_lots: int, seed: int, noise_share: float, blank_share: float,
         bad_rows: int, n_new: int, styles: str) -> None:
    """Write the invented demo range (lots, new lots and planted truth)."""
    from vinstrata.demo import RECIPES_BY_KEY, generate_demo, write_demo

    keys = tuple(s.strip() for s in styles.split(",") if s.strip())
    unknown = [k for k in keys if k not in RECIPES_BY_KEY]
    if unknown:
        raise InputError(f"--styles: unknown style '{unknown[0]}' "
                         f"(styles: {', '.join(RECIPES_BY_KEY)})")
    if n_lots < 1 or not 0 <= noise_share <= 1 or not 0 <= blank_share < 1 or bad_rows < 0:
        raise InputError("--lots must be at least 1, --noise-share and --blank-share between 0 "
                         "and 1, --bad-rows at least 0")
    paths = write_demo(out_dir, generate_demo(n_lots, seed, noise_share, blank_share, bad_rows,
                                              n_new, keys or None))
    for key, path in paths.items():
        _say(f"{key:<15} {path}")


# --------------------------------------------------------------------------- check


@cli.command()
@click.argument("lots")
@click.option("--config", "config_path", help=CONFIG_HELP)
@click.option("--sheet", default=None, help="Excel sheet to read (default: the first).")
@click.option("--out", "out_dir", default=None,
              help="Folder for quality_summary.csv, quality_analytes.csv and row_status.csv "
                   "(default: check_<file name>).")
@click.pass_obj
def check(state: State, lots: str, config_path: str | None, sheet: str | None,
          out_dir: str | None) -> None:
    """Validate a lot table and report its data quality."""
    from vinstrata import pipeline
    from vinstrata.read import quality

    rep = state.reporter()
    config = _config(config_path)
    out = Path(out_dir or f"check_{Path(lots).stem}")
    with rep.stage("check: read and validate"):
        table = pipeline.load(lots, config, sheet=sheet, require_grade=bool(config.columns.grade))
    pipeline.note_analytes(table, config, rep)
    _say(quality.describe(table))
    pipeline.write_check(table, out)
    _summary(rep)
    _say(f"wrote {out}/")


# --------------------------------------------------------------------------- segment


@cli.command()
@click.argument("lots")
@click.option("--config", "config_path", help=CONFIG_HELP)
@click.option("--out", "out_dir", required=True, help="Output folder (model/ goes inside).")
@click.option("--sheet", default=None, help="Excel sheet to read (default: the first).")
@click.option("--seed", type=int, default=None, help="Override the config's seed.")
@click.pass_obj
def segment(state: State, lots: str, config_path: str | None, out_dir: str, sheet: str | None,
            seed: int | None) -> None:
    """Segment a range into chemistry-based styles; writes lot_styles.csv, styles.csv, model/."""
    from vinstrata import pipeline

    rep = state.reporter()
    config = _config(config_path, seed)
    out = Path(out_dir)
    with rep.stage("check: read and validate"):
        table = pipeline.load(lots, config, sheet=sheet, require_grade=bool(config.columns.grade))
    pipeline.note_analytes(table, config, rep)
    pipeline.warn_rejections(table, rep)
    with rep.stage("segment: transform, UMAP, HDBSCAN"):
        model = pipeline.segment(table, config, rep)
    pipeline.write_check(table, out)
    pipeline.write_segment(model, out)
    _say(pipeline.styles_text(model))
    _summary(rep)
    _say(f"wrote {out}/ (model in {out / 'model'})")


# --------------------------------------------------------------------------- profile


@cli.command()
@click.option("--model", "model_dir", required=True, help="The model/ folder written by segment.")
@click.option("--config", "config_path", help=CONFIG_HELP + " Default: the model's own.")
@click.option("--out", "out_dir", required=True, help="Output folder.")
@click.pass_obj
def profile(state: State, model_dir: str, config_path: str | None, out_dir: str) -> None:
    """Profile each style against its grade bands; writes drivers, thresholds, contrasts."""
    from vinstrata import pipeline
    from vinstrata.profile.drivers import driver_summary
    from vinstrata.segment.model import load_model

    rep = state.reporter()
    model = load_model(model_dir)
    config = pipeline.model_config(model, load_config(config_path) if config_path else None)
    with rep.stage("profile: effect sizes, bootstrap, thresholds"):
        profiles = pipeline.profile(model, config, rep)
    pipeline.write_profile(profiles, out_dir)
    for line in driver_summary(profiles, model, config.report.top_drivers):
        _say(line)
    for sentence in profiles.contrasts["sentence"].head(12):
        _say(f"  * {sentence}")
    _summary(rep)
    _say(f"wrote {out_dir}/")


# --------------------------------------------------------------------------- place


@cli.command()
@click.argument("new")
@click.option("--model", "model_dir", required=True, help="The model/ folder written by segment.")
@click.option("--config", "config_path", help=CONFIG_HELP + " Default: the model's own.")
@click.option("--out", "out_dir", required=True, help="Output folder.")
@click.option("--sheet", default=None, help="Excel sheet to read (default: the first).")
@click.pass_obj
def place(state: State, new: str, model_dir: str, config_path: str | None, out_dir: str,
          sheet: str | None) -> None:
    """Place new lots against their styles; writes placements.csv and details."""
    from vinstrata import pipeline
    from vinstrata.place.text import describe
    from vinstrata.segment.model import load_model

    rep = state.reporter()
    model = load_model(model_dir)
    config = pipeline.model_config(model, load_config(config_path) if config_path else None)
    with rep.stage("check: read and validate the new lots"):
        table = pipeline.load_new(new, model, config, sheet=sheet)
    pipeline.warn_rejections(table, rep, where="placements.csv")
    with rep.stage("profile: the model's styles, for their driver cuts"):
        profiles = (pipeline.profile(model, config, for_placing=True) if model.has_grade
                    else None)
    with rep.stage("place: new lots against their styles"):
        placements = pipeline.place(table, model, profiles, config, rep)
    pipeline.write_place(placements, out_dir)
    _say(describe(placements))
    _summary(rep)
    _say(f"wrote {out_dir}/")


# --------------------------------------------------------------------------- brief


@cli.command()
@click.option("--model", "model_dir", required=True, help="The model/ folder written by segment.")
@click.option("--profiles", "profiles_dir", default=None,
              help="Folder with drivers.csv, thresholds.csv and contrasts.csv (from profile); "
                   "computed from the model when left out and the lots have grades.")
@click.option("--placements", "placements_dir", default=None,
              help="Folder written by place, to add the new-lot pages.")
@click.option("--config", "config_path", help=CONFIG_HELP + " Default: the model's own.")
@click.option("--out", "out_pdf", required=True, help="The PDF to write.")
@click.pass_obj
def brief(state: State, model_dir: str, profiles_dir: str | None, placements_dir: str | None,
          config_path: str | None, out_pdf: str) -> None:
    """Write the buyer briefing PDF."""
    from vinstrata import pipeline
    from vinstrata.segment.model import load_model

    rep = state.reporter()
    model = load_model(model_dir)
    config = pipeline.model_config(model, load_config(config_path) if config_path else None)
    if profiles_dir:
        profiles = pipeline.read_profile(profiles_dir)
    else:
        profiles = pipeline.profile(model, config) if model.has_grade else None
    placements = pipeline.read_place(placements_dir) if placements_dir else None
    with rep.stage("brief: the PDF"):
        path = pipeline.brief(out_pdf, model, profiles, placements, config)
    _summary(rep)
    _say(f"wrote {path}")


# --------------------------------------------------------------------------- run


@cli.command()
@click.argument("lots", required=False)
@click.option("--new", "new_lots", default=None, help="New lots to place.")
@click.option("--config", "config_path", help=CONFIG_HELP)
@click.option("--out", "out_dir", default=None,
              help="Output folder (default: a new vinstrata-run-N folder here).")
@click.option("--sheet", default=None, help="Excel sheet to read (default: the first).")
@click.option("--seed", type=int, default=None, help="Override the config's seed.")
@click.pass_obj
def run(state: State, lots: str | None, new_lots: str | None, config_path: str | None,
        out_dir: str | None, sheet: str | None, seed: int | None) -> None:
    """Check, segment, profile, place and brief in one go.

    With no LOTS it runs on the shipped demo range and its new lots."""
    from vinstrata import pipeline

    rep = state.reporter()
    out = Path(out_dir) if out_dir else pipeline.fresh_folder(Path.cwd())
    if lots is None:
        if new_lots is not None:
            raise InputError("--new needs LOTS too (the demo range brings its own new lots)")
        with rep.stage("demo: write the range of the invented Quillory Vale Wine Co."):
            lots, new_lots = pipeline.demo_inputs(out / "input")
        config = _config(config_path, seed, fallback="demo")
    else:
        config = _config(config_path, seed)
    result = pipeline.run_all(lots, new_lots, config, out, rep, sheet=sheet)
    _say(pipeline.styles_text(result.model))
    if result.placements is not None:
        from vinstrata.place.text import describe

        _say(describe(result.placements, limit=15))
    _summary(rep)
    _say(f"wrote {out}/ — briefing: {result.briefing}")


# --------------------------------------------------------------------------- entry point


def main(argv: list[str] | None = None) -> int:
    """Run the CLI; returns the exit code (0 ok, 1 internal fault, 2 bad input)."""
    args = sys.argv[1:] if argv is None else argv
    debug = "--debug" in args
    try:
        cli.main(args=args, prog_name="vinstrata", standalone_mode=False)
    except InputError as exc:
        click.echo(f"error: {exc}", err=True)
        return 2
    except click.exceptions.Abort:
        click.echo("aborted", err=True)
        return 1
    except click.ClickException as exc:
        exc.show()
        return exc.exit_code
    except click.exceptions.Exit as exc:
        return int(exc.exit_code)
    except KeyboardInterrupt:
        click.echo("interrupted", err=True)
        return 130
    except MemoryError:
        click.echo("internal error: out of memory", err=True)
        return 1
    except Exception as exc:  # an internal fault: short message, traceback on request
        if debug:
            traceback.print_exc()
        else:
            click.echo(f"internal error: {exc.__class__.__name__}: {exc} "
                       "(run with --debug for the traceback)", err=True)
        return 1
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
