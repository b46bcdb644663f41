"""One reader per vocabulary that several parts of archivist read.

Each module here decides, in one place, how a piece of the mapper's own
wording is understood, so that the checks, the HTML report, the package
and the audit cannot read the same thing two ways:

* :mod:`.legend`: which legend column holds the unit code, name, ages,
  colour... (header spellings, the manifest's ``*_field`` keys);
* :mod:`.ages`: legend ages as mappers write them (chart names, ranges,
  combining forms such as Permo-Triassic, informal Early/Middle/Late,
  numerical ages in Ma), read against the chart in ``archivist.reference``;
* :mod:`.analytes`: analyte column headers, their units, total-iron
  notations, censored and not-analysed cell values;
* :mod:`.licences`: SPDX licence expressions, their names, and licences
  recognised in free text;
* :mod:`.statements`: sentences a check and a package file both say;
* :mod:`.structures`: kinds of structural measurement, orientation
  conventions, the north reference, overturned flags and rake.
* :mod:`.coordinates`: longitude/latitude columns beside a layer's own
  coordinates (header spellings, ``lon_field``/``lat_field``, decimal
  degrees and degrees-minutes-seconds).
* :mod:`.literature`: which analyses are compiled from publications
  (``source_field``, ``own_source``, ``origin_field``), DOI or reference
  key, and the references table's columns.

No module here imports from ``archivist.rules`` or ``archivist.package``.
"""
