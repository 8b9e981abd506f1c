"""Live tracing off the UI thread.

One background thread traces; the UI thread only hands it requests and receives results through
a queued Qt signal, so it never waits.  Only the newest request is kept while one is running
(the states a drag passed through are skipped), a running trace is cancelled when a newer one
arrives and it has already run for a while, and a result older than one already delivered, or
from another document, is dropped.

Coarse first, then refine: when the last full trace of the document, with its drawing, took
longer than COARSE_WHEN_OVER_S of the trace thread's CPU time, a request is first traced with a
coarse fan, sized from that cost per ray to take about COARSE_TRACE_S, and shown (CPU time, not
wall time, so that the size does not swing with other load on the machine); then, unless a
newer request is already waiting, the full trace follows and replaces it.  The drawing counts:
for the light pipe it costs more than the trace itself.  A newer request stops a refining trace at
once, so during a drag the window keeps showing coarse fans of the newest states.

The coarse fan stops at COARSE_FLUX_FLOOR of its source ray's flux (where the scene's own floor
is lower): the legs below it make up the faintest brightness level, painted a few percent from
the background (and left out of dense fans altogether), and they cost about a third of its trace.  The full trace keeps the scene's floor.
Both stages of a request share one compiled scene.

The refinement waits until the window says it has painted the coarse fan (`shown`), at most
`refine_wait_s`: both threads need Python's lock, and a full trace running beside the drawing
and painting of the coarse fan would make both several times slower.
"""
from __future__ import annotations

import threading
import time
import traceback
from dataclasses import dataclass, replace

from PySide6.QtCore import QObject, Signal

from raytrace.errors import RaytraceError, SceneError
from raytrace.scene import Scene

from .tracing import TraceCancelled, TraceOptions, compile_for, run_trace

