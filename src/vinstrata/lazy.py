"""Lazy re-exports for package ``__init__`` files, so that importing a package is cheap.

``vinstrata --help`` and ``vinstrata demo`` must not pay for scikit-learn, scipy
or umap-learn; each package names its public API here and imports a module
only when one of its names is first used.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from importlib import import_module
from typing import Any


def attach(package: str, names: Mapping[str, str]) -> tuple[Callable[[str], Any], list[str]]:
    """A module ``__getattr__`` resolving ``names`` (name -> module) on first use, and ``__all__``.

    Unknown names raise AttributeError, so that ``from package import submodule``
    still falls back to importing the submodule.
    """

    def __getattr__(name: str) -> Any:
        module = names.get(name)
        if module is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        return getattr(import_module(module), name)

    return __getattr__, sorted(names)
