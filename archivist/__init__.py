"""archivist: check a digital geological map, package it, audit an archive.

The public API mirrors the command line::

    import archivist
    project = archivist.load_project("example_bundle")
    report = archivist.check(project)
    print(report.summary)
"""

from ._version import __version__
from .engine import check
from .errors import ArchivistError
from .model import Finding, Report, Severity
from .package import PackResult, pack
from .package.audit import audit
from .package.unpack import UnpackResult, unpack
from .diff import DiffReport, diff
from .project import MapProject, load_project
from .registry import all_rules, get_rule
from .scaffold import init_project

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
