"""Euler characteristic and connectivity against known topology and a reference library.

Each check names its source beside it. Bodies are built here in physical coordinates (µm) and
sampled at voxel centres; an independent count of the cubical complex checks the library.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from skimage.measure import euler_number

from ctpore.measure.topology import connectivity_density, euler_characteristic


def _grid(shape, spacing):
    return [((np.arange(n) + 0.5) * h).reshape([-1 if i == ax else 1 for i in range(3)])
            for ax, (n, h) in enumerate(zip(shape, spacing))]


def _ball(spacing, radius=10.0, hole=0.0):
    shape = tuple(math.ceil(28 / h) for h in spacing)
    z, y, x = _grid(shape, spacing)
    d2 = (z - 14.2) ** 2 + (y - 13.9) ** 2 + (x - 14.1) ** 2
    return (d2 <= radius**2) & (d2 > hole**2)


def _tori(spacing, count=1, major=10.0, minor=4.0):
    """``count`` solid tori in the y-x plane, overlapping in a row so they fuse into a body
    with ``count`` handles."""
    step = 2 * major - 0.5 * minor  # neighbouring tubes overlap without closing the holes
    shape = tuple(math.ceil(s / h) for s, h in zip(
        (2 * minor + 6, 2 * (major + minor) + 6, step * (count - 1) + 2 * (major + minor) + 6),
        spacing))
    z, y, x = _grid(shape, spacing)
    cz, cy = minor + 3, major + minor + 3
    body = np.zeros(shape, dtype=bool)
    for i in range(count):
        cx = major + minor + 3 + i * step
        ring = np.sqrt((y - cy) ** 2 + (x - cx) ** 2) - major
        body |= ring**2 + (z - cz) ** 2 <= minor**2
    return body


def _cubical_euler(mask):
    """χ = V − E + F − C of the union of closed unit cubes on the object voxels.

    The union of closed cubes is the continuous counterpart of 26-adjacency for the object
    with 6-adjacency for the background (Toriwaki & Yonekura 2002, Forma 17:183). A vertex,
    edge or face belongs to the union when any voxel that touches it is in the object; this
    counts them directly and shares no code with scikit-image.
    """
    p = np.pad(mask, 1)
    cubes = int(p.sum())
    faces = sum(int((np.take(p, range(1, p.shape[a]), a)
                     | np.take(p, range(0, p.shape[a] - 1), a)).sum()) for a in range(3))
    edges = 0
    for a in range(3):
        b, c = [ax for ax in range(3) if ax != a]
        s = [slice(None)] * 3
        corners = []
        for db in (0, 1):
            for dc in (0, 1):
                s[b] = slice(db, p.shape[b] - 1 + db)
                s[c] = slice(dc, p.shape[c] - 1 + dc)
                corners.append(p[tuple(s)])
        edges += int(np.logical_or.reduce(corners).sum())
    n0, n1, n2 = p.shape
    vertices = int(np.logical_or.reduce([
        p[i:n0 - 1 + i, j:n1 - 1 + j, k:n2 - 1 + k]
        for i in (0, 1) for j in (0, 1) for k in (0, 1)]).sum())
    return vertices - edges + faces - cubes


SHAPES = {
    # name: (builder, χ, (β0, β1, β2)); Odgaard & Gundersen 1993, Bone 14:173-182: ball 1,
    # hollow ball 2, solid torus 0, a body with g handles 1 - g.
    "ball": (lambda sp: _ball(sp), 1, (1, 0, 0)),
    "hollow ball": (lambda sp: _ball(sp, hole=5.0), 2, (1, 0, 1)),
    "solid torus": (lambda sp: _tori(sp, 1), 0, (1, 1, 0)),
    "double torus": (lambda sp: _tori(sp, 2), -1, (1, 2, 0)),
    "triple torus": (lambda sp: _tori(sp, 3), -2, (1, 3, 0)),
}


@pytest.mark.parametrize("spacing", [(1.0, 1.0, 1.0), (2.0, 1.0, 1.0)])
@pytest.mark.parametrize("name", list(SHAPES))
def test_euler_characteristic_of_known_bodies(name, spacing):
    build, chi, _ = SHAPES[name]
    body = build(spacing)
    assert euler_characteristic(body) == chi  # Odgaard & Gundersen 1993
    # Reference library (scikit-image measure.euler_number, 26-connectivity for the object).
    assert euler_characteristic(body) == euler_number(body, connectivity=3)
    # Independent count on the cubical complex (Euler–Poincaré, V − E + F − C).
    assert _cubical_euler(body) == chi


@pytest.mark.parametrize("name", list(SHAPES))
def test_betti_numbers_of_known_bodies(name):
    build, chi, (b0, b1, b2) = SHAPES[name]
    body = build((1.0, 1.0, 1.0))
    r = connectivity_density(body, spacing_um=1.0, envelope=np.ones_like(body))
    # χ = β0 − β1 + β2 and connectivity β1 = β0 + β2 − χ (Odgaard & Gundersen 1993).
    assert (r["components"], r["connectivity"], r["cavities"]) == (b0, b1, b2)
    assert r["euler_characteristic"] == chi


def _frame(cells, cell=8, strut=2):
    """Struts along the edges of a block of cells³ cubic cells (the lattice's 1-skeleton)."""
    size = cells * cell + strut
    idx = np.arange(size)
    on = [(idx % cell < strut).reshape([-1 if i == ax else 1 for i in range(3)])
          for ax in range(3)]
    bands = on[0].astype(int) + on[1].astype(int) + on[2].astype(int)
    return bands >= 2  # in two bands at once: on a strut along the third axis


def _closed_foam(cells, cell=8, wall=2):
    """Walls on every face of a block of cells³ cubic cells: closed cells."""
    size = cells * cell + wall
    idx = np.arange(size)
    on = [(idx % cell < wall).reshape([-1 if i == ax else 1 for i in range(3)])
          for ax in range(3)]
    return on[0] | on[1] | on[2]


@pytest.mark.parametrize("cells", [1, 2, 3])
def test_lattice_of_struts_connectivity_counted_by_hand(cells):
    solid = _frame(cells)
    spacing = (20.0, 10.0, 10.0)
    r = connectivity_density(solid, spacing_um=spacing, envelope=np.ones_like(solid))
    # By hand: the frame is the graph of the cubic lattice with (n + 1)³ nodes and
    # 3·n·(n + 1)² struts; its independent loops are E − V + 1 (Euler's formula for a
    # connected graph; connectivity = loops, Odgaard & Gundersen 1993).
    nodes = (cells + 1) ** 3
    struts = 3 * cells * (cells + 1) ** 2
    loops = struts - nodes + 1
    assert r["connectivity"] == loops
    assert (r["components"], r["cavities"], r["euler_characteristic"]) == (1, 0, 1 - loops)
    volume_mm3 = solid.size * math.prod(spacing) * 1e-9
    assert r["connectivity_density_per_mm3"] == pytest.approx(loops / volume_mm3, rel=1e-12)


@pytest.mark.parametrize("cells", [1, 2, 3])
def test_closed_cell_foam_has_cavities_and_no_loops(cells):
    solid = _closed_foam(cells)
    r = connectivity_density(solid, spacing_um=10.0, envelope=np.ones_like(solid))
    # By hand: n³ sealed cells are n³ cavities; a wall network around them has no loop
    # that could be cut without opening a cell, so β1 = 0 and χ = 1 + n³.
    assert (r["components"], r["connectivity"], r["cavities"]) == (1, 0, cells**3)
    assert r["euler_characteristic"] == 1 + cells**3
    assert euler_number(solid, connectivity=3) == 1 + cells**3  # scikit-image agrees


def test_opening_a_wall_removes_a_cavity_and_adds_no_loop():
    solid = _closed_foam(2)
    solid[2:8, 2:8, 8:10] = False  # remove the wall between two cells: they merge into one
    r = connectivity_density(solid, spacing_um=10.0, envelope=np.ones_like(solid))
    assert (r["cavities"], r["connectivity"]) == (7, 0)  # counted by hand
    solid = _closed_foam(2)
    solid[3:5, 3:5, 0:2] = False  # a window in an outer wall: that cell opens to the outside
    r = connectivity_density(solid, spacing_um=10.0, envelope=np.ones_like(solid))
    # The opened cell becomes a dent in the surface: one cavity less and still no loop
    # (χ = β0 − β1 + β2 = 1 − 0 + 7 = 8; Odgaard & Gundersen 1993).
    assert (r["cavities"], r["connectivity"], r["euler_characteristic"]) == (7, 0, 8)
