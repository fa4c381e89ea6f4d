"""New lots' analytes against their style: robust z, percentiles, cut and window flags."""

from __future__ import annotations

import numpy as np
import pandas as pd

from vinstrata.config import Config
from vinstrata.place.limits import Flag, normalise_colour
from vinstrata.profile.drivers import Profiles
from vinstrata.read.lots import LotTable, observed
from vinstrata.segment.model import StyleModel


def analyte_view(values: pd.DataFrame, model: StyleModel, profiles: Profiles | None,
                  home: np.ndarray, config: Config) -> tuple[pd.DataFrame, list[list]]:
    """Per lot and analyte: robust z, percentile, cut and window; and the analyte flags."""
    stats_ = model.style_stats.set_index(["style", "analyte"])
    thresholds = (profiles.thresholds.set_index(["style", "analyte"])
                  if profiles is not None else None)
    train_style = model.lots["style"].to_numpy(dtype=object)
    trusted = dict(zip(model.styles["style"], model.styles["trusted"]))
    zmax = config.place.z_flag
    flags: list[list[Flag]] = [[] for _ in range(len(values))]
    parts = []
    for j, spec in enumerate(model.specs):
        x = values[spec.name].to_numpy(dtype=float)
        train = observed(model.values, model.flags, spec.name)
        range_iqr = float(np.nanquantile(train, 0.75) - np.nanquantile(train, 0.25))
        for sid in model.style_ids:
            mine = np.flatnonzero(home == sid)
            if mine.size == 0:
                continue
            st = stats_.loc[(sid, spec.name)]
            iqr = float(st["q75"] - st["q25"])
            iqr = iqr if iqr > 0 else (range_iqr if range_iqr > 0 else 1.0)
            ref = np.sort(train[train_style == sid])
            ref = ref[np.isfinite(ref)]
            v = x[mine]
            known = np.isfinite(v)
            z = (v - st["median"]) / iqr
            pct = (100.0 * (np.searchsorted(ref, v, "left") + np.searchsorted(ref, v, "right"))
                   / (2 * ref.size)) if ref.size else np.full(v.size, np.nan)
            pct = np.where(known, pct, np.nan)
            off = known & (np.abs(z) > zmax)
            direction, cut, low, high = "", np.nan, np.nan, np.nan
            if thresholds is not None and (sid, spec.name) in thresholds.index:
                t = thresholds.loc[(sid, spec.name)]
                direction = t["direction"] if isinstance(t["direction"], str) else ""
                cut, low, high = t["cut"], t["target_low"], t["target_high"]
            judged = known & bool(trusted.get(sid, False))
            if direction == "higher_better":
                losing = judged & (v < cut)
            elif direction == "lower_better":
                losing = judged & (v > cut)
            else:
                losing = np.zeros(v.size, dtype=bool)
            outside = judged & np.isfinite(low) & ((v < low) | (v > high))
            side = "below" if direction == "higher_better" else "above"
            for i in np.flatnonzero(off):
                flags[mine[i]].append(Flag(f"off_style:{spec.name}",
                                           f"{spec.label} {v[i]:.4g} {spec.unit} far from {sid} "
                                           f"(robust z {z[i]:+.1f})",
                                           f"{spec.label} z{z[i]:+.1f}"))
            for i in np.flatnonzero(losing):
                flags[mine[i]].append(Flag(f"{side}_cut:{spec.name}",
                                           f"{spec.label} {v[i]:.4g} {side} the {sid} cut "
                                           f"{cut:.4g} {spec.unit}", spec.label))
            for i in np.flatnonzero(outside):
                flags[mine[i]].append(Flag(f"outside_target:{spec.name}",
                                           f"{spec.label} {v[i]:.4g} outside the {sid} target "
                                           f"{low:.4g}-{high:.4g} {spec.unit}", spec.label))
            flag = np.where(off, "off_style", np.where(
                losing, "losing_side", np.where(outside, "outside_target", "")))
            parts.append(pd.DataFrame({
                "_i": mine, "_o": j, "analyte": spec.name, "value": v, "unit": spec.unit,
                "style": sid, "style_median": st["median"], "robust_z": np.round(z, 6),
                "percentile": np.round(pct, 4), "direction": direction, "cut": cut,
                "target_low": low, "target_high": high, "flag": flag,
            }))
    frame = pd.concat(parts, ignore_index=True).sort_values(["_i", "_o"], kind="stable")
    return frame.drop(columns=["_i", "_o"]).reset_index(drop=True), flags


def lot_colours(table: LotTable, config: Config, used: np.ndarray) -> np.ndarray:
    n = int(used.sum())
    column = config.limits.colour_column
    if column and column in table.extra.columns:
        colours = [normalise_colour(v) for v in table.extra.loc[used, column]]
        fallback = config.limits.default_colour
        return np.array([c or fallback for c in colours], dtype=object)
    return np.full(n, config.limits.default_colour, dtype=object)


def short_flags(flags: list[Flag]) -> str:
    """A lot's flags in a few words for tables: typicality, off analytes, limits, counts."""
    parts = []
    kinds = {f.token.split(":")[0] for f in flags}
    for f in flags:
        if f.token in ("fits_no_style", "atypical"):
            parts.append(f.short)
    off = [f.short for f in flags if f.token.startswith("off_style")]
    if off:
        parts.append("off: " + ", ".join(off[:3]) + (" ..." if len(off) > 3 else ""))
    limits = [f.short for f in flags if f.token in ("va_above_limit", "total_so2_above_limit",
                                                    "molecular_so2_low")]
    parts += limits
    cuts = [f.short for f in flags if f.token.startswith(("below_cut", "above_cut"))]
    if cuts:
        parts.append("misses cut: " + ", ".join(cuts[:3]) + (" ..." if len(cuts) > 3 else ""))
    windows = sum(f.token.startswith("outside_target") for f in flags)
    if windows:
        parts.append(f"{windows} outside target")
    if not parts and "sulfite_statement" in kinds:
        return "-"
    return " | ".join(parts) or "-"
