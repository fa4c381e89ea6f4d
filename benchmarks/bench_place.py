"""Cold `vinstrata place` of 10,000 new lots against the demo model, and of 50.

The 50 shipped new lots are the baseline of the same run: the difference is what
10,000 lots cost beyond starting up, loading the model, profiling it for the
driver cuts and rebuilding HDBSCAN's prediction data.

Target: placing 10,000 new lots under 10 s as a whole cold process.
"""

from __future__ import annotations

from cold import DEMO, demo_model, report, run_cold, vinstrata


def main() -> None:
    from vinstrata.demo import generate_demo

    work, model = demo_model("bench_place_")
    new = generate_demo(10_000, seed=2027, bad_rows=0, n_new=0).lots.drop(columns=["grade"])
    new["lot"] = [f"NEW-{i:05d}" for i in range(len(new))]
    new.to_csv(work / "new10k.csv", index=False)
    small = run_cold(vinstrata("-q", "place", DEMO / "new_lots.csv", "--model", model,
                               "--out", work / "small"))
    report("vinstrata place, 50 new lots", small)
    big = run_cold(vinstrata("-q", "place", work / "new10k.csv", "--model", model,
                             "--out", work / "big"))
    report("vinstrata place, 10,000 new lots", big)
    print(f"ratio 10,000 / 50 lots: {big.seconds / small.seconds:.2f}x; "
          f"{1000 * (big.seconds - small.seconds) / 9950:.2f} ms per extra lot")


if __name__ == "__main__":
    main()
