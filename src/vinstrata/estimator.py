"""The engine as a scikit-learn estimator over pandas DataFrames of lots: :class:`StyleSegmenter`.

For notebook users who compose scikit-learn and pandas::

    import pandas as pd
    from sklearn.base import clone
    from vinstrata import StyleSegmenter

    lots = pd.read_csv("demo_data/lots.csv")
    seg = StyleSegmenter(config="configs/demo.toml", seed=7).fit(lots)
    seg.styles_                                   # the style table (styles.csv)
    seg.predict(pd.read_csv("demo_data/new_lots.csv"))   # style ids, "unassigned" included
    other = clone(seg).set_params(min_cluster_size=60)

It is a thin layer over the stages the command line runs, no second
implementation of any of them: a frame goes through the same front door as a
file (:func:`vinstrata.read.validate.lots_from_frame`: columns as the config
names them, units, censored values, a status per row), ``fit`` is
:func:`vinstrata.segment.fit.fit_styles`, and every prediction comes from
:func:`vinstrata.place.placing.place_lots` and the assignment it shares with
training (:mod:`vinstrata.segment.assign`), so ``predict`` gives what
``vinstrata place`` writes in ``placements.csv`` for the same lots and model.

Parameters follow scikit-learn's convention: ``__init__`` stores them
unchanged, and ``fit`` resolves them. ``config`` is the base configuration;
each other parameter, when not None, replaces one config key:

====================  =============================
parameter             config key
====================  =============================
``seed``              ``seed``
``lot_id``            ``columns.lot_id``
``grade``             ``columns.grade``
``analytes``          ``columns.analytes``
``passthrough``       ``columns.passthrough``
``space``             ``segment.space``
``components``        ``segment.components``
``neighbours``        ``segment.neighbours``
``min_cluster_size``  ``segment.min_cluster_size``
``min_samples``       ``segment.min_samples``
``outlier_cutoff``    ``segment.outlier_cutoff``
====================  =============================

Any other key is set in the config itself (a TOML file or a
:class:`~vinstrata.config.Config`). The resolved config is checked like a
config file: a wrong value is refused with one line naming the key.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, ClusterMixin
from sklearn.utils.validation import check_is_fitted

from vinstrata.config import Config, load_config, packaged_config, parse_config
from vinstrata.errors import InputError
from vinstrata.progress import Reporter
from vinstrata.read.lots import LotTable

if TYPE_CHECKING:
    from vinstrata.place.placing import Placements
    from vinstrata.profile.drivers import Profiles
    from vinstrata.segment.model import StyleModel

#: estimator parameter -> (config section, key); section "" for a top-level key
PARAMETER_KEYS: dict[str, tuple[str, str]] = {
    "seed": ("", "seed"),
    "lot_id": ("columns", "lot_id"),
    "grade": ("columns", "grade"),
    "analytes": ("columns", "analytes"),
    "passthrough": ("columns", "passthrough"),
    "space": ("segment", "space"),
    "components": ("segment", "components"),
    "neighbours": ("segment", "neighbours"),
    "min_cluster_size": ("segment", "min_cluster_size"),
    "min_samples": ("segment", "min_samples"),
    "outlier_cutoff": ("segment", "outlier_cutoff"),
}
GRADE_FROM_Y = "grade"  # the column ``y`` becomes when the config names no grade column


def base_config(config: Config | str | Path | None) -> Config:
    """The config a :class:`StyleSegmenter` starts from.

    ``None`` is the packaged default; ``"default"`` and ``"demo"`` the packaged
    configs; any other text or path a TOML file.
    """
    if config is None:
        return packaged_config("default")
    if isinstance(config, Config):
        return config
    if isinstance(config, (str, Path)):
        if str(config) in ("default", "demo"):
            return packaged_config(str(config))
        return load_config(config)
    raise InputError(f"StyleSegmenter: config must be a Config, a TOML path or None, got "
                     f"{type(config).__name__}")


def _raw(config: Config) -> dict[str, Any]:
    """A config as the mapping :func:`~vinstrata.config.parse_config` reads back."""
    raw = config.to_dict()
    raw.pop("source", None)
    limits = dict(raw.get("limits", {}))
    limits.update(limits.pop("overrides", {}) or {})
    raw["limits"] = limits
    return raw


def with_keys(config: Config, changes: dict[str, Any]) -> Config:
    """``config`` with estimator parameters (:data:`PARAMETER_KEYS`) set, checked anew.

    Raises
    ------
    InputError
        A value the config key does not take (the message names the key).
    """
    if not changes:
        return config
    raw = _raw(config)
    for name, value in changes.items():
        section, key = PARAMETER_KEYS[name]
        if isinstance(value, (tuple, Sequence)) and not isinstance(value, str):
            value = list(value)
        if isinstance(value, np.generic):
            value = value.item()
        if section:
            raw.setdefault(section, {})[key] = value
        else:
            raw[key] = value
    return parse_config(raw, f"{config.source} with StyleSegmenter parameters")


class StyleSegmenter(ClusterMixin, BaseEstimator):
    """Segment lots into chemistry styles and place new lots, in the scikit-learn convention.

    Parameters
    ----------
    config : Config, str, Path or None
        The base configuration: a :class:`~vinstrata.config.Config`, a TOML
        file, ``"default"`` or ``"demo"`` (the packaged ones); None is the
        packaged default.
    seed, lot_id, grade, analytes, passthrough, space, components, neighbours, \
