"""The ``vinstrata`` command line: a thin layer over the pipeline functions.

Every command reads its inputs, calls the stage functions and writes the
contract files, holding its output folder from start to end
(:class:`vinstrata.folders.OutputFolder`: the lock, then the manifest of what
it wrote and the removal of another run's files). Bad input ends with one
line on stderr and exit code 2; an internal fault with a short message and
exit code 1 (``--debug`` shows the traceback).
"""

from __future__ import annotations

import re
import sys
import traceback
from pathlib import Path
from typing import TYPE_CHECKING

import click

from vinstrata import __version__
from vinstrata.config import Config, load_config, packaged_config, with_overrides
from vinstrata.errors import InputError
from vinstrata.folders import Identity, OutputFolder, held_back
from vinstrata.progress import Reporter

if TYPE_CHECKING:
    from vinstrata.segment.model import StyleModel

CONFIG_HELP = "TOML config (configs/default.toml documents every key)."


class State:
    """Options shared by every command: ``--quiet`` and ``--debug``, given before the
    command's name or after it (:func:`shared_options`); :func:`main` reads ``debug``."""

    def __init__(self, quiet: bool = False, debug: bool = False) -> None:
        self.quiet = quiet
        self.debug = debug

    def reporter(self) -> Reporter:
        # stderr only: the closing summary repeats the warnings, Python's warnings would double them
        return Reporter.command_line(quiet=self.quiet)


ENV_PREFIX = "VINSTRATA"  # VINSTRATA_<COMMAND>_<OPTION>, e.g. VINSTRATA_SEGMENT_OUT
# inputs click checks: it names a missing file in its own usage error (exit code 2)
LOT_FILE = click.Path(exists=True, dir_okay=False, path_type=Path)


class _LotPath(click.Path):
    """A lot file, a folder of lot files or a glob pattern (``lots/*.parquet``); a pattern
    is left to the reader, which refuses one matching nothing in one line (exit code 2)."""

    def convert(self, value, param, ctx):  # type: ignore[no-untyped-def]
        if any(mark in str(value) for mark in "*?[") and not Path(value).exists():
            return Path(value)
        return super().convert(value, param, ctx)


LOTS = _LotPath(exists=True, path_type=Path)  # lot inputs: a file, a folder or a pattern
RESULT_FOLDER = click.Path(exists=True, file_okay=False, path_type=Path)
# a model folder is checked by load_model, which first puts back one that an interrupted
# save set aside: click's own existence check would refuse that folder
MODEL_FOLDER = click.Path(file_okay=False, path_type=Path)
OUT_FOLDER = click.Path(file_okay=False, path_type=Path)
FORMATS = click.Choice(["csv", "parquet", "both"])
FORMAT_HELP = ("Per-lot tables (lot_styles, placements and their detail files) as CSV, "
               "Parquet or both.")
PREVIOUS_HELP = ("The model/ folder of the previous fit (next vintage's refit, say): styles "
                 "matched to its styles keep their ids and names; previous.csv says how.")


def _set_flag(name: str):
    """A callback setting ``State.<name>`` when the flag is given (at any level)."""

    def callback(ctx: click.Context, param: click.Parameter, value: bool) -> None:
        if value:
            setattr(ctx.ensure_object(State), name, True)

    return callback


def shared_options(command):
    """``--quiet/-q`` and ``--debug`` on a command too, so that they work after its name."""
    command = click.option("--debug", is_flag=True, expose_value=False, callback=_set_flag("debug"),
                           help="Show the traceback of an internal fault.")(command)
    return click.option("--quiet", "-q", is_flag=True, expose_value=False,
                        callback=_set_flag("quiet"), help="No progress lines on stderr.")(command)


def config_option(command_name: str, help_text: str = CONFIG_HELP):
    """``--config``, also from ``VINSTRATA_<COMMAND>_CONFIG`` or, for every command,
    ``VINSTRATA_CONFIG`` (the command's own variable wins)."""
    return click.option("--config", "config_path", type=LOT_FILE, help=help_text,
                        envvar=[f"{ENV_PREFIX}_{command_name.upper()}_CONFIG",
                                f"{ENV_PREFIX}_CONFIG"])


