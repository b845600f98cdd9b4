"""Figure files: PNG only, checked before anything is drawn, and never written over a file that
topdrift did not write itself.

Every figure topdrift saves carries the PNG text chunk `Software` = "topdrift ..." (PNG's own
keyword for the program that made the image, PNG specification sec. 11.3.4). A path is fit to
write to when nothing is there, or when it holds a PNG with that chunk: a figure of an earlier
`plot`, `report` or `roundoff --plot`, which the command may draw again. Anything else (a
results file, notes, a picture of the user's own) is refused with one line, unless the command
offers `--force` and is given it. A figure is written to a temporary file beside its target and
renamed over it when complete, so that a stop half way leaves no half-written figure.
"""

from __future__ import annotations

import os
import struct
from pathlib import Path

from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.store.paths import kind

SUFFIX = ".png"
SOFTWARE = "topdrift"
_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_SCAN_BYTES = 1 << 20  # text chunks come before the image data; a figure's are in its first kB


def software_tag() -> str:
    """The `Software` text of the figures this topdrift writes."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        return f"{SOFTWARE} {version('topdrift')}"
    except PackageNotFoundError:
        return SOFTWARE


def written_by_topdrift(path) -> bool:
    """True for a PNG file whose `Software` text chunk names topdrift."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(_SCAN_BYTES)
    except OSError:
        return False
    if not head.startswith(_SIGNATURE):
        return False
    at = len(_SIGNATURE)
    while at + 8 <= len(head):
        (length,) = struct.unpack(">I", head[at : at + 4])
        ctype = head[at + 4 : at + 8]
        data = head[at + 8 : at + 8 + length]
        if ctype == b"IDAT" or ctype == b"IEND":
            return False
        if ctype == b"tEXt":
            key, _, text = data.partition(b"\x00")
            if key == b"Software" and text.startswith(SOFTWARE.encode()):
                return True
        at += 12 + length
    return False


def check_figure_path(path, label: str, *, keep=(), force: bool = False, force_option=None) -> Path:
    """Refuse, in one line, a figure path topdrift must not write: another extension than .png,
    something that is not a regular file, a file in `keep` (the results file being read), or an
    existing file topdrift did not write (unless `force`; `force_option` names the option that
    sets it, for the message)."""
    path = Path(path)
    for other in keep:
        if path.resolve() == Path(other).resolve():
            raise UserError(f"{label} '{path}' is the results file itself; choose another name")
    if path.suffix.lower() != SUFFIX:
        raise UserError(
            f"{label} '{path}': figures are written as PNG; give a file name ending in .png"
        )
    k = kind(path)
    if k not in (None, "missing"):
        raise UserError(f"{label} '{path}' is {k}; give a file name ending in .png")
    if k is None and not force and not written_by_topdrift(path):
        also = f", or pass {force_option}" if force_option else ""
        raise UserError(
            f"{label} '{path}' exists and is not a figure topdrift wrote; remove it or choose "
            f"another name{also}"
        )
    return path


def save_png(fig, path, **savefig_kw) -> Path:
    """Save a matplotlib figure as PNG at path, through a temporary file renamed over it."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.part")
    try:
        fig.savefig(tmp, format="png", metadata={"Software": software_tag()}, **savefig_kw)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
    return path
