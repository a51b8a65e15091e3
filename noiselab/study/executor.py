"""Executors for the independent simulations of tune, sweep and budget.

One interface, three back ends:

* in-process (default): a plain loop in the calling process;
* a local process pool (``workers=N``): ``concurrent.futures.ProcessPoolExecutor`` with the
  ``spawn`` start method (qiskit-aer's OpenMP threads and BLAS do not survive ``fork``); each
  worker runs with one engine thread so N workers share the cores instead of fighting for them;
* a Dask distributed cluster (``cluster="tcp://HOST:PORT"`` or a ``distributed.Client``); dask is
  the optional ``cluster`` extra and is imported only when asked for.

``map(fn, items)`` preserves order and returns the same values whichever back end runs it, as
long as ``fn`` is deterministic given its item (carry seeds in the items; never draw fresh
randomness inside a worker). ``fn`` must be a module-level function and the items picklable.
``items`` may be a generator: the pool and Dask submit each item as soon as it is produced, so
the caller's work producing the next item overlaps the tasks already running (results are
reported between items). ``start()`` starts the workers early (a no-op in-process).
A task whose worker process dies is run again (bounded attempts): a killed worker never loses a
point. Exceptions raised by ``fn`` itself are not retried; they propagate to the caller.

About 460 lines: three back ends behind one ``map`` (in-process, process pool with retries
and items submitted as they are produced, Dask), kept together so they keep one contract.
"""

from __future__ import annotations

import atexit
import concurrent.futures
import contextlib
import multiprocessing
import os
import re
from collections.abc import Callable, Iterable, Iterator, Sequence
from concurrent.futures.process import BrokenProcessPool
from typing import Any, Protocol, TypeVar, runtime_checkable

from noiselab.common.errors import InputError, NoiselabError, input_error
from noiselab.emulate.memory import ENGINE_THREADS_ENV, engine_threads

T = TypeVar("T")
R = TypeVar("R")

ResultCallback = Callable[[int, Any], None]

#: Environment variables that cap the thread pools of OpenMP (qiskit-aer), BLAS and numexpr.
THREAD_ENV_VARS: tuple[str, ...] = (
    "OMP_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
    "MKL_NUM_THREADS",
    "BLIS_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
    "NUMEXPR_NUM_THREADS",
)

#: How many times a task is started in total when worker processes die under it.
DEFAULT_ATTEMPTS = 3
#: Most local worker processes: each is a full interpreter with its own simulator memory.
MAX_WORKERS = 256

_CLUSTER_ADDRESS = re.compile(r"^(tcp|tls|inproc|ucx|ws|wss)://[^\s/]+$")


@runtime_checkable
class Executor(Protocol):
    """Runs ``fn`` over ``items``; see the module docstring for the guarantees."""

    #: Human-readable description for logs and provenance, e.g. ``"process pool (2 workers)"``.
    description: str
    #: How many tasks may run at once (1 for in-process; for dask the worker threads seen at
    #: connection time, at least 1).
    parallelism: int
    #: True only for the in-process back end: callers may then skip the task wrapping.
    in_process: bool

    def map(
        self,
        fn: Callable[[Any], Any],
        items: Iterable[Any],
        *,
        on_result: ResultCallback | None = None,
    ) -> list[Any]:
        """Return ``[fn(item) for item in items]``; call ``on_result(index, result)`` per result."""
        ...

    def close(self) -> None:
        """Release workers and connections (idempotent)."""
        ...

    def __enter__(self) -> Executor: ...

    def __exit__(self, *exc: object) -> None: ...


class _Base:
    description = "executor"
    parallelism = 1
    in_process = False

    def __enter__(self) -> _Base:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def start(self) -> None:
        """Start the workers now, without waiting (a no-op where there is nothing to start)."""

    def close(self) -> None:  # pragma: no cover - overridden
        pass


