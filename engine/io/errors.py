"""Exceptions raised by :mod:`engine.io`.

Every error about a file names that file: the message starts with the path so
that a command line or a dialog can show it as one line.
"""

from __future__ import annotations

from pathlib import Path

__all__ = [
    "LoadError",
    "DecodeError",
    "SeriesSelectionError",
    "VolumeTooLargeError",
    "SaveError",
    "ReviewedResultError",
    "ApprovedResultError",
]


class LoadError(ValueError):
    """A file or folder could not be turned into a :class:`~engine.io.Volume`.

    Parameters
    ----------
    path : str or Path or None
        The file (or folder) the problem is about; ``None`` when the problem
        is not about one file.
    message : str
        What is wrong, in plain words.

    Attributes
    ----------
    path : str or None
        The offending path, as a string.
    reason : str
        The message without the path.
    """

    def __init__(self, path: str | Path | None, message: str) -> None:
        self.path = None if path is None else str(path)
        self.reason = message
        super().__init__(message if path is None else f"{path}: {message}")


class DecodeError(LoadError):
    """Pixel data in a compressed transfer syntax could not be decoded.

    Attributes
    ----------
    transfer_syntax : str
        The transfer syntax UID of the file.
    """

    def __init__(self, path: str | Path, message: str, *, transfer_syntax: str) -> None:
        self.transfer_syntax = transfer_syntax
        super().__init__(path, message)


class SeriesSelectionError(LoadError):
    """A folder holds several series and none (or an unknown one) was chosen.

    Attributes
    ----------
    choices : tuple of str
        The series keys that ``load(path, series=...)`` accepts.
    """

    def __init__(self, path: str | Path, message: str, *, choices: tuple[str, ...]) -> None:
        self.choices = choices
        super().__init__(path, message)


class VolumeTooLargeError(LoadError):
    """The volume would need more memory than the configured limit.

    Attributes
    ----------
    needed_bytes, max_bytes : int
        Bytes the float32 volume would take, and the limit in force.
    """

    def __init__(self, path: str | Path, *, needed_bytes: int, max_bytes: int) -> None:
        self.needed_bytes = needed_bytes
        self.max_bytes = max_bytes
        super().__init__(
            path,
            f"volume would need {needed_bytes / 2**20:.1f} MiB, more than the limit of "
            f"{max_bytes / 2**20:.1f} MiB (pass a larger max_bytes to load it)",
        )


class SaveError(RuntimeError):
    """A result could not be written; the previous result, if any, is intact."""


class ReviewedResultError(SaveError):
    """Saving would replace a result that carries a review (or whose review cannot be read).

    Nothing was written. Saving as a new version keeps the earlier review
    history in the new sidecar (``new_version=True``; ``--new-version`` on the
    command line); another name leaves the reviewed result as it is.

    Attributes
    ----------
    path : str
        The existing sidecar.
    state : str or None
        Its review state (``Submitted``, ``Approved``, ``Returned``, or
        ``Draft`` with comments or decisions); ``None`` when it cannot be read.
    """

    def __init__(self, path: str | Path, state: str | None, message: str) -> None:
        self.path = str(path)
        self.state = state
        super().__init__(message)


#: Former name of :class:`ReviewedResultError` (when only approved results were protected).
ApprovedResultError = ReviewedResultError
