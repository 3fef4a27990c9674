"""Gas, open and closed porosity of a labelled piece (0 exterior, 1 pore, 2 solid)."""

from __future__ import annotations

import numpy as np
from scipy import ndimage

from ..errors import InputError
from ..spacing import voxel_volume_um3

__all__ = ["porosity", "open_pore_mask", "check_phase_counts", "porosity_from_counts"]

EXTERIOR, PORE, SOLID = 0, 1, 2
_UM3_PER_MM3 = 1e9
# Face (6-) connectivity for the non-solid phase; the solid then has the complementary
# 26-connectivity, so a diagonal-only gap between solid voxels does not join two pores.
_NONSOLID_STRUCTURE = ndimage.generate_binary_structure(3, 1)


def porosity(phases, *, spacing_um) -> dict:
    """Gas, open and closed porosity of a piece, with its volumes in mm³.

    Porosity is the pore volume over the envelope volume (pore + solid voxels). Counting voxels
    is the three-dimensional form of the Delesse principle, V_V = A_A = L_L = P_P: the volume
    fraction of a phase equals the fraction of test points (here, voxel centres) that hit it
    (Delesse 1847; Underwood 1970, *Quantitative Stereology*).

    Pores are split into open and closed in the sense of ISO 4590 (volume percentage of open and
    closed cells) and ASTM D6226 (open-cell content by pycnometer): open cells are those a gas
    could reach from outside, cells cut open at the surface included; the pycnometer volume is
    solid plus closed cells. Here a pore voxel is open when its 6-connected component of non-solid
    voxels (pore or exterior) contains an exterior voxel; see :func:`open_pore_mask`.

    Parameters
    ----------
    phases : ndarray of int, shape (nz, ny, nx)
        Labels: 0 exterior, 1 pore (gas inside the piece's envelope), 2 solid.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm; anisotropic voxels are honoured exactly.

    Returns
    -------
    dict
        ``porosity_gas``, ``porosity_open``, ``porosity_closed`` (fractions of the envelope
        volume; open + closed = gas), ``envelope_volume_mm3``, ``solid_volume_mm3``,
        ``pore_volume_mm3``, ``open_pore_volume_mm3``, ``closed_pore_volume_mm3``,
        ``closed_pore_count`` (closed pore components), ``envelope_voxels`` and
        ``touches_border`` (True when the envelope reaches the edge of the image, a sign that the
        field of view cut the piece; the cut pores then count as open).

    Raises
    ------
    ValueError
        If ``phases`` is not a 3-D integer array with values in {0, 1, 2}.
    InputError
        If the envelope is empty or holds no solid voxel, or ``spacing_um`` is invalid.

    References
    ----------
    ISO 4590, Rigid cellular plastics: determination of the volume percentage of open cells and
    of closed cells. ASTM D6226, Standard test method for open cell content of rigid cellular
    plastics. A. Delesse (1847), Ann. Mines 13:379. E. E. Underwood (1970), Quantitative
    Stereology, Addison-Wesley. J. Toriwaki & T. Yonekura (2002), Forma 17:183 (complementary
    adjacency in 3-D digital images).

    Examples
    --------
    >>> import numpy as np
    >>> phases = np.full((3, 3, 3), 2, dtype=np.uint8)
    >>> phases[1, 1, 1] = 1
    >>> r = porosity(phases, spacing_um=10)
    >>> round(r["porosity_closed"], 4), r["closed_pore_count"], r["touches_border"]
    (0.037, 1, True)
    """
    voxel_mm3 = voxel_volume_um3(spacing_um) / _UM3_PER_MM3
    phases = _checked_phases(phases)
    n_pore = int(np.count_nonzero(phases == PORE))
    n_solid = int(np.count_nonzero(phases == SOLID))
    check_phase_counts(n_pore, n_solid)
    labels, is_open = _nonsolid_components(phases)
    n_open = sum(int(np.count_nonzero(is_open[labels[sl]] & (phases[sl] == PORE)))
                 for sl in _slabs(phases.shape[0]))
    # Every non-solid component holds an exterior voxel (open) or only pore voxels (closed).
    closed_count = int(is_open.size - 1 - np.count_nonzero(is_open[1:]))
    return porosity_from_counts(n_pore, n_solid, n_open, closed_count=closed_count,
                                touches_border=_touches_border(phases != EXTERIOR),
                                voxel_mm3=voxel_mm3)


def check_phase_counts(n_pore: int, n_solid: int) -> None:
    """Raise InputError when the envelope is empty or holds no solid voxel.

    Shared by :func:`porosity` and the chunked path, which counts the phases chunk by chunk.
    """
    if n_pore + n_solid == 0:
        raise InputError(
            "phases: the envelope is empty (no pore or solid voxel): there is no piece to measure",
            "check the threshold and the contrast of the stack: the solid was not found",
        )
    if n_solid == 0:
        raise InputError(
            "phases: no solid voxel was found inside the envelope",
            "check the threshold and the contrast of the stack (is the solid brighter than gas?)",
        )


