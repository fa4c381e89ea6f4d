"""Progress lines and warnings on stderr, silent by default for library use."""

from __future__ import annotations

import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import TextIO


@dataclass
class Reporter:
    """Prints one line per stage and collects warnings for a closing summary.

    ``quiet`` silences the stage lines; warnings are always kept, and printed
    unless ``quiet`` too (the CLI repeats them in its summary).
    """

    quiet: bool = True
    stream: TextIO = field(default_factory=lambda: sys.stderr)
    warnings: list[str] = field(default_factory=list)
    timings: list[tuple[str, float]] = field(default_factory=list)

    def line(self, text: str) -> None:
        if not self.quiet:
            print(text, file=self.stream, flush=True)

    def warn(self, text: str) -> None:
        self.warnings.append(text)
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
        """A one-line bar redrawn in place, for loops that take a few seconds."""
        if self.quiet or total <= 0:
            return
        width = 24
        filled = int(width * done / total)
        end = "\n" if done >= total else ""
        self.stream.write(f"\r{label} [{'#' * filled}{'.' * (width - filled)}] {done}/{total}{end}")
        self.stream.flush()

