"""The chunked driver end to end: the same summary numbers and folder layout as ``analyze``."""

from __future__ import annotations

import json

import numpy as np
import pytest

from chunked_phantom import SPACING, porous_piece, recipe_dict

pytest.importorskip("dask")

_NOT_CHUNKED = {"warnings"}
_FLOAT_SUMS = {"pore_thickness_mean_um", "pore_thickness_sd_um", "wall_thickness_mean_um",
               "wall_thickness_sd_um", "porosity_partial_volume"}


@pytest.fixture(scope="module")
def small():
    """A 96³ piece, its recipe and the in-memory analysis (the reference)."""
    from ctpore.analysis import analyze
    from ctpore.recipe import Recipe

    grey = porous_piece(shape=(96, 96, 96), cells=150, seed=2)
    recipe = Recipe.from_dict(recipe_dict())
    return grey, recipe, analyze(grey, spacing_um=SPACING, recipe=recipe)


def _compare(summary, ref):
    from ctpore.analysis import SUMMARY_KEYS

    assert set(SUMMARY_KEYS) <= set(summary)
    for key, value in ref.items():
        if key in _NOT_CHUNKED or key not in summary:
            continue
        if key in _FLOAT_SUMS:
            assert summary[key] == pytest.approx(value, rel=1e-12), key  # float sums
        elif key == "partial_volume":
            for k, v in value.items():  # numbers to rounding of float sums, words exactly
                if isinstance(v, (int, float)) and not isinstance(v, bool):
                    assert summary[key][k] == pytest.approx(v, rel=1e-12, nan_ok=True), k
                else:
                    assert summary[key][k] == v, k
        else:
            assert summary[key] == value, key
    for key in ("porosity_gas", "porosity_open", "porosity_closed", "closed_pore_count",
                "threshold", "piece_frame", "wall_thickness_d50_um", "pore_thickness_d50_um"):
        assert key in summary


def test_analyze_chunked_equals_analyze(small, tmp_path):
    import tifffile

    from ctpore.chunked import analyze_chunked

    grey, recipe, ref = small
    res = analyze_chunked(grey, spacing_um=SPACING, recipe=recipe, chunks=(40, 36, 32),
                          out=tmp_path / "res")
    _compare(res.summary, ref.summary)
    np.testing.assert_array_equal(np.asarray(res.phases), ref.phases)
    info = res.summary["chunked"]
    assert info["chunk_shape_voxels"] == [40, 36, 32]
    assert info["peak_memory_bytes"] >= info["start_memory_bytes"] > 0
    assert info["scheduler"] == "threads"
    assert set(info["halo_voxels"]) == {"denoise", "envelope_closing", "pore_thickness",
                                        "wall_thickness"}
    folder = tmp_path / "res"
    for name in ("summary.json", "measurements.csv", "phases.ome.tif", "recipe.toml",
                 "provenance.json", "figures/threshold_histogram.png", "figures/slices.png",
                 "pore_thickness.ome.tif", "wall_thickness.ome.tif",
                 "thickness_distribution.csv", "profiles/depth.csv", "profiles/rz_map.csv"):
        assert (folder / name).is_file(), name
    on_disk = json.loads((folder / "summary.json").read_text())
    assert on_disk["porosity_gas"] == ref.summary["porosity_gas"]
    wall = tifffile.imread(folder / "wall_thickness.ome.tif")
    np.testing.assert_array_equal(wall, ref.structure.wall_thickness)
    assert not any(p.name.startswith("ctpore-chunked-") for p in tmp_path.iterdir())


def test_dask_array_input(small, tmp_path):
    import dask.array as da

    from ctpore.chunked import analyze_chunked

    grey, recipe, ref = small
    recipe = recipe.replace("structure", enabled=False).replace("profiles", enabled=False)
    res = analyze_chunked(da.from_array(grey, chunks=(50, 50, 50)), spacing_um=SPACING,
                          recipe=recipe, chunks=(48, 48, 48), temp_dir=tmp_path)
    assert res.phases is None and res.out is None
    for key in ("porosity_gas", "porosity_open", "porosity_closed", "closed_pore_count",
                "envelope_volume_mm3", "threshold"):
        assert res.summary[key] == ref.summary[key], key


@pytest.mark.parametrize("section, key, value", [
    ("envelope", "method", "rolling_sphere"), ("corrections", "cupping", True),
    ("corrections", "thin_walls", "hysteresis"), ("corrections", "uncertainty", True)])
def test_refused_recipe_keys_name_the_key(section, key, value, tmp_path):
    from ctpore.chunked import analyze_chunked
    from ctpore.errors import InputError
    from ctpore.recipe import Recipe

    recipe = Recipe().replace(section, **{key: value})
    with pytest.raises(InputError, match=f"{section}.{key}"):
        analyze_chunked(np.zeros((8, 8, 8), np.uint8), spacing_um=1.0, recipe=recipe,
                        out=tmp_path / "never")
    assert not (tmp_path / "never").exists()


def test_porosity_on_a_local_cluster(small, tmp_path):
    # The same tasks on dask.distributed worker processes (2 workers, 1 thread each): the
    # cross-chunk labelling and the open/closed counts equal the in-memory porosity. (The whole
    # analyze_chunked runs there too, but takes ~30 s on a loaded 2-core machine.)
    distributed = pytest.importorskip("distributed")
    from ctpore.chunked._blocks import Runner
    from ctpore.chunked.porosity import chunked_porosity
    from ctpore.chunked.workspace import Workspace
    from ctpore.measure.porosity import porosity

    _, _, ref = small
    # dashboard_address=":0" (a free port) rather than None: with None the scheduler's HTTP
    # server still tries port 8787 and warns (an error here) when another process holds it.
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=":0", memory_limit="1GiB") as cluster, \
            distributed.Client(cluster, set_as_default=False) as client, \
            Workspace(ref.phases.shape, (40, 36, 32), parent=tmp_path) as ws:
        runner = Runner(client)
        path = ws.create("phases", np.uint8)
        ws.array("phases")[...] = ref.phases
        measured, _ = chunked_porosity(ws, runner, path, spacing_um=SPACING)
        assert runner.name.startswith("dask.distributed tcp://")
        # The chunk choice reads the workers, not this machine: 1 thread and 1 GiB each;
        # a --memory budget is per worker and lowered to the workers' own limit.
        budgets = [runner.task_budget(b) for b in (None, 4 * 10**9, 5 * 10**8)]
    assert measured == porosity(ref.phases, spacing_um=SPACING)
    assert budgets == [(1, 2**30), (1, 2**30), (1, 5 * 10**8)]


def test_chunks_fit_the_worker_budget():
    # choose_chunks with one task per worker process under 1 GiB: the chosen cube plus its
    # halo fits, a cube 16 voxels larger would not (the rule of ctpore.chunked.memory).
    from ctpore.chunked.memory import BASELINE_BYTES, TASK_BYTES_PER_VOXEL, choose_chunks

    halo = 16
    side = choose_chunks((4096,) * 3, np.uint16, 2**30, halo=(halo,) * 3, workers=1)[0]
    per_voxel = TASK_BYTES_PER_VOXEL + 2
    assert BASELINE_BYTES + per_voxel * (side + 2 * halo) ** 3 <= 2**30
    assert BASELINE_BYTES + per_voxel * (side + 16 + 2 * halo) ** 3 > 2**30
    two = choose_chunks((4096,) * 3, np.uint16, 2**30, halo=(halo,) * 3, workers=2)[0]
    assert two < side
