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
