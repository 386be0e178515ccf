"""The package exception hierarchy.

Every error that loopcraft raises on purpose is a :class:`LoopcraftError`.
Messages carry the name of the thing at fault, the offending value (``!r``)
and what was expected.
"""

from __future__ import annotations

__all__ = [
    "LoopcraftError",
    "ParseError",
    "ComponentValueError",
    "TopologyError",
    "DesignFileError",
    "SynthesisError",
    "AnalysisError",
    "FileWriteError",
]


class LoopcraftError(Exception):
    """Base class of every error raised by loopcraft."""


class ParseError(LoopcraftError, ValueError):
    """Text that does not follow a loopcraft grammar.

    Parameters
    ----------
    message : str
        What is wrong.
    text : str
        The whole text that was being parsed.
    position : int
        Zero-based index of the offending character in ``text``.
    """

    def __init__(self, message: str, text: str, position: int) -> None:
        self.reason = message
        self.text = text
        self.position = max(0, min(position, len(text)))
        caret = " " * self.position + "^"
        super().__init__(f"{message} at column {self.position + 1}:\n  {text}\n  {caret}")


class ComponentValueError(LoopcraftError, ValueError):
    """A component value that is missing, malformed or out of range."""


class TopologyError(LoopcraftError, ValueError):
    """A network or stage whose transfer function is undefined."""


class DesignFileError(LoopcraftError, ValueError):
    """A design file (or dict) that does not follow the design format.

    Parameters
    ----------
    message : str
        What is wrong.
    key_path : str
        Where, as a dotted path such as ``"stage.feedback"`` or ``"values.R1"``.
    """

    def __init__(self, message: str, key_path: str = "") -> None:
        self.reason = message
        self.key_path = key_path
        where = f"{key_path}: " if key_path else ""
        super().__init__(f"{where}{message}")


class SynthesisError(LoopcraftError, ValueError):
    """A design target that cannot be met; the message names the limit hit."""


class AnalysisError(LoopcraftError, ValueError):
    """An analysis that cannot be carried out on the given data."""


class FileWriteError(LoopcraftError, OSError):
    """A file that could not be written (the file it would replace, if any, is left intact).

    Also an :class:`OSError`, so code that catches ``OSError`` around a save keeps working.

    Parameters
    ----------
    message : str
        What went wrong, naming the path.
    path : str
        The path that was to be written.
    errno : int or None
        The operating system's error number, when there is one.
    strerror : str or None
        The operating system's description of it.
    """

    def __init__(self, message: str, path: str = "", errno: int | None = None, strerror: str | None = None) -> None:
        super().__init__(message)
        self.reason = message
        self.path = path
        self.errno = errno
        self.strerror = strerror
        self.filename = path or None

    def __str__(self) -> str:
        return self.reason
