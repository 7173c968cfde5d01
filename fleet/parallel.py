"""Where per-site work runs: in this process, on a local multi-process Dask cluster, or on
an existing ``dask.distributed`` scheduler.

The planning stages that work site by site (weather years, array power, dispatch, the
option metrics) run as independent chunks of sites; each chunk's result depends only on
its sites and the program (every site draws its weather from its own seed), so the plan
is the same whichever way the chunks ran and however they were cut.

Scheduler specifications (``--scheduler`` on the command line):

``None``, ``""`` or ``"inprocess"``
    Chunks run one after another in this process; the dispatch kernel uses every core.
``"local:N"``
    A ``dask.distributed.LocalCluster`` of N worker processes with one thread each,
    listening on the loopback interface only, started for the run and closed after it.
``"tcp://host:port"`` (or ``"host:port"``)
    An existing scheduler; its workers need the same version of fleet installed.

References
----------
.. [1] Rocklin, M. (2015). Dask: Parallel computation with blocked algorithms and task
   scheduling. Proceedings of the 14th Python in Science Conference, 130-136.
"""

from __future__ import annotations

import contextlib
import re
from typing import Any, Callable, Iterable, Iterator, Sequence

from .errors import InputError, Problem

INPROCESS = "inprocess"


def parse_scheduler(spec: str | None) -> tuple[str, Any]:
    """``("inprocess", None)``, ``("local", n_workers)`` or ``("address", address)``; an
    :class:`~fleet.errors.InputError` naming the option for anything else."""
    text = "" if spec is None else str(spec).strip()
    if text in ("", INPROCESS, "in-process", "none"):
        return INPROCESS, None
    m = re.fullmatch(r"local:(\d+)", text)
    if m:
        n = int(m.group(1))
        if not 1 <= n <= 256:
            raise InputError([Problem("--scheduler", None, None, f"local:{n}: the worker count must be 1..256")])
        return "local", n
    if re.fullmatch(r"(tcp|tls|ucx)://[^\s/:]+(:\d+)?/?", text) or re.fullmatch(r"[A-Za-z0-9_.-]+:\d+", text):
        return "address", text if "://" in text else f"tcp://{text}"
    raise InputError([Problem("--scheduler", None, None,
                              f"'{text}' is not a scheduler: use 'inprocess', 'local:N' (N worker processes) "
                              "or a dask.distributed scheduler address such as tcp://10.0.0.5:8786")])


@contextlib.contextmanager
def kernel_threads(n: int | None) -> Iterator[None]:
    """Limit the compiled kernels to ``n`` threads inside the block (None: leave as is); a worker
    process with one thread per task must not start a thread per core in every task."""
    if not n:
        yield
        return
    import numba

    old = numba.get_num_threads()
    numba.set_num_threads(min(int(n), numba.config.NUMBA_NUM_THREADS))
    try:
        yield
    finally:
        numba.set_num_threads(old)


class InProcess:
    """Runs chunks one after another here; the kernels use every core."""

    name = INPROCESS
    workers = 1
    task_threads: int | None = None

    def map(self, fn: Callable, items: Sequence, *, tracker=None, desc: str = "chunks", **kwargs) -> list:
        it: Iterable = items
        if tracker is not None:
            it = tracker.wrap(items, len(items), desc)
        return [fn(item, **kwargs) for item in it]


class DaskRunner:
    """Runs chunks as tasks on a ``dask.distributed`` client; results come back in order. Each
    task runs the kernels on one thread (the workers run tasks side by side)."""

    task_threads: int | None = 1

    def __init__(self, client, name: str):
        self.client = client
        self.name = name
        self.workers = max(1, len(client.scheduler_info().get("workers", {})))

    def map(self, fn: Callable, items: Sequence, *, tracker=None, desc: str = "chunks", **kwargs) -> list:
        from distributed import as_completed

        shared = {k: self.client.scatter(v, broadcast=True) for k, v in kwargs.items()}
        futures = [self.client.submit(fn, item, **shared, pure=False, key=f"fleet-{desc}-{i}")
                   for i, item in enumerate(items)]
        index = {f.key: i for i, f in enumerate(futures)}
        out: list = [None] * len(futures)
        done = as_completed(futures)
        if tracker is not None:
            done = tracker.wrap(done, len(futures), desc)
        for f in done:
            out[index[f.key]] = f.result()
        return out


@contextlib.contextmanager
def runner(spec: str | None) -> Iterator[InProcess | DaskRunner]:
    """The runner for a scheduler specification (:func:`parse_scheduler`), closed on exit."""
    kind, arg = parse_scheduler(spec)
    if kind == INPROCESS:
        yield InProcess()
        return
    try:
        from distributed import Client, LocalCluster
    except ImportError:  # pragma: no cover - a dependency
        raise InputError([Problem("--scheduler", None, None, "dask.distributed is not installed "
                                                           "(pip install 'dask[distributed]')")]) from None
    if kind == "local":
        with LocalCluster(n_workers=arg, threads_per_worker=1, processes=True, host="127.0.0.1",
                          dashboard_address=None, silence_logs=40) as cluster, Client(cluster) as client:
            yield DaskRunner(client, f"local:{arg}")
        return
    try:
        client = Client(arg, timeout=30)
    except (OSError, TimeoutError) as exc:
        raise InputError([Problem("--scheduler", None, None, f"cannot reach the scheduler at {arg}: {exc}")]) from None
    try:
        yield DaskRunner(client, arg)
    finally:
        client.close()


def site_chunks(n_sites: int, chunk_sites: int) -> list[range]:
    """Consecutive ranges of site positions, ``chunk_sites`` each (the last may be shorter)."""
    step = max(1, int(chunk_sites))
    return [range(a, min(a + step, n_sites)) for a in range(0, n_sites, step)]
