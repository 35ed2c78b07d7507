"""Run a sweep's tasks on dask.distributed, resumably, and combine them into sweep.nc.

Layout of the output folder::

    DIR/points/<task>.nc   one file per finished (point, seed), written atomically,
                           tagged with the task's hash (config + engines + version)
    DIR/sweep.nc           dims (axis..., seed): each engine's scalar observables
                           (``agents_*``, ``continuum_*``) and the mismatch (``mismatch_*``,
                           ``verdict_code``: 1 holds, 0 not resolved, -1 fails, NaN missing)
    DIR/phase_diagram.png, DIR/validity_map.png, DIR/summary.html

A task whose file exists with the same hash is skipped, so re-running the same command
resumes after an interrupt, a killed worker or a lost node. dask retries a task whose
worker died (``resources.retries``); a task that fails in the model (divergence, bad
point) is reported with its reason and never stops the others.
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import numpy as np
import xarray as xr

from ._build import annotate, global_attrs
from ._config import config_from_toml, config_to_toml
from ._errors import CrossflockError, InputError
from ._io import read_dataset, status, write_dataset
from ._sweep import Sweep, Task, axis_names

__all__ = ["run_sweep", "run_point", "combine", "SweepSummary"]



class SweepSummary:
    """Counts and reasons of a sweep run."""

    def __init__(self):
        self.done = 0
        self.skipped = 0
        self.failed: dict[str, str] = {}
        self.output: Path | None = None
        self.seconds = 0.0

    def line(self) -> str:
        text = (f"sweep: {self.done} done, {self.skipped} skipped, "
                f"{len(self.failed)} failed in {self.seconds:.1f} s")
        if self.failed:
            text += "; " + "; ".join(f"{k}: {v}" for k, v in sorted(self.failed.items()))
        return text


def _point_file(outdir: Path, task: Task) -> Path:
    return outdir / "points" / f"{task.name}.nc"


def run_point(payload: dict) -> dict:
    """Run one (point, seed) task and write its file (executes on a dask worker).

    Parameters
    ----------
    payload : dict
        ``config`` (TOML text), ``engines``, ``path``, ``key``, ``name``, ``threads``.

    Returns
    -------
    dict
        ``name`` and ``status`` ("done" or "failed") with ``reason``.
    """
    import numba

    from ._pipeline import evaluate

    numba.set_num_threads(min(payload["threads"], numba.config.NUMBA_NUM_THREADS))
    cfg = config_from_toml(payload["config"])
    try:
        values, verdict, reason = evaluate(cfg, payload["engines"])
    except CrossflockError as exc:
        return {"name": payload["name"], "status": "failed",
                "reason": str(exc).splitlines()[0]}
    ds = xr.Dataset({k: ((), v) for k, v in values.items()})
    ds.attrs = global_attrs(cfg, "sweep", f"crossflock sweep point {payload['name']}",
                            task_key=payload["key"], task_name=payload["name"],
                            verdict=verdict, reason=reason)
    write_dataset(annotate(ds), payload["path"])
    return {"name": payload["name"], "status": "done", "reason": ""}


def _load_point(path: Path, key: str):
    """The point file's Dataset when it is a finished result of task ``key``, else None."""
    if not path.exists():
        return None
    try:
        ds = read_dataset(path, kind="sweep")
    except InputError:
        return None
    return ds if ds.attrs.get("task_key") == key else None


def _client(workers, scheduler, threads):
    from dask.distributed import Client, LocalCluster

    if scheduler:
        try:
            return Client(scheduler, timeout="20s"), None
        except OSError as exc:
            raise InputError(f"cannot reach dask scheduler {scheduler!r}: {exc}") from None
    n = workers or max(1, (os.cpu_count() or 1) // threads)
    # workers read NUMBA_NUM_THREADS when they start; set it for the spawned processes
    old = os.environ.get("NUMBA_NUM_THREADS")
    os.environ["NUMBA_NUM_THREADS"] = str(threads)
    try:
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                               host="127.0.0.1", dashboard_address=None,
                               silence_logs=40)
    finally:
        if old is None:
            os.environ.pop("NUMBA_NUM_THREADS", None)
        else:
            os.environ["NUMBA_NUM_THREADS"] = old
    return Client(cluster), cluster


