"""What a path names, in words, for the messages that refuse one that is not a regular file
where a command would write one (a figure, a report): a directory, a named pipe or a device is
not "no such file", it exists, and the message says what it is. Opening a named pipe would also
block until some other process opened it too, so these writers ask here first. (Run files have
the reader's own check, reader.check_path.)
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
