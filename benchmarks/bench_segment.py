"""Cold `vinstrata segment` of the demo range against the straightforward pipeline.

The straightforward way, in the same run: the same libraries at their defaults,
as a notebook would use them: robust scaling, umap-learn's UMAP (its own
approximate nearest-neighbour search) to 8 components with min_dist 0, HDBSCAN
on the result with the cluster size vinstrata chose, and a 2-D UMAP for the map.
Both run as fresh processes, first with empty numba caches (the first run after
installing), then again with the caches the first run left.

Target: cold segment within 10 s on 2 cores and at least 3x faster than
the straightforward pipeline, with the same styles.
"""

from __future__ import annotations

import json
import sys
import tempfile
from pathlib import Path

import pandas as pd
from cold import CONFIG, DEMO, report, run_cold, vinstrata

STRAIGHT = """
import sys, json, numpy as np, pandas as pd, umap, hdbscan
from sklearn.preprocessing import RobustScaler
from sklearn.impute import SimpleImputer
lots, out = sys.argv[1], sys.argv[2]
mcs, ms, seed = int(sys.argv[3]), int(sys.argv[4]), int(sys.argv[5])
analytes = json.loads(sys.argv[6])
frame = pd.read_csv(lots)
frame = frame[frame["lot"].notna() & frame["grade"].notna()].drop_duplicates("lot")
x = frame[analytes].apply(pd.to_numeric, errors="coerce")
x = RobustScaler().fit_transform(SimpleImputer(strategy="median").fit_transform(x))
space = umap.UMAP(n_components=8, min_dist=0.0, random_state=seed).fit_transform(x)
clusterer = hdbscan.HDBSCAN(min_cluster_size=mcs, min_samples=ms, prediction_data=True)
labels = clusterer.fit(space).labels_
map2d = umap.UMAP(n_components=2, random_state=seed).fit_transform(x)
pd.DataFrame({"lot_id": frame["lot"].astype(str), "label": labels}).to_csv(out, index=False)
"""


def main() -> None:
    work = Path(tempfile.mkdtemp(prefix="bench_segment_"))
    lots = DEMO / "lots.csv"
    script = work / "straight.py"
    script.write_text(STRAIGHT)
    ours_cache, theirs_cache = work / "numba_ours", work / "numba_theirs"
    print(f"demo range: {lots} ({len(lots.read_text().splitlines()) - 1} rows)")
    runs = {}
    for attempt in ("first run, empty numba cache", "again, cache warm"):
        runs[f"vinstrata segment ({attempt})"] = ours = run_cold(
            vinstrata("-q", "segment", lots, "--config", CONFIG, "--out", work / "ours"),
            env={"NUMBA_CACHE_DIR": str(ours_cache)})
        report(f"vinstrata segment ({attempt})", ours)
    model = json.loads((work / "ours" / "model" / "model.json").read_text())
    params = model["params"]
    analytes = [s["name"] for s in model["specs"]]
    for attempt in ("first run, empty numba cache", "again, cache warm"):
        runs[f"straightforward ({attempt})"] = theirs = run_cold(
            [sys.executable, script, lots, work / "straight.csv", params["min_cluster_size"],
             params["min_samples"], params["seed"], json.dumps(analytes)],
            env={"NUMBA_CACHE_DIR": str(theirs_cache)})
        report(f"straightforward ({attempt})", theirs)
    ours_labels = pd.read_csv(work / "ours" / "lot_styles.csv", keep_default_na=False)
    theirs_labels = pd.read_csv(work / "straight.csv", keep_default_na=False)
    merged = ours_labels[ours_labels["status"] == "used"].merge(theirs_labels, on="lot_id")
    from sklearn.metrics import adjusted_rand_score as ari

    truth = pd.read_csv(DEMO / "truth_lots.csv").set_index("lot")["style"]
    planted = truth.reindex(merged["lot_id"]).to_numpy()
    print(f"styles agree with the straightforward labels: ARI {ari(merged['style'], merged['label']):.3f}")  # noqa: E501
    print(f"against the planted styles: vinstrata ARI {ari(planted, merged['style']):.3f}, "
          f"straightforward ARI {ari(planted, merged['label']):.3f}")
    for attempt in ("first run, empty numba cache", "again, cache warm"):
        ours = runs[f"vinstrata segment ({attempt})"]
        theirs = runs[f"straightforward ({attempt})"]
        print(f"ratio straightforward / vinstrata ({attempt}): "
              f"{theirs.seconds / ours.seconds:.1f}x")
    print(f"outputs in {work}")


if __name__ == "__main__":
    main()
