"""Briefing size and time at a million lots: the whole cold ``vinstrata brief`` process.

Segmenting a million lots takes too long for a benchmark, so the demo range's model
is segmented, profiled and placed once (not timed) and then tiled to ``--lots`` lots
(default 1,000,000): every frame and array of the model repeated with unique lot ids
and row numbers, the map positions jittered a little (seeded) so that the copies do
not sit on one another. Baseline of the same run: the briefing of the 6,000-lot demo
model itself. Targets: under 5 MB and 30 s for a million lots.

``--run`` measures instead the one-command run of a generated 100,000-lot range
(segmentation included; takes minutes).
"""

from __future__ import annotations

import argparse
import dataclasses
import sys
import tempfile
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
from cold import CONFIG, DEMO, demo_model, report, run_cold, vinstrata

if TYPE_CHECKING:
    from vinstrata.segment.model import StyleModel

JITTER = 0.05  # map units: small beside a style's spread on the demo map (several units)


def _tile_frame(frame: pd.DataFrame, take: np.ndarray) -> pd.DataFrame:
    return frame.iloc[take].reset_index(drop=True)


def tile_model(model: StyleModel, n_lots: int, seed: int = 0) -> StyleModel:
    """The model with its lots repeated to ``n_lots`` (unique ids, jittered map).

    Parameters
    ----------
    model : StyleModel
    n_lots : int
    seed : int
        Seed of the jitter.

    Returns
    -------
    StyleModel
    """
    from vinstrata.read.lots import USED

    n = len(model.lots)
    take = np.arange(n_lots) % n
    copy = np.arange(n_lots) // n
    rows_n = len(model.rows)
    n_copies = int(copy[-1]) + 1
    row_take = np.arange(rows_n * n_copies) % rows_n
    row_copy = np.arange(rows_n * n_copies) // rows_n
    # the last copy keeps as many used rows as it has lots (every used row is a lot)
    used = (model.rows["status"] == USED).to_numpy()
    keep = (row_copy < n_copies - 1) | (np.cumsum(used)[row_take] <= n_lots - n * (n_copies - 1))
    row_take, row_copy = row_take[keep], row_copy[keep]
    suffix = pd.Series(copy).map(lambda c: f"-t{c}").to_numpy()
    row_suffix = pd.Series(row_copy).map(lambda c: f"-t{c}").to_numpy()
    row_shift = row_copy * (int(model.rows["row"].max()) + 1)

    rows = _tile_frame(model.rows, row_take)
    rows["lot_id"] = rows["lot_id"].astype(str).to_numpy(dtype=object) + row_suffix
    rows["row"] = rows["row"].to_numpy() + row_shift
    lots = _tile_frame(model.lots, take)
    lots["lot_id"] = lots["lot_id"].astype(str).to_numpy(dtype=object) + suffix
    lots["row"] = lots["row"].to_numpy() + copy * (int(model.rows["row"].max()) + 1)
    rng = np.random.default_rng(seed)
    jitter = JITTER * rng.standard_normal((n_lots, 2))
    jitter[:n] = 0.0  # the first copy is the model itself
    map2d = model.map2d[take] + jitter.astype(model.map2d.dtype)
    lots["map_x"], lots["map_y"] = map2d[:, 0].astype(float), map2d[:, 1].astype(float)
    styles = model.styles.copy()
    counts = lots["style"].value_counts()
    styles["n_lots"] = styles["style"].map(counts).fillna(0).astype(int)
    styles["share"] = styles["n_lots"] / n_lots
    return dataclasses.replace(
        model, rows=rows, lots=lots, values=_tile_frame(model.values, take),
        flags=_tile_frame(model.flags, take), extra=_tile_frame(model.extra, row_take),
        scaled=model.scaled[take], space=model.space[take], map2d=map2d,
        clusters=model.clusters[take], memberships=model.memberships[take], styles=styles)


def _tiled(n_lots: int) -> None:
    work, model_dir = demo_model("bench_brief_")
    seg = model_dir.parent
    for args in (("profile", "--model", model_dir, "--out", seg),
                 ("place", DEMO / "new_lots.csv", "--model", model_dir, "--out", seg / "new")):
        setup = run_cold(vinstrata("-q", *args))
        if setup.code != 0:
            raise SystemExit(f"{args[0]} failed: {setup.err.strip()}")
    big = work / "big" / "model"
    # tiled in a child of its own: a child started from this process after it held the big
    # model would report this process's peak memory as its own (Linux keeps it across exec)
    tiled = run_cold([sys.executable, __file__, "--tile", model_dir, big, "--lots", n_lots])
    if tiled.code != 0:
        raise SystemExit(f"tiling failed: {tiled.err.strip()[-400:]}")
    env = {"SOURCE_DATE_EPOCH": "1796083200"}
    for name, folder in (("demo model, 6,000 lots", model_dir), (f"{n_lots:,} lots", big)):
        pdf = work / f"brief_{folder.parent.name}.pdf"
        timed = run_cold(vinstrata("-q", "brief", "--model", folder, "--profiles", seg,
                                   "--placements", seg / "new", "--out", pdf), env=env)
        report(f"vinstrata brief, {name}", timed)
        if pdf.exists():
            print(f"    briefing {pdf.stat().st_size / 1e6:.2f} MB ({pdf})")
        elif timed.code:
            print(f"    failed: {timed.err.strip()[-400:]}")


def _run_100k() -> None:
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


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--lots", type=int, default=1_000_000, help="lots of the tiled model")
    parser.add_argument("--run", action="store_true",
                        help="time the one-command run of a 100,000-lot range instead")
    parser.add_argument("--tile", nargs=2, type=Path, metavar=("MODEL", "OUT"),
                        help="only write MODEL tiled to --lots lots into OUT (used by the run)")
    args = parser.parse_args()
    if args.tile:
        from vinstrata.segment.model import load_model, save_model

        save_model(tile_model(load_model(args.tile[0]), args.lots), args.tile[1])
    elif args.run:
        _run_100k()
    else:
        _tiled(args.lots)


if __name__ == "__main__":
    main()
