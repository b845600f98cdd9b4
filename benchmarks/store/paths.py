"""What a path names, in words, for the messages that refuse one that is not a regular file.

A directory, a named pipe or a device given where a results file is expected is not "no such
file": it exists, and the message says what it is. Opening a named pipe would also block until
some other process writes into it, so every reader and writer asks here first.
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

_KINDS = (
    (stat.S_ISDIR, "a directory"),
    (stat.S_ISFIFO, "a named pipe (FIFO)"),
    (stat.S_ISSOCK, "a socket"),
    (stat.S_ISCHR, "a character device"),
    (stat.S_ISBLK, "a block device"),
)


def kind(path) -> str | None:
    """None for a regular file (or a link to one); else what the path is: 'missing',
    'a directory', 'a named pipe (FIFO)', ..., or 'a broken symbolic link'."""
    path = Path(path)
    try:
        mode = os.stat(path).st_mode
    except FileNotFoundError:
        return "a broken symbolic link" if os.path.islink(path) else "missing"
    except NotADirectoryError:
        return "missing"
    except OSError as exc:
        return f"unreadable ({exc.strerror or exc})"
    if stat.S_ISREG(mode):
        return None
    for test, words in _KINDS:
        if test(mode):
            return words
    return "not a regular file"


def not_a_file(path, what: str = "a results file") -> str | None:
    """The message for a path that exists but is no regular file, or None (a regular file, or
    nothing there)."""
    k = kind(path)
    if k is None or k == "missing":
        return None
    return f"{path}: is {k}, not {what}"
