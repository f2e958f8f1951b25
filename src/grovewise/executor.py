"""The one place for parallel and distributed work: a small executor over dask.distributed.

Every step that runs many independent pieces (a batch of reviews, and any step that splits its
work) goes through :class:`Executor`, so that ``--jobs`` and ``--scheduler`` mean the same
everywhere:

- ``jobs == 1`` and no scheduler: the pieces run inline, one after another, in the calling
  thread; dask is not touched at all (the cheapest choice for small work and for debugging).
- a scheduler address: the pieces run on that existing dask cluster (the functions and their
  arguments travel by pickle, so Grovewise must be installed on its workers).
- otherwise: a local dask cluster of ``jobs`` workers with one thread each, started on first
  use, without its web dashboard, its logging kept to warnings and worse.

Results come back in the order of the items; ``progress(done, total)`` is called in the
calling thread after each finished item; a cancel event stops the wait within a second.
When a worker process dies, the dask scheduler re-runs the tasks it was running on another
worker on its own (up to ``distributed.scheduler.allowed-failures`` times, 3 by default, after
which the item fails with dask's ``KilledWorker``); ``retries`` is separate from that: it
re-runs, where it ran, an item whose function raised. A finished item's result is released
as soon as it is collected, so a later worker death never re-runs it.
"""

from __future__ import annotations

import logging
import numbers
import os
import queue
import threading
import uuid
from collections.abc import Callable, Iterable
from typing import Any

from .errors import CancelledError, GrovewiseError, SettingError

JOBS_OPTION = "--jobs"
SCHEDULER_OPTION = "--scheduler"
CONNECT_TIMEOUT = 5.0  # seconds to reach a scheduler before its address is called wrong
POLL = 0.2  # seconds between two looks at the cancel event while waiting for results

Progress = Callable[[int, int], None]
# on_item(index, ok, value): one item has settled (called in the calling thread)
ItemCallback = Callable[[int, bool, Any], None]


def resolve_jobs(jobs: int | None) -> int:
    """The number of parallel jobs: ``jobs`` itself, or one per CPU core for None or 0.

    Raises
    ------
    SettingError
        Naming ``--jobs`` when ``jobs`` is negative or not a whole number.
    """
    cores = max(1, os.cpu_count() or 1)
    if isinstance(jobs, bool) or not (jobs is None or isinstance(jobs, numbers.Integral)):
        raise SettingError(f"{JOBS_OPTION} {jobs!r} is not a whole number; give the number of "
                           f"parallel jobs (1 or more), or 0 for one per CPU core ({cores}).")
    if jobs is None or int(jobs) == 0:
        return cores
    if int(jobs) < 0:
        raise SettingError(f"{JOBS_OPTION} {jobs} is negative; give the number of parallel "
                           f"jobs (1 or more), or 0 for one per CPU core ({cores}).")
    return int(jobs)


