"""Model field readers: units declared and converted, same field from every format gives the
same comparison, bad inputs refused with a clear reason.

VTI files are written here by hand after the VTK XML ImageData layout (Kitware, "VTK File
Formats": x varies fastest, Origin/Spacing in x y z, inline ascii or base64 "binary" data with a
UInt32 byte-count header); VTU files by meshio, an independent writer.
"""

import base64

import numpy as np
import pytest

from ctpore.compare.command import compare_field
from ctpore.compare.fields import read_model_field
from ctpore.continuum.kernels import Kernel
from ctpore.errors import InputError

H = 10.0
SHAPE = (30, 24, 20)


@pytest.fixture(scope="module")
def scan():
    z, y, x = np.mgrid[:SHAPE[0], :SHAPE[1], :SHAPE[2]]
    env = ((z - 14.5) / 13) ** 2 + ((y - 11.5) / 10) ** 2 + ((x - 9.5) / 8) ** 2 <= 1
    rng = np.random.default_rng(1)
    pore = rng.random(SHAPE) < 0.3 + 0.4 * z / SHAPE[0]
    return np.where(env, np.where(pore, 1, 2), 0).astype(np.uint8)


# the model grid, in mm: origin (z, y, x), spacing (dz, dy, dx)
ORIGIN_MM = np.array([0.02, 0.03, 0.025])
STEP_MM = np.array([0.03, 0.02, 0.025])
GRID = (8, 9, 6)


@pytest.fixture(scope="module")
def grid_porosity():
    z, y, x = np.mgrid[:GRID[0], :GRID[1], :GRID[2]]
    por = 0.3 + 0.05 * z + 0.01 * y - 0.02 * x
    return por.astype(np.float32).astype(np.float64)  # exactly representable in float32


def _points_mm():
    axes = [o + np.arange(n) * s for o, s, n in zip(ORIGIN_MM, STEP_MM, GRID)]
    return np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)


def _write_vti(path, por, fmt):
    nz, ny, nx = por.shape
    o = " ".join(repr(float(v)) for v in ORIGIN_MM[::-1])
    s = " ".join(repr(float(v)) for v in STEP_MM[::-1])
    data = np.ascontiguousarray(por, dtype="<f8")
    if fmt == "ascii":
        text = " ".join(repr(float(v)) for v in data.ravel())
    else:
        raw = data.tobytes()
        text = base64.b64encode(np.uint32(len(raw)).tobytes() + raw).decode()
    path.write_text(
        '<?xml version="1.0"?>\n<VTKFile type="ImageData" version="1.0" '
        'byte_order="LittleEndian" header_type="UInt32">\n'
        f'<ImageData WholeExtent="0 {nx - 1} 0 {ny - 1} 0 {nz - 1}" Origin="{o}" Spacing="{s}">\n'
        f'<Piece Extent="0 {nx - 1} 0 {ny - 1} 0 {nz - 1}"><PointData Scalars="porosity">\n'
        f'<DataArray type="Float64" Name="porosity" format="{fmt}">{text}</DataArray>\n'
        '</PointData><CellData/></Piece></ImageData></VTKFile>\n')


