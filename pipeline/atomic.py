"""Atomic file output: write to a temporary name in the same folder, rename when complete.

A file at its final name is then always whole, also after Ctrl-C or a crash; an existing file
is replaced only by a complete new one (``os.replace`` is atomic within one filesystem).
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


@contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """Yield a unique temporary path (``.<name>.*.tmp``) beside ``path``; on success rename it
    to ``path``, on any exception (KeyboardInterrupt included) remove it and re-raise.

    The temporary file exists (empty) when yielded; writers open it for writing. It gets the
    usual permissions of a new file (``mkstemp`` would leave it private).
    """
    final = Path(path)
    fd, name = tempfile.mkstemp(dir=final.parent, prefix=f".{final.name}.", suffix=".tmp")
    os.close(fd)
    tmp = Path(name)
    try:
        os.chmod(tmp, 0o666 & ~_umask())
        yield tmp
        os.replace(tmp, final)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
