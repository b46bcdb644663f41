"""archivist: check a digital geological map, package it, audit an archive.

The public API mirrors the command line::

    import archivist
    project = archivist.load_project("example_bundle")
    report = archivist.check(project)
    print(report.summary)

The names below are loaded on first use (PEP 562 module ``__getattr__``):
``import archivist`` and ``archivist --help`` load no geospatial library
(geopandas, shapely, pyogrio, pyproj, pandas, numpy); the first call that
needs one loads it.
"""

from __future__ import annotations

import sys
import types
from importlib import import_module
from typing import TYPE_CHECKING, Any

from ._version import __version__
from .errors import ArchivistError

if TYPE_CHECKING:
    from .diff import DiffReport, diff
    from .engine import check
    from .model import Finding, Report, Severity
    from .package import PackResult, pack
    from .package.audit import audit
    from .package.unpack import UnpackResult, unpack
    from .project import MapProject, load_project
    from .registry import all_rules, get_rule
    from .scaffold import init_project

_LAZY = {
    "check": ".engine",
    "load_project": ".project",
    "MapProject": ".project",
    "init_project": ".scaffold",
    "all_rules": ".registry",
    "get_rule": ".registry",
    "Finding": ".model",
    "Report": ".model",
    "Severity": ".model",
    "pack": ".package",
    "PackResult": ".package",
    "audit": ".package.audit",
    "unpack": ".package.unpack",
    "UnpackResult": ".package.unpack",
    "diff": ".diff",
    "DiffReport": ".diff",
}
"""Public name -> the module that defines it, imported on first use."""

__all__ = [
    "__version__",
    "check",
    "load_project",
    "init_project",
    "all_rules",
    "get_rule",
    "ArchivistError",
    "Finding",
    "Report",
    "Severity",
    "MapProject",
    "pack",
    "PackResult",
    "audit",
    "unpack",
    "UnpackResult",
    "diff",
    "DiffReport",
]


def __getattr__(name: str) -> Any:
    """Load a public name from its module on first use and keep it here."""
    where = _LAZY.get(name)
    if where is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(import_module(where, __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))


class _Archivist(types.ModuleType):
    """This package's module type: a public name that is also a submodule's (``diff``) stays the function.

    Importing the submodule ``archivist.diff`` binds it as an attribute of
    the package (the import system's ``setattr``); without this, that would
    hide the function ``archivist.diff`` once the submodule is loaded. The
    submodule stays reachable as ``sys.modules["archivist.diff"]`` and by
    ``from archivist.diff import ...``.
    """

    def __setattr__(self, name: str, value: Any) -> None:
        if name in _LAZY and isinstance(value, types.ModuleType):
            return
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Archivist