def test_every_format_reads_the_same_field(tmp_path, scan, grid_porosity):
    import meshio

    from ctpore.io.ome_tiff import write_ome_tiff

    pts = _points_mm()
    por = grid_porosity.reshape(-1)
    files = {}
    files["csv"] = tmp_path / "f.csv"
    np.savetxt(files["csv"], np.column_stack([pts[:, ::-1], por, np.arange(len(por))]),
               delimiter=",", header="x,y,z,porosity,node", comments="", fmt="%.17g")
    files["npz"] = tmp_path / "f.npz"
    np.savez(files["npz"], porosity=grid_porosity, origin=ORIGIN_MM, spacing=STEP_MM,
             length_unit="mm")
    files["vti"] = tmp_path / "f.vti"
    _write_vti(files["vti"], grid_porosity, "ascii")
    files["vti_binary"] = tmp_path / "fb.vti"
    _write_vti(files["vti_binary"], grid_porosity, "binary")
    files["vtu"] = tmp_path / "f.vtu"
    meshio.write(files["vtu"], meshio.Mesh(pts[:, ::-1], [("vertex", np.arange(len(pts))[:, None])],
                                           point_data={"porosity": por}))
    fields = {k: read_model_field(p, length_unit="mm") for k, p in files.items()}
    for k, f in fields.items():
        assert f.length_unit == "mm"
        assert np.allclose(f.points_um, pts * 1000, rtol=1e-12, atol=1e-9), k
        assert np.array_equal(f.porosity, por), k
    assert np.array_equal(fields["csv"].extra["node"], np.arange(len(por)))
    # OME-TIFF: µm from PhysicalSize, origin at voxel (0, 0, 0)
    ome = tmp_path / "f.ome.tif"
    write_ome_tiff(ome, grid_porosity.astype(np.float32), tuple(STEP_MM * 1000))
    fo = read_model_field(ome)
    assert np.allclose(fo.points_um, (pts - ORIGIN_MM) * 1000)
    assert np.array_equal(fo.porosity, por)
    # identical comparisons from every file
    kernel = Kernel("gaussian", 20.0)
    res = {k: compare_field(scan, f, spacing_um=H, kernel=kernel, align="none",
                            shape_metrics=False)["metrics"] for k, f in fields.items()}
    ref = res["csv"]
    assert ref["n_valid"] > 100
    for k, m in res.items():
        for key in ("rmse", "mae", "bias", "pearson_r", "coverage"):
            # the scan field is float32: points equal to 1e-12 µm agree to float32 precision
            assert m[key] == pytest.approx(ref[key], rel=1e-6), (k, key)


def test_axisymmetric_table_and_times(tmp_path):
    p = tmp_path / "rz.csv"
    p.write_text("r,z,porosity,time_s\n0,1,0.2,10\n0.5,1,0.3,10\n0,1,0.4,20\n0.5,1,0.5,20\n")
    with pytest.raises(InputError, match="--time"):
        read_model_field(p, length_unit="mm")
    f = read_model_field(p, length_unit="mm", time_s=20)
    assert f.axisymmetric and f.time_s == 20
    assert f.points_um.tolist() == [[0.0, 1000.0], [500.0, 1000.0]]
    assert f.porosity.tolist() == [0.4, 0.5]


@pytest.mark.parametrize("text, unit, match", [
    ("x,y,porosity\n1,2,0.3\n", "mm", r"columns missing.*found \['x', 'y', 'porosity'\]"),
    ("x,y,z,porosity\n1,2,3,nan\n", "mm", "NaN"),
    ("x,y,z,porosity\n1,2,3,\n", "mm", "NaN"),
    ("x,y,z,porosity\n1,2,3,35\n", "mm", r"\[0, 1\]"),
    ("x,y,z,porosity\n1,2,3,0.3\n", "inch", "length unit 'inch'"),
    ("x,y,z,porosity\n1,2,3,0.3\n", None, "not declared"),
    ("x,y,z,porosity\n", "mm", "no rows"),
    ("", "mm", "is empty"),
])
def test_bad_tables_are_refused(tmp_path, text, unit, match):
    p = tmp_path / "bad.csv"
    p.write_text(text)
    with pytest.raises(InputError, match=match):
        read_model_field(p, length_unit=unit)


def test_bad_grids_are_refused(tmp_path):
    p = tmp_path / "g.npz"
    np.savez(p, porosity=np.zeros((2, 2, 2)), origin=np.zeros(3))
    with pytest.raises(InputError, match=r"missing: \['spacing'\]"):
        read_model_field(p, length_unit="mm")
    np.savez(p, porosity=np.zeros((2, 2, 2)), origin=np.zeros(3), spacing=np.ones(3),
             length_unit="m")
    with pytest.raises(InputError, match="declares length_unit 'm'"):
        read_model_field(p, length_unit="mm")
    v = tmp_path / "g.vti"
    _write_vti(v, np.zeros(GRID), "ascii")
    v.write_text(v.read_text().replace('Name="porosity"', 'Name="phi"'))
    with pytest.raises(InputError, match=r"no point data array 'porosity'; found \['phi'\]"):
        read_model_field(v, length_unit="mm")
    txt = tmp_path / "x.txt"
    txt.write_text("1")
    with pytest.raises(InputError, match="unknown format"):
        read_model_field(txt, length_unit="mm")
    with pytest.raises(InputError, match="does not exist"):
        read_model_field(tmp_path / "missing.csv", length_unit="mm")
