"""Where the per-section calculations of an assessment cycle run: in this process (default),
in a local process pool, or on a Dask distributed cluster.

The cycle's coordinator prepares each section's inputs from the store, submits them here, and
alone writes the results back, so the single-writer SQLite store never sees a worker. An
executor only moves a picklable task to a worker and a picklable result back, and owns the
retries: a worker that dies, raises or stalls costs a new attempt of its sections (at most
``max_attempts`` in all); a section that keeps failing comes back as a :class:`SectionFailure`,
never silently dropped and never returned twice.

Dask is an optional extra (``pip install slipwatch[cluster]``) and is imported only when a
cluster is asked for.
"""

from __future__ import annotations

import importlib
import queue
from collections.abc import Callable, Iterator
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass

from watch.errors import ConfigError, UserError

__all__ = [
    "DEFAULT_MAX_ATTEMPTS",
    "DEFAULT_STALL_TIMEOUT_S",
    "DEFAULT_SECTIONS_PER_TASK",
    "SectionFailure",
    "SectionExecutor",
    "InProcessExecutor",
    "ProcessPoolSectionExecutor",
    "DaskSectionExecutor",
    "executor_for",
]

#: Attempts of one section before it is reported as failed (first try included).
DEFAULT_MAX_ATTEMPTS = 3

#: A parallel executor whose workers return nothing for this long counts the sections in
#: flight as timed out [s]. A full search of a three-layer section takes seconds, so ten
#: minutes only catches a hung or lost worker.
DEFAULT_STALL_TIMEOUT_S = 600.0

#: Warm re-evaluations per Dask task: enough to spread the scheduler's cost per task (a few
#: milliseconds) over re-evaluations of tens of milliseconds each (full searches travel
#: alone). From tests/benchmarks/bench_cycle.py on a 2-core machine.
DEFAULT_SECTIONS_PER_TASK = 16


@dataclass(frozen=True)
class SectionFailure:
    """A section whose calculation failed on every attempt (a worker died, raised or stalled)."""

    key: str
    attempts: int
    message: str


def _check_limits(max_attempts: int, stall_timeout_s: float) -> None:
    if not isinstance(max_attempts, int) or max_attempts < 1:
        raise ConfigError(f"max_attempts must be an integer >= 1, got {max_attempts!r}")
    if not stall_timeout_s > 0:
        raise ConfigError(f"stall timeout must be > 0 s, got {stall_timeout_s!r}")


class SectionExecutor:
    """Runs ``compute(task)`` for submitted tasks and yields ``(key, result)`` as they finish,
    ``result`` being a :class:`SectionFailure` once the attempts are spent.

    Use as a context manager; ``submit`` never blocks on the calculation, so the coordinator
    keeps preparing sections while the workers compute.
    """

    name = "abstract"
    workers = 1

    def __init__(self, max_attempts: int = DEFAULT_MAX_ATTEMPTS,
                 stall_timeout_s: float = DEFAULT_STALL_TIMEOUT_S) -> None:  # fmt: skip
        _check_limits(max_attempts, stall_timeout_s)
        self.max_attempts = max_attempts
        self.stall_timeout_s = stall_timeout_s
        self.retries = 0  # attempts beyond the first, over the executor's life
        self._compute: Callable | None = None

    def start(self, compute: Callable) -> None:
        self._compute = compute

    def submit(self, key: str, task) -> None:
        raise NotImplementedError

    def results(self) -> Iterator[tuple[str, object]]:
        """Every submitted section's result, blocking until the last one."""
        raise NotImplementedError

    def ready(self) -> Iterator[tuple[str, object]]:
        """The results available now, without waiting on a worker (none by default)."""
        return iter(())

    def close(self) -> None:
        pass

    def describe(self) -> str:
        return f"{self.name}, {self.workers} worker(s)"

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self.close()


class InProcessExecutor(SectionExecutor):
    """Every section in this process, one after the other (embedded, no extra service)."""

    name = "in-process"

    def __init__(self, **limits) -> None:
        super().__init__(**limits)
        self._queue: list[tuple[str, object]] = []

    def submit(self, key: str, task) -> None:
        self._queue.append((key, task))

    def ready(self):
        # Calculating as soon as a section is submitted keeps the in-process cycle's order:
        # prepare, calculate and write one section before preparing the next.
        return self.results()

    def results(self):
        queue, self._queue = self._queue, []
        for key, task in queue:
            for attempt in range(1, self.max_attempts + 1):
                try:
                    result = self._compute(task)
                except Exception as error:  # a library error is the compute step's own result
                    self.retries += attempt < self.max_attempts
                    if attempt == self.max_attempts:
                        result = SectionFailure(key, attempt, f"{type(error).__name__}: {error}")
                        break
                else:
                    break
            yield key, result


