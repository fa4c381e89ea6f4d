"""Segment, profile and place at 20,000, 200,000 and 1,000,000 lots: wall and peak memory.

Every step is a whole cold process (`benchmarks/cold.py`), on lots from the demo
generator (`vinstrata demo`, not timed). Per size: `segment` (the bounded fit
above `segment.fit_sample`), `profile` of that model; then new lots are placed
against the largest model with its profiles (`--profiles`), in one process and
through Dask (`--engine dask`, a LocalCluster on this machine's cores) when the
`dask` extra is installed.

Targets, on 2 cores, as ratios measured in this one run:

* `segment` of 200,000 lots within 3x the time of 20,000 lots, peak at most 4 GB;
* `place` of 1,000,000 lots through Dask within 12x the time of 100,000 lots,
  every input row in the output with its status;
* `profile` of 1,000,000 lots at most 2 GB.

Run: ``python benchmarks/bench_scale.py`` (about half an hour at the default
sizes); ``--sizes 20000,200000`` for the segment ratio alone.
"""

from __future__ import annotations

import argparse
import importlib.util
import shutil
import sys
import tempfile
from pathlib import Path

import pyarrow.parquet as pq
from cold import CONFIG, Timed, report, run_cold, vinstrata

PLACE_SIZES = (100_000, 1_000_000)


def make_range(folder: Path, lots: int, new: int, seed: int) -> Path:
    """Demo lots (and new lots) in ``folder``; not timed."""
    made = run_cold(vinstrata("-q", "demo", "--out", folder, "--lots", lots, "--new", new,
                              "--bad-rows", 0, "--seed", seed))
    if made.code != 0:
        raise SystemExit(f"the demo generator failed: {made.err.strip()}")
    return folder


def head_rows(source: Path, target: Path, rows: int) -> Path:
    """The header and the first ``rows`` lots of a CSV file."""
    with source.open() as inp, target.open("w") as out:
        for i, line in enumerate(inp):
            if i > rows:
                break
            out.write(line)
    return target


def placed_rows(out: Path) -> int:
    """Rows in a place output: the Parquet dataset ``placements/`` or ``placements.csv``."""
    dataset = out / "placements"
    if dataset.is_dir():
        return sum(pq.ParquetFile(p).metadata.num_rows for p in sorted(dataset.glob("*.parquet")))
    with (out / "placements.csv").open() as handle:
        return sum(1 for _ in handle) - 1


def step(name: str, args: list[object]) -> Timed:
    timed = run_cold(vinstrata(*args))
    report(name, timed)
    if timed.code != 0:
        raise SystemExit(f"{name} failed: {timed.err.strip()[-400:]}")
    return timed


def ratio(label: str, value: float, target: str) -> None:
    print(f"  {label:<56} {value:7.2f}   target {target}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="20000,200000,1000000",
                        help="comma-separated range sizes to segment and profile")
    parser.add_argument("--work", default="", help="folder to keep the runs in (else a temp)")
    parser.add_argument("--reuse", action="store_true",
                        help="reuse the demo ranges and models already in --work")
    args = parser.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    work = Path(args.work or tempfile.mkdtemp(prefix="vinstrata-scale-"))
    work.mkdir(parents=True, exist_ok=True)
    segment: dict[int, Timed] = {}
    profile: dict[int, Timed] = {}
    for n in sizes:
        new = max(PLACE_SIZES) if n == max(sizes) else 0
        if args.reuse and (work / f"r{n}" / "model" / "model.json").exists():
            print(f"segment {n:>9,} lots: reused from {work / f'r{n}'}")
            continue
        data = make_range(work / f"d{n}", n, new, seed=5)
        segment[n] = step(f"segment {n:>9,} lots", ["-q", "segment", data / "lots.csv",
                                                     "--config", CONFIG, "--out", work / f"r{n}"])
    # profiles before placing: place reads the drivers from the model's folder
    for n in sizes:
        if args.reuse and (work / f"r{n}" / "profile_manifest.json").exists():
            print(f"profile {n:>9,} lots: reused from {work / f'r{n}'}")
            continue
        profile[n] = step(f"profile {n:>9,} lots", ["-q", "profile", "--model",
                                                    work / f"r{n}" / "model", "--out",
                                                    work / f"r{n}"])
    model = work / f"r{max(sizes)}" / "model"
    new_lots = work / f"d{max(sizes)}" / "new_lots.csv"
    dask = importlib.util.find_spec("distributed") is not None
    place: dict[tuple[str, int], Timed] = {}
    if new_lots.exists():
        for m in PLACE_SIZES:
            part = head_rows(new_lots, work / f"new_{m}.csv", m)
            engines = [("single", [])] + ([("dask", ["--engine", "dask"])] if dask else [])
            for engine, extra in engines:
                if engine == "single" and m > min(PLACE_SIZES):
                    continue  # one process at 1M lots adds half an hour and no ratio
                out = work / f"p_{engine}_{m}"
                shutil.rmtree(out, ignore_errors=True)
                place[engine, m] = step(f"place {m:>9,} lots ({engine})",
                                        ["-q", "place", part, "--model", model, "--out", out,
                                         "--profiles", model.parent, *extra])
                rows = placed_rows(out)
                print(f"  {rows:,} of {m:,} input rows in the output")
    print("\nratios")
    if 20_000 in segment and 200_000 in segment:
        ratio("segment time 200k / 20k", segment[200_000].seconds / segment[20_000].seconds,
              "<= 3")
        ratio("segment peak 200k (GB)", segment[200_000].peak_mb / 1024, "<= 4")
    if ("dask", 100_000) in place and ("dask", 1_000_000) in place:
        ratio("place (Dask) time 1M / 100k",
              place["dask", 1_000_000].seconds / place["dask", 100_000].seconds, "<= 12")
    if 1_000_000 in profile:
        ratio("profile peak 1M (GB)", profile[1_000_000].peak_mb / 1024, "<= 2")
    if not dask:
        print("  (the dask extra is not installed: pip install 'vinstrata[dask]')",
              file=sys.stderr)
    print(f"runs kept in {work}")


if __name__ == "__main__":
    main()
