"""Run chunks of cases on several cores, or on a Dask cluster, with results streamed back.

>>> from cyclesim.parallel import run_chunks
>>> chunks = [cases[i: i + 64] for i in range(0, len(cases), 64)]
>>> per_chunk = run_chunks(chunks, workers="auto", backend="process",
...                        on_result=lambda k, res: print("chunk", k, "done"))

Each chunk is simulated by :func:`run_chunk` (one call of
:func:`cyclesim.simulate`, which batches the chunk's cases) in whichever
worker is free.  ``on_result(k, results)`` is called in the calling process
for each chunk as it completes, in completion order; the return value holds
the chunks' results in chunk order.  A case's figures never depend on the
cases that share its batch, and a chunk's batches are the same wherever it
runs, so the results are identical (bit for bit) to a serial run of the same
chunks.

Backends
--------
``"serial"``
    In this process, chunk after chunk.
``"process"``
    A :class:`concurrent.futures.ProcessPoolExecutor` on this machine.  On
    Linux the workers are forked from this process while it runs no other
    thread (they start at once, plug-ins and gas tables loaded), else from a
    *forkserver* that has imported cyclesim once; elsewhere they are spawned
    (see :func:`start_method`).  With one worker the chunks run in this
    process.  A worker ends when the calling process does, however it ends
    (:func:`cyclesim.stopping.end_with_parent`); an interrupted caller ends
    its workers itself.
``"dask"``
    A Dask distributed cluster (``pip install "cyclesim[dask]"``): the
    scheduler at ``scheduler`` (e.g. ``"tcp://scheduler-host:8786"``), or a
    :class:`distributed.LocalCluster` of ``workers`` single-threaded worker
    processes on this machine, started for the run and closed after it.
    Every worker needs cyclesim (and any plug-in package used) installed, and
    plug-ins listed by path must exist at the same absolute path there.

Workers resolve the plug-in registry themselves from the ``plugins`` each case
carries (module names and absolute ``.py`` paths); a plug-in found through a
changed ``sys.path`` is found in process workers too, since they start with
the caller's ``sys.path`` and working folder.

For a plain list of cases, :func:`run_cases` makes one chunk per solver batch
(see :func:`batch_chunks`) and returns the results in case order, the same
as ``cyclesim.simulate(cases)`` bit for bit.

Workers
-------
``workers`` is a whole number >= 1 or ``"auto"``: as many as there are CPUs
this process may use, but no more than there are chunks.  Studies choose a
default with :func:`plan_execution`: serial up to :data:`AUTO_MIN_CASES`
cases, ``"auto"`` processes above.

What is worth sharing out is whole batches: a batch's cost per crank step is
a fixed Python part plus a vector part that grows with its width, and on the
full-cycle demo the fixed part equals about a thousand cases' vector work.
Halving a batch therefore saves little, and two workers each running half of
it cost nearly twice the CPU of one running all of it.  A sweep's chunks are
separate batches anyway (serial or not), so its speed-up from workers is
close to the number of free cores once there are several chunks per worker.
"""

from __future__ import annotations

import os
import signal
import sys
from typing import Any, Callable, Iterable, Sequence

from .solve.cpus import available_cpus
from .errors import ConfigError, CyclesimError

__all__ = [
    "run_chunk", "run_chunks", "run_cases", "batch_chunks", "resolve_workers", "parse_workers", "plan_execution",
    "available_cpus", "start_method", "BACKENDS", "AUTO_MIN_CASES",
]

BACKENDS = ("serial", "process", "dask")
AUTO_MIN_CASES = 64
"""A study with more cases than this runs on ``"auto"`` worker processes unless told otherwise."""

# Modules the forkserver imports once, so that each worker forked from it starts warm (the
# compiled loop's machine code is still loaded from its cache on each worker's first cycle).
_PRELOAD = ("cyclesim.api", "cyclesim.solve.batch", "cyclesim.solve.solver", "cyclesim.results.figures", "cyclesim.gas.thermo",
            "cyclesim.gas.equilibrium", "cyclesim.registry", "cyclesim.parallel", "cyclesim_plugins",
            "cyclesim.solve.kernel", "cyclesim.loops._compiled")   # the last needs numba; skipped without it