def _previous(folder: Path | None):
    """The model given by ``--previous`` (None when left out)."""
    if folder is None:
        return None
    from vinstrata.segment.model import load_model

    return load_model(folder)


def _config(path: str | Path | None, seed: int | None = None,
            fallback: str = "default") -> Config:
    config = load_config(path) if path else packaged_config(fallback)
    if seed is not None:
        config = with_overrides(config, seed=seed)
    return config


def _model_and_config(model_dir: Path, config_path: Path | None) -> tuple[StyleModel, Config]:
    """A model folder loaded, and the config a later stage runs with (the model's own,
    or the one given, checked against the model)."""
    from vinstrata import pipeline
    from vinstrata.segment.model import load_model

    model = load_model(model_dir)
    return model, pipeline.model_config(model, load_config(config_path) if config_path else None)


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
    state = ctx.ensure_object(State)
    # the same flags given after the command's name were set already, or are set later
    state.quiet = state.quiet or quiet
    state.debug = state.debug or debug


# --------------------------------------------------------------------------- demo


@cli.command()
@click.option("--out", "out_dir", required=True, type=OUT_FOLDER,
              help="Folder to write the demo range into.")
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
@shared_options
def demo(out_dir: Path, n_lots: int, seed: int, noise_share: float, blank_share: float,
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
@click.argument("lots", type=LOTS)
@config_option("check")
@click.option("--sheet", default=None, help="Excel sheet to read (default: the first).")
@click.option("--out", "out_dir", default=None, type=OUT_FOLDER,
              help="Folder for quality_summary.csv, quality_analytes.csv and row_status.csv "
                   "(default: check_<file name>).")
@shared_options
@click.pass_obj
def check(state: State, lots: Path, config_path: Path | None, sheet: str | None,
          out_dir: Path | None) -> None:
    """Validate a lot table and report its data quality."""
    from vinstrata import pipeline
    from vinstrata.read import quality

    rep = state.reporter()
    config = _config(config_path)
    # a glob pattern names no one file: its wildcards make no folder name
    stem = re.sub(r"[*?\[\]]+", "_", Path(lots).stem).strip("_") or "lots"
    out = Path(out_dir or f"check_{stem}")
    with OutputFolder(out, "check") as folder:
        with rep.stage("check: read and validate"):
            table = pipeline.load(lots, config, sheet=sheet,
                                  require_grade=bool(config.columns.grade))
        identity = Identity(input_sha256=table.source.sha256)
        folder.claim(identity)
        pipeline.note_analytes(table, config, rep)
        pipeline.warn_hints(table, rep)
        _say(quality.describe(table))
        with held_back():
            written = pipeline.write_check(table, out, config)
        folder.commit(identity, written)
    _summary(rep)
    _say(f"wrote {out}/")


# --------------------------------------------------------------------------- segment


@cli.command()
@click.argument("lots", type=LOTS)
@config_option("segment")
@click.option("--out", "out_dir", required=True, type=OUT_FOLDER,
              help="Output folder (model/ goes inside).")
@click.option("--sheet", default=None, help="Excel sheet to read (default: the first).")
@click.option("--seed", type=int, default=None, help="Override the config's seed.")
@click.option("--format", "formats", type=FORMATS, default="csv", show_default=True,
              help=FORMAT_HELP)
@click.option("--previous", "previous_dir", type=MODEL_FOLDER, default=None, help=PREVIOUS_HELP)
@shared_options
@click.pass_obj
def segment(state: State, lots: Path, config_path: Path | None, out_dir: Path,
            sheet: str | None, seed: int | None, formats: str,
            previous_dir: Path | None) -> None:
    """Segment a range into chemistry-based styles; writes lot_styles.csv, styles.csv, model/."""
    from vinstrata import pipeline

    rep = state.reporter()
    config = _config(config_path, seed)
    out = Path(out_dir)
    previous = _previous(previous_dir)  # read first: it may be the model this fit replaces
    with OutputFolder(out, "segment") as folder:
        with rep.stage("check: read and validate"):
            table = pipeline.load(lots, config, sheet=sheet,
                                  require_grade=bool(config.columns.grade))
        pipeline.note_analytes(table, config, rep)
        pipeline.warn_rejections(table, rep)
        with rep.stage("segment: transform, UMAP, HDBSCAN"):
            model = pipeline.segment(table, config, rep)
        if previous is not None:
            with rep.stage("segment: styles matched to the previous model"):
                model = pipeline.match_previous(model, previous, rep)
        with held_back():  # the tables and the model change together
            written = [*pipeline.write_check(table, out, config),
                       *pipeline.write_segment(model, out, config, formats)]
        folder.commit(pipeline.run_identity(model, out / "model"), written)
    _say(pipeline.styles_text(model))
    _summary(rep)
    _say(f"wrote {out}/ (model in {out / 'model'})")


# --------------------------------------------------------------------------- profile


@cli.command()
@click.option("--model", "model_dir", required=True, type=MODEL_FOLDER,
              help="The model/ folder written by segment.")
@config_option("profile", CONFIG_HELP + " Default: the model's own.")
@click.option("--out", "out_dir", required=True, type=OUT_FOLDER, help="Output folder.")
@shared_options
@click.pass_obj
def profile(state: State, model_dir: Path, config_path: Path | None, out_dir: Path) -> None:
    """Profile each style against its grade bands; writes drivers, thresholds, contrasts."""
    from vinstrata import pipeline
    from vinstrata.profile.drivers import driver_summary

    rep = state.reporter()
    with OutputFolder(out_dir, "profile") as folder:
        model, config = _model_and_config(model_dir, config_path)
        identity = pipeline.run_identity(model)
        folder.claim(identity)
        with rep.stage("profile: effect sizes, bootstrap, thresholds"):
            profiles = pipeline.profile(model, config, rep)
        with held_back():
            written = pipeline.write_profile(profiles, out_dir, config)
        folder.commit(identity, written)
    for line in driver_summary(profiles, model, config.report.top_drivers):
        _say(line)
    for sentence in profiles.contrasts["sentence"].head(12):
        _say(f"  * {sentence}")
    _summary(rep)
    _say(f"wrote {out_dir}/")


# --------------------------------------------------------------------------- place


@cli.command()
@click.argument("new", type=LOTS)
@click.option("--model", "model_dir", required=True, type=MODEL_FOLDER,
              help="The model/ folder written by segment.")
@config_option("place", CONFIG_HELP + " Default: the model's own.")
@click.option("--out", "out_dir", required=True, type=OUT_FOLDER, help="Output folder.")
@click.option("--sheet", default=None, help="Excel sheet to read (default: the first).")
@click.option("--format", "formats", type=FORMATS, default="csv", show_default=True,
              help=FORMAT_HELP)
@click.option("--engine", type=click.Choice(["local", "dask"]), default="local",
              show_default=True,
              help="local: this process, in batches of [place] batch_lots; dask: the batches "
                   "on a Dask cluster, written as the Parquet datasets placements/ and "
                   "placement_details/ (needs the 'dask' extra).")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="With --engine dask: a running scheduler (tcp://host:8786); default: a "
                   "local cluster, one worker process per core.")
