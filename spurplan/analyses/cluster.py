"""Running many independent jobs on a dask.distributed cluster (the optional ``dask`` extra).

The yield (:mod:`spurplan.analyses.montecarlo`) hands its batches here when asked for
a scheduler or local workers.  What is checked before any connection (the scheduler's
address, the number of workers), how a scheduler is first asked who it is, how a local
cluster is started with its workers deaf to SIGINT, and how Ctrl-C closes it within
seconds all live here, apart from the statistics.
"""

from __future__ import annotations

import logging
import re
import signal

from spurplan.errors import LineupError, YieldError

MAX_WORKERS = 256
# How long a --scheduler address may take to connect and answer as a dask scheduler.
SCHEDULER_TIMEOUT_S = 3.0
# tcp://HOST:PORT or tls://HOST:PORT (dask.distributed's address form), or HOST:PORT;
# a host is a name, an IPv4 address or a bracketed IPv6 address.  The host cannot hold
# ":", so the split is unambiguous and the match linear.
_SCHEDULER_ADDRESS = re.compile(
    r"(?:(?:tcp|tls)://)?(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9][A-Za-z0-9.-]{0,252}):([0-9]{1,5})"
)


def check_scheduler_address(address) -> str:
    """``address`` as a dask scheduler address (``tcp://HOST:PORT``), or a YieldError."""
    expected = "expected a dask scheduler address such as tcp://127.0.0.1:8786"
    if not isinstance(address, str):
        raise YieldError(f"{{@scheduler}} {address!r}: {expected}")
    text = address.strip()
    shown = repr(text[:60] + ("..." if len(text) > 60 else ""))
    m = _SCHEDULER_ADDRESS.fullmatch(text) if len(text) <= 300 else None
    if m is None:
        raise YieldError(f"{{@scheduler}} {shown}: {expected}")
    if not 1 <= int(m.group(2)) <= 65535:
        raise YieldError(f"{{@scheduler}} {shown}: {expected} (a port from 1 to 65535)")
    return text if "://" in text else f"tcp://{text}"


def _call(job):
    function, args = job
    return function(*args)


def map_on_dask(function, jobs, scheduler, workers, progress=None, size_of=None):
    """``[function(*job) for job in jobs]`` on a dask.distributed cluster (optional dependency).

    Parameters
    ----------
    function : callable
        A module-level function (it is pickled to the workers).
    jobs : list of tuple
        Arguments of each call.
    scheduler : str or None
        Address of a running scheduler (:func:`check_scheduler_address`), or ``None``.
    workers : int or None
        Start a local cluster of this many worker processes (when ``scheduler`` is ``None``).
    progress : callable, optional
        Called with ``size_of(job)`` as each result arrives, in order.
    size_of : callable, optional
        The amount of work a job stands for (default 1).

    Returns
    -------
    parts : list
        The results, in the order of ``jobs``.
    where : str
        Where they ran, for the record ("dask scheduler tcp://...", "local dask cluster, 4 workers").

    A ``scheduler`` is first asked who it is, within :data:`SCHEDULER_TIMEOUT_S`
    (:func:`_probe_scheduler`): an address where nothing listens, or something that is
    no scheduler, is one line rather than a long wait.  A local cluster's workers
    ignore SIGINT, so that Ctrl-C reaches only this process, which closes the cluster
    (in ``finally``) with dask's logging silenced: one "interrupted" line, no worker
    tracebacks.
    """
    try:
        import dask
        from dask.distributed import Client, LocalCluster
    except ImportError:
        raise LineupError(
            "dask.distributed is not installed: expected pip install 'spurplan[dask]' for {@scheduler}/{@workers}"
        ) from None
    cluster = client = None
    with _quiet_dask_logs():
        try:
            if scheduler is not None:
                _probe_scheduler(scheduler)
                try:
                    client = Client(scheduler, timeout=SCHEDULER_TIMEOUT_S)
                except Exception as exc:  # any failure of the network boundary
                    raise YieldError(_cannot_use(scheduler, exc)) from None
                where = f"dask scheduler {scheduler}"
            else:
                # Dask's workers trim freed memory back to the OS from 64 kB up by default;
                # the engine allocates and frees grids of megabytes per batch, and the
                # trimming halved its speed (measured with tests/benchmarks/yield.py).
                trim = {"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": str(1 << 30)}
                with dask.config.set(trim):
                    cluster = _local_cluster(
                        LocalCluster,
                        workers,
                        threads_per_worker=1,
                        processes=True,
                        host="127.0.0.1",
                        dashboard_address=None,
                        silence_logs=_SILENT,
                    )
                client = Client(cluster)
                where = f"local dask cluster, {workers} workers"
            futures = client.map(_call, [(function, job) for job in jobs], pure=False)
            parts = []
            for fut, job in zip(futures, jobs, strict=True):
                parts.append(fut.result())
                if progress:
                    progress(1 if size_of is None else size_of(job))
        except KeyboardInterrupt:
            _close_now(client, cluster)
            client = cluster = None
            raise
        finally:
            if client is not None:
                client.close()
            if cluster is not None:
                cluster.close()
    return parts, where


# After Ctrl-C the cluster gets this long (s) to close; workers still busy with a batch
# are then terminated, so that the interrupt ends the run within seconds.
_INTERRUPT_CLOSE_S = 2.0


