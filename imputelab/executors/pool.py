"""Where independent tasks run: in this process, in local worker processes, or on Dask.

An executor maps one function over a list of tasks and yields the results in task order,
whatever order the tasks finish in::

    for result in executor.map(fn, shared, tasks, progress):   # fn(shared, *task)

``shared`` is the input every task reads (the working frame and the hidden-cell draws of an
experiment): the Dask executor scatters it to the workers once and passes it to each task as
a future, instead of shipping it with every task. Each task runs with one BLAS thread
(threadpoolctl); the methods already run LightGBM with one thread, so N tasks use at most N
cores. Results never depend on the executor: every seed is derived from what a task is, not
from when or where it runs.

- :class:`SerialExecutor`: one task after the other, here.
- :class:`JoblibExecutor`: ``n_jobs`` local worker processes (joblib, loky).
- :class:`DaskExecutor`: the workers of a ``dask.distributed`` cluster. A worker lost in the
  middle of a run is replaced and its tasks rerun by Dask's scheduler (up to its
  ``distributed.scheduler.allowed-failures`` times per task); the results are the same.

:func:`open_executor` turns the ``n_jobs`` and ``cluster`` settings into an executor, and
closes what it started. Dask is imported only when a cluster is asked for.
"""

from __future__ import annotations

import contextlib
import logging
import os
import socket
import warnings
from collections.abc import Callable, Iterator, Sequence
from typing import Any, Protocol

from joblib import Parallel, delayed
from threadpoolctl import threadpool_limits

from imputelab.checks import check_count
from imputelab.errors import OptionError, param

__all__ = [
    "CONNECT_TIMEOUT",
    "DaskExecutor",
    "Executor",
    "JoblibExecutor",
    "SerialExecutor",
    "local_cluster",
    "open_executor",
    "parse_cluster",
    "worker_result",
]

#: Seconds to wait for a scheduler to answer before a ``cluster`` address is an error.
CONNECT_TIMEOUT = 10.0

Progress = Callable[[int, int], None]
_HELP = ("give the address of a running Dask scheduler (e.g. tcp://scheduler:8786) or "
         "local:N to start N local workers")


def _limited(fn: Callable[..., Any], shared: Any, *task: Any) -> Any:
    # One BLAS thread per task: the grid's fits are small, threads slow them down, and N
    # tasks side by side then use N cores, never more.
    with threadpool_limits(limits=1):
        return fn(shared, *task)


class Executor(Protocol):
    """Runs ``fn(shared, *task)`` for every task; yields the results in task order."""

    def map(self, fn: Callable[..., Any], shared: Any, tasks: Sequence[tuple[Any, ...]],
            progress: Progress | None = None) -> Iterator[Any]: ...


class SerialExecutor:
    """Every task in this process, one after the other."""

    def map(self, fn: Callable[..., Any], shared: Any, tasks: Sequence[tuple[Any, ...]],
            progress: Progress | None = None) -> Iterator[Any]:
        for done, task in enumerate(tasks, start=1):
            yield _limited(fn, shared, *task)
            if progress is not None:
                progress(done, len(tasks))


class JoblibExecutor:
    """Tasks in ``n_jobs`` local worker processes (joblib's loky backend).

    Parameters
    ----------
    n_jobs : int
        Worker processes; 1 runs the tasks here.
    """

    def __init__(self, n_jobs: int = 1):
        self.n_jobs = n_jobs

    def map(self, fn: Callable[..., Any], shared: Any, tasks: Sequence[tuple[Any, ...]],
            progress: Progress | None = None) -> Iterator[Any]:
        if self.n_jobs == 1:
            yield from SerialExecutor().map(fn, shared, tasks, progress)
            return
        results = Parallel(n_jobs=self.n_jobs, return_as="generator")(
            delayed(_limited)(fn, shared, *task) for task in tasks)
        for done, result in enumerate(results, start=1):
            yield result
            if progress is not None:
                progress(done, len(tasks))


class DaskExecutor:
    """Tasks on the workers of a ``dask.distributed`` cluster.

    ``shared`` is scattered once to every worker (``broadcast``), so a worker that joins
    after a loss fetches it from the others; progress is reported as tasks finish, in any
    order, and results are yielded in task order.

    Parameters
    ----------
    client : distributed.Client
    """

    def __init__(self, client: Any):
        self.client = client

    def map(self, fn: Callable[..., Any], shared: Any, tasks: Sequence[tuple[Any, ...]],
            progress: Progress | None = None) -> Iterator[Any]:
        from distributed import as_completed

        if not tasks:
            return
        [data] = self.client.scatter([shared], broadcast=True, hash=False)
        futures = [self.client.submit(_limited, fn, data, *task, pure=False) for task in tasks]
        index = {future.key: i for i, future in enumerate(futures)}
        ready: dict[int, Any] = {}
        following = 0
        try:
            for done, future in enumerate(as_completed(futures), start=1):
                ready[index[future.key]] = worker_result(future)
                if progress is not None:
                    progress(done, len(tasks))
                while following in ready:
                    yield ready.pop(following)
                    following += 1
        finally:
            for future in futures:
                future.release()
            data.release()


