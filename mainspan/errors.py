"""One exception hierarchy for mainspan.

Every message says *what* is wrong, *where* (file, layer, field, feature,
link or option) and *how to fix it*, on one line.  The command line turns
:class:`InputError` and :class:`DataFileError` into exit code 2 without a
traceback; anything else is an internal error (exit code 1).
"""

from __future__ import annotations

__all__ = [
    "MainspanError",
    "InputError",
    "DataFileError",
    "DisconnectedError",
    "CertificateError",
    "OverwriteError",
]


class MainspanError(Exception):
    """Root of every error raised on purpose by mainspan."""


class InputError(MainspanError, ValueError):
    """The user's input (a parameter, field, feature or setting) is unusable."""


class DataFileError(MainspanError, OSError):
    """A file cannot be read, written or understood."""


class OverwriteError(DataFileError, FileExistsError):
    """An output (file or GeoPackage layer) exists and ``overwrite`` was not given."""


class DisconnectedError(InputError):
    """The candidate links do not connect every site.

    ``components`` holds one integer label per node (0-based, ordered by the
    lowest node index in each component).
    """

    def __init__(self, message: str, components=None):
        super().__init__(message)
        self.components = components


class CertificateError(MainspanError, RuntimeError):
    """The optimality certificate failed: the tree is not minimum over the candidates.

    This is never the user's fault; it signals a bug and is reported as an
    internal error.
    """
