"""Exact local thickness of a phase (Hildebrand & Rüegsegger 1997) on anisotropic voxels.

The local thickness at a point of a phase is the diameter of the largest ball that lies inside
the phase and contains the point. On voxels, with ``D(c)`` the Euclidean distance from the centre
of phase voxel ``c`` to the nearest background voxel centre (physical units, anisotropic voxels
honoured), every phase voxel is the centre of the ball ``|x - c|² <= D(c)²`` and

    LT(x) = 2 · max{ D(c) : c in the phase, |x - c| <= D(c) },   0 outside the phase.

Balls are closed, with a relative margin of 1e-6 on ``D²`` so that voxel centres lying exactly on
a sphere count as inside whatever the float32 rounding of ``D``.

This module computes that maximum exactly — the same numbers as painting a ball at every phase
voxel — without painting every ball. Three exact reductions make it fast:

1. *Contained balls are skipped.* Ball ``c`` lies inside the ball of a 26-neighbour ``n = c + u``
   when every lattice point of ball ``c``, shifted by ``-u``, lies in ball ``n``. The largest
   value of ``|p - u|²`` over the lattice points ``p`` of a ball of radius² ``K`` is tabulated
   once per distinct distance value (seven offset classes), so the test is one table look-up.
2. *Points left to a neighbour are not painted.* If a neighbour ``n = c + u`` has a larger ball,
   every point ``p`` of ball ``c`` with ``p·u >= g = (D(c)² - D(n)² + |u|²) / 2`` (beyond the
   radical plane of the two spheres) lies in ball ``n``, whose value is larger. If the balls are
   equal, the points with ``p·u > |u|²/2`` are nearer to ``n`` and left to it. By induction on
   the radius, and for equal radii on the distance to the point, every point skipped by ``c``
   ends with a value of at least ``2·D(c)``. What is left lies in a polyhedral cap next to where
   ball ``c`` touches the background; it is enumerated row by row (x-intervals from the sphere
   and the half-space bounds).
3. *The larger neighbouring ball reaching farthest is cut out exactly*, row by row, which skips
   most rows of the cap and leaves a thin shell to write.

Every voxel painted by ball ``c`` lies in ball ``c`` and receives ``2·D(c)`` (by maximum), so
the result equals the definition; a brute-force check in the tests agrees at every voxel.

Memory: the phase mask (1 byte per voxel, the caller's), the distance map while it is indexed
(4 bytes), an index of distinct distances (2 bytes; 4 bytes when more than 65 534 distinct
distances occur) and the float32 result (4 bytes, allocated after the distance map is freed):
about 7 bytes per voxel at peak. Painting runs in threads over z-slabs in two rounds (even
slabs, then odd ones), each slab at least twice the largest ball radius thick, so no two threads
ever write the same voxel and the result does not depend on the number of threads.

References
----------
T. Hildebrand & P. Rüegsegger (1997), A new method for the model-independent assessment of
thickness in three-dimensional images, J. Microsc. 185(1):67–75,
doi:10.1046/j.1365-2818.1997.1340694.x.
"""

from __future__ import annotations

import math
import os
import threading

import numpy as np

from ..errors import InputError
from ..spacing import as_spacing_um

__all__ = ["local_thickness", "thickness_statistics", "thickness_histogram"]

# Ball membership is |x - c|² <= D(c)²·(1 + _TOL): a closed ball, with a relative margin well
# above the float32 rounding of D (~1e-7), so voxel centres lying exactly on the sphere count as
# inside whatever the rounding of D.
_TOL = 1e-6
# Work budget (rows scanned) for the table of contained-ball tests; distances beyond it are
# simply never tested for containment, which costs time, not exactness.
_TABLE_ROW_BUDGET = 3e7
# Entries (4 bytes each) of the table of row half-widths of the balls of the smaller distances.
_ROW_TABLE_ENTRIES = 4_000_000

_KERNELS: dict = {}
_KERNELS_LOCK = threading.Lock()


