"""Render one variation: the task a worker process (or a Dask worker) runs.

A task is a plain dict (so it pickles cheaply and means the same on any
machine): the look (a file path or a dict), its overrides, the folder to
write and, for local workers, the compute threads and the worker's share of
this machine's memory. The result is a plain
dict too. Every failure comes back as ``status = "failed"`` with a message,
so one bad variation never stops the others.

The pipeline is imported on the first task, so a worker process pays for
loading numba and the compiled kernels once and reuses them for every
variation it renders.
"""

from __future__ import annotations

import os
import time
import warnings
from typing import Any, Dict, Optional

from splatter.core.errors import LookError

__all__ = ["render_variation", "init_worker"]


def init_worker(threads: Optional[int]) -> None:
    """Process initializer of local workers: set the compute threads before numba loads."""
    if threads:
        os.environ["NUMBA_NUM_THREADS"] = str(int(threads))


def render_variation(task: Dict[str, Any]) -> Dict[str, Any]:
    """Render one variation and report what happened.

    Parameters
    ----------
    task : dict
        ``look`` (path or dict), ``sets`` (list of ``KEY=VALUE``), ``folder``
        (where its files go), ``threads`` (int or None: leave numba's),
        ``max_memory`` (bytes, or None for the render's default: a local
        worker's share of this machine's memory, which also bounds what its
        simulation may hold).

    Returns
    -------
    dict
        ``status`` ("done" or "failed"), ``message`` (None or why it failed),
        ``files`` (paths written), ``seconds`` (wall time), ``warnings``
        (the render's warnings as text), ``host`` (where it ran).
    """
    t0 = time.perf_counter()
    out: Dict[str, Any] = {"status": "failed", "message": None, "files": [], "seconds": 0.0, "warnings": [],
                           "host": _host()}
    try:
        from splatter.look.load import load_look
        from splatter.render import render

        threads = task.get("threads")
        if threads:
            import numba

            numba.set_num_threads(min(int(threads), numba.config.NUMBA_NUM_THREADS))
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            look = load_look(task["look"], overrides=task["sets"])
            result = render(look, out_dir=task["folder"], progress=False, max_memory=task.get("max_memory"))
        out.update(status="done", files=list(result.files), warnings=[str(w.message) for w in caught])
    except LookError as err:
        out["message"] = str(err)
    except MemoryError:
        out["message"] = "out of memory while rendering this variation"
    except OSError as err:
        where = f" {err.filename}" if getattr(err, "filename", None) else ""
        out["message"] = f"cannot write{where}: {err.strerror or err}"
    except Exception as err:  # an internal failure: say what, keep the batch going
        out["message"] = f"internal error: {type(err).__name__}: {err}"
    out["seconds"] = time.perf_counter() - t0
    return out


def _host() -> str:
    import socket

    return f"{socket.gethostname()}:{os.getpid()}"