DASK_CONNECT_TIMEOUT = "30s"
"""How long to wait for a Dask scheduler given by address."""

OnResult = Callable[[int, list], None]


# --------------------------------------------------------------------------
# The unit of work
# --------------------------------------------------------------------------


def run_chunk(cases: Sequence) -> list:
    """Simulate one chunk of cases; the function every backend runs in its workers.

    The chunk is one :func:`cyclesim.simulate` call.  If that fails as a whole
    (a :class:`CyclesimError` that ``simulate`` did not confine to one case),
    the cases run one by one, so only the bad one is lost: it gets a
    :class:`cyclesim.api.CaseResult` with ``error`` set.

    Parameters
    ----------
    cases : list of Case

    Returns
    -------
    list of CaseResult
        In the order of ``cases``.
    """
    from .api import CaseResult, simulate
    from .config import flat_inputs

    cases = list(cases)
    if not cases:
        return []
    try:
        return simulate(cases)
    except CyclesimError:
        if len(cases) == 1:
            raise
    out = []
    for c in cases:
        try:
            out.extend(simulate([c]))
        except CyclesimError as exc:
            out.append(CaseResult(name=c.name, inputs=flat_inputs(c), error=str(exc)))
    return out


# --------------------------------------------------------------------------
# How many workers, which backend
# --------------------------------------------------------------------------


def run_chunk_in_worker(cases: Sequence) -> list:
    """:func:`run_chunk` in a worker of a cluster: one thread per compiled cycle, as the
    cluster's workers fill the CPUs already."""
    import cyclesim.solve.kernel as kernel

    kernel.set_threads(1)
    return run_chunk(cases)


def run_chunk_spooled(cases: Sequence, folder: str | None) -> tuple:
    """:func:`run_chunk` in a worker process: the results with their trace arrays in one file of
    ``folder`` (:mod:`cyclesim.spool`; None: in the results, as pickled)."""
    from .spool import pack

    return pack(run_chunk(cases), folder)


def parse_workers(value: Any) -> int | str:
    """``"auto"`` or a whole number >= 1, from an int or a command-line word."""
    if isinstance(value, str):
        text = value.strip().lower()
        if text == "auto":
            return "auto"
        try:
            value = int(text)
        except ValueError:
            raise ConfigError(f"--workers {value!r}: expected a whole number >= 1 or 'auto'") from None
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise ConfigError(f"--workers {value!r}: expected a whole number >= 1 or 'auto'")
    return value


def resolve_workers(workers: int | str | None, n_chunks: int | None = None) -> int:
    """Number of workers: ``workers`` (``"auto"``/None: the CPUs available), at most one per chunk."""
    w = parse_workers("auto" if workers is None else workers)
    n = available_cpus() if w == "auto" else int(w)
    if n_chunks is not None:
        n = min(n, max(int(n_chunks), 1))
    return max(n, 1)


def _check_backend(backend: str) -> str:
    b = str(backend).strip().lower()
    if b not in BACKENDS:
        raise ConfigError(f"--backend {backend!r}: expected one of {', '.join(BACKENDS)}")
    return b


