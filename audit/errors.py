"""The one exception type the engine raises for a user's mistake, and how messages quote data."""
from __future__ import annotations

#: Longest piece of a file's content quoted in a message (column names, values).
QUOTE_LIMIT = 60


class AuditInputError(ValueError):
    """Bad input or settings. The message is one line that names the column, value, row or
    parameter at fault; interfaces show it as is, with no traceback.

    ``setting`` names the setting at fault (``"label"``, ``"pred"``, ``"metric"``...) when there is
    one, so a face can point at its own widget or option instead of the message's API syntax.
    """

    def __init__(self, message: str, *, setting: str | None = None):
        super().__init__(message)
        self.setting = setting


def shown(value, limit: int = QUOTE_LIMIT) -> str:
    """Quote text taken from a file for a one-line message: control characters escaped
    (``\\n``, ``\\x1b``...), cut to ``limit`` characters with an ellipsis.

    >>> shown("a\\nb")
    "'a\\\\nb'"
    >>> len(shown("x" * 500)) <= 63
    True
    """
    text = str(value)
    cut = len(text) > limit
    text = text[:limit]
    out = "".join(ch if ch.isprintable() else repr(ch)[1:-1] for ch in text)
    return "'" + out.replace("'", "\\'") + ("…" if cut else "") + "'"
