"""``archivist repair``: a corrected copy of a map, every change listed and bounded.

Interface shared by the repair modules (stable):

* :mod:`archivist.repair.model`: :class:`~.model.Change` (one change:
  repair, layer, features before and after, unit codes, area moved,
  maximum vertex shift, the geometry before and after),
  :class:`~.model.Left` (a defect left for the geologist, with the reason),
  :class:`~.model.RepairSettings` (the thresholds of the run) and
  :class:`~.model.RepairState` (the working copies: ``units``, ``lines``,
  ``points``, with the feature id in column ``FEATURE_ID``).
* :mod:`archivist.repair.registry`: ``@repair(name, order=..., default=...,
  layer=...)`` registers ``def f(state, settings) -> (changes, left)``;
  ``select(only, skip, build_polygons)`` gives the repairs of a run in order.

Run order (``order``): ``build-polygons`` 0 (off by default), the polygon
repairs of :mod:`.polygons` 10-50 (``snap-edges`` 10, ``resolve-overlaps``
20, ``fill-gaps`` 30, ``merge-slivers`` 40, ``dissolve-same-unit`` 50), the
line repairs of :mod:`.lines` 60-80.

:mod:`.api` runs them (``repair()``), :mod:`.log` writes the change log.
Like the rest of the package, nothing here is imported by ``import archivist``.
"""
