"""Tasks in worker processes that may fail alone: an exception or a dead worker becomes that task's error.

Used by ``rntn evaluate`` (one task: one checkpoint on every treebank). Each worker is a
fresh interpreter (spawn: no inherited threads or locks) joined to this process by a pipe;
tasks, progress and results cross it as JSON text (nothing is pickled but the worker's
start: its function, named by module and name, and its end of the pipe).

    an exception in a task   -> that task's result is ``TaskFailed("TypeName: message")``; the
                                worker goes on with the next task
    a worker that dies       -> (killed by a signal, os._exit, out of memory) the task it was
                                running fails with how it ended; a new worker takes the rest
    ``should_stop()`` true   -> (a signal reached the parent) every worker is ended (SIGTERM,
                                then SIGKILL after a grace period) and :class:`WorkersStopped`
                                is raised; no worker outlives the call
    the parent dies          -> a worker ends itself at its next progress report

A worker ignores SIGINT: Ctrl-C in a terminal reaches the whole process group, and the
parent alone decides what it means.
"""

from __future__ import annotations

import json
import multiprocessing
import os
import signal
from dataclasses import dataclass
from multiprocessing.connection import wait
from typing import Any, Callable

TaskFunction = Callable[[Any, Callable[[int], None]], Any]  # (task, progress) -> JSON value
STOP_GRACE_SECONDS = 5.0  # after SIGTERM, before SIGKILL


@dataclass
class TaskFailed:
    """Why a task has no result (one line)."""

    error: str


class WorkersStopped(BaseException):
    """``should_stop`` asked the work to end; every worker has. (Not an Exception: no handler of a
    task's errors may take it for the task's failure.)"""


def describe_exception(exc: BaseException) -> str:
    """One line: the exception's type and the first line of its message."""
    text = str(exc).strip().splitlines()
    return f"{type(exc).__name__}: {text[0]}" if text else type(exc).__name__


def describe_exit(exitcode: int | None) -> str:
    if exitcode is not None and exitcode < 0:
        try:
            return f"killed by {signal.Signals(-exitcode).name}"
        except ValueError:
            return f"killed by signal {-exitcode}"
    return f"exit code {exitcode}"


def _worker_main(connection, function: TaskFunction) -> None:
    """A worker's loop: read a task, run it, send progress and the result, until the pipe closes."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    parent = os.getppid()

    def progress(n: int) -> None:
        if os.getppid() != parent:  # the parent is gone: nobody wants the result
            os._exit(1)
        connection.send_bytes(json.dumps({"progress": int(n)}).encode("utf-8"))

    while True:
        try:
            message = json.loads(connection.recv_bytes().decode("utf-8"))
        except (EOFError, OSError):
            return
        try:
            reply = {"result": function(message["task"], progress)}
        except Exception as exc:  # becomes the task's error; the worker goes on
            reply = {"error": describe_exception(exc)}
        connection.send_bytes(json.dumps(reply).encode("utf-8"))


class _Worker:
    def __init__(self, context, function: TaskFunction) -> None:
        self.connection, child = context.Pipe(duplex=True)
        self.process = context.Process(target=_worker_main, args=(child, function), daemon=True)
        self.process.start()
        child.close()
        self.task: int | None = None

    def give(self, index: int, task: Any) -> None:
        self.task = index
        self.connection.send_bytes(json.dumps({"task": task}).encode("utf-8"))

    def end(self, grace: float) -> None:
        """Close the pipe and make sure the process is gone."""
        self.connection.close()
        if self.process.is_alive() and self.task is not None:
            self.process.terminate()
        self.process.join(grace)
        if self.process.is_alive():
            self.process.kill()
            self.process.join()


def run_in_workers(function: TaskFunction, tasks: list[Any], jobs: int,
                   progress: Callable[[int], None] | None = None,
                   should_stop: Callable[[], bool] | None = None) -> list[Any]:
    """Run ``function(task, progress)`` for every task in ``jobs`` worker processes.

    Returns one entry per task, in task order: its JSON result, or :class:`TaskFailed`.
    ``function`` must be a module-level function (the workers import it by name).
    """
    context = multiprocessing.get_context("spawn")
    results: dict[int, Any] = {}
    waiting = list(range(len(tasks)))[::-1]  # pop() takes the next task
    workers: list[_Worker] = []
    try:
        while len(results) < len(tasks):
            if should_stop is not None and should_stop():
                raise WorkersStopped()
            wanted = min(jobs, len(waiting) + sum(w.task is not None for w in workers))
            while len(workers) < wanted:
                workers.append(_Worker(context, function))
            for worker in list(workers):
                if worker.task is None and waiting:
                    index = waiting.pop()
                    try:
                        worker.give(index, tasks[index])
                    except OSError:  # it died while idle: the task waits for a new worker
                        waiting.append(index)
                        worker.task = None
                        worker.end(0.0)
                        workers.remove(worker)
            busy = [w for w in workers if w.task is not None]
            ready = wait([w.connection for w in busy] + [w.process.sentinel for w in busy], timeout=0.25)
            for worker in busy:
                if worker.connection in ready or worker.process.sentinel in ready:
                    if not _read_replies(worker, results, progress):
                        results[worker.task] = TaskFailed(
                            f"the worker process scoring it ended ({describe_exit(_exit_code(worker))})")
                        worker.task = None
                        worker.end(0.0)
                        workers.remove(worker)
    finally:
        for worker in workers:
            worker.end(STOP_GRACE_SECONDS)
    return [results[i] for i in range(len(tasks))]


def _exit_code(worker: _Worker) -> int | None:
    worker.process.join(STOP_GRACE_SECONDS)
    return worker.process.exitcode


def _read_replies(worker: _Worker, results: dict[int, Any], progress: Callable[[int], None] | None) -> bool:
    """Read whatever the worker has sent; False when its pipe is closed with its task unfinished."""
    try:
        while worker.connection.poll():
            reply = json.loads(worker.connection.recv_bytes().decode("utf-8"))
            if "progress" in reply:
                if progress is not None:
                    progress(reply["progress"])
                continue
            results[worker.task] = reply["result"] if "error" not in reply else TaskFailed(reply["error"])
            worker.task = None
            return True
    except (EOFError, OSError):
        return False
    return worker.process.is_alive()
