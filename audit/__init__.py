"""Fissure: audit a trained binary classifier slice by slice."""
__version__ = "0.1.0"

from .engine import AuditResult, run  # noqa: E402
from .errors import AuditInputError  # noqa: E402

__all__ = ["run", "AuditResult", "AuditInputError", "__version__"]