def local_thickness(mask, spacing_um, *, parallel=None) -> np.ndarray:
    """Local thickness of a phase: per voxel, the diameter (µm) of the largest ball containing it.

    Exact on the voxel grid: at each phase voxel ``x`` the result is ``2·max D(c)`` over the phase
    voxels ``c`` with ``|x − c| <= D(c)``, where ``D`` is the Euclidean distance transform of the
    mask in µm (``edt.edt(mask, anisotropy=spacing_um, black_border=False)``). Anisotropic voxels
    are honoured exactly (no resampling). See the module notes for the algorithm.

    Conventions:

    * The image border is **not** background (``black_border=False``): distances are measured
      to background voxels inside the image only, and balls may reach past the border. A
      structure cut by the field of view therefore reads as thick as the background inside the
      image allows, never thinner because of the cut.
    * Diameters are twice the centre-to-background-centre distance, so a plate ``t`` voxels thick
      reads ``t`` voxels for even ``t`` and ``t + 1`` for odd ``t``; a voxelised ball reads a
      little more than its nominal diameter (the nearest voxel centre outside it is a little
      farther than its radius).
    * Balls are closed: a voxel centre exactly on a sphere counts as inside.

    Parameters
    ----------
    mask : ndarray of bool or int, shape (nz, ny, nx)
        The phase (True or non-zero), e.g. pore space or solid.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.
    parallel : int, optional
        Number of threads; default all CPUs available to the process. ``1`` runs serially.

    Returns
    -------
    ndarray of float32, shape (nz, ny, nx)
        Local thickness (diameter) in µm at phase voxels, 0 elsewhere.

    Raises
    ------
    InputError
        If ``mask`` is not a 3-D boolean or integer array, if it holds no background voxel at
        all (with the border not being background, every ball would fit and the thickness would
        be unbounded), or if ``spacing_um`` or ``parallel`` is invalid.

    References
    ----------
    T. Hildebrand & P. Rüegsegger (1997), J. Microsc. 185(1):67–75,
    doi:10.1046/j.1365-2818.1997.1340694.x.

    Examples
    --------
    >>> import numpy as np
    >>> plate = np.zeros((9, 4, 4), dtype=bool)
    >>> plate[2:6] = True                       # 4 voxels thick along z
    >>> lt = local_thickness(plate, (10, 10, 10), parallel=1)
    >>> float(lt[3, 0, 0]), float(lt[0, 0, 0])
    (40.0, 0.0)
    """
    spacing = as_spacing_um(spacing_um)
    mask = _checked_mask(mask)
    threads = _checked_threads(parallel)
    if mask.size == 0 or not mask.any():
        return np.zeros(mask.shape, dtype=np.float32)
    if mask.all():
        raise InputError(
            "mask holds no background voxel: with the image border not counted as background, "
            "every ball fits and the local thickness is unbounded",
            "give a mask with background (e.g. the other phase inside the image), or pad the "
            "volume with a layer of background if the border really bounds the phase",
        )
    import edt

    distance = edt.edt(mask, anisotropy=spacing, black_border=False, parallel=threads)
    index, values = _index_distances(distance, threads)
    del distance
    return _paint(index, values, spacing, threads)


def thickness_statistics(thickness_map, mask) -> dict:
    """Volume-weighted statistics of a local thickness map over a phase.

    Every voxel counts by its volume; all voxels of one image have the same volume, so the
    weighting is per voxel. Percentiles follow the inverted cumulative distribution: ``d50_um``
    is the smallest thickness ``t`` such that at least half the phase volume has thickness
    ``<= t`` (so half the volume lies at or below it).

    Parameters
    ----------
    thickness_map : ndarray of float, shape (nz, ny, nx)
        Local thickness in µm, e.g. from :func:`local_thickness`.
    mask : ndarray of bool, shape (nz, ny, nx)
        The phase over which to summarise.

    Returns
    -------
    dict
        ``mean_um``, ``sd_um`` (population standard deviation), ``d10_um``, ``d50_um``,
        ``d90_um``, ``max_um`` (NaN for an empty phase) and ``voxels`` (count).

    Raises
    ------
    InputError
        If the shapes differ.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.array([10.0, 10.0, 30.0, 30.0, 30.0]).reshape(1, 1, 5)
    >>> s = thickness_statistics(t, np.ones(t.shape, dtype=bool))
    >>> s["mean_um"], s["d50_um"], s["max_um"]
    (22.0, 30.0, 30.0)
    """
    values = _phase_values(thickness_map, mask)
    if values.size == 0:
        nan = float("nan")
        return {"mean_um": nan, "sd_um": nan, "d10_um": nan, "d50_um": nan, "d90_um": nan,
                "max_um": nan, "voxels": 0}
    d10, d50, d90 = np.quantile(values, [0.1, 0.5, 0.9], method="inverted_cdf")
    return {
        "mean_um": float(values.mean()),
        "sd_um": float(values.std()),
        "d10_um": float(d10),
        "d50_um": float(d50),
        "d90_um": float(d90),
        "max_um": float(values.max()),
        "voxels": int(values.size),
    }


