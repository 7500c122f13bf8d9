"""The page's fairness view (the numbers come from ``audit.stats.fairness``)."""
from __future__ import annotations

from audit.faces import charts
from audit.stats.fairness import FairnessResult

FAIR_COLUMNS = ["attribute", "group", "n", "share", "selection_rate", "impact_ratio", "below_four_fifths", "tpr",
                "fpr", "ppv", "tpr_diff", "fpr_diff", "equalized_odds_gap", "ppv_diff", "selection_q", "excluded",
                "exclusion_reason"]



def show(fr: FairnessResult, st) -> None:
    """Show the fairness view on the page (``st`` is the streamlit module)."""
    st.markdown(f"Favourable outcome: predicted **{fr.favorable}**"
                + (" (the positive prediction)" if fr.favorable_is_positive else "")
                + f". Groups under {fr.min_group_share:.0%} of rows are shown but left out of ratios.")
    for note in fr.notes:
        st.caption(note)
    attrs = list(dict.fromkeys(fr.groups["attribute"]))
    pick = st.selectbox("Protected attribute or intersection", attrs, key="fair_attr")
    a, b = st.columns(2)
    a.plotly_chart(charts.selection_rates(fr.groups, pick), key="fair_sel")
    b.plotly_chart(charts.error_rate_balance(fr.groups, pick), key="fair_eo")
    cols = [c for c in FAIR_COLUMNS if c in fr.groups.columns]
    st.dataframe(fr.groups.loc[fr.groups["attribute"] == pick, cols], hide_index=True, width="stretch")
    if any(" & " in x for x in attrs):
        st.markdown("**Intersectional groups**")
        inter = fr.groups[fr.groups["attribute"].str.contains(" & ", regex=False)]
        st.dataframe(inter[cols], hide_index=True, width="stretch")
