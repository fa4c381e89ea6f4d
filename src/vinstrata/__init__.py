"""vinstrata: style segmentation, within-style quality drivers, new-lot placement and
buyer briefings for wine lot tables.

The stages are importable functions over pandas DataFrames and plain config
objects; the CLI is a thin layer over them::

    from vinstrata import load_config, load_lots, fit_styles

    config = load_config("configs/demo.toml")
    lots = load_lots("demo_data/lots.csv", config)
    model = fit_styles(lots, config)

On pandas DataFrames, in the scikit-learn convention (``fit``, ``predict``,
``get_params``, ``clone``)::

    from vinstrata import StyleSegmenter

    seg = StyleSegmenter(config="configs/demo.toml").fit(lots_frame)
    styles = seg.predict(new_lots_frame)

The names below are imported on first use, so that ``vinstrata --help`` or
``vinstrata demo`` do not pay for scikit-learn and scipy.
"""

from __future__ import annotations

from importlib import import_module
from importlib.metadata import PackageNotFoundError, version
from typing import Any

try:
    __version__ = version("vinstrata")
except PackageNotFoundError:  # pragma: no cover - running from a source tree
    __version__ = "0.0.0"

_API = {
    "Config": "vinstrata.config", "load_config": "vinstrata.config",
    "packaged_config": "vinstrata.config", "InputError": "vinstrata.errors",
    "StyleModel": "vinstrata.segment.model", "load_model": "vinstrata.segment.model",
    "save_model": "vinstrata.segment.model", "fit_styles": "vinstrata.segment.fit",
    "load_lots": "vinstrata.read.validate", "VinstrataWarning": "vinstrata.errors",
    "lots_from_frame": "vinstrata.read.validate", "StyleSegmenter": "vinstrata.estimator",
}

__all__ = [*_API, "__version__"]


def __getattr__(name: str) -> Any:
    if name in _API:
        return getattr(import_module(_API[name]), name)
    raise AttributeError(f"module 'vinstrata' has no attribute {name!r}")
