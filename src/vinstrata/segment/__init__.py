"""Segmenting: chemistry transformed and scaled, UMAP, HDBSCAN styles, the plain-data model.

Modules, in the order the stage runs::

    transform   Per-analyte transform and robust scaling, fitted on the training lots.
    embed       UMAP embeddings of the scaled chemistry: the clustering space and the 2-D map.
    sweep       The HDBSCAN cluster-size sweep: candidates, their relative validity and the pick.
    joins       Joining clusters the embedding split apart, and dissolving groups that are no style.
    typicality  How typical a lot's chemistry is of a style: the outlier score.
    names       Style names: generated from their chemistry, or given by their users.
    styles      The style table: sizes, medians, names and the trust verdict of each style.
    assign      Assigning lots to styles: HDBSCAN's prediction, soft membership, typicality.
    membership  HDBSCAN's prediction and soft membership of new lots, many at once.
    reference   The fitted lots that other lots are placed among, built once per model.
    sample      The fitted sample of a large range: seeded, stratified by chemistry.
    fit         Segmenting a range into styles from its chemistry alone.
    model       The style model: what segmentation learns, saved as plain data.
    outputs     The contract tables of the segment stage: lot_styles.csv and styles.csv.
    previous    Styles that keep their ids and names from one fit to the next.
"""

from vinstrata.lazy import attach

_NAMES = {
    "AnalyteTransform": "vinstrata.segment.transform",
    "ChemistryScaler": "vinstrata.segment.transform",
    "choose_method": "vinstrata.segment.transform",
    "fit_scaler": "vinstrata.segment.transform",
    "impute": "vinstrata.segment.transform",
    "censored_at_limit": "vinstrata.segment.transform",
    "scale_chemistry": "vinstrata.segment.transform",
    "Neighbours": "vinstrata.segment.embed",
    "NeighbourIndex": "vinstrata.segment.embed",
    "nearest": "vinstrata.segment.embed",
    "smooth_knn_dist": "vinstrata.segment.embed",
    "memberships": "vinstrata.segment.embed",
    "fuzzy_graph": "vinstrata.segment.embed",
    "default_epochs": "vinstrata.segment.embed",
    "layouts": "vinstrata.segment.embed",
    "layout": "vinstrata.segment.embed",
    "interpolate": "vinstrata.segment.embed",
    "Clustering": "vinstrata.segment.sweep",
    "default_min_samples": "vinstrata.segment.sweep",
    "sweep_sizes": "vinstrata.segment.sweep",
    "relative_validity": "vinstrata.segment.sweep",
    "fit_hdbscan": "vinstrata.segment.sweep",
    "sweep_labels": "vinstrata.segment.sweep",
    "evaluate": "vinstrata.segment.sweep",
    "choose_size": "vinstrata.segment.sweep",
    "sweep_table": "vinstrata.segment.sweep",
    "lot_groups": "vinstrata.segment.joins",
    "spread": "vinstrata.segment.joins",
    "drop_diffuse": "vinstrata.segment.joins",
    "separating_axis": "vinstrata.segment.joins",
    "valley_ratio": "vinstrata.segment.joins",
    "fill_noise": "vinstrata.segment.joins",
    "join_split_clusters": "vinstrata.segment.joins",
    "StyleShape": "vinstrata.segment.typicality",
    "log_chi2_tail": "vinstrata.segment.typicality",
    "log_f_tail": "vinstrata.segment.typicality",
    "z_of_log_tail": "vinstrata.segment.typicality",
    "distance_score": "vinstrata.segment.typicality",
    "atypical_line": "vinstrata.segment.typicality",
    "fit_shape": "vinstrata.segment.typicality",
    "style_phrase": "vinstrata.segment.names",
    "name_styles": "vinstrata.segment.names",
    "colour_mix": "vinstrata.segment.names",
    "generated_names": "vinstrata.segment.names",
    "apply_user_names": "vinstrata.segment.names",
    "check_user_name": "vinstrata.segment.names",
    "with_user_name": "vinstrata.segment.names",
    "trust_notes": "vinstrata.segment.styles",
    "quantile_hints": "vinstrata.segment.styles",
    "describe_styles": "vinstrata.segment.styles",
    "style_band_counts": "vinstrata.segment.styles",
    "Prediction": "vinstrata.segment.assign",
    "Assignment": "vinstrata.segment.assign",
    "score_lots": "vinstrata.segment.assign",
    "assign_lots": "vinstrata.segment.assign",
    "group_memberships": "vinstrata.segment.assign",
    "training_prediction": "vinstrata.segment.assign",
    "rebuild_clusterer": "vinstrata.segment.assign",
    "style_shapes": "vinstrata.segment.assign",
    "SoftTables": "vinstrata.segment.membership",
    "soft_tables": "vinstrata.segment.membership",
    "soft_membership": "vinstrata.segment.membership",
    "predict_clusters": "vinstrata.segment.membership",
    "Predictor": "vinstrata.segment.assign",
    "fit_predictor": "vinstrata.segment.assign",
    "model_predictor": "vinstrata.segment.assign",
    "predict_styles": "vinstrata.segment.assign",
    "place_in_styles": "vinstrata.segment.assign",
    "Located": "vinstrata.segment.reference",
    "FitReference": "vinstrata.segment.reference",
    "fit_reference": "vinstrata.segment.reference",
    "model_reference": "vinstrata.segment.reference",
    "fit_styles": "vinstrata.segment.fit",
    "FORMAT_VERSION": "vinstrata.segment.model",
    "SegmentParams": "vinstrata.segment.model",
    "software_versions": "vinstrata.segment.model",
    "StyleModel": "vinstrata.segment.model",
    "save_model": "vinstrata.segment.model",
    "load_model": "vinstrata.segment.model",
    "LOT_STYLE_COLUMNS": "vinstrata.segment.outputs",
    "STYLE_COLUMNS": "vinstrata.segment.outputs",
    "lot_styles": "vinstrata.segment.outputs",
    "style_table": "vinstrata.segment.outputs",
    "style_centres": "vinstrata.segment.previous",
    "match_cost": "vinstrata.segment.previous",
    "match_styles": "vinstrata.segment.previous",
    "rename_styles": "vinstrata.segment.previous",
    "match_previous": "vinstrata.segment.previous",
    "previous_table": "vinstrata.segment.previous",
    "check_previous": "vinstrata.segment.previous",
    "Comparison": "vinstrata.segment.previous",
    "median_shift": "vinstrata.segment.previous",
    "compare_models": "vinstrata.segment.previous",
}

__getattr__, __all__ = attach(__name__, _NAMES)
