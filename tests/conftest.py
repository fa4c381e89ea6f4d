"""Shared fixtures: the shipped demo range, segmented and profiled once per session."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

from vinstrata import cli
from vinstrata.config import packaged_config
from vinstrata.profile import profile_styles
from vinstrata.read.validate import load_lots
from vinstrata.segment import fit_styles
from vinstrata.segment.model import save_model

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_data"


class Result:
    """What one CLI call printed and returned."""

    def __init__(self, code: int, out: str, err: str) -> None:
        self.code, self.out, self.err = code, out, err

    def __repr__(self) -> str:  # shown by pytest when an assertion fails
        return f"Result(code={self.code}, out={self.out[-400:]!r}, err={self.err[-400:]!r})"


@pytest.fixture
def run_cli(capsys: pytest.CaptureFixture[str]):
    """Run ``vinstrata ARGS`` in this process; returns a :class:`Result`."""

    def call(*args: str) -> Result:
        capsys.readouterr()
        code = cli.main([str(a) for a in args])
        captured = capsys.readouterr()
        return Result(code, captured.out, captured.err)

    return call


@pytest.fixture(scope="session")
def demo_config():
    return packaged_config("demo")


@pytest.fixture(scope="session")
def demo_table(demo_config):
    return load_lots(str(DEMO / "lots.csv"), demo_config)


@pytest.fixture(scope="session")
def demo_model(demo_table, demo_config):
    return fit_styles(demo_table, demo_config)


@pytest.fixture(scope="session")
def demo_model_dir(demo_model, tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo_model") / "model"
    save_model(demo_model, folder)
    return folder


@pytest.fixture(scope="session")
def demo_profiles(demo_model):
    return profile_styles(demo_model)


def pytest_report_header() -> str:
    return f"vinstrata tests on Python {sys.version.split()[0]}"
