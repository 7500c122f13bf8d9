"""The audit's settings: validated and made canonical in one place, before any work is done.

``make_config(**settings)`` checks every setting's type and range and writes it in one
canonical form (class values as text, lists as tuples, whole numbers as ``int``), so an
``AuditConfig`` written to ``fissure.toml`` and read back gives the identical audit.
``AuditConfig.to_toml()`` writes every setting; ``load_toml`` reads it back (``fissure audit
DATA --config FILE``). The configuration hash in the report is the SHA-256 of the canonical
JSON of these settings.

Checks that need the table (does a column exist, is the positive class a class of the
label) happen in the fitting pass, still before any slice is counted.
"""
from __future__ import annotations

import hashlib
import json
import math
import numbers
import tomllib
from dataclasses import asdict, dataclass, field, fields
from typing import Any, Mapping

from .core.values import canonical
from .errors import AuditInputError, shown
from .stats.methods import CLASS_METRICS, CORRECTION_METHODS, INTERVAL_METHODS, METRICS, MULTICLASS_ONLY

#: Highest slice order (number of attributes combined).
MAX_ORDER = 3


@dataclass(frozen=True)
class AuditConfig:
    """Every setting of an audit, in canonical form. See ``audit.run`` for the meaning of each."""

    label: str
    pred: str | None = None
    score: str | dict[str, str] | None = None
    positive: str | None = None
    threshold: float = 0.5
    attributes: tuple[str, ...] | None = None
    categorical: tuple[str, ...] = ()
    numeric: tuple[str, ...] = ()
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
    favorable: str | tuple[str, ...] | None = None
    reference: dict[str, str] = field(default_factory=dict)
    min_group_share: float = 0.02
    drop_unlabelled: bool = False
    encoding: str | None = None
    chunk_rows: int | None = None
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


SETTING_NAMES = tuple(f.name for f in fields(AuditConfig))


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


def load_toml(path: str) -> dict[str, Any]:
    """Read settings from a TOML file; unknown keys are an error naming the key."""
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise AuditInputError(f"configuration file '{path}' does not exist") from None
    except IsADirectoryError:
        raise AuditInputError(f"configuration file '{path}' is a folder") from None
    except UnicodeDecodeError:
        raise AuditInputError(f"configuration file '{path}' is not UTF-8 text") from None
    except tomllib.TOMLDecodeError as exc:
        raise AuditInputError(f"configuration file '{path}' is not valid TOML: {exc}") from None
    for k in data:
        if k not in SETTING_NAMES:
            raise AuditInputError(f"configuration file '{path}' has unknown setting '{k}'", setting=k)
    return data


# ----------------------------------------------------------------------------- canonical form
def _bad(name: str, expected: str, value: Any) -> AuditInputError:
    return AuditInputError(f"{name} must be {expected}; received {value!r}", setting=name)


def _column(name: str, v: Any, *, required: bool = False) -> str | None:
    if v is None:
        if required:
            raise AuditInputError(f"give the {name} column ({name}=...)", setting=name)
        return None
    if not isinstance(v, str) or not v:
        raise _bad(name, "a column name (text)", v)
    return v


def _names(name: str, v: Any, *, empty_ok: bool) -> tuple[str, ...] | None:
    """A list of column names: a single string is one name (not its letters)."""
    if v is None:
        return None
    if isinstance(v, str):
        v = [v]
    if isinstance(v, Mapping) or not hasattr(v, "__iter__"):
        raise _bad(name, "a column name or a list of column names", v)
    out = tuple(v)
    for x in out:
        if not isinstance(x, str) or not x:
            raise _bad(name, "a list of column names (text)", v)
    if not out and not empty_ok:
        raise AuditInputError(f"the {name} list is empty; leave it out to use every other column", setting=name)
    return out


def _whole(name: str, v: Any, lo: int, hi: int | None = None) -> int:
    if isinstance(v, bool) or not isinstance(v, numbers.Real) or isinstance(v, float) and not v.is_integer():
        raise _bad(name, f"a whole number of at least {lo}" + (f" and at most {hi}" if hi is not None else ""), v)
    iv = int(v)
    if iv < lo or (hi is not None and iv > hi):
        raise _bad(name, f"a whole number of at least {lo}" + (f" and at most {hi}" if hi is not None else ""), v)
    return iv


def _real(name: str, v: Any, lo: float, hi: float, *, lo_open: bool, hi_open: bool) -> float:
    if isinstance(v, bool) or not isinstance(v, numbers.Real):
        raise _bad(name, "a number", v)
    x = float(v)
    ok = (x > lo if lo_open else x >= lo) and (x < hi if hi_open else x <= hi)
    if not ok or math.isnan(x):
        lb, hb = ("(" if lo_open else "["), (")" if hi_open else "]")
        raise _bad(name, f"a number in {lb}{lo:g}, {hi:g}{hb}", v)
    return x