@click.option("--profiles", "profiles_dir", default=None, type=RESULT_FOLDER,
              help="A 'vinstrata profile' output folder of this model, for the driver flags "
                   "(default: profile the model here first).")
@shared_options
@click.pass_obj
def place(state: State, new: Path, model_dir: Path, config_path: Path | None, out_dir: Path,
          sheet: str | None, formats: str, engine: str, scheduler: str | None,
          profiles_dir: Path | None) -> None:
    """Place new lots against their styles; writes placements.csv and details."""
    from contextlib import nullcontext

    from vinstrata import pipeline
    from vinstrata.place.text import describe

    if scheduler is not None and engine != "dask":
        raise InputError("--scheduler needs --engine dask")
    if engine == "dask":
        from vinstrata.place.cluster import _import_distributed

        _import_distributed()  # refuse before any work when the extra is missing
    rep = state.reporter()
    with OutputFolder(out_dir, "place") as folder:
        model, config = _model_and_config(model_dir, config_path)
        identity = pipeline.run_identity(model)
        folder.claim(identity)
        if profiles_dir is not None:  # refuse another model's profiles before any work
            pipeline.check_results_model(profiles_dir, "profile", model)
        with rep.stage("check: read and validate the new lots"):
            batches = pipeline.new_lot_batches(new, model, config, config.place.batch_lots,
                                               sheet=sheet)
            scan = pipeline.scan_new(batches, model, config)
        pipeline.warn_file(scan, batches, rep, where="placements.csv")
        if profiles_dir is not None:
            profiles = pipeline.read_profile(profiles_dir)
        else:
            with rep.stage("profile: the model's styles, for their driver cuts"):
                profiles = (pipeline.profile(model, config, for_placing=True)
                            if model.has_grade else None)
        if engine == "dask":
            from vinstrata.place.cluster import dask_runner

            running = dask_runner(model, profiles, config, scheduler)
        else:
            running = nullcontext(None)
        with rep.stage("place: new lots against their styles, written as they come"), \
                running as runner, held_back():
            written, tally = pipeline.place_stream(batches, scan, model, profiles, config,
                                                   out_dir, formats, rep, runner=runner,
                                                   dataset=engine == "dask")
        folder.commit(identity, written)
    _say(describe(tally.head, tally=tally) if tally.head is not None else "no rows")
    _summary(rep)
    _say(f"wrote {out_dir}/")


