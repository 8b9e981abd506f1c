"""No lost work: a periodic recovery copy of the open scene, and finding it after a crash.

While the document has unsaved changes, its scene is written every `interval_s` seconds to
`<home>/recovery/recovery-<session>.json` (atomically), with a small sidecar saying which file it
belongs to.  A clean exit deletes both.  On the next start, recovery files left by a process
that is no longer running are offered for restoring.

The session id is random, not the process id: process ids repeat (every container's first
process is pid 1), and a copy named by pid would be overwritten by the next session with that
pid before it was offered.  A session counts as running while a process with its pid and its
start time exists.  The recovery copy's name is always derived from the sidecar's own name,
never read from inside it, so a crafted sidecar cannot make Discard delete another file.
"""
from __future__ import annotations

import json
import os
import re
import time
import uuid
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
    session: str = ""

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


def _process_started(pid: int) -> str:
    """When process `pid` started (clock ticks since boot), "" where that cannot be read."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as fh:
            return fh.read().rsplit(")", 1)[1].split()[19]
    except (OSError, IndexError):
        return ""


def _alive(pid: int, started: str = "", session: str = "") -> bool:
    """Whether the session that wrote a sidecar still runs: its pid exists and, where the
    start time is known, is the same process (not a later one given the same pid)."""
    if pid == os.getpid():
        return bool(session) and session.startswith(SESSION_ID)   # this pid, another run: gone
    if started and _process_started(pid) not in ("", started):
        return False
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
        m = _META_NAME.fullmatch(meta.name)
        if m is None or not meta.is_file():
            continue
        scene_file = d / f"recovery-{m.group(1)}.json"   # never the sidecar's own say
        try:
            info = json.loads(meta.read_text(encoding="utf-8"))
            pid = int(info["pid"])
            session = str(info.get("session", ""))
            started = str(info.get("started", ""))
            original = str(info.get("original", ""))
            saved_at = float(info.get("saved_at", 0))
        except (OSError, ValueError, KeyError, TypeError, AttributeError):
            continue
        if _alive(pid, started, session) or not scene_file.is_file():
            continue
        out.append(Recovery(scene_file, meta, original, saved_at, pid, session))
    return sorted(out, key=lambda r: -r.saved_at)


SESSION_ID = uuid.uuid4().hex      # this run of the app
_META_NAME = re.compile(r"recovery-([0-9A-Za-z_-]+)\.meta\.json")


class Autosaver(QObject):
    """Writes the recovery copy on a timer while there are unsaved changes."""

    def __init__(self, doc, interval_s: float = 60.0, parent=None):
        super().__init__(parent)
        self.doc = doc
        self.pid = os.getpid()
        self.session = f"{SESSION_ID}-{id(self):x}"     # two windows in one run keep two copies
        self.scene_file = recovery_dir() / f"recovery-{self.session}.json"
        self.meta_file = recovery_dir() / f"recovery-{self.session}.meta.json"
        self.last_error = ""
        self._written_for = None
        self.timer = QTimer(self)
        self.timer.setInterval(int(interval_s * 1000))
        self.timer.timeout.connect(self.save_now)
        self.timer.start()
        doc.file_changed.connect(self._file_changed)

    def save_now(self) -> bool:
        """Write the recovery copy if there is unsaved work; True when written.  Never raises:
        it runs on a timer, and a failure is kept in `last_error` for the status bar."""
        if not self.doc.modified:
            return False
        if self._written_for is self.doc.scene and self.scene_file.exists():
            return False
        try:
            text = self.doc.text()
            self.scene_file.parent.mkdir(parents=True, exist_ok=True)
            atomic_write_text(self.scene_file, text)
            atomic_write_text(self.meta_file, json.dumps({
                "pid": self.pid, "session": self.session, "started": _process_started(self.pid),
                "scene_file": self.scene_file.name,      # for a reader; never used for deletion
                "original": str(self.doc.path) if self.doc.path else "", "saved_at": time.time()}) + "\n")
        except Exception as exc:    # noqa: BLE001  (a timer slot must not raise into Qt)
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
