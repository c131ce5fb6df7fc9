"""Crash isolation: prediction runs in worker processes whose death does not take the caller down.

A task goes to one worker process over a pipe.  If the worker dies (a segfault in a native
library, the out-of-memory killer, a kill signal) or runs past its time limit, the caller gets a
:class:`WorkerFailure` saying what happened, the worker is replaced by a fresh one (started when
next needed) and other work goes on.  :func:`call_isolated` runs a list of items as one task and,
when that task fails, each item alone, so only an item that fails on its own is lost, and it is
reported.  :class:`IsolatedPredictor` applies this to molecules: a row whose prediction kills its
worker gets status ``crashed``, one that runs out of time ``timeout``; every other row is predicted.

Both ``pkasite predict`` (every chunk) and ``pkasite serve`` (every request) score through it.
"""
from __future__ import annotations

import multiprocessing
import os
import queue
import signal
import threading
import time
from dataclasses import dataclass
from multiprocessing.connection import wait
from pathlib import Path
from typing import Callable, Sequence

import pandas as pd

from .predict import (MOLECULE_COLUMNS, SITE_COLUMNS, WINDOW, duplicate_warning, echo_text, status_row,
                      text_problem)

DEFAULT_MOL_TIMEOUT = 60.0   # seconds one molecule may take alone
ROW_BUDGET = 1.0             # seconds per row added to a whole chunk's time limit
START_TIMEOUT = 300.0        # seconds a worker may take to start (imports, model load)


class WorkerFailure(Exception):
    """A task that did not finish: ``kind`` is ``crashed`` (the worker died or raised) or ``timeout``."""

    def __init__(self, kind: str, message: str):
        super().__init__(message)
        self.kind, self.message = kind, message


class WorkerStartError(RuntimeError):
    """Workers that cannot start (their initializer fails, or they die while starting, again and again)."""


class PoolClosed(RuntimeError):
    """The pool was closed while a task waited or ran."""


def _worker_main(conn, fn, initializer, initargs) -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C reaches the whole process group: the parent decides
    try:
        if initializer is not None:
            initializer(*initargs)
    except BaseException as exc:  # noqa: BLE001 - reported to the parent, which stops with it
        conn.send(("init_error", f"{type(exc).__name__}: {exc}"))
        return
    conn.send(("ready", os.getpid()))
    while True:
        try:
            payload = conn.recv()
        except (EOFError, OSError):  # the parent is gone
            return
        if payload is None:
            return
        try:
            reply = ("ok", fn(payload))
        except Exception as exc:  # noqa: BLE001 - a Python error in one task; the worker stays usable
            reply = ("error", f"{type(exc).__name__}: {exc}")
        conn.send(reply)


def describe_exit(code: int | None) -> str:
    if code is not None and code < 0:
        try:
            name = signal.Signals(-code).name
        except ValueError:
            name = f"signal {-code}"
        return f"the worker process died ({name})"
    return f"the worker process exited with code {code}"


class _Worker:
    def __init__(self, ctx, fn, initializer, initargs):
        self.conn, child = ctx.Pipe()
        self.proc = ctx.Process(target=_worker_main, args=(child, fn, initializer, initargs), daemon=True,
                                name="pkasite-worker")
        self.proc.start()
        child.close()
        self.ready = False

    @property
    def pid(self) -> int | None:
        return self.proc.pid

    def _receive(self, timeout: float | None, what: str):
        ready = wait([self.conn, self.proc.sentinel], timeout)
        if self.conn in ready:
            try:
                return self.conn.recv()
            except (EOFError, OSError):
                pass
        if not ready:
            self.kill()
            raise WorkerFailure("timeout", f"{what} took longer than {timeout:.0f} s")
        self.proc.join(5)
        raise WorkerFailure("crashed", describe_exit(self.proc.exitcode))

    def start(self, timeout: float) -> None:
        if self.ready:
            return
        kind, value = self._receive(timeout, "starting the worker")
        if kind == "init_error":
            raise WorkerStartError(f"a prediction worker could not start: {value}")
        self.ready = True

    def call(self, payload, timeout: float | None):
        try:
            self.conn.send(payload)
        except (BrokenPipeError, OSError):
            self.proc.join(5)
            raise WorkerFailure("crashed", describe_exit(self.proc.exitcode)) from None
        kind, value = self._receive(timeout, "the prediction")
        if kind == "error":
            raise WorkerFailure("crashed", f"the prediction failed: {value}")
        return value

    def kill(self) -> None:
        if self.proc.is_alive():
            self.proc.kill()
        self.proc.join(5)
        self.conn.close()

    def stop(self) -> None:
        try:
            self.conn.send(None)
            self.proc.join(2)
        except (BrokenPipeError, OSError):
            pass
        self.kill()


