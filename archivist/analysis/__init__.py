"""The analyses several rules share, computed once per check and returned as values.

- :mod:`.arrays`: whole-array helpers (coordinate hashing, grouping, parts of geometries, widths);
- :mod:`.messages`: how sizes and lists are written in finding messages, metres per map unit;
- :mod:`.polygons`: the unit polygons as the checks see them (:class:`~.polygons.Units`);
- :mod:`.halfedges`: the half-edge table of the unit polygons (:class:`~.halfedges.Edges`);
- :mod:`.coverage`: gaps, overlaps, misfits and the map extent (:class:`~.coverage.Coverage`);
- :mod:`.lines`: the lines layer as a network of parts and segments (:class:`~.lines.LineNetwork`);
- :mod:`.nearness`: which part of a line lies farther than the tolerance from other geometry;
- :mod:`.placement`: each layer's features placed on the globe (for the CRS checks);
- :mod:`.guard`: running a GEOS operation so that one failing geometry does not stop the rest;
- :mod:`.context`: :class:`~.context.CheckContext`, the typed accessors rules ask for them through.

Rules import from here; nothing here imports a rule module.
"""
