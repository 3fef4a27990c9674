"""Batch runner: worker processes, a failing piece, resume after a rerun and after a kill.

Tiny pieces (40 × 56 × 56 voxels from the demo generator) with the structure measures and the
profiles switched off keep each analysis near a second.
"""

import csv
import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from concurrent.futures import ThreadPoolExecutor

import pytest

from ctpore.batch.manifest import read_manifest
from ctpore.batch.runner import MARKER_NAME, run_batch
from ctpore.batch.verdicts import batch_report, write_batch_outputs
from ctpore.errors import InputError
from ctpore.recipe import Recipe, load_recipe

PIECES = [("a1", "A", 4101), ("a2", "A", 4102), ("b1", "B", 4103)]
MEASURES = ("porosity_gas", "porosity_open", "porosity_closed", "envelope_volume_mm3",
            "threshold_value", "apparent_density_g_cm3", "porosity_total")


@pytest.fixture(scope="module")
def stacks(tmp_path_factory):
    from ctpore.demo_scenario import make_piece
    from ctpore.io.ome_tiff import write_ome_tiff

    root = tmp_path_factory.mktemp("stacks")
    lines = ["sample_id,batch,stack_path,mass_mg,moisture_wb,operator"]
    for k, (sid, batch, seed) in enumerate(PIECES):
        piece = make_piece(setting="gentle", time_s=6.0 + 2 * k, seed=seed, shape=(40, 56, 56))
        write_ome_tiff(root / f"{sid}.ome.tif", piece.grey, piece.spacing_um)
        lines.append(f"{sid},{batch},{sid}.ome.tif,{1.5 + k},0.12,op{k}")
    (root / "good.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (root / "broken.tif").write_bytes(b"II*\x00" + b"\x00" * 60)  # a TIFF header, no image
    lines.append("x1,B,broken.tif,,,op9")
    (root / "all.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    recipe = (Recipe().replace("structure", enabled=False).replace("profiles", enabled=False)
              .replace("sample", solid_density_g_cm3=1.5))
    (root / "recipe.toml").write_text(recipe.to_toml(), encoding="utf-8")
    return root


@pytest.fixture(scope="module")
def pool():
    """Two warm 'spawn' worker processes shared by the runs below (each spawn costs seconds);
    the runner's own pool is exercised by the interrupted run, in a subprocess."""
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    with ProcessPoolExecutor(2, mp_context=multiprocessing.get_context("spawn")) as executor:
        yield executor


@pytest.fixture(scope="module")
def first_run(stacks, pool, tmp_path_factory):
    out = tmp_path_factory.mktemp("first") / "batch"
    run = run_batch(read_manifest(stacks / "all.csv"), recipe=load_recipe(stacks / "recipe.toml"),
                    out_dir=out, scheduler=pool, quiet=True)
    return run


def _table(out):
    with open(out / "pieces.csv", newline="", encoding="utf-8") as fh:
        return {r["sample_id"]: r for r in csv.DictReader(fh)}


def _finished(out):
    """Pieces whose result folder is in place (not analyze's hidden temporary folders)."""
    if not (out / "pieces").is_dir():
        return []
    return sorted(p.parent.name for p in (out / "pieces").glob("*/summary.json")
                  if not p.parent.name.startswith("."))


def _mtimes(out, ids):
    return {sid: os.stat(out / "pieces" / sid / "summary.json").st_mtime_ns for sid in ids}


def test_a_failing_piece_is_listed_and_the_others_complete(first_run):
    out = first_run.out_dir
    status = {p.sample_id: p.status for p in first_run.pieces}
    assert status == {"a1": "ok", "a2": "ok", "b1": "ok", "x1": "failed"}
    failures = json.loads((out / "failures.json").read_text())
    assert failures["n_failed"] == 1 and failures["failures"][0]["sample_id"] == "x1"
    assert "broken.tif" in failures["failures"][0]["error"]
    table = _table(out)
    assert list(table) == ["a1", "a2", "b1", "x1"]  # manifest order
    assert table["x1"]["status"] == "failed" and table["x1"]["porosity_gas"] == ""
    assert (out / MARKER_NAME).is_file() and not (out / "pieces" / "x1").exists()
    for k, (sid, batch, _) in enumerate(PIECES):
        summary = json.loads((out / "pieces" / sid / "summary.json").read_text())
        assert table[sid]["batch"] == batch and table[sid]["operator"] == f"op{k}"
        assert float(table[sid]["porosity_gas"]) == summary["porosity_gas"]
        # the manifest's mass and moisture reached the piece's recipe and derived numbers
        used = load_recipe(out / "pieces" / sid / "recipe.toml").sample
        assert used.mass_mg == 1.5 + k and used.moisture == 0.12
        assert float(table[sid]["apparent_density_g_cm3"]) == pytest.approx(
            (1.5 + k) / summary["envelope_volume_mm3"])


def test_rerun_skips_finished_pieces(first_run, stacks, capsys):
    out = first_run.out_dir
    ids = [sid for sid, _, _ in PIECES]
    before_times, before = _mtimes(out, ids), _table(out)
    with ThreadPoolExecutor(1) as pool:  # only the broken piece runs again: no process needed
        run = run_batch(read_manifest(stacks / "all.csv"),
                        recipe=load_recipe(stacks / "recipe.toml"), out_dir=out,
                        scheduler=pool, quiet=False)
    assert [p.status for p in run.pieces] == ["skipped-existing"] * 3 + ["failed"]
    assert _mtimes(out, ids) == before_times  # not recomputed
    after = _table(out)
    for sid in ids:
        assert [after[sid][m] for m in MEASURES] == [before[sid][m] for m in MEASURES]
        assert after[sid]["status"] == "skipped-existing"
    lines = [ln for ln in capsys.readouterr().err.splitlines() if ln.startswith("ctpore batch: [")]
    assert len(lines) == 4 and sum("skipped, result exists" in ln for ln in lines) == 3
    assert "FAILED" in lines[-1]


def test_interrupted_run_resumes_without_recomputing(first_run, stacks, pool, tmp_path):
    out = tmp_path / "batch"
    script = tmp_path / "run.py"
    script.write_text(textwrap.dedent(f"""
        from ctpore.batch.manifest import read_manifest
        from ctpore.batch.runner import run_batch
        from ctpore.recipe import load_recipe

        if __name__ == "__main__":
            run_batch(read_manifest({str(stacks / 'good.csv')!r}),
                      recipe=load_recipe({str(stacks / 'recipe.toml')!r}),
                      out_dir={str(out)!r}, workers=1, quiet=True)
    """), encoding="utf-8")
    proc = subprocess.Popen([sys.executable, str(script)], start_new_session=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 120
        done = []
        while not done:
            assert proc.poll() is None, proc.stderr.read().decode()
            assert time.monotonic() < deadline, "no piece finished within 120 s"
            time.sleep(0.02)
            done = _finished(out)
    finally:
        os.killpg(proc.pid, signal.SIGKILL)  # the batch and its worker: one process group
        proc.wait()
        proc.stderr.close()
    assert not (out / "pieces.csv").exists()  # killed before the end
    done = _finished(out)
    assert 1 <= len(done) < len(PIECES)
    times = _mtimes(out, done)

    run = run_batch(read_manifest(stacks / "good.csv"), recipe=load_recipe(stacks / "recipe.toml"),
                    out_dir=out, scheduler=pool, quiet=True)
    status = {p.sample_id: p.status for p in run.pieces}
    assert all(status[sid] == "skipped-existing" for sid in done)
    assert all(status[sid] == "ok" for sid, _, _ in PIECES if sid not in done)
    assert _mtimes(out, done) == times
    assert not [p for p in (out / "pieces").iterdir() if p.name.startswith(".")]  # no partials
    # identical numbers to the uninterrupted run
    resumed, uninterrupted = _table(out), _table(first_run.out_dir)
    for sid, _, _ in PIECES:
        assert [resumed[sid][m] for m in MEASURES] == [uninterrupted[sid][m] for m in MEASURES]

    # and the batch report runs on it (structure off: no thickness distributions)
    report = batch_report(out, reference="A", margins={"porosity_gas": 0.05},
                          measures=["porosity_gas", "porosity_open"])
    assert report["batches"] == {"A": 2, "B": 1} and report["distributions"] is None
    assert report["verdicts"]["B"]["porosity_gas"]["verdict"] == "inconclusive (too few pieces)"
    names = {p.name for p in write_batch_outputs(out, report)}
    assert {"batch_summary.csv", "verdicts.json", "batch_measures.png"} <= names


def test_changed_parameters_recompute_a_piece(first_run, stacks, tmp_path):
    import shutil

    out = tmp_path / "batch"
    shutil.copytree(first_run.out_dir, out)
    rows = [r for r in read_manifest(stacks / "good.csv") if r.sample_id == "a1"]
    recipe = load_recipe(stacks / "recipe.toml").replace("envelope", radius_um=120.0)
    with ThreadPoolExecutor(1) as pool:
        run = run_batch(rows, recipe=recipe, out_dir=out, scheduler=pool, quiet=True)
    assert run.pieces[0].status == "ok"  # recomputed: its recipe.toml differed
    assert load_recipe(out / "pieces" / "a1" / "recipe.toml").envelope.radius_um == 120.0


def test_foreign_folder_is_refused_without_force(stacks, tmp_path, capsys):
    out = tmp_path / "somewhere"
    out.mkdir()
    (out / "notes.txt").write_text("mine")
    rows = [r for r in read_manifest(stacks / "all.csv") if r.sample_id == "x1"]
    recipe = load_recipe(stacks / "recipe.toml")
    with pytest.raises(InputError, match="not a ctpore batch folder"):
        run_batch(rows, recipe=recipe, out_dir=out)
    assert sorted(p.name for p in out.iterdir()) == ["notes.txt"]
    with ThreadPoolExecutor(1) as pool:
        run = run_batch(rows, recipe=recipe, out_dir=out, force=True, scheduler=pool, quiet=True)
    assert run.pieces[0].status == "failed"
    assert (out / "notes.txt").read_text() == "mine" and (out / MARKER_NAME).is_file()
    assert capsys.readouterr().err == ""  # quiet


def test_sample_facts_the_recipe_rejects_stop_before_any_work(stacks, tmp_path):
    # moisture needs the solid density (derived quantities, REFERENCES.md "Puffed-product
    # facts"); the default recipe has none, so every piece with a moisture is listed
    out = tmp_path / "batch"
    with pytest.raises(InputError) as err:
        run_batch(read_manifest(stacks / "good.csv"), recipe=Recipe(), out_dir=out)
    msg = str(err.value)
    assert "3 piece(s)" in msg and all(f"'{sid}'" in msg for sid, _, _ in PIECES)
    assert "solid_density_g_cm3" in msg
    assert not out.exists()
