"""Worker processes for the batch: exact attribution of a lost worker, and no orphans.

:class:`WorkerPool` runs tasks on a few long-lived worker processes, one task
per worker at a time, so that the parent always knows which task a worker
holds:

* a worker that dies (killed by the system, out of memory, a crash in a
  compiled library) costs only the task it held; the parent reports it and
  starts a fresh worker for the remaining tasks;
* every worker watches its parent through a *lifeline* pipe (and the
  parent's pid): when the parent ends in any way, ``kill -9`` included, the
  pipe closes and the worker exits within about a second, instead of going
  on with queued work or blocking forever;
* :meth:`WorkerPool.terminate` stops every worker at once (on SIGTERM,
  SIGINT, SIGHUP).

Workers are started with the ``forkserver`` method where available (POSIX),
else ``spawn``: they do not inherit the parent's open files or threads.
"""

from __future__ import annotations

import contextlib
import multiprocessing as mp
import os
import signal
import threading
import traceback
from collections import deque
from collections.abc import Callable, Iterable
from multiprocessing.connection import wait as _wait
from typing import Any

__all__ = ["WorkerPool", "WorkerLost", "worker_context", "critical", "defer_if_critical"]

#: Modules imported once by the fork server, so that each worker starts quickly.
_PRELOAD = ["zoning.workflow", "zoning.fitting", "zoning.io.results", "zoning.io.figures",
            "zoning.io.report"]

#: Exit code of a worker that lost its parent.
ORPHAN_EXIT = 70

#: How often a busy worker checks that its parent is alive [s].
_WATCH_INTERVAL_S = 0.5


_CRITICAL: dict[str, Any] = {"depth": 0, "deferred": []}


@contextlib.contextmanager
def critical():
    """Hold stop signals while a few files are moved into place.

    A stop signal (the parent's SIGTERM to a worker, or SIGINT/SIGTERM/SIGHUP
    to an in-process batch) that arrives inside the block takes effect at
    its end, so a result folder is never left half-replaced by a clean
    shutdown. Keep the block short (renames only).
    """
    _CRITICAL["depth"] += 1
    try:
        yield
    finally:
        _CRITICAL["depth"] -= 1
        if _CRITICAL["depth"] == 0 and _CRITICAL["deferred"]:
            pending = list(_CRITICAL["deferred"])
            _CRITICAL["deferred"].clear()
            for handler, signum in pending:
                handler(signum, None)


def defer_if_critical(handler: Callable[[int, Any], Any], signum: int) -> bool:
    """Inside :func:`critical`, queue ``handler(signum, None)`` for its end and return True."""
    if _CRITICAL["depth"] > 0:
        _CRITICAL["deferred"].append((handler, signum))
        return True
    return False


def _stop_now(signum: int, frame) -> None:  # pragma: no cover - in workers
    os._exit(128 + int(signum))


def _on_stop(signum: int, frame) -> None:  # pragma: no cover - in workers
    if not defer_if_critical(_stop_now, signum):
        _stop_now(signum, frame)


class WorkerLost:
    """Result placeholder for a task whose worker process died.

    Parameters
    ----------
    message : str
        What happened, in plain words (exit code or signal).
    """

    def __init__(self, message: str):
        self.message = message

    def __repr__(self) -> str:
        return f"WorkerLost({self.message!r})"


class _TaskError:
    def __init__(self, exc: BaseException):
        self.text = f"{type(exc).__name__}: {exc}"
        tb = traceback.extract_tb(exc.__traceback__)
        if tb:
            self.text += f" (at {os.path.basename(tb[-1].filename)}:{tb[-1].lineno})"


def worker_context():
    """Return the multiprocessing context of the workers (forkserver, else spawn)."""
    methods = mp.get_all_start_methods()
    if "forkserver" in methods:
        ctx = mp.get_context("forkserver")
        try:
            ctx.set_forkserver_preload(_PRELOAD)
        except Exception:  # noqa: BLE001, S110 - preload is an optimisation only
            pass
        return ctx
    return mp.get_context("spawn")


def _watch_parent(lifeline, parent_pid: int) -> None:  # pragma: no cover - in workers
    """Exit the worker as soon as the parent is gone."""
    while True:
        try:
            if lifeline.poll(_WATCH_INTERVAL_S):
                lifeline.recv()  # the parent never sends: only EOF gets here
        except (EOFError, OSError):
            os._exit(ORPHAN_EXIT)
        try:
            os.kill(parent_pid, 0)
        except ProcessLookupError:
            os._exit(ORPHAN_EXIT)
        except OSError:
            pass
        if os.getppid() == 1 and parent_pid != 1:
            os._exit(ORPHAN_EXIT)


def _worker_main(conn, lifeline, parent_pid: int, initializer) -> None:  # pragma: no cover
    # The parent handles Ctrl-C and hang-ups and stops the workers itself.
    for name in ("SIGINT", "SIGHUP"):
        if hasattr(signal, name):
            signal.signal(getattr(signal, name), signal.SIG_IGN)
    signal.signal(signal.SIGTERM, _on_stop)
    threading.Thread(target=_watch_parent, args=(lifeline, parent_pid), daemon=True,
                     name="zoning-parent-watch").start()
    if initializer is not None:
        initializer()
    while True:
        try:
            message = conn.recv()
        except (EOFError, OSError):
            os._exit(ORPHAN_EXIT)
        if message is None:
            break
        key, fn, args = message
        try:
            result = fn(*args)
        except BaseException as exc:  # noqa: BLE001 - reported to the parent
            result = _TaskError(exc)
        try:
            conn.send((key, result))
        except (OSError, EOFError):
            os._exit(ORPHAN_EXIT)
        except Exception as exc:  # noqa: BLE001 - e.g. a result that cannot be pickled
            conn.send((key, _TaskError(exc)))
    conn.close()


