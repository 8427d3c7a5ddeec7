"""Errors countmill raises; the command line turns each into a message and an exit code."""

from __future__ import annotations


class CountmillError(Exception):
    """Base class. ``exit_code`` follows the contract: 2 usage/map, 1 failure."""

    exit_code = 1


class MapError(CountmillError):
    """The channel map is wrong. The message names the file, the channel and the key."""

    exit_code = 2

    def __init__(self, message: str, *, path: str | None = None, where: str | None = None, key: str | None = None):
        self.path = path
        self.where = where
        self.key = key
        self.reason = message
        parts = [p for p in (path, where, f"key '{key}'" if key else None) if p]
        prefix = ": ".join(parts)
        super().__init__(f"{prefix}: {message}" if prefix else message)


class UsageError(CountmillError):
    exit_code = 2


class InputError(CountmillError):
    """The raw input cannot be read at all (I/O error, corrupt compression)."""

    exit_code = 1


class LockHeld(CountmillError):
    exit_code = 4