# --------------------------------------------------------------------------- brief


@cli.command()
@click.option("--model", "model_dir", required=True, type=MODEL_FOLDER,
              help="The model/ folder written by segment.")
@click.option("--profiles", "profiles_dir", default=None, type=RESULT_FOLDER,
              help="Folder with drivers.csv, thresholds.csv and contrasts.csv (from profile); "
                   "computed from the model when left out and the lots have grades.")
@click.option("--placements", "placements_dir", default=None, type=RESULT_FOLDER,
              help="Folder written by place, to add the new-lot pages.")
@config_option("brief", CONFIG_HELP + " Default: the model's own.")
@click.option("--out", "out_pdf", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="The PDF to write.")
@click.option("--previous", "previous_dir", type=MODEL_FOLDER, default=None,
              help="The previous model/ the model's styles were matched to (segment "
                   "--previous): adds the page 'since the previous model'.")
@shared_options
@click.pass_obj
def brief(state: State, model_dir: Path, profiles_dir: Path | None, placements_dir: Path | None,
          config_path: Path | None, out_pdf: Path, previous_dir: Path | None) -> None:
    """Write the buyer briefing PDF."""
    from vinstrata import pipeline

    rep = state.reporter()
    # the PDF is one file among others: brief records it and never removes anything
    with OutputFolder(Path(out_pdf).parent, "brief") as folder:
        model, config = _model_and_config(model_dir, config_path)
        if profiles_dir:
            pipeline.check_results_model(profiles_dir, "profile", model)
            profiles = pipeline.read_profile(profiles_dir)
        else:
            profiles = pipeline.profile(model, config) if model.has_grade else None
        if placements_dir:
            pipeline.check_results_model(placements_dir, "place", model)
        placements = pipeline.read_place(placements_dir) if placements_dir else None
        previous = _previous(previous_dir)
        with rep.stage("brief: the PDF"):
            path = pipeline.brief(out_pdf, model, profiles, placements, config,
                                  previous=previous)
        folder.commit(pipeline.run_identity(model), [path], replace="none")
    _summary(rep)
    _say(f"wrote {path}")


# --------------------------------------------------------------------------- name


@cli.command("name")
@click.option("--model", "model_dir", required=True, type=MODEL_FOLDER,
              help="The model/ folder written by segment.")
@click.argument("style")
@click.argument("new_name", metavar="NAME")
@shared_options
@click.pass_obj
def name_command(state: State, model_dir: Path, style: str, new_name: str) -> None:
    """Give a style a name of your own, kept in the model.

    STYLE is its id (S1 ...), NAME the name ("" gives it its generated name back).
    styles.csv, lot_styles.csv, placements and the briefing show it as style_name,
    the generated name stays beside it (generated_name), and a refit with
    --previous keeps it on the matched style."""
    from vinstrata import pipeline

    rep = state.reporter()
    model = pipeline.name_style(model_dir, style, new_name, rep)
    _say(pipeline.styles_text(model))
    _summary(rep)
    _say(f"wrote {model_dir}")


