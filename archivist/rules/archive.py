"""Family `archive`: is an archive intact, and complete enough for someone else to reuse?

These rules run under `archivist audit` only: they read what the audit found
out about the archive (`project.archive`, an
:class:`archivist.package.audit.ArchiveFacts`), so `needs=("archive",)`
skips them in a plain `archivist check`. Integrity rules (checksums, the bag,
the descriptor, the DataCite and PROV records) concern archivist packages and
any archive that carries checksums; reuse-readiness rules concern every
archive, and each finding says what to ask the original authors for.
"""

from __future__ import annotations

from collections import OrderedDict
from typing import TYPE_CHECKING, Iterator

import numpy as np

from ..model import Hit, Severity
from ..registry import rule
from ..vocab.legend import column as legend_column
from ..vocab.literature import compilation, reference_keys

if TYPE_CHECKING:
    from ..engine import CheckContext
    from ..project import MapProject

NEEDS = ("archive",)
LEGEND_DETAIL = ("name", "age", "description")


def _first(items, n=8):
    items = list(items)
    more = f" and {len(items) - n} more" if len(items) > n else ""
    return ", ".join(items[:n]) + more


def _by_file(problems):
    """One problem per file, in order (a file in two manifests is one damaged file)."""
    out = OrderedDict()
    for file, message in problems:
        out.setdefault(file, message)
    return out


def _file_hits(facts, kind: str, loose=()):
    """One hit per file: the bag's problems of ``kind``, then those from loose checksum lists."""
    problems = [(p.file, p.message) for p in facts.bag.of(kind)] if facts.bag is not None else []
    for file, message in _by_file([*problems, *loose]).items():
        yield Hit(message, layer=file, features=(file,))


# ------------------------------------------------------------------ integrity