class WorkerPool:
    """``size`` spawned worker processes that run ``fn(payload)``; safe to call from many threads.

    Workers start when first needed and are replaced after a crash or a timeout.  ``initializer``
    (with ``initargs``) runs once in each worker before its first task."""

    def __init__(self, fn: Callable, size: int = 1, initializer: Callable | None = None, initargs: tuple = (),
                 start_timeout: float = START_TIMEOUT, max_start_failures: int = 3):
        self._ctx = multiprocessing.get_context("spawn")  # not fork: LightGBM's OpenMP threads deadlock forks
        self._fn, self._initializer, self._initargs = fn, initializer, initargs
        self._start_timeout, self._max_start_failures = start_timeout, max_start_failures
        self._idle: queue.Queue = queue.Queue()
        for _ in range(size):
            self._idle.put(None)  # a slot; its worker starts when first used
        self._lock = threading.Lock()
        self._live: set[_Worker] = set()
        self._closed = False

    def _spawn(self) -> _Worker:
        with self._lock:
            if self._closed:
                raise PoolClosed("the worker pool is closed")
            worker = _Worker(self._ctx, self._fn, self._initializer, self._initargs)
            self._live.add(worker)
            return worker

    def _retire(self, worker: _Worker) -> None:
        worker.kill()
        with self._lock:
            self._live.discard(worker)

    def _started(self, worker: _Worker | None, deadline: float | None) -> _Worker:
        failures = 0
        while True:
            worker = worker or self._spawn()
            try:
                worker.start(_remaining(self._start_timeout, deadline))
                return worker
            except WorkerFailure as exc:  # died or hung while starting: not the task's fault
                self._retire(worker)
                worker = None
                failures += 1
                if exc.kind == "timeout" and deadline is not None and time.monotonic() >= deadline:
                    raise
                if failures >= self._max_start_failures:
                    raise WorkerStartError(f"a prediction worker could not start: {exc.message} "
                                           f"({failures} attempts)") from None
            except WorkerStartError:
                self._retire(worker)
                raise

    def call(self, payload, timeout: float | None = None, deadline: float | None = None):
        """``fn(payload)`` in a worker.  Raises :class:`WorkerFailure` when the worker dies, raises or
        runs past ``timeout`` seconds or the ``deadline`` (a ``time.monotonic()`` value)."""
        try:
            slot = self._idle.get(timeout=None if deadline is None else max(0.0, deadline - time.monotonic()))
        except queue.Empty:
            raise WorkerFailure("timeout", "no worker became free before the time limit") from None
        worker = None
        try:
            worker = self._started(slot, deadline)
            left = _remaining(timeout, deadline)
            if left is not None and left <= 0:
                raise WorkerFailure("timeout", "the time limit was reached before the prediction started")
            return worker.call(payload, left)
        except WorkerFailure as exc:
            if self._closed:
                raise PoolClosed("the worker pool was closed") from None
            if exc.kind == "timeout" or not worker or not worker.proc.is_alive():
                if worker is not None:
                    self._retire(worker)
                worker = None
            raise
        finally:
            self._idle.put(worker)

    def start_all(self) -> None:
        """Start every worker now (a server does, so its first request does not wait for one)."""
        slots = [self._idle.get() for _ in range(self._idle.qsize())]
        try:
            slots = [self._started(slot, None) for slot in slots]
        finally:
            for slot in slots:
                self._idle.put(slot)

    def pids(self) -> list[int]:
        with self._lock:
            return [w.pid for w in self._live if w.proc.is_alive()]

    def close(self) -> None:
        with self._lock:
            self._closed = True
            workers = list(self._live)
            self._live.clear()
        for w in workers:
            w.stop()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def _remaining(timeout: float | None, deadline: float | None) -> float | None:
    if deadline is None:
        return timeout
    left = deadline - time.monotonic()
    return left if timeout is None else min(timeout, left)


