"""Writing files so that a crash never leaves a half-written one: the one writer of loopkit and its app.

Every file loopkit or its app writes (design files, exports, the app's own
files) goes through :func:`write_text_atomic` or :func:`write_files_atomic`:

1. the target is checked first: an existing read-only file is refused (not
   replaced, even where the folder would allow it);
2. the content goes to a new temporary file beside the target, named
   ``.NAME.PID.RANDOM.tmp`` (plus the target's suffix for :func:`atomic_path`),
   is flushed and synced to disk;
3. the temporary file gets the target's permissions (an existing file keeps its
   own; a new one gets ``0666`` less the umask, as any program's new file, unless
   the caller asks for others) and is renamed over the target
   (:func:`os.replace`, atomic on one file system).

A device or pipe as the target (``/dev/stdout``, a FIFO) is written in place,
after every regular file's temporary is complete.

A process killed between steps 2 and 3 leaves its temporary file behind; the
next save of the same file removes such leftovers (those whose process no
longer runs on this machine, or that are more than a day old).  Errors are
:class:`OSError` naming the target, never the temporary file.

:func:`write_files_atomic` writes several files as one step: every temporary
file is written before the first rename, so a failure while writing (a full
disk, a folder that is not writable) leaves every target as it was.
"""

from __future__ import annotations

import contextlib
import errno
import os
import secrets
import stat
import time
from collections.abc import Iterable, Iterator
from pathlib import Path

__all__ = [
    "atomic_path",
    "check_writable",
    "remove_stale_temporaries",
    "temporary_name",
    "write_files_atomic",
    "write_text_atomic",
]

#: A temporary file without a process id (older loopkit versions) counts as left over after this long (s).
_ORPHAN_AGE_S = 60.0
#: Any temporary file this old counts as left over, whoever made it (s).
_MAX_AGE_S = 86400.0


def temporary_name(path: Path, suffix: str = "") -> Path:
    """A fresh temporary file name beside ``path``: ``.NAME.PID.RANDOM.tmp`` (``suffix`` appended)."""
    return path.parent / f".{path.name}.{os.getpid()}.{secrets.token_hex(6)}.tmp{suffix}"


def _pid_running(pid: int) -> bool:
    if pid == os.getpid() or os.name != "posix":  # (os.kill would end a process on Windows: rely on the age there)
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError, ValueError):
        return pid > 0  # another user's process (or an absurd number: not ours to judge)
    except OSError:
        return True
    return True


def remove_stale_temporaries(path) -> list[Path]:
    """Remove temporary files that earlier, interrupted saves of ``path`` left beside it.

    A temporary file is stale when the process that made it no longer runs on
    this machine, when it carries no process id and is more than a minute old,
    or when it is more than a day old.  Returns the files removed.
    """
    path = Path(path)
    prefix, removed = f".{path.name}.", []
    try:
        names = os.listdir(path.parent)
    except OSError:
        return removed
    now = time.time()
    for name in names:
        ending = next((e for e in (".tmp", f".tmp{path.suffix}") if name.endswith(e)), None)
        if not name.startswith(prefix) or ending is None:
            continue
        middle = name[len(prefix) : -len(ending)]
        candidate = path.parent / name
        try:
            age = now - candidate.lstat().st_mtime
        except OSError:
            continue
        pid_text, dot, _ = middle.partition(".")
        if dot and pid_text.isdigit():
            stale = not _pid_running(int(pid_text)) or age > _MAX_AGE_S
        else:
            stale = age > _ORPHAN_AGE_S
        if stale:
            with contextlib.suppress(OSError):
                candidate.unlink()
                removed.append(candidate)
    return removed


def _target(path) -> Path:
    path = Path(path)
    if path.is_symlink() and path.is_file():
        path = path.resolve()  # replace the file the link points to, keep the link
    return path  # (a link to a device or pipe, /dev/stdout, is written through as given)


def _named(exc: OSError, path: Path) -> OSError:
    """The same error, naming the target instead of a temporary file."""
    code = exc.errno if exc.errno is not None else errno.EIO
    return OSError(code, exc.strerror or str(exc), str(path))