def plan_execution(n_cases: int, n_chunks: int, workers: int | str | None = None,
                   backend: str | None = None, scheduler: str | None = None) -> tuple[str, int]:
    """The backend and worker count a study uses: ``(backend, workers)``.

    Parameters
    ----------
    n_cases, n_chunks : int
        Cases still to run and the chunks they form.
    workers : int, "auto" or None
        None: ``"auto"`` when there are more than :data:`AUTO_MIN_CASES`
        cases, else 1 (or ``"auto"`` for the dask backend).
    backend : str or None
        ``"serial"``, ``"process"`` or ``"dask"``; None: ``"dask"`` when a
        ``scheduler`` is given, else ``"process"`` when more than one worker
        results, else ``"serial"``.
    scheduler : str, optional
        Address of a Dask scheduler (dask backend only).

    Returns
    -------
    (str, int)
        For ``"dask"`` with a scheduler the count is the number of chunks
        (the cluster's own workers take them).
    """
    if backend is not None:
        backend = _check_backend(backend)
    if scheduler:
        if backend in ("serial", "process"):
            raise ConfigError(f"--scheduler {scheduler!r}: a scheduler address needs --backend dask,"
                              f" not {backend}")
        backend = "dask"
    if workers is not None:
        workers = parse_workers(workers)
    if backend == "serial":
        return "serial", 1
    if backend == "dask":
        if scheduler:
            return "dask", max(int(n_chunks), 1)
        return "dask", resolve_workers(workers if workers is not None else "auto", n_chunks)
    if workers is None:
        workers = "auto" if n_cases > AUTO_MIN_CASES else 1
    n = resolve_workers(workers, n_chunks)
    if n <= 1:
        return "serial", 1
    return "process", n


# --------------------------------------------------------------------------
# Chunks that follow the batches
# --------------------------------------------------------------------------

# Per-step cost of a batch of B cases ~ (B + _STEP_OVERHEAD_CASES): the fixed Python cost of
# one right-hand-side evaluation equals the vector work of about this many cases (measured on
# the full-cycle demo; a rough figure, used only to hand out the costliest chunks first).
_STEP_OVERHEAD_CASES = 1000.0


def _batch_cost(cases: Sequence) -> float:
    from .config import effective_step_deg

    c = cases[0]
    sim = c.simulation
    if sim.mode == "closed":
        span = (float(c.valves.evo_deg) - float(c.valves.ivc_deg)) % 720.0 or 720.0
        cycles = 1.0
    else:
        span, cycles = 720.0, float(sim.max_cycles)
    steps = cycles * span / effective_step_deg(sim, c.operating.speed_rpm)
    return steps * (len(cases) + _STEP_OVERHEAD_CASES)


def batch_chunks(cases: Sequence, max_size: int | None = None) -> list[list[int]]:
    """Case indices in chunks that follow the solver's batches, costliest first.

    Each chunk is one batch of :func:`cyclesim.solve.batch.group_cases` (split into
    pieces of at most ``max_size`` cases if given).  Splitting a batch across
    workers repeats its fixed per-step cost in each of them, so whole batches
    are what is worth sharing out; with ``max_size`` None every case runs in
    exactly the batch it has in ``simulate(cases)``, and so gives the same
    figures bit for bit.  Chunks are ordered by estimated cost, largest first,
    so that the workers finish close together.
    """
    from .api import _registry_for
    from .solve.batch import group_cases

    cases = list(cases)
    if not cases:
        return []
    if max_size is not None and max_size < 1:
        raise ConfigError(f"chunk size {max_size!r}: expected a whole number >= 1")
    out: list[list[int]] = []
    for idx in group_cases(cases, _registry_for(cases)):
        step = len(idx) if max_size is None else int(max_size)
        out.extend(idx[i: i + step] for i in range(0, len(idx), step))
    return sorted(out, key=lambda ch: -_batch_cost([cases[i] for i in ch]))


def run_cases(cases: Sequence, workers: int | str | None = "auto", backend: str = "process",
              max_chunk: int | None = None, **kw) -> list:
    """:func:`cyclesim.simulate` spread over workers: one chunk per batch; results in case order.

    ``max_chunk`` splits large batches (more chunks to share out, at some cost
    per case; figures then agree with ``simulate(cases)`` to within the batch
    independence of the solver rather than bit for bit).  Other keywords go to
    :func:`run_chunks`.
    """
    cases = list(cases)
    chunks = batch_chunks(cases, max_chunk)
    per_chunk = run_chunks([[cases[i] for i in ch] for ch in chunks], workers=workers, backend=backend, **kw)
    out: list = [None] * len(cases)
    for ch, res in zip(chunks, per_chunk):
        for i, r in zip(ch, res):
            out[i] = r
    return out


