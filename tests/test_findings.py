"""Findings and echoes (audit.stats.findings) and the selection-adjusted intervals of the
flagged slices. Outside references: statsmodels' Newcombe interval for a difference of
proportions and scipy's Welch t test, each called at the level Benjamini & Yekutieli (2005)
define for the selected; the demo's and planted tables' weaknesses are known by construction."""
import numpy as np
import pytest

import audit
from planted import planted_table

PLANTED = [({"channel": "agent"}, 0.12), ({"plan": "basic", "tenure": "new"}, 0.2),
           ({"plan": "premium", "channel": "web", "segment": "s2"}, 0.35)]
NAMES = ["channel=agent", "plan=basic & tenure=new", "plan=premium & channel=web & segment=s2"]


def _conds(name):
    return set(p.strip() for p in name.split(" & "))


def test_every_flagged_slice_has_one_role(demo_result):
    s = demo_result.slices
    f = s[s["flagged"]]
    assert f["finding"].sum() >= 1
    # a finding names no explanation; an echo names a flagged slice and folds under a finding
    assert (f.loc[f["finding"], "explained_by"] == "").all()
    echoes = f[~f["finding"]]
    assert (echoes["explained_by"] != "").all()
    flagged_names = set(f["slice"])
    assert set(echoes["explained_by"]) <= flagged_names
    assert set(echoes["echo_of"]) <= set(f.loc[f["finding"], "slice"])
    # unflagged slices have no role
    u = s[~s["flagged"]]
    assert not u["finding"].any() and (u["explained_by"] == "").all() and u["finding_rank"].isna().all()
    # findings() folds every echo under one finding
    fd = demo_result.findings()
    assert fd["echoes"].sum() == len(echoes)
    assert list(fd["finding_rank"]) == list(range(1, len(fd) + 1))
    assert sorted(f["flag_rank"].astype(int)) == list(range(1, len(f) + 1))  # no gaps


def test_demo_planted_weaknesses_lead_the_findings(demo_result, demo_df):
    # demo/README.md: the pair age_band=18-24 & employment_type=gig, channel=broker and
    # income_band=(missing) are planted and lead the findings by error rate (the missing income also
    # leads by recall). Other findings are explained there.
    fd = demo_result.findings()
    assert list(fd["slice"][:3]) == ["age_band=18-24 & employment_type=gig", "channel=broker", "income_band=(missing)"]
    s = demo_result.slices.set_index("slice")
    assert s.loc["age_band=18-24 & channel=broker", "echo_of"] == "channel=broker"
    assert s.loc["sex=male & channel=broker", "echo_of"] == "channel=broker"
    rec = audit.run(demo_df, label="delinquent", score="p_delinquent", metric="recall").findings()
    assert rec["slice"].iloc[0] == "income_band=(missing)"
    assert rec["echoes"].iloc[0] >= 10


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_planted_single_pair_and_triple_are_findings(seed):
    df = planted_table(20_000, seed, effects=PLANTED)
    res = audit.run(df, label="y", score="p", max_order=3, auc_max_order=-1)
    s = res.slices.set_index("slice")
    for name in NAMES:
        assert s.loc[name, "flagged"] and s.loc[name, "finding"], name
    # echoes fold under their cause: pairs holding channel=agent with an attribute that has no effect
    for other in ("region=north", "device=ios", "shift=day"):
        name = res.slice(f"{other} & channel=agent")["slice"]
        if s.loc[name, "flagged"]:
            assert s.loc[name, "echo_of"] == "channel=agent", name
    # the pair holding the planted triple is flagged only through it
    assert s.loc["plan=premium & channel=web", "echo_of"] in ("", NAMES[2])
    if s.loc["plan=premium & channel=web", "flagged"]:
        assert s.loc["plan=premium & channel=web", "echo_of"] == NAMES[2]
    # Findings that share no condition with a planted slice are false discoveries; they are few
    # (BH keeps the expected false share of the 400-odd flags at 5%, and most false flags fold).
    planted = [_conds(n) for n in NAMES]
    fd = res.findings()
    stray = [n for n in fd["slice"] if not any(_conds(n) & p for p in planted)]
    assert len(stray) <= 3, stray
    # intersections of two planted weaknesses (e.g. plan=basic & tenure=new & channel=agent) are
    # findings of their own: worse than either weakness alone; the planted ones lead the rest
    top = set(fd["slice"][:7])
    assert set(NAMES) <= top


