"""Running a list of independent tasks, in-process or on a dask.distributed cluster.

Whatever runs the tasks, results come back in task order and are the same numbers:
every task draws its random numbers from :func:`seeded_rng` (run seed + the task's own
key), never from a stream shared with other tasks, so neither the back end, the number
of workers nor the completion order can change a result.  Each result is written to
the :class:`~conecheck.run.cache.TaskCache` the moment it arrives, so a run that is
killed or fails part-way keeps everything already finished and a re-run resumes.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import os
import signal
import sys
import threading
import traceback
import uuid
import warnings
from abc import ABC, abstractmethod
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..config import SCHEDULER_HELP, scheduler_ok
from ..errors import ConecheckError, InputError
from .cache import TaskCache
from .progress import Progress

log = logging.getLogger("conecheck.run")

_MISSING = object()



# --------------------------------------------------------------------------- tasks
@dataclass(frozen=True)
class Task:
    """One unit of work.

    Attributes
    ----------
    key : str
        Cache key (:func:`~conecheck.run.cache.task_key`); equal keys mean equal results.
    label : str
        Human description used in progress, logs and errors, e.g.
        ``"cone 3 / sample bright / cut primary"``.
    func : callable
        A module-level function (so that dask can send it to a worker by reference).
    args, kwargs
        Its arguments; may include handles from :meth:`Executor.share`.
    kind : str
        Task type (``randoms``, ``cone``, ``box``, …), recorded in the cache entry.
    """

    key: str
    label: str
    func: Callable[..., Any]
    args: tuple = ()
    kwargs: dict = field(default_factory=dict)
    kind: str = ""


class TaskFailed(ConecheckError):
    """A task raised; names the task (the first failure in task order) and the error.

    Attributes
    ----------
    task_label : str
        Label of the first failed task.
    error : str
        The original error, ``"<ExceptionType>: <message>"``.
    n_failed, n_total : int
        How many tasks of the stage failed, out of how many.
    details : str
        Traceback of the original error (for ``-v`` logs).
    """

    def __init__(self, task_label: str, error: str, n_failed: int = 1, n_total: int = 1,
                 details: str = "", cached: bool = True) -> None:
        self.task_label = task_label
        self.error = error
        self.n_failed = int(n_failed)
        self.n_total = int(n_total)
        self.details = details
        self.cached = bool(cached)
        msg = f"task '{task_label}' failed: {error}"
        if self.n_failed > 1:
            msg += f" ({self.n_failed} of {self.n_total} tasks failed; this is the first)"
        if self.cached:
            msg += ". Finished tasks are cached; re-running resumes from them."
        super().__init__(msg)

    def __reduce__(self):  # keep it intact through pickling (dask, multiprocessing)
        return (type(self), (self.task_label, self.error, self.n_failed, self.n_total,
                             self.details, self.cached))


def interrupted_by(exc: BaseException) -> bool:
    """Whether ``exc`` is, or was raised because of, a Ctrl-C (SIGINT).

    Python turns SIGINT into :class:`KeyboardInterrupt` at the next bytecode; when that
    moment falls inside a compiled (numba) kernel, the kernel's return reports it as a
    ``SystemError`` ("returned a result with an exception set") whose cause is the
    interrupt.  Both mean the user asked to stop, not that a task failed.
    """
    seen = set()
    while exc is not None and id(exc) not in seen:
        if isinstance(exc, KeyboardInterrupt):
            return True
        seen.add(id(exc))
        exc = exc.__cause__ or exc.__context__
    return False


def _error_text(exc: BaseException) -> str:
    text = str(exc)
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


# --------------------------------------------------------------------------- executors
class Executor(ABC):
    """Runs tasks and caches their results; subclasses decide where they run."""

    def share(self, obj: Any) -> Any:
        """A handle to pass ``obj`` to many tasks without copying it for each one."""
        return obj

    def describe(self) -> str:
        """One line naming the back end, for logs and the report."""
        return type(self).__name__

    def close(self) -> None:  # noqa: B027 - optional hook; in-process has nothing to free
        """Release the back end's resources."""

    def __enter__(self) -> Executor:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    @abstractmethod
    def _compute(self, tasks: Sequence[Task],
                 done: Callable[[int, bool, Any, str], None]) -> None:
        """Run ``tasks``; call ``done(i, ok, result_or_exception, traceback)`` per task
        as soon as task ``i`` finishes (in any order)."""

    def run(self, tasks: Sequence[Task], cache: TaskCache | None,
            progress: Progress | None = None, stage: str = "") -> list[Any]:
        """Results of ``tasks`` in their order, from the cache or computed.

        Computed results are cached as each task finishes.  When tasks fail the others
        still run to the end (and are cached); then the first failure in task order is
        raised: an :class:`~conecheck.errors.InputError` from a task stays one (its
        message prefixed with the task label), anything else becomes
        :class:`TaskFailed`.
        """
        tasks = list(tasks)
        stage = stage or "tasks"
        first_of: dict[str, int] = {}
        for i, t in enumerate(tasks):
            first_of.setdefault(t.key, i)
        unique = sorted(first_of.values())  # equal keys mean equal results: run once

        value: dict[int, Any] = {}
        if cache is not None:
            for i in unique:
                got = cache.get(tasks[i].key, tasks[i].label, default=_MISSING)
                if got is not _MISSING:
                    value[i] = got
        pending = [i for i in unique if i not in value]
        if value:
            log.info("%s: %d of %d tasks read from the cache, %d to compute", stage,
                     len(value), len(unique), len(pending))

        failures: dict[int, tuple[BaseException, str]] = {}
        latch = InterruptLatch()

        def done(j: int, ok: bool, result: Any, tb: str) -> None:
            i = pending[j]
            t = tasks[i]
            if ok and cache is not None:
                try:
                    cache.put(t.key, result, label=t.label, kind=t.kind)
                except TypeError as exc:  # a result type the cache cannot hold: a bug
                    ok, result, tb = False, exc, traceback.format_exc()
                except OSError as exc:  # disk trouble must not lose a computed result
                    log.warning("%s: result not cached (%s); it will be recomputed next "
                                "run", t.label, exc)
            if ok:
                value[i] = result
            else:
                failures[i] = (result, tb)
                log.warning("%s failed: %s", t.label, _error_text(result))
                if tb:
                    log.debug("%s traceback:\n%s", t.label, tb)
            if progress is not None:
                progress.advance(1, note=t.label if ok else f"{t.label} FAILED")
            latch.check()  # a Ctrl-C swallowed inside the task stops the run here

        if progress is not None:
            progress.start(stage, len(unique))
            if value:
                progress.advance(len(value), note="from cache")
        try:
            if pending:
                with latch:
                    self._compute([tasks[i] for i in pending], done)
        finally:
            if progress is not None:
                progress.finish()

        if failures:
            self._raise_first(tasks, failures, len(unique), cache is not None)
        return [value[first_of[t.key]] for t in tasks]

    @staticmethod
    def _raise_first(tasks: Sequence[Task], failures: dict[int, tuple[BaseException, str]],
                     n_total: int, cached: bool) -> None:
        i = min(failures)
        exc, tb = failures[i]
        label = tasks[i].label
        others = ""
        if len(failures) > 1:
            others = f" ({len(failures)} of {n_total} tasks failed; this is the first)"
        if isinstance(exc, InputError):
            problems = [f"{label}: {p}" for p in exc.problems]
            if others:
                problems[-1] += others
            raise InputError(f"{label}: {exc}{others}", problems) from exc
        raise TaskFailed(label, _error_text(exc), len(failures), n_total, tb, cached) from exc


