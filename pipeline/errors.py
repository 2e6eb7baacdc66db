"""Exceptions that end a run with a documented exit code and a plain message."""

from __future__ import annotations


class DynoqcError(Exception):
    """Base class: a problem the user can fix, reported without a traceback."""

    exit_code = 1


class ConfigError(DynoqcError):
    """The config file (or a command-line option) is wrong. Exit code 2."""

    exit_code = 2


class InputDataError(DynoqcError):
    """The logged data cannot be used. Exit code 3."""

    exit_code = 3


class EnvironmentProblem(DynoqcError):
    """A file cannot be read or written for a reason of the machine (permission, disk full,
    a folder where a file is expected). Exit code 2."""

    exit_code = 2


def environment_problem(exc: OSError, where: object = None) -> EnvironmentProblem:
    """A plain :class:`EnvironmentProblem` for an ``OSError``: the file it names (else
    ``where``) and the cause in one sentence."""
    import errno

    name = exc.filename if getattr(exc, "filename", None) else where
    if name is not None and str(name).endswith(".tmp"):  # our hidden temporary: its folder
        from pathlib import Path

        name = Path(str(name)).parent
    first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    reason = exc.strerror or first
    hints = {
        errno.ENOSPC: "the disk is full; free space and run again",
        errno.EACCES: "permission denied",
        errno.EPERM: "operation not permitted",
        errno.EISDIR: "this is a folder, a file is needed",
        errno.ENOTDIR: "a part of the path is not a folder",
        errno.EROFS: "the file system is read-only",
    }
    text = hints.get(exc.errno or -1, reason) if exc.errno is not None else reason
    if "No space left" in str(exc) or ("disk" in str(exc).lower() and "full" in str(exc).lower()):
        text = hints[errno.ENOSPC]
    return EnvironmentProblem(f"{name}: {text}." if name else f"{text}.")
