"""Profiling: inside each style, what separates top-graded from bottom-graded lots.

Modules, in the order the stage runs::

    bands       Grade bands: which lots count as top-graded, which as bottom-graded.
    groups      The lots of each style, and of the pooled range, with their grade bands.
    stats       The statistics of the profiles, as small pure functions over arrays.
    drivers     Within-style quality drivers: what separates top-graded from bottom-graded lots.
    thresholds  Youden cuts of the drivers with bootstrap CIs, and the top band's target windows.
    contrasts   Where drivers differ between styles, and where the pooled range misleads.
"""

from vinstrata.lazy import attach

_NAMES = {
    "band_of": "vinstrata.profile.bands",
    "style_cuts": "vinstrata.profile.bands",
    "assign_bands": "vinstrata.profile.bands",
    "lot_bands": "vinstrata.profile.bands",
    "band_counts": "vinstrata.profile.bands",
    "POOLED": "vinstrata.profile.groups",
    "Group": "vinstrata.profile.groups",
    "style_groups": "vinstrata.profile.groups",
    "cliffs_delta": "vinstrata.profile.stats",
    "magnitude": "vinstrata.profile.stats",
    "HedgesG": "vinstrata.profile.stats",
    "hedges_g": "vinstrata.profile.stats",
    "mann_whitney_p": "vinstrata.profile.stats",
    "bh_adjust": "vinstrata.profile.stats",
    "spearman_rho": "vinstrata.profile.stats",
    "Sorted": "vinstrata.profile.stats",
    "delta_from_counts": "vinstrata.profile.stats",
    "youden_from_counts": "vinstrata.profile.stats",
    "resample_weights": "vinstrata.profile.stats",
    "blocks": "vinstrata.profile.stats",
    "quantile_or_nan": "vinstrata.profile.stats",
    "iqr_or_nan": "vinstrata.profile.stats",
    "DRIVER_COLUMNS": "vinstrata.profile.drivers",
    "EXTRA_DRIVER_COLUMNS": "vinstrata.profile.drivers",
    "Profiles": "vinstrata.profile.drivers",
    "profile_styles": "vinstrata.profile.drivers",
    "profile_table": "vinstrata.profile.drivers",
    "driver_summary": "vinstrata.profile.drivers",
    "THRESHOLD_COLUMNS": "vinstrata.profile.thresholds",
    "group_thresholds": "vinstrata.profile.thresholds",
    "CONTRAST_COLUMNS": "vinstrata.profile.contrasts",
    "contrasts": "vinstrata.profile.contrasts",
}

__getattr__, __all__ = attach(__name__, _NAMES)
