"""The page's findings: flagged slices that nothing else explains, each with its echoes folded under it.

The roles come from the engine (``audit.stats.findings``): ``result.findings()`` ranks the
findings by the cautious end of their selection-adjusted interval and counts their echoes;
``result.echoes(name)`` lists the flagged slices that only carry a finding's weakness. The
same view serves a live audit and an output folder opened read-only (``ui.folder_view``),
since both are an ``AuditResult``.
"""
from __future__ import annotations

import pandas as pd

from audit.faces.prose import class_drivers, fmt_p, is_multiclass, level_pct, selection_level
from ui.wording import fmt, md

FINDING_COLUMNS = ["finding_rank", "slice", "n", "metric_value", "rest_value", "diff", "diff_low_adj",
                   "diff_high_adj", "q_value", "echoes"]
ECHO_COLUMNS = ["flag_rank", "slice", "n", "metric_value", "rest_value", "diff", "q_value", "explained_by"]
#: Findings shown one by one with their echoes; the rest are in the findings table and the ranked list.
SHOWN = 25


def findings_table(result) -> pd.DataFrame:
    """The findings as the page's table (the engine's columns, renamed for reading)."""
    f = result.findings()
    return f[[c for c in FINDING_COLUMNS if c in f.columns]].rename(columns={"metric_value": result.metric.name})


def drivers_text(result, name: str) -> str:
    """Which classes drive a slice, in words (three or more classes; empty otherwise)."""
    if not is_multiclass(result):
        return ""
    d = class_drivers(result, name)
    if not len(d):
        return "No class's recall or precision is lower here than in the rest of the rows."
    parts = [f"{r['rate']} of '{md(r['class'])}' {r['slice_value']:.3f} vs {r['rest_value']:.3f} in the rest "
             f"({int(r['slice_rows']):,} rows here)" for _, r in d.iterrows()]
    return "Driven by: " + "; ".join(parts) + "."


def show(result, st, *, key: str = "") -> None:
    """Findings first (``st`` is the streamlit module or a container, such as a tab); ``key`` names the
    result, so each finding's box keeps its open or closed state while the result stays the same."""
    from streamlit import column_config

    m = result.metric
    f = result.findings()
    stc = result.status_counts()
    n_flagged = stc.get("flagged", 0)
    lvl = selection_level(result)
    if not len(f):
        st.markdown(f"**No findings**: no slice does significantly worse than the rest of the rows on {md(m.title)} "
                    f"({stc.get('tested', 0):,} slices tested). Absence of a flag is not evidence of equal "
                    "performance: small slices have little power.")
        return
    n_echo = int(f["echoes"].sum())
    st.markdown(f"**{len(f)} finding{'s' if len(f) != 1 else ''}** among {n_flagged:,} flagged slices; the other "
                f"{n_echo:,} flagged slices are **echoes**: they are flagged only because they lie in or around a "
                "finding, and are folded under it. Findings are ranked by the cautious end of their interval of "
                "(slice − rest)" + (f", widened to {level_pct(lvl)} to allow for having picked them out of every "
                                    "tested slice (selection-adjusted)" if lvl else "") + ".")
    table = findings_table(result)
    name = m.name
    num = column_config.NumberColumn
    st.dataframe(table, hide_index=True, width="stretch", height=min(400, 35 * (len(table) + 1) + 3),
                 column_config={"finding_rank": num("finding", format="%d"), name: num(format="%.4f"),
                                "rest_value": num("rest", format="%.4f"), "diff": num("slice − rest", format="%.4f"),
                                "diff_low_adj": num("adjusted low", format="%.4f"),
                                "diff_high_adj": num("adjusted high", format="%.4f"),
                                "q_value": num("adjusted p", format="%.2e"), "echoes": num("echoes", format="%d")})
    for i, (_, r) in enumerate(f.head(SHOWN).iterrows()):
        k = int(r["echoes"])
        label = (f"Finding {int(r['finding_rank'])} · {md(r['slice'])} — "
                 + (f"{k} echo{'es' if k != 1 else ''} folded under it" if k else "no echoes"))
        # Filled only while open: up to SHOWN echo tables would otherwise be drawn, unseen, by every tab.
        box = st.expander(label, expanded=False, key=f"finding_open-{key}-{i}", on_change="rerun")
        if not box.open:
            continue
        box.markdown(f"n = **{int(r['n']):,}** rows · {md(name)} {fmt(r['metric_value'])} against "
                     f"{fmt(r['rest_value'])} in the rest · difference {fmt(r['diff'])}, selection-adjusted "
                     f"interval [{fmt(r['diff_low_adj'])}, {fmt(r['diff_high_adj'])}] · adjusted p "
                     f"{fmt_p(r['q_value'])}")
        why = drivers_text(result, r["slice"])
        if why:
            box.markdown(why)
        if k:
            e = result.echoes(r["slice"])
            e = e[[c for c in ECHO_COLUMNS if c in e.columns]].rename(columns={"metric_value": name})
            e["explained_by"] = e["explained_by"].astype(object).where(e["explained_by"].notna(), "").map(str)
            box.caption("Echoes: flagged slices that are not significantly worse than the finding's other rows, or "
                        "that are flagged only because the finding lies inside them.")
            box.dataframe(e, hide_index=True, width="stretch", height=min(300, 35 * (len(e) + 1) + 3),
                          column_config={"flag_rank": num("flag rank", format="%d"), name: num(format="%.4f"),
                                         "rest_value": num("rest", format="%.4f"),
                                         "diff": num("slice − rest", format="%.4f"),
                                         "q_value": num("adjusted p", format="%.2e"),
                                         "explained_by": column_config.TextColumn("explained by")})
    if len(f) > SHOWN:
        st.caption(f"{len(f) - SHOWN} more findings are in the table above and in the full ranked list.")