# --------------------------------------------------------------------------- run


@cli.command()
@click.argument("lots", required=False, type=LOTS)
@click.option("--new", "new_lots", default=None, type=LOTS, help="New lots to place.")
@config_option("run")
@click.option("--out", "out_dir", default=None, type=OUT_FOLDER,
              help="Output folder (default: a new vinstrata-run-N folder here).")
@click.option("--sheet", default=None, help="Excel sheet to read (default: the first).")
@click.option("--seed", type=int, default=None, help="Override the config's seed.")
@click.option("--format", "formats", type=FORMATS, default="csv", show_default=True,
              help=FORMAT_HELP)
@click.option("--previous", "previous_dir", type=MODEL_FOLDER, default=None, help=PREVIOUS_HELP)
@shared_options
@click.pass_obj
def run(state: State, lots: Path | None, new_lots: Path | None, config_path: Path | None,
        out_dir: Path | None, sheet: str | None, seed: int | None, formats: str,
        previous_dir: Path | None) -> None:
    """Check, segment, profile, place and brief in one go.

    With no LOTS it runs on the shipped demo range and its new lots."""
    from vinstrata import pipeline

    rep = state.reporter()
    if lots is None and new_lots is not None:
        raise InputError("--new needs LOTS too (the demo range brings its own new lots)")
    config = _config(config_path, seed, fallback="demo" if lots is None else "default")
    previous = _previous(previous_dir)
    out = Path(out_dir) if out_dir else pipeline.fresh_folder(Path.cwd())
    with OutputFolder(out, "run") as folder:
        if lots is None:
            with rep.stage("demo: write the range of the invented Quillory Vale Wine Co."):
                lots, new_lots = pipeline.demo_inputs(out / "input")
        result = pipeline.run_all(lots, new_lots, config, out, rep, sheet=sheet, folder=folder,
                                  formats=formats, previous=previous)
    _say(pipeline.styles_text(result.model))
    if result.profiles is not None:  # direct drivers first, passengers named as such
        from vinstrata.profile.drivers import driver_summary

        for line in driver_summary(result.profiles, result.model, config.report.top_drivers):
            _say(line)
    if result.placements is not None:
        from vinstrata.place.text import describe

        _say(describe(result.placements, limit=15))
    _summary(rep)
    _say(f"wrote {out}/ — briefing: {result.briefing}")


# --------------------------------------------------------------------------- environment


def _name_environment_variables(group: click.Group) -> None:
    """Name each command option's variable after the option, ``VINSTRATA_SEGMENT_OUT`` for
    ``segment --out`` (click's automatic names follow the Python parameter, ``..._OUT_DIR``).

    Options with a variable of their own (``--config``) keep it; the group's own
    options keep click's automatic ``VINSTRATA_QUIET`` and ``VINSTRATA_DEBUG``.
    """
    for command_name, command in group.commands.items():
        for param in command.params:
            if not isinstance(param, click.Option) or param.envvar is not None:
                continue
            if param.name == "help":
                continue
            option = max(param.opts, key=len).lstrip("-").replace("-", "_").upper()
            param.envvar = f"{ENV_PREFIX}_{command_name.upper()}_{option}"


_name_environment_variables(cli)


# --------------------------------------------------------------------------- entry point


def main(argv: list[str] | None = None) -> int:
    """Run the CLI; returns the exit code (0 ok, 1 internal fault, 2 bad input)."""
    args = sys.argv[1:] if argv is None else argv
    state = State()
    try:
        # options also come from VINSTRATA_<COMMAND>_<OPTION> (and --config from VINSTRATA_CONFIG)
        cli.main(args=args, prog_name="vinstrata", standalone_mode=False, obj=state,
                 auto_envvar_prefix=ENV_PREFIX)
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
        if state.debug or "--debug" in args:
            traceback.print_exc()
        else:
            click.echo(f"internal error: {exc.__class__.__name__}: {exc} "
                       "(run with --debug for the traceback)", err=True)
        return 1
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