def thickness_histogram(thickness_map, mask, *, bin_width_um) -> dict:
    """Volume fraction of a phase per thickness bin, for a CSV table.

    Bins are ``[k·w, (k + 1)·w)`` for ``k = 0, 1, ...`` up to the bin holding the largest
    thickness, with ``w = bin_width_um``.

    Parameters
    ----------
    thickness_map : ndarray of float, shape (nz, ny, nx)
        Local thickness in µm.
    mask : ndarray of bool, shape (nz, ny, nx)
        The phase.
    bin_width_um : float
        Bin width in µm (positive).

    Returns
    -------
    dict of 1-D ndarrays
        ``bin_lower_um``, ``bin_upper_um`` and ``volume_fraction`` (sums to 1; empty arrays for
        an empty phase).

    Raises
    ------
    InputError
        If the shapes differ or the bin width is not positive and finite.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.array([10.0, 10.0, 30.0, 30.0]).reshape(1, 1, 4)
    >>> h = thickness_histogram(t, t > 0, bin_width_um=20)
    >>> h["bin_lower_um"].tolist(), h["volume_fraction"].tolist()
    ([0.0, 20.0], [0.5, 0.5])
    """
    try:
        width = float(bin_width_um)
    except (TypeError, ValueError):
        width = float("nan")
    if not (math.isfinite(width) and width > 0):
        raise InputError(f"bin_width_um must be a positive number of µm; got {bin_width_um!r}",
                         "give the bin width in µm, e.g. one voxel size")
    values = _phase_values(thickness_map, mask)
    if values.size == 0:
        empty = np.zeros(0)
        return {"bin_lower_um": empty, "bin_upper_um": empty.copy(),
                "volume_fraction": empty.copy()}
    bins = np.floor(values / width).astype(np.int64)
    counts = np.bincount(bins, minlength=int(bins.max()) + 1)
    lower = np.arange(counts.size) * width
    return {"bin_lower_um": lower, "bin_upper_um": lower + width,
            "volume_fraction": counts / values.size}


# --- input checks ---------------------------------------------------------------------------

def _checked_mask(mask) -> np.ndarray:
    arr = np.asarray(mask)
    if arr.ndim != 3:
        raise InputError(f"mask must be a 3-D array (z, y, x); got {arr.ndim} dimensions",
                         "pass a volume; for one slice use mask[np.newaxis]")
    if arr.dtype == bool:
        return np.ascontiguousarray(arr)
    if np.issubdtype(arr.dtype, np.integer):
        return arr != 0
    raise InputError(f"mask must hold booleans or integers; got dtype {arr.dtype}",
                     "threshold the image first, e.g. mask = labels == 1")


def _checked_threads(parallel) -> int:
    if parallel is None:
        try:
            return max(1, len(os.sched_getaffinity(0)))
        except AttributeError:  # not on Linux
            return max(1, os.cpu_count() or 1)
    if isinstance(parallel, bool) or not isinstance(parallel, (int, np.integer)) or parallel < 1:
        raise InputError(f"parallel must be a positive whole number of threads; got {parallel!r}",
                         "give e.g. parallel=1 for one thread, or leave it out for all")
    return int(parallel)


def _phase_values(thickness_map, mask) -> np.ndarray:
    t = np.asarray(thickness_map)
    m = np.asarray(mask, dtype=bool)
    if t.shape != m.shape:
        raise InputError(f"thickness_map shape {t.shape} differs from mask shape {m.shape}",
                         "pass the mask the thickness map was computed from")
    # Select first, widen after: a float64 copy of the whole map would be 8 bytes per voxel.
    return t[m].astype(np.float64)


# --- distinct distances ---------------------------------------------------------------------