class InProcessExecutor(_Base):
    """Run every task in the calling process, one after the other."""

    description = "in-process"
    parallelism = 1
    in_process = True

    def map(
        self,
        fn: Callable[[Any], Any],
        items: Iterable[Any],
        *,
        on_result: ResultCallback | None = None,
    ) -> list[Any]:
        results: list[Any] = []
        for index, item in enumerate(items):
            result = fn(item)
            results.append(result)
            if on_result is not None:
                on_result(index, result)
        return results

    def close(self) -> None:
        pass


# --------------------------------------------------------------------------- process pool


def _worker_init(threads: int) -> None:
    """Pool initializer: cap OpenMP / BLAS threads before any engine is loaded; exit fast."""
    for name in THREAD_ENV_VARS:
        os.environ[name] = str(threads)
    os.environ[ENGINE_THREADS_ENV] = str(threads)
    # Leave without tearing the modules down (qiskit, PySCF: about a quarter of their import
    # time), which the pool's close would wait for: every result is sent by then, the results
    # cache commits each write and the standard streams are flushed before the exit handlers.
    atexit.register(os._exit, 0)


@contextlib.contextmanager
def _environment(values: dict[str, str]) -> Iterator[None]:
    """Set environment variables for the duration (inherited by processes spawned meanwhile)."""
    saved = {name: os.environ.get(name) for name in values}
    os.environ.update(values)
    try:
        yield
    finally:
        for name, old in saved.items():
            if old is None:
                os.environ.pop(name, None)
            else:
                os.environ[name] = old