class Executor:
    """Runs a function over items: inline, on a local dask cluster, or on a given cluster.

    Parameters
    ----------
    jobs : int or None
        Parallel jobs (local cluster workers); None or 0 means one per CPU core. With 1 and
        no ``scheduler`` the items run inline in the calling thread.
    scheduler : str or None
        Address of a running dask scheduler (``tcp://host:8786``); ``jobs`` then does not
        apply, the cluster has its own workers.
    processes : bool
        Local cluster workers as processes (for Python-heavy work that holds the GIL) rather
        than threads of this process.
    """

    def __init__(self, jobs: int | None = None, scheduler: str | None = None,
                 processes: bool = False) -> None:
        self.jobs = resolve_jobs(jobs)
        if scheduler is not None and not isinstance(scheduler, str):
            raise SettingError(f"{SCHEDULER_OPTION} {scheduler!r}: give the scheduler's "
                               "address as text, such as tcp://10.0.0.5:8786.")
        self.scheduler = (scheduler or "").strip() or None
        self.processes = bool(processes)
        self._client = None
        self._cluster = None
        self._lock = threading.Lock()

    # ------------------------------------------------------------------ what it is
    @property
    def inline(self) -> bool:
        """True when items run in the calling thread, without dask."""
        return self.jobs == 1 and self.scheduler is None

    @property
    def description(self) -> str:
        """Where the work runs, for messages and reports."""
        if self.scheduler is not None:
            return f"cluster at {self.scheduler}"
        if self.inline:
            return "inline (1 job)"
        kind = "processes" if self.processes else "threads"
        return f"local cluster, {self.jobs} workers ({kind})"

    @property
    def client(self):
        """The dask ``Client`` (connected or started on first use); None when inline."""
        if self.inline:
            return None
        with self._lock:
            if self._client is None:
                self._client = self._connect() if self.scheduler else self._start_local()
            return self._client

    def start(self) -> "Executor":
        """Connect or start the cluster now (else it happens on the first map), so that a
        wrong ``--scheduler`` address is reported before any work starts."""
        _ = self.client
        return self

    def _connect(self):
        from distributed import Client

        _quiet_dask_logging()
        try:
            _probe(self.scheduler, CONNECT_TIMEOUT)
            return Client(self.scheduler, timeout=f"{CONNECT_TIMEOUT}s", set_as_default=False)
        except Exception as exc:  # dask raises OSError, TimeoutError or ValueError here
            raise SettingError(
                f"{SCHEDULER_OPTION} {self.scheduler}: could not reach a dask scheduler at "
                f"this address within {CONNECT_TIMEOUT:g} s ({type(exc).__name__}: {exc}). Check "
                "the address (such as tcp://10.0.0.5:8786) and that the scheduler is running, "
                f"or leave out {SCHEDULER_OPTION} to work on this computer.") from None

    def _start_local(self):
        from distributed import Client, LocalCluster

        _quiet_dask_logging()
        try:
            # No dashboard. The scheduler still opens its small status endpoint (health,
            # metrics): on a free port of this computer only, not on dask's usual 8787, which
            # another cluster may hold.
            self._cluster = LocalCluster(n_workers=self.jobs, threads_per_worker=1,
                                         processes=self.processes, dashboard_address=None,
                                         scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
                                         silence_logs=logging.WARNING)
            return Client(self._cluster, set_as_default=False)
        except Exception as exc:
            self._close_cluster()
            raise GrovewiseError(
                f"could not start a local cluster of {self.jobs} workers "
                f"({type(exc).__name__}: {exc}); try {JOBS_OPTION} 1 to work without one."
            ) from None

    # ------------------------------------------------------------------ running
    def map(self, fn: Callable, items: Iterable, *, progress: Progress | None = None,
            cancel: threading.Event | None = None, retries: int = 0,
            on_item: ItemCallback | None = None, shared: Any = None) -> list:
        """``[fn(item) for item in items]``, run in parallel, in the order of ``items``.

        Parameters
        ----------
        fn : callable
            Takes one item. For a cluster of processes it and the items must pickle.
        progress : callable, optional
            ``progress(done, total)`` after each finished item, in the calling thread.
        cancel : threading.Event, optional
            When set, items not yet finished are cancelled and :class:`CancelledError` is
            raised within about a second (an item already running inline, or in a
            worker thread, still runs to its end; its result is dropped).
        retries : int
            Times an item whose function raised is run again before it counts as failed.
        on_item : callable, optional
            ``on_item(index, ok, value)`` as each item settles, in the calling thread.
        shared : object, optional
            Data every item needs (large arrays, a model): ``fn(item, shared)`` is called
            instead of ``fn(item)``, and on a cluster it is sent to the workers once, not
            with each item.

        Raises
        ------
        Exception
            The first exception of ``fn`` in item order, once the items before it are done
            (items after it are cancelled).
        """
        outcomes = self._run(fn, items, progress, cancel, retries, on_item, stop_on_error=True,
                             shared=shared)
        return [value for _, value in outcomes]

    def map_settled(self, fn: Callable, items: Iterable, *, progress: Progress | None = None,
                    cancel: threading.Event | None = None, retries: int = 0,
                    on_item: ItemCallback | None = None) -> list[tuple[bool, object]]:
        """Like :meth:`map`, but every item settles: ``(True, result)`` or
        ``(False, exception)``, in the order of ``items``; ``fn``'s errors are not raised."""
        return self._run(fn, items, progress, cancel, retries, on_item, stop_on_error=False)

    def _run(self, fn, items, progress, cancel, retries, on_item, stop_on_error,
             shared=None):
        items = list(items)
        if isinstance(retries, bool) or not isinstance(retries, numbers.Integral) or retries < 0:
            raise SettingError(f"retries {retries!r}: give a whole number, 0 or more.")
        tally = _Tally(len(items), progress, on_item, stop_on_error)
        if not items:
            return []
        settle = _Settling(fn, int(retries), shared is not None)
        if self.inline:
            return self._run_inline(settle, items, cancel, tally, shared)
        return self._run_dask(settle, items, cancel, tally, shared)

    def _run_inline(self, settle, items, cancel, tally, shared=None) -> list:
        for i, item in enumerate(items):
            _check_cancel(cancel, tally)
            tally.settle(i, *settle(item, shared))
        return tally.outcomes

    def _run_dask(self, settle, items, cancel, tally, shared=None) -> list:
        client = self.client
        arrived: queue.SimpleQueue = queue.SimpleQueue()
        run = uuid.uuid4().hex
        keys = [f"{settle.name}-{run}-{i}" for i in range(len(items))]
        index = {key: i for i, key in enumerate(keys)}
        extra = {}
        if shared is not None:  # once to every worker, not once per task
            [extra["shared"]] = client.scatter([shared], broadcast=True, hash=False)
        # pure=False with our own keys: equal items are still separate tasks
        pending = {f.key: f for f in client.map(settle, items, key=keys, pure=False, **extra)}
        for future in pending.values():
            future.add_done_callback(arrived.put)  # called from dask's thread
        try:
            while pending:
                _check_cancel(cancel, tally)
                try:
                    future = arrived.get(timeout=POLL)
                except queue.Empty:
                    continue
                if pending.pop(future.key, None) is None:
                    continue
                ok, value = _collect(future)
                future.release()  # forget the result on the cluster: never recomputed
                tally.settle(index[future.key], ok, value)
            return tally.outcomes
        finally:
            if pending:
                client.cancel(list(pending.values()))

    # ------------------------------------------------------------------ closing
    def close(self) -> None:
        """Disconnect from the cluster, and shut down a local one. Safe to call twice."""
        with self._lock:
            client, self._client = self._client, None
            if client is not None:
                try:
                    client.close()
                except Exception:  # a cluster already gone: nothing left to close
                    pass
            self._close_cluster()

    def _close_cluster(self) -> None:
        cluster, self._cluster = self._cluster, None
        if cluster is not None:
            try:
                cluster.close()
            except Exception:
                pass

    def __enter__(self) -> "Executor":
        return self

    def __exit__(self, *exc_info) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"Executor({self.description})"