class _Worker:
    def __init__(self, ctx, initializer):
        parent_conn, child_conn = ctx.Pipe(duplex=True)
        life_r, life_w = ctx.Pipe(duplex=False)
        self.process = ctx.Process(
            target=_worker_main, args=(child_conn, life_r, os.getpid(), initializer),
            daemon=True, name="zoning-worker",
        )
        self.process.start()
        child_conn.close()
        life_r.close()
        self.conn = parent_conn
        self.lifeline = life_w  # kept open while the worker may live
        self.task: Any = None

    @property
    def pid(self) -> int:
        return int(self.process.pid or 0)

    def close(self) -> None:
        for c in (self.conn, self.lifeline):
            try:
                c.close()
            except OSError:  # pragma: no cover
                pass


def _death_message(exitcode: int | None) -> str:
    if exitcode is None:
        return "worker process stopped responding"
    if exitcode < 0:
        try:
            name = signal.Signals(-exitcode).name
        except ValueError:
            name = f"signal {-exitcode}"
        extra = " (the system may have run out of memory)" if name == "SIGKILL" else ""
        return f"worker process was killed by {name}{extra}"
    return f"worker process ended with exit code {exitcode}"


class WorkerPool:
    """A few worker processes running one task each at a time.

    Parameters
    ----------
    n_workers : int
        Number of worker processes (at least 1).
    initializer : callable, optional
        Called once in each worker before its first task (must be importable).
    on_start : callable, optional
        ``on_start(pids)`` after workers are started or replaced (e.g. to
        record them in a lock file).
    """

    def __init__(self, n_workers: int, *, initializer: Callable[[], None] | None = None,
                 on_start: Callable[[list[int]], None] | None = None):
        self.n_workers = max(1, int(n_workers))
        self.initializer = initializer
        self.on_start = on_start
        self._ctx = worker_context()
        self._workers: list[_Worker] = []

    @property
    def pids(self) -> list[int]:
        """Process ids of the live workers."""
        return [w.pid for w in self._workers]

    def run(self, tasks: Iterable[tuple[Any, Callable, tuple]],
            on_result: Callable[[Any, Any], None]) -> None:
        """Run every task; call ``on_result(key, result)`` in the parent as each ends.

        ``result`` is what the task returned, a :class:`WorkerLost` when its
        worker died, or an object with a ``text`` attribute when the task
        raised (the exception text).

        Parameters
        ----------
        tasks : iterable of (key, function, args)
            ``function`` must be importable by the workers (module level).
        on_result : callable
        """
        pending = deque(tasks)
        try:
            while pending or any(w.task is not None for w in self._workers):
                self._fill(pending)
                busy = [w for w in self._workers if w.task is not None]
                handles: list[Any] = []
                for w in busy:
                    handles += [w.conn, w.process.sentinel]
                ready = set(_wait(handles, timeout=1.0)) if handles else set()
                for w in busy:
                    if w.conn in ready or w.process.sentinel in ready:
                        self._collect(w, on_result)
        except BaseException:
            self.terminate()
            raise

    def _collect(self, w: _Worker, on_result: Callable[[Any, Any], None]) -> None:
        """Take the result of a worker that became ready, or report it lost."""
        try:
            if w.conn.poll(0):
                key, result = w.conn.recv()
                w.task = None
                on_result(key, result)
                return
        except (EOFError, OSError):
            pass  # the worker closed its end: it is ending
        else:
            if w.process.is_alive() and w.process.sentinel not in _wait([w.process.sentinel], 0):
                return  # woke up for nothing
        w.process.join(timeout=5)
        if w.process.is_alive():  # pragma: no cover - closed its pipe but hangs
            w.process.kill()
            w.process.join(timeout=5)
        key = w.task
        w.task = None
        self._drop(w)
        on_result(key, WorkerLost(_death_message(w.process.exitcode)))

    def _fill(self, pending: deque) -> None:
        started = False
        for w in list(self._workers):
            if w.task is None and not w.process.is_alive():
                self._drop(w)
        while pending:
            idle = [w for w in self._workers if w.task is None]
            if not idle:
                if len(self._workers) >= self.n_workers:
                    break
                self._workers.append(_Worker(self._ctx, self.initializer))
                started = True
                continue
            w = idle[0]
            key, fn, args = pending.popleft()
            try:
                w.conn.send((key, fn, args))
                w.task = key
            except (OSError, EOFError):
                pending.appendleft((key, fn, args))
                self._drop(w)
        if started and self.on_start is not None:
            self.on_start(self.pids)

    def _drop(self, w: _Worker) -> None:
        w.close()
        if w in self._workers:
            self._workers.remove(w)

    def close(self) -> None:
        """Ask idle workers to finish and wait for them (a few seconds at most)."""
        for w in self._workers:
            try:
                w.conn.send(None)
            except (OSError, EOFError):
                pass
        for w in self._workers:
            w.process.join(timeout=5)
        self.terminate()

    def terminate(self) -> None:
        """Stop every worker now (SIGTERM, then SIGKILL after 5 s)."""
        for w in self._workers:
            if w.process.is_alive():
                try:
                    w.process.terminate()
                except OSError:  # pragma: no cover - already gone
                    pass
        for w in self._workers:
            w.process.join(timeout=5)
            if w.process.is_alive():  # pragma: no cover - ignores SIGTERM
                w.process.kill()
                w.process.join(timeout=5)
        for w in list(self._workers):
            self._drop(w)
