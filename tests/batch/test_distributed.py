"""Batch on a real dask.distributed cluster: the same pieces.csv and failures.json as the local
run_batch path, resume without recomputing, failures listed, checks before any work.

The reference is ctpore's own local runner (run_batch with an in-process executor): the
cluster path must reproduce its outputs byte for byte. Pieces are 40³ voxels from the demo
generator with the structure measures and profiles off, so each analysis takes about a second.
"""

from __future__ import annotations

import json
import os
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pytest

from ctpore.batch.manifest import ManifestRow, read_manifest
from ctpore.batch.runner import run_batch
from ctpore.errors import InputError
from ctpore.recipe import Recipe

pytest.importorskip("distributed")

from ctpore.batch.distributed import (  # noqa: E402
    _worker_probe,
    run_batch_distributed,
    scheduler_client,
)

PIECES = [("a1", "A", 5101), ("a2", "A", 5102), ("b1", "B", 5103), ("b2", "B", 5104)]


@pytest.fixture(scope="module")
def stacks(tmp_path_factory):
    from ctpore.demo_scenario import make_piece
    from ctpore.io.ome_tiff import write_ome_tiff

    root = tmp_path_factory.mktemp("dstacks")
    lines = ["sample_id,batch,stack_path,mass_mg,moisture_wb"]
    for k, (sid, batch, seed) in enumerate(PIECES):
        # (at 40³ the "intense" setting fails beyond about 6 s: too few cells for the generator)
        setting, time_s = ("gentle", 8.0) if batch == "A" else ("intense", 6.0)
        piece = make_piece(setting=setting, time_s=time_s, seed=seed, shape=(40, 40, 40))
        write_ome_tiff(root / f"{sid}.ome.tif", piece.grey, piece.spacing_um)
        lines.append(f"{sid},{batch},{sid}.ome.tif,{1.2 + k},0.12")
    (root / "broken.tif").write_bytes(b"II*\x00" + b"\x00" * 60)  # a TIFF header, no image
    lines.append("x1,B,broken.tif,,")
    (root / "all.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    return root


@pytest.fixture(scope="module")
def recipe():
    return (Recipe().replace("structure", enabled=False).replace("profiles", enabled=False)
            .replace("sample", solid_density_g_cm3=1.5))


@pytest.fixture(scope="module")
def local_run(stacks, recipe, tmp_path_factory):
    out = tmp_path_factory.mktemp("local") / "batch"
    with ThreadPoolExecutor(1) as pool:  # run_batch's own path, in this process
        return run_batch(read_manifest(stacks / "all.csv"), recipe=recipe, out_dir=out,
                         scheduler=pool, quiet=True)


@pytest.fixture(scope="module")
def cluster_run(stacks, recipe, dask_client, tmp_path_factory):
    out = tmp_path_factory.mktemp("cluster") / "batch"
    return run_batch_distributed(read_manifest(stacks / "all.csv"), recipe=recipe,
                                 out_dir=out, client=dask_client, quiet=True)


def _mtimes(out, ids):
    return {sid: os.stat(out / "pieces" / sid / "summary.json").st_mtime_ns for sid in ids}


def test_cluster_outputs_equal_the_local_ones(local_run, cluster_run, dask_client):
    assert [p.status for p in cluster_run.pieces] == ["ok"] * 4 + ["failed"]
    for name in ("pieces.csv", "failures.json"):
        assert (cluster_run.out_dir / name).read_bytes() == (local_run.out_dir / name).read_bytes()
    failures = json.loads((cluster_run.out_dir / "failures.json").read_text())
    assert failures["n_failed"] == 1 and failures["failures"][0]["sample_id"] == "x1"
    assert "broken.tif" in failures["failures"][0]["error"]
    # the pieces really ran on the workers: each wrote its summary from another process
    summary = json.loads((cluster_run.out_dir / "pieces" / "a1" / "summary.json").read_text())
    assert summary["porosity_gas"] == local_run.pieces[0].summary["porosity_gas"]
    assert len(dask_client.scheduler_info()["workers"]) == 2


def test_rerun_by_address_skips_finished_pieces(cluster_run, stacks, recipe, dask_client):
    out = cluster_run.out_dir
    ids = [sid for sid, _, _ in PIECES]
    before = _mtimes(out, ids)
    csv_before = (out / "pieces.csv").read_text()
    address = dask_client.scheduler.address  # a client of its own, closed after the run
    run = run_batch_distributed(read_manifest(stacks / "all.csv"), recipe=recipe, out_dir=out,
                                client=address, quiet=True)
    assert [p.status for p in run.pieces] == ["skipped-existing"] * 4 + ["failed"]
    assert _mtimes(out, ids) == before
    assert (out / "pieces.csv").read_text() == csv_before.replace(",ok,", ",skipped-existing,")


def test_paths_the_workers_cannot_see_stop_before_any_work(dask_client, recipe, tmp_path):
    ghost = tmp_path / "nowhere" / "ghost.ome.tif"
    rows = [ManifestRow(sample_id="g1", batch="A", stack_path=ghost)]
    out = tmp_path / "batch"
    with pytest.raises(InputError, match=r"(?s)cannot see paths.*ghost\.ome\.tif.*file system"):
        run_batch_distributed(rows, recipe=recipe, out_dir=out, client=dask_client, quiet=True)
    assert not out.exists()
    probe = _worker_probe([str(ghost), str(tmp_path)], "0.0")
    assert probe["missing"] == [str(ghost)] and not probe["same_version"]


def test_unreachable_scheduler_is_an_input_error():
    with pytest.raises(InputError, match=r"cannot reach the dask scheduler at "
                                         r"tcp://127\.0\.0\.1:1 .*Fix: start a scheduler"):
        scheduler_client("tcp://127.0.0.1:1", timeout_s=1)
    with pytest.raises(InputError, match=r"cannot reach the dask scheduler at nope://x"):
        scheduler_client("nope://x")
    with pytest.raises(InputError, match="empty"):
        scheduler_client("")


def test_module_imports_no_cluster_code():
    import subprocess
    import sys

    code = ("import sys, ctpore.batch.distributed, ctpore.io.ome_zarr, "
            "ctpore.io.convert_command\n"
            "print([m for m in ('distributed', 'dask', 'zarr', 'ome_zarr') if m in sys.modules])")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=Path(__file__).resolve().parents[2])
    assert out.stdout.strip() == "[]"