def worker_result(future: Any) -> Any:
    """A finished task's result; a worker without imputelab is the user's set-up to fix."""
    try:
        return future.result()
    except ImportError as exc:
        raise OptionError(f"{param('cluster')}: a worker cannot import what the task needs "
                          f"({exc}); install the same imputelab version on every worker") from None


def parse_cluster(text: str) -> tuple[str, int | str]:
    """``local:N`` to ``("local", N)``; a scheduler address to ``("address", text)``.

    Raises
    ------
    OptionError
        For ``local:`` without a whole number of workers, or text that is no address.
    """
    text = text.strip()
    if text.startswith("local:") or text == "local":
        count = text.partition(":")[2]
        if not count.isdigit() or int(count) < 1:
            raise OptionError(f"{param('cluster')} '{text}': local:N needs a number of "
                              "workers of 1 or more, e.g. local:2")
        return "local", int(count)
    scheme, sep, rest = text.rpartition("://")
    host, colon, port = (rest if sep else text).rpartition(":")
    if not colon or not host or not port.isdigit():
        raise OptionError(f"{param('cluster')} '{text}' is not a scheduler address; {_HELP}")
    if sep and scheme not in ("tcp", "tls", "ws", "wss", "inproc", "ucx"):
        raise OptionError(f"{param('cluster')} '{text}': unknown protocol '{scheme}://'; {_HELP}")
    return "address", text if sep else f"tcp://{text}"


def local_cluster(n_workers: int) -> Any:
    """A ``LocalCluster`` of ``n_workers`` single-threaded processes on 127.0.0.1.

    No dashboard and no other network interface; Dask's own log lines below errors are
    kept quiet.
    """
    from distributed import LocalCluster

    with warnings.catch_warnings():
        # Without a dashboard the scheduler still serves a small HTTP API (on 127.0.0.1);
        # another cluster holding its usual port is no news for the user.
        warnings.filterwarnings("ignore", message="Port .* is already in use")
        return LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True,
                            host="127.0.0.1", dashboard_address=None,
                            silence_logs=logging.ERROR)


def _connect(address: str, timeout: float) -> Any:
    from distributed import Client

    scheme, _, rest = address.partition("://")
    if scheme == "tcp":
        # A closed port or an unknown host is told at once here, before Dask retries for the
        # whole timeout and leaves a half-made client behind.
        host, _, port = rest.rpartition(":")
        try:
            socket.create_connection((host.strip("[]"), int(port)), timeout=timeout).close()
        except OSError as exc:
            reason = (f"nothing within {timeout:g} s" if isinstance(exc, TimeoutError)
                      else exc.strerror or type(exc).__name__)
            raise OptionError(f"{param('cluster')} '{address}': no scheduler answered ({reason}); "
                              f"start one (dask scheduler) or check the address, or use "
                              "local:N") from None
    try:
        return Client(address, timeout=timeout)
    except Exception as exc:  # refused, timed out, or something that is no Dask scheduler
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise OptionError(f"{param('cluster')} '{address}': could not connect to a Dask "
                          f"scheduler ({first}); check the address, or use local:N") from None


@contextlib.contextmanager
def open_executor(jobs: int = 1, cluster: str | None = None, *,
                  timeout: float = CONNECT_TIMEOUT) -> Iterator[Executor]:
    """The executor for ``jobs`` and ``cluster``; what it started is closed at the end.

    Parameters
    ----------
    jobs : int
        Local worker processes (0: one per core); the ``n_jobs`` setting. Ignored for the
        tasks when ``cluster`` is given: the cluster's workers run them.
    cluster : str, optional
        ``local:N`` (start N local workers on 127.0.0.1) or a scheduler address such as
        ``tcp://scheduler:8786``.
    timeout : float
        Seconds to wait for a scheduler.

    Yields
    ------
    Executor

    Raises
    ------
    OptionError
        A bad ``jobs``, or a cluster that is no address or does not answer.
    """
    check_count(jobs, "n_jobs", low=0)
    if cluster is None:
        yield JoblibExecutor(jobs or (os.cpu_count() or 1))
        return
    kind, value = parse_cluster(cluster)
    try:
        import distributed  # noqa: F401
    except ImportError:
        raise OptionError(f"{param('cluster')} needs Dask: "
                          "pip install 'dask[distributed,dataframe]'") from None
    with contextlib.ExitStack() as stack:
        if kind == "local":
            from distributed import Client

            started = stack.enter_context(local_cluster(int(value)))
            client = stack.enter_context(Client(started))
        else:
            client = stack.enter_context(_connect(str(value), timeout))
        yield DaskExecutor(client)