class _Tally:
    """The outcomes so far, the progress calls, and when ``map`` must raise."""

    def __init__(self, total: int, progress, on_item, stop_on_error: bool) -> None:
        self.total = total
        self.outcomes: list = [None] * total
        self.done = 0
        self.progress, self.on_item, self.stop_on_error = progress, on_item, stop_on_error

    def settle(self, i: int, ok: bool, value) -> None:
        self.outcomes[i] = (ok, value)
        self.done += 1
        if self.on_item is not None:
            self.on_item(i, ok, value)
        if self.progress is not None:
            self.progress(self.done, self.total)
        if self.stop_on_error:
            self._raise_first_error()

    def _raise_first_error(self) -> None:
        # raise once every item before the first failure (in item order) has settled
        for outcome in self.outcomes:
            if outcome is None:
                return
            if not outcome[0]:
                raise outcome[1]


class _Settling:
    """``fn`` made to return ``(True, result)`` or ``(False, exception)`` instead of raising,
    after ``retries`` more tries. An error thus comes back as a value: the same inline and on
    a cluster, and dask's workers log no traceback for an error the caller reports itself."""

    def __init__(self, fn: Callable, retries: int, with_shared: bool = False) -> None:
        self.fn, self.retries, self.with_shared = fn, retries, with_shared
        self.name = getattr(fn, "__name__", type(fn).__name__)

    def __call__(self, item, shared=None) -> tuple[bool, object]:
        for _ in range(self.retries + 1):
            try:
                return True, (self.fn(item, shared) if self.with_shared else self.fn(item))
            except Exception as exc:
                failure = exc
        return False, failure


def _collect(future) -> tuple[bool, object]:
    """A settled dask future as ``(ok, result or exception)``."""
    if future.status == "finished":
        return future.result()
    if future.status == "cancelled":
        return False, CancelledError("the task was cancelled on the cluster.")
    return False, future.exception()


def _check_cancel(cancel: threading.Event | None, tally: _Tally) -> None:
    if cancel is not None and cancel.is_set():
        raise CancelledError(f"cancelled after {tally.done} of {tally.total} items; what "
                             "finished before is kept.")


def _probe(address: str, timeout: float) -> None:
    """Open and close one connection to ``address`` (dask's handshake included).

    A ``Client`` whose first connection fails is left half made and, when collected, waits
    seconds to close; this probe fails cleanly instead. It runs in its own thread and event
    loop, so it works whether or not the caller runs an event loop.
    """
    import asyncio

    from distributed.comm import connect

    async def once() -> None:
        comm = await connect(address, timeout=timeout)
        await comm.close()

    failure: list[BaseException] = []

    def run() -> None:
        try:
            asyncio.run(once())
        except BaseException as exc:  # handed to the calling thread below
            failure.append(exc)

    thread = threading.Thread(target=run, name="grovewise-scheduler-probe", daemon=True)
    thread.start()
    thread.join(timeout + 2.0)
    if thread.is_alive():
        raise TimeoutError(f"no answer after {timeout:g} s")
    if failure:
        raise failure[0]


def _quiet_dask_logging() -> None:
    """dask's own messages at warning level and worse only (its default shows info)."""
    for name in ("distributed", "dask"):
        logger = logging.getLogger(name)
        if logger.getEffectiveLevel() < logging.WARNING:
            logger.setLevel(logging.WARNING)
