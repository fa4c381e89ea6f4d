"""Cold `vinstrata profile` (B = 2000) against a straightforward bootstrap loop.

The baseline, in the same run and also as a fresh process: for every style and
analyte, B resamples of each band drawn one by one, Cliff's delta of each
resample from scipy's Mann-Whitney U. vinstrata draws the resamples once per
style as multiplicities and gets every analyte's B deltas from cumulative sums.

Target: profiling the demo range with B = 2000 under 5 s on 2 cores.
"""

from __future__ import annotations

import sys

from cold import demo_model, report, run_cold, vinstrata

LOOP = """
import sys, numpy as np
from scipy import stats
from vinstrata.segment.model import load_model
from vinstrata.profile.bands import assign_bands
model = load_model(sys.argv[1]); b = int(sys.argv[2])
lots = model.lots; rng = np.random.default_rng(0)
bands = assign_bands(lots["grade"].to_numpy(float), lots["style"].to_numpy(object),
                     model.config.bands)
top, bottom = len(model.config.bands.labels) - 1, 0
groups = [lots["style"].to_numpy() == s for s in model.style_ids] + [np.ones(len(lots), bool)]
for mask in groups:
    for name in model.values.columns:
        x = model.values[name].to_numpy(float)
        t = x[mask & (bands == top)]; t = t[np.isfinite(t)]
        u = x[mask & (bands == bottom)]; u = u[np.isfinite(u)]
        if len(t) < 10 or len(u) < 10:
            continue
        deltas = [2 * stats.mannwhitneyu(rng.choice(t, t.size), rng.choice(u, u.size)).statistic
                  / (t.size * u.size) - 1 for _ in range(b)]
        np.quantile(deltas, [0.025, 0.975])
"""


def main() -> None:
    work, model = demo_model("bench_profile_")
    ours = run_cold(vinstrata("-q", "profile", "--model", model, "--out", work / "prof"))
    report("vinstrata profile, B = 2000", ours)
    script = work / "loop.py"
    script.write_text(LOOP)
    loop = run_cold([sys.executable, script, model, 2000])
    report("straightforward loop over resamples, B = 2000", loop)
    floor = run_cold([sys.executable, "-c", "import vinstrata.profile, vinstrata.segment.model"])
    report("python start and imports only", floor)
    print(f"ratio loop / vinstrata: {loop.seconds / ours.seconds:.1f}x; bootstrap work itself "
          f"{(loop.seconds - floor.seconds) / max(ours.seconds - floor.seconds, 1e-3):.0f}x")


if __name__ == "__main__":
    main()
