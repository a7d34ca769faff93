"""The journal's file-system side: durable writes (fsync of files and folders),
the writer's lock, the data folder's listing and file hashes (POSIX; Windows
where noted)."""

from __future__ import annotations

import errno
import hashlib
import os
import re
import shutil
import tempfile
from collections.abc import Callable
from pathlib import Path, PurePosixPath

from probelog.journal_format import DATA_DIR, JOURNAL_NAME, LOCK_NAME, STAGING_PREFIX, JournalError

try:  # POSIX
    import fcntl
except ImportError:  # Windows (many probe-station PCs): byte-range lock instead of flock
    fcntl = None  # type: ignore[assignment]
    import msvcrt

# Flags that only some systems have: close-on-exec (POSIX), binary mode (Windows).
OPEN_FLAGS = getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_BINARY", 0)
_TEMP_RE = re.compile(r"^\..+\.tmp-\d+-\d+$")


def os_reason(exc: OSError, reading: bool = False) -> str:
    if exc.errno in (errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)):
        return "the disk is full (no space left)"
    if reading and exc.errno in (errno.EACCES, errno.EPERM):
        return "unreadable (permission denied)"
    if exc.errno in (errno.EROFS, errno.EACCES, errno.EPERM):
        return "the folder is read-only or not writable"
    return exc.strerror or str(exc)


def write_all(fd: int, data: bytes) -> None:
    view = memoryview(data)
    while view:
        n = os.write(fd, view)
        view = view[n:]


def lock_fd(fd: int) -> None:
    """Exclusive, non-blocking lock of an open file; OSError if another process holds it."""
    if fcntl is not None:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    else:
        os.lseek(fd, 0, os.SEEK_SET)
        msvcrt.locking(fd, msvcrt.LK_NBLCK, 1)


def writer_pid(folder: str | Path) -> str | None:
    """The pid (as text, "?" if unknown) of the process that has the session
    open for writing, or None when nobody holds its lock. Read-only: a missing
    lock file means no writer, and none is created."""
    try:
        fd = os.open(Path(folder) / LOCK_NAME, os.O_RDONLY | OPEN_FLAGS)
    except OSError:
        return None
    try:
        try:
            if fcntl is not None:
                fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
                fcntl.flock(fd, fcntl.LOCK_UN)
            else:
                msvcrt.locking(fd, msvcrt.LK_NBRLCK, 1)
                msvcrt.locking(fd, msvcrt.LK_UNLCK, 1)
            return None
        except OSError:
            try:
                return os.read(fd, 32).decode("ascii", "replace").strip() or "?"
            except OSError:  # Windows refuses to read a locked range
                return "?"
    finally:
        os.close(fd)


def fsync_dir(path: Path) -> None:
    """Make a rename or a new name in ``path`` durable (POSIX). Windows cannot open
    a folder for fsync; NTFS journals its metadata itself."""
    if not hasattr(os, "O_DIRECTORY"):
        return
    fd = os.open(path, os.O_RDONLY | os.O_DIRECTORY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)



def safe_rel(path: str) -> PurePosixPath | None:
    p = PurePosixPath(path)
    if p.is_absolute() or not p.parts or any(part in ("", ".", "..") for part in p.parts) or "\x00" in path:
        return None
    return p


def data_files(root: Path) -> tuple[list[str], list[str]]:
    """(data files, leftover temp files) under data/, as POSIX paths relative to root."""
    files: list[str] = []
    temps: list[str] = []
    base = root / DATA_DIR
    for dirpath, dirnames, filenames in os.walk(base):
        dirnames.sort()
        rel_dir = Path(dirpath).relative_to(root).as_posix()
        for name in sorted(filenames):
            (temps if _TEMP_RE.match(name) else files).append(f"{rel_dir}/{name}")
    return files, temps


