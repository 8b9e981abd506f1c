"""All-or-nothing file writes: write beside the target, flush to disk, then rename over it.

A crash or a full disk during the write leaves the previous file as it was.  Used for scenes,
CSV tables, images and the GUI's recovery copies."""
from __future__ import annotations

import os
import tempfile
from pathlib import Path
from typing import Callable


def atomic_write(path: str | os.PathLike, write: Callable[[str], None]) -> None:
    """Call write(temp_path) for a temporary file next to `path`, then rename it over `path`.

    An empty result counts as a failure (an encoder that gave up without saying so)."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=str(path.parent or "."))
    os.close(fd)
    try:
        write(tmp)
        if os.path.getsize(tmp) == 0:
            raise OSError(f"nothing was written to {path}")
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.chmod(tmp, _file_mode(path))   # mkstemp makes the file private (0600)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def atomic_write_text(path: str | os.PathLike, text: str) -> None:
    def write(tmp: str) -> None:
        with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
    atomic_write(path, write)


def _file_mode(path: Path) -> int:
    """The old file's mode, or the mode a new file would get under the current umask."""
    try:
        return path.stat().st_mode & 0o777
    except OSError:
        umask = os.umask(0)
        os.umask(umask)
        return 0o666 & ~umask