class ProcessPoolSectionExecutor(SectionExecutor):
    """A local pool of ``workers`` processes (concurrent.futures).

    A worker that dies breaks the whole pool: the pool is rebuilt, the sections that were in
    flight are charged one attempt and re-run one at a time (so the one that kills its worker
    is found without charging its neighbours again), and the others are resubmitted uncharged.
    """

    name = "process pool"

    def __init__(self, workers: int = 2, **limits) -> None:
        super().__init__(**limits)
        if not isinstance(workers, int) or workers < 1:
            raise ConfigError(f"--workers must be an integer >= 1, got {workers!r}")
        self.workers = workers
        self._pool: ProcessPoolExecutor | None = None
        self._tasks: dict[str, object] = {}  # submitted, not yet yielded, in submission order
        self._futures: dict[str, object] = {}
        self._attempts: dict[str, int] = {}

    def start(self, compute: Callable) -> None:
        super().start(compute)
        self._pool = ProcessPoolExecutor(self.workers)

    def submit(self, key: str, task) -> None:
        self._tasks[key] = task
        self._attempts[key] = 0
        self._send(key)

    def ready(self):
        # Results already in let the coordinator write while it still prepares sections;
        # failures wait for results(), which owns the retries.
        for key, future in list(self._futures.items()):
            if future.done() and future.exception() is None:
                del self._futures[key]
                yield key, self._finish(key, future.result())

    def _send(self, key: str) -> None:
        try:
            self._futures[key] = self._pool.submit(self._compute, self._tasks[key])
        except BrokenProcessPool as error:  # a worker died since: results() rebuilds the pool
            self._futures[key] = Future()
            self._futures[key].set_exception(error)

    def results(self):
        while self._tasks:
            by_future = {f: k for k, f in self._futures.items()}
            done, _ = wait(by_future, timeout=self.stall_timeout_s, return_when=FIRST_COMPLETED)
            broken = not done
            why = f"no section finished within {self.stall_timeout_s:g} s"
            for future in done:
                key = by_future[future]
                error = future.exception()
                if isinstance(error, BrokenProcessPool):
                    broken, why = True, "the worker process died"
                    continue
                del self._futures[key]
                if error is None:
                    yield key, self._finish(key, future.result())
                elif (failure := self._charge(key, f"{type(error).__name__}: {error}")) is not None:
                    yield key, failure
                else:
                    self._send(key)
            if broken:
                yield from self._recover(why)

    def _finish(self, key: str, result):
        del self._tasks[key]
        return result

    def _charge(self, key: str, message: str) -> SectionFailure | None:
        """Count a failed attempt; the failure itself once the attempts are spent."""
        self._attempts[key] += 1
        if self._attempts[key] >= self.max_attempts:
            del self._tasks[key]
            self._futures.pop(key, None)
            return SectionFailure(key, self._attempts[key], message)
        self.retries += 1
        return None

    def _recover(self, why: str):
        # The pool hands tasks to its workers in submission order, at most workers + 1 ahead
        # (Python's ProcessPoolExecutor queues one extra call), so the sections in flight were
        # the oldest unfinished ones.
        unfinished = [k for k in self._tasks if k in self._futures]
        suspects, innocent = unfinished[: self.workers + 1], unfinished[self.workers + 1:]
        self._restart_pool()
        for key in suspects:
            if (failure := self._charge(key, why)) is not None:
                yield key, failure
        for key in suspects:
            if key in self._tasks:
                yield from self._isolated(key)
        for key in innocent:
            self._send(key)

    def _isolated(self, key: str):
        """Run one suspect alone until it succeeds or its attempts are spent."""
        while True:
            self._send(key)
            future = self._futures[key]
            done, _ = wait([future], timeout=self.stall_timeout_s)
            if done and future.exception() is None:
                self._futures.pop(key, None)
                yield key, self._finish(key, future.result())
                return
            if not done:
                message = f"no result within {self.stall_timeout_s:g} s"
            elif isinstance(future.exception(), BrokenProcessPool):
                message = "the worker process died"
            else:
                message = f"{type(future.exception()).__name__}: {future.exception()}"
            if not done or isinstance(future.exception(), BrokenProcessPool):
                self._restart_pool()
            if (failure := self._charge(key, message)) is not None:
                yield key, failure
                return

    def _restart_pool(self) -> None:
        self._terminate()
        self._pool = ProcessPoolExecutor(self.workers)

    def _terminate(self) -> None:
        if self._pool is None:
            return
        # concurrent.futures cannot stop a running call: a hung worker is ended by its pid.
        for process in list((getattr(self._pool, "_processes", None) or {}).values()):
            if process.is_alive():
                process.terminate()
        self._pool.shutdown(wait=True, cancel_futures=True)
        self._pool = None

    def close(self) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None


