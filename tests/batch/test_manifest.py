"""Manifests: CSV or one folder per batch, every problem reported at once before any work."""

import math

import pytest

from ctpore.batch.manifest import read_manifest
from ctpore.errors import InputError


def _touch(path):
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(b"")
    return path


def _write(path, text):
    path.write_text(text, encoding="utf-8")
    return path


def test_reads_rows_paths_spacing_facts_and_metadata(tmp_path):
    _touch(tmp_path / "stacks" / "a1.tif")
    (tmp_path / "stacks" / "a2_slices").mkdir()
    elsewhere = _touch(tmp_path / "other" / "b1.ome.tif")
    manifest = _write(tmp_path / "m.csv",
                      "sample_id,batch,stack_path,spacing_um,mass_mg,moisture_db,time_s,operator\n"
                      'a1,A,stacks/a1.tif,"12,10,10",3.5,0.136,8,kim\n'
                      "a2,A,stacks/a2_slices,10,,,,lee\n"
                      f"b1,B,{elsewhere},,,,,\n")
    rows = read_manifest(manifest)
    assert [r.sample_id for r in rows] == ["a1", "a2", "b1"]
    a1, a2, b1 = rows
    assert a1.stack_path == (tmp_path / "stacks" / "a1.tif").resolve()  # relative to manifest
    assert a1.spacing_um == (12.0, 10.0, 10.0) and a2.spacing_um == (10.0, 10.0, 10.0)
    assert b1.spacing_um is None  # from the file's metadata
    assert a1.mass_mg == 3.5 and a1.moisture == 0.136 and a1.moisture_basis == "dry"
    assert a1.time_s == 8.0 and a1.line == 2
    assert a1.metadata == {"operator": "kim"} and a2.metadata == {"operator": "lee"}
    assert math.isnan(a2.mass_mg) and a2.sample_changes() == {}
    assert a1.sample_changes() == {"mass_mg": 3.5, "moisture": 0.136, "moisture_basis": "dry"}
    # a default voxel size fills rows without one
    rows = read_manifest(manifest, spacing_um=7)
    assert rows[2].spacing_um == (7.0, 7.0, 7.0) and rows[0].spacing_um == (12.0, 10.0, 10.0)


def test_all_bad_rows_are_reported_in_one_error(tmp_path):
    _touch(tmp_path / "p1.tif")
    _touch(tmp_path / "p3.tif")
    _touch(tmp_path / "p4.tif")
    manifest = _write(tmp_path / "m.csv",
                      "sample_id,batch,stack_path,spacing_um,mass_mg,moisture_wb\n"
                      "p1,A,p1.tif,,,\n"
                      "p2,A,missing.tif,,,\n"          # line 3: missing file
                      "p1,B,p3.tif,,,\n"               # line 4: duplicate id
                      'p4,B,p4.tif,"12,10",,\n'        # line 5: bad spacing (two values)
                      "p5,B,p4.tif,,heavy,12\n")       # line 6: mass not a number, 12 not a fraction
    with pytest.raises(InputError) as err:
        read_manifest(manifest)
    msg = str(err.value)
    assert "5 problem(s)" in msg
    assert "line 3 (sample 'p2')" in msg and "missing.tif" in msg and "does not exist" in msg
    assert "line 4 (sample 'p1')" in msg and "duplicate sample id" in msg and "line 2" in msg
    assert "line 5 (sample 'p4')" in msg and "spacing_um" in msg
    assert "line 6 (sample 'p5')" in msg and "'heavy' is not a number" in msg
    assert "moisture_wb = 12 is not a fraction" in msg
    assert "Fix:" in msg  # every line says how to fix it


def test_missing_columns_are_named(tmp_path):
    manifest = _write(tmp_path / "m.csv", "sample_id,path\np1,p1.tif\n")
    with pytest.raises(InputError) as err:
        read_manifest(manifest)
    assert "['batch', 'stack_path']" in str(err.value)


@pytest.mark.parametrize("text", ["", "\n\n", "sample_id,batch,stack_path\n"])
def test_empty_manifest(tmp_path, text):
    with pytest.raises(InputError, match="empty|no pieces"):
        read_manifest(_write(tmp_path / "m.csv", text))


def test_moisture_on_both_bases_and_unsafe_ids(tmp_path):
    _touch(tmp_path / "p.tif")
    manifest = _write(tmp_path / "m.csv",
                      "sample_id,batch,stack_path,moisture_wb,moisture_db\n"
                      "p1,A,p.tif,0.12,0.13\n"
                      "../x,A,p.tif,,\n"
                      ",A,p.tif,,\n")
    with pytest.raises(InputError) as err:
        read_manifest(manifest)
    msg = str(err.value)
    assert "both moisture_wb and moisture_db" in msg
    assert "'../x'" in msg and "sample_id is empty" in msg


def test_duplicate_ids_differing_in_case_collide(tmp_path):
    # the id names a folder; some file systems ignore case (common practice, no source)
    _touch(tmp_path / "p.tif")
    manifest = _write(tmp_path / "m.csv", "sample_id,batch,stack_path\nP1,A,p.tif\np1,B,p.tif\n")
    with pytest.raises(InputError, match="duplicate sample id"):
        read_manifest(manifest)


def test_folder_layout_one_folder_per_batch(tmp_path):
    _touch(tmp_path / "ref" / "r1.ome.tif")
    _touch(tmp_path / "ref" / "r2.tif")
    _touch(tmp_path / "ref" / "notes.txt")          # not a stack: ignored
    _touch(tmp_path / "new" / "n1" / "slice_0.tif")  # a slice folder
    _touch(tmp_path / "new" / ".hidden.tif")
    rows = read_manifest(tmp_path, spacing_um="12,10,10")
    assert [(r.batch, r.sample_id) for r in rows] == [("new", "n1"), ("ref", "r1"),
                                                      ("ref", "r2")]
    assert rows[0].stack_path == (tmp_path / "new" / "n1").resolve()
    assert all(r.spacing_um == (12.0, 10.0, 10.0) for r in rows)
    _touch(tmp_path / "new" / "r1.tif")  # same id in two batches
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError) as err:
        read_manifest(tmp_path)
    assert "duplicate sample id" in str(err.value) and "holds no stack files" in str(err.value)


def test_reads_the_demo_scenario_manifest(tmp_path):
    from ctpore.demo_scenario import generate_scenario

    generate_scenario(tmp_path, shape=(40, 56, 56))
    rows = read_manifest(tmp_path / "scenario.csv", batch_column="setting")
    assert len(rows) == 6 and {r.batch for r in rows} == {"gentle", "intense"}
    slices = next(r for r in rows if r.stack_path.is_dir())
    assert slices.spacing_um == (12.0, 10.0, 10.0)  # the slice folder has no metadata
    assert all(0.11 <= r.moisture <= 0.13 and r.moisture_basis == "wet" for r in rows)
    assert all(r.mass_mg > 0 and r.time_s in (4.0, 8.0, 12.0) for r in rows)
