"""Packages: writing one (``archivist pack``), and reading archives (audit, unpack).

``pack`` is the public entry point of packing; its modules each write one
part of the package (``layers``, ``tables``, ``datapackage``, ``datacite``,
``provenance``, ``readme``, ``packmanifest``, ``bagwrite``), and
``determinism`` and ``staging`` make the output reproducible and
all-or-nothing.
"""

from .pack import PackRefused, PackResult, pack

__all__ = ["pack", "PackResult", "PackRefused"]
