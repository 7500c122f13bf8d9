"""The page's fairness view (the numbers come from ``audit.stats.fairness``).

The table is formatted like the slice table: rates with four decimals, adjusted p-values in
scientific notation, blanks where a value does not apply (the reference group against itself).
"""
from __future__ import annotations

import hashlib

from audit.faces.prose import fairness_findings, finding_text
from audit.stats.fairness import FairnessResult
from ui.sections import chart_section
from ui.wording import md

FAIR_COLUMNS = ["group", "n", "share", "selection_rate", "impact_ratio", "below_four_fifths", "selection_q", "tpr",
                "fpr", "ppv", "tpr_diff", "fpr_diff", "equalized_odds_gap", "equalized_odds_p", "ppv_diff", "ppv_q",
                "fairness_flag", "is_reference", "excluded", "exclusion_reason"]
TITLES = {"selection_rate": "selection rate", "impact_ratio": "impact ratio", "below_four_fifths": "below 4/5",
          "selection_q": "selection adj. p", "tpr_diff": "TPR − ref", "fpr_diff": "FPR − ref",
          "equalized_odds_gap": "equalized-odds gap", "equalized_odds_p": "equalized-odds p", "ppv_diff": "PPV − ref",
          "ppv_q": "PPV adj. p", "fairness_flag": "flagged", "is_reference": "reference", "exclusion_reason": "left out because",
          "tpr": "TPR", "fpr": "FPR", "ppv": "PPV"}
PVALUES = ("selection_q", "equalized_odds_p", "ppv_q")
TEXT = ("group", "exclusion_reason")
FLAGS = ("below_four_fifths", "fairness_flag", "is_reference", "excluded")


def column_config(st, cols) -> dict:
    cfg = {}
    for c in cols:
        title = TITLES.get(c, c)
        if c in PVALUES:
            cfg[c] = st.column_config.NumberColumn(title, format="%.2e")
        elif c == "n":
            cfg[c] = st.column_config.NumberColumn(title, format="%d")
        elif c == "share":
            cfg[c] = st.column_config.NumberColumn(title, format="%.4f")
        elif c in FLAGS:
            cfg[c] = st.column_config.CheckboxColumn(title)
        elif c in TEXT:
            cfg[c] = st.column_config.TextColumn(title)
        else:
            cfg[c] = st.column_config.NumberColumn(title, format="%.4f")
    return cfg


def table(groups, attribute: str):
    """The rows of one protected attribute, with the page's columns (text cells blank, not 'None')."""
    cols = [c for c in FAIR_COLUMNS if c in groups.columns]
    t = groups.loc[groups["attribute"] == attribute, cols].copy()
    for c in TEXT:
        if c in t.columns:
            t[c] = t[c].astype(object).where(t[c].notna(), "").map(str)
    return t


def favourable_words(favorable) -> str:
    favs = favorable if isinstance(favorable, (tuple, list)) else (favorable,)
    return " or ".join(f"**{md(f)}**" for f in favs)


def show_flags(found, st) -> None:
    """Every fairness flag with its criterion and direction, in the report's words
    (``audit.faces.prose.fairness_findings`` and ``finding_text``)."""
    if not len(found):
        st.markdown("**No fairness flags**: no group differs from its reference group by more than chance would "
                    "explain on selection rate, true-positive rate, false-positive rate or positive predictive "
                    "value, and none is under four-fifths of the reference's selection rate.")
        return
    bad = int(found["disadvantaged"].astype(bool).sum())
    st.markdown(f"**{len(found)} fairness flag{'s' if len(found) != 1 else ''}**, {bad} of them with the group at a "
                "disadvantage (the criterion, and which way the group differs from its reference):")
    st.markdown("\n".join(f"- {'▼' if bool(r['disadvantaged']) else '△'} {md(finding_text(r))}"
                           for _, r in found.iterrows()))


def show(fr: FairnessResult, st, *, key: str = "", result=None) -> None:
    """Show the fairness view on the page (``st`` is the streamlit module); with ``result``, its
    fairness flags with their direction first."""
    if result is not None:
        show_flags(fairness_findings(result), st)
    role = {True: " (the positive prediction)", False: " (the negative prediction)",
            None: " (one or more classes: every criterion is computed one versus the rest for this set)"}
    st.markdown(f"Favourable outcome: predicted {favourable_words(fr.favorable)}{role[fr.favorable_is_positive]}"
                + f". Groups under {fr.min_group_share:.0%} of rows are shown but left out of ratios. Differences "
                  "(− ref) are against the reference group of each attribute.")
    for note in fr.notes:
        st.caption(note)
    attrs = list(dict.fromkeys(fr.groups["attribute"]))
    digest = hashlib.blake2b(repr((key, attrs)).encode(), digest_size=5).hexdigest()
    pick = st.selectbox("Protected attribute or intersection", attrs, key=f"fair_attr-{digest}")
    t = table(fr.groups, pick)
    st.dataframe(t, hide_index=True, width="stretch", column_config=column_config(st, t.columns))
    # A fixed label: a label that changed with the pick would be a new widget, closed again.
    box = chart_section(st, "Charts: selection rates and error-rate balance of the attribute picked above",
                        "chart_fairness")
    if box is not None:  # drawn from the same groups as the table above
        from audit.faces import charts

        a, b = box.columns(2)
        a.plotly_chart(charts.selection_rates(fr.groups, pick), key="fair_sel")
        b.plotly_chart(charts.error_rate_balance(fr.groups, pick), key="fair_eo")
