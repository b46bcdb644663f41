"""Packages: writing one (``archivist pack``), and reading archives (audit, unpack).

``pack`` is the public entry point of packing; its modules each write one
part of the package (``layers``, ``tables``, ``datapackage``, ``datacite``,
``provenance``, ``readme``, ``packmanifest``, ``bagwrite``), and
``determinism`` makes the output reproducible (all-or-nothing writing is
:mod:`archivist.fsutil`).

``pack``, ``PackResult`` and ``PackRefused`` are loaded on first use (PEP 562),
so that a light module of this package (``safe``, whose caps the command
line's help shows) can be imported without the geospatial libraries.
"""

from __future__ import annotations

import sys
import types
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from .pack import PackRefused, PackResult, pack

__all__ = ["pack", "PackResult", "PackRefused"]


def __getattr__(name: str) -> Any:
    """Load ``pack``, ``PackResult`` or ``PackRefused`` from :mod:`archivist.package.pack` on first use."""
    if name not in __all__:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    from importlib import import_module

    value = getattr(import_module(".pack", __name__), name)
    globals()[name] = value
    return value


class _Package(types.ModuleType):
    """This package's module type: ``archivist.package.pack`` stays the function once the submodule is loaded.

    (The import system binds a loaded submodule as an attribute of its
    package; the submodule stays reachable through ``sys.modules`` and
    ``from archivist.package.pack import ...``.)
    """

    def __setattr__(self, name: str, value: Any) -> None:
        if name == "pack" and isinstance(value, types.ModuleType):
            return
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package
