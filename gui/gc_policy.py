"""Python's garbage collection in the app: on the UI thread only, and not over the whole heap.

Automatic collection runs in whichever thread happens to allocate, most often the trace thread.
When it frees a cycle holding Qt objects there (a removed plot item, a closed window), the Qt
destructor and the UI thread can each wait for what the other holds: a GUI test run hung that way
(the optimizer's thread collecting a closed window's menus while the UI thread deleted widgets).
So automatic collection is switched off and a timer on the UI thread collects instead, with
Python's own thresholds per generation (the scheme pyqtgraph documents for Qt programs).

Full collections also walk every object alive, tens of thousands of them from the modules, the
compiled kernels and the widgets: 30-100 ms pauses of every thread, now and then in the middle of
an edit's redraw.  After the first trace is shown, what lives then is frozen out of the
collector's reach (`gc.freeze`), which brings a full collection to a few ms.
"""
from __future__ import annotations

import gc

from PySide6.QtCore import QCoreApplication, QTimer

COLLECT_EVERY_MS = 500

_timer: QTimer | None = None
_settled = False


def collect_on_ui_thread() -> None:
    """Once per process, from the UI thread: collect there on a timer instead of anywhere."""
    global _timer
    app = QCoreApplication.instance()
    if _timer is not None or app is None:
        return
    _timer = QTimer(app)            # lives as long as the application, not one window
    _timer.timeout.connect(_collect)
    gc.disable()
    _timer.start(COLLECT_EVERY_MS)


def _collect() -> None:
    t0, t1, t2 = gc.get_threshold()
    c0, c1, c2 = gc.get_count()
    if c0 > t0:
        gc.collect(0)
        if c1 > t1:
            gc.collect(1)
            if c2 > t2:
                gc.collect(2)


def settle_heap() -> None:
    """Once per process, after the first trace is on the screen: collect, then freeze what lives."""
    global _settled
    if not _settled:
        _settled = True
        gc.collect()
        gc.freeze()


def heap_settled() -> bool:
    return _settled
