"""Run a batch on a dask.distributed cluster: the same pieces, outputs and resume as run_batch.

Every piece runs :func:`ctpore.batch.runner._analyze_piece` (the function the local worker
processes run) as one task on a dask worker; :func:`ctpore.batch.runner.run_batch` does the
rest (checks, skipping finished pieces, pieces.csv, failures.json) with the cluster in place
of its process pool, through the client's ``concurrent.futures`` executor. So the outputs of a
cluster run and a local run are the same files with the same numbers.

The workers read the stacks and write the result folders themselves: every path in the
manifest and the batch folder must be visible under the same name on every worker (a shared
file system), and the workers need the same ctpore. :func:`run_batch_distributed` checks both
before any piece runs.

dask.distributed is imported inside the functions only.

References
----------
.. [1] Rocklin M. (2015). Dask: parallel computation with blocked algorithms and task
   scheduling. Proc. 14th Python in Science Conference, 126-132.
   https://doi.org/10.25080/Majora-7b98e3ed-013
"""

from __future__ import annotations

import os
from pathlib import Path

from ..errors import InputError

__all__ = ["scheduler_client", "run_batch_distributed"]

_START_FIX = ("start a scheduler with `dask scheduler` and workers with `dask worker "
              "tcp://SCHEDULER-HOST:8786` (or any dask deployment), then give its address, e.g. "
              "tcp://10.0.0.5:8786; check the host, the port and that no firewall blocks it")


def scheduler_client(address: str, *, timeout_s: float = 10.0):
    """Connect to a running dask scheduler.

    Parameters
    ----------
    address : str
        Scheduler address, e.g. ``"tcp://10.0.0.5:8786"``.
    timeout_s : float
        Give up after this many seconds.

    Returns
    -------
    distributed.Client
        Not set as dask's default scheduler; close it when done.

    Raises
    ------
    InputError
        "cannot reach the dask scheduler at ADDRESS", with how to start or reach one.
    """
    if not isinstance(address, str) or not address.strip():
        raise InputError(f"the dask scheduler address {address!r} is empty or not text",
                         "give it as tcp://HOST:PORT, e.g. tcp://10.0.0.5:8786")
    from distributed import Client
    from distributed.comm.addressing import parse_address
    from distributed.comm.registry import get_backend

    address = address.strip()
    try:  # a bad scheme is refused here: a Client that fails on it cannot be closed cleanly
        get_backend(parse_address(address, strict=False)[0])
    except ValueError as err:
        raise InputError(f"cannot reach the dask scheduler at {address}: {err}",
                         "give the address as tcp://HOST:PORT, e.g. tcp://10.0.0.5:8786"
                         ) from None
    try:
        return Client(address, timeout=timeout_s, set_as_default=False)
    except (OSError, TimeoutError) as err:
        raise InputError(f"cannot reach the dask scheduler at {address} "
                         f"({type(err).__name__}: {err})", _START_FIX) from None


def run_batch_distributed(manifest_rows, *, recipe, out_dir, client, force: bool = False,
                          quiet: bool = False, wait_for_workers_s: float = 60.0):
    """Analyse every piece of a manifest on a dask.distributed cluster.

    The same as :func:`ctpore.batch.runner.run_batch` (same folder layout, pieces.csv,
    failures.json, resume by skipping finished pieces, a failing piece listed rather than
    raised), with the pieces run as tasks on the cluster's workers.

    Parameters
    ----------
    manifest_rows : sequence of ManifestRow
        From :func:`ctpore.batch.manifest.read_manifest`.
    recipe : Recipe, path of a TOML recipe, or None
        As in :func:`run_batch`.
    out_dir : str or Path
        The batch folder; it must be on a file system every worker sees under this name.
    client : str or distributed.Client
        A scheduler address (a client is opened and closed here) or a connected client (left
        open).
    force, quiet : bool
        As in :func:`run_batch`.
    wait_for_workers_s : float
        How long to wait for at least one worker to join the scheduler.

    Returns
    -------
    BatchRun

    Raises
    ------
    InputError
        Before any piece runs: the scheduler cannot be reached; no worker joins in time; a
        worker cannot import ctpore or has another version; a worker cannot see the manifest's
        stacks or the batch folder's parent; and everything :func:`run_batch` refuses. A worker
        that dies during a piece (e.g. out of memory; dask retries the task on another worker
        first) makes that piece "failed" in failures.json.
    """
    from .runner import run_batch

    rows = list(manifest_rows)
    own = isinstance(client, str)
    c = scheduler_client(client) if own else client
    try:
        _check_workers(c, rows, Path(out_dir), wait_for_workers_s)
        return run_batch(rows, recipe=recipe, out_dir=out_dir, force=force, quiet=quiet,
                         scheduler=c.get_executor(pure=False))
    finally:
        if own:
            c.close()


def _worker_probe(paths: list[str], version: str) -> dict:
    """Run on a worker: its ctpore version and which of ``paths`` it cannot see."""
    import ctpore

    return {"version": ctpore.__version__, "same_version": ctpore.__version__ == version,
            "missing": [p for p in paths if not os.path.exists(p)]}


def _existing_parent(path: Path) -> Path:
    path = path.expanduser().absolute()
    while not path.exists() and path != path.parent:
        path = path.parent
    return path


def _check_workers(client, rows, out_dir: Path, wait_s: float):
    from .. import __version__

    address = getattr(getattr(client, "scheduler", None), "address", None) or "the scheduler"
    try:
        client.wait_for_workers(1, timeout=wait_s)
    except TimeoutError:
        raise InputError(f"no dask worker joined the scheduler at {address} within "
                         f"{wait_s:g} s", "start workers with `dask worker "
                         f"{address}` on the compute nodes") from None
    # the stacks' folders (a few) and the place where the batch folder goes must be visible
    probe = sorted({str(Path(r.stack_path)) for r in rows[:8]}
                   | {str(_existing_parent(out_dir))})
    try:
        answers = client.run(_worker_probe, probe, __version__)
    except ImportError as err:
        raise InputError(f"a dask worker at {address} cannot import ctpore ({err})",
                         "install the same ctpore (and its `cluster` extra) in the workers' "
                         "Python environment") from None
    wrong = {w: a["version"] for w, a in answers.items() if not a["same_version"]}
    if wrong:
        raise InputError(f"dask workers run another ctpore version than this one "
                         f"({__version__}): {wrong}", "install the same ctpore version on "
                         "every worker, so that all pieces are measured alike")
    blind = {w: a["missing"] for w, a in answers.items() if a["missing"]}
    if blind:
        w, missing = next(iter(blind.items()))
        raise InputError(f"{len(blind)} dask worker(s) cannot see paths of this batch, e.g. "
                         f"{w} misses {missing}", "put the stacks and the batch folder on a "
                         "file system every worker mounts under the same path, and give "
                         "absolute paths")
