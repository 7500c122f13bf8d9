"""How a class value is written as text, the same way everywhere (settings, label, prediction)."""
from __future__ import annotations

from typing import Any


def canonical(value: Any) -> str:
    """Text form used to compare class values across columns, with ``positive=`` and in TOML.

    Booleans and integral numbers map to integer text, so ``1``, ``1.0``, ``True`` and
    ``numpy.int8(1)`` all read ``"1"``; other values keep ``str(value)``.

    >>> canonical(True), canonical(1.0), canonical(2), canonical("yes"), canonical(0.5)
    ('1', '1', '2', 'yes', '0.5')
    """
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        try:
            value = value.item()  # numpy scalar -> Python scalar
        except (TypeError, ValueError):
            pass
    if isinstance(value, bool):
        return str(int(value))
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    if isinstance(value, int):
        return str(value)
    return str(value)


def numeric_text(text: str) -> str | None:
    """The canonical text of a string that spells an integral number (``"1.0"`` -> ``"1"``), else None."""
    try:
        x = float(text)
    except (TypeError, ValueError):
        return None
    return str(int(x)) if x.is_integer() and abs(x) < 1e15 else None


def natural_key(v: str):
    """Sort key: numbers in numeric order first, then text."""
    try:
        return (0, float(v), v)
    except ValueError:
        return (1, 0.0, v)