# --------------------------------------------------------------------------
# Running chunks
# --------------------------------------------------------------------------


def run_chunks(
    chunks: Iterable[Sequence],
    workers: int | str | None = "auto",
    backend: str = "process",
    on_result: OnResult | None = None,
    *,
    scheduler: str | None = None,
    client: Any = None,
    max_pending: int | None = None,
    start: str | None = None,
) -> list[list]:
    """Simulate chunks of cases; stream each chunk's results to ``on_result`` as it completes.

    Parameters
    ----------
    chunks : iterable of list of Case
        May be a generator: chunks are drawn only as workers become free, at
        most ``max_pending`` at a time, so a long sweep never holds all its
        cases in memory at once.
    workers : int, "auto" or None
        Worker processes (``"auto"``/None: the CPUs available, at most one per
        chunk when ``chunks`` has a length).  Ignored by ``"serial"`` and by
        ``"dask"`` with a ``scheduler``.
    backend : {"process", "dask", "serial"}
    on_result : callable, optional
        ``on_result(k, results)`` in this process, for chunk ``k`` (position in
        ``chunks``), in completion order.  If it raises, the chunks not yet
        finished are cancelled and the exception propagates.
    scheduler : str, optional
        Dask scheduler address (``backend="dask"``); without it a local cluster.
    client : distributed.Client, optional
        An existing Dask client to use (``backend="dask"``); left open.
    max_pending : int, optional
        Chunks submitted but not yet handed to ``on_result`` (default twice
        the workers).
    start : {"fork", "forkserver", "spawn"}, optional
        Start method of the process workers (default: see :func:`start_method`).

    Returns
    -------
    list of list of CaseResult
        Per chunk, in chunk order.

    Raises
    ------
    ConfigError
        Unknown backend, bad ``workers``, the dask extra not installed.
    CyclesimError
        A worker process died (the results already handed to ``on_result``
        stand).
    """
    backend = _check_backend(backend)
    n_chunks = len(chunks) if hasattr(chunks, "__len__") else None  # type: ignore[arg-type]
    if n_chunks == 0:
        return []
    if backend == "serial":
        return _run_serial(chunks, on_result)
    if backend == "process":
        n = resolve_workers(workers, n_chunks)
        if n <= 1:
            return _run_serial(chunks, on_result)
        return _run_process(chunks, n, on_result, max_pending or 2 * n, start)
    return _run_dask(chunks, workers, n_chunks, on_result, scheduler, client, max_pending)


def _run_serial(chunks: Iterable[Sequence], on_result: OnResult | None) -> list[list]:
    out = []
    for k, chunk in enumerate(chunks):
        res = run_chunk(chunk)
        out.append(res)
        if on_result is not None:
            on_result(k, res)
    return out


class _Results:
    """Per-chunk results in chunk order, filled in completion order."""

    def __init__(self, on_result: OnResult | None):
        self.by_chunk: dict[int, list] = {}
        self.on_result = on_result

    def put(self, k: int, res: list) -> None:
        self.by_chunk[k] = res
        if self.on_result is not None:
            self.on_result(k, res)

    def ordered(self) -> list[list]:
        return [self.by_chunk[k] for k in range(len(self.by_chunk))]


def start_method(requested: str | None = None) -> str:
    """Start method of the worker processes: ``requested``, or the quickest safe one here.

    On Linux, ``"fork"`` while this process runs no other Python thread (the
    workers then start at once, with the plug-ins and gas tables already
    loaded), else ``"forkserver"`` (forking a process that runs threads can
    deadlock); ``"spawn"`` elsewhere.  With ``"forkserver"`` and ``"spawn"``
    the calling script is imported again in each worker, so it must keep its
    work under ``if __name__ == "__main__":``.
    """
    import multiprocessing as mp
    import threading

    methods = mp.get_all_start_methods()
    if requested is not None:
        if requested not in methods:
            raise ConfigError(f"start method {requested!r}: expected one of {', '.join(methods)}")
        return requested
    if sys.platform.startswith("linux"):
        if "fork" in methods and threading.active_count() == 1:
            return "fork"
        if "forkserver" in methods:
            return "forkserver"
    return "spawn"