def _choice(name: str, v: Any, choices) -> str:
    if v not in choices:
        raise AuditInputError(f"{name} '{v}' is not known; choose one of {', '.join(choices)}", setting=name)
    return v


def _text(name: str, v: Any) -> str | None:
    if v is None:
        return None
    if not isinstance(v, str):
        raise _bad(name, "text", v)
    return v


def _class_value(name: str, v: Any) -> str | None:
    if v is None:
        return None
    if isinstance(v, (list, tuple, dict, set)):
        raise _bad(name, "one class value", v)
    return canonical(v)


def make_config(**settings: Any) -> AuditConfig:
    """Validate every setting and return the canonical :class:`AuditConfig`.

    Raises :class:`AuditInputError` (one line, naming the setting) for an unknown setting, a
    wrong type or a value out of range. Accepts what a user naturally writes: a single
    string for any list of columns, ``True`` or ``1.0`` for a class value (written ``"1"``),
    lists for tuples, integral floats for whole numbers.

    Examples
    --------
    >>> cfg = make_config(label="y", score="p", positive=True, protected="sex", bins=4.0)
    >>> cfg.positive, cfg.protected, cfg.bins
    ('1', ('sex',), 4)
    """
    unknown = sorted(set(settings) - set(SETTING_NAMES))
    if unknown:
        raise AuditInputError(f"unknown setting '{unknown[0]}'", setting=unknown[0])
    s = dict(settings)
    out: dict[str, Any] = {}
    out["label"] = _column("label", s.get("label"), required=True)
    out["pred"] = _column("pred", s.get("pred"))
    score = s.get("score")
    if isinstance(score, Mapping):
        # one probability column per class: {class: column}
        if len(score) < 2:
            raise _bad("score", "a column name, or a mapping {class: column} with one column per class", score)
        canon_score = {}
        for k, v in score.items():
            canon_score[canonical(k)] = _column("score", v)
        if len(set(canon_score.values())) < len(canon_score):
            raise AuditInputError("score names the same probability column for two classes", setting="score")
        out["score"] = canon_score
    else:
        out["score"] = _column("score", score)
    out["positive"] = _class_value("positive", s.get("positive"))
    out["threshold"] = _real("threshold", s.get("threshold", 0.5), 0.0, 1.0, lo_open=False, hi_open=False)
    out["attributes"] = _names("attributes", s.get("attributes"), empty_ok=False)
    out["categorical"] = _names("categorical", s.get("categorical"), empty_ok=True) or ()
    out["numeric"] = _names("numeric", s.get("numeric"), empty_ok=True) or ()
    both = set(out["categorical"]) & set(out["numeric"])
    if both:
        raise AuditInputError(f"column '{sorted(both)[0]}' is listed as both categorical and numeric",
                              setting="categorical")
    out["bins"] = _whole("bins", s.get("bins", 5), 1, 1000)
    edges = s.get("bin_edges") or {}
    if not isinstance(edges, Mapping):
        raise _bad("bin_edges", "a mapping {column: [e0, e1, ...]}", edges)
    canon_edges: dict[str, tuple[float, ...]] = {}
    for col, e in edges.items():
        if not isinstance(col, str):
            raise _bad("bin_edges", "a mapping from column names", edges)
        try:
            vals = tuple(float(x) for x in (e if not isinstance(e, str) else e.split(",")))
        except (TypeError, ValueError):
            raise AuditInputError(f"bin edges for '{col}' must be numbers; received {e!r}", setting="bin_edges") from None
        if len(vals) < 2 or any(math.isnan(x) or math.isinf(x) for x in vals) or \
                any(b <= a for a, b in zip(vals, vals[1:])):
            raise AuditInputError(f"bin edges for '{col}' must be at least two increasing finite numbers; "
                                  f"received {list(vals)}", setting="bin_edges")
        canon_edges[col] = vals
    out["bin_edges"] = canon_edges
    out["max_levels"] = _whole("max_levels", s.get("max_levels", 100), 2)
    metric = s.get("metric", "error_rate")
    base, sep, cls = metric.partition(":") if isinstance(metric, str) else ("", "", "")
    if sep and base in CLASS_METRICS and cls:
        out["metric"] = metric  # a per-class rate of a multi-class audit, checked against the classes later
    elif metric in MULTICLASS_ONLY:
        out["metric"] = metric
    else:
        out["metric"] = _choice("metric", metric, list(METRICS) + list(MULTICLASS_ONLY) +
                                [f"{b}:CLASS" for b in CLASS_METRICS])
    out["min_support"] = _whole("min_support", s.get("min_support", 30), 1)
    out["min_metric_support"] = _whole("min_metric_support", s.get("min_metric_support", 10), 1)
    alpha = s.get("alpha", 0.05)
    if isinstance(alpha, bool) or not isinstance(alpha, numbers.Real) or not (0 < float(alpha) < 1):
        raise AuditInputError(f"alpha must lie strictly between 0 and 1; received {alpha!r}", setting="alpha")
    out["alpha"] = float(alpha)
    out["correction"] = _choice("correction", s.get("correction", "bh"), list(CORRECTION_METHODS))
    level = s.get("level", 0.95)
    if isinstance(level, bool) or not isinstance(level, numbers.Real) or not (0.5 <= float(level) < 1):
        raise AuditInputError(f"interval level must lie in [0.5, 1); received {level!r}", setting="level")
    out["level"] = float(level)
    out["interval"] = _choice("interval", s.get("interval", "wilson"), list(INTERVAL_METHODS))
    mo = s.get("max_order", 2)
    if isinstance(mo, bool) or mo not in range(1, MAX_ORDER + 1):
        raise _bad("max_order", " or ".join(str(i) for i in range(1, MAX_ORDER + 1)), mo)
    out["max_order"] = int(mo)
    ao = s.get("auc_max_order", 1)
    if isinstance(ao, bool) or ao not in (-1, 0, 1, 2):
        raise _bad("auc_max_order", "-1 (none), 0, 1 or 2", ao)
    out["auc_max_order"] = int(ao)
    out["protected"] = _names("protected", s.get("protected"), empty_ok=True) or None
    fav = s.get("favorable")
    if isinstance(fav, (list, tuple, set)):
        if not fav:
            raise _bad("favorable", "a class value or a list of class values", fav)
        out["favorable"] = tuple(sorted({canonical(v) for v in fav}))
        if len(out["favorable"]) == 1:
            out["favorable"] = out["favorable"][0]
    else:
        out["favorable"] = _class_value("favorable", fav)
    ref = s.get("reference") or {}
    if not isinstance(ref, Mapping):
        raise _bad("reference", "a mapping {protected attribute: group}", ref)
    canon_ref = {}
    for k, v in ref.items():
        if not isinstance(k, str):
            raise _bad("reference", "a mapping from protected attribute names", ref)
        canon_ref[k] = canonical(v)
    out["reference"] = canon_ref
    out["min_group_share"] = _real("min_group_share", s.get("min_group_share", 0.02), 0.0, 0.5,
                                   lo_open=False, hi_open=False)
    du = s.get("drop_unlabelled", False)
    if not isinstance(du, bool):
        raise _bad("drop_unlabelled", "true or false", du)
    out["drop_unlabelled"] = du
    out["encoding"] = _text("encoding", s.get("encoding"))
    cr = s.get("chunk_rows")
    out["chunk_rows"] = None if cr is None else _whole("chunk_rows", cr, 1)
    for k in ("model_name", "model_version", "intended_use"):
        out[k] = _text(k, s.get(k))
    cfg = AuditConfig(**out)
    for role in ("pred", "score"):
        if getattr(cfg, role) is not None and getattr(cfg, role) == cfg.label:
            raise AuditInputError(f"{'prediction' if role == 'pred' else 'probability'} column '{cfg.label}' is the "
                                  "label column; pick a different column", setting=role)
    roles = {cfg.label: "the label column", cfg.pred: "the prediction column"}
    for col in (cfg.score.values() if isinstance(cfg.score, Mapping) else [cfg.score]):
        roles.setdefault(col, "a probability column")
    for p in cfg.protected or ():
        if p is not None and p in roles:
            raise AuditInputError(f"protected attribute {shown(p)} is {roles[p]}, not an attribute of the person; name "
                                  "attribute columns with protected=... (--protected), e.g. age or marital status",
                                  setting="protected")
    if cfg.pred is None and cfg.score is None:
        raise AuditInputError("give a prediction column (pred=..., --pred) or a probability column "
                              "(score=..., --score)", setting="pred")
    if cfg.metric in METRICS and METRICS[cfg.metric].needs_score and cfg.score is None:
        raise AuditInputError(f"metric '{cfg.metric}' needs a probability column (score=..., --score)",
                              setting="metric")
    if cfg.reference and not cfg.protected:
        raise AuditInputError("reference groups were given but no protected attribute (protected=..., --protected)",
                              setting="reference")
    return cfg
