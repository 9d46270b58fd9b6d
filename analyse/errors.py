"""The one exception that means "the user's input is wrong" (exit status 2).

Every stage raises :class:`InputError` for bad input; the CLI turns it into a single
line on stderr naming the file and the problem. Anything else escaping to the CLI is a
bug (exit status 1).
"""

from __future__ import annotations

from pathlib import Path

__all__ = ["InputError"]


class InputError(Exception):
    """Bad user input: a file, a key or a value the tool cannot accept.

    Parameters
    ----------
    message : str
        What is wrong, in one line, e.g. ``"[site] latitude_deg = 95 is outside -90..90"``.
    path : str or Path, optional
        The file (or folder) at fault; printed first.
    """

    def __init__(self, message: str, path: str | Path | None = None) -> None:
        self.path = None if path is None else Path(path)
        self.message = " ".join(str(message).split())
        super().__init__(self.one_line())

    def one_line(self) -> str:
        """The message as printed by the CLI: ``"<file>: <problem>"``."""
        return f"{self.path}: {self.message}" if self.path is not None else self.message
