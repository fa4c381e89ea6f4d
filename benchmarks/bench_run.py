"""Cold `vinstrata run` on the demo range and its new lots, stage by stage.

Baseline of the same run: a fresh process that only starts Python and imports
the libraries the run needs (the floor no run can go below).

Target (issue 6): a cold run within 25 s on a 2-core machine.
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
    for name, seconds in re.findall(r"^(.*) \.\.\. done \(([\d.]+) s\)$", run.err, re.M):
        print(f"    {name:<60} {float(seconds):6.1f} s")
    floor = run_cold([sys.executable, "-c", "import vinstrata.cli, umap, hdbscan, sklearn, "
                      "scipy.stats, pandas, matplotlib.backends.backend_pdf"])
    report("python start and library imports only", floor)
    print(f"ratio run / imports: {run.seconds / floor.seconds:.1f}x")
    print(f"outputs in {work}")


if __name__ == "__main__":
    main()