class LocalExecutor(Executor):
    """Runs tasks one after another in this process (numba threads parallelise each)."""

    def describe(self) -> str:
        return "local (in-process)"

    def _compute(self, tasks: Sequence[Task],
                 done: Callable[[int, bool, Any, str], None]) -> None:
        for j, t in enumerate(tasks):
            try:
                result = t.func(*t.args, **t.kwargs)
            except Exception as exc:  # reported after the other tasks have run
                if interrupted_by(exc):  # Ctrl-C inside a numba kernel: stop, not "failed"
                    raise KeyboardInterrupt from None
                done(j, False, exc, traceback.format_exc())
            else:
                done(j, True, result, "")


def _limit_numba_threads(n: int) -> None:
    import numba

    numba.set_num_threads(max(1, min(int(n), numba.config.NUMBA_NUM_THREADS)))


def _call_on_worker(func: Callable[..., Any], numba_threads: int | None,
                    kwargs: dict[str, Any], *args: Any) -> Any:
    """Runs on a dask worker: bound numba's threads, then call the task function.

    numba starts as many threads as the machine has cores in *every* worker process;
    several workers on one machine would then oversubscribe the cores.  The limit is
    per calling thread in numba, so it is set inside the task.
    """
    if numba_threads:
        _limit_numba_threads(numba_threads)
    return func(*args, **kwargs)