def sha256_file(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()



def lock_session(folder: Path) -> int:
    """Open ``folder/.lock`` and take its exclusive lock (the one-writer rule);
    JournalError naming the holder's pid when another process has it."""
    try:
        fd = os.open(folder / LOCK_NAME, os.O_RDWR | os.O_CREAT | OPEN_FLAGS, 0o644)
    except OSError as exc:
        raise JournalError(f"{folder}: cannot open the session for writing: {os_reason(exc)}") from None
    try:
        lock_fd(fd)
    except OSError:
        try:
            os.lseek(fd, 0, os.SEEK_SET)
            holder = os.read(fd, 32).decode("ascii", "replace").strip() or "?"
        except OSError:  # Windows refuses to read a locked range
            holder = "?"
        finally:
            os.close(fd)
        raise JournalError(f"{folder}: the session is open for writing in another process "
                           f"(pid {holder}); close it there first") from None
    try:  # who holds it, for the message above; not needed for correctness
        os.ftruncate(fd, 0)
        os.lseek(fd, 0, os.SEEK_SET)
        os.write(fd, f"{os.getpid()}\n".encode())
    except OSError:
        pass
    return fd


def make_dirs(folder: Path) -> None:
    """Create ``folder`` and its missing parents, each new name made durable."""
    missing = []
    p = folder
    while not p.exists():
        missing.append(p)
        p = p.parent
    for d in reversed(missing):
        d.mkdir()
        fsync_dir(d.parent)  # the new folder's name is durable too


def atomic_write(files: list[tuple[Path, bytes]], tag: Callable[[], str]) -> None:
    """Temp name (``.<name>.tmp-<tag()>``), write, fsync; then rename each into
    place and fsync each folder once. A crash leaves either the old state or the
    whole file."""
    temps: list[Path] = []
    try:
        for target, data in files:
            temp = target.with_name(f".{target.name}.tmp-{tag()}")
            fd = os.open(temp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | OPEN_FLAGS, 0o644)
            temps.append(temp)
            try:
                write_all(fd, data)
                os.fsync(fd)
            finally:
                os.close(fd)
        for temp, (target, _) in zip(temps, files, strict=False):
            os.replace(temp, target)
    except BaseException:
        for temp in temps:  # our own unfinished temporary files, never a data file
            try:
                os.unlink(temp)
            except OSError:
                pass
        raise
    for folder in dict.fromkeys(target.parent for target, _ in files):
        fsync_dir(folder)


def make_session_folder(root: Path, session_id: str, unique: bool) -> tuple[Path, int, int]:
    """Build ``root/session_id/`` (empty journal, ``data/``) under a hidden staging
    name and rename it into place whole: (folder, journal fd, lock fd). A kill at
    any instant leaves either no session folder or one with its journal (a killed
    start leaves only a '.creating-*' folder, which no session list shows).
    ``unique``: take ``-2``, ``-3``, ... when the name is taken."""
    try:
        staging = Path(tempfile.mkdtemp(prefix=f"{STAGING_PREFIX}{session_id}-", dir=root))
    except OSError as exc:
        raise JournalError(f"{root}: cannot create a session folder: {os_reason(exc)}") from None
    lock = lock_session(staging)
    try:
        (staging / DATA_DIR).mkdir()
        fd = os.open(staging / JOURNAL_NAME, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_APPEND | OPEN_FLAGS,
                     0o644)
        os.fsync(fd)
        fsync_dir(staging)
    except OSError as exc:
        os.close(lock)
        shutil.rmtree(staging, ignore_errors=True)
        raise JournalError(f"{root / session_id}: cannot create the journal: {os_reason(exc)}") from None
    folder = root / session_id
    for n in range(1, 1000 if unique else 2):
        folder = root / (session_id if n == 1 else f"{session_id}-{n}")
        if folder.exists() or folder.is_symlink():
            continue
        try:
            # Atomic; of two processes racing for a name one wins, the other
            # finds the winner's folder not empty and tries the next name.
            os.rename(staging, folder)
            return folder, fd, lock
        except (FileExistsError, IsADirectoryError, NotADirectoryError):
            continue
        except OSError as exc:
            if exc.errno in (errno.ENOTEMPTY, errno.EEXIST):
                continue
            _drop(staging, fd, lock)
            raise JournalError(f"{folder}: cannot create the session folder: {os_reason(exc)}") from None
    _drop(staging, fd, lock)
    raise JournalError(f"{folder}: a session folder of that name exists already")


def _drop(staging: Path, fd: int, lock: int) -> None:
    os.close(fd)
    os.close(lock)
    shutil.rmtree(staging, ignore_errors=True)
