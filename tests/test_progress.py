"""Progress and warnings: Python warnings and logging for library use, stderr for the CLI,
bars only on a terminal."""

from __future__ import annotations

import dataclasses
import io
import logging
import warnings
from pathlib import Path

import pytest

import vinstrata
from vinstrata.config import packaged_config, parse_config
from vinstrata.demo import generate_demo, write_demo
from vinstrata.errors import VinstrataWarning
from vinstrata.progress import Reporter
from vinstrata.read.validate import load_lots
from vinstrata.segment.fit import fit_styles

# five rows, two of them rejected: a repeated lot id and a cell that is not a number
LOTS = ("lot,grade,alcohol,ph\nT-001,15,12.5,3.4\nT-002,14,13.0,3.5\nT-002,16,13.1,3.5\n"
        "T-003,15,twelve,3.3\nT-004,13,12.9,3.6\n")
CONFIG = parse_config({"columns": {"lot_id": "lot", "grade": "grade",
                                   "analytes": ["alcohol", "ph"]}}, "test.toml")
# a small range, fitted in about a second: few lots, few epochs, one cluster size
FAST_SEGMENT = {"min_style_lots": 5000, "epochs": 30, "sweep": (0.05,)}


class Terminal(io.StringIO):
    """A stream that says it is a terminal."""

    def isatty(self) -> bool:
        return True


def _python_warnings(call) -> list[warnings.WarningMessage]:
    """The vinstrata warnings raised through Python's :mod:`warnings` while ``call`` runs."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        call()
    return [w for w in caught if issubclass(w.category, VinstrataWarning)]


@pytest.fixture(scope="module")
def small_range(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("small_range")
    return write_demo(folder, generate_demo(n_lots=400, bad_rows=3, n_new=5))["lots"]


# --------------------------------------------------------------------------- library use


def test_the_warning_class_is_exported_at_the_top():
    assert vinstrata.VinstrataWarning is VinstrataWarning
    assert issubclass(VinstrataWarning, UserWarning)


def test_load_lots_without_a_reporter_warns_of_rejected_rows(tmp_path):
    path = tmp_path / "lots.csv"
    path.write_text(LOTS, encoding="utf-8")
    with pytest.warns(VinstrataWarning, match=r"lots\.csv: 2 of 5 rows rejected "
                      r"\(1 duplicate_lot_id, 1 non_numeric\); see ") as caught:
        table = load_lots(str(path), CONFIG)
    assert table.n_rows == 5
    # the warning names the caller's line, not the engine's
    assert Path(caught[0].filename).resolve() == Path(__file__).resolve()


def test_load_lots_with_a_reporter_gives_it_the_warning(tmp_path):
    path = tmp_path / "lots.csv"
    path.write_text(LOTS, encoding="utf-8")
    rep = Reporter.command_line(quiet=True)
    assert not _python_warnings(lambda: load_lots(str(path), CONFIG, reporter=rep))
    assert len(rep.warnings) == 1 and "2 of 5 rows rejected" in rep.warnings[0]


def test_clean_lots_raise_no_warning(tmp_path):
    path = tmp_path / "lots.csv"
    path.write_text("lot,grade,alcohol,ph\nA,15,12.5,3.4\nB,14,13.0,3.5\n", encoding="utf-8")
    assert not _python_warnings(lambda: load_lots(str(path), CONFIG))


def test_fit_styles_without_a_reporter_warns_of_untrusted_styles(small_range):
    config = packaged_config("demo")
    config = dataclasses.replace(config, segment=dataclasses.replace(config.segment,
                                                                     **FAST_SEGMENT))
    table = load_lots(str(small_range), config, reporter=Reporter.command_line(quiet=True))
    with pytest.warns(VinstrataWarning) as caught:
        model = fit_styles(table, config)
    untrusted = [str(w.message) for w in caught if "is untrusted" in str(w.message)]
    assert len(untrusted) == len(model.styles) > 0
    assert all("lots (fewer than 5000)" in text for text in untrusted)


def test_library_reporter_logs_lines_and_prints_nothing(caplog):
    stream = io.StringIO()
    rep = Reporter(stream=stream)
    with caplog.at_level(logging.INFO, logger="vinstrata"):
        with rep.stage("check: read and validate"):
            rep.line("  analytes found: alcohol, ph")
        with pytest.warns(VinstrataWarning, match="three lots"):
            rep.warn("three lots")
    assert [r.name for r in caplog.records] == ["vinstrata", "vinstrata"]
    assert caplog.records[0].message == "analytes found: alcohol, ph"
    assert caplog.records[1].message.startswith("check: read and validate ... done")
    assert all(r.levelno == logging.INFO for r in caplog.records)
    assert stream.getvalue() == ""
    assert rep.warnings == ["three lots"]


# --------------------------------------------------------------------------- command line


def test_command_line_reporter_prints_and_forwards_nothing(caplog):
    stream = io.StringIO()
    rep = dataclasses.replace(Reporter.command_line(), stream=stream)
    with caplog.at_level(logging.INFO, logger="vinstrata"):
        assert not _python_warnings(lambda: rep.warn("three lots"))
        rep.line("a stage ... done")
    assert not caplog.records
    assert stream.getvalue() == "warning: three lots\na stage ... done\n"


def test_cli_prints_warnings_and_raises_no_python_warning(tmp_path, run_cli, small_range):
    config = tmp_path / "fast.toml"
    segment = "".join(f"{key} = {list(value) if isinstance(value, tuple) else value}\n"
                      for key, value in FAST_SEGMENT.items())
    demo = (Path(vinstrata.__file__).parent / "configs" / "demo.toml").read_text("utf-8")
    config.write_text(demo + "\n[segment]\n" + segment, encoding="utf-8")
    results = []
    caught = _python_warnings(lambda: results.append(
        run_cli("segment", small_range, "--config", config, "--out", tmp_path / "out")))
    result = results[0]
    assert result.code == 0, result
    assert not caught, [str(w.message) for w in caught]
    assert "warning: lots.csv: 3 of 403 rows rejected" in result.err
    assert "see row_status.csv" in result.err
    assert "is untrusted" in result.err


# --------------------------------------------------------------------------- bars


def test_bar_is_not_drawn_on_a_redirected_stream():
    stream = io.StringIO()
    rep = Reporter(quiet=False, stream=stream, forward=False)
    with rep.stage("segment"):
        for i in range(3):
            rep.bar(i + 1, 3, "  cluster-size sweep")
    assert "\r" not in stream.getvalue()
    assert "sweep" not in stream.getvalue()
    assert stream.getvalue().startswith("segment ... done")


def test_bar_is_drawn_on_a_terminal():
    stream = Terminal()
    rep = Reporter(quiet=False, stream=stream, forward=False)
    for i in range(3):
        rep.bar(i + 1, 3, "  bootstrap")
    text = stream.getvalue()
    assert text.count("\r") == 3
    assert text.endswith("  bootstrap [########################] 3/3\n")


def test_quiet_draws_no_bar_even_on_a_terminal():
    stream = Terminal()
    Reporter(quiet=True, stream=stream).bar(1, 2, "  bootstrap")
    assert stream.getvalue() == ""
