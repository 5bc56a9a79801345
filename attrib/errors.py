"""Errors that attrib reports to its user.

Every message names the input it is about and, where there is one, the fix. The CLI turns these into
one-line messages and the exit codes documented in ``attrib --help``.
"""

from __future__ import annotations


class AttribError(Exception):
    """Base class of every error attrib reports to its user."""

    exit_code = 1


class InputError(AttribError):
    """A file is missing, unreadable, or not in a format attrib can read."""

    exit_code = 3


class FormatError(InputError):
    """The format of a log could not be detected, or the requested format is unknown."""


class MappingError(InputError):
    """A field or column mapping names a field that the log does not have."""


class TimezoneError(InputError):
    """A log has timestamps without a UTC offset and no --tz was given, or the zone is unknown."""


class StoreError(AttribError):
    """The store cannot be opened, written or migrated."""

    exit_code = 4


class StoreLockedError(StoreError):
    """Another attrib process holds the store."""


class StoreVersionError(StoreError):
    """The store was written by a newer attrib than this one."""


class UsageError(AttribError):
    """Options that do not fit together or values out of range."""

    exit_code = 2


class BudgetExceeded(AttribError):
    """A query budget was exceeded (used by `attrib check`)."""

    exit_code = 1
