"""The one exception type the engine raises for a user's mistake."""


class AuditInputError(ValueError):
    """Bad input or settings. The message is one line that names the column,
    value, row or parameter at fault; interfaces show it as is, with no traceback."""
