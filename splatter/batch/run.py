"""Run a batch: skip what finished, render the rest locally or on a Dask cluster, write the board.

Local runs use worker processes (``spawn``), each with its share of the
machine's cores for numba; a worker loads the compiled kernels once and
renders many variations. ``cluster`` sends each variation as a task to a
running Dask scheduler instead; the scheduler gives a lost worker's task to
another worker. Either way every variation renders exactly as
``splatter render`` would (results never depend on thread count), and the
manifest is written only here, by the process that runs the batch.
"""

from __future__ import annotations

import os
import time
import uuid
from concurrent.futures import ProcessPoolExecutor, as_completed
from typing import Any, Callable, Dict, Iterable, List, Optional

from splatter.batch.board import BoardCell, write_board
from splatter.batch.manifest import FORMAT, entry_for, file_records, is_finished, read_manifest, write_manifest
from splatter.batch.plan import Batch, is_batch_file, parse_seeds, parse_sweep, plan_batch, read_batch_file, toml_value
from splatter.batch.worker import init_worker, render_variation
from splatter.core.errors import LookError

__all__ = ["vary", "run_batch", "default_jobs", "summary_lines", "dry_run_lines"]

_Done = Callable[[Dict[str, Any], Dict[str, Any]], None]


def default_jobs(count: int, cores: Optional[int] = None) -> int:
    """Worker processes for ``count`` variations: one per core, no more than there is work.

    One single-threaded render per core beats one render on all cores: a
    render's simulation steps, file encoding and writes are partly serial.

    >>> default_jobs(16, cores=2), default_jobs(1, cores=8), default_jobs(0, cores=4)
    (2, 1, 1)
    """
    cores = cores or os.cpu_count() or 1
    return max(1, min(count, cores))


