"""All-or-nothing file writes: write beside the target, flush to disk, then rename over it.

A crash or a full disk during the write leaves the previous file as it was.  Used for scenes,
CSV tables, images and the GUI's recovery copies.

What the rename would get wrong is handled first:
- a symlink is followed, so the real file is updated and the link stays a link;
- a target that is not a regular file (/dev/null, a terminal, a pipe) is written directly:
  renaming over it would replace the device node with a plain file; directories, sockets
  and block devices are refused;
- a read-only file (no write bit for anyone) is refused, even for root, since a rename
  would silently get around its protection;
- a file with several hard links is rewritten in place, so every name sees the new
  content (a rename would split it off the other names).  The new content is prepared
  and checked in a temporary file first, so an encoder failure still touches nothing.
"""
from __future__ import annotations

import os
import shutil
import stat
import tempfile
from pathlib import Path
from typing import Callable


class OutputRefused(OSError):
    """A target that must not be written (read-only, a directory, the same file as an input)."""


def atomic_write(path: str | os.PathLike, write: Callable[[str], None]) -> None:
    """Call write(temp_path) for a temporary file next to `path`, then put it in place.

    An empty result counts as a failure (an encoder that gave up without saying so)."""
    path = Path(path)
    st = _stat(path)
    if st is not None and not stat.S_ISREG(st.st_mode):
        _write_special(path, st, write)
        return
    if st is not None and not st.st_mode & 0o222:
        raise OutputRefused(f"{path} is read-only (mode {stat.S_IMODE(st.st_mode):o}); "
                            "make it writable or choose another name")
    real = Path(os.path.realpath(path))    # through symlinks: update the file, keep the link
    fd, tmp = tempfile.mkstemp(prefix=f".{real.name}.", suffix=".tmp", dir=str(real.parent))
    os.close(fd)
    try:
        write(tmp)
        if os.path.getsize(tmp) == 0:
            raise OSError(f"nothing was written to {path}")
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        if st is not None and st.st_nlink > 1:
            _copy_in_place(tmp, real)
            os.unlink(tmp)
            return
        os.chmod(tmp, _file_mode(st))   # mkstemp makes the file private (0600)
        if st is not None and os.geteuid() == 0:
            os.chown(tmp, st.st_uid, st.st_gid)   # root saving a user's file keeps it theirs
        os.replace(tmp, real)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def atomic_write_text(path: str | os.PathLike, text: str) -> None:
    # backslashreplace: a lone surrogate (possible only from code) is written as \udXXX text
    # instead of failing the whole write
    def write(tmp: str) -> None:
        with open(tmp, "w", encoding="utf-8", errors="backslashreplace", newline="\n") as fh:
            fh.write(text)
    atomic_write(path, write)


def _stat(path: Path) -> os.stat_result | None:
    """The target's status through symlinks; None when there is nothing there yet."""
    try:
        return path.stat()
    except FileNotFoundError:
        return None


def _write_special(path: Path, st: os.stat_result, write: Callable[[str], None]) -> None:
    """Character devices and pipes are written directly (there is nothing to keep)."""
    if not (stat.S_ISCHR(st.st_mode) or stat.S_ISFIFO(st.st_mode)):
        raise OutputRefused(f"{path} is {describe_kind(st.st_mode)}, not a file; choose a file name")
    write(str(path))


def _copy_in_place(tmp: str, real: Path) -> None:
    """Overwrite `real` with the bytes of `tmp`, keeping its inode (and so its other names).
    If this fails midway, the new content is still in `tmp`: the error says where."""
    try:
        with open(tmp, "rb") as src, open(real, "r+b") as dst:
            shutil.copyfileobj(src, dst)
            dst.truncate()
            dst.flush()
            os.fsync(dst.fileno())
    except OSError as exc:
        keep = real.with_name(real.name + ".new")
        try:
            os.replace(tmp, keep)
        except OSError:
            keep = Path(tmp)
        raise OSError(exc.errno, f"{exc.strerror or exc}; the new content is in {keep}") from exc


def describe_kind(mode: int) -> str:
    for test, text in ((stat.S_ISDIR, "a directory"), (stat.S_ISFIFO, "a pipe (FIFO)"),
                       (stat.S_ISCHR, "a character device"), (stat.S_ISBLK, "a block device"),
                       (stat.S_ISSOCK, "a socket")):
        if test(mode):
            return text
    return "not a regular file"


def _file_mode(st: os.stat_result | None) -> int:
    """The old file's mode, or the mode a new file would get under the current umask."""
    if st is not None:
        return stat.S_IMODE(st.st_mode)
    umask = os.umask(0)
    os.umask(umask)
    return 0o666 & ~umask


# ----------------------------------------------------------------------------- outputs vs inputs

def file_identity(path: str | os.PathLike) -> tuple | None:
    """What makes two names the same file: (device, inode) of an existing regular file (so
    symlinks and hard links compare equal), else its fully resolved path.  None for targets
    that are not regular files (/dev/null, a pipe, stdout "-"), which may be shared."""
    if str(path) == "-":
        return None
    try:
        st = os.stat(path)
    except FileNotFoundError:
        return ("path", os.path.realpath(path))
    except OSError:
        return ("path", os.path.realpath(path))
    if not stat.S_ISREG(st.st_mode):
        return None
    return ("inode", st.st_dev, st.st_ino)


def clashing_outputs(inputs: dict[str, str], outputs: dict[str, str]) -> list[str]:
    """Messages for every output that is the same file as an input or as another output.
    `inputs` and `outputs` map a label (such as "--csv") to a path."""
    seen: dict[tuple, str] = {}
    for label, p in inputs.items():
        ident = file_identity(p)
        if ident is not None:
            seen.setdefault(ident, f"the {label} {p}")
    out = []
    for label, p in outputs.items():
        ident = file_identity(p)
        if ident is None:
            continue
        if ident in seen:
            out.append(f"{label} {p}: found the same file as {seen[ident]}; expected a file of its own "
                       "(writing it would destroy the other)")
        else:
            seen[ident] = f"{label} {p}"
    return out