min_cluster_size, min_samples, outlier_cutoff : optional
        Each replaces one config key when not None (see the module docstring).

    Attributes
    ----------
    model_ : StyleModel
        The plain-data model (:mod:`vinstrata.segment.model`), as ``vinstrata
        segment`` saves it.
    styles_ : DataFrame
        The style table (``styles.csv``).
    labels_ : Series
        The style of every row of the training frame (``"unassigned"`` for lots
        that fit no style, None for rejected rows), indexed like it.
    status_ : Series
        Every training row's status (``used`` or the rejection reason).
    config_ : Config
        The resolved configuration.

    Notes
    -----
    ``predict``, ``predict_proba``, ``score_samples`` and ``transform`` return
    pandas objects indexed like ``X``; a row that validation rejects (see
    ``place(X).lots["status"]``) gets None or NaN.
    """

    def __init__(self, config: Config | str | Path | None = None, *, seed: int | None = None,
                 lot_id: str | None = None, grade: str | None = None,
                 analytes: Sequence[str] | None = None,
                 passthrough: Sequence[str] | None = None, space: str | None = None,
                 components: int | None = None, neighbours: int | None = None,
                 min_cluster_size: int | str | None = None, min_samples: int | str | None = None,
                 outlier_cutoff: float | None = None) -> None:
        self.config = config
        self.seed = seed
        self.lot_id = lot_id
        self.grade = grade
        self.analytes = analytes
        self.passthrough = passthrough
        self.space = space
        self.components = components
        self.neighbours = neighbours
        self.min_cluster_size = min_cluster_size
        self.min_samples = min_samples
        self.outlier_cutoff = outlier_cutoff

    # ------------------------------------------------------------------ scikit-learn plumbing

    def __sklearn_is_fitted__(self) -> bool:
        return hasattr(self, "model_")

    def __sklearn_tags__(self) -> Any:
        tags = super().__sklearn_tags__()
        # X is a DataFrame of named lab columns: text cells (ids, "<0.1") and gaps allowed
        tags.input_tags.string = True
        tags.input_tags.allow_nan = True
        tags.target_tags.required = False
        return tags

    def resolved_config(self) -> Config:
        """The configuration ``fit`` uses: ``config`` with the set parameters applied."""
        changes = {name: getattr(self, name) for name in PARAMETER_KEYS
                   if getattr(self, name) is not None}
        return with_keys(base_config(self.config), changes)

    # ------------------------------------------------------------------ fitting

    def fit(self, X: pd.DataFrame, y: Any = None) -> StyleSegmenter:
        """Segment the lots of ``X`` into styles.

        Parameters
        ----------
        X : DataFrame
            One row per lot, columns named as the config names them.
        y : array-like, optional
            The grade of each row; it replaces the config's grade column (or
            becomes column ``grade`` when the config names none). Grades never
            form styles; they decide the trust verdict and the profiles.

        Returns
        -------
        StyleSegmenter
            ``self``, fitted.

        Raises
        ------
        InputError
            A frame the engine refuses (a missing column, too few usable lots ...).
        """
        from vinstrata.read.validate import lots_from_frame
        from vinstrata.segment.fit import fit_styles

        config = self.resolved_config()
        frame = _frame(X, "X")
        if y is not None:
            frame, config = _with_grades(frame, y, config)
        rep = Reporter()
        table = lots_from_frame(frame, config, require_grade=bool(config.columns.grade),
                                reporter=rep)
        self._set_fitted(fit_styles(table, config, rep), config, frame)
        return self

    def fit_predict(self, X: pd.DataFrame, y: Any = None, **kwargs: Any) -> pd.Series:
        """Fit and return the training lots' styles (:attr:`labels_`)."""
        return self.fit(X, y).labels_

    def _set_fitted(self, model: StyleModel, config: Config, frame: pd.DataFrame | None
                    ) -> None:
        from vinstrata.segment.outputs import lot_styles

        table = lot_styles(model)
        styles = table["style"].to_numpy(dtype=object)
        status = table["status"].to_numpy(dtype=object)
        index: pd.Index = pd.RangeIndex(len(table))
        if frame is not None:  # aligned with the frame's rows (entirely blank ones: None)
            positions = model.rows["row"].to_numpy(dtype=int) - 2
            index = frame.index
            styles, status = (np.full(len(frame), None, dtype=object) for _ in range(2))
            styles[positions] = table["style"].to_numpy(dtype=object)
            status[positions] = table["status"].to_numpy(dtype=object)
        self.model_ = model
        self.config_ = config
        # what placing needs of the model (trees, HDBSCAN rebuilt, profiles): built on the
        # first call that places lots, then reused, not rebuilt on every predict
        self._contexts: dict[bool, Any] = {}
        self.styles_ = model.styles.copy()
        self.labels_ = pd.Series(styles, index=index, name="style")
        self.status_ = pd.Series(status, index=index, name="status")

    # ------------------------------------------------------------------ new lots

    def _new_lots(self, X: pd.DataFrame, rep: Reporter) -> LotTable:
        """New lots through the front door ``vinstrata place`` takes them through."""
        from vinstrata.pipeline import warn_rejections
        from vinstrata.place.match import check_columns
        from vinstrata.read.ingest import raw_from_frame
        from vinstrata.read.validate import validate

        config = self.model_.config
        raw = raw_from_frame(_frame(X, "X"), "X")
        check_columns(raw, self.model_, config)
        table = validate(raw, config, require_grade=False)
        warn_rejections(table, rep, where="place(X).lots")
        return table

    def place(self, X: pd.DataFrame, profiles: bool = True) -> Placements:
        """Place new lots as ``vinstrata place`` does: every table of its output.

        Parameters
        ----------
        X : DataFrame
            New lots, with the model's analyte columns.
        profiles : bool
            Profile the model's styles for the driver-cut and target-window
            flags (when it has grades), as the command does; False skips them
            (styles, typicality, neighbours and screening flags are the same).

        Returns
        -------
        Placements
            ``lots`` is ``placements.csv``, one row per row of ``X``.
        """
        return self._placements(X, profiles)[1]

    def _context(self, profiles: bool) -> Any:
        """The model's placing context, with or without its profiles (built once)."""
        from vinstrata.pipeline import profile as profile_stage
        from vinstrata.place.context import placing_context

        contexts = getattr(self, "_contexts", None)
        if contexts is None:
            contexts = self._contexts = {}
        if profiles not in contexts:
            model = self.model_
            found = (profile_stage(model, model.config, for_placing=True)
                     if profiles and model.has_grade else None)
            contexts[profiles] = placing_context(model, found, model.config)
        return contexts[profiles]

    def _placements(self, X: pd.DataFrame, profiles: bool) -> tuple[LotTable, Placements]:
        from vinstrata.place.placing import place_lots

        check_is_fitted(self)
        rep = Reporter()
        table = self._new_lots(X, rep)
        model = self.model_
        context = self._context(profiles)
        return table, place_lots(table, model, context.profiles, model.config, rep,
                                 context=context)

    def predict(self, X: pd.DataFrame) -> pd.Series:
        """Each lot's style: ``S1`` ..., ``unassigned`` when it fits no style, None when rejected.

        The ``style`` column of ``vinstrata place``'s ``placements.csv``.
        """
        check_is_fitted(self)
        table, placements = self._placements(X, profiles=False)
        return _per_row(X, table, placements.lots["style"].to_numpy(dtype=object), "style")

    def score_samples(self, X: pd.DataFrame) -> pd.Series:
        """Each lot's outlier score against its nearest style (NaN when rejected).

        A robust Mahalanobis distance as a z (:mod:`vinstrata.segment.typicality`):
        **higher is more atypical**, the opposite sign of scikit-learn's outlier
        detectors; above ``segment.outlier_cutoff`` a lot fits no style.
        """
        check_is_fitted(self)
        table, placements = self._placements(X, profiles=False)
        scores = pd.to_numeric(placements.lots["outlier_score"], errors="coerce")
        return _per_row(X, table, scores.to_numpy(dtype=float), "outlier_score")

    def _positions(self, X: pd.DataFrame) -> tuple[LotTable, Any]:
        """The used new lots' positions and assignment, as :func:`place_lots` computes them."""
        from vinstrata.place.placing import locate_lots

        rep = Reporter()
        table = self._new_lots(X, rep)
        used = table.used
        if not used.any():
            return table, None
        values = table.values.loc[used].reset_index(drop=True)
        flags = table.flags.loc[used].reset_index(drop=True)
        model = self.model_
        return table, locate_lots(values, flags, model, model.config,
                                  model.config.place.atypical_percentile,
                                  reference=self._context(False).reference)

    def predict_proba(self, X: pd.DataFrame) -> pd.DataFrame:
        """Each lot's soft membership to every style (rows sum to 1; NaN when rejected).

        HDBSCAN's membership vectors summed over each style's clusters, as
        segmentation gives them (:meth:`vinstrata.segment.assign.Predictor.soft`).
        """
        check_is_fitted(self)
        table, placed = self._positions(X)
        soft = np.full((table.n_rows, len(self.model_.style_ids)), np.nan)
        if placed is not None:
            soft[table.used] = self._context(False).reference.predictor.soft(placed.space)
        return _per_row_frame(X, table, soft, self.model_.style_ids)

    def transform(self, X: pd.DataFrame) -> pd.DataFrame:
        """Each lot's clustering-space coordinates (NaN when rejected).

        The UMAP clustering space (``component_1`` ...), or the scaled chemistry
        itself with ``segment.space = "chemistry"`` (one column per analyte).
        """
        check_is_fitted(self)
        table, placed = self._positions(X)
        model = self.model_
        coordinates = np.full((table.n_rows, model.space.shape[1]), np.nan)
        if placed is not None:
            coordinates[table.used] = np.asarray(placed.space, dtype=float)
        return _per_row_frame(X, table, coordinates, _space_columns(model))

    def fit_transform(self, X: pd.DataFrame, y: Any = None) -> pd.DataFrame:
        """Fit, then the training lots' clustering-space coordinates as fitted."""
        self.fit(X, y)
        model = self.model_
        used = (self.status_ == "used").to_numpy()
        coordinates = np.full((len(used), model.space.shape[1]), np.nan)
        coordinates[used] = np.asarray(model.space, dtype=float)
        return pd.DataFrame(coordinates, index=self.labels_.index, columns=_space_columns(model))

    def profile(self) -> Profiles:
        """The drivers of each style (``vinstrata profile``; the lots need grades)."""
        from vinstrata.profile.drivers import profile_styles

        check_is_fitted(self)
        if not self.model_.has_grade:
            raise InputError("profile: the training lots have no grades (give a grade column "
                             "in the config, or y to fit)")
        return profile_styles(self.model_)

    # ------------------------------------------------------------------ saving

    def save(self, path: str | Path) -> Path:
        """Save the fitted model as ``vinstrata segment`` does (a plain-data ``model/`` folder).

        ``vinstrata place NEW --model PATH`` then places lots with it.
        """
        from vinstrata.segment.model import save_model

        check_is_fitted(self)
        return save_model(self.model_, path)

    @classmethod
    def load(cls, path: str | Path) -> StyleSegmenter:
        """A fitted segmenter from a ``model/`` folder (``save`` or ``vinstrata segment``).

        Its ``config`` is the model's own (the parameters were resolved into it);
        ``labels_`` is indexed from 0.
        """
        from vinstrata.segment.model import load_model

        model = load_model(path)
        segmenter = cls(config=model.config)
        segmenter._set_fitted(model, model.config, None)
        return segmenter


