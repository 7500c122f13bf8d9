"""What the page says: engine errors in the page's own words, naming the widget to change."""
from __future__ import annotations

import re

from audit.errors import AuditInputError

#: The page's widget for each engine setting (``AuditInputError.setting``).
WIDGETS = {
    "label": "True label column",
    "pred": "Predicted label column",
    "score": "Predicted probability of the positive class",
    "positive": "Positive class",
    "threshold": "Decision threshold",
    "bins": "Quantile bins per numeric attribute",
    "attributes": "Attributes to slice by",
    "categorical": "Numbers that are codes (treat as categories)",
    "numeric": "Numbers to bin even with few values",
    "metric": "Audited metric",
    "min_support": "Minimum rows per slice",
    "min_metric_support": "Minimum rows in the metric's denominator",
    "alpha": "Flag at adjusted p ≤",
    "correction": "Multiple-testing correction",
    "interval": "Interval for rates",
    "level": "Interval level",
    "max_order": "Slices",
    "protected": "Protected attributes",
    "favorable": "Favourable predicted outcome for the person",
    "how": "How the model's prediction is given",
    "class_score": "Probability of class",
    "min_group_share": "Leave groups under this share out of ratios",
    "reference": "Reference groups",
}

# When an older message carries no ``setting``, its opening words still say which one it is.
_OPENINGS = [
    (r"^label column", "label"), (r"^prediction column", "pred"), (r"^probability column", "score"),
    (r"^give a prediction column", "pred"), (r"^metric '", "metric"), (r"^positive class", "positive"),
    (r"^attribute column|^no attribute column|^the attribute list", "attributes"),
    (r"^protected attribute", "protected"), (r"^favourable outcome", "favorable"), (r"^reference group", "reference"),
    (r"^threshold", "threshold"),
]


def _plain(message: str) -> str:
    """Drop the API/command-line spellings (``(pred=..., --pred)``, ``pass positive=...``)."""
    if "multi-class" in message:  # a label the page could not read as two or as up to 20 classes
        message = message.split(";")[0] + "; the page gives one probability column per class for labels with up " \
            "to 20 classes (use the command line or the Python API for more)"
    text = re.sub(r"\s*\([^()]*--[a-z-]+[^()]*\)", "", message)
    text = re.sub(r"\s*\((?:[a-z_]+=\.\.\.,?\s*)?--[a-z-]+\)", "", text)
    text = re.sub(r"\s*\([a-z_]+=\.\.\.\)", "", text)
    text = re.sub(r"\bpass ([a-z_]+)=\.\.\.", lambda m: "set " + WIDGETS.get(m.group(1), m.group(1)), text)
    text = re.sub(r"\s*--[a-z-]+", "", text)
    return text.strip()


def setting_of(exc: AuditInputError) -> str | None:
    if "multi-class" in str(exc):
        return "label"
    name = getattr(exc, "setting", None)
    if name:
        return name
    msg = str(exc)
    for pattern, setting in _OPENINGS:
        if re.search(pattern, msg):
            return setting
    return None


def page_error(exc: AuditInputError) -> str:
    """One Markdown line: what is wrong, and which widget to change (when one is at fault)."""
    setting = setting_of(exc)
    text = _plain(str(exc))
    text = text[:1].upper() + text[1:]
    if setting == "pred" and "probability" in text and "prediction" in text:
        return (f"{md(text)}. Choose a column under **{WIDGETS['pred']}** or under **{WIDGETS['score']}**.")
    if setting == "reference" and "minimum group share" in text:
        return (f"{md(text)}. Change **{WIDGETS['reference']}** or **{WIDGETS['min_group_share']}** above (under "
                "*Group fairness*).")
    widget = WIDGETS.get(setting or "")
    if widget:
        return f"{md(text)}. Change **{widget}** above."
    return md(text) + "."


#: A slice's status in words, beside the code slices.csv carries (so the row can be found there).
STATUS_WORDS = {"tested": "tested against the rest", "below_support": "not tested: too little support",
                "no_rest": "not tested: the rest is too small", "undefined": "not tested: the metric is undefined",
                "whole_table": "the whole table"}


def status_words(status: str, reason: str) -> str:
    """``Status: words (code in slices.csv): reason`` as Markdown.

    >>> status_words("below_support", "")
    'Status: **not tested: too little support** (`below_support` in slices.csv)'
    """
    words = STATUS_WORDS[status] if status in STATUS_WORDS else md(status)
    return f"Status: **{words}** (`{status}` in slices.csv)" + (f": {md(reason)}" if reason else "")


def md(text) -> str:
    """Escape Markdown (and the HTML Streamlit would pass through) so user text shows as text."""
    out = str(text)
    for ch in "\\`*_{}[]()#+-.!|<>~$:":
        out = out.replace(ch, "\\" + ch)
    return out


def parse_reference(text: str) -> tuple[dict[str, str], list[str]]:
    """``"sex=female; age_band=35-44"`` → ({attribute: group}, [parts that are not attribute=group])."""
    refs, bad = {}, []
    for part in (text or "").split(";"):
        if not part.strip():
            continue
        if "=" not in part:
            bad.append(part.strip())
            continue
        k, v = part.split("=", 1)
        refs[k.strip()] = v.strip()
    return refs, bad


def check_reference(refs: dict[str, str], bad: list[str], protected: list[str]) -> str | None:
    """A page message when a reference names no protected attribute (the engine would ignore it)."""
    widget = WIDGETS["reference"]
    if bad:
        return f"**{widget}**: '{md(bad[0])}' is not of the form attribute=group (for example sex=female)."
    if refs and not protected:
        return f"**{widget}** were given but no protected attribute: choose them under **{WIDGETS['protected']}**."
    known = list(protected) + [f"{a} & {b}" for a, b in _pairs(protected)]  # pairs in the order chosen, as the engine
    for k in refs:
        if k not in known:
            return (f"**{widget}**: '{md(k)}' is not a protected attribute or a pair of them; choose one of "
                    + ", ".join(f"'{md(p)}'" for p in known) + ".")
    return None


def _pairs(items):
    return [(a, b) for i, a in enumerate(items) for b in items[i + 1:]]


def page_words(reason: str) -> str:
    """An engine reason in the page's words: where it names the API's or the command line's
    setting for codes, the page names its own widget."""
    return re.sub(r"(?:list it |)with categorical=\[\.\.\.\](?: \(--categorical\))?",
                  f"choose it under '{WIDGETS['categorical']}'", reason)


def fmt(x, d=4) -> str:
    """A number with ``d`` decimals, or a dash where there is none."""
    try:
        x = float(x)
    except (TypeError, ValueError):
        return "—"
    return "—" if x != x else f"{x:.{d}f}"
