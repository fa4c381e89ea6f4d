"""Dissolving diffuse groups: random chemistry goes, a broad style beside a tight one stays."""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.metrics import adjusted_rand_score

from vinstrata.config import load_config
from vinstrata.read.validate import load_lots
from vinstrata.segment import fit_styles
from vinstrata.segment.joins import DIFFUSE, drop_diffuse, spread


def _robust_scaled(x: np.ndarray) -> np.ndarray:
    """Median and IQR scaling of the whole range, as the segmentation scales it."""
    q25, q50, q75 = np.quantile(x, [0.25, 0.5, 0.75], axis=0)
    return (x - q50) / (q75 - q25)


def _broad_and_tight(rng: np.random.Generator, n: int, tight_share: float, apart: int,
                     d: int = 10) -> tuple[np.ndarray, np.ndarray]:
    """A broad style holding most lots and a tight one inside it on all but ``apart``
    analytes."""
    n_tight = int(n * tight_share)
    broad = rng.normal(0.0, 1.0, (n - n_tight, d))
    tight = rng.normal(0.0, 0.25, (n_tight, d))
    tight[:, :apart] += 4.0
    labels = np.r_[np.zeros(n - n_tight, dtype=int), np.ones(n_tight, dtype=int)]
    return np.vstack([broad, tight]), labels


def test_broad_style_holding_most_lots_beside_a_tight_one_stays():
    # the tight style narrows the range's IQR below the broad style's own: measured against
    # the IQR the broad style looked wider than the range; against the span it does not
    rng = np.random.default_rng(2)
    for tight_share, apart in [(0.15, 2), (0.3, 2), (0.45, 3)]:
        x, labels = _broad_and_tight(rng, 3000, tight_share, apart)
        kept = drop_diffuse(_robust_scaled(x), labels, np.array([0, 1]))
        assert list(kept) == [0, 1], (tight_share, apart)


def test_random_chemistry_spread_over_the_range_is_dissolved():
    rng = np.random.default_rng(4)
    styles = np.vstack([rng.normal(0, 1, (2500, 10)), rng.normal(3, 0.5, (500, 10))])
    lo, hi = np.quantile(styles, [0.01, 0.99], axis=0)
    noise = rng.uniform(lo, hi, (150, 10))
    scaled = _robust_scaled(np.vstack([styles, noise]))
    labels = np.r_[np.zeros(2500, int), np.ones(500, int), np.full(150, 2)]
    assert list(drop_diffuse(scaled, labels, np.array([0, 1, 2]))) == [0, 1, -1]
    # uniform lots have half the span as IQR, a normal style 0.29 of its own span
    assert spread(scaled[labels == 2], scaled) > DIFFUSE > spread(scaled[labels == 0], scaled)


def test_broad_style_survives_the_whole_segmentation(tmp_path):
    rng = np.random.default_rng(8)
    x, labels = _broad_and_tight(rng, 2400, 0.25, 2, d=8)
    names = [f"m{k}" for k in range(x.shape[1])]
    frame = pd.DataFrame(np.round(10.0 + x, 3), columns=names)
    frame.insert(0, "lot", [f"L{i:05d}" for i in range(len(frame))])
    frame.sample(frac=1.0, random_state=1).to_csv(tmp_path / "lots.csv", index=False)
    listed = ", ".join(f'"{n}"' for n in names)
    (tmp_path / "c.toml").write_text(f'seed = 3\n[columns]\nlot_id = "lot"\ngrade = ""\n'
                                     f'analytes = [{listed}]\n', encoding="utf-8")
    config = load_config(tmp_path / "c.toml")
    model = fit_styles(load_lots(str(tmp_path / "lots.csv"), config), config)
    truth = pd.Series(labels, index=[f"L{i:05d}" for i in range(len(labels))])
    planted = truth.reindex(model.lots["lot_id"]).to_numpy()
    style = model.lots["style"].to_numpy()
    assert (style[planted == 0] != "unassigned").mean() > 0.9  # the broad style is a style
    assert adjusted_rand_score(planted, style) > 0.8
