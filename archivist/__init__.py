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
from .project import MapProject, load_project
from .registry import all_rules, get_rule

__all__ = [
    "__version__",
    "check",
    "load_project",
    "all_rules",
    "get_rule",
    "ArchivistError",
    "Finding",
    "Report",
    "Severity",
    "MapProject",
]
