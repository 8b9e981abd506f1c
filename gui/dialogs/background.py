"""Run a long job (a sweep, an optimization, a tolerance run) in a worker thread for a dialog.

The job gets a progress(done, total) callback; each call moves the dialog's bar and, once
Cancel was pressed, stops the job by raising Cancelled (the trace in progress finishes first).
`done` carries (result, "") or (None, why it stopped), in the GUI thread."""
from __future__ import annotations

import threading

from PySide6.QtCore import QObject, Signal

from raytrace.errors import RaytraceError, SceneError


class Cancelled(Exception):
    pass


class BackgroundRun(QObject):
    progress = Signal(int, int)
    done = Signal(object, str)     # result or None, message

    def __init__(self):
        super().__init__()
        self.cancel = threading.Event()

    def tick(self, done, total):
        self.progress.emit(done, total)
        if self.cancel.is_set():
            raise Cancelled()

    def run(self, job):
        try:
            result = job(self.tick)
        except Cancelled:
            self.done.emit(None, "cancelled")
        except SceneError as exc:
            self.done.emit(None, "; ".join(str(p) for p in exc.problems))
        except RaytraceError as exc:
            self.done.emit(None, str(exc))
        else:
            self.done.emit(result, "")

    def start(self, job, name: str) -> threading.Thread:
        thread = threading.Thread(target=self.run, args=(job,), name=name, daemon=True)
        thread.start()
        return thread
