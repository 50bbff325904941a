"""Campaign tasks on dask.distributed: a local cluster by default, or an existing one.

A task is a plain dictionary (picklable, no jax objects): the run configuration as TOML
text, the base folder for user-term files, the campaign root, the task name (its run
directory relative to the root) and a few labels.  `execute` runs one task in a worker:
it relaxes the configuration into ROOT/TASK (continuing from ROOT/TASK/checkpoint.h5 when
an interrupted campaign left one for the same configuration), records the row in the
root's catalogue and returns it; an exception becomes a row with status "failed" and the error text, so one
failure does not stop the others.

The local cluster has one worker process per core and one thread per worker, and the
workers' XLA and numba are told to use one thread (``XLA_FLAGS``, ``NUMBA_NUM_THREADS``),
so they do not oversubscribe the cores.  ``scheduler="inline"`` runs the tasks one after another in this process (used
for scans with continuation, where each point starts from the previous one).
"""

from __future__ import annotations

import contextlib
import json
import os
import signal
import socket
import sys
import threading
import time
import traceback
from pathlib import Path
from typing import Callable, TextIO

from solitons.campaigns import catalogue

SINGLE_THREAD_ENV = {
    "XLA_FLAGS": "--xla_cpu_multi_thread_eigen=false intra_op_parallelism_threads=1",
    "OMP_NUM_THREADS": "1",
    "NUMBA_NUM_THREADS": "1",
    "OPENBLAS_NUM_THREADS": "1",
    "MKL_NUM_THREADS": "1",
}


def model_text(spec) -> str:
    """Short description of the model's terms, e.g. '1*dirichlet + 1*skyrme_faddeev'."""
    return " + ".join(f"{t.coupling:g}*{t.kind if t.kind != 'user' else t.name}" for t in spec.terms)


def make_task(root: str | Path, name: str, text: str, base_dir: str | Path, continuum: list[float] | None = None,
              priority: int = 0, **labels) -> dict:
    """A task: relax ``text`` into root/name, or, with ``continuum`` (spacings), run the
    continuum command on it there (`solitons.campaigns.continuum.run_continuum` with publish).
    ``priority``: `run_tasks` starts higher ones first."""
    return {"root": str(root), "task": name, "text": text, "base_dir": str(base_dir), "labels": labels,
            "continuum": continuum, "priority": int(priority)}


def execute(task: dict) -> dict:
    """Relax one task (in a worker) and record it in the catalogue; never raises for a
    failed run: the returned row then has status 'failed' and the error."""
    from solitons.config import load
    from solitons.run import CHECKPOINT, SUMMARY, RunError, config_hash, provenance, relax, run_hash

    root = Path(task["root"])
    out = root / task["task"]
    start = time.perf_counter()
    row = {"task": task["task"], "config_hash": config_hash(task["text"]), "path": task["task"],
           "worker": f"{socket.gethostname()}:{os.getpid()}", "family": task["labels"].get("family"),
           "expected_charge": task["labels"].get("expected_charge")}
    try:
        spec = load(None, text=task["text"], base_dir=task["base_dir"])
        row["config_hash"] = run_hash(spec)
        row["provenance"] = json.dumps(provenance(spec))
        row["model"] = model_text(spec)
        row["family"] = spec.initial.description
        row["expected_charge"] = spec.initial.expected_charge
        summary = None
        if task.get("continuum"):
            from solitons.campaigns.continuum import run_continuum

            run_continuum(None, out, text=task["text"], base_dir=task["base_dir"], spacings=task["continuum"],
                          stream=None, publish=True)
            summary = json.loads((out / SUMMARY).read_text())
        elif (out / CHECKPOINT).exists():  # an interrupted campaign: continue this run
            try:
                summary = relax(spec, out, resume=True, stream=None)
                row["resumed"] = True
            except RunError:  # the checkpoint belongs to another configuration
                summary = None
        if summary is None:
            summary = relax(spec, out, overwrite=True, stream=None)
        row.update(status="finished", energy=summary["energy"], hopf_charge=summary["hopf_charge"],
                   label=summary["label"], verdict=summary["verdict"], converged=int(summary["converged"]))
    except Exception as error:  # a failed task is reported, the campaign goes on
        row.update(status="failed", error=f"{type(error).__name__}: {error}",
                   traceback=traceback.format_exc(limit=6))
    row["wall_seconds"] = time.perf_counter() - start
    row["finished_at"] = time.time()
    catalogue.record(root / catalogue.CATALOGUE, row)
    return row


