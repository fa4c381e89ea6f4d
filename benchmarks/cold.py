"""Timing whole cold processes: wall seconds and peak resident memory of one child."""

from __future__ import annotations

import os
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_data"
CONFIG = ROOT / "configs" / "demo.toml"


@dataclass(frozen=True)
class Timed:
    seconds: float
    peak_mb: float
    out: str
    err: str
    code: int


def run_cold(args: list[str], env: dict[str, str] | None = None, cwd: Path | None = None
             ) -> Timed:
    """Run ``args`` as a fresh process; its own wall time and peak RSS (from os.wait4)."""
    import tempfile

    merged = {**os.environ, **(env or {})}
    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        start = time.perf_counter()
        child = subprocess.Popen([str(a) for a in args], stdout=out, stderr=err, env=merged,
                                 cwd=cwd)
        _, status, usage = os.wait4(child.pid, 0)
        seconds = time.perf_counter() - start
        child.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0)
        err.seek(0)
        text_out, text_err = out.read().decode(), err.read().decode()
    return Timed(seconds, usage.ru_maxrss / 1024, text_out, text_err, child.returncode)


def vinstrata(*args: object) -> list[str]:
    """The command line of the installed CLI, run with this interpreter."""
    return [sys.executable, "-m", "vinstrata", *[str(a) for a in args]]


def demo_model(prefix: str) -> tuple[Path, Path]:
    """A fresh work folder and the demo range's model segmented into it (not timed)."""
    import tempfile

    work = Path(tempfile.mkdtemp(prefix=prefix))
    setup = run_cold(vinstrata("-q", "segment", DEMO / "lots.csv", "--config", CONFIG,
                               "--out", work / "seg"))
    if setup.code != 0:
        raise SystemExit(f"segmenting the demo range failed: {setup.err.strip()}")
    return work, work / "seg" / "model"


def report(name: str, timed: Timed) -> None:
    status = "" if timed.code == 0 else f"  (exit code {timed.code}: {timed.err.strip()[-200:]})"
    print(f"{name:<48} {timed.seconds:7.2f} s  peak {timed.peak_mb:7.0f} MB{status}")
