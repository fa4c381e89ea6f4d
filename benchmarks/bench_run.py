"""Cold `vinstrata run` on the demo range and its new lots, stage by stage.

Baseline of the same run: a fresh process that only starts Python and imports
the libraries the run needs (the floor no run can go below).

Target: a cold run within 25 s on a 2-core machine.
"""

from __future__ import annotations

import re
import sys
import tempfile
from pathlib import Path

from cold import report, run_cold, vinstrata


def main() -> None:
    work = Path(tempfile.mkdtemp(prefix="bench_run_"))
    run = run_cold(vinstrata("run"), cwd=work)
    report("vinstrata run (demo range + 50 new lots)", run)
    took = re.search(r"^took (.*)$", run.err, re.M)
    for part in (took.group(1).split(", ") if took else []):
        name, seconds = part.rsplit(" ", 2)[0], part.rsplit(" ", 2)[1]
        print(f"    {name:<20} {float(seconds):6.1f} s")
    floor = run_cold([sys.executable, "-c", "import vinstrata.cli, umap, hdbscan, sklearn, "
                      "scipy.stats, pandas, matplotlib.backends.backend_pdf"])
    report("python start and library imports only", floor)
    print(f"ratio run / imports: {run.seconds / floor.seconds:.1f}x")
    print(f"outputs in {work}")


if __name__ == "__main__":
    main()
