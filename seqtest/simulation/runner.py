"""Where the chunks of simulations run: in this process, on local processes, or as
tasks on a Dask cluster, with progress from inside the chunks.

A *batch* is one simulation: the function that runs a chunk, its job (everything a
worker needs) and the sizes of its chunks. :class:`Runner` runs the chunks of one or
more batches on its backend and hands back each batch's chunk results in chunk order,
so a simulation's totals are summed in the same order whatever the backend, the
number of workers or the order in which chunks finish: results are identical bit for
bit.

Backends
--------
- in this process (``workers=1``, the default of :func:`~seqtest.simulation.engine.simulate`);
- a pool of local processes (``workers > 1``), or any ``concurrent.futures.Executor``;
- a Dask cluster through a ``distributed.Client`` (:func:`dask_client` connects to a
  scheduler address, or starts a ``LocalCluster``). Dask is imported only here and
  only when asked for (the optional ``dask`` extra); the workers need seqtest
  installed.

Progress: a chunk reports how far it got (in replicates of the chunk) at most every
``PROGRESS_SECONDS`` of its own running time, through a queue from local processes
and through the cluster's event log (``Worker.log_event`` / ``Client.subscribe_topic``)
from Dask workers; reporting never touches the random numbers, so it cannot change a
result.
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import os
import queue
import time
import uuid
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import Executor, ProcessPoolExecutor
from dataclasses import dataclass
from typing import Any

__all__ = ["PROGRESS_SECONDS", "Batch", "Runner", "dask_client"]

#: A chunk reports its progress at most this often (seconds of its running time).
PROGRESS_SECONDS = 0.25
_TOPIC = "seqtest-progress"
_POLL = 0.1       # longest wait for a chunk to finish before progress is looked at


@dataclass(frozen=True)
class Batch:
    """The chunks of one simulation: ``run(job, index, size, report)`` runs chunk
    ``index`` (a module-level function, so that it travels to workers by name), the
    job, and the replicates of each chunk."""

    run: Callable[..., Any]
    job: Any
    sizes: tuple[int, ...]

    @property
    def reps(self) -> int:
        return int(sum(self.sizes))


# -- inside a chunk -------------------------------------------------------------------

class _Reporter:
    """Sends a chunk's progress (replicates of the chunk done) at most every
    ``PROGRESS_SECONDS``."""

    def __init__(self, send: Callable[[int], None], size: int) -> None:
        self.send = send
        self.size = size
        self.last = time.monotonic()
        self.sent = 0

    def __call__(self, share: float) -> None:
        units = int(self.size * min(max(share, 0.0), 1.0))
        now = time.monotonic()
        if units > self.sent and now - self.last >= PROGRESS_SECONDS:
            self.sent = units
            self.last = now
            self.send(units)


_QUEUE: Any = None


def _set_queue(q: Any, seconds: float) -> None:     # process-pool initializer
    global _QUEUE, PROGRESS_SECONDS
    _QUEUE = q
    PROGRESS_SECONDS = seconds          # the parent's setting, whatever the start method


def _chunk_local(run: Callable[..., Any], job: Any, index: int, size: int,
                 token: str | None) -> Any:
    report = None
    if token is not None and _QUEUE is not None:
        q = _QUEUE
        report = _Reporter(lambda units: q.put((token, units)), size)
    return run(job, index, size, report)


def _chunk_dask(run: Callable[..., Any], job: Any, index: int, size: int, token: str) -> Any:
    from distributed import get_worker

    worker = get_worker()
    report = _Reporter(lambda units: worker.log_event(_TOPIC, (token, units)), size)
    return run(job, index, size, report)


def _shifted(progress: Callable[[int, int], None], b: int, base: int
             ) -> Callable[[int], None]:
    def send(units: int) -> None:
        progress(b, base + units)
    return send


# -- the runner -----------------------------------------------------------------------

class Runner:
    """Runs the chunks of batches on one backend.

    Parameters
    ----------
    workers : int
        Local processes (1: in this process). Ignored with `executor` or `client`.
    executor : concurrent.futures.Executor, optional
        Run chunks on this executor (progress per chunk only).
    client : distributed.Client, optional
        Run chunks as tasks on this Dask cluster.
    """

    def __init__(self, *, workers: int = 1, executor: Executor | None = None,
                 client: Any = None) -> None:
        self.workers = max(1, int(workers))
        self.executor = executor
        self.client = client

    @property
    def slots(self) -> int:
        """Chunks that can run at once."""
        if self.client is not None:
            n = sum(self.client.nthreads().values())
            return max(1, int(n))
        if self.executor is not None:
            return max(1, int(getattr(self.executor, "_max_workers", 0) or
                              os.cpu_count() or 1))
        return self.workers

    def run(self, batches: Sequence[Batch], *,
            progress: Callable[[int, int], None] | None = None,
            done: Callable[[int, list], None] | None = None,
            start: Callable[[int], bool] | None = None) -> list[list | None]:
        """Run every chunk of the batches, in batch order.

        Parameters
        ----------
        progress : callable, optional
            ``progress(batch, replicates_done)`` as chunks move and finish.
        done : callable, optional
            ``done(batch, chunks)`` when all chunks of a batch are in (chunks in
            chunk order).
        start : callable, optional
            ``start(batch) -> bool`` before the first chunk of a batch is started;
            False leaves that batch and all later ones unrun.

        Returns
        -------
        list
            Per batch, its chunk results in chunk order (None for batches not run).
        """
        if self.client is not None:
            return self._run_dask(batches, progress, done, start)
        if self.executor is not None:
            return self._run_pool(self.executor, None, batches, progress, done, start)
        total_chunks = sum(len(b.sizes) for b in batches)
        if self.workers > 1 and total_chunks > 1:
            import multiprocessing as mp
            q = mp.get_context().Queue()
            pool = ProcessPoolExecutor(max_workers=min(self.workers, total_chunks),
                                       initializer=_set_queue,
                                       initargs=(q, PROGRESS_SECONDS))
            try:
                return self._run_pool(pool, q, batches, progress, done, start)
            finally:
                pool.shutdown(cancel_futures=True)
                q.close()
                q.join_thread()
        return self._run_serial(batches, progress, done, start)

    # -- in this process ---------------------------------------------------------------
    def _run_serial(self, batches: Sequence[Batch], progress: Any, done: Any, start: Any
                    ) -> list[list | None]:
        out: list[list | None] = [None] * len(batches)
        for b, batch in enumerate(batches):
            if start is not None and not start(b):
                break
            chunks = []
            base = 0
            for i, n in enumerate(batch.sizes):
                report = None
                if progress is not None:
                    report = _Reporter(_shifted(progress, b, base), n)
                chunks.append(batch.run(batch.job, i, n, report))
                base += n
                if progress is not None:
                    progress(b, base)
            out[b] = chunks
            if done is not None:
                done(b, chunks)
        return out

    # -- common scheduling of parallel backends ------------------------------------------
    def _schedule(self, batches: Sequence[Batch], submit: Callable[[int, int], Any],
                  wait_any: Callable[[list, float], None],
                  drain: Callable[[], list[tuple[str, int]]],
                  token_of: Callable[[int, int], str], progress: Any, done: Any,
                  start: Any, cancel: Callable[[Any], None]) -> list[list | None]:
        out: list[list | None] = [None] * len(batches)
        results: list[list] = [[None] * len(b.sizes) for b in batches]
        remaining = [len(b.sizes) for b in batches]
        finished_units = [0] * len(batches)
        partial: dict[str, int] = {}
        finished: set[str] = set()
        where: dict[str, tuple[int, int]] = {}
        pending = [(b, i) for b, batch in enumerate(batches) for i in range(len(batch.sizes))]
        pending.reverse()
        inflight: dict[Any, tuple[int, int]] = {}
        limit = 4 * self.slots
        stopped_at: int | None = None
        started: set[int] = set()
        try:
            while pending or inflight:
                while pending and len(inflight) < limit:
                    b, i = pending[-1]
                    if b not in started:
                        if stopped_at is not None or (start is not None and not start(b)):
                            stopped_at = b if stopped_at is None else stopped_at
                            pending = [p for p in pending if p[0] < stopped_at]
                            continue
                        started.add(b)
                    pending.pop()
                    fut = submit(b, i)
                    inflight[fut] = (b, i)
                    where[token_of(b, i)] = (b, i)
                moved = set()
                if inflight:
                    wait_any(list(inflight), _POLL)
                for token, units in drain():
                    # a report can arrive after its chunk finished: ignore it then
                    if token in where and token not in finished \
                            and units > partial.get(token, 0):
                        partial[token] = units
                        moved.add(where[token][0])
                for fut in [f for f in inflight if f.done()]:
                    b, i = inflight.pop(fut)
                    results[b][i] = fut.result()
                    partial.pop(token_of(b, i), None)
                    finished.add(token_of(b, i))
                    finished_units[b] += batches[b].sizes[i]
                    remaining[b] -= 1
                    moved.add(b)
                    if remaining[b] == 0:
                        out[b] = results[b]
                        if done is not None:
                            done(b, results[b])
                if progress is not None:
                    for b in sorted(moved):
                        part = sum(u for t, u in partial.items() if where[t][0] == b)
                        progress(b, finished_units[b] + part)
        except BaseException:
            for fut in inflight:
                cancel(fut)
            raise
        return out

    # -- local processes or an executor ------------------------------------------------
    def _run_pool(self, pool: Executor, q: Any, batches: Sequence[Batch], progress: Any,
                  done: Any, start: Any) -> list[list | None]:
        run_id = uuid.uuid4().hex[:8]

        def token_of(b: int, i: int) -> str:
            return f"{run_id}-{b}-{i}"

        def submit(b: int, i: int) -> Any:
            tok = token_of(b, i) if q is not None else None
            return pool.submit(_chunk_local, batches[b].run, batches[b].job, i,
                               batches[b].sizes[i], tok)

        def wait_any(futures: list, timeout: float) -> None:
            cf.wait(futures, timeout=timeout, return_when=cf.FIRST_COMPLETED)

        def drain() -> list[tuple[str, int]]:
            msgs: list[tuple[str, int]] = []
            if q is not None:
                with contextlib.suppress(queue.Empty):
                    while True:
                        msgs.append(q.get_nowait())
            return msgs

        return self._schedule(batches, submit, wait_any, drain, token_of, progress, done,
                              start, lambda f: f.cancel())

    # -- Dask ----------------------------------------------------------------------------
    def _run_dask(self, batches: Sequence[Batch], progress: Any, done: Any, start: Any
                  ) -> list[list | None]:
        client = self.client
        run_id = uuid.uuid4().hex[:8]
        inbox: queue.Queue = queue.Queue()

        def token_of(b: int, i: int) -> str:
            return f"{run_id}-{b}-{i}"

        def handler(event: Any) -> None:
            _, msg = event
            inbox.put((str(msg[0]), int(msg[1])))

        def submit(b: int, i: int) -> Any:
            # the job is small (the plan and the scenario's numbers): it travels with
            # each task, which saves a round trip per batch
            return client.submit(_chunk_dask, batches[b].run, batches[b].job, i,
                                 batches[b].sizes[i], token_of(b, i),
                                 key=f"seqtest-chunk-{token_of(b, i)}", pure=False)

        def wait_any(futures: list, timeout: float) -> None:
            from distributed import TimeoutError as DaskTimeout
            from distributed import wait

            with contextlib.suppress(TimeoutError, DaskTimeout):
                wait(futures, timeout=timeout, return_when="FIRST_COMPLETED")

        def drain() -> list[tuple[str, int]]:
            msgs: list[tuple[str, int]] = []
            with contextlib.suppress(queue.Empty):
                while True:
                    msgs.append(inbox.get_nowait())
            return msgs

        client.subscribe_topic(_TOPIC, handler)
        try:
            return self._schedule(batches, submit, wait_any, drain, token_of, progress,
                                  done, start, lambda f: f.cancel())
        finally:
            with contextlib.suppress(Exception):
                client.unsubscribe_topic(_TOPIC)


# -- connecting to a cluster ----------------------------------------------------------

@contextlib.contextmanager
def dask_client(address: str, *, workers: int | None = None,
                processes: bool = True) -> Iterator[Any]:
    """A ``distributed.Client`` for the scheduler at ``address``, or for a new local
    cluster when ``address`` is ``"local"`` (``workers`` single-threaded worker
    processes, all cores by default; ``processes=False`` runs them as threads of this
    process). Closed (and the local cluster shut down) on exit.

    Raises
    ------
    ValueError
        Dask is not installed, or the address is not a scheduler address.
    """
    text = str(address).strip()
    if text != "local" and "://" not in text and ":" not in text:
        raise ValueError(f"scheduler: got {address!r}; allowed is a Dask scheduler address "
                         "(tcp://host:8786) or 'local' (start a local cluster)")
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        raise ValueError(f"scheduler: got {address!r}; running on a Dask cluster needs the "
                         "dask extra: pip install 'seqtest[dask]'") from None
    cluster = None
    if text == "local":
        n = workers if workers else (os.cpu_count() or 1)
        cluster = LocalCluster(n_workers=int(n), threads_per_worker=1, processes=processes,
                               dashboard_address=None)
        client = Client(cluster)
    else:
        try:
            client = Client(text, timeout=30)
        except (OSError, TimeoutError) as exc:
            raise ValueError(f"scheduler: got {address!r}; no Dask scheduler answered "
                             f"there ({exc})") from None
    try:
        yield client
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
