"""No lost work: a periodic recovery copy of the open scene, and finding it after a crash.

While the document has unsaved changes, its scene is written every `interval_s` seconds to
`<home>/recovery/recovery-<pid>.json` (atomically), with a small sidecar saying which file it
belongs to.  A clean exit deletes both.  On the next start, recovery files left by a process
that is no longer running are offered for restoring.
"""
from __future__ import annotations

import json
import os
import time
from dataclasses import dataclass
from pathlib import Path

from PySide6.QtCore import QObject, QStandardPaths, QTimer

from raytrace.scene_io import atomic_write_text


def app_home() -> Path:
    """Where the application keeps its own files; RAYTRACE_GUI_HOME overrides (tests)."""
    env = os.environ.get("RAYTRACE_GUI_HOME")
    if env:
        return Path(env)
    base = QStandardPaths.writableLocation(QStandardPaths.AppDataLocation) or str(Path.home() / ".raytrace2d")
    return Path(base)


def recovery_dir() -> Path:
    return app_home() / "recovery"


@dataclass
class Recovery:
    scene_file: Path           # the recovery copy (a scene file)
    meta_file: Path
    original: str              # the file it belongs to ("" for an untitled scene)
    saved_at: float
    pid: int

    def describe(self) -> str:
        when = time.strftime("%Y-%m-%d %H:%M:%S", time.localtime(self.saved_at))
        return f"{self.original or 'an untitled scene'} (autosaved {when})"

    def discard(self) -> None:
        _remove(self.scene_file, self.meta_file)


def _remove(*files: Path) -> None:
    """Delete a recovery copy and its note; one already gone is fine."""
    for f in files:
        try:
            f.unlink()
        except FileNotFoundError:
            pass


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    except OSError:
        return False
    return True


def find_recoveries() -> list[Recovery]:
    """Recovery copies left behind by processes that are gone, newest first."""
    out = []
    d = recovery_dir()
    if not d.is_dir():
        return out
    for meta in d.glob("recovery-*.meta.json"):
        try:
            info = json.loads(meta.read_text(encoding="utf-8"))
            pid = int(info["pid"])
            scene_file = d / info["scene_file"]
        except (OSError, ValueError, KeyError, TypeError):
            continue
        if _alive(pid) or not scene_file.exists():
            continue
        out.append(Recovery(scene_file, meta, str(info.get("original", "")), float(info.get("saved_at", 0)), pid))
    return sorted(out, key=lambda r: -r.saved_at)


class Autosaver(QObject):
    """Writes the recovery copy on a timer while there are unsaved changes."""

    def __init__(self, doc, interval_s: float = 60.0, parent=None):
        super().__init__(parent)
        self.doc = doc
        self.pid = os.getpid()
        self.scene_file = recovery_dir() / f"recovery-{self.pid}.json"
        self.meta_file = recovery_dir() / f"recovery-{self.pid}.meta.json"
        self.last_error = ""
        self._written_for = None
        self.timer = QTimer(self)
        self.timer.setInterval(int(interval_s * 1000))
        self.timer.timeout.connect(self.save_now)
        self.timer.start()
        doc.file_changed.connect(self._file_changed)

    def save_now(self) -> bool:
        """Write the recovery copy if there is unsaved work; True when written."""
        if not self.doc.modified:
            return False
        if self._written_for is self.doc.scene and self.scene_file.exists():
            return False
        try:
            self.scene_file.parent.mkdir(parents=True, exist_ok=True)
            atomic_write_text(self.scene_file, self.doc.text())
            atomic_write_text(self.meta_file, json.dumps({
                "pid": self.pid, "scene_file": self.scene_file.name,
                "original": str(self.doc.path) if self.doc.path else "", "saved_at": time.time()}) + "\n")
        except (OSError, ValueError) as exc:
            self.last_error = f"could not write the recovery copy {self.scene_file}: {exc}"
            return False
        self._written_for = self.doc.scene
        return True

    def discard(self) -> None:
        """The work is safe (saved, or the user chose to drop it): remove the copy."""
        _remove(self.scene_file, self.meta_file)
        self._written_for = None

    def _file_changed(self) -> None:
        if not self.doc.modified:
            self.discard()
