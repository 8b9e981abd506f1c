"""Recently opened scene files, kept in a small JSON file in the application's home."""
from __future__ import annotations

import json
from pathlib import Path

from raytrace.scene_io import atomic_write_text

from .autosave import app_home

MAX_RECENT = 10


def _file() -> Path:
    return app_home() / "recent.json"


def recent_files() -> list[str]:
    try:
        items = json.loads(_file().read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return []
    return [str(x) for x in items if isinstance(x, str)][:MAX_RECENT] if isinstance(items, list) else []


def add_recent(path: str | Path) -> list[str]:
    p = str(Path(path).resolve())
    items = [p] + [x for x in recent_files() if x != p]
    items = items[:MAX_RECENT]
    try:
        _file().parent.mkdir(parents=True, exist_ok=True)
        atomic_write_text(_file(), json.dumps(items, indent=1) + "\n")
    except OSError:
        pass   # a read-only home only costs the list, never the user's work
    return items