def _adjusted_level(res):
    m = res.family_size
    r = int((res.slices["q_value"] <= res.config.alpha).sum())
    return r, m, 1 - r * res.config.alpha / m


def test_adjusted_intervals_match_newcombe_at_the_selection_level(demo_result):
    # Benjamini & Yekutieli (2005), JASA 100:71-81, section 2: for the R selected of m tested,
    # marginal intervals at level 1 - R*q/m. Computed here with statsmodels' Newcombe hybrid
    # score interval (Newcombe 1998, method 10) on each flagged slice's counts and its rest's.
    from statsmodels.stats.proportion import confint_proportions_2indep

    res = demo_result
    r, m, level = _adjusted_level(res)
    assert r == res.method["explanations"]["selected"] and level == pytest.approx(
        res.method["explanations"]["selection_level"])
    whole = res.slice("(all)")
    f = res.flagged()
    assert len(f) > 10
    for _, row in f.iterrows():
        lo, hi = confint_proportions_2indep(row["errors"], row["n"], whole["errors"] - row["errors"],
                                            whole["n"] - row["n"], method="newcomb", compare="diff",
                                            alpha=1 - level)
        assert row["diff_low_adj"] == pytest.approx(lo, abs=1e-9)
        assert row["diff_high_adj"] == pytest.approx(hi, abs=1e-9)
        # wider than the unadjusted interval, and still excluding no difference
        assert row["diff_low_adj"] <= row["diff_low"] + 1e-12 and row["diff_high_adj"] >= row["diff_high"] - 1e-12
        assert row["diff_low_adj"] > 0
    s = res.slices
    assert s.loc[~s["flagged"], "diff_low_adj"].isna().all()
    fd = res.findings()
    assert fd["severity_adj"].is_monotonic_decreasing
    assert np.allclose(fd["severity_adj"], fd["diff_low_adj"])


def test_adjusted_intervals_match_welch_for_log_loss():
    # Log loss is a mean: the adjusted interval is Welch's at level 1 - R*alpha/m; reference:
    # scipy.stats.ttest_ind(equal_var=False).confidence_interval on the rows' own log losses.
    from scipy import stats

    df = planted_table(6000, 3, effects=[({"channel": "agent"}, 0.15)])
    res = audit.run(df, label="y", score="p", metric="log_loss", max_order=1)
    r, m, level = _adjusted_level(res)
    p = np.clip(df["p"].to_numpy(), 1e-15, 1 - 1e-15)
    ll = -np.log(np.where(df["y"] == 1, p, 1 - p))
    f = res.flagged()
    assert "channel=agent" in set(f["slice"])
    for _, row in f.iterrows():
        inside = (df[row["attribute_1"]] == row["value_1"]).to_numpy()
        ci = stats.ttest_ind(ll[inside], ll[~inside], equal_var=False).confidence_interval(confidence_level=level)
        assert row["diff_low_adj"] == pytest.approx(ci.low, abs=1e-9)
        assert row["diff_high_adj"] == pytest.approx(ci.high, abs=1e-9)


def test_a_pair_inside_a_bad_value_is_an_echo_and_a_value_around_a_bad_pair_too():
    # channel=agent is bad everywhere, so its pairs with attributes that carry no effect echo it;
    # plan=basic & tenure=new is bad and the rest of plan=basic (and of tenure=new) is not, so the
    # two single values echo the pair. Each run decides with tests, and the rest of a value is
    # worse than the table by chance now and then (Holm keeps that to alpha per family): over
    # ten seeds, measured 2026-12-02, plan=basic folded in 9 runs and tenure=new in 10.
    folded = {"plan=basic": 0, "tenure=new": 0}
    for seed in range(10):
        df = planted_table(30_000, seed, effects=[({"channel": "agent"}, 0.12),
                                                   ({"plan": "basic", "tenure": "new"}, 0.3)])
        res = audit.run(df, label="y", score="p", auc_max_order=-1)
        s = res.slices.set_index("slice")
        assert s.loc["channel=agent", "finding"] and s.loc["plan=basic & tenure=new", "finding"]
        for v in folded:
            assert s.loc[v, "flagged"]
            folded[v] += s.loc[v, "echo_of"] == "plan=basic & tenure=new"
        assert s.loc["region=east & channel=agent", "echo_of"] == "channel=agent"
    assert min(folded.values()) >= 8, folded
