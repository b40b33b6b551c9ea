"""Reading input files: regular files only, never more than a limit.

Every file calcscout reads (rule files and their includes, saved JSON reports,
exported ``.smt2`` files, a solver's output) goes through :func:`read_bounded`.
A device (``/dev/zero``), a FIFO or a folder is refused before anything is
read, and at most ``limit + 1`` bytes are ever read, so a hostile path can
neither hang the run nor fill the memory.
"""

from __future__ import annotations

import errno
import hashlib
import os
import stat
from collections.abc import Iterable
from pathlib import Path

from calcscout.rules.core.errors import FileError

MAX_INPUT_BYTES = 4 * 1024 * 1024  # rule files, .smt2 headers and solver outputs are small
# a shard report keeps a line per undecided or normalised case: large runs make large ones
MAX_REPORT_BYTES = 256 * 1024 * 1024


def file_kind(mode: int) -> str:
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISFIFO(mode):
        return "a FIFO (named pipe)"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a regular file"


def read_bounded(path: str | os.PathLike, shown: str | None = None,
                 limit: int = MAX_INPUT_BYTES, what: str = "file") -> bytes:
    """The bytes of the regular file ``path``; a FileError (exit 2) for anything else.

    The file is opened without blocking (a FIFO with no writer would otherwise
    hang the open) and judged by ``fstat`` of the open descriptor, so what is
    judged is what is read.
    """
    shown = shown or os.fspath(path)
    if os.fspath(path) == "":
        raise FileError("an empty path names no file")
    try:
        fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_NOCTTY", 0))
    except FileNotFoundError:
        raise FileError(f"no such file: {shown}") from None
    except OSError as e:
        if e.errno == errno.ELOOP:
            raise FileError(f"cannot read {shown}: a loop of symbolic links") from None
        raise FileError(f"cannot read {shown}: {e.strerror}") from None
    try:
        mode = os.fstat(fd).st_mode
        if not stat.S_ISREG(mode):
            raise FileError(f"{shown} is {file_kind(mode)}; calcscout reads only regular files "
                            f"as its {what}")
        chunks: list[bytes] = []
        total = 0
        while total <= limit:
            try:
                chunk = os.read(fd, min(1 << 20, limit + 1 - total))
            except OSError as e:
                raise FileError(f"cannot read {shown}: {e.strerror}") from None
            if not chunk:
                break
            chunks.append(chunk)
            total += len(chunk)
    finally:
        os.close(fd)
    if total > limit:
        raise FileError(f"{shown} is larger than {limit // (1024 * 1024)} MiB; a {what} "
                        "may be at most that", hint=f"is this the {what} you meant?")
    return b"".join(chunks)


def read_text(path: str | os.PathLike, shown: str | None = None,
              limit: int = MAX_INPUT_BYTES, what: str = "file") -> str:
    """:func:`read_bounded`, decoded as UTF-8 (a FileError if it is not)."""
    shown = shown or os.fspath(path)
    data = read_bounded(path, shown, limit, what)
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as e:
        raise FileError(f"{shown} is not UTF-8 text (byte 0x{data[e.start]:02x} at offset "
                        f"{e.start})") from None


def identity(path: str | os.PathLike) -> tuple[int, int] | None:
    """The (device, inode) pair of the file ``path`` names, following symbolic links;
    None when there is no such file."""
    try:
        st = os.stat(path)
    except (OSError, ValueError):
        return None
    return (st.st_dev, st.st_ino)


def sources_digest(paths: Iterable[str | os.PathLike]) -> str:
    """A SHA-256 of the contents of ``paths`` in order (a rule file and its includes).

    Each file's length goes in before its bytes, so no two different lists of
    contents give the same stream.
    """
    h = hashlib.sha256()
    for p in paths:
        data = read_bounded(Path(p), what="rule file")
        h.update(len(data).to_bytes(8, "big"))
        h.update(data)
    return "sha256:" + h.hexdigest()
