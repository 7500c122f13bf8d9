"""The audit's settings as one frozen object, with a TOML form for reproduction.

``AuditConfig.to_toml()`` writes every setting; ``load_toml`` reads it back (``fissure
audit DATA --config FILE``). The configuration hash in the report is the SHA-256 of the
canonical JSON of these settings.
"""
from __future__ import annotations

import hashlib
import json
import math
import tomllib
from dataclasses import asdict, dataclass, field, fields
from typing import Any

from .errors import AuditInputError


@dataclass(frozen=True)
class AuditConfig:
    """Every setting of an audit. See ``audit.run`` for the meaning of each."""

    label: str
    pred: str | None = None
    score: str | None = None
    positive: str | None = None
    threshold: float = 0.5
    attributes: tuple[str, ...] | None = None
    bins: int = 5
    bin_edges: dict[str, tuple[float, ...]] = field(default_factory=dict)
    max_levels: int = 100
    metric: str = "error_rate"
    min_support: int = 30
    min_metric_support: int = 10
    alpha: float = 0.05
    correction: str = "bh"
    level: float = 0.95
    interval: str = "wilson"
    max_order: int = 2
    auc_max_order: int = 1
    protected: tuple[str, ...] | None = None
    favorable: str | None = None
    reference: dict[str, str] = field(default_factory=dict)
    min_group_share: float = 0.02
    model_name: str | None = None
    model_version: str | None = None
    intended_use: str | None = None

    def as_dict(self) -> dict[str, Any]:
        d = asdict(self)
        for k, v in d.items():
            if isinstance(v, tuple):
                d[k] = list(v)
        d["bin_edges"] = {k: list(v) for k, v in self.bin_edges.items()}
        return d

    def digest(self) -> str:
        """SHA-256 of the canonical JSON of the settings (the 'configuration hash')."""
        text = json.dumps(self.as_dict(), sort_keys=True, separators=(",", ":"), ensure_ascii=True)
        return hashlib.sha256(text.encode()).hexdigest()

    def to_toml(self) -> str:
        """The settings as TOML; ``None`` settings are left out (TOML has no null)."""
        lines = ["# Fissure audit configuration: fissure audit DATA --config THIS_FILE"]
        tables = []
        for f in fields(self):
            v = getattr(self, f.name)
            if v is None:
                continue
            if isinstance(v, dict):
                if v:
                    tables.append((f.name, v))
                continue
            lines.append(f"{f.name} = {_toml_value(v)}")
        for name, table in tables:
            lines.append("")
            lines.append(f"[{name}]")
            for k in sorted(table):
                lines.append(f"{json.dumps(k, ensure_ascii=False)} = {_toml_value(table[k])}")
        return "\n".join(lines) + "\n"


def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    raise TypeError(f"cannot write {type(v).__name__} to TOML")


_KNOWN = {f.name for f in fields(AuditConfig)}


def load_toml(path: str) -> dict[str, Any]:
    """Read settings from a TOML file; unknown keys are an error naming the key."""
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise AuditInputError(f"configuration file '{path}' does not exist") from None
    except tomllib.TOMLDecodeError as exc:
        raise AuditInputError(f"configuration file '{path}' is not valid TOML: {exc}") from None
    for k in data:
        if k not in _KNOWN:
            raise AuditInputError(f"configuration file '{path}' has unknown setting '{k}'")
    return data
