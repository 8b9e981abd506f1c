"""Live tracing off the UI thread.

One background thread traces; the UI thread only hands it requests and receives results through
a queued Qt signal, so it never waits.  Only the newest request is kept while one is running
(the states a drag passed through are skipped), a running trace is cancelled when a newer one
arrives and it has already run for a while, and a result older than one already delivered, or
from another document, is dropped.
"""
from __future__ import annotations

import threading
import time
import traceback
from dataclasses import dataclass

from PySide6.QtCore import QObject, Signal

from raytrace.errors import RaytraceError, SceneError
from raytrace.scene import Scene

from .tracing import TraceCancelled, TraceOptions, run_trace

CANCEL_AFTER_S = 0.25   # a newer request stops a trace that has run at least this long


@dataclass
class TraceRequest:
    id: int
    epoch: int
    scene: Scene
    options: TraceOptions
    submitted: float


@dataclass
class TraceOutcome:
    request: TraceRequest
    result: object = None        # TraceResult, or None on error / cancel
    error: str = ""
    cancelled: bool = False
    elapsed_s: float = 0.0


class TraceWorker(QObject):
    finished = Signal(object)     # accepted TraceOutcome, delivered on the UI thread
    busy = Signal(bool)
    progress = Signal(int)        # segments traced so far in the running trace
    _done = Signal(object)        # every outcome, from the trace thread

    def __init__(self, parent=None):
        super().__init__(parent)
        self._cond = threading.Condition()
        self._pending: TraceRequest | None = None
        self._running: TraceRequest | None = None
        self._running_since = 0.0
        self._cancel = threading.Event()
        self._stop = False
        self._next_id = 0
        self._undelivered = 0
        self.delivered_id = -1
        self.delivered_epoch = -1
        self.dropped = 0
        self._thread = threading.Thread(target=self._loop, name="trace worker", daemon=True)
        self._thread.start()
        self._done.connect(self._deliver)

    def submit(self, scene: Scene, options: TraceOptions, epoch: int = 0) -> int:
        with self._cond:
            self._next_id += 1
            self._pending = TraceRequest(self._next_id, epoch, scene, options, time.perf_counter())
            run = self._running
            if run is not None and (run.epoch != epoch or
                                    time.perf_counter() - self._running_since > CANCEL_AFTER_S):
                self._cancel.set()
            self._cond.notify()
            return self._next_id

    def cancel(self) -> None:
        """Stop the running trace and forget the pending one."""
        with self._cond:
            self._pending = None
            self._cancel.set()

    def is_idle(self) -> bool:
        """Nothing pending, running, or finished but not yet handed to the UI thread."""
        with self._cond:
            return self._pending is None and self._running is None and self._undelivered == 0

    def is_tracing(self) -> bool:
        with self._cond:
            return self._running is not None

    def shutdown(self) -> None:
        with self._cond:
            self._stop = True
            self._pending = None
            self._cancel.set()
            self._cond.notify()
        self._thread.join(timeout=5)

    def accepts(self, outcome: TraceOutcome) -> bool:
        """Stale results (older than one delivered, or of another document) are dropped."""
        r = outcome.request
        if r.epoch < self.delivered_epoch or (r.epoch == self.delivered_epoch and r.id <= self.delivered_id):
            return False
        return True

    def _deliver(self, outcome: TraceOutcome) -> None:
        with self._cond:
            self._undelivered -= 1
        if outcome.cancelled or not self.accepts(outcome):
            self.dropped += 1
            return
        self.delivered_id = outcome.request.id
        self.delivered_epoch = outcome.request.epoch
        self.finished.emit(outcome)

    def _loop(self) -> None:
        while True:
            with self._cond:
                while self._pending is None and not self._stop:
                    self._cond.wait()
                if self._stop:
                    return
                req, self._pending = self._pending, None
                self._running, self._running_since = req, time.perf_counter()
                self._cancel.clear()
            self.busy.emit(True)
            outcome = TraceOutcome(req)
            t0 = time.perf_counter()
            last = [0.0]

            def on_progress(stats, last=last):
                now = time.perf_counter()
                if now - last[0] > 0.2:          # a few updates a second are plenty
                    last[0] = now
                    self.progress.emit(int(stats.get("segments", 0)))
            try:
                outcome.result = run_trace(req.scene, req.options, self._cancel, on_progress)
            except TraceCancelled:
                outcome.cancelled = True
            except SceneError as exc:
                outcome.error = "; ".join(str(p) for p in exc.problems) or str(exc)
            except RaytraceError as exc:
                outcome.error = str(exc)
            except Exception as exc:   # keep the thread alive; show what went wrong
                outcome.error = f"{type(exc).__name__}: {exc}"
                traceback.print_exc()
            outcome.elapsed_s = time.perf_counter() - t0
            with self._cond:
                self._running = None
                self._undelivered += 1
                idle = self._pending is None
            self._done.emit(outcome)
            if idle:
                self.busy.emit(False)