class ProcessPoolExecutor(_Base):
    """A pool of ``workers`` local processes (``spawn`` start method), rebuilt if a worker dies."""

    def __init__(
        self,
        workers: int,
        *,
        threads_per_worker: int = 1,
        attempts: int = DEFAULT_ATTEMPTS,
        start_method: str = "spawn",
    ) -> None:
        if workers < 1:
            raise input_error(None, "workers", f"{workers} workers", "an integer >= 1")
        if attempts < 1:
            raise input_error(None, "attempts", f"{attempts}", "an integer >= 1")
        self.workers = workers
        self.threads_per_worker = threads_per_worker
        self.attempts = attempts
        self.start_method = start_method
        self.parallelism = workers
        self.description = f"process pool ({workers} worker{'s' if workers != 1 else ''})"
        self._pool: Any = None
        #: How many times the pool had to be rebuilt because a worker died (for tests and logs).
        self.restarts = 0

    def _env(self) -> dict[str, str]:
        values = {name: str(self.threads_per_worker) for name in THREAD_ENV_VARS}
        values[ENGINE_THREADS_ENV] = str(self.threads_per_worker)
        return values

    def _ensure_pool(self) -> Any:
        if self._pool is None:
            self._pool = concurrent.futures.ProcessPoolExecutor(
                max_workers=self.workers,
                mp_context=multiprocessing.get_context(self.start_method),
                initializer=_worker_init,
                initargs=(self.threads_per_worker,),
            )
        return self._pool

    def _drop_pool(self, kill: bool = False) -> None:
        """Shut the pool down; ``kill`` stops running tasks too (error or Ctrl-C in the caller)."""
        pool, self._pool = self._pool, None
        if pool is None:
            return
        if kill:
            # a 12-qubit simulation can run for minutes: do not wait for it to finish
            for process in list(getattr(pool, "_processes", {}).values()):
                with contextlib.suppress(Exception):
                    process.terminate()
        pool.shutdown(wait=True, cancel_futures=True)

    def start(self) -> None:
        """Start every worker now, without waiting for them (each spawned worker imports the
        stack, seconds): the caller's own work then overlaps the start-up. No-op once started."""
        if self._pool is not None:
            return
        pool = self._ensure_pool()
        # a process is spawned per submitted task until ``workers`` exist (spawn start method)
        with _environment(self._env()):
            for _ in range(self.workers):
                pool.submit(os.getpid)

    def map(
        self,
        fn: Callable[[Any], Any],
        items: Iterable[Any],
        *,
        on_result: ResultCallback | None = None,
    ) -> list[Any]:
        stored: list[Any] = []
        results: dict[int, Any] = {}
        tries: dict[int, int] = {}
        futures: dict[concurrent.futures.Future[Any], int] = {}

        def submit(indices: Sequence[int]) -> bool:
            """Submit; False when the pool is found broken (the tasks are left unsubmitted)."""
            pool = self._ensure_pool()
            # Spawned workers inherit the environment at start: cap their threads from the start.
            with _environment(self._env()):
                for i in indices:
                    try:
                        futures[pool.submit(fn, stored[i])] = i
                    except BrokenProcessPool:
                        return False
                    tries[i] = tries.get(i, 0) + 1
            return True

        def harvest(timeout: float | None, every: bool = False) -> bool:
            """Report finished tasks (waiting up to ``timeout`` s for one, or for all with
            ``every``); True when a worker died under one."""
            done, _ = concurrent.futures.wait(
                futures,
                timeout=timeout,
                return_when=(
                    concurrent.futures.ALL_COMPLETED
                    if every
                    else concurrent.futures.FIRST_COMPLETED
                ),
            )
            broken = False
            for future in done:
                index = futures.pop(future)
                try:
                    result = future.result()
                except BrokenProcessPool:
                    broken = True
                    continue
                results[index] = result
                if on_result is not None:
                    on_result(index, result)
            return broken

        def restart() -> None:
            """A worker died: keep what finished, rebuild the pool, submit the rest again."""
            while True:
                harvest(None, every=True)  # a broken pool fails its other tasks promptly
                self._drop_pool()
                self.restarts += 1
                pending = [i for i in range(len(stored)) if i not in results]
                worst = max((tries.get(i, 0) for i in pending), default=0)
                if worst >= self.attempts:
                    raise NoiselabError(
                        f"{self.description}: a worker process died {worst} times while "
                        f"running {len(pending)} unfinished task(s) (first: #{pending[0]}); "
                        "likely out of memory or a crash in the engine"
                    )
                if submit(pending):
                    return

        try:
            # Items are submitted as they are produced: the caller's work producing the next
            # item overlaps the tasks already running.
            for item in items:
                stored.append(item)
                if not submit([len(stored) - 1]) or harvest(0):
                    restart()
            while futures:
                if harvest(None):
                    restart()
        except BaseException:
            for future in futures:
                future.cancel()
            self._drop_pool(kill=True)
            raise
        return [results[i] for i in range(len(stored))]

    def close(self) -> None:
        self._drop_pool()


# --------------------------------------------------------------------------- dask


def _import_distributed() -> Any:
    # optional dependency (the 'cluster' extra): imported only when a cluster is asked for
    try:
        import distributed
    except ImportError as exc:
        raise InputError(
            f"cluster: dask.distributed is not installed ({exc.name or 'distributed'} missing); "
            'allowed: install it with pip install "noiselab[cluster]"'
        ) from None
    return distributed


