"""Driver flags of held-out demo lots against the generator's planted truth.

Segments the shipped demo range (``demo_data/lots.csv``, ``configs/demo.toml``),
draws a fresh held-out range from the same generator with another seed
(``vinstrata demo --out held --lots 3000 --seed 99``), places it with
``vinstrata place`` and prints, over the held-out lots of real styles:

* the share of top-band lots that carry any driver flag (target: at most 15 %);
* the share of bottom-band lots carrying a flag that names a planted driver of
  their style (target: at least 60 %);
* of all driver flags, the share naming a planted driver of the lot's style
  (target: at least 85 %);

and, for comparison, how often the atypical mark and the off-style flags fire.
Bands follow the demo config's global cuts (bottom below 14, top 16 and above).

Run: ``python benchmarks/bench_flags.py [--seed 99] [--lots 3000]``.
"""

from __future__ import annotations

import argparse
import tempfile
from pathlib import Path

import pandas as pd
from cold import CONFIG, DEMO, run_cold, vinstrata

DRIVER_TOKENS = ("below_cut:", "above_cut:")
BOTTOM_BELOW, TOP_FROM = 14.0, 16.0  # the demo config's [bands] cuts


def flag_rates(placements: pd.DataFrame, lots: pd.DataFrame, truth_lots: pd.DataFrame,
               truth_drivers: pd.DataFrame) -> dict[str, float]:
    """The three driver-flag rates of placed held-out lots against the planted truth.

    Parameters
    ----------
    placements : DataFrame
        ``placements.csv`` of the held-out lots (``lot_id``, ``status``, ``flags``).
    lots : DataFrame
        The held-out ``lots.csv`` (``lot``, ``grade``).
    truth_lots, truth_drivers : DataFrame
        The generator's ``truth_lots.csv`` and ``truth_drivers.csv``.

    Returns
    -------
    dict
        ``top_flagged``, ``bottom_named``, ``precision`` (shares) and the counts.
    """
    used = placements[placements["status"] == "used"].drop_duplicates("lot_id")
    grade = pd.to_numeric(lots.drop_duplicates("lot").set_index("lot")["grade"], "coerce")
    style = truth_lots.set_index("lot")["style"]
    frame = pd.DataFrame({"lot": used["lot_id"].astype(str),
                          "flags": used["flags"].fillna("").astype(str)})
    frame["grade"] = frame["lot"].map(grade)
    frame["style"] = frame["lot"].map(style)
    frame = frame[frame["style"].notna() & (frame["style"] != "none")]
    planted = truth_drivers[truth_drivers["role"] == "direct"]
    planted = set(zip(planted["style"], planted["analyte"]))
    named = [[t.split(":", 1)[1] for t in f.split(";") if t.startswith(DRIVER_TOKENS)]
             for f in frame["flags"]]
    hits = [[(s, a) in planted for a in mine] for s, mine in zip(frame["style"], named)]
    top = (frame["grade"] >= TOP_FROM).to_numpy()
    bottom = (frame["grade"] < BOTTOM_BELOW).to_numpy()
    any_flag = pd.Series([bool(m) for m in named]).to_numpy()
    any_hit = pd.Series([any(h) for h in hits]).to_numpy()
    n_flags = sum(len(h) for h in hits)
    return {
        "top_flagged": float(any_flag[top].mean()), "n_top": int(top.sum()),
        "bottom_named": float(any_hit[bottom].mean()), "n_bottom": int(bottom.sum()),
        "precision": sum(sum(h) for h in hits) / n_flags if n_flags else float("nan"),
        "n_flags": n_flags,
        "atypical": float(frame["flags"].str.contains("atypical|fits_no_style").mean()),
        "off_style": float(frame["flags"].str.contains("off_style:", regex=False).mean()),
        "n_lots": len(frame),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seed", type=int, default=99)
    parser.add_argument("--lots", type=int, default=3000)
    args = parser.parse_args()
    work = Path(tempfile.mkdtemp(prefix="bench_flags_"))
    steps = [
        vinstrata("-q", "segment", DEMO / "lots.csv", "--config", CONFIG, "--out", work / "fit"),
        vinstrata("-q", "demo", "--out", work / "held", "--lots", args.lots,
                  "--seed", args.seed),
        vinstrata("-q", "place", work / "held" / "lots.csv", "--model", work / "fit" / "model",
                  "--out", work / "placed"),
    ]
    for step in steps:
        done = run_cold(step)
        if done.code != 0:
            raise SystemExit(f"{' '.join(step[2:4])} failed: {done.err.strip()[-300:]}")
    held = work / "held"
    rates = flag_rates(pd.read_csv(work / "placed" / "placements.csv", keep_default_na=False),
                       pd.read_csv(held / "lots.csv", dtype=str, keep_default_na=False),
                       pd.read_csv(held / "truth_lots.csv", keep_default_na=False),
                       pd.read_csv(held / "truth_drivers.csv", keep_default_na=False))
    print(f"held-out demo lots: {args.lots} drawn with seed {args.seed}, "
          f"{rates['n_lots']} of real styles placed (in {work})")
    print(f"top-band lots with any driver flag:         {rates['top_flagged']:6.1%} "
          f"of {rates['n_top']:>5}   (target at most 15 %)")
    print(f"bottom-band lots naming a planted driver:   {rates['bottom_named']:6.1%} "
          f"of {rates['n_bottom']:>5}   (target at least 60 %)")
    print(f"driver flags naming a planted driver:       {rates['precision']:6.1%} "
          f"of {rates['n_flags']:>5}   (target at least 85 %)")
    print(f"lots atypical or fitting no style:          {rates['atypical']:6.1%}")
    print(f"lots with an off-style analyte:             {rates['off_style']:6.1%}")


if __name__ == "__main__":
    main()
