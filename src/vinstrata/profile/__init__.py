"""Profiling: inside each style, what separates top-graded from bottom-graded lots.

Modules, in the order the stage runs::

    bands       Grade bands: which lots count as top-graded, which as bottom-graded.
    groups      The lots of each style, and of the pooled range, with their grade bands.
    stats       The statistics of the profiles, as small pure functions over arrays.
    partial     Conditional effects: which drivers carry the grade, which only ride along.
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
    "nominal_shares": "vinstrata.profile.bands",
    "reached_shares": "vinstrata.profile.bands",
    "quantile_share_notes": "vinstrata.profile.bands",
    "POOLED": "vinstrata.profile.groups",
    "Group": "vinstrata.profile.groups",
    "Resamples": "vinstrata.profile.groups",
    "draw_resamples": "vinstrata.profile.groups",
    "style_groups": "vinstrata.profile.groups",
    "cliffs_delta": "vinstrata.profile.stats",
    "magnitude": "vinstrata.profile.stats",
    "HedgesG": "vinstrata.profile.stats",
    "hedges_g": "vinstrata.profile.stats",
    "mann_whitney_p": "vinstrata.profile.stats",
    "brunner_munzel_p": "vinstrata.profile.stats",
    "bh_adjust": "vinstrata.profile.stats",
    "spearman_rho": "vinstrata.profile.stats",
    "Sorted": "vinstrata.profile.stats",
    "delta_from_counts": "vinstrata.profile.stats",
    "youden_from_counts": "vinstrata.profile.stats",
    "resample_weights": "vinstrata.profile.stats",
    "multiplicities": "vinstrata.profile.stats",
    "lots_by_resamples": "vinstrata.profile.stats",
    "blocks": "vinstrata.profile.stats",
    "generator_at": "vinstrata.profile.stats",
    "count_blocks": "vinstrata.profile.stats",
    "skip_draws": "vinstrata.profile.stats",
    "DeltaPlan": "vinstrata.profile.stats",
    "quantile_or_nan": "vinstrata.profile.stats",
    "iqr_or_nan": "vinstrata.profile.stats",
    "delta_jackknife": "vinstrata.profile.stats",
    "bca_interval": "vinstrata.profile.stats",
    "separated_delta_interval": "vinstrata.profile.stats",
    "delta_interval": "vinstrata.profile.stats",
    "silverman_bandwidth": "vinstrata.profile.stats",
    "expand_weights": "vinstrata.profile.stats",
    "expand_counts": "vinstrata.profile.stats",
    "Smoothing": "vinstrata.profile.stats",
    "smoothed_block_cuts": "vinstrata.profile.stats",
    "smoothed_values": "vinstrata.profile.stats",
    "youden_cuts_of_rows": "vinstrata.profile.stats",
    "keyed_rng": "vinstrata.profile.stats",
    "smoothed_youden_cuts": "vinstrata.profile.stats",
    "cut_interval": "vinstrata.profile.stats",
    "PARTIAL_COLUMNS": "vinstrata.profile.partial",
    "normal_scores": "vinstrata.profile.partial",
    "partial_from_corr": "vinstrata.profile.partial",
    "partial_effects": "vinstrata.profile.partial",
    "rank_correlations": "vinstrata.profile.partial",
    "assign_roles": "vinstrata.profile.partial",
    "conditional_effects": "vinstrata.profile.partial",
    "add_conditional": "vinstrata.profile.partial",
    "DRIVER_COLUMNS": "vinstrata.profile.drivers",
    "EXTRA_DRIVER_COLUMNS": "vinstrata.profile.drivers",
    "Profiles": "vinstrata.profile.drivers",
    "profile_styles": "vinstrata.profile.drivers",
    "profile_table": "vinstrata.profile.drivers",
    "driver_summary": "vinstrata.profile.drivers",
    "THRESHOLD_COLUMNS": "vinstrata.profile.thresholds",
    "EXTRA_THRESHOLD_COLUMNS": "vinstrata.profile.thresholds",
    "cut_words": "vinstrata.profile.thresholds",
    "group_thresholds": "vinstrata.profile.thresholds",
    "CONTRAST_COLUMNS": "vinstrata.profile.contrasts",
    "NEGLIGIBLE": "vinstrata.profile.contrasts",
    "BootDeltas": "vinstrata.profile.contrasts",
    "is_negligible": "vinstrata.profile.contrasts",
    "contrasts": "vinstrata.profile.contrasts",
}

__getattr__, __all__ = attach(__name__, _NAMES)