class DaskSectionExecutor(SectionExecutor):
    """A Dask distributed cluster: a scheduler at ``address`` (``tcp://host:8786``), or
    ``local:N`` for a local cluster of N single-threaded worker processes started for the
    cycle and stopped after it.

    Sections travel in batches of ``sections_per_task`` per Dask task: a warm re-evaluation
    takes tens of milliseconds, about what the scheduler spends on a task, so one section per
    task would leave the workers waiting on it (measured in tests/benchmarks/bench_cycle.py).
    A task whose ``full_search`` attribute is true travels alone: a search takes a few tenths
    of a second, hundreds of times the cost of a task, and a batch of them would leave one
    worker calculating for seconds at the end of a cycle while the others wait.
    A section that raises on its worker is resent alone; a batch whose worker died (after the
    scheduler's own re-runs, ``distributed.scheduler.allowed-failures``) or stalled costs each
    of its sections one attempt, and they are resent one per task, so that a section that
    kills its worker is found without charging its neighbours again. ``max_attempts`` bounds
    the attempts of every section.
    """

    name = "dask"

    def __init__(self, address: str, sections_per_task: int = DEFAULT_SECTIONS_PER_TASK,
                 **limits) -> None:  # fmt: skip
        super().__init__(**limits)
        if not isinstance(sections_per_task, int) or sections_per_task < 1:
            raise ConfigError(f"sections per task must be an integer >= 1, got {sections_per_task!r}")
        self.address = address
        self.sections_per_task = sections_per_task
        self._client = None
        self._cluster = None
        self._tasks: dict[str, object] = {}  # submitted, not yet yielded
        self._waiting: list[str] = []  # submitted, not yet sent (the next batch)
        self._batches: dict[object, list[str]] = {}  # future -> its sections
        self._attempts: dict[str, int] = {}
        self._ended: queue.SimpleQueue = queue.SimpleQueue()  # batches whose task has ended
        self._serial = 0

    def start(self, compute: Callable) -> None:
        super().start(compute)
        try:
            import dask
            from dask.distributed import Client, LocalCluster
        except ImportError:
            raise UserError("a Dask cluster needs the optional extra: pip install 'slipwatch[cluster]'") from None
        if self.address.startswith("local:"):
            workers = _local_workers(self.address)
            with dask.config.set(_LOCAL_CLUSTER_CONFIG):
                self._cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                             dashboard_address=None)  # fmt: skip
            self._client = Client(self._cluster)
        else:
            try:
                self._client = Client(self.address, timeout=30)
            except (OSError, TimeoutError) as error:
                raise UserError(f"cannot reach the Dask scheduler at {self.address}: {error}") from None
        self.workers = len(self._client.scheduler_info(n_workers=-1)["workers"]) or 1
        # Loading the solver on every worker now checks that slipwatch is installed there and
        # keeps the import time out of the first sections' calculation.
        try:
            self._client.run(importlib.import_module, "watch.cycle")
        except ImportError as error:
            self.close()
            raise UserError(f"the Dask workers at {self.address} cannot load slipwatch ({error}): install "
                            "slipwatch, at the version of this coordinator, on every worker") from None

    def describe(self) -> str:
        return f"dask at {self.address}, {self.workers} worker(s), {self.sections_per_task} section(s) per task"

    def submit(self, key: str, task) -> None:
        self._tasks[key] = task
        self._attempts[key] = 0
        if getattr(task, "full_search", False):
            self._send([key])
            return
        self._waiting.append(key)
        if len(self._waiting) >= self.sections_per_task:
            self._flush()

    def _flush(self) -> None:
        if self._waiting:
            self._send(self._waiting)
            self._waiting = []

    def _send(self, keys: list[str]) -> None:
        # A fresh task key per attempt: a retried section is never confused with the
        # attempt it replaces, whatever the scheduler still holds of that one.
        self._serial += 1
        future = self._client.submit(_compute_batch, self._compute, [(k, self._tasks[k]) for k in keys],
                                     pure=False, key=f"slipwatch-{keys[0]}-{self._serial}")  # fmt: skip
        self._batches[future] = list(keys)
        # Dask calls this from its own thread when the task ends (finished, failed or
        # cancelled). Taking ended tasks from a queue costs the same however many tasks are
        # out, where a wait on every outstanding future at each step grows with their number
        # (with hundreds of searches out, the two measured alike on 200 sections here).
        future.add_done_callback(self._ended.put)

    def ready(self):
        while True:
            try:
                future = self._ended.get_nowait()
            except queue.Empty:
                return
            yield from self._settle(future)

    def results(self):
        self._flush()
        while self._tasks:
            try:
                future = self._ended.get(timeout=self.stall_timeout_s)
            except queue.Empty:
                for future in list(self._batches):
                    future.cancel()
                    yield from self._retry_alone(self._batches.pop(future),
                                                 f"no section finished within {self.stall_timeout_s:g} s")
                continue
            yield from self._settle(future)

    def _settle(self, future):
        """The results of a finished batch; its failed sections charged and resent alone. A
        batch already given up on (cancelled after a stall) is ignored."""
        keys = self._batches.pop(future, None)
        if keys is None:
            return
        if future.status != "finished":
            error = future.exception() if future.status == "error" else future.status
            message = f"{type(error).__name__}: {error}" if isinstance(error, BaseException) else str(error)
            yield from self._retry_alone(keys, message)
            return
        for key, succeeded, value in future.result():
            if succeeded:
                del self._tasks[key]
                yield key, value
            else:
                yield from self._retry_alone([key], value)

    def _retry_alone(self, keys: list[str], message: str):
        for key in keys:
            self._attempts[key] += 1
            if self._attempts[key] >= self.max_attempts:
                del self._tasks[key]
                yield key, SectionFailure(key, self._attempts[key], message)
            else:
                self.retries += 1
                self._send([key])

    def close(self) -> None:
        if self._client is not None:
            self._client.close()
            self._client = None
        if self._cluster is not None:
            self._cluster.close()
            self._cluster = None


