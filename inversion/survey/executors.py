"""Where the sites run: local worker processes or an existing Dask cluster.

Both executors take a module-level function and a list of tasks and yield
``(task number, result)`` pairs as tasks finish, in whatever order they finish; an
exception raised by a task (or by the worker running it) is yielded as the result, so
one lost site does not stop a survey. Every task carries its own seed, so the results do
not depend on the executor, the number of workers or the order of completion.

Local workers are started with ``forkserver`` (``spawn`` where it does not exist), not
by forking a process that may already run threads (a progress bar, a Dask client), and
with one numerical thread each so that N workers use N cores. Dask is imported only when
a scheduler address is given (``pip install 'lidmelt[cluster]'``); the same lidmelt must
be installed on the scheduler and every worker.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import socket
import struct
import sys
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed

from ..errors import InputError

__all__ = ["GUARD_ADVICE", "DaskExecutor", "LocalExecutor", "check_main_guard",
           "check_scheduler", "make_executor"]

#: What to do when local workers cannot start (`check_main_guard`).
GUARD_ADVICE = ("put the call under 'if __name__ == \"__main__\":' (local worker "
                "processes import the script again and must not rerun it), or pass "
                "workers=1")

#: Seconds to open a TCP connection to a scheduler, and to wait for its greeting.
CONNECT_TIMEOUT = 5.0
GREETING_TIMEOUT = 3.0
_WAIT_MESSAGE_EVERY = 60.0  # seconds between "still no workers" lines
_EXPECTED = "expected the address of a running Dask scheduler, such as tcp://host:8786"

_PRELOAD = ("lidmelt.inversion.survey.job",)  # what every worker needs, imported once
_THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


class LocalExecutor:
    """Tasks on `workers` local processes (one worker: in this process).

    Parameters
    ----------
    workers : int
        Number of processes (>= 1).
    """

    def __init__(self, workers: int) -> None:
        if workers < 1:
            raise InputError(f"workers = {workers} must be at least 1", key="workers")
        self.workers = int(workers)
        if self.workers > 1:
            check_main_guard()
        self.where = f"{self.workers} local process{'es' if self.workers > 1 else ''}"
        self._executor = None

    def run(self, fn: Callable, tasks: Sequence) -> Iterator[tuple[int, object]]:
        if self.workers == 1:  # one worker: this process, no pool to start
            for k, task in enumerate(tasks):
                yield k, _call(fn, task)
            return
        pool = self._pool()
        with _single_threaded():  # processes start on demand, while submitting
            futures = {pool.submit(fn, task): k for k, task in enumerate(tasks)}
        try:
            for future in as_completed(futures):
                yield futures[future], _result(future)
        finally:  # interrupted: drop the queue, do not wait for it
            for future in futures:
                future.cancel()

    def _pool(self) -> ProcessPoolExecutor:
        """One pool for the executor's lifetime (joint mode runs two passes on it)."""
        if self._executor is None:
            methods = multiprocessing.get_all_start_methods()
            context = multiprocessing.get_context(
                "forkserver" if "forkserver" in methods else "spawn")
            if context.get_start_method() == "forkserver":  # import once, fork workers
                context.set_forkserver_preload(list(_PRELOAD))
            self._executor = ProcessPoolExecutor(self.workers, mp_context=context,
                                                 initializer=_watch_parent,
                                                 initargs=(os.getpid(),))
        return self._executor

    def close(self) -> None:
        """Stop the worker processes (without waiting for queued work)."""
        if self._executor is not None:
            self._executor.shutdown(wait=True, cancel_futures=True)
            self._executor = None


