"""The open document: the scene, its file, and the undo stack.

Every edit replaces the whole scene by a new one (see `edits`); an undo step remembers the scene
before and after, so undo gives back exactly the scene that was there.  Steps of one drag share
a merge key and collapse into one step.
"""
from __future__ import annotations

import itertools
from pathlib import Path

from PySide6.QtCore import QObject, Signal
from PySide6.QtGui import QUndoCommand, QUndoStack

from raytrace.scene import Scene
from raytrace.scene_io import load_scene, save_scene, scene_to_text

_MERGE_ID = 4711
_drag_tokens = itertools.count(1)


def new_drag_token() -> int:
    """A fresh merge key: edits pushed with the same key become one undo step."""
    return next(_drag_tokens)


class SceneEdit(QUndoCommand):
    def __init__(self, doc: "Document", before: Scene, after: Scene, text: str, merge_key: int = 0):
        super().__init__(text)
        self.doc, self.before, self.after, self.merge_key = doc, before, after, merge_key

    def redo(self) -> None:
        self.doc._set_scene(self.after)

    def undo(self) -> None:
        self.doc._set_scene(self.before)

    def id(self) -> int:
        return _MERGE_ID if self.merge_key else -1

    def mergeWith(self, other) -> bool:
        if not isinstance(other, SceneEdit) or other.merge_key != self.merge_key:
            return False
        self.after = other.after
        return True


class Document(QObject):
    """Holds the scene; emits `changed` after every edit, undo, redo, open or new."""

    changed = Signal()
    file_changed = Signal()      # path or saved state changed

    def __init__(self, parent=None):
        super().__init__(parent)
        self.scene = Scene(name="untitled")
        self.path: Path | None = None
        self.epoch = 0           # bumps when a different document is loaded
        self.undo_stack = QUndoStack(self)
        self.undo_stack.cleanChanged.connect(self._clean_changed)
        self._force_dirty = False

    def _clean_changed(self, _clean: bool) -> None:
        self.file_changed.emit()

    # --- editing
    def apply(self, new_scene: Scene, text: str, merge_key: int = 0) -> None:
        if new_scene == self.scene:
            return
        self.undo_stack.push(SceneEdit(self, self.scene, new_scene, text, merge_key))

    def _set_scene(self, scene: Scene) -> None:
        self.scene = scene
        self.changed.emit()

    @property
    def modified(self) -> bool:
        return self._force_dirty or not self.undo_stack.isClean()

    # --- files
    def replace(self, scene: Scene, path: Path | None, dirty: bool = False) -> None:
        """Start over on another scene (new, open, recover): the undo history is cleared."""
        self.undo_stack.clear()
        self.scene = scene
        self.path = path
        self.epoch += 1
        self._force_dirty = dirty
        self.undo_stack.setClean()
        self.changed.emit()
        self.file_changed.emit()

    def open(self, path: str | Path) -> None:
        """Load a file; raises SceneError (with .problems) and leaves the document unchanged.

        Geometry problems (overlapping parts, a boundary crossing itself) do not stop the load:
        the scene opens so it can be fixed, and `gui.problems` lists and marks them."""
        scene = load_scene(path, check_shapes=False)
        self.replace(scene, Path(path))

    def save(self, path: str | Path | None = None) -> None:
        """Save atomically; on OSError the document stays marked unsaved and the error propagates."""
        target = Path(path) if path is not None else self.path
        if target is None:
            raise ValueError("no file name given")
        save_scene(self.scene, target)
        self.path = target
        self._force_dirty = False
        self.undo_stack.setClean()
        self.file_changed.emit()

    def text(self) -> str:
        return scene_to_text(self.scene)

    @property
    def title(self) -> str:
        return self.path.name if self.path else "untitled"
