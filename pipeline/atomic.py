"""Atomic file output: write to a temporary name in the same folder, rename when complete.

A file at its final name is then always whole, also after Ctrl-C or a crash; an existing file
is replaced only by a complete new one (``os.replace`` is atomic within one filesystem).
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path


@contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success rename it to ``path``, on any
    exception (KeyboardInterrupt included) remove it and re-raise."""
    final = Path(path)
    tmp = final.with_name(f".{final.name}.{os.getpid()}.tmp")
    try:
        yield tmp
        os.replace(tmp, final)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
