"""Batches: one recipe over many pieces, piece-level statistics, equivalence to a reference batch.

The piece, not the pore, is the experimental unit: every statistic here is computed on one value
per piece (Eisner 2021, J. Gen. Physiol., on pseudo-replication; from memory). The modules are
``manifest`` (which pieces, read and checked before any work), ``runner`` (run ``analyze`` over
them in worker processes, resumable), ``stats`` (descriptive statistics, tests, TOST, thickness
distribution envelopes, individuals control chart) and ``verdicts`` (the batch report and its
files).
"""