# --------------------------------------------------------------------------- helpers


def _frame(X: Any, what: str) -> pd.DataFrame:
    if not isinstance(X, pd.DataFrame):
        raise InputError(f"{what}: expected a pandas DataFrame of lots with named columns, got "
                         f"{type(X).__name__}")
    return X


def _positions_in(table: LotTable) -> np.ndarray:
    """The position in the frame of each row of ``table`` (entirely blank rows are skipped
    on reading; their row numbers count from 2, as in the frame written as CSV)."""
    return table.ids["row"].to_numpy(dtype=int) - 2


def _per_row(X: pd.DataFrame, table: LotTable, values: np.ndarray, name: str) -> pd.Series:
    """Per-lot values as a Series indexed like ``X`` (None or NaN for blank rows)."""
    numeric = values.dtype.kind == "f"
    out = np.full(len(X), np.nan if numeric else None, dtype=float if numeric else object)
    out[_positions_in(table)] = values
    return pd.Series(out, index=X.index, name=name)


def _per_row_frame(X: pd.DataFrame, table: LotTable, values: np.ndarray,
                   columns: list[str]) -> pd.DataFrame:
    """Per-lot rows as a DataFrame indexed like ``X`` (NaN for blank rows)."""
    out = np.full((len(X), values.shape[1]), np.nan)
    out[_positions_in(table)] = values
    return pd.DataFrame(out, index=X.index, columns=columns)


def _space_columns(model: StyleModel) -> list[str]:
    if model.params.space == "chemistry":
        return list(model.analytes)
    return [f"component_{k + 1}" for k in range(model.space.shape[1])]


def _with_grades(frame: pd.DataFrame, y: Any, config: Config) -> tuple[pd.DataFrame, Config]:
    """``frame`` with ``y`` as its grade column, and the config naming it."""
    grades = np.asarray(y, dtype=object).ravel()
    if len(grades) != len(frame):
        raise InputError(f"y: {len(grades)} grades for {len(frame)} lots")
    column = config.columns.grade or GRADE_FROM_Y
    if not config.columns.grade and column in frame.columns:
        raise InputError(f"y: X already has a column '{column}'; name the grade column in the "
                         "config (or give the grade parameter)")
    out = frame.copy()
    out[column] = grades
    if config.columns.grade:
        return out, config
    columns = dataclasses.replace(config.columns, grade=column)
    return out, dataclasses.replace(config, columns=columns)