@contextlib.contextmanager
def _sigint_ignored_by_workers():
    """Ignore SIGINT while the local cluster starts, so that its worker processes inherit
    the ignored disposition (an ignored signal stays ignored across exec; Python then
    installs no KeyboardInterrupt handler).  A Ctrl-C from the terminal goes to the whole
    process group; with this only the command's own process answers it and closes the
    cluster in order (a worker that died of it made its nanny log a traceback).  The
    price: a Ctrl-C during the few seconds of cluster start-up is ignored."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def run_tasks(tasks: list[dict], scheduler: str | None = None, workers: int | None = None,
              stream: TextIO | None = sys.stderr, describe: Callable[[dict], str] | None = None,
              function: Callable[[dict], dict] = execute) -> list[dict]:
    """Run ``tasks`` and return their rows in the order given.

    ``scheduler``: None starts a local cluster (``workers`` processes, default one per
    core, one thread each); an address (``tcp://host:port``) uses a running dask
    scheduler; "inline" runs in this process.  A progress bar over tasks goes to
    ``stream`` (None: quiet)."""
    from tqdm import tqdm

    results: list[dict | None] = [None] * len(tasks)
    bar = tqdm(total=len(tasks), desc="tasks", unit="task", file=stream or sys.stderr, disable=stream is None)

    def done(index, row):
        results[index] = row
        bar.update(1)
        text = describe(row) if describe else row.get("status", "")
        bar.set_postfix_str(text)
        if row.get("status") == "failed" and stream is not None:
            bar.write(f"FAILED {row['task']}: {row.get('error')}", file=stream)

    if not tasks:
        bar.close()
        return []
    if scheduler == "inline":
        for index, task in enumerate(tasks):
            done(index, function(task))
        bar.close()
        return results

    from distributed import Client, LocalCluster, as_completed

    cluster = None
    if scheduler is None:
        n = workers or len(os.sched_getaffinity(0))
        with _sigint_ignored_by_workers():
            cluster = LocalCluster(n_workers=min(n, len(tasks)), threads_per_worker=1, processes=True,
                                   dashboard_address=":0", env=dict(SINGLE_THREAD_ENV), silence_logs=40)
            client = Client(cluster)
    else:
        client = Client(scheduler)
    try:
        # dask starts higher priorities first: a caller may rank tasks by cost (largest first
        # keeps the last worker from starting the longest task alone at the end)
        # (submitted in that order too: the first tasks submitted start at once, whatever their rank)
        order = sorted(range(len(tasks)), key=lambda i: -int(tasks[i].get("priority", 0)))
        futures = {client.submit(function, tasks[i], pure=False, priority=int(tasks[i].get("priority", 0))): i
                   for i in order}
        for future in as_completed(futures):
            index = futures[future]
            try:
                row = future.result()
            except Exception as error:  # the worker itself died or could not run the task
                row = {"task": tasks[index]["task"], "status": "failed",
                       "error": f"{type(error).__name__}: {error}"}
                try:
                    catalogue.record(Path(tasks[index]["root"]) / catalogue.CATALOGUE,
                                     dict(row, path=tasks[index]["task"],
                                          finished_at=time.time()))
                except Exception:  # the catalogue itself is unreachable: keep the row in memory
                    pass
            done(index, row)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
        bar.close()
    return results
