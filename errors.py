"""One error hierarchy for the package. Every message says what is wrong and
what to do; the CLI prints it on one line and exits non-zero."""


class CtmtabError(Exception):
    """Base of every error ctmtab raises on purpose."""

    exit_code = 2


class SpaceError(CtmtabError, ValueError):
    """An impossible machine space, cap or build request."""


class TooLargeError(CtmtabError, ValueError):
    """An exhaustive request that would take far too long or overflow the counts."""


class NotationError(CtmtabError, ValueError):
    """A machine in the compact text notation does not parse."""


class InvariantError(CtmtabError):
    """A build broke one of its own exactness invariants: a bug, never bad input."""

    exit_code = 3


class TableError(CtmtabError, ValueError):
    """A table file is malformed, truncated, corrupt or inconsistent."""


class NotATableError(TableError):
    """The path names no table file: missing, empty, a folder or special file, or another kind
    of file. verify reports it as unreadable (exit 2), not as a table that failed (exit 1)."""


class BadMagicError(NotATableError):
    """The file does not start with the ctmtab magic bytes."""


class TruncatedError(TableError):
    """The file ends before a declared section does."""


class ChecksumError(TableError):
    """A stored sha256 does not match the bytes."""


class VersionError(TableError):
    """The file's format major version is unknown to this reader."""


class SizeLimitError(TableError):
    """A declared size is over the reader's safety limit."""


class InconsistentTableError(TableError):
    """The metadata contradicts the body."""


class CoreArgumentError(CtmtabError, ValueError):
    """The compiled core refused an argument: a space, cap, work-unit prefix or machine."""


class CoreOverflowError(TooLargeError):
    """An exact weight would not fit the core's 128 bits."""


class CoreMemoryError(CtmtabError, MemoryError):
    """The compiled core ran out of memory."""


class CoreStoppedError(CtmtabError):
    """The core stopped because the caller asked it to."""


class CoreMissingError(CtmtabError, ImportError):
    """The compiled core is missing or stale: only building and running machines need it."""


class ExtraMissingError(CtmtabError, ImportError):
    """An optional dependency (an extra: plot, stats, cluster) is not installed; reading needs none."""


class OutputError(CtmtabError):
    """An output path that cannot be written safely: a folder, a reader-less pipe, the input itself."""


class MergeError(CtmtabError, ValueError):
    """Tables or shards that cannot be merged into one table."""


class MissingKeyError(CtmtabError, KeyError):
    """A key the table never produced, under the 'raise' missing-key policy."""

    def __str__(self):  # KeyError would print the repr of the message
        return str(self.args[0]) if self.args else ""


# Sampled keys seen fewer times than this draw a RareKeyWarning (kept here, beside it, so the
# command line can show it without loading the reader).
DEFAULT_MIN_SEEN = 10


class RareKeyWarning(UserWarning):
    """A sampled table's key seen fewer than Table.min_seen times: its estimate is rough."""


class FallbackWarning(UserWarning):
    """BDM scored blocks the table never produced with its fallback value, not a table value
    (BDM on_missing='error' raises MissingKeyError instead, 'ignore' stays quiet)."""
