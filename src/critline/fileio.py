"""Safe file writing: atomic replace, and never overwrite unless told."""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterable
from pathlib import Path

from critline.errors import UsageError


def atomic_write_pieces(path: str | Path, pieces: Iterable[str | bytes], overwrite: bool = True) -> Path:
    """Write ``pieces`` (bytes, or text as UTF-8) to ``path`` through a temporary file and a rename.

    A reader never sees a half-written file; a crash or a failing piece leaves the old file
    (or none).  With ``overwrite=False`` an existing file is an error, and the file is linked
    into place only if the name is still free.  Pieces let a large document be written
    without holding it whole in memory.
    """
    path = Path(path)
    if not overwrite and path.exists():
        raise UsageError(f"{path}: already exists (refusing to overwrite; pass the overwrite option)")
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        # mkstemp makes 0600 files; give the file the mode an ordinary open() would
        umask = os.umask(0)
        os.umask(umask)
        os.fchmod(fd, 0o666 & ~umask)
        with os.fdopen(fd, "wb") as fh:
            for piece in pieces:
                fh.write(piece.encode("utf-8") if isinstance(piece, str) else piece)
            fh.flush()
            os.fsync(fh.fileno())
        if not overwrite:
            # link() fails if the target appeared meanwhile: no race overwrites a file
            try:
                os.link(tmp, path)
            except FileExistsError:
                raise UsageError(f"{path}: already exists (refusing to overwrite)") from None
            os.unlink(tmp)
        else:
            os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


def atomic_write_bytes(path: str | Path, data: bytes, overwrite: bool = True) -> Path:
    """Write ``data`` to ``path`` through a temporary file and a rename (see :func:`atomic_write_pieces`)."""
    return atomic_write_pieces(path, (data,), overwrite=overwrite)


def atomic_write_text(path: str | Path, text: str, overwrite: bool = True) -> Path:
    return atomic_write_bytes(path, text.encode("utf-8"), overwrite=overwrite)
