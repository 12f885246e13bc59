"""Exceptions raised by hashaudit.

Every error the library raises on purpose derives from one root, so the command line can turn it into a
single line on stderr and exit code 2::

    HashAuditError
    ├── UsageError          an option or argument that cannot work (bad --buckets, unknown scheme)
    ├── InputError          a source that cannot be read as keys (missing file, not JSON, no such column)
    ├── UnknownHashError    a hash name that is not in the registry
    └── MergeError          two accumulators that cannot be merged (different table size, seed or hash)
"""

from __future__ import annotations


class HashAuditError(Exception):
    """Root of every error hashaudit raises on purpose."""


class UsageError(HashAuditError):
    """An option, argument or combination of them that cannot work."""


class InputError(HashAuditError):
    """A source that cannot be read as keys."""


class ResourceError(HashAuditError):
    """The machine ran short of something the audit needs (disk space for spill files)."""


class UnknownHashError(UsageError):
    """A hash function name that is not registered."""


class MergeError(HashAuditError):
    """Two accumulators with different settings cannot be merged."""
