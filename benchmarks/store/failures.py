"""What goes wrong while a run file is read or written, told apart and said in one line.

Three kinds, because each asks the user for something else:
- no room: the disk is full (ENOSPC, EDQUOT) or the process's file-size limit is reached (EFBIG),
  or the room check before a write (ensure_room) found too little: make room and go on;
- damaged: HDF5 could not read a part of the file it needed (a chunk whose filter fails, an
  object header it cannot decode): the disk is fine, the file is not;
- any other failed write (EIO, EROFS: the medium): check the disk.

`file_failure` is the one handler that `run` and `sweep` use when a write into their results file
raises. The room check raises NoRoom before writing, because HDF5 does not survive a failed
write: it reports some failures only from object destructors, keeps going on a half-written file
and can crash the process.
"""

from __future__ import annotations

import errno
import gc
import os
import resource
import sys

import h5py

from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.store.format import damaged, first_line

NO_ROOM = "no room"
DAMAGED = "damaged"
WRITE = "write"

# errno values that mean "no room", and the words of each as the OS says them.
_NO_ROOM_CODES = (errno.ENOSPC, errno.EFBIG, errno.EDQUOT)
_OTHER_WRITE_CODES = (errno.EROFS, errno.EIO)

# Words of HDF5 (1.10 to 2.0) for a read that failed while writing: the chunk's filter
# (deflate, fletcher32) rejected its bytes, or a header or index could not be decoded.
_READ_WORDS = (
    "filter returned failure during read",
    "can't read data",
    "read failed",
    "unable to read",
    "can't synchronously read",
    "bad object header",
    "wrong b-tree signature",
    "incorrect metadata checksum",
    "bad local heap signature",
    "bad heap free list",
    "unable to load",
    "can't decode",
    "unable to deserialize",
    "truncated file",
)


class NoRoom(UserError):
    """The disk (or the process's file-size limit) has no room for the next write. Raised
    before writing (see the module docstring)."""


# Room kept free beyond the next write's own bytes, for HDF5's bookkeeping (B-tree nodes, object
# headers, the free-space list) written at the same flush. Measured: a flush of one batch adds a
# few kB of metadata; 256 kB leaves a wide margin.
ROOM_MARGIN = 256 * 1024


def room_left(f: h5py.File) -> float:
    """Bytes the open file may still grow by: the free space of its file system for this user
    and the room under RLIMIT_FSIZE (emulated full disks, batch systems), whichever is smaller.
    Infinite for an in-memory file."""
    if f.driver != "sec2" and f.driver != "stdio":
        return float("inf")
    path = f.filename
    st = os.statvfs(os.path.dirname(os.path.abspath(path)) or ".")
    left = float(st.f_bavail) * st.f_frsize
    soft, _ = resource.getrlimit(resource.RLIMIT_FSIZE)
    if soft != resource.RLIM_INFINITY:
        left = min(left, float(soft) - f.id.get_filesize())
    return left


def ensure_room(f: h5py.File, nbytes: float, what: str) -> None:
    """Raise NoRoom unless the file can grow by nbytes plus ROOM_MARGIN."""
    left = room_left(f)
    need = float(nbytes) + ROOM_MARGIN
    if left < need:
        raise NoRoom(
            f"{f.filename}: not enough room for {what}: {max(left, 0.0) / 1e6:.3g} MB left on the "
            f"disk or under the file-size limit, {need / 1e6:.3g} MB needed"
        )


def failure_kind(exc: BaseException) -> str | None:
    """NO_ROOM, DAMAGED or WRITE for an exception raised by h5py or the OS on a file, None for
    anything else (a programming error, which must not be dressed up as a file problem).

    h5py raises OSError for most failures, RuntimeError for a failed write during a flush or
    close ('file write failed ... errno = 27') and KeyError for an object header it cannot
    read."""
    if isinstance(exc, NoRoom):
        return NO_ROOM
    if isinstance(exc, KeyError):
        return DAMAGED
    if not isinstance(exc, (OSError, RuntimeError)):
        return None
    text = str(exc).lower()
    code = getattr(exc, "errno", None)
    if code in _NO_ROOM_CODES or any(os.strerror(c).lower() in text for c in _NO_ROOM_CODES):
        return NO_ROOM
    if any(f"errno = {c}," in text for c in _NO_ROOM_CODES):
        return NO_ROOM
    if any(words in text for words in _READ_WORDS):
        return DAMAGED
    if isinstance(exc, OSError) or "write failed" in text or "errno =" in text:
        return WRITE
    return None


def write_reason(exc: BaseException) -> str:
    """The words of the errno behind a failed write where there is one, else its first line."""
    for code in (*_NO_ROOM_CODES, *_OTHER_WRITE_CODES):
        if getattr(exc, "errno", None) == code or os.strerror(code) in str(exc):
            return os.strerror(code)
    text = getattr(exc, "strerror", None) or str(exc) or type(exc).__name__
    return text.splitlines()[0]


def close_after_failure(f: h5py.File) -> None:
    """Close a file whose writes fail. HDF5's close flushes again and fails for the same reason,
    and h5py reports that, and every later release of an object of that file (the frames of the
    failed write hold some), from destructors as 'Exception ignored' noise on stderr. The
    one-line error the caller raises is the one that counts, and the process is about to end
    with it, so such destructor reports stay silenced from here on."""
    sys.unraisablehook = lambda _info: None
    try:
        f.close()
    except (OSError, RuntimeError):
        pass
    gc.collect()


def file_failure(exc: BaseException, f, path, *, in_hand: str, next_step: str) -> UserError | None:
    """The one line for an exception raised while a run file was written, after closing the
    file; None when the exception is not a file failure (the caller re-raises it).

    in_hand: what became of the work under way ("the run in hand is not marked complete");
    next_step: how to go on once the cause is mended ("go on with --resume")."""
    kind = failure_kind(exc)
    if kind is None:
        return None
    if f is not None:
        close_after_failure(f)
    if kind == DAMAGED:
        return damaged(
            path,
            f"HDF5 could not read a part it needed while writing ({first_line(exc)}); this is "
            f"not a full disk: {in_hand}; check the file with `topdrift summary`, keep a copy, "
            "and write new runs into another file",
        )
    # HDF5 may not finish its own bookkeeping after a failed write, so the file can be left
    # unreadable: the message says to check it rather than promise that going on works.
    mend = "make room" if kind == NO_ROOM else "check the disk"
    return UserError(
        f"{path}: cannot write the results ({write_reason(exc)}); {in_hand}: {mend}, check the "
        f"file with `topdrift summary`, then {next_step}"
    )


class damage_is_an_error:
    """Context manager: an HDF5 read that fails inside it (the file is cut short or has
    overwritten bytes; HDF5 notices only where it reads) becomes one UserError line naming the
    file. h5py reports such failures as OSError, some as RuntimeError or KeyError."""

    def __init__(self, path):
        self.path = path

    def __enter__(self):
        return self

    def __exit__(self, kind, exc, _tb):
        if kind is not None and issubclass(kind, (OSError, RuntimeError, KeyError)):
            raise damaged(self.path, f"HDF5 cannot read it ({first_line(exc)})") from None
        return False