def _existing_mode(path: Path) -> int | None:
    """Permissions of an existing target; refuses a read-only one."""
    try:
        st = os.stat(path)
    except FileNotFoundError:
        return None
    except OSError as exc:
        raise _named(exc, path) from None
    if stat.S_ISDIR(st.st_mode):
        raise IsADirectoryError(errno.EISDIR, "is a folder, not a file", str(path))
    mode = stat.S_IMODE(st.st_mode)
    if not stat.S_ISREG(st.st_mode):
        return None  # a device or pipe (/dev/stdout, a FIFO): written in place, nothing to rename over
    # os.access alone lets root replace anything; a file nobody may write is read-only for us too
    if not mode & (stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH) or not os.access(path, os.W_OK):
        raise PermissionError(
            errno.EACCES, "read-only file: not replaced (make it writable or choose another file)", str(path)
        )
    return mode


def check_writable(path) -> None:
    """Refuse now what a write would refuse later: an existing read-only file or a folder (OSError naming it)."""
    _existing_mode(_target(path))


def _sync_folder(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return  # not possible on every platform (Windows); the rename is still atomic
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


class _Pending:
    """One target and its temporary file, written but not yet renamed."""

    def __init__(self, path, new_mode: int | None):
        self.path = _target(path)
        self.mode = _existing_mode(self.path)
        self.direct = self.path.exists() and not self.path.is_file()  # a device or pipe
        self.new_mode = new_mode
        self.tmp: Path | None = None

    def open(self, suffix: str = "") -> int:
        remove_stale_temporaries(self.path)
        while True:
            tmp = temporary_name(self.path, suffix)
            try:
                fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
            except FileExistsError:
                continue
            except OSError as exc:
                raise _named(exc, self.path) from None
            self.tmp = tmp
            return fd

    def finish_permissions(self) -> None:
        mode = self.mode if self.mode is not None else self.new_mode
        if mode is not None:
            os.chmod(self.tmp, mode)

    def discard(self) -> None:
        if self.tmp is not None:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(self.tmp)
            self.tmp = None


def _write(pending: _Pending, data: bytes) -> None:
    fd = pending.open()
    with os.fdopen(fd, "wb") as fh:
        pending.finish_permissions()
        fh.write(data)
        fh.flush()
        os.fsync(fh.fileno())


def _encode(text) -> bytes:
    return text if isinstance(text, bytes) else text.encode("utf-8")


def write_files_atomic(files: Iterable[tuple[object, str | bytes]], new_mode: int | None = None) -> list[Path]:
    """Write several files as one step: all to temporary files first, then all renamed.

    Parameters
    ----------
    files : iterable of (path, content)
        Targets and their content (text is written as UTF-8, ``\\n`` line ends kept).
    new_mode : int, optional
        Permissions of a file that does not exist yet (default: ``0666`` less the umask).

    Returns
    -------
    list of Path
        The files written (symbolic links resolved).

    Raises
    ------
    OSError
        Naming the target: a read-only target, a folder that cannot be written,
        a full disk.  Until every temporary file is complete, every target is
        left as it was and no temporary file stays.
    """
    items = [(_Pending(path, new_mode), _encode(content)) for path, content in files]  # refuse before writing
    try:
        for pending, data in items:
            try:
                if not pending.direct:
                    _write(pending, data)
            except OSError as exc:
                raise _named(exc, pending.path) from None
        for pending, data in items:
            try:
                if pending.direct:
                    with open(pending.path, "wb") as fh:
                        fh.write(data)
                else:
                    os.replace(pending.tmp, pending.path)
            except OSError as exc:
                raise _named(exc, pending.path) from None
            pending.tmp = None
    except BaseException:
        for pending, _ in items:
            pending.discard()
        raise
    for folder in {p.path.parent for p, _ in items if not p.direct}:
        _sync_folder(folder)
    return [p.path for p, _ in items]


def write_text_atomic(path, text: str | bytes, new_mode: int | None = None) -> Path:
    """Write one file atomically (see the module's description); returns the path written."""
    return write_files_atomic([(path, text)], new_mode)[0]


@contextlib.contextmanager
def atomic_path(path, new_mode: int | None = None) -> Iterator[Path]:
    """A temporary path for a writer that needs a file name (an image exporter); moved into place on success.

    The caller writes the whole file at the yielded path; on leaving the block
    without an error it is synced, given the target's permissions and renamed
    over ``path``; on an error it is removed and the target left as it was.
    """
    pending = _Pending(path, new_mode)
    os.close(pending.open(pending.path.suffix))  # the writer may pick the format by the suffix
    try:
        yield pending.tmp
        with open(pending.tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        pending.finish_permissions()
        try:
            os.replace(pending.tmp, pending.path)
        except OSError as exc:
            raise _named(exc, pending.path) from None
        pending.tmp = None
    finally:
        pending.discard()
    _sync_folder(pending.path.parent)