def porosity_from_counts(n_pore: int, n_solid: int, n_open: int, *, closed_count: int,
                         touches_border: bool, voxel_mm3: float) -> dict:
    """The result dict of :func:`porosity` from its voxel counts (volume-fraction definitions
    as there: fractions of the envelope, pore + solid voxels).

    Parameters
    ----------
    n_pore, n_solid, n_open : int
        Pore, solid and open pore voxel counts (``n_open <= n_pore``).
    closed_count : int
        Number of closed pores (non-solid components holding no exterior voxel).
    touches_border : bool
        Whether the envelope reaches a face of the image.
    voxel_mm3 : float
        Volume of one voxel in mm³.
    """
    n_envelope = n_pore + n_solid
    n_closed = n_pore - n_open
    return {
        "porosity_gas": n_pore / n_envelope,
        "porosity_open": n_open / n_envelope,
        "porosity_closed": n_closed / n_envelope,
        "envelope_volume_mm3": n_envelope * voxel_mm3,
        "solid_volume_mm3": n_solid * voxel_mm3,
        "pore_volume_mm3": n_pore * voxel_mm3,
        "open_pore_volume_mm3": n_open * voxel_mm3,
        "closed_pore_volume_mm3": n_closed * voxel_mm3,
        "closed_pore_count": closed_count,
        "envelope_voxels": n_envelope,
        "touches_border": touches_border,
    }


def open_pore_mask(phases) -> np.ndarray:
    """Pore voxels connected to the outside of the piece (open cells).

    A pore voxel is open when its 6-connected component of non-solid voxels (pore ∪ exterior)
    contains an exterior voxel. The solid thereby takes the complementary 26-adjacency
    (Toriwaki & Yonekura 2002, Forma 17:183), so pores that meet only at an edge or a corner
    stay apart. The volume is padded with one layer of exterior first, so the image border counts
    as outside: cells cut by the field of view are open, as are cells cut at a specimen's surface
    in ISO 4590 and ASTM D6226.

    Parameters
    ----------
    phases : ndarray of int, shape (nz, ny, nx)
        Labels: 0 exterior, 1 pore, 2 solid.

    Returns
    -------
    ndarray of bool, shape (nz, ny, nx)
        True on open pore voxels. Closed pores are ``(phases == 1) & ~open_pore_mask(phases)``.

    Raises
    ------
    ValueError
        If ``phases`` is not a 3-D integer array with values in {0, 1, 2}.
    """
    phases = _checked_phases(phases)
    labels, is_open = _nonsolid_components(phases)
    return is_open[labels] & (phases == PORE)


def _nonsolid_components(phases: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Labels of the 6-connected non-solid components (image-sized) and a per-label open flag.

    ``is_open[k]`` is True when component ``k`` touches the exterior, the image border included;
    ``is_open[0]`` (the solid) is False.
    """
    # Labelled without padding (padding would copy the image): a component is open when it
    # holds an exterior voxel or a voxel on the image border, which is exactly what joining
    # it to an exterior frame around the image would do. Slab by slab, so no image-sized
    # temporary beyond the labels is made.
    labels, n = ndimage.label(phases != SOLID, structure=_NONSOLID_STRUCTURE)
    is_open = np.zeros(n + 1, dtype=bool)
    for sl in _slabs(phases.shape[0]):
        is_open[labels[sl][phases[sl] == EXTERIOR]] = True
    for face in (labels[0], labels[-1], labels[:, 0], labels[:, -1], labels[:, :, 0],
                 labels[:, :, -1]):
        is_open[face] = True
    is_open[0] = False
    return labels, is_open


def _slabs(nz: int, step: int = 32):
    """Slices of ``step`` planes along z covering ``range(nz)``."""
    return [slice(z, z + step) for z in range(0, nz, step)]


def _touches_border(mask: np.ndarray) -> bool:
    """True if any voxel of ``mask`` lies on one of the six faces of the image."""
    return any(
        bool(np.take(mask, index, axis=axis).any()) for axis in range(3) for index in (0, -1)
    )


def _checked_phases(phases) -> np.ndarray:
    """The phases as a 3-D integer array with values in {0, 1, 2}, or a ValueError."""
    phases = np.asarray(phases)
    if phases.ndim != 3:
        raise ValueError(
            f"phases must be a 3-D (z, y, x) label array; got {phases.ndim} dimension(s), "
            f"shape {phases.shape}"
        )
    if not np.issubdtype(phases.dtype, np.integer):
        raise ValueError(
            f"phases must hold integer labels 0 (exterior), 1 (pore), 2 (solid); got dtype "
            f"{phases.dtype}. Convert with phases.astype(np.uint8) after checking the values"
        )
    if phases.size and (phases.min() < EXTERIOR or phases.max() > SOLID):
        bad = np.unique(phases[(phases < EXTERIOR) | (phases > SOLID)])
        raise ValueError(
            "phases may only hold 0 (exterior), 1 (pore) and 2 (solid); found "
            f"{bad[:10].tolist()}{' ...' if bad.size > 10 else ''}"
        )
    return phases