class DaskExecutor(_Base):
    """Tasks submitted to a Dask distributed cluster, each retried if its worker dies."""

    def __init__(
        self, cluster: Any, *, retries: int = DEFAULT_ATTEMPTS - 1, timeout_s: float = 30.0
    ) -> None:
        distributed = _import_distributed()
        self.retries = retries
        if isinstance(cluster, distributed.Client):
            self._client = cluster
            self._owns_client = False
            address = getattr(cluster.scheduler, "address", None) or "client"
        elif isinstance(cluster, str):
            address = cluster.strip()
            if not _CLUSTER_ADDRESS.match(address):
                raise input_error(
                    None,
                    "cluster",
                    f"{cluster!r} is not a scheduler address",
                    "tcp://HOST:PORT (or tls://HOST:PORT) of a running dask scheduler",
                )
            try:
                self._client = distributed.Client(address, timeout=timeout_s, set_as_default=False)
            except (OSError, TimeoutError) as exc:
                raise input_error(
                    None,
                    "cluster",
                    f"cannot reach the dask scheduler at {address} ({type(exc).__name__})",
                    "the address of a running dask scheduler",
                ) from None
            self._owns_client = True
        else:
            raise input_error(
                None,
                "cluster",
                f"unsupported value of type {type(cluster).__name__}",
                "a scheduler address tcp://HOST:PORT or a distributed.Client",
            )
        self.description = f"dask cluster {address}"
        try:
            workers = self._client.scheduler_info().get("workers", {})
            n = sum(int(w.get("nthreads", 1)) for w in workers.values())
        except Exception:  # the cluster may still be starting: size is informative only
            n = 0
        self.parallelism = max(1, n)

    @property
    def client(self) -> Any:
        return self._client

    def map(
        self,
        fn: Callable[[Any], Any],
        items: Iterable[Any],
        *,
        on_result: ResultCallback | None = None,
    ) -> list[Any]:
        distributed = _import_distributed()
        futures: list[Any] = []
        results: dict[int, Any] = {}

        def collect(index: int, future: Any) -> None:
            results[index] = future.result()
            if on_result is not None:
                on_result(index, results[index])

        try:
            # pure=False: never let the scheduler merge two tasks, nor reuse earlier results.
            for item in items:  # submitted as produced; finished ones reported between items
                futures.append(self._client.submit(fn, item, retries=self.retries, pure=False))
                for index, future in enumerate(futures):
                    if index not in results and future.done():
                        collect(index, future)
            index_of = {future.key: i for i, future in enumerate(futures)}
            waiting = [f for i, f in enumerate(futures) if i not in results]
            if waiting:
                for future in distributed.as_completed(waiting, loop=self._client.loop):
                    collect(index_of[future.key], future)
        except distributed.client.FutureCancelledError as exc:  # pragma: no cover
            raise NoiselabError(f"{self.description}: tasks were cancelled ({exc})") from None
        except BaseException as exc:
            self._client.cancel(futures)
            killed = getattr(distributed, "KilledWorker", None)
            if killed is not None and isinstance(exc, killed):
                raise NoiselabError(
                    f"{self.description}: workers died repeatedly while running a task "
                    "(likely out of memory or a crash in the engine)"
                ) from None
            raise
        return [results[i] for i in range(len(futures))]

    def close(self) -> None:
        if self._owns_client and self._client is not None:
            with contextlib.suppress(Exception):
                self._client.close()
        self._owns_client = False


# --------------------------------------------------------------------------- factory


def make_executor(workers: int | None = None, cluster: Any = None) -> Executor:
    """Pick the back end: ``cluster`` (address or Client) > ``workers`` > 1 > in-process.

    ``workers=None`` or ``1`` runs in-process; ``workers=N>1`` starts a local pool of N processes.
    Giving both is refused.
    """
    if cluster is not None and workers is not None and workers != 1:
        raise input_error(
            None, "workers", "given together with cluster", "one of workers or cluster"
        )
    if cluster is not None:
        return DaskExecutor(cluster)
    if workers is not None and (
        isinstance(workers, bool) or not isinstance(workers, int) or not 1 <= workers <= MAX_WORKERS
    ):
        raise input_error(
            None, "workers", f"{workers!r}", f"a whole number from 1 to {MAX_WORKERS}"
        )
    if workers is None or workers == 1:
        return InProcessExecutor()
    return ProcessPoolExecutor(workers)


__all__ = [
    "DEFAULT_ATTEMPTS",
    "ENGINE_THREADS_ENV",
    "MAX_WORKERS",
    "THREAD_ENV_VARS",
    "DaskExecutor",
    "Executor",
    "InProcessExecutor",
    "ProcessPoolExecutor",
    "engine_threads",
    "make_executor",
]