class DaskExecutor(Executor):
    """Runs tasks on a dask.distributed cluster.

    Parameters
    ----------
    address : str
        ``"local-cluster"`` starts a cluster of worker processes on this machine (loopback
        only, no dashboard) and closes it with the executor; otherwise the address of a
        running scheduler (``tcp://host:port``, ``tls://…``) to connect to.
    workers : int or None
        Worker processes of a local cluster (default 2); ignored for a remote scheduler.
    threads_per_worker : int
        Tasks each worker runs at once.
    retries : int
        How many times dask re-runs a task that raised before reporting the failure.
    connect_timeout : float
        Seconds to wait for a remote scheduler to answer.
    """

    def __init__(self, address: str, workers: int | None = None, threads_per_worker: int = 1,
                 retries: int = 2, connect_timeout: float = 20.0) -> None:
        try:
            import distributed
        except ImportError as exc:  # pragma: no cover - a runtime dependency
            raise InputError(f"compute.scheduler = {address!r} needs the 'distributed' "
                             f"package: {exc}") from exc
        _check_count(workers, "compute.workers (--workers)", allow_none=True)
        _check_count(threads_per_worker, "threads_per_worker")
        if isinstance(retries, bool) or not isinstance(retries, int) or retries < 0:
            raise InputError(f"retries: expected an integer ≥ 0, got {retries!r}")
        self.address = address
        self.retries = retries
        self._distributed = distributed
        self._cluster = None
        self._numba_threads: int | None = None
        self._shared: dict[int, tuple[Any, Any]] = {}
        if address == "local-cluster":
            n = workers or 2
            self._numba_threads = max(1, (os.cpu_count() or 1) // (n * threads_per_worker))
            try:
                with warnings.catch_warnings(), _environ_kept(), _sigint_ignored():
                    # The scheduler's HTTP endpoint tries port 8787 even without a
                    # dashboard and warns when another cluster holds it; any port will do.
                    warnings.filterwarnings("ignore", message="Port .* is already in use")
                    self._cluster = distributed.LocalCluster(
                        n_workers=n, threads_per_worker=threads_per_worker, processes=True,
                        host="127.0.0.1", dashboard_address=None,
                        # the workers' own logs (cancelled tasks, a heartbeat to a scheduler
                        # that a Ctrl-C already closed) are not the user's business: a task's
                        # failure reaches the run through its future, with its traceback
                        silence_logs=logging.CRITICAL)
                self.client = distributed.Client(self._cluster)
            except Exception as exc:
                self.close()
                raise InputError(f"compute.scheduler = 'local-cluster': could not start a dask "
                                 f"cluster on this machine ({_error_text(exc)}); use "
                                 f"'local' to run in-process") from exc
            self._workers = n
        else:
            _probe_scheduler(address, connect_timeout)
            try:
                self.client = distributed.Client(address, timeout=f"{connect_timeout}s")
            except Exception as exc:  # whatever dask raises, it is the address's fault
                raise InputError(f"compute.scheduler = {address!r}: cannot connect to a dask "
                                 f"scheduler there ({_error_text(exc)})") from exc
            self._workers = len(self.client.scheduler_info().get("workers", {}))

    def describe(self) -> str:
        if self._cluster is not None:
            return f"dask local cluster, {self._workers} worker processes"
        return f"dask scheduler {self.address} ({self._workers} workers at start)"

    def share(self, obj: Any) -> Any:
        """Send ``obj`` to every worker once; pass the returned future as a task argument.

        Each object is sent once per executor and its handle kept until :meth:`close`.
        dask names scattered data by its content unless told otherwise, so sharing the
        same object again (the ladder's stages all share the one box) would re-use a name
        whose earlier copy may be in the middle of being released, and the tasks that
        depend on it are then cancelled for "lost dependencies".  A random name per
        object and a handle that lives as long as the executor remove both the name
        collision and the release.
        """
        held = self._shared.get(id(obj))
        if held is not None and held[0] is obj:
            return held[1]
        future = self.client.scatter(obj, broadcast=True, hash=False)
        self._shared[id(obj)] = (obj, future)  # the object itself keeps its id unique
        return future

    def close(self) -> None:
        getattr(self, "_shared", {}).clear()
        client = getattr(self, "client", None)
        quiet = logging.getLogger("distributed")
        level = quiet.level
        if self._cluster is not None:
            # our own cluster: its shutdown messages are noise, including the tracebacks its
            # comm handlers log when a Ctrl-C closes them mid-message (a task's own failure
            # reaches the run through its future)
            quiet.setLevel(logging.CRITICAL)
            # a scheduler coroutine that a Ctrl-C cut short (a scatter to a worker that had
            # just died) reports "Task exception was never retrieved" through asyncio's
            # logger when it is collected, which may be after close(): the cluster and its
            # event loop are ours, so that logger stays quiet from here on
            logging.getLogger("asyncio").setLevel(logging.CRITICAL)
        try:
            if client is not None:
                client.close()
                self.client = None
            if self._cluster is not None:
                self._cluster.close()
                self._cluster = None
        finally:
            quiet.setLevel(level)

    def _compute(self, tasks: Sequence[Task],
                 done: Callable[[int, bool, Any, str], None]) -> None:
        if self.client is None:
            raise RuntimeError("DaskExecutor used after close()")
        run_id = uuid.uuid4().hex[:8]  # fresh keys: no stale state from an earlier run
        futures = {}
        try:
            for j, t in enumerate(tasks):
                # The key's prefix (before the first '-') groups tasks in dask's displays.
                key = f"{t.kind or 'task'}-{t.key}-{run_id}-{j}"
                fut = self.client.submit(_call_on_worker, t.func, self._numba_threads,
                                         t.kwargs, *t.args, key=key, retries=self.retries,
                                         pure=False)
                futures[fut.key] = (j, fut)
            for fut in self._distributed.as_completed([f for _, f in futures.values()]):
                j, _ = futures.pop(fut.key)
                if fut.status == "finished":
                    try:
                        result = fut.result()
                    except Exception as exc:  # lost in transfer
                        done(j, False, exc, traceback.format_exc())
                    else:
                        done(j, True, result, "")
                else:
                    try:
                        exc = fut.exception()
                        tb = "".join(traceback.format_tb(fut.traceback()))
                    except Exception as lost:  # cancelled: no exception to fetch
                        exc, tb = lost, ""
                    done(j, False, exc, tb)
                fut.release()
        finally:
            if futures:  # interrupted: stop what is still queued on the cluster
                quiet = logging.getLogger("distributed")
                level = quiet.level
                if self._cluster is not None:  # as in close(): our cluster's noise
                    quiet.setLevel(logging.CRITICAL)
                try:
                    self.client.cancel([f for _, f in futures.values()])
                finally:
                    quiet.setLevel(level)


def _probe_scheduler(address: str, timeout: float) -> None:
    """Ask ``address`` who it is, within ``timeout`` seconds; raise InputError unless a
    dask scheduler answers.

    ``distributed.Client`` trusts the peer: a port served by something else (a web
    server, a database) makes it read a garbage frame length and try to allocate
    exabytes, and a port that accepts but never answers blocks it without limit.  This
    handshake has one overall deadline and turns every failure into a message naming
    the address.
    """
    from distributed.comm import connect  # distributed is imported only when used

    async def identity() -> Any:
        comm = await connect(address, timeout=timeout)
        try:
            await comm.write({"op": "identity"})
            return await comm.read()
        finally:
            comm.abort()

    what = f"compute.scheduler = {address!r}"
    try:
        reply = asyncio.run(asyncio.wait_for(identity(), timeout))
    except (TimeoutError, asyncio.TimeoutError):
        raise InputError(f"{what}: no answer within {timeout:g} s; check the address and "
                         f"that a dask scheduler runs there") from None
    except MemoryError:  # a garbage frame length read as a size
        raise InputError(f"{what}: the service at that port is not a dask scheduler (it "
                         f"answered with data dask cannot read)") from None
    except Exception as exc:  # refused, reset, wrong protocol
        raise InputError(f"{what}: no dask scheduler answers there ({_error_text(exc)}); "
                         f"check the host and port") from None
    if not (isinstance(reply, dict) and reply.get("type") == "Scheduler"):
        raise InputError(f"{what}: the service at that port is not a dask scheduler "
                         f"(it answered {str(reply)[:80]!r})")


class InterruptLatch:
    """Remembers a Ctrl-C so that it cannot be lost.

    Python raises :class:`KeyboardInterrupt` at the next bytecode after SIGINT, and that
    bytecode may run in Python code that compiled code calls back:

    * numba's parallel kernels call back into numba (``_numba_unpickle``) as they finish:
      an exception raised there returns into the compiled code, which then fails with a
      SystemError or a segmentation fault (found by the interrupt test under load, where
      the Ctrl-C landed in a box pair count). Inside numba the latch only records the
      signal;
    * in a ctypes callback (numba caching a kernel it has just compiled), the exception is
      handed to :func:`sys.unraisablehook`, which would print it with a traceback as
      "ignored"; the latch keeps that report quiet (any other unraisable exception is
      reported as before).

    :meth:`check`, called after every finished task, raises a recorded interrupt that was
    deferred or swallowed. A run also holds one around its stages outside the tasks (the
    input stage reads and builds the box, footprint and regions with numba kernels too)
    and checks it after each of them (:func:`conecheck.run.validate.validate`).
    """

    def __init__(self) -> None:
        self.hit = False
        self._previous: Any = None
        self._previous_hook: Any = None

    def __enter__(self) -> InterruptLatch:
        if threading.current_thread() is threading.main_thread():
            self._previous = signal.signal(signal.SIGINT, self._handle)
            self._previous_hook = sys.unraisablehook
            sys.unraisablehook = self._unraisable
        return self

    def _unraisable(self, unraisable: Any) -> None:
        if self.hit and isinstance(unraisable.exc_value, KeyboardInterrupt):
            return  # the interrupt this latch raised; check() raises it after the task
        self._previous_hook(unraisable)

    def _handle(self, signum: int, frame: Any) -> None:
        if self._previous == signal.SIG_IGN:
            return
        self.hit = True
        module = "" if frame is None else str(frame.f_globals.get("__name__", ""))
        if module == "numba" or module.startswith("numba."):
            return  # called back from compiled code: check() raises it after the task
        if callable(self._previous):
            self._previous(signum, frame)  # the default handler raises KeyboardInterrupt
        raise KeyboardInterrupt

    def check(self) -> None:
        if self.hit:
            raise KeyboardInterrupt

    def __exit__(self, *exc_info: object) -> None:
        if self._previous is not None:
            signal.signal(signal.SIGINT, self._previous)
        if self._previous_hook is not None:
            sys.unraisablehook = self._previous_hook


@contextlib.contextmanager
def _sigint_ignored() -> Iterator[None]:
    """Start worker processes with Ctrl-C ignored.

    A terminal's Ctrl-C reaches every process of the foreground group; workers would each
    print a traceback.  An ignored signal stays ignored in the processes started
    meanwhile (also across exec, and Python keeps it so), while this process restores its
    handler and stays the one place an interrupt is handled: it cancels the queued tasks
    and closes the cluster, which stops the workers.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


@contextlib.contextmanager
def _environ_kept() -> Iterator[None]:
    """Undo environment changes made while starting workers.

    dask's nanny sets its worker variables (OMP_NUM_THREADS=1, PYTHONHASHSEED, …) in the
    *parent* process before spawning; they would leak into this process and anything it
    starts later.
    """
    saved = dict(os.environ)
    try:
        yield
    finally:
        for k in set(os.environ) - set(saved):
            del os.environ[k]
        os.environ.update(saved)


def _check_count(n: Any, what: str, allow_none: bool = False) -> None:
    if n is None and allow_none:
        return
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
        raise InputError(f"{what}: expected a positive integer, got {n!r}")


def make_executor(scheduler: str | None, workers: int | None = None) -> Executor:
    """The executor for config key ``compute.scheduler`` (option ``--scheduler``).

    ``None`` or ``"local"`` runs in-process; ``"local-cluster"`` starts a dask cluster of
    ``workers`` processes here; ``"tcp://…"`` / ``"tls://…"`` connects to a running dask
    scheduler.
    """
    if scheduler is None or scheduler == "local":
        _check_count(workers, "compute.workers (--workers)", allow_none=True)
        return LocalExecutor()
    if not scheduler_ok(scheduler):
        raise InputError(f"compute.scheduler (--scheduler): got {scheduler!r}; "
                         f"{SCHEDULER_HELP}")
    return DaskExecutor(scheduler, workers)