def _mp_context(method: str):
    import multiprocessing as mp

    ctx = mp.get_context(method)
    if method == "forkserver":
        # Takes effect when the forkserver first starts (once per process); harmless afterwards.
        ctx.set_forkserver_preload(list(_PRELOAD))
    return ctx


def _worker_init(parent: int | None = None) -> None:
    # Ctrl-C goes to the whole process group: the caller handles it (cancels, ends its
    # workers, keeps the rows written), so the workers ignore it rather than each printing
    # a traceback.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    # a caller that dies (SIGKILL, a crash) takes its workers with it; SIGTERM ends a worker
    from .stopping import end_with_parent

    end_with_parent(parent)
    # the workers fill the CPUs already: one thread per compiled cycle each
    import cyclesim.solve.kernel as kernel

    kernel.set_threads(1)


def _end_workers(ex) -> None:
    """Stop the pool's worker processes now (on interruption or failure of the caller)."""
    import multiprocessing
    import time

    procs = list((getattr(ex, "_processes", None) or {}).values())
    # the pool forgets these on shutdown; they are needed below
    result_queue = getattr(ex, "_result_queue", None)
    call_queue = getattr(ex, "_call_queue", None)
    thread = getattr(ex, "_executor_manager_thread", None)
    if call_queue is not None and hasattr(call_queue, "cancel_join_thread"):
        call_queue.cancel_join_thread()     # its feeder may be stuck writing to workers that are gone
    ex.shutdown(wait=False, cancel_futures=True)
    # the pool's manager thread may still start a worker after the shutdown: end every child
    # process of the pool until none is left (bounded wait)
    deadline = time.monotonic() + 10.0
    while True:
        later = list((getattr(ex, "_processes", None) or {}).values())
        for p in later:
            if p not in procs:
                procs.append(p)
        for p in procs:
            try:
                if p.is_alive():
                    p.terminate()
            except (OSError, ValueError, AttributeError):
                pass
        for p in procs:
            try:
                p.join(timeout=2)
                if p.is_alive():
                    p.kill()
                    p.join(timeout=2)
            except (OSError, ValueError, AttributeError, AssertionError):
                pass
        multiprocessing.active_children()          # reaps the ended ones
        fresh = [p for p in (getattr(ex, "_processes", None) or {}).values() if p not in procs]
        if (not fresh and not any(p.is_alive() for p in procs)) or time.monotonic() > deadline:
            break
        time.sleep(0.05)
    # A worker ended while it was sending a result leaves the pool's reading thread waiting for the
    # rest of the message, and the process would hang at exit joining it.  This process holds the
    # last writing end of that pipe once the workers are gone: closing it ends the wait (end of file).
    writer = getattr(result_queue, "_writer", None)
    if writer is not None and not any(p.is_alive() for p in procs):
        try:
            writer.close()
        except OSError:
            pass
    # let that thread finish now, not while the interpreter shuts down (where its last steps race
    # with the pool's exit hook and print an ignored exception)
    if thread is not None and thread.is_alive():
        thread.join(timeout=5.0)


def _run_process(chunks: Iterable[Sequence], n: int, on_result: OnResult | None, max_pending: int,
                 method: str | None) -> list[list]:
    from .spool import TraceSpool

    # the workers hand their trace arrays over in files of a folder in memory, not through the pipe
    spool = TraceSpool.create()
    try:
        return _run_pool(chunks, n, on_result, max_pending, method, spool)
    finally:
        spool.remove()