def _compute_batch(compute: Callable, tasks: list[tuple[str, object]]) -> list[tuple[str, bool, object]]:
    """A Dask worker's part: ``(key, True, result)`` per section, or ``(key, False, message)``
    for a section that raised (its neighbours in the batch are not lost with it)."""
    out = []
    for key, task in tasks:
        try:
            out.append((key, True, compute(task)))
        except Exception as error:  # reported per section; the executor owns the retries
            out.append((key, False, f"{type(error).__name__}: {error}"))
    return out


#: Settings of a local cluster (an existing cluster keeps its own), measured in
#: tests/benchmarks/bench_cycle.py and by timing an idle local cluster.
#:
#: - The workers' sampling profiler takes the GIL every few milliseconds, which costs a
#:   search's Python code a noticeable share of its time.
#: - Dask's default MALLOC_TRIM_THRESHOLD_ of 64 kB hands freed memory back to the system at
#:   once, so that every large temporary array of the solver is page-faulted in afresh: a full
#:   search ran 1.5 times slower on a Dask worker than in-process. The workers keep the C
#:   library's own default instead (the other variables are Dask's defaults).
#: - Dask's housekeeping runs every 20 to 500 ms (event-loop tick, work stealing, system and
#:   memory monitors): an idle local cluster of 2 workers took 6.8% of a core in this process
#:   (scheduler, nannies and client share its event loop) and 2.5% in each worker, 0.9% and
#:   0.3% at the intervals below. On a 2-core machine that is CPU taken from the workers. The
#:   tasks here last from a fifth of a second (a batch of warm re-evaluations) to seconds, so
#:   once a second is often enough to rebalance them and to watch the workers' memory.
_LOCAL_CLUSTER_CONFIG = {
    "distributed.worker.profile.enabled": False,
    "distributed.nanny.pre-spawn-environ": {
        "OMP_NUM_THREADS": 1,
        "MKL_NUM_THREADS": 1,
        "OPENBLAS_NUM_THREADS": 1,
    },
    "distributed.admin.tick.interval": "1s",
    "distributed.scheduler.work-stealing-interval": "1s",
    "distributed.admin.system-monitor.interval": "5s",
    "distributed.worker.memory.monitor-interval": "1s",
}


def _local_workers(address: str) -> int:
    text = address.removeprefix("local:")
    if not text.isdigit() or int(text) < 1:
        raise ConfigError(f"--cluster {address!r}: give local:N with N >= 1 workers, e.g. local:2")
    return int(text)


def executor_for(cluster: str | None = None, workers: int | None = None, *,
                 sections_per_task: int | None = None, **limits) -> SectionExecutor:  # fmt: skip
    """The executor a cycle asked for: ``cluster`` (``tcp://host:port`` or ``local:N``) runs on
    Dask, ``sections_per_task`` at a time; otherwise ``workers`` > 1 a local process pool;
    otherwise in this process."""
    if cluster:
        if workers is not None:
            raise UserError("give either --cluster or --workers, not both (a cluster has its own workers)")
        if not (cluster.startswith("local:") or "://" in cluster):
            raise ConfigError(f"cluster {cluster!r}: give a scheduler address such as tcp://10.0.0.5:8786 "
                              "or local:N")  # fmt: skip
        if sections_per_task is not None:
            limits["sections_per_task"] = sections_per_task
        return DaskSectionExecutor(cluster, **limits)
    if workers is not None and workers > 1:
        return ProcessPoolSectionExecutor(workers, **limits)
    if workers is not None and workers < 1:
        raise ConfigError(f"--workers must be >= 1, got {workers}")
    return InProcessExecutor(**limits)