class DaskExecutor:
    """Tasks on an existing Dask distributed cluster.

    Parameters
    ----------
    address : str
        Scheduler address, e.g. ``"tcp://10.0.0.5:8786"``.
    """

    def __init__(self, address: str) -> None:
        try:
            from dask.distributed import Client
        except ImportError:
            raise InputError("a Dask scheduler needs Dask installed: pip install 'lidmelt[cluster]'",
                             key="scheduler") from None
        address = check_scheduler(address)
        try:
            self.client = Client(address, timeout="10s", set_as_default=False)
        except Exception as err:  # anything the handshake raises becomes one line
            raise InputError(f"scheduler {address}: the Dask client could not connect "
                             f"({type(err).__name__}: {err}); {_EXPECTED}",
                             key="scheduler") from None
        self.address = address
        self.workers = len(self.client.scheduler_info().get("workers", {}))
        self.where = f"Dask cluster {address} ({self.workers} workers)"

    def _wait_for_workers(self) -> None:
        """Say so, once a minute, while the cluster has no worker to run a site."""
        waited = 0.0
        while not self.client.scheduler_info().get("workers"):
            print(f"lidmelt survey: the Dask cluster at {self.address} has no workers; "
                  f"waiting for one to connect ({waited:.0f} s so far; Ctrl-C to stop)",
                  file=sys.stderr, flush=True)
            try:
                self.client.wait_for_workers(1, timeout=_WAIT_MESSAGE_EVERY)
            except TimeoutError:
                waited += _WAIT_MESSAGE_EVERY
        self.workers = len(self.client.scheduler_info().get("workers", {}))

    def run(self, fn: Callable, tasks: Sequence) -> Iterator[tuple[int, object]]:
        from dask.distributed import as_completed as dask_completed

        if tasks:
            self._wait_for_workers()

        futures = {self.client.submit(fn, task, pure=False): k for k, task in enumerate(tasks)}
        try:
            with self.client.as_current():  # as_completed looks for the current client
                completed = dask_completed(list(futures))
            for future in completed:
                yield futures[future], _result(future)
        finally:
            self.client.cancel(list(futures))

    def close(self) -> None:
        self.client.close()


def check_scheduler(address: str, *, timeout: float = CONNECT_TIMEOUT) -> str:
    """Check that a Dask scheduler answers at `address`, before anything is created.

    The address is parsed (``tcp://host:port``, ``tls://host:port`` or ``host:port``), a
    TCP connection opened within `timeout` seconds and, for ``tcp://``, the greeting
    read: a Dask scheduler sends a framed handshake at once (an 8-byte little-endian
    message length, then the number of frames), which a web server or another service
    does not. Returns the address with its scheme.

    Raises
    ------
    InputError
        One line naming the address and what was expected.
    """
    text = str(address).strip()
    scheme, _, rest = text.rpartition("://")
    scheme = scheme or "tcp"
    host, _, port_text = rest.rpartition(":")
    host = host.strip("[]")
    if scheme not in ("tcp", "tls") or not host or not port_text.isdigit() \
            or not 0 < int(port_text) < 65536:
        raise InputError(f"scheduler {text!r} is not a scheduler address; {_EXPECTED}",
                         key="scheduler")
    full = f"{scheme}://{rest}"
    try:
        connection = socket.create_connection((host, int(port_text)), timeout=timeout)
    except socket.gaierror:
        raise InputError(f"scheduler {full}: unknown host {host!r}; {_EXPECTED}",
                         key="scheduler") from None
    except (TimeoutError, socket.timeout):
        raise InputError(f"scheduler {full}: no answer within {timeout:g} s; {_EXPECTED}",
                         key="scheduler") from None
    except OSError as err:
        raise InputError(f"scheduler {full}: cannot connect ({err.strerror or err}); "
                         f"{_EXPECTED}", key="scheduler") from None
    with connection:
        if scheme == "tcp" and not _greets_like_dask(connection):
            raise InputError(f"scheduler {full}: something listens there but it is not "
                             "a Dask scheduler (it did not send the Dask handshake; a web "
                             f"dashboard port?); {_EXPECTED}", key="scheduler")
    return full


def _greets_like_dask(connection: socket.socket) -> bool:
    connection.settimeout(GREETING_TIMEOUT)
    data = b""
    try:
        while len(data) < 16:
            chunk = connection.recv(16 - len(data))
            if not chunk:
                break
            data += chunk
    except OSError:  # includes the timeout: a web server waits for a request
        pass
    if len(data) < 16:
        return False
    length, frames = struct.unpack("<QQ", data)
    return 0 < length < 2**24 and 0 < frames < 2**10