def _close_now(client, cluster) -> None:
    """Close ``client`` and ``cluster`` after an interrupt, without waiting for work in flight.

    Parameters
    ----------
    client : dask.distributed.Client or None
    cluster : dask.distributed.LocalCluster or None
        Only a local cluster's worker processes are children of this process; they are
        terminated (SIGTERM, then SIGKILL) if they outlive the short close.
    """
    import contextlib
    import multiprocessing

    with contextlib.suppress(Exception):
        if client is not None:
            client.close(timeout=_INTERRUPT_CLOSE_S)
    with contextlib.suppress(Exception):
        if cluster is not None:
            cluster.close(timeout=_INTERRUPT_CLOSE_S)
    if cluster is not None:
        for child in multiprocessing.active_children():
            child.terminate()
            child.join(1.0)
            if child.is_alive():
                child.kill()


# Above CRITICAL: no dask log record reaches stderr while spurplan runs a cluster.
_SILENT = 100


def _quiet_dask_logs():
    """A context in which the loggers of dask.distributed print nothing (restored after)."""
    import contextlib

    @contextlib.contextmanager
    def quiet():
        loggers = [logging.getLogger(name) for name in ("distributed", "dask", "tornado", "asyncio")]
        levels = [lg.level for lg in loggers]
        for lg in loggers:
            lg.setLevel(_SILENT)
        try:
            yield
        finally:
            for lg, level in zip(loggers, levels, strict=True):
                lg.setLevel(level)

    return quiet()


def _local_cluster(factory, workers: int, **options):
    """Start a local cluster whose worker processes ignore SIGINT; returns it.

    A terminal's Ctrl-C goes to the whole process group; each worker would print its
    own KeyboardInterrupt traceback.  An ignored signal stays ignored across fork and
    exec (POSIX, execve), and Python installs its KeyboardInterrupt handler only where
    SIGINT is at its default (signal module documentation), so SIGINT is ignored here
    until the worker processes exist, then restored: this process alone is
    interrupted, and closes the cluster.  The cluster starts in a helper thread so
    that the main thread can restore the handler as soon as the workers are spawned
    (a second or more before they are ready) and Ctrl-C during the start still works.
    Outside the main thread (no signal handlers there) the cluster starts as it is.
    """
    import multiprocessing
    import threading

    if threading.current_thread() is not threading.main_thread():
        return factory(n_workers=workers, **options)
    box: dict = {}

    def start():
        try:
            box["cluster"] = factory(n_workers=workers, **options)
        except BaseException as exc:  # handed to the main thread
            box["error"] = exc

    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    thread = threading.Thread(target=start, name="spurplan local cluster", daemon=True)
    try:
        thread.start()
        while thread.is_alive():
            # A process is listed once it is forked, so it holds the ignored disposition.
            if previous is not None and len(multiprocessing.active_children()) >= workers:
                signal.signal(signal.SIGINT, previous)
                previous = None
            thread.join(0.02)
    except KeyboardInterrupt:
        # Let the start finish (a second Ctrl-C stops waiting), then close what it made.
        try:
            thread.join()
        finally:
            if "cluster" in box:
                box["cluster"].close()
        raise
    finally:
        if previous is not None:
            signal.signal(signal.SIGINT, previous)
    if "error" in box:
        raise box["error"]
    return box["cluster"]


def _probe_scheduler(address: str, timeout_s: float = SCHEDULER_TIMEOUT_S) -> None:
    """Connect to ``address`` and ask its identity, all within ``timeout_s``; a YieldError otherwise.

    dask.distributed's own client waits 30 s for an address where nothing listens and
    without end for a peer that accepts and stays silent; its reader takes a length
    from whatever bytes arrive.  So the address is asked first, with one deadline for
    the connection and the answer together (``identity`` is a handler every
    dask.distributed server has; a scheduler answers with ``type`` "Scheduler").
    """
    import asyncio

    from distributed.comm import connect

    async def identity():
        comm = await connect(address, timeout=timeout_s)
        try:
            await comm.write({"op": "identity", "reply": True})
            return await comm.read()
        finally:
            comm.abort()

    try:
        reply = asyncio.run(asyncio.wait_for(identity(), timeout_s))
    except TimeoutError:
        raise YieldError(
            f"{{@scheduler}} {address}: no dask scheduler answered within {timeout_s:g} s: "
            "expected the address of a running scheduler"
        ) from None
    except Exception as exc:  # anything the peer sends or does is data, not a crash
        raise YieldError(_cannot_use(address, exc)) from None
    if not (isinstance(reply, dict) and reply.get("type") == "Scheduler"):
        raise YieldError(
            f"{{@scheduler}} {address}: answered, but not as a dask scheduler: expected the address of a running scheduler"
        )


def _cannot_use(address: str, exc: Exception) -> str:
    """The one-line message for a scheduler address that failed with ``exc``."""
    what = (
        "cannot connect" if isinstance(exc, OSError) and "connect" in str(exc).lower() else "no usable answer"
    )
    return (
        f"{{@scheduler}} {address}: {what} ({exc.__class__.__name__}): expected the address of a running "
        f"dask scheduler (waited at most {SCHEDULER_TIMEOUT_S:g} s)"
    )
