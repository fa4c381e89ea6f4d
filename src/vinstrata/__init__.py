"""vinstrata: style segmentation, within-style quality drivers, new-lot placement and
buyer briefings for wine lot tables.

The stages are importable functions over pandas DataFrames and plain config
objects; the CLI is a thin layer over them::

    from vinstrata import load_config, load_lots, fit_styles

    config = load_config("configs/demo.toml")
    lots = load_lots("demo_data/lots.csv", config)
    model = fit_styles(lots, config)
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("vinstrata")
except PackageNotFoundError:  # pragma: no cover - running from a source tree
    __version__ = "0.0.0"

from vinstrata.config import Config, load_config, packaged_config
from vinstrata.errors import InputError
from vinstrata.model import StyleModel, load_model, save_model
from vinstrata.segment import fit_styles
from vinstrata.validate import load_lots

__all__ = [
    "Config", "InputError", "StyleModel", "__version__", "fit_styles", "load_config",
    "load_lots", "load_model", "packaged_config", "save_model",
]
