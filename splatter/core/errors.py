"""The one error type for bad input, and the warning type for suspicious input."""

from __future__ import annotations


class LookError(ValueError):
    """A look (or a command-line override of it) is not valid.

    Parameters
    ----------
    file : str or None
        The look file the bad value came from (or ``"--set"`` for overrides).
    key : str
        Dotted key path, for example ``source[1].rate``; ``""`` for the file itself.
    expected : str
        What a valid value looks like.
    got : str
        What arrived, already formatted for the message.
    line : int or None
        Line in the file, where known (TOML syntax errors).
    """

    def __init__(self, file, key, expected, got, line=None):
        self.file = None if file is None else str(file)
        self.key = key
        self.expected = expected
        self.got = got
        self.line = line
        super().__init__(self._message())

    def _message(self) -> str:
        where = self.file or "<look>"
        if self.line is not None:
            where += f":{self.line}"
        if self.key:
            where += f": {self.key}"
        return f"{where}: expected {self.expected}, got {self.got}"


class LookWarning(UserWarning):
    """Legal but suspicious input (for example a loop that cannot close exactly)."""
