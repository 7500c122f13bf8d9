"""Fissure: audit a trained classifier slice by slice.

The public names load their modules when first used, so ``import audit`` (and the command
line's ``--help``) stays light: ``audit.run``, ``audit.AuditResult``, ``audit.fit``,
``audit.summarize``, ``audit.Tally``, ``audit.AuditInputError``, and ``audit.save(result, folder)``
(the files the command line writes).
"""
__version__ = "0.1.0"

from .errors import AuditInputError  # noqa: E402  (light: the standard library only)

_LAZY = {
    "run": ("engine", "run"),
    "AuditResult": ("stats.result", "AuditResult"),
    "fit": ("core.stream", "fit"),
    "summarize": ("stats.summarize", "summarize"),
    "Tally": ("core.tally", "Tally"),
    "Encoding": ("core.encoding", "Encoding"),
    "make_config": ("settings", "make_config"),
    "AuditConfig": ("settings", "AuditConfig"),
    "save": ("faces.export", "save"),
}

__all__ = ["run", "AuditResult", "AuditInputError", "fit", "summarize", "Tally", "Encoding", "make_config",
           "AuditConfig", "save", "__version__"]


def __getattr__(name):
    if name in _LAZY:
        from importlib import import_module

        mod, attr = _LAZY[name]
        value = getattr(import_module(f".{mod}", __name__), attr)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'audit' has no attribute {name!r}")