CANCEL_AFTER_S = 0.25   # a newer request stops a trace that has run at least this long
COARSE_WHEN_OVER_S = 0.02   # show a coarse fan first when the last full trace and drawing took longer
COARSE_TRACE_S = 0.005      # a coarse fan is sized to trace and draw in about this long (CPU)
COARSE_MIN_RAYS = 32        # ... and has at least this many source rays (else: no coarse stage)
COARSE_FLUX_FLOOR = 1e-3    # ... and ends its legs at this share of their source ray's flux
COARSE, FULL = 0, 1         # stages of a request


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
    cpu_s: float = 0.0           # CPU time of the trace thread
    drawing_cpu_s: float = 0.0   # ... and of making the drawing after it
    coarse: bool = False         # a coarse fan shown before the full trace of the same request
    options: TraceOptions | None = None   # the options traced (a coarse fan's differ from the request's)
    drawing: object = None       # what the canvas draws of the result, made by the trace thread

    @property
    def stage(self) -> int:
        return COARSE if self.coarse else FULL


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
        self.delivered_stage = FULL
        self.dropped = 0
        self.coarse_shown = 0
        self._refining = False
        # (epoch, source rays, CPU seconds of the trace and its drawing) of the last full trace
        self._last_full: tuple[int, int, float] | None = None
        # prepare(result, scene) -> the result's drawing, made on the trace thread so that the
        # UI thread only hands arrays to the items (None: the UI thread makes it)
        self.prepare = None
        # after a coarse fan the full trace waits for `shown(request id)`, this long at most
        self.refine_wait_s = 0.0
        self._shown_id = -1
        self._compiled = None         # (scene, wavelength, compiled scene) of the last request
        self._thread = threading.Thread(target=self._loop, name="trace worker", daemon=True)
        self._thread.start()
        self._done.connect(self._deliver)

    def submit(self, scene: Scene, options: TraceOptions, epoch: int = 0) -> int:
        with self._cond:
            self._next_id += 1
            self._pending = TraceRequest(self._next_id, epoch, scene, options, time.perf_counter())
            run = self._running
            if run is not None and (run.epoch != epoch or self._refining or
                                    time.perf_counter() - self._running_since > CANCEL_AFTER_S):
                self._cancel.set()
            self._cond.notify()
            return self._next_id

    def cancel(self) -> None:
        """Stop the running trace and forget the pending one."""
        with self._cond:
            self._pending = None
            self._cancel.set()

    def shown(self, request_id: int) -> None:
        """The window has painted the coarse fan of this request: the full trace may start."""
        with self._cond:
            self._shown_id = max(self._shown_id, request_id)
            self._cond.notify_all()

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
        newest = (self.delivered_epoch, self.delivered_id, self.delivered_stage)
        return (r.epoch, r.id, outcome.stage) > newest

    def _deliver(self, outcome: TraceOutcome) -> None:
        with self._cond:
            self._undelivered -= 1
        if outcome.cancelled or not self.accepts(outcome):
            self.dropped += 1
            return
        self.delivered_id = outcome.request.id
        self.delivered_epoch = outcome.request.epoch
        self.delivered_stage = outcome.stage
        self.coarse_shown += outcome.coarse
        self.finished.emit(outcome)

    def _coarse_options(self, req: TraceRequest) -> TraceOptions | None:
        """The coarse fan to show first, or None when the full trace is quick enough."""
        last = self._last_full
        if last is None or last[0] != req.epoch or last[2] <= COARSE_WHEN_OVER_S:
            return None
        rays = req.options.rays if req.options.rays is not None else req.scene.settings.rays
        n = min(int(COARSE_TRACE_S * last[1] / last[2]), rays // 4)
        if n < COARSE_MIN_RAYS:
            return None
        floor = req.options.flux_floor if req.options.flux_floor is not None else req.scene.settings.flux_floor
        return replace(req.options, rays=n, drawn_rays=min(req.options.drawn_rays, n),
                       flux_floor=max(floor, COARSE_FLUX_FLOOR))

    def _wait_shown(self, req: TraceRequest) -> bool:
        """After a coarse fan: until the window has painted it (or `refine_wait_s`); False
        when a newer request came meanwhile (the refinement is then skipped)."""
        deadline = time.perf_counter() + self.refine_wait_s
        with self._cond:
            while self._shown_id < req.id and self._pending is None and not self._stop:
                left = deadline - time.perf_counter()
                if left <= 0:
                    break
                self._cond.wait(left)
            return self._pending is None and not self._stop

    def _compiled_scene(self, req: TraceRequest, options: TraceOptions):
        """The compiled scene for a request: the last one again when the scene is the same."""
        c = self._compiled
        if c is None or c[0] is not req.scene or c[1] != options.wavelength_nm:
            c = self._compiled = (req.scene, options.wavelength_nm, compile_for(req.scene, options))
        return c[2]

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
            coarse = self._coarse_options(req)
            stages = [(coarse, True), (req.options, False)] if coarse is not None else [(req.options, False)]
            for options, is_coarse in stages:
                with self._cond:
                    self._refining = coarse is not None and not is_coarse
                outcome = self._trace(req, options, is_coarse)
                if not is_coarse and outcome.result is not None:
                    rays = options.rays if options.rays is not None else req.scene.settings.rays
                    self._last_full = (req.epoch, max(1, int(rays)),
                                       outcome.cpu_s + outcome.drawing_cpu_s)
                with self._cond:
                    last = not is_coarse or outcome.result is None or self._pending is not None
                    if last:
                        self._running = None
                        self._refining = False
                    self._undelivered += 1
                    idle = self._pending is None
                self._done.emit(outcome)
                if last:
                    break
                if not self._wait_shown(req):         # a newer request: trace that instead
                    with self._cond:
                        self._running = None
                        self._refining = False
                        idle = self._pending is None
                    break
            if idle:
                self.busy.emit(False)

    def _trace(self, req: TraceRequest, options: TraceOptions, coarse: bool) -> TraceOutcome:
        outcome = TraceOutcome(req, coarse=coarse, options=options)
        t0, c0 = time.perf_counter(), time.thread_time()
        last = [0.0]

        def on_progress(stats, last=last):
            now = time.perf_counter()
            if now - last[0] > 0.2:          # a few updates a second are plenty
                last[0] = now
                self.progress.emit(int(stats.get("segments", 0)))
        try:
            outcome.result = run_trace(req.scene, options, self._cancel, on_progress,
                                       compiled=self._compiled_scene(req, options))
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
        outcome.cpu_s = time.thread_time() - c0
        if outcome.result is not None and self.prepare is not None:
            c1 = time.thread_time()
            try:
                outcome.drawing = self.prepare(outcome.result, req.scene)
            except Exception:      # the UI thread makes the drawing itself; the result stands
                traceback.print_exc()
            outcome.drawing_cpu_s = time.thread_time() - c1
        return outcome
