"""The release gate: whether an audit's flags should stop a release, and why.

A pure function of the result and the gate settings, used by the command line (exit code 1),
``summary.json`` (``"gate"``), the report's opening and :func:`audit.faces.export.save`.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from ..errors import AuditInputError

#: What ``--block-on-flag`` may cover; the plain option means both.
GATE_SCOPES = ("slices", "fairness", "both")


@dataclass(frozen=True)
class GateResult:
    """Outcome of the release gate.

    ``checks`` lists what the gate looked at (``"slices"``, ``"fairness"``, ``"gap"``); an
    empty tuple means no gate was set, and then ``blocked`` is always False.
    """

    blocked: bool
    reasons: tuple[str, ...] = ()
    checks: tuple[str, ...] = ()
    gap: float | None = field(default=None)

    def as_dict(self) -> dict[str, Any]:
        return {"blocked": self.blocked, "reasons": list(self.reasons), "checks": list(self.checks),
                "gap": self.gap}


def check_gate_settings(on_flag: str | None, gap: float | None, *, has_protected: bool) -> None:
    """Refuse gate settings that cannot be checked (called before any computing)."""
    if on_flag is not None and on_flag not in GATE_SCOPES:
        raise AuditInputError(f"gate scope '{on_flag}' is not known; choose one of {', '.join(GATE_SCOPES)}")
    if on_flag == "fairness" and not has_protected:
        raise AuditInputError("--block-on-flag fairness needs protected attributes (--protected A,B)")
    if gap is not None and not gap >= 0:
        raise AuditInputError(f"--block-gap must be a number of at least 0; received {gap!r}")


def evaluate_gate(result, *, on_flag: str | None = None, gap: float | None = None) -> GateResult:
    """Decide the release gate for an audit result.

    Parameters
    ----------
    result : AuditResult
    on_flag : {"slices", "fairness", "both"} or None
        Block when any slice is flagged, any fairness flag is raised, or either. ``"both"``
        checks fairness only when the audit had protected attributes.
    gap : float, optional
        Block when a flagged slice differs from the rest by more than ``gap`` (in the
        audited metric's units).

    Returns
    -------
    GateResult
    """
    from .prose import fairness_findings, finding_text

    checks: list[str] = []
    reasons: list[str] = []
    flagged = result.flagged()
    if on_flag in ("slices", "both"):
        checks.append("slices")
        if len(flagged):
            fnd = result.findings() if "finding" in result.slices.columns else flagged.iloc[:0]
            names = "; ".join(fnd["slice"].head(3)) + (" …" if len(fnd) > 3 else "")
            reasons.append(f"{len(flagged)} slice(s) flagged; worst: {flagged.iloc[0]['slice']}"
                           + (f" ({len(fnd)} finding(s): {names})" if len(fnd) else ""))
    if on_flag in ("fairness", "both") and result.fairness is not None:
        checks.append("fairness")
        found = fairness_findings(result)
        if len(found):
            groups = found.drop_duplicates(["attribute", "group"])
            bad = int(found["disadvantaged"].sum())
            reasons.append(f"{len(groups)} protected group(s) with fairness flags ({len(found)} finding(s): "
                           f"{bad} at a disadvantage, {len(found) - bad} in the group's favour); first: "
                           + finding_text(found.sort_values("disadvantaged", ascending=False, kind="stable")
                                          .iloc[0]))
    if gap is not None:
        checks.append("gap")
        over = flagged[flagged["diff"].abs() > gap]
        if len(over):
            r = over.iloc[0]
            reasons.append(f"flagged slice '{r['slice']}' differs from the rest by {abs(r['diff']):.4g} > {gap:g}")
    return GateResult(blocked=bool(reasons), reasons=tuple(reasons), checks=tuple(checks), gap=gap)
