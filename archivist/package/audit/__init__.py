"""``archivist audit``: is someone else's archive intact, complete enough to reuse, and clean?

The archive (a zip or a folder; an archivist package or any other archive of
map data) is opened with :mod:`archivist.package.safe`, so a hostile archive
is refused before anything is extracted and nothing is ever run or imported
from it. On the private copy, :func:`gather` collects what the archive says
about itself into :class:`ArchiveFacts`:

* for a BagIt bag, the verification of every checksum (:mod:`..bagcheck`);
* for a Data Package descriptor, its validation by the ``frictionless``
  library (structure, every table against its Table Schema, the foreign keys,
  every resource's bytes and hash) and against ``schemas/package.schema.json``
  when the package profile is there;
* the DataCite record against the mandatory properties of the DataCite
  Metadata Schema 4.x and the Schema 4.5 JSON Schema shipped in ``schemas/``,
  the PROV-JSON record's structure;
* for any archive, the reuse-readiness facts: licence, CRS of every layer,
  legend, authors, contact, provenance, description, file formats.

The map inside is loaded as a :class:`~archivist.project.MapProject` with the
facts attached as ``project.archive``; then every rule runs on it, those of
the ``archive`` family (which need the facts) and every check family (on the
packaged data). The result is an ordinary :class:`~archivist.model.Report`.

What a clean audit does not say: that the geology is right, that the authors
had the right to license the data, or that the archive is complete in ways no
file records (a missing field season leaves no trace).

Layout: :mod:`.facts` (``ArchiveFacts`` and the safe small readers),
:mod:`.records` (validators of the Data Package, DataCite and PROV records),
:mod:`.statements` (licence, authors, contact, lineage, description),
:mod:`.gather` (``gather()``: members, bag, checksum lists, layers' CRS, then
records and statements) and :mod:`.api` (``audit()``).
"""

from .api import audit
from .facts import ArchiveFacts, DataProblem, Statement
from .gather import CLOSED_FORMATS, PACKAGE_PARTS, gather
from .records import check_datacite, check_descriptor, check_provenance
from .statements import recognise_licence

_check_datacite = check_datacite  # the name tests/test_rules_archive.py imports

__all__ = [
    "CLOSED_FORMATS",
    "PACKAGE_PARTS",
    "ArchiveFacts",
    "DataProblem",
    "Statement",
    "audit",
    "check_datacite",
    "check_descriptor",
    "check_provenance",
    "gather",
    "recognise_licence",
]
