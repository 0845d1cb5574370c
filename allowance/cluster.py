"""Running the engine's chunks on a Dask cluster: an executor map with the builtin ``map``'s contract.

:func:`allowance.engine.run` hands its chunks to a ``map`` (results in the chunks' order). This
module supplies one backed by ``distributed``: a local cluster of worker processes on this
machine, or an existing scheduler anywhere. Each chunk is a pure function of its loans and
the prepared segment tables, so the answer is the same to the cent wherever it runs; only the
wall-clock time changes.

The prepared tables are the same for every chunk: they are scattered to the workers once
(``Client.scatter(..., broadcast=True)``) and referred to by key, instead of being pickled with
each task. Chunks are submitted all at once and collected in order, so a slow worker never
reorders the loan detail.

``dask`` and ``distributed`` are an optional extra (``pip install 'allowance[dask]'``; the test
extra includes it): everything else runs without them.
"""

from __future__ import annotations

import contextlib
import functools
import logging
import warnings
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass
from typing import Any

from allowance.exceptions import AllowanceError

@dataclass(frozen=True)
class DaskMap:
    """``map(fn, chunks)`` over a ``distributed.Client``; results come back in the chunks' order.

    A ``functools.partial`` (the engine passes ``partial(run_chunk, prep=prep)``) has its bound
    arguments scattered once to every worker, so the prepared tables travel once per worker,
    not once per chunk.
    """

    client: Any

    def __call__(self, fn: Callable, chunks: Iterable) -> Iterator:
        items = list(chunks)
        if not items:
            return iter(())
        func, args, kwargs = fn, (), {}
        if isinstance(fn, functools.partial):
            func = fn.func
            args = tuple(self._shared(a) for a in fn.args)
            kwargs = {k: self._shared(v) for k, v in fn.keywords.items()}
        # pure=False: two chunks with equal loans are still two tasks, placed by position. A
        # chunk of a tape read here travels with its task (tens of MB): distributed's advice to
        # load such data on the workers instead is what a Parquet tape does, not a problem here
        with warnings.catch_warnings():
            warnings.filterwarnings("ignore", message="Sending large graph", category=UserWarning)
            futures = [self.client.submit(func, *args, item, pure=False, **kwargs) for item in items]
        return self._in_order(futures, keep=(args, kwargs))

    @staticmethod
    def _in_order(futures: list, keep: object = None) -> Iterator:
        """Each result in turn, its future let go once taken: a worker holds a task's result
        until no client refers to it, so a whole pass's results would otherwise stay there.

        ``keep`` (the scattered arguments' futures) is held until the last result is taken:
        once no client refers to scattered data the scheduler may forget it, and a task still
        waiting for it then fails with "lost dependencies" (seen once in the test suite, a
        Parquet folder's id pass, whose partial's arguments were let go as ``__call__`` returned).
        """
        distributed = _distributed()
        killed = distributed.KilledWorker
        # the scheduler stopped, or the network between it and this process broke: the futures
        # are cancelled, or the fetch of a result finds its connection closed
        lost = (distributed.client.FutureCancelledError, distributed.comm.CommClosedError)
        for i in range(len(futures)):
            future, futures[i] = futures[i], None
            try:
                result = future.result()
            except killed as died:
                # a worker process that dies (out of memory, most often) takes its task with it;
                # the scheduler retries it elsewhere a few times, then gives up with this
                raise AllowanceError(
                    f"the cluster's workers died computing part {i + 1} of {len(futures)} "
                    f"({' '.join(str(died).split())[:300]})",
                    hint="give each worker more memory, or spread the book more finely (--chunk-size; for a "
                         "Parquet tape, smaller row groups)") from died
            except lost as cut:
                raise AllowanceError(
                    f"lost the Dask cluster while computing part {i + 1} of {len(futures)} "
                    f"({' '.join(str(cut).split())[:300]})",
                    hint="check that the scheduler still runs and this machine reaches it, then run again") from cut
            yield result
            del future, result
        del keep

    def _shared(self, value: Any) -> Any:
        """``value`` on every worker, as a future (in a list: ``scatter`` would take a dict's
        items, or a list's elements, as separate data).

        ``hash=False``: a key of its own at each scatter. By default the key is the value's
        hash, so two passes sharing an argument (a Parquet folder's passes all take the id
        column's name) share its key, and the first pass letting go of its future could make
        the scheduler forget the data the second pass had just scattered under the same key:
        "lost dependencies" (tests/test_cluster.py, on a loaded machine)."""
        return self.client.scatter([value], broadcast=True, hash=False)[0]