def _run_pool(chunks: Iterable[Sequence], n: int, on_result: OnResult | None, max_pending: int,
              method: str | None, spool) -> list[list]:
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    results = _Results(on_result)
    it = enumerate(chunks)
    method = start_method(method)
    ex = ProcessPoolExecutor(max_workers=n, mp_context=_mp_context(method), initializer=_worker_init,
                             initargs=(os.getpid() if method == "fork" else None,))
    pending: dict = {}
    ok = False
    try:
        exhausted = False
        while True:
            while not exhausted and len(pending) < max_pending:
                try:
                    k, chunk = next(it)
                except StopIteration:
                    exhausted = True
                    break
                chunk = list(chunk)
                if not chunk:   # nothing to simulate: report it without a round trip
                    results.put(k, [])
                    continue
                pending[ex.submit(run_chunk_spooled, chunk, spool.folder)] = k
            if not pending:
                break
            done, _ = wait(pending, return_when=FIRST_COMPLETED)
            for fut in done:
                k = pending.pop(fut)
                try:
                    res = fut.result()
                except BrokenProcessPool as exc:
                    hint = ("; a script that starts a parallel sweep must keep its work under"
                            " if __name__ == \"__main__\":" if method != "fork" else "")
                    raise CyclesimError(
                        f"a worker process died while simulating chunk {k} ({' '.join(str(exc).split())});"
                        " the rows of the finished chunks are kept: run again with --resume"
                        f" (--workers 1 runs in one process){hint}"
                    ) from exc
                results.put(k, spool.unpack(res))
        ok = True
    finally:
        if ok:
            ex.shutdown(wait=True)
        else:
            _end_workers(ex)
    return results.ordered()


def _run_dask(chunks, workers, n_chunks, on_result, scheduler, client, max_pending) -> list[list]:
    try:
        from distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise ConfigError(
            "--backend dask needs Dask distributed, an optional extra: pip install \"cyclesim[dask]\""
        ) from None

    owned: list = []
    try:
        if client is None:
            if scheduler:
                try:
                    client = Client(scheduler, timeout=DASK_CONNECT_TIMEOUT)
                except (OSError, TimeoutError) as exc:
                    raise CyclesimError(
                        f"--scheduler {scheduler}: no Dask scheduler answered within {DASK_CONNECT_TIMEOUT}"
                        f" ({type(exc).__name__}: {' '.join(str(exc).split())})"
                    ) from exc
            else:
                n = resolve_workers(workers, n_chunks)
                cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                                       host="127.0.0.1", dashboard_address=None)
                owned.append(cluster)
                client = Client(cluster)
            owned.insert(0, client)
        if max_pending is None:
            try:
                nthreads = sum(client.nthreads().values())
            except Exception:  # noqa: BLE001 - only a sizing hint
                nthreads = 2
            max_pending = 2 * max(nthreads, 1)
        return _dask_stream(client, as_completed, chunks, on_result, max_pending)
    finally:
        for obj in owned:
            try:
                obj.close()
            except Exception:  # noqa: BLE001 - closing after the results are in
                pass


def _dask_stream(client, as_completed, chunks, on_result, max_pending) -> list[list]:
    results = _Results(on_result)
    it = enumerate(chunks)
    pending: dict = {}   # future key -> (future, chunk index)

    def submit_next():
        for k, chunk in it:
            chunk = list(chunk)
            if not chunk:   # nothing to simulate: report it without a round trip
                results.put(k, [])
                continue
            fut = client.submit(run_chunk_in_worker, chunk, pure=False)
            pending[fut.key] = (fut, k)
            return fut
        return None

    first = [f for f in (submit_next() for _ in range(max_pending)) if f is not None]
    if not first:
        return results.ordered()
    stream = as_completed(first)
    try:
        for fut in stream:
            _, k = pending.pop(fut.key)
            res = fut.result()
            fut.release()
            results.put(k, res)
            nxt = submit_next()
            if nxt is not None:
                stream.add(nxt)
    except BaseException:
        if pending:
            try:
                client.cancel([f for f, _ in pending.values()])
            except Exception:  # noqa: BLE001 - already failing
                pass
        raise
    return results.ordered()
