"""Atomic file output: write to a temporary name in the same folder, rename when complete.

A file at its final name is then always whole, also after Ctrl-C or a crash; an existing file
is replaced only by a complete new one (``os.replace`` is atomic within one filesystem).
"""

from __future__ import annotations

import os
import signal
import sys
import tempfile
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

#: Set once the user asked to stop (Ctrl-C under :func:`stop_on_interrupt`). Python delivers
#: KeyboardInterrupt at any bytecode, also inside a weakref callback or ``__del__``, where it
#: is printed and lost; this flag is not lost, and :func:`atomic_path` checks it before it
#: renames a file into place, so an interrupted run never commits a result.
_interrupted = threading.Event()

#: The signal that stopped the run (SIGINT, SIGTERM or SIGHUP), for the exit code 128 + it.
_signal_received: list[int] = []


class Terminated(KeyboardInterrupt):
    """The run was asked to stop by a signal (SIGTERM, SIGHUP): handled like Ctrl-C."""

    def __init__(self, signum: int) -> None:
        super().__init__(signum)
        self.signum = signum


def stop_signal() -> int:
    """The signal that stopped the run (SIGINT when none was recorded)."""
    return _signal_received[-1] if _signal_received else int(signal.SIGINT)


def interrupt_requested() -> bool:
    """True once Ctrl-C was pressed under :func:`stop_on_interrupt`."""
    return _interrupted.is_set()


@contextmanager
def stop_on_interrupt() -> Iterator[None]:
    """Within the block, Ctrl-C (SIGINT), SIGTERM and SIGHUP all raise KeyboardInterrupt
    (:class:`Terminated` for the last two) and set the flag of :func:`interrupt_requested`;
    at the end of the block a set flag raises KeyboardInterrupt (an interrupt lost on its
    way up still stops the run). The flag is cleared on entry and exit. Main thread only;
    elsewhere a no-op."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum: int, frame: Any) -> None:
        _interrupted.set()
        _signal_received.append(signum)
        if signum == signal.SIGINT:
            raise KeyboardInterrupt
        raise Terminated(signum)

    def unraisable(info: Any) -> None:
        # an interrupt raised where Python cannot propagate it (a weakref callback, __del__)
        # is not lost (the flag stops the run) and needs no traceback on the user's screen
        if isinstance(info.exc_value, KeyboardInterrupt):
            return
        previous_hook(info)

    _interrupted.clear()
    _signal_received.clear()
    signals = [signal.SIGINT] + [getattr(signal, n) for n in ("SIGTERM", "SIGHUP")
                                 if hasattr(signal, n)]
    previous = {s: signal.signal(s, handler) for s in signals}
    previous_hook = sys.unraisablehook
    sys.unraisablehook = unraisable
    try:
        yield
        if _interrupted.is_set():
            raise KeyboardInterrupt
    finally:
        for s, h in previous.items():
            signal.signal(s, h)
        sys.unraisablehook = previous_hook
        _interrupted.clear()


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
        if _interrupted.is_set():  # an interrupt that was swallowed on its way up
            raise KeyboardInterrupt
        _fsync(tmp)  # the bytes reach the disk before the name does (power loss)
        os.replace(tmp, final)
        _fsync_dir(final.parent)  # and the rename itself
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def _fsync(path: Path) -> None:
    """Flush a written file to the disk."""
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _fsync_dir(path: Path) -> None:
    """Flush a folder's entries (a rename) to the disk, where the system allows it."""
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:  # some file systems do not sync folders
        pass
    finally:
        os.close(fd)
