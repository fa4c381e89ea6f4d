"""Briefing size and time for a range of 100,000 lots (scatter layers rasterised).

Baseline of the same run: the briefing of the 6,000-lot demo range. Target
: under 5 MB for 100,000 lots.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

from cold import CONFIG, DEMO, report, run_cold, vinstrata


def main() -> None:
    from vinstrata.demo import generate_demo, write_demo

    work = Path(tempfile.mkdtemp(prefix="bench_brief_"))
    write_demo(work / "big", generate_demo(100_000, seed=100, n_new=50))
    for name, folder, lots, new in (
            ("demo range, 6,000 lots", "lots_6000", DEMO / "lots.csv", DEMO / "new_lots.csv"),
            ("100,000 lots", "lots_100000", work / "big" / "lots.csv",
             work / "big" / "new_lots.csv")):
        out = work / folder
        timed = run_cold(vinstrata("run", lots, "--new", new, "--config", CONFIG, "--out", out))
        report(f"vinstrata run, {name}", timed)
        took = [line for line in timed.err.splitlines() if line.startswith("took ")]
        print(f"    {took[0] if took else ''}")
        pdf = out / "briefing.pdf"
        if pdf.exists():
            print(f"    briefing {pdf.stat().st_size / 1e6:.2f} MB")


if __name__ == "__main__":
    main()