def _distributed():
    try:
        import distributed
    except ImportError as missing:  # the extra is optional
        raise AllowanceError(
            "--engine dask needs the optional 'dask' extra: pip install 'allowance[dask]'"
        ) from missing
    return distributed


def scheduler_address_problem(address: str) -> str | None:
    """Why ``address`` cannot be a Dask scheduler's address (``tcp://HOST:PORT`` and the other
    schemes ``distributed`` knows), or None; None too where ``distributed`` is not installed
    (:func:`dask_map` then says which extra to install).

    >>> scheduler_address_problem("tcp://10.0.0.5:8786") is None
    True
    >>> scheduler_address_problem("10.0.0.5")
    "no port in '10.0.0.5': give the address as the scheduler prints it, e.g. tcp://10.0.0.5:8786"
    """
    try:
        from distributed.comm.addressing import parse_address, parse_host_port
        from distributed.comm.registry import get_backend
    except ImportError:
        return None
    example = "give the address as the scheduler prints it, e.g. tcp://10.0.0.5:8786"
    try:
        protocol, location = parse_address(address)
        get_backend(protocol)
    except ValueError as bad:
        return f"{bad}; {example}"
    if protocol in ("tcp", "tls"):
        try:
            host, _ = parse_host_port(location)
        except ValueError as bad:
            missing = "missing port" in str(bad)
            return f"no port in {address!r}: {example}" if missing else f"{address!r} is not HOST:PORT: {example}"
        if not host:
            return f"no host in {address!r}: {example}"
    return None


#: Seconds a run waits for a scheduler to answer (a busy one can be slow to accept), then
#: for a joined cluster's first worker (one starting up takes a few).
_CONNECT_WAIT = _WORKER_WAIT = 30.0


@contextlib.contextmanager
def dask_map(workers: int | None = None, scheduler: str | None = None) -> Iterator[DaskMap]:
    """A :class:`DaskMap` on a local cluster of ``workers`` processes, or on ``scheduler``.

    Parameters
    ----------
    workers
        Worker processes of a local cluster (one thread each: the kernel holds the core it
        runs on). Default: the machine's cores, as ``distributed`` counts them.
    scheduler
        Address of a running scheduler (``tcp://host:8786``); then no local cluster is started
        and ``workers`` must not be given.
    """
    distributed = _distributed()
    if scheduler is not None and workers is not None:
        raise AllowanceError("give --workers (a local cluster) or --scheduler (an existing one), not both")
    if workers is not None and workers < 1:
        raise AllowanceError(f"--workers must be at least 1, got {workers}")
    if scheduler is not None:
        problem = scheduler_address_problem(scheduler)
        if problem is not None:
            raise AllowanceError(f"--scheduler: {problem}")
        try:
            client = distributed.Client(scheduler, timeout=_CONNECT_WAIT)
        except (OSError, TimeoutError) as failed:
            raise AllowanceError(f"cannot reach the Dask scheduler at {scheduler}: {failed}") from failed
        # the client's own log of a lost scheduler (tracebacks from its reconnection attempts)
        # is not the user's business: the run's error says what happened
        quiet = logging.getLogger("distributed.client")
        level = quiet.level
        quiet.setLevel(logging.CRITICAL)
        with contextlib.ExitStack() as restore:
            restore.callback(quiet.setLevel, level)
            restore.enter_context(client)
            # a scheduler with no worker would take the chunks and hold them: say so instead
            try:
                client.wait_for_workers(1, timeout=_WORKER_WAIT)
            except TimeoutError as none:
                raise AllowanceError(f"the Dask scheduler at {scheduler} has no workers (waited {_WORKER_WAIT:.0f} s)",
                                     hint=f"start some on the machines that share the tape: dask worker {scheduler} "
                                          "--nthreads 1") from none
            yield DaskMap(client)
        return
    # one thread per worker: the kernel holds its core; the cluster's own chatter (e.g. a
    # worker killed after a slow shutdown) is not the user's business, errors still show
    options: dict[str, Any] = {"threads_per_worker": 1, "processes": True, "dashboard_address": None,
                               "silence_logs": logging.ERROR}
    if workers is not None:
        options["n_workers"] = workers
    with contextlib.ExitStack() as stack:
        with warnings.catch_warnings():
            # the scheduler's HTTP server (kept for its health checks with the dashboard off) takes
            # another port when another Dask process holds the usual one, and says so: not news
            warnings.filterwarnings("ignore", message="Port .* is already in use", category=UserWarning)
            cluster = stack.enter_context(distributed.LocalCluster(**options))
        client = stack.enter_context(distributed.Client(cluster))
        yield DaskMap(client)
