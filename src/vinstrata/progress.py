"""Progress lines, bars and warnings: on stderr for the command line, through
:mod:`warnings` and :mod:`logging` for library use.

A library function given no reporter makes its own, ``Reporter()``: it prints
nothing, passes each warning to :func:`warnings.warn` as a
:class:`~vinstrata.errors.VinstrataWarning` and each stage line to the
``vinstrata`` logger at INFO. The command line builds
:meth:`Reporter.command_line`, which prints to stderr and forwards nothing (it
repeats its warnings in a closing summary instead).
"""

from __future__ import annotations

import logging
import os
import sys
import time
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import TextIO

from vinstrata.errors import VinstrataWarning

LOGGER = logging.getLogger("vinstrata")
LOGGER.addHandler(logging.NullHandler())

_PACKAGE = os.path.dirname(os.path.abspath(__file__)) + os.sep


def _outside_the_package() -> int:
    """The ``stacklevel`` of the first caller outside vinstrata, counted from :meth:`Reporter.warn`.

    The warning then names the user's line that called the engine, and Python's
    once-per-location filter counts it there.
    """
    frame = sys._getframe(2)  # the caller of Reporter.warn
    level = 2
    while frame is not None and frame.f_code.co_filename.startswith(_PACKAGE):
        frame = frame.f_back
        level += 1
    return level


def _is_terminal(stream: TextIO) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):  # no isatty, or a closed stream
        return False


@dataclass
class Reporter:
    """Stage lines, bars for long loops, and warnings kept for a closing summary.

    Parameters
    ----------
    quiet : bool
        No lines, bars or warnings on ``stream``; warnings are kept all the same.
    stream : file
        Where lines, bars and warnings are printed (stderr).
    forward : bool
        Pass each warning to :func:`warnings.warn` (as a
        :class:`~vinstrata.errors.VinstrataWarning`) and each line to the
        ``vinstrata`` logger at INFO: what library code does with the default
        ``Reporter()``. The command line's reporter forwards nothing.
    """

    quiet: bool = True
    stream: TextIO = field(default_factory=lambda: sys.stderr)
    forward: bool = True
    warnings: list[str] = field(default_factory=list)
    timings: list[tuple[str, float]] = field(default_factory=list)

    @classmethod
    def command_line(cls, quiet: bool = False) -> Reporter:
        """The reporter of a ``vinstrata`` command: stderr only, nothing forwarded.

        Parameters
        ----------
        quiet : bool
            ``--quiet``: no lines, bars or warnings on stderr.

        Returns
        -------
        Reporter
        """
        return cls(quiet=quiet, forward=False)

    def line(self, text: str) -> None:
        """A progress line: printed unless ``quiet``, logged at INFO when forwarding."""
        if self.forward:
            LOGGER.info(text.strip())
        if not self.quiet:
            print(text, file=self.stream, flush=True)

    def warn(self, text: str) -> None:
        """A warning: kept, printed unless ``quiet``, raised as a Python warning when forwarding."""
        self.warnings.append(text)
        if self.forward:
            warnings.warn(text, VinstrataWarning, stacklevel=_outside_the_package())
        if not self.quiet:
            print(f"warning: {text}", file=self.stream, flush=True)

    @contextmanager
    def stage(self, name: str) -> Iterator[None]:
        """A stage: its line is printed when it ends, so that a file refused while it is
        read leaves only its one error line on stderr; its seconds go to :meth:`timing`."""
        start = time.perf_counter()
        yield
        took = time.perf_counter() - start
        self.timings.append((name.split(":")[0], took))
        self.line(f"{name} ... done ({took:.1f} s)")

    def timing(self) -> str:
        """One line of the seconds each stage took, for the closing summary."""
        return "took " + ", ".join(f"{name} {seconds:.1f} s" for name, seconds in self.timings)

    def bar(self, done: int, total: int, label: str) -> None:
        """A one-line bar redrawn in place, for loops that take a few seconds.

        Drawn only on a terminal: in a redirected log the carriage-return redraws
        would pile up on one line, and the stage line says the same when it ends.
        """
        if self.quiet or total <= 0 or not _is_terminal(self.stream):
            return
        width = 24
        filled = int(width * done / total)
        end = "\n" if done >= total else ""
        self.stream.write(f"\r{label} [{'#' * filled}{'.' * (width - filled)}] {done}/{total}{end}")
        self.stream.flush()
