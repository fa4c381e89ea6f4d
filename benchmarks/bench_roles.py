"""Roles of the drivers (direct, indirect, unclear) against the generator's planted truth.

Draws fresh demo ranges (``generate_demo(n_lots, seed)``) whose chemistry moves
together inside each style as in wine, profiles each under its planted styles
(so that the segmentation does not enter the figures) and prints, over all
seeds and trusted styles:

* planted direct drivers found as drivers with their sign and ``role = direct``
  (target: at least 90 %);
* passengers (planted ``indirect``) that come out as drivers, and the share of
  them marked ``indirect`` with ``moves_with`` naming the driver they ride on
  (target: at least 80 %);
* the share of drivers found that are no-effect analytes (target: at most the
  FDR, 5 %, give or take chance).

Run: ``python benchmarks/bench_roles.py [--seeds 101 102 103 104 105] [--lots 6000]``.
"""

from __future__ import annotations

import argparse
import dataclasses
import time

import numpy as np
import pandas as pd

from vinstrata.config import packaged_config
from vinstrata.demo import generate_demo, planted_profiles


def role_rates(rows: pd.DataFrame) -> dict[str, float]:
    """The three role rates of one profiled range against its planted truth.

    Parameters
    ----------
    rows : DataFrame
        :func:`vinstrata.demo.planted_profiles`: ``drivers.csv`` of the range profiled
        under its planted styles, with the planted truth (``planted``, ``sign``,
        ``rides_on``).

    Returns
    -------
    dict
        Counts: ``direct`` / ``direct_ok``, ``passenger_drivers`` / ``passenger_ok``,
        ``drivers`` / ``false``.
    """
    rows = rows[rows["trusted"].astype(bool) & rows["cliffs_delta"].notna()]
    found = rows["is_driver"].astype(bool)
    direct = rows[rows["planted"] == "direct"]
    direct_ok = (direct["is_driver"].astype(bool) & (np.sign(direct["cliffs_delta"])
                 == direct["sign"]) & (direct["role"] == "direct"))
    passengers = rows[(rows["planted"] == "indirect") & found]
    passenger_ok = ((passengers["role"] == "indirect")
                    & (passengers["moves_with"] == passengers["rides_on"]))
    return {"direct": len(direct), "direct_ok": int(direct_ok.sum()),
            "passenger_drivers": len(passengers), "passenger_ok": int(passenger_ok.sum()),
            "drivers": int(found.sum()), "false": int((found & (rows["planted"] == "no_effect"))
                                                      .sum())}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, nargs="+", default=[101, 102, 103, 104, 105])
    parser.add_argument("--lots", type=int, default=6000)
    parser.add_argument("--bootstrap", type=int, default=1000)
    args = parser.parse_args()
    config = packaged_config("demo")
    config = dataclasses.replace(config, profile=dataclasses.replace(
        config.profile, bootstrap=args.bootstrap))
    total: dict[str, int] = {}
    start = time.perf_counter()
    misses = []
    for seed in args.seeds:
        merged = planted_profiles(generate_demo(args.lots, seed=seed, bad_rows=0, n_new=0),
                                  config)
        rates = role_rates(merged)
        for key, value in rates.items():
            total[key] = total.get(key, 0) + value
        print(f"seed {seed}: direct {rates['direct_ok']}/{rates['direct']}, passengers "
              f"{rates['passenger_ok']}/{rates['passenger_drivers']}, no-effect drivers "
              f"{rates['false']}/{rates['drivers']}")
        bad = merged[merged["is_driver"].astype(bool) & (
            ((merged["planted"] == "direct") & (merged["role"] != "direct"))
            | ((merged["planted"] == "indirect") & ((merged["role"] != "indirect")
                                                    | (merged["moves_with"]
                                                       != merged["rides_on"]))))]
        misses += [f"  seed {seed} {r.style} {r.analyte}: planted {r.planted}"
                   f"{' on ' + r.rides_on if r.rides_on else ''}, found {r.role}"
                   f"{' with ' + r.moves_with if r.moves_with else ''} "
                   f"(partial {r.partial_rho:+.3f} [{r.partial_ci_low:+.3f}, "
                   f"{r.partial_ci_high:+.3f}])" for r in bad.itertuples()]
    print(f"{len(args.seeds)} seeds of {args.lots} lots, bootstrap {args.bootstrap}, "
          f"{time.perf_counter() - start:.0f} s")
    print(f"planted direct drivers found with sign and role direct: "
          f"{total['direct_ok'] / total['direct']:6.1%} of {total['direct']} (target >= 90 %)")
    if total["passenger_drivers"]:
        print(f"passengers showing a marginal effect marked indirect, naming their driver: "
              f"{total['passenger_ok'] / total['passenger_drivers']:6.1%} of "
              f"{total['passenger_drivers']} (target >= 80 %)")
    print(f"drivers found that are no-effect analytes: "
          f"{total['false'] / max(total['drivers'], 1):6.1%} of {total['drivers']} "
          f"(target at most the FDR, 5 %)")
    if misses:
        print("misses:")
        print("\n".join(misses))


if __name__ == "__main__":
    main()