def call_isolated(pool: WorkerPool, n: int, payload_for: Callable[[Sequence[int]], object],
                  timeout_for: Callable[[int], float | None], deadline: float | None = None) -> list[tuple]:
    """Items ``0..n-1`` as one task; if it fails, each item alone (a fresh worker after every crash).

    Returns ``(positions, outcome)`` pieces in item order, ``outcome`` being ``fn``'s result for those
    positions or the :class:`WorkerFailure` of one item."""
    try:
        return [(list(range(n)), pool.call(payload_for(range(n)), timeout_for(n), deadline))]
    except WorkerFailure as whole:
        if n == 1:
            return [([0], whole)]
    pieces = []
    for i in range(n):
        try:
            pieces.append(([i], pool.call(payload_for([i]), timeout_for(1), deadline)))
        except WorkerFailure as exc:
            pieces.append(([i], exc))
    return pieces


# ----------------------------------------------------------------------------- molecules

_BUNDLE = None


def _load_model(bundle_path: str) -> None:
    global _BUNDLE
    from rdkit import RDLogger

    from .bundle import load_bundle
    RDLogger.DisableLog("rdApp.*")
    _BUNDLE = load_bundle(Path(bundle_path), with_tables=False)


def _predict_task(task: dict) -> tuple[pd.DataFrame, pd.DataFrame]:
    from .predict import predict_records
    return predict_records(_BUNDLE, task["ids"], task["inputs"], ph=task["ph"], explain=task["explain"],
                           window=task["window"], fmt=task["fmt"], problems=task["problems"],
                           duplicate_of=task["duplicate_of"])


@dataclass
class Scored:
    molecules: pd.DataFrame
    sites: pd.DataFrame


class IsolatedPredictor:
    """:func:`~pkasite.pipeline.predict.predict_records` in ``workers`` worker processes.

    A chunk whose worker crashes or hangs is predicted again molecule by molecule in fresh workers;
    a molecule that fails alone becomes a row with status ``crashed`` or ``timeout`` and a message.
    ``mol_timeout``: seconds one molecule may take (a whole chunk gets that plus ``ROW_BUDGET`` per row).
    """

    def __init__(self, bundle_path: Path, workers: int = 1, mol_timeout: float = DEFAULT_MOL_TIMEOUT,
                 explain: bool = False):
        self.pool = WorkerPool(_predict_task, workers, _load_model, (str(bundle_path),))
        self.mol_timeout, self.explain = mol_timeout, explain
        self.site_columns = SITE_COLUMNS + (["explanation"] if explain else [])

    def timeout_for(self, n: int) -> float:
        return self.mol_timeout + (ROW_BUDGET * n if n > 1 else 0.0)

    def predict(self, ids: list, inputs: list, ph: float = 7.4, window: tuple[float, float] = WINDOW,
                fmt: str = "smiles", problems: list | None = None, duplicate_of: list | None = None,
                deadline: float | None = None) -> Scored:
        """Both tables for one chunk of rows, every row present, in input order."""
        n = len(ids)
        problems = list(problems) if problems is not None else [text_problem(x, fmt) for x in inputs]
        duplicate_of = list(duplicate_of) if duplicate_of is not None else [None] * n
        if all(problems):  # nothing to parse: no worker needed
            pieces = [(list(range(n)), None)]
        else:
            def payload_for(pos):
                return {"ids": [ids[i] for i in pos], "inputs": [inputs[i] for i in pos], "ph": ph,
                        "explain": self.explain, "window": tuple(window), "fmt": fmt,
                        "problems": [problems[i] for i in pos], "duplicate_of": [duplicate_of[i] for i in pos]}
            pieces = call_isolated(self.pool, n, payload_for, self.timeout_for, deadline)
        mols, sites = [], []
        for pos, outcome in pieces:
            if isinstance(outcome, tuple):
                mols.append(outcome[0])
                sites.append(outcome[1])
                continue
            rows = []
            for i in pos:
                shown = echo_text(inputs[i]) if fmt == "smiles" else ""
                if isinstance(outcome, WorkerFailure):
                    status, message = outcome.kind, f"{outcome.message}; the batch went on without this row"
                else:
                    status, message = problems[i]
                rows.append(status_row(ids[i], shown, status, [message] + duplicate_warning(duplicate_of[i])))
            mols.append(pd.DataFrame(rows, columns=MOLECULE_COLUMNS))
        mols = [m for m in mols if len(m)]
        sites = [s for s in sites if len(s)]
        return Scored(pd.concat(mols, ignore_index=True) if mols else pd.DataFrame(columns=MOLECULE_COLUMNS),
                      pd.concat(sites, ignore_index=True) if sites else pd.DataFrame(columns=self.site_columns))

    def close(self) -> None:
        self.pool.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