def _threads_per_job(jobs: int) -> int:
    return max(1, (os.cpu_count() or 1) // jobs)


def _task(batch: Batch, v, threads: Optional[int], max_memory: Optional[int] = None) -> Dict[str, Any]:
    look = batch.look if isinstance(batch.look, dict) else os.path.abspath(batch.look)
    return {"look": look, "sets": list(v.sets), "folder": os.path.abspath(os.path.join(batch.out, v.name)),
            "threads": threads, "max_memory": max_memory, "name": v.name}


def _run_inline(tasks: List[Dict], done: _Done) -> None:
    for task in tasks:
        done(task, render_variation(task))


def _run_local(tasks: List[Dict], jobs: int, done: _Done) -> None:
    """Render ``tasks`` in ``jobs`` spawned worker processes.

    A worker that dies (killed, out of memory) breaks the pool and every
    variation in flight with it; those are rendered once more in a fresh
    pool, and only a variation lost twice is reported failed.
    """
    import multiprocessing
    from concurrent.futures.process import BrokenProcessPool

    threads = tasks[0]["threads"] if tasks else None
    ctx = multiprocessing.get_context("spawn")  # numba's thread pools are not safe to fork
    for attempt in range(2):
        lost = []
        with ProcessPoolExecutor(max_workers=min(jobs, len(tasks)), mp_context=ctx, initializer=init_worker,
                                 initargs=(threads,)) as pool:
            futures = {pool.submit(render_variation, t): t for t in tasks}
            try:
                for fut in as_completed(futures):
                    try:
                        result = fut.result()
                    except BrokenProcessPool as err:
                        if attempt == 0:
                            lost.append(futures[fut])
                            continue
                        result = {"status": "failed", "files": [], "seconds": None, "warnings": [],
                                  "message": f"worker process lost twice (killed or out of memory?): {err}"}
                    done(futures[fut], result)
            except BaseException:
                pool.shutdown(wait=False, cancel_futures=True)
                raise
        if not lost:
            return
        tasks = lost


def _connect(address: str):
    try:
        from distributed import Client
    except ImportError:
        raise LookError("--cluster", "", "Dask distributed installed (pip install 'splatter[farm]')",
                        "no module named distributed") from None
    try:
        return Client(address, timeout="15s")
    except (OSError, TimeoutError, ValueError) as err:
        raise LookError("--cluster", "", "the address of a running Dask scheduler (tcp://host:port)",
                        f"{address!r}: {err}") from None


def _run_cluster(client, tasks: List[Dict], done: _Done) -> None:
    from distributed import as_completed as dask_completed

    token = uuid.uuid4().hex[:8]
    futures = {}
    for t in tasks:
        # A lost worker's task is given to another one by the scheduler (up to its allowed-failures);
        # retries covers an error raised outside render_variation's own handling on a worker.
        futures[client.submit(render_variation, t, key=f"splatter-vary-{token}-{t['name']}", pure=False,
                              retries=2)] = t
    try:
        for fut in dask_completed(list(futures)):
            try:
                result = fut.result()
            except Exception as err:  # KilledWorker after too many lost workers, or a cancelled task
                result = {"status": "failed", "message": f"lost on the cluster: {type(err).__name__}: {err}",
                          "files": [], "seconds": None, "warnings": []}
            done(futures[fut], result)
    except BaseException:
        client.cancel(list(futures))
        raise


def _sweep_values(sweep) -> Dict[str, List[str]]:
    """A Python sweep (key to a list of values, or ``"LO:HI:COUNT"``) as TOML text."""
    out: Dict[str, List[str]] = {}
    for key, values in (sweep or {}).items():
        if isinstance(values, str):
            k, v = parse_sweep(f"{key}={values}", where="sweep")
            out[k] = v
        elif isinstance(values, (list, tuple, range)) and len(values):
            out[key] = [toml_value(v.item() if hasattr(v, "item") else v) for v in values]
        else:
            raise LookError("sweep", key, "a non-empty list of values or \"LO:HI:COUNT\"", repr(values))
    return out


def vary(look, *, seeds=None, sweep=None, zip: bool = False, sets: Iterable[str] = (), out: Optional[str] = None,
         jobs: Optional[int] = None, cluster: Optional[str] = None, dry_run: bool = False,
         progress: bool = True, parsed_sweep: Optional[Dict[str, List[str]]] = None) -> Dict[str, Any]:
    """Render many variations of a look; return the batch's manifest.

    Parameters
    ----------
    look : str, os.PathLike or dict
        A look file, a batch file (TOML with a ``look`` key; the other
        arguments then add to or replace its values), or a look as a dict.
    seeds : str, int or sequence of int, optional
        ``"A:B"`` (A to B-1), a list, or one seed. Default: the look's seed.
    sweep : dict, optional
        Look key (dotted, as ``--set``) to a list of values, or to
        ``"LO:HI:COUNT"`` for evenly spaced numbers.
    zip : bool
        Pair the sweep's lists by position instead of crossing them.
    sets : iterable of str
        ``KEY=VALUE`` overrides shared by every variation.
    out : str, optional
        Batch folder (``{name}`` filled in); default ``renders/{name}-vary``.
    jobs : int, optional
        Local worker processes (default one per core, at most one per
        variation); 1 renders in this process.
    cluster : str, optional
        A Dask scheduler address (``tcp://host:port``); every variation is
        a task on its workers, which need splatter and the same folders.
    dry_run : bool
        Plan and check only; return the manifest that would be written.
    progress : bool
        A progress bar over variations on stderr.
    parsed_sweep : dict of str to list of str, optional
        Sweep values already as TOML text (the command line's ``--sweep``).

    Returns
    -------
    dict
        The manifest (what ``vary.json`` holds), see ``docs/batches.md``.

    Raises
    ------
    LookError
        Bad input, found before anything is written.

    Examples
    --------
    >>> import tempfile
    >>> look = {"name": "quay_puff", "clip": {"frames": 2}, "image": {"width": 16, "height": 16},
    ...         "source": [{"rate": 20, "life": 1}]}
    >>> m = vary(look, seeds="1:3", sweep={"source.0.rate": [20, 40]}, out=tempfile.mkdtemp(), dry_run=True)
    >>> [v["folder"] for v in m["variations"]]
    ['seed1_source.0.rate-20', 'seed1_source.0.rate-40', 'seed2_source.0.rate-20', 'seed2_source.0.rate-40']
    """
    kwargs: Dict[str, Any] = {}
    if not isinstance(look, dict) and is_batch_file(look):
        kwargs = read_batch_file(look)
    else:
        kwargs["look"] = look
    if seeds is not None:
        kwargs["seeds"] = parse_seeds(seeds)
    kwargs["sweep"] = {**kwargs.get("sweep", {}), **_sweep_values(sweep), **(parsed_sweep or {})}
    kwargs["zip"] = bool(zip) or kwargs.get("zip", False)
    kwargs["sets"] = kwargs.get("sets", []) + list(sets)
    if out is not None:
        kwargs["out"] = out
    batch = plan_batch(**kwargs)
    return run_batch(batch, jobs=jobs, cluster=cluster, dry_run=dry_run, progress=progress)


def worker_share(jobs: int, count: int) -> int:
    """Bytes each local worker may plan to use: the render limit shared by the workers that start.

    Parameters
    ----------
    jobs : int
        Worker processes asked for.
    count : int
        Variations to render (no more workers start than that).

    Returns
    -------
    int
        :func:`splatter.cost.memory_limit` divided by ``min(jobs, count)`` (at least 1).
    """
    from splatter.cost import memory_limit

    return memory_limit() // max(1, min(jobs, count))


def _refuse_too_big(todo, share: int) -> None:
    """Refuse, before anything is written, a variation that would not fit in its worker's share of memory.

    The estimate is the one the command line makes before framing (no
    simulation); each worker's render still checks again at its final
    framing. Variations sent to a cluster are checked by their workers,
    whose memory this machine cannot see.
    """
    from splatter.render import refuse_if_over_memory

    for v in todo:
        try:
            refuse_if_over_memory(v.look, v.look.clip.frames, max_memory=share,
                                  option_name="each worker's share of the free memory; run fewer --jobs")
        except LookError as err:
            raise LookError(f"variation {v.name}: {err.file}", err.key, err.expected, err.got, err.line) from None


def _manifest(batch: Batch, entries: List[Dict[str, Any]]) -> Dict[str, Any]:
    return {
        "format": FORMAT,
        "look": batch.look if isinstance(batch.look, str) else "<dict>",
        "name": batch.name,
        "out": batch.out,
        "seeds": batch.seeds,
        "sweep": batch.sweep,
        "zip": batch.zip,
        "set": batch.sets,
        "variations": entries,
    }


def run_batch(batch: Batch, *, jobs: Optional[int] = None, cluster: Optional[str] = None, dry_run: bool = False,
              progress: bool = True) -> Dict[str, Any]:
    """Run a planned :class:`~splatter.batch.plan.Batch`; see :func:`vary`."""
    if jobs is not None and (isinstance(jobs, bool) or not isinstance(jobs, int) or not 1 <= jobs <= 1024):
        raise LookError("--jobs", "", "a number of worker processes from 1 to 1024", repr(jobs))
    previous = read_manifest(batch.out) or {"variations": []}
    before = {e.get("folder"): e for e in previous["variations"] if isinstance(e, dict)}
    entries, todo = [], []
    for v in batch.variations:
        old = before.get(v.name)
        if old is not None and is_finished(old, v.digest, batch.out):
            entries.append({**old, "reused": True})
        else:
            entries.append(entry_for(v))
            todo.append(v)
    manifest = _manifest(batch, entries)
    # Local workers share this machine's memory, measured once (a cluster's workers judge their own).
    share = worker_share(jobs or default_jobs(len(todo)), len(todo)) if cluster is None else None
    if share is not None:
        _refuse_too_big(todo, share)
    if dry_run:
        return manifest
    client = _connect(cluster) if cluster else None  # an unreachable scheduler is bad input: nothing written yet
    t_start = time.perf_counter()
    try:
        os.makedirs(batch.out, exist_ok=True)
        write_manifest(batch.out, manifest)
        by_name = {e["folder"]: e for e in entries}
        jobs = jobs or default_jobs(len(todo))
        threads = _threads_per_job(jobs) if client is None and jobs > 1 else None
        tasks = [_task(batch, v, threads, share) for v in todo]
        bar = None
        if progress and tasks:
            from tqdm import tqdm

            bar = tqdm(total=len(tasks), desc=f"vary {batch.name}", unit="variation", dynamic_ncols=True)

        def done(task, result):
            entry = by_name[task["name"]]
            ok = result["status"] == "done"
            entry.update(status=result["status"], message=result.get("message"), seconds=result.get("seconds"),
                         warnings=result.get("warnings", []), host=result.get("host"),
                         files=file_records(result["files"], batch.out) if ok else [])
            write_manifest(batch.out, manifest)
            if bar is not None:
                bar.update(1)

        try:
            if client is not None:
                _run_cluster(client, tasks, done)
            elif jobs == 1 or len(tasks) <= 1:
                _run_inline(tasks, done)
            else:
                _run_local(tasks, jobs, done)
        except BaseException:
            for e in entries:
                if e["status"] == "pending":
                    e.update(status="interrupted", message="the batch stopped before this variation finished")
            write_manifest(batch.out, manifest)
            raise
        finally:
            if bar is not None:
                bar.close()
    finally:
        if client is not None:
            client.close()
    cells = [BoardCell(label=_label(v, e), folder=os.path.join(batch.out, v.name) if e["status"] == "done" else None,
                       exposure=v.look.shading.exposure) for v, e in zip(batch.variations, entries)]
    t_board = time.perf_counter()
    manifest["board"] = write_board(batch.out, cells, fps=batch.variations[0].look.clip.fps)
    t_board = time.perf_counter() - t_board
    failed = [e for e in entries if e["status"] != "done"]
    manifest["summary"] = {
        "variations": len(entries),
        "rendered": sum(1 for e in entries if e["status"] == "done" and not e.get("reused")),
        "reused": sum(1 for e in entries if e.get("reused")),
        "failed": len(failed),
        "seconds": round(time.perf_counter() - t_start, 3),
        "board_seconds": round(t_board, 3),
        "jobs": None if client is not None else jobs,
        "cluster": cluster,
    }
    write_manifest(batch.out, manifest)
    return manifest


def _label(v, entry) -> List[str]:
    lines = v.label()
    if entry["status"] != "done":
        lines[0] += " (failed)"
    return lines


def summary_lines(manifest: Dict[str, Any]) -> List[str]:
    """The end of ``splatter vary``: counts, where things went, and every failure with its message."""
    s = manifest["summary"]
    out = manifest["out"]
    lines = [
        f"splatter: vary: {s['variations']} variations of {manifest['name']}: {s['rendered']} rendered, "
        f"{s['reused']} already finished, {s['failed']} failed in {s['seconds']:.1f} s",
    ]
    if manifest.get("board"):
        lines.append(f"splatter: board: {os.path.join(out, 'board.png')}, {os.path.join(out, 'board.gif')}; "
                     f"manifest: {os.path.join(out, 'vary.json')}")
    for e in manifest["variations"]:
        if e["status"] != "done":
            lines.append(f"splatter: failed: {e['folder']}: {e['message']}")
    return lines


def dry_run_lines(manifest: Dict[str, Any]) -> List[str]:
    """``--dry-run``: every variation, whether it would render or is already finished, and its overrides."""
    lines = [f"splatter: vary: {len(manifest['variations'])} variations of {manifest['name']} into {manifest['out']}"]
    for e in manifest["variations"]:
        state = "finished, skip" if e.get("reused") else "render"
        sets = " ".join(f"{k}={v}" for k, v in e["overrides"].items())
        lines.append(f"  {state:14s} {e['folder']}  seed={e['seed']} {sets}".rstrip())
    return lines