@rule("archive-checksum-mismatch", family="archive", severity="error", needs=NEEDS)
def archive_checksum_mismatch(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A file's checksum differs from the one the archive records for it.

    Catches
    -------
    Every file of a BagIt bag whose checksum differs from its line in a
    payload or tag manifest (`manifest-sha256.txt`, `tagmanifest-sha256.txt`,
    RFC 8493), and every file listed with a different checksum in a loose
    checksum list of any archive (`SHA256SUMS`, `*.md5`, in the `sha256sum`
    format). Each finding names the file and both checksums' first digits.

    Why it matters
    --------------
    The file is not the one the authors deposited: it was damaged in storage
    or transfer, or edited afterwards. Anything built on it (and any check of
    it) may be wrong without anyone noticing.

    Fix
    ---
    Download the archive again from the repository and audit the new copy; if
    the file still differs, ask the repository or the authors for an intact
    copy. Never re-compute the manifest to make the finding go away.

    Example
    -------
    One byte changed in `data/tables/legend.csv` gives "data/tables/legend.csv:
    SHA256 is 5e0c... where manifest-sha256.txt records 9a41...".
    """
    yield from _file_hits(project.archive, "mismatch", project.archive.checksum_mismatches)


@rule("archive-file-missing", family="archive", severity="error", needs=NEEDS)
def archive_file_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A file the archive lists (in a manifest or checksum list) is not in it.

    Catches
    -------
    Files named in a bag's payload or tag manifest, in `fetch.txt`, or in a
    loose checksum list, that are absent; also a bag without `bagit.txt` or
    without its `data/` folder. One finding per file.

    Why it matters
    --------------
    Part of the deposit is lost: a layer, a table or a metadata file the
    authors meant to hand on. archivist never downloads the files a
    `fetch.txt` points at.

    Fix
    ---
    Download the archive again (an interrupted download or unzip is the usual
    cause), or ask the repository or the authors for the missing file.

    Example
    -------
    A package whose `data/tables/analyses.csv` was deleted gives
    "data/tables/analyses.csv is listed in manifest-sha256.txt but is not in the payload".
    """
    yield from _file_hits(project.archive, "missing", project.archive.checksum_missing)


@rule("archive-file-unlisted", family="archive", severity="error", needs=NEEDS)
def archive_file_unlisted(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A payload file of a bag is not listed in its manifest.

    Catches
    -------
    Files under `data/` of a BagIt bag that a payload manifest does not
    list (RFC 8493 requires every payload file in every payload manifest).

    Why it matters
    --------------
    The file was added after the bag was made, so nothing proves it is what
    the authors deposited; it may be a stray file, or a replacement.

    Fix
    ---
    Ask the authors whether the file belongs to the deposit; if it does, they
    should make a new package (`archivist pack`) so that it is listed.

    Example
    -------
    A `data/notes.txt` dropped into a package gives "data/notes.txt is in the
    payload but not in manifest-sha256.txt".
    """
    yield from _file_hits(project.archive, "unlisted")


@rule("bag-structure-invalid", family="archive", severity="error", needs=NEEDS)
def bag_structure_invalid(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The bag's own files break the BagIt rules (RFC 8493).

    Catches
    -------
    A `bagit.txt` without `BagIt-Version` or `Tag-File-Character-Encoding`,
    no payload manifest, manifest lines that are not "checksum path", paths
    leading outside the bag, a manifest in an algorithm archivist cannot
    compute, a tag manifest that omits a payload manifest, and a
    `Payload-Oxum` in `bag-info.txt` that does not match the payload's size
    and file count.

    Why it matters
    --------------
    Repository and preservation tools validate bags by these rules; a bag
    that breaks them may be refused, and its checksums cannot all be trusted.

    Fix
    ---
    Ask the authors to re-make the package with `archivist pack` (or any
    BagIt tool) from their project.

    Example
    -------
    `Payload-Oxum: 1000.3` on a payload of 1200 bytes in 3 files gives
    "bag-info.txt: Payload-Oxum 1000.3 but the payload holds 1200 bytes in 3 files".
    """
    facts = project.archive
    if facts.bag is None:
        return
    for p in facts.bag.of("structure"):
        yield Hit(p.message, layer=p.file)


@rule("bag-tags-unprotected", family="archive", severity="warning", needs=NEEDS)
def bag_tags_unprotected(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Tag files of a bag are covered by no tag manifest.

    Catches
    -------
    A BagIt bag without any `tagmanifest-<algorithm>.txt`, or whose tag
    manifests leave out tag files (`bag-info.txt`, `bagit.txt`, the payload
    manifests, other tag files). RFC 8493 (2.2.1) allows a bag without a tag
    manifest; what is lost is named: a change to those files cannot be
    detected. It does not say whether they were changed.

    Why it matters
    --------------
    The payload manifest is what proves the data intact; if nothing protects
    it, whoever changes a data file can change its line in the manifest too,
    and the bag still verifies. archivist packages always carry a tag
    manifest, so its absence there means it was removed.

    Fix
    ---
    Ask the repository for the bag as deposited, or for its tag manifest; a
    bag you make yourself should have `tagmanifest-sha256.txt`.

    Example
    -------
    A package whose `tagmanifest-sha256.txt` was deleted gives "The bag has
    no tag manifest: nothing protects bag-info.txt, bagit.txt,
    manifest-sha256.txt: a change to them ... cannot be detected".
    """
    facts = project.archive
    if facts.bag is None or not facts.bag.unprotected:
        return
    files = facts.bag.unprotected
    has_tag = any(m.startswith("tagmanifest-") for m in facts.members if "/" not in m)
    what = "No tag manifest lists" if has_tag else "The bag has no tag manifest: nothing protects"
    yield Hit(
        f"{what} {_first(files)}: a change to them, the payload manifests included, cannot be detected "
        "(RFC 8493 allows this; the checksums in the payload manifest are then only as trustworthy as the manifest itself).",
        layer=files[0],
        features=tuple(files),
    )


@rule("package-part-missing", family="archive", severity="error", needs=NEEDS)
def package_part_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """An archivist package lacks one of the files its layout always has.

    Catches
    -------
    A BagIt bag without one of `data/datapackage.json`, `data/map.gpkg`,
    `data/README.md`, `data/LICENSE.txt`, `data/CITATION.cff`,
    `data/metadata/datacite.json`, `data/metadata/provenance.json`,
    `data/metadata/validation-report.json` or `data/metadata/crs.wkt`. A bag
    with no `datapackage.json` at all is taken for some other kind of bag and
    not held to archivist's layout.

    Why it matters
    --------------
    Each part answers a question of the next user (what the files are, how
    to cite, under what licence, how the data were made and checked); a
    package without it cannot answer, even when its checksums are intact.

    Fix
    ---
    Ask the authors for a package made by `archivist pack`, which writes every
    part; or for the missing file itself.

    Example
    -------
    A package whose `data/metadata/provenance.json` was removed and re-bagged
    gives "data/metadata/provenance.json is missing from the package".
    """
    facts = project.archive
    if not facts.is_package or "data/datapackage.json" in facts.parts_missing:
        return
    for part in facts.parts_missing:
        yield Hit(f"{part} is missing from the package: it is part of every archivist package.", layer=part, features=(part,))


@rule("descriptor-invalid", family="archive", severity="error", needs=NEEDS)
def descriptor_invalid(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The Data Package descriptor (`datapackage.json`) is not valid.

    Catches
    -------
    A `datapackage.json` that is not JSON, that the `frictionless` library
    rejects as a Data Package descriptor, that breaks the package profile
    `schemas/package.schema.json`, whose resources point outside the
    package or at remote addresses (which are never fetched), or in which
    two resources describe one file (a file listed twice is often another
    file's entry overwritten, so that one is not described at all).

    Why it matters
    --------------
    The descriptor is how software finds and reads the files; an invalid one
    makes the package unreadable to Data Package tools and repository
    harvesters.

    Fix
    ---
    Ask the authors to re-make the package with `archivist pack`; a hand-edited
    descriptor is the usual cause.

    Example
    -------
    A resource with `"path": "../../etc/passwd"` gives "datapackage.json:
    resource 'units': '../../etc/passwd' leads outside the package; it was not read".
    """
    facts = project.archive
    for message in dict.fromkeys(facts.descriptor_problems):
        yield Hit(message, layer=facts.descriptor_source or "datapackage.json")


@rule("package-data-invalid", family="archive", severity="error", needs=NEEDS)
def package_data_invalid(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A file of a Data Package fails its description: types, keys, links, size or hash.

    Catches
    -------
    What the `frictionless` library finds when it validates every resource
    against the descriptor: cells that do not fit their Table Schema type,
    duplicate primary keys, foreign keys without a target (an analysis whose
    sample is not in the samples table, a unit code not in the legend), and
    files whose bytes or hash differ from the descriptor's (plain files,
    `"type": "file"` such as photos and scans, are measured by archivist
    itself, read in blocks, with the same error types). At most 200
    problems per resource are reported. A file the bag's manifest already
    reports as missing or changed is not reported again here.

    Why it matters
    --------------
    The tables do not say what their description promises: links between
    them are broken, or a file was changed after the descriptor was written.

    Fix
    ---
    Ask the authors for a corrected package; if only the hash differs, audit a
    fresh download first.

    Example
    -------
    An analyses row for sample TM24-9999, which is not in the samples table,
    gives "analyses: Row at position "5" violates the foreign key ...".
    """
    facts = project.archive
    damaged = {p.file for p in facts.bag.of("mismatch")} if facts.bag is not None else set()
    gone = {p.file for p in facts.bag.of("missing")} if facts.bag is not None else set()
    for p in facts.data_problems:
        # a file the bag already reports as missing or changed is one finding, not two
        if p.file in gone or (p.file in damaged and p.type in ("hash-count", "byte-count")):
            continue
        yield Hit(f"{p.resource}: {p.message}", layer=p.resource, features=(p.file,) if p.file else ())


@rule("datacite-record-invalid", family="archive", severity="error", needs=NEEDS)
def datacite_record_invalid(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The DataCite metadata record is not valid.

    Catches
    -------
    A `metadata/datacite.json` that is not JSON, lacks one of the mandatory
    properties (creators, titles, publisher, publicationYear, types,
    schemaVersion: the required list of the DataCite Metadata Schema 4.5 JSON
    Schema), has a creator without a name, or breaks that JSON Schema (shipped
    in `schemas/datacite-v4.5.json`, so the result never depends on what else
    is installed).

    Why it matters
    --------------
    The repository registers the DOI from this record; an invalid record is
    refused, or makes the deposit hard to find and cite.

    Fix
    ---
    Ask the authors for a corrected record, or re-make the package with
    `archivist pack`, which fills the record from the manifest.

    Example
    -------
    A record without `publicationYear` gives "metadata/datacite.json: the
    mandatory property 'publicationYear' is missing".
    """
    facts = project.archive
    for message in dict.fromkeys(facts.datacite_problems):
        yield Hit(message, layer=facts.datacite_source)


@rule("provenance-record-invalid", family="archive", severity="error", needs=NEEDS)
def provenance_record_invalid(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The provenance record is not a usable W3C PROV-JSON document.

    Catches
    -------
    A `metadata/provenance.json` that is not JSON, has members PROV-JSON does
    not define, records no entity, activity or agent, uses an undeclared
    prefix, has relations (generation, use, derivation, attribution,
    association) that refer to records it does not hold, or records no
    derivation or generation at all.

    Why it matters
    --------------
    Provenance tells the next user what the map was made from and by whom; a
    broken record cannot be read by PROV tools and leaves that untold.

    Fix
    ---
    Ask the authors for a corrected record, or re-make the package with
    `archivist pack`.

    Example
    -------
    A `wasDerivedFrom` whose `prov:usedEntity` is "input:units.shp" while no
    such entity is recorded gives "... refers to 'input:units.shp' (prov:usedEntity),
    which is not recorded".
    """
    facts = project.archive
    for message in dict.fromkeys(facts.provenance_problems):
        yield Hit(message, layer=facts.provenance_source)


@rule("archive-checksums-absent", family="archive", severity="warning", needs=NEEDS)
def archive_checksums_absent(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The archive carries no checksums, so damage to its files cannot be detected.

    Catches
    -------
    An archive that is not a BagIt bag, has no Data Package descriptor with
    file hashes, and holds no checksum list (`SHA256SUMS`, `*.sha256`,
    `*.md5`...).

    Why it matters
    --------------
    A truncated download, a bad disk or a careless edit changes a file
    silently; without a checksum recorded by the authors nobody can tell the
    file now differs from the one deposited.

    Fix
    ---
    Ask the authors (or the repository, which often records a checksum per
    file) for the SHA-256 of each file; compare them with `sha256sum`.

    Example
    -------
    A zip of shapefiles and a CSV gives "The archive records no checksum for
    any of its 7 files: ask the authors or the repository for SHA-256 sums".
    """
    facts = project.archive
    hashed = isinstance(facts.descriptor, dict) and any(
        isinstance(r, dict) and r.get("hash") for r in facts.descriptor.get("resources") or []
    )
    if facts.bag is None and not facts.checksum_files and not hashed:
        yield Hit(
            f"The archive records no checksum for any of its {len(facts.members)} files: ask the authors or the repository "
            "for SHA-256 sums, or for the data as a BagIt package.",
            layer=facts.label,
        )


# ------------------------------------------------------------------ reuse-readiness

@rule("archive-licence-missing", family="archive", severity="error", needs=NEEDS)
def archive_licence_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The archive states no licence anywhere.

    Catches
    -------
    No licence file (`LICENSE`, `LICENCE`, `COPYING`...), no licence section in
    a README, no `licenses` in a Data Package descriptor, no `rightsList` in a
    DataCite record, no `license` in `CITATION.cff` and no `map.licence` in an
    `archivist.toml`.

    Why it matters
    --------------
    Without a licence the data are, in most jurisdictions, all rights reserved:
    the next mapper may not legally copy, change or republish them, however
    openly they were downloaded.

    Fix
    ---
    Ask the authors (or the rights holder) to state a licence, ideally a
    standard open one by its SPDX id such as `CC-BY-4.0` or `CC0-1.0`, in
    writing and in the archive.

    Example
    -------
    A folder of shapefiles and a legend CSV gives "No licence is stated
    anywhere in the archive: ask the authors ...".
    """
    facts = project.archive
    if not facts.licences:
        yield Hit(
            "No licence is stated anywhere in the archive (no licence file, licence section, descriptor or manifest entry): "
            "ask the authors which licence the data are under, ideally an SPDX id such as CC-BY-4.0.",
            layer=facts.label,
        )


@rule("archive-licence-unclear", family="archive", severity="error", needs=NEEDS)
def archive_licence_unclear(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A licence is stated but cannot be identified, or the archive states different licences.

    Catches
    -------
    Licence statements in which no licence of the SPDX list can be recognised
    (by an SPDX id, an `SPDX-License-Identifier` line, a Creative Commons or
    Open Data Commons address or full name), and archives whose statements
    name different licences (say `CC-BY-4.0` in the README and `CC0-1.0` in
    the descriptor).

    Why it matters
    --------------
    "Free for research use" or two contradicting licences leave the next user
    unsure what they may do; repositories and harvesters need one
    recognisable licence.

    Fix
    ---
    Ask the authors to confirm one licence, by its SPDX id, and to state it the
    same way in every file.

    Example
    -------
    A `LICENSE.txt` saying "Free to use for non-commercial research" gives
    "LICENSE.txt states a licence archivist cannot identify ...".
    """
    facts = project.archive
    if not facts.licences:
        return
    ids: OrderedDict[str, list[str]] = OrderedDict()
    for st in facts.licence_ids:
        ids.setdefault(st.text, []).append(st.source)
    if not ids:
        st = facts.licences[0]
        snippet = " ".join(st.text.split())[:80]
        yield Hit(
            f"{st.source} states a licence archivist cannot identify ('{snippet}'): ask the authors for the licence's SPDX id "
            "(e.g. CC-BY-4.0).",
            layer=st.source.split(" ")[0],
        )
        return
    if len(ids) > 1:
        parts = "; ".join(f"{spdx} in {_first(sources, 3)}" for spdx, sources in ids.items())
        yield Hit(f"The archive states different licences ({parts}): ask the authors which one applies.", layer=facts.label)


@rule("archive-crs-undeclared", family="archive", severity="error", needs=NEEDS)
def archive_crs_undeclared(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A layer of the archive declares no coordinate reference system.

    Catches
    -------
    Vector layers with no CRS (typically a shapefile without its `.prj`), and
    archives in which no layer and no metadata declares one.

    Why it matters
    --------------
    Coordinates without a CRS cannot be placed on the ground with certainty:
    a wrong guess shifts the map by metres to hundreds of kilometres.

    Fix
    ---
    Ask the authors for the CRS (an EPSG code such as EPSG:32633) of each
    layer, or for the missing `.prj` files.

    Example
    -------
    `units.shp` without `units.prj` gives "units.shp declares no CRS: ask the
    authors for its EPSG code or its .prj file".
    """
    facts = project.archive
    undeclared = [label for label, _, raw in facts.layer_crs if raw is None]
    for label in undeclared:
        yield Hit(f"{label} declares no CRS: ask the authors for its EPSG code or its .prj file.", layer=label.split(":")[0], features=(label,))
    if not facts.layer_crs and not facts.declared_crs and project.layers:
        yield Hit("Neither the layers nor the metadata declare a CRS: ask the authors for the map's EPSG code.", layer=facts.label)


@rule("archive-crs-inconsistent", family="archive", severity="error", needs=NEEDS)
def archive_crs_inconsistent(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The layers of the archive are in different coordinate reference systems.

    Catches
    -------
    Layers whose CRS differ from one another (compared by pyproj as the same
    EPSG code or the same definition), and a declared map CRS
    (`metadata/crs.wkt`, `map.crs`) that no layer is in. In an archivist
    package only the GeoPackage master is compared; its GeoJSON copies are in
    WGS 84 by RFC 7946.

    Why it matters
    --------------
    The next user must know which CRS is the master; layers in different
    systems overlaid without reprojection do not line up, and the archive
    does not say which one was edited.

    Fix
    ---
    Ask the authors which CRS is the map's, and for every layer in it.

    Example
    -------
    `units.shp` in EPSG:32633 and `samples.geojson` in EPSG:4326 give "The
    layers are in 2 CRSs: EPSG:32633 (...) for units.shp; EPSG:4326 (...) for samples.geojson".
    """
    facts = project.archive
    groups: list[tuple[str, object, list[str]]] = []  # (label of the CRS, parsed CRS, layers)
    for label, text, raw in facts.layer_crs:
        if raw is None:
            continue
        crs = _crs(raw)
        for name, other, members in groups:
            if crs is not None and other is not None and crs.equals(other, ignore_axis_order=True):
                members.append(label)
                break
        else:
            groups.append((text or str(raw), crs, [label]))
    if len(groups) > 1:
        parts = "; ".join(f"{name} for {_first(members, 4)}" for name, _, members in groups)
        yield Hit(f"The layers are in {len(groups)} CRSs: {parts}. Ask the authors which is the map's CRS.", layer=facts.label)
    elif len(groups) == 1:
        name, crs, _ = groups[0]
        for st in facts.declared_crs:
            declared = _crs(st.text)
            if declared is not None and crs is not None and not declared.equals(crs, ignore_axis_order=True):
                yield Hit(f"{st.source} declares {declared.name} but the layers are in {name}: ask the authors which is right.", layer=st.source.split(" ")[0])


def _crs(text):
    import pyproj

    try:
        return pyproj.CRS.from_user_input(text)
    except pyproj.exceptions.CRSError:
        return None


@rule("archive-legend-missing", family="archive", severity="error", needs=NEEDS)
def archive_legend_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The archive holds no legend for its map units.

    Catches
    -------
    Archives with a unit layer but no legend table: no table named in a
    manifest, and no CSV or XLSX with a `unit` column and a `name`,
    `description` or `age` column that archivist could recognise.

    Why it matters
    --------------
    Unit codes such as "KES" or "Dl2" mean nothing without the legend: the
    next mapper cannot tell what rock, age or formation each polygon is.

    Fix
    ---
    Ask the authors for the legend as a table: one row per unit code with its
    name, age and description (and colour, if the printed map has one).

    Example
    -------
    A folder with `units.shp` only gives "The archive has no legend table:
    ask the authors for one row per unit code ...".
    """
    facts = project.archive
    if project.has("units") and not project.has("legend"):
        units = project.layers["units"].text("unit_field")
        codes = sorted({u for u in units if u}) if units is not None else []
        what = f" ({len(codes)} codes: {_first(codes)})" if codes else ""
        yield Hit(
            f"The archive has no legend table for its units{what}: ask the authors for one row per unit code with its name, "
            "age and description.",
            layer=facts.label,
        )


@rule("archive-legend-incomplete", family="archive", severity="error", needs=("archive", "units", "legend"))
def archive_legend_incomplete(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The legend lacks units that are mapped, or its entries lack name, age or description.

    Catches
    -------
    Unit codes used in the unit layer that have no legend row (an error), and
    legend rows whose name, age or description is absent or empty (a
    warning; a column that does not exist counts as empty for every row).

    Why it matters
    --------------
    A polygon whose code is not explained cannot be reused; an entry without
    an age or a description forces the next mapper to guess, or to find the
    original report.

    Fix
    ---
    Ask the authors for the missing entries, or for the text of the printed
    legend.

    Example
    -------
    Polygons coded "QAL" with no legend row give "Units mapped but not in the
    legend: QAL (3 polygons): ask the authors for their name, age and
    description".
    """
    layer = project.layers["units"]
    legend = project.tables["legend"]
    units = layer.text("unit_field")
    code_col = legend_column(legend, "unit")
    if units is None or code_col is None:
        return
    from ..readers import text_column

    codes = text_column(legend.frame[code_col])
    known = set(codes)
    present = np.array([u for u in units if u], dtype=object)
    mapped, counts = np.unique(present, return_counts=True) if len(present) else (np.array([], dtype=object), np.array([], dtype=int))
    absent = [(str(c), int(n)) for c, n in zip(mapped, counts) if c not in known]
    if absent:
        text = _first([f"{c} ({n} polygon{'s' if n != 1 else ''})" for c, n in absent])
        yield Hit(
            f"Units mapped but not in the legend: {text}: ask the authors for their name, age and description.",
            layer="legend",
            features=tuple(c for c, _ in absent),
        )
    lacking: dict[str, list[str]] = OrderedDict()
    for want in LEGEND_DETAIL:
        col = legend_column(legend, want)
        values = text_column(legend.frame[col]) if col else np.full(len(codes), "", dtype=object)
        for code, v in zip(codes, values):
            if code and not str(v).strip():
                lacking.setdefault(code, []).append(want)
    if lacking:
        text = _first([f"{c} ({', '.join(w)})" for c, w in lacking.items()])
        yield Hit(
            f"Legend entries without {'/'.join(LEGEND_DETAIL)}: {text}: ask the authors for the missing text.",
            layer="legend",
            features=tuple(lacking),
            severity=Severity.WARNING,
        )


@rule("archive-references-incomplete", family="archive", severity="error", needs=("archive", "analyses"))
def archive_references_incomplete(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The archive's analyses cite reference keys that its references table does not hold.

    Catches
    -------
    Archives whose analyses table has rows compiled from publications
    (a source column other than the team's own marker, as
    `archivist.vocab.literature` reads it) citing keys that are not in the
    archive's references table, or citing keys while the archive has no
    references table at all. One finding lists the keys and how many rows
    cite each. Rows citing a DOI are not concerned: a DOI names its work by
    itself.

    Why it matters
    --------------
    A key such as "Fennick2009" means nothing without the table that says
    which work it is: the compiled values cannot be traced to their
    publications, checked or credited.

    Fix
    ---
    Ask the authors for the references table, or for the entries of the
    keys listed.

    Example
    -------
    An archive whose analyses cite `Vell2011` with no such row gives
    "The analyses cite reference keys missing from tables/references.csv:
    Vell2011 (1 row): ask the authors for the works they stand for".
    """
    comp = compilation(project.tables["analyses"])
    refs = project.tables.get("references")
    keys = reference_keys(refs) if refs is not None else set()
    missing: dict[str, int] = OrderedDict()
    for key in comp.source[comp.keyed]:
        if str(key) not in keys:
            missing[str(key)] = missing.get(str(key), 0) + 1
    if not missing:
        return
    text = _first([f"{k} ({n} row{'s' if n != 1 else ''})" for k, n in missing.items()])
    where = f"missing from {refs.source}" if refs is not None else "but the archive has no references table"
    yield Hit(f"The analyses cite reference keys {where}: {text}: ask the authors for the works they stand for.",
              layer="analyses", features=tuple(missing))


@rule("archive-authors-missing", family="archive", severity="error", needs=NEEDS)
def archive_authors_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The archive names no authors.

    Catches
    -------
    No authors or creators in a manifest, Data Package descriptor, DataCite
    record or `CITATION.cff`, and no authors section in a README.

    Why it matters
    --------------
    The map cannot be cited, credit cannot be given, and nobody can be asked
    about the data; many licences (CC-BY among them) require attribution.

    Fix
    ---
    Ask the repository or the original team for the authors' names (and ORCID
    iDs) and record them with the data.

    Example
    -------
    A bare folder of layers gives "No authors are named anywhere in the
    archive: ask the repository or the original team who made the map".
    """
    facts = project.archive
    if not facts.authors:
        yield Hit(
            "No authors are named anywhere in the archive: ask the repository or the original team who made the map "
            "(names and ORCID iDs), so it can be cited.",
            layer=facts.label,
        )


@rule("archive-contact-missing", family="archive", severity="warning", needs=NEEDS)
def archive_contact_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The archive gives no way to contact the authors or the data's keeper.

    Catches
    -------
    No e-mail address or contact in a manifest (`map.contact`, an author's
    `email`), `bag-info.txt` (`Contact-Name`, `Contact-Email`), a DataCite
    contributor of type ContactPerson, `CITATION.cff`, a descriptor
    contributor, or anywhere in a README.

    Why it matters
    --------------
    Questions the archive does not answer (what a code means, where a sample
    is kept) can only be asked of someone; without a contact they stay open.

    Fix
    ---
    Ask the repository for the depositor's contact, and record it with the
    data (`map.contact` in `archivist.toml`).

    Example
    -------
    A package whose manifest names authors without e-mail and no contact gives
    "The archive gives no contact: ...".
    """
    facts = project.archive
    if not facts.contacts:
        yield Hit(
            "The archive gives no contact (no e-mail, contact person or Contact-Name): ask the repository how to reach the "
            "authors or the data's keeper.",
            layer=facts.label,
        )


@rule("archive-lineage-missing", family="archive", severity="warning", needs=NEEDS)
def archive_lineage_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The archive does not say how the map was made or what it came from.

    Catches
    -------
    No PROV record, no `sources` in a Data Package descriptor, no Methods
    description in a DataCite record, no `map.derived_from`, and no README
    section headed methods, sources, lineage, provenance or history.

    Why it matters
    --------------
    How a map was made (field seasons, base maps, earlier surveys, digitising
    scale) decides what it can be used for; without it the next mapper cannot
    judge which lines to trust.

    Fix
    ---
    Ask the authors how the map was made: field work and dates, sources and
    earlier maps used, how it was digitised and checked.

    Example
    -------
    A folder of layers and a one-line README gives "The archive does not say
    how the map was made ...".
    """
    facts = project.archive
    if not facts.lineage:
        yield Hit(
            "The archive does not say how the map was made or what it came from: ask the authors for the field work and "
            "its dates, the sources and earlier maps used, and how the map was digitised.",
            layer=facts.label,
        )


@rule("archive-description-missing", family="archive", severity="warning", needs=NEEDS)
def archive_description_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The archive does not describe what it holds.

    Catches
    -------
    No abstract or description in a manifest, descriptor, DataCite record,
    `CITATION.cff` or `bag-info.txt`, and no README of more than a line.

    Why it matters
    --------------
    A stranger who finds the archive in ten years cannot tell what area, scale
    and purpose the map has without opening every file.

    Fix
    ---
    Ask the authors for an abstract: area, scale, what was mapped and why,
    and what the files are.

    Example
    -------
    A zip of shapefiles and nothing else gives "The archive has no description
    ...".
    """
    facts = project.archive
    if not facts.descriptions:
        yield Hit(
            "The archive has no description (no abstract, descriptor description or README): ask the authors what area, "
            "scale and purpose the map has and what each file is.",
            layer=facts.label,
        )


@rule("archive-format-closed", family="archive", severity="warning", needs=NEEDS)
def archive_format_closed(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Files are in closed or vendor-bound formats.

    Catches
    -------
    Files whose format has no open specification or is fully readable only by
    one vendor's software (common practice in repositories' format
    guidance): ArcMap/ArcGIS Pro documents and layer files, File and
    personal geodatabases, Access databases, AutoCAD drawings, legacy binary
    Excel and Word files, ArcInfo interchange, MapInfo tables, ECW and MrSID
    images. Each finding names the file and what to ask for instead.

    Why it matters
    --------------
    Software changes faster than maps age: data kept only in a closed format
    may not open in ten years, or only with a licence the next user lacks.

    Fix
    ---
    Ask the authors for the same data in open formats: GeoPackage for layers,
    CSV (UTF-8) for tables, GeoTIFF for images, PDF/A or Markdown for text.

    Example
    -------
    `legend.xls` gives "legend.xls is a legacy binary Excel workbook; ask for CSV or XLSX".
    """
    facts = project.archive
    for rel, what in facts.closed_files:
        yield Hit(f"{rel} is {what}.", layer=rel, features=(rel,))


@rule("archive-file-unopened", family="archive", severity="warning", needs=NEEDS)
def archive_file_unopened(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Files of the archive were held back unopened or unread, and why.

    Catches
    -------
    Every file or folder, at any depth, that the audit did not hand to a
    reader because it could reach outside the archive or exhaust the machine:
    a "GeoPackage", GeoJSON, shapefile or other layer whose content is not a
    self-contained format (a GDAL virtual layer can point at any file or
    network address), a workbook that fails the zip checks, a folder in a
    multi-file vector format, and a structured file (`CITATION.cff`) over
    the size, depth or alias-expansion limits or not parseable. Files a
    manifest names are reported by `layer-unreadable` instead; the Data
    Package, DataCite and PROV records by their own rules. It does not say
    whether the held file was meant harmlessly.

    Why it matters
    --------------
    What the audit could not read it could not check: a layer held back may
    be the map itself, and a metadata file not read may hold the licence or
    the authors.

    Fix
    ---
    Ask the authors for the files in self-contained open formats (GeoPackage,
    GeoJSON, CSV) and for plain metadata files; a virtual layer or an alias
    bomb in a deposit is worth reporting to the repository.

    Example
    -------
    `sub/units.gpkg` holding GDAL virtual-layer XML gives "sub/units.gpkg was
    not opened: its content is a GDAL virtual layer or service description,
    which can make GDAL read files or network addresses outside the archive."
    """
    facts = project.archive
    for rel, why in facts.unread:
        yield Hit(f"{rel} was not opened: {why}.", layer=rel, features=(rel,))


@rule("archive-map-missing", family="archive", severity="error", needs=NEEDS)
def archive_map_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The archive holds no layer of map-unit polygons that archivist can find.

    Catches
    -------
    Archives in which no manifest names a unit layer and no polygon layer
    with a unit field (`unit`, `code`, `formation`...) is found among the
    files archivist can open safely (GeoPackage, shapefile, FlatGeobuf,
    GeoJSON, in the folders the role guessing looks into; files held back
    unopened are listed by `archive-file-unopened`).

    Why it matters
    --------------
    The unit polygons are the map; an archive without them (or with them only
    in a format that cannot be opened) cannot be checked or reused as a map.

    Fix
    ---
    Ask the authors for the unit polygons as a GeoPackage with a unit-code
    field, or add an `archivist.toml` naming the layer if it is there under
    another name.

    Example
    -------
    A zip holding only PDFs and a CSV gives "No layer of map-unit polygons
    was found ...".
    """
    facts = project.archive
    if not project.has("units"):
        held = f" Not opened: {_first(facts.held)}." if facts.held else ""
        yield Hit(
            "No layer of map-unit polygons was found: ask the authors for the unit polygons as a GeoPackage with a "
            f"unit-code field.{held}",
            layer=facts.label,
        )


@rule("archive-fieldwork-missing", family="archive", severity="error", needs=NEEDS)
def archive_fieldwork_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The archive's map cites photos, field-book scans or stations that the archive does not hold.

    Catches
    -------
    Each row of a `[files.photos]` or `[files.fieldbooks]` link table of the
    archive's manifest (in an archivist package, `tables/photos.csv` and
    `tables/fieldbooks.csv`) whose file is not in the archive, and each row
    that ties a file to a station missing from the archive's stations layer
    (when the archive has one). Files the checksums list but the archive
    lacks are `archive-file-missing`; this rule is about what the map's own
    tables cite.

    Why it matters
    --------------
    Photos and field notes are the evidence under the map; an archive that
    lists them without holding them, or ties them to stations it does not
    hold, cannot be re-examined, and the originals are often lost once the
    project ends.

    Fix
    ---
    Ask the authors for the missing photos, scans or stations (the finding
    names each with its row); a package made again with `archivist pack`
    from the complete project holds them.

    Example
    -------
    A package whose `tables/photos.csv` row 4 names `photos/ST03_1.jpg`,
    which was left out of the zip: "photo photos/ST03_1.jpg is cited by
    tables/photos.csv row 4 (station ST03) but is not in the archive".
    """
    from ..photos import media_sets

    stations = project.layers.get("stations")
    known = {str(i).strip() for i in stations.ids} if stations is not None else None
    for kind, word, media in media_sets(project):
        for m in media.missing:
            at = f" (station {m.station})" if m.station else ""
            yield Hit(f"{word} {m.name} is cited by {media.link_source} row {m.row}{at} but is not in the archive.",
                      layer=kind, features=(m.name,))
        if known is None:
            continue
        for f in media.files:
            if f.station and f.link == "table" and f.station not in known:
                yield Hit(f"{word} {f.rel} is tied by {media.link_source} row {f.row} to station {f.station}, "
                          "which is not in the archive's stations.", layer=kind, features=(f.rel, f.station))