def _index_distances(distance: np.ndarray, threads: int):
    """Replace the float32 distance map by an index into its sorted distinct values.

    Positive float32 numbers sort like their bit patterns, so a bitmap over the patterns between
    the smallest and largest distance yields the distinct values and, by counting set bits, each
    voxel's rank. Returns ``(index, values)`` with ``values[0] == 0`` for the background.
    """
    k = _kernels()
    bits = distance.view(np.uint32)
    lo, hi = k["positive_range"](bits.reshape(-1))
    bitmap = np.zeros((hi - lo) // 64 + 1, dtype=np.uint64)
    k["mark_bits"](bits.reshape(-1), lo, bitmap)
    prefix = k["prefix_counts"](bitmap)
    count = int(prefix[-1])
    dtype = np.uint16 if count < np.iinfo(np.uint16).max else np.uint32
    index = np.empty(distance.shape, dtype=dtype)
    values = np.zeros(count + 1, dtype=np.float32)
    value_bits = values.view(np.uint32)
    _in_threads(threads, [(k["rank_bits"], (bits, lo, bitmap, prefix, index, value_bits, z0, z1))
                          for z0, z1 in _chunks(distance.shape[0], threads)])
    return index, values


def _chunks(n: int, parts: int):
    """Split range(n) into up to ``parts`` contiguous (start, stop) pieces."""
    edges = np.linspace(0, n, max(1, min(parts, n)) + 1).round().astype(int)
    return [(int(a), int(b)) for a, b in zip(edges[:-1], edges[1:]) if b > a]


def _in_threads(threads: int, calls) -> None:
    """Run (kernel, args) calls, at most ``threads`` at a time (the kernels release the GIL)."""
    if threads == 1 or len(calls) == 1:
        for kernel, args in calls:
            kernel(*args)
        return
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(max_workers=threads) as pool:
        for future in [pool.submit(kernel, *args) for kernel, args in calls]:
            future.result()


# --- painting -------------------------------------------------------------------------------

def _neighbourhood(weights):
    """The 26 neighbour offsets, grouped for the painting kernel.

    Order: ux = +1 (9 offsets), ux = -1 (9), ux = 0 and uy != 0 (6), then (+1, 0, 0) and
    (-1, 0, 0). Returns the offsets, their squared lengths, containment classes
    (|uz|, |uy|, |ux| as bits) and the coefficients turning ``p·u < g`` into a bound on the
    last non-zero coordinate: ``coef_z`` multiplies dz and ``coef_y`` dy (or, for ux = 0,
    holds the sign of uy).
    """
    wz, wy, wx = weights
    cube = [(dz, dy, dx) for dz in (-1, 0, 1) for dy in (-1, 0, 1) for dx in (-1, 0, 1)]
    order = ([u for u in cube if u[2] == 1] + [u for u in cube if u[2] == -1]
             + [u for u in cube if u[2] == 0 and u[1] != 0] + [(1, 0, 0), (-1, 0, 0)])
    offsets = np.array(order, dtype=np.int64)
    length2 = (offsets.astype(np.float64) ** 2 * np.asarray(weights)).sum(axis=1)
    klass = (np.abs(offsets) * np.array([4, 2, 1])).sum(axis=1).astype(np.int64)
    uz, uy = offsets[:, 0].astype(np.float64), offsets[:, 1].astype(np.float64)
    coef_z = np.where(offsets[:, 2] != 0, uz * wz / wx, uz * wz / wy)
    coef_y = np.where(offsets[:, 2] != 0, uy * wy / wx, uy)
    return offsets, length2, klass, coef_z, coef_y


def _row_tables(kk, weights):
    """Half-widths (in x) of every row of the balls of the first distinct distances.

    For index i < len(start), ``widths[start[i] + |dz|·stride[i] + |dy|]`` is the largest
    |dx| of ball i in row (dz, dy), or -1 outside; ``depth[i]`` is the largest |dz|. Balls are
    tabulated while the table stays under a fixed size; larger ones are computed row by row.
    """
    k = _kernels()
    depth, stride = k["row_extents"](kk, np.asarray(weights, dtype=np.float64), _TOL)
    sizes = (depth.astype(np.int64) + 1) * stride
    sizes[0] = 0
    count = int(np.searchsorted(np.cumsum(sizes), _ROW_TABLE_ENTRIES, side="right"))
    start = np.zeros(count + 1, dtype=np.int64)
    np.cumsum(sizes[:count], out=start[1:])
    widths = np.empty(int(start[-1]), dtype=np.int32)
    k["fill_rows"](kk[:count], np.asarray(weights, dtype=np.float64), _TOL, start, stride,
                   widths)
    return start[:count], depth[:count], stride[:count], widths


def _paint(index, values, spacing, threads) -> np.ndarray:
    k = _kernels()
    weights = np.array([h * h for h in spacing], dtype=np.float64)
    kk = values.astype(np.float64) ** 2
    threshold = _containment_thresholds(kk, weights, threads)
    offsets, length2, klass, coef_z, coef_y = _neighbourhood(weights)
    start, depth, stride, widths = _row_tables(kk, weights)
    nz, ny, nx = index.shape
    steps = offsets @ np.array([ny * nx, nx, 1], dtype=np.int64)
    reach = math.isqrt(int(kk[-1] * (1 + _TOL) / weights[0])) + 1
    out = np.zeros(index.shape, dtype=np.float32)
    shared = (index, values, kk, threshold, weights, offsets, steps, length2, klass, coef_z,
              coef_y, start, depth, stride, widths, _TOL)
    # Two rounds (even slabs, then odd ones); slabs of one round are 2·reach apart, so the
    # threads never write the same voxel.
    for colour in _slabs(nz, reach, threads):
        _in_threads(threads, [(k["paint_slab"], (*shared, z0, z1, out)) for z0, z1 in colour])
    _in_threads(threads, [(k["finish"], (index, out, z0, z1)) for z0, z1 in _chunks(nz, threads)])
    return out


def _containment_thresholds(kk, weights, threads) -> np.ndarray:
    """threshold[i, c]: smallest distance index j whose ball contains every ball of index i
    centred one offset of class c away; ``len(kk)`` (never) where not tabulated."""
    k = _kernels()
    limit = _table_limit(kk, weights)
    table = np.full((limit, 8), np.inf)
    # Split the indices into pieces of about equal work (a ball of radius² K has ~K rows).
    work = np.cumsum(kk[:limit] + 1.0)
    cuts = np.searchsorted(work, np.linspace(0, work[-1] if limit else 0, threads + 1)[1:-1])
    edges = [0, *sorted(set(int(c) for c in cuts)), limit]
    _in_threads(threads, [(k["containment_table"], (kk, weights, _TOL, a, b, table))
                          for a, b in zip(edges[:-1], edges[1:]) if b > a])
    threshold = np.full((kk.size, 8), kk.size, dtype=np.int64)
    if limit > 1:
        found = np.searchsorted(kk * (1 + _TOL), table[1:, 1:], side="left")
        # A containing ball is strictly larger (guard for rounding on huge radii).
        found = np.maximum(found, np.arange(2, limit + 1)[:, None])
        threshold[1:limit, 1:] = np.minimum(found, kk.size)
    return threshold


def _table_limit(kk, weights) -> int:
    """Number of distinct distances whose containment table fits the work budget."""
    rows = math.pi / 4 * kk / math.sqrt(weights[0] * weights[1]) + 1.0
    return int(np.searchsorted(np.cumsum(rows), _TABLE_ROW_BUDGET, side="right"))


def _slabs(nz: int, reach: int, threads: int):
    """Split z into slabs at least 2·reach thick, as two rounds of (z0, z1) pairs."""
    most = max(1, nz // max(1, 2 * reach))
    count = most if most < 2 * threads else most - most % (2 * threads)
    if threads == 1:
        count = 1
    edges = np.linspace(0, nz, count + 1).round().astype(int)
    slabs = [(int(a), int(b)) for a, b in zip(edges[:-1], edges[1:])]
    return [slabs[0::2], slabs[1::2]]


def _halfwidth(s, limit, weight, inverse):
    # Largest h >= 0 with s + weight·h² <= limit, the membership test evaluated exactly as
    # written everywhere, or -1 if even h = 0 fails. (Compiled by numba in _kernels.)
    if s > limit:
        return -1
    h = int(math.sqrt((limit - s) * inverse))
    while s + weight * (h + 1) * (h + 1) <= limit:
        h += 1
    while h >= 0 and s + weight * h * h > limit:
        h -= 1
    return h


def _popcount(x):
    # Set bits of a uint64 (compiled by numba in _kernels).
    x = x - ((x >> np.uint64(1)) & np.uint64(0x5555555555555555))
    x = (x & np.uint64(0x3333333333333333)) + ((x >> np.uint64(2))
                                               & np.uint64(0x3333333333333333))
    x = (x + (x >> np.uint64(4))) & np.uint64(0x0F0F0F0F0F0F0F0F)
    return np.int64((x * np.uint64(0x0101010101010101)) >> np.uint64(56))


# Compiled helpers, set by _kernels(); the kernels reach them as module globals so that numba
# can cache the kernels on disk.
_hw = None
_pc = None


def _kernels() -> dict:
    """Compile (or load from numba's disk cache) the kernels on first use; numba is imported
    here only, so importing this module stays light."""
    with _KERNELS_LOCK:
        if not _KERNELS:
            _compile_kernels()
    return _KERNELS


def _compile_kernels() -> None:
    global _hw, _pc
    from numba import njit

    _hw = njit(cache=True, nogil=True)(_halfwidth)
    _pc = njit(cache=True, nogil=True)(_popcount)

    @njit(cache=True, nogil=True)
    def positive_range(bits):
        lo = np.int64(0xFFFFFFFF)
        hi = np.int64(0)
        for i in range(bits.size):
            b = np.int64(bits[i])
            if b != 0:
                lo = min(lo, b)
                hi = max(hi, b)
        return lo, hi

    @njit(cache=True, nogil=True)
    def mark_bits(bits, lo, bitmap):
        for i in range(bits.size):
            b = bits[i]
            if b != 0:
                off = np.int64(b) - lo
                bitmap[off >> 6] |= np.uint64(1) << np.uint64(off & 63)

    @njit(cache=True, nogil=True)
    def prefix_counts(bitmap):
        prefix = np.empty(bitmap.size + 1, dtype=np.int64)
        prefix[0] = 0
        for w in range(bitmap.size):
            prefix[w + 1] = prefix[w] + _pc(bitmap[w])
        return prefix

    @njit(cache=True, nogil=True)
    def rank_bits(bits, lo, bitmap, prefix, index, value_bits, z0, z1):
        ny, nx = bits.shape[1], bits.shape[2]
        for z in range(z0, z1):
            for y in range(ny):
                for x in range(nx):
                    b = bits[z, y, x]
                    if b == 0:
                        index[z, y, x] = 0
                        continue
                    off = np.int64(b) - lo
                    w = off >> 6
                    below = bitmap[w] & ((np.uint64(1) << np.uint64(off & 63)) - np.uint64(1))
                    r = prefix[w] + _pc(below) + 1
                    index[z, y, x] = r
                    value_bits[r] = b  # the same value whichever thread writes it

    @njit(cache=True, nogil=True)
    def containment_table(kk, weights, tol, i0, i1, table):
        # table[i, c] = max |p + u|² over lattice points p >= 0 of the ball of radius² kk[i],
        # u = (|uz|, |uy|, |ux|) given by the bits of class c (1..7): how far a point of the
        # ball gets from a neighbour centre at offset u (the ball is mirror-symmetric).
        wz, wy, wx = weights[0], weights[1], weights[2]
        best = np.zeros(8)
        for i in range(max(i0, 1), i1):
            limit = kk[i] * (1.0 + tol)
            best[:] = 0.0
            for pz in range(_hw(0.0, limit, wz, 1.0 / wz) + 1):
                sz = wz * pz * pz
                for py in range(_hw(sz, limit, wy, 1.0 / wy) + 1):
                    px = _hw(sz + wy * py * py, limit, wx, 1.0 / wx)
                    for c in range(1, 8):
                        uz = (c >> 2) & 1
                        uy = (c >> 1) & 1
                        ux = c & 1
                        v = (wz * (pz + uz) ** 2 + wy * (py + uy) ** 2) + wx * (px + ux) ** 2
                        if v > best[c]:
                            best[c] = v
            for c in range(1, 8):
                table[i, c] = best[c]

    @njit(cache=True, nogil=True)
    def row_extents(kk, weights, tol):
        depth = np.zeros(kk.size, dtype=np.int64)
        stride = np.zeros(kk.size, dtype=np.int64)
        for i in range(1, kk.size):
            limit = kk[i] * (1.0 + tol)
            depth[i] = _hw(0.0, limit, weights[0], 1.0 / weights[0])
            stride[i] = _hw(0.0, limit, weights[1], 1.0 / weights[1]) + 1
        return depth, stride

    @njit(cache=True, nogil=True)
    def fill_rows(kk, weights, tol, start, stride, widths):
        wz, wy, wx = weights[0], weights[1], weights[2]
        for i in range(1, kk.size):
            limit = kk[i] * (1.0 + tol)
            for e in range(start[i + 1] - start[i]):
                az = e // stride[i]
                ay = e - az * stride[i]
                widths[start[i] + e] = _hw(wz * az * az + wy * ay * ay, limit, wx, 1.0 / wx)

    @njit(cache=True, nogil=True)
    def paint_slab(index, values, kk, threshold, weights, offsets, steps, length2, klass,
                   coef_z, coef_y, start, depth, stride, widths, tol, z0, z1, out):
        # Paint the balls centred in slabs z0 <= cz < z1 (they reach at most the given reach
        # beyond it; the caller keeps concurrent slabs apart).
        nz, ny, nx = index.shape
        flat = index.reshape(-1)
        wz, wy, wx = weights[0], weights[1], weights[2]
        iz, iy, ix = 1.0 / wz, 1.0 / wy, 1.0 / wx
        n_tab = start.size
        # What is left of ball c to paint satisfies p·u < g for every neighbour u whose
        # ball is at least as large; kept as bounds on dx (9 + 9 for ux = ±1), on dy given
        # dz (6) and on dz (2).
        xu_g = np.empty(9)
        xu_z = np.empty(9)
        xu_y = np.empty(9)
        xl_g = np.empty(9)
        xl_z = np.empty(9)
        xl_y = np.empty(9)
        zy_g = np.empty(6)
        zy_z = np.empty(6)
        zy_up = np.empty(6, dtype=np.bool_)
        nbr = np.empty(26, dtype=np.int64)
        for cz in range(z0, z1):
            z_inner = 0 < cz < nz - 1
            for cy in range(ny):
                y_inner = z_inner and 0 < cy < ny - 1
                row0 = (cz * ny + cy) * nx
                for cx in range(nx):
                    f = row0 + cx
                    i = np.int64(flat[f])
                    if i == 0:
                        continue
                    # 1. A ball inside the ball of a neighbour is skipped. Then the
                    # distance indices of the 26 neighbours (-1 outside the image).
                    contained = False
                    if y_inner and 0 < cx < nx - 1:
                        for q in range(26):
                            contained |= np.int64(flat[f + steps[q]]) >= threshold[i, klass[q]]
                        if contained:
                            continue
                        for q in range(26):
                            nbr[q] = flat[f + steps[q]]
                    else:
                        for q in range(26):
                            z = cz + offsets[q, 0]
                            y = cy + offsets[q, 1]
                            x = cx + offsets[q, 2]
                            if 0 <= z < nz and 0 <= y < ny and 0 <= x < nx:
                                nbr[q] = flat[f + steps[q]]
                            else:
                                nbr[q] = -1
                            contained |= nbr[q] >= threshold[i, klass[q]]
                        if contained:
                            continue
                    # 2. Bounds from neighbours with balls at least as large: points p of
                    # ball c with p·u >= g + eps are left to neighbour n (module notes);
                    # for a larger ball they lie in it, for an equal one they are nearer n.
                    kc = kk[i]
                    limit = kc * (1.0 + tol)
                    eps = 1e-9 * limit
                    n_xu = 0
                    for q in range(9):
                        j = nbr[q]
                        xu_g[n_xu] = (0.5 * (kc - kk[max(j, 0)] + length2[q]) + eps) * ix
                        xu_z[n_xu] = coef_z[q]
                        xu_y[n_xu] = coef_y[q]
                        n_xu += j >= i
                    n_xl = 0
                    for q in range(9, 18):
                        j = nbr[q]
                        xl_g[n_xl] = (0.5 * (kc - kk[max(j, 0)] + length2[q]) + eps) * ix
                        xl_z[n_xl] = coef_z[q]
                        xl_y[n_xl] = coef_y[q]
                        n_xl += j >= i
                    n_zy = 0
                    for q in range(18, 24):
                        j = nbr[q]
                        zy_g[n_zy] = (0.5 * (kc - kk[max(j, 0)] + length2[q]) + eps) * iy
                        zy_z[n_zy] = coef_z[q]
                        zy_up[n_zy] = coef_y[q] > 0
                        n_zy += j >= i
                    dz_hi = _hw(0.0, limit, wz, iz)
                    dz_lo = -dz_hi
                    if nbr[24] >= i:
                        g = (0.5 * (kc - kk[nbr[24]] + length2[24]) + eps) * iz
                        dz_hi = min(dz_hi, int(math.ceil(g)) - 1)
                    if nbr[25] >= i:
                        g = (0.5 * (kc - kk[nbr[25]] + length2[25]) + eps) * iz
                        dz_lo = max(dz_lo, int(math.floor(-g)) + 1)
                    # The larger neighbour reaching farthest; the rows of its ball are
                    # subtracted exactly from the rows of ball c.
                    best = -1
                    best_reach = -np.inf
                    for q in range(26):
                        j = nbr[q]
                        if j > i and kk[j] - length2[q] > best_reach:
                            best_reach = kk[j] - length2[q]
                            best = q
                    bz = 0
                    by = 0
                    bx = 0
                    bj = 0
                    b_limit = -1.0
                    if best >= 0:
                        bz = offsets[best, 0]
                        by = offsets[best, 1]
                        bx = offsets[best, 2]
                        bj = nbr[best]
                        b_limit = kk[bj] * (1.0 + tol)
                    # 3. Paint what is left, row by row.
                    v = values[i]
                    dz_lo = max(dz_lo, -cz)
                    dz_hi = min(dz_hi, nz - 1 - cz)
                    for dz in range(dz_lo, dz_hi + 1):
                        az = abs(dz)
                        sz = wz * dz * dz
                        dy_hi = _hw(sz, limit, wy, iy)
                        dy_lo = -dy_hi
                        for q in range(n_zy):
                            b = zy_g[q] - zy_z[q] * dz
                            if zy_up[q]:
                                dy_hi = min(dy_hi, int(math.ceil(b)) - 1)
                            else:
                                dy_lo = max(dy_lo, int(math.floor(-b)) + 1)
                        dy_lo = max(dy_lo, -cy)
                        dy_hi = min(dy_hi, ny - 1 - cy)
                        ez = dz - bz
                        aez = abs(ez)
                        s_bz = wz * ez * ez
                        for dy in range(dy_lo, dy_hi + 1):
                            ay = abs(dy)
                            if i < n_tab:
                                h = widths[start[i] + az * stride[i] + ay]
                            else:
                                h = _hw(sz + wy * dy * dy, limit, wx, ix)
                            # Part [a, b] of the row (offsets from cx) inside the ball of
                            # the best neighbour.
                            a = 1
                            b = 0
                            if best >= 0:
                                ey = dy - by
                                aey = abs(ey)
                                if bj < n_tab:
                                    if aez <= depth[bj] and aey < stride[bj]:
                                        hb = widths[start[bj] + aez * stride[bj] + aey]
                                    else:
                                        hb = -1
                                else:
                                    hb = _hw(s_bz + wy * ey * ey, b_limit, wx, ix)
                                if hb >= 0:
                                    a = bx - hb
                                    b = bx + hb
                                    if a <= -h and b >= h:
                                        continue
                            hi_f = float(h)
                            lo_f = float(-h)
                            for q in range(n_xu):
                                hi_f = min(hi_f, math.ceil(xu_g[q] - xu_z[q] * dz
                                                           - xu_y[q] * dy) - 1.0)
                            for q in range(n_xl):
                                lo_f = max(lo_f, math.floor(xl_z[q] * dz + xl_y[q] * dy
                                                            - xl_g[q]) + 1.0)
                            x0 = max(int(lo_f), -cx)
                            x1 = min(int(hi_f), nx - 1 - cx)
                            z = cz + dz
                            y = cy + dy
                            if a <= b:
                                for x in range(cx + x0, cx + min(x1, a - 1) + 1):
                                    out[z, y, x] = max(out[z, y, x], v)
                                x0 = max(x0, b + 1)
                            for x in range(cx + x0, cx + x1 + 1):
                                out[z, y, x] = max(out[z, y, x], v)

    @njit(cache=True, nogil=True)
    def finish(index, out, z0, z1):
        ny, nx = index.shape[1], index.shape[2]
        for z in range(z0, z1):
            for y in range(ny):
                for x in range(nx):
                    if index[z, y, x] == 0:
                        out[z, y, x] = 0.0
                    else:
                        out[z, y, x] = 2.0 * out[z, y, x]

    _KERNELS.update(positive_range=positive_range, mark_bits=mark_bits,
                    prefix_counts=prefix_counts, rank_bits=rank_bits,
                    containment_table=containment_table, row_extents=row_extents,
                    fill_rows=fill_rows, paint_slab=paint_slab, finish=finish)
