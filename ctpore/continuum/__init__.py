"""Continuum-scale porosity: kernel-averaged (coarse-grained) fields and the REV study.

``kernels`` defines the averaging kernels (box, ball, Gaussian) in physical units, ``coarse``
the normalised (masked) averaging of a labelled piece onto the scan grid, a model grid or
arbitrary points, and ``rev`` the representative-volume study that gives the integral range
and a recommended kernel width.
"""