def run_sweep(sweep: Sweep, outdir, *, workers=None, scheduler=None, progress=None,
              log=None) -> SweepSummary:
    """Run every unfinished task of ``sweep`` and write ``DIR/sweep.nc`` and figures."""
    from dask.distributed import as_completed

    log = log or status
    start = time.perf_counter()
    outdir = Path(outdir)
    (outdir / "points").mkdir(parents=True, exist_ok=True)
    for stale in (outdir / "points").glob(".*.nc.*"):
        # temporary files of tasks killed mid-write (never under a final name)
        stale.unlink(missing_ok=True)
    tasks = sweep.tasks()
    summary = SweepSummary()
    todo = []
    for task in tasks:
        path = _point_file(outdir, task)
        if _load_point(path, task.key) is not None:
            summary.skipped += 1
        else:
            todo.append(task)
    log(f"{len(tasks)} tasks: {summary.skipped} already finished, {len(todo)} to run")
    if todo:
        client, cluster = _client(workers, scheduler, sweep.threads)
        try:
            payloads = [{"config": config_to_toml(t.config), "engines": list(t.engines),
                         "path": str(_point_file(outdir, t)), "key": t.key, "name": t.name,
                         "threads": sweep.threads} for t in todo]
            futures = client.map(run_point, payloads, key=[f"crossflock-{t.name}-{t.key}"
                                                           for t in todo],
                                 retries=sweep.retries, pure=False)
            names = {f.key: t.name for f, t in zip(futures, todo, strict=True)}
            bar = _bar(len(todo), progress)
            for fut in as_completed(futures):
                try:
                    res = fut.result()
                except Exception as exc:  # worker lost beyond retries, or a bug
                    res = {"name": names[fut.key], "status": "failed",
                           "reason": f"{type(exc).__name__}: {str(exc).splitlines()[0]}"
                           if str(exc) else type(exc).__name__}
                if res["status"] == "done":
                    summary.done += 1
                else:
                    summary.failed[res["name"]] = res["reason"]
                if bar is not None:
                    bar.update(1)
            if bar is not None:
                bar.close()
        except KeyboardInterrupt:
            _silence_dask()  # tearing down mid-task makes dask log internal errors
            raise
        finally:
            client.close()
            if cluster is not None:
                cluster.close()
    ds = combine(sweep, outdir, tasks)
    summary.output = write_dataset(ds, outdir / "sweep.nc")
    summary.seconds = time.perf_counter() - start
    try:
        from ._sweep_figures import write_figures

        write_figures(ds, outdir, summary)
    except ImportError:  # pragma: no cover - matplotlib is a dependency
        pass
    summary.seconds = time.perf_counter() - start
    return summary


def _silence_dask():
    """Mute dask's and tornado's loggers for the teardown after an interrupt.

    Every logger under these names, not only the top ones: dask's logging set-up gives
    some children their own level and handler (``tornado.application`` at ERROR, for
    one), so muting the parent alone let a teardown traceback through.
    """
    import logging

    tops = ("distributed", "tornado", "asyncio")
    names = [name for name in list(logging.root.manager.loggerDict)
             if name.split(".")[0] in tops]
    for name in (*tops, *names):
        logging.getLogger(name).setLevel(logging.CRITICAL + 1)


def _bar(total, progress):
    if progress is False or (progress is None and not sys.stderr.isatty()):
        return None
    from tqdm import tqdm

    return tqdm(total=total, desc="sweep points", unit="task", file=sys.stderr)


def combine(sweep: Sweep, outdir, tasks=None) -> xr.Dataset:
    """Gather the point files into one Dataset with dims (axis..., seed).

    ``tasks`` defaults to ``sweep.tasks()`` (pass them to avoid expanding twice).
    """
    outdir = Path(outdir)
    keys = list(sweep.axes)
    dims = axis_names(keys) + ["seed"]
    shape = sweep.shape + (sweep.seeds,)
    values: dict[str, np.ndarray] = {}
    done = np.zeros(shape, dtype=np.int8)
    for task in tasks if tasks is not None else sweep.tasks():
        ds = _load_point(_point_file(outdir, task), task.key)
        if ds is None:
            continue
        where = task.index + (task.seed_index,)
        for name, var in ds.data_vars.items():
            arr = values.setdefault(str(name), np.full(shape, np.nan))
            arr[where] = float(var.values)
        done[where] = 1
    coords = {name: np.asarray(sweep.axes[k]) for name, k in zip(dims, keys, strict=False)}
    coords["seed"] = np.arange(sweep.seeds)
    data = {name: (dims, arr) for name, arr in sorted(values.items())}
    data["done"] = (dims, done)
    ds = xr.Dataset(data, coords=coords)
    for name, k in zip(dims, keys, strict=False):
        ds[name].attrs["long_name"] = f"sweep axis {k}"
        ds[name].attrs["units"] = "1"
        ds[name].attrs["config_key"] = k
    ds["seed"].attrs.update(long_name="seed index (see crossflock sweep docs)", units="1")
    ds.attrs = global_attrs(sweep.base, "sweep", "crossflock density-noise sweep",
                            engines=",".join(sweep.engines), seeds=sweep.seeds,
                            axes=",".join(keys))
    return annotate(ds)