def check_main_guard() -> None:
    """Refuse local workers for a call made while a script runs outside its main guard.

    Worker processes start with ``forkserver`` or ``spawn``, which import the main
    script again (as ``__mp_main__``): an unguarded call there would start the survey
    once more in every worker, and every site would fail with a broken pool. The call is
    unguarded when the frame of the ``__main__`` module on the stack is at a top-level
    statement of its file that is not ``if __name__ == "__main__":``. Interactive
    sessions, notebooks and ``lidmelt survey`` have no such frame (or no file) and pass.

    Raises
    ------
    InputError
        One line naming the script, its line and `GUARD_ADVICE`.
    """
    import ast

    main = sys.modules.get("__main__")
    path = getattr(main, "__file__", None)
    spec = getattr(getattr(main, "__spec__", None), "name", None) or ""
    if spec == "__main__" or spec.endswith(".__main__"):
        return  # a package's __main__ (python -m lidmelt.cli): workers do not rerun it
    frame = sys._getframe(1)
    while frame is not None and not (frame.f_globals is getattr(main, "__dict__", None)
                                     and frame.f_code.co_name == "<module>"):
        frame = frame.f_back
    if frame is None or not path:
        return
    try:
        with open(path, encoding="utf-8") as handle:
            tree = ast.parse(handle.read())
    except (OSError, SyntaxError, ValueError):
        return  # cannot tell: let the workers start
    line = frame.f_lineno
    for statement in tree.body:
        if statement.lineno <= line <= (statement.end_lineno or statement.lineno):
            if _is_main_guard(statement) and any(
                    s.lineno <= line <= (s.end_lineno or s.lineno) for s in statement.body):
                return
            raise InputError("lidmelt.survey with local workers was called outside the "
                             f"script's main guard; {GUARD_ADVICE}", file=path, line=line)


def _is_main_guard(statement) -> bool:
    """Whether `statement` is ``if __name__ == "__main__":`` (either order)."""
    import ast

    if not isinstance(statement, ast.If) or not isinstance(statement.test, ast.Compare):
        return False
    test = statement.test
    if len(test.ops) != 1 or not isinstance(test.ops[0], ast.Eq):
        return False
    sides = [test.left, test.comparators[0]]
    names = [s.id for s in sides if isinstance(s, ast.Name)]
    texts = [s.value for s in sides if isinstance(s, ast.Constant)]
    return names == ["__name__"] and texts == ["__main__"]


_WATCH_SECONDS = 0.5  # how often a worker checks that the survey process still lives


def _watch_parent(parent: int) -> None:
    """In each local worker: end the worker soon after the survey process dies.

    Workers are children of the forkserver, not of the survey process, so neither their
    parent pid nor a parent-death signal follows the survey; a daemon thread polls the
    survey's pid instead (signal 0 tests existence; the pid cannot be reused while the
    worker, which does not reap it, only polls). A killed survey (kill -9) so leaves no
    worker behind for more than about `_WATCH_SECONDS`.
    """
    import threading
    import time

    def watch() -> None:
        while True:
            time.sleep(_WATCH_SECONDS)
            try:
                os.kill(parent, 0)
            except ProcessLookupError:
                os._exit(1)
            except PermissionError:  # alive, owned by another user: cannot happen here
                continue

    threading.Thread(target=watch, name="lidmelt-parent-watch", daemon=True).start()


def _call(fn: Callable, task):
    try:
        return fn(task)
    except Exception as err:  # as a worker process would report it
        return err


def _result(future):
    try:
        return future.result()
    except Exception as err:  # the worker (not the site) failed: report it as the result
        return err


@contextlib.contextmanager
def _single_threaded():
    """Workers inherit one numerical thread each (the parent's setting is restored)."""
    saved = {name: os.environ.get(name) for name in _THREAD_VARIABLES}
    os.environ.update({name: "1" for name in _THREAD_VARIABLES})
    try:
        yield
    finally:
        for name, value in saved.items():
            if value is None:
                os.environ.pop(name, None)
            else:
                os.environ[name] = value


def make_executor(workers: int | None = None, scheduler: str | None = None):
    """A `DaskExecutor` when `scheduler` is given, else a `LocalExecutor`.

    `workers` defaults to the number of cores.
    """
    if scheduler is not None and workers is not None:
        raise InputError("give workers or scheduler, not both", key="scheduler")
    if scheduler is not None:
        return DaskExecutor(scheduler)
    return LocalExecutor((os.cpu_count() or 1) if workers is None else workers)

