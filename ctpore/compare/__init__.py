"""Scan against simulation: compare a continuum model's porosity field with a scanned piece.

A simulated field (point table, regular grid, OME-TIFF or VTK XML file, lengths in a declared
unit) is read into a :class:`~ctpore.compare.fields.ModelField`
(:mod:`ctpore.compare.fields`), placed in the scan's frame by its centroid and principal axes or
by an explicit transform (:mod:`ctpore.compare.align`), and compared point by point with the
scan's kernel-averaged porosity (:func:`ctpore.continuum.coarse.coarsen`) and, as shapes, with
the scan's envelope (:mod:`ctpore.compare.metrics`). ``ctpore compare RESULT FIELD``
(:mod:`ctpore.compare.command`) writes the comparison into the result folder.
"""
