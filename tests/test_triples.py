"""Triples of values (max_order=3): the pruned plan, the tally against pandas' own group counts,
the printed definitions, a pure three-way weakness, and the null false-flag rate."""
import itertools
import math

import numpy as np
import pandas as pd
import pytest

import audit
from audit.core.tally import plan_families, plan_triples, tally_numpy, tally_triples, numba_available
from planted import planted_table

ATTRS = ["region", "plan", "tenure", "channel", "device"]


def _codes(df, attrs):
    cats = [pd.Categorical(df[a]) for a in attrs]
    return [np.asarray(c.codes, dtype=np.uint8) for c in cats], [len(c.categories) for c in cats], cats


@pytest.mark.parametrize("kernel", ["numpy", "compiled"])
def test_kept_triples_count_as_pandas_groups_and_pruned_ones_are_below_support(kernel):
    if kernel == "compiled" and not numba_available():
        pytest.skip("numba not installed")
    df = planted_table(1200, 11, effects=[({"channel": "agent"}, 0.1)])
    codes, cards, cats = _codes(df, ATTRS)
    y = df["y"].to_numpy()
    yhat = (df["p"].to_numpy() >= 0.5).astype(int)
    cell = (y * 2 + yhat).astype(np.int8)
    pairs = tally_numpy(codes, cards, cell, families=plan_families(len(ATTRS), 2))
    plan = plan_triples(pairs, cards, min_rows=60)
    assert plan.summary()["pruned"] > 0 and plan.summary()["kept"] > 0  # this table needs pruning
    tri = tally_triples(codes, cards, cell, plan=plan, kernel=kernel)
    # reference: pandas groupby over the three columns (every non-empty triple)
    for f, fam in enumerate(plan.families):
        names = [ATTRS[a] for a in fam]
        g = df.assign(cell=cell).groupby(names + ["cell"], observed=True).size()
        full = np.zeros((math.prod(cards[a] for a in fam), 4), dtype=np.int64)
        for key, n in g.items():
            idx = 0
            for a, v in zip(fam, key[:3]):
                idx = idx * cards[a] + list(cats[ATTRS.index(ATTRS[a])].categories).index(v)
            full[idx, key[3]] = n
        kept = plan.kept[f]
        np.testing.assert_array_equal(tri.family(f)[0], full[kept])
        pruned = np.setdiff1d(np.arange(len(full)), kept)
        assert (full[pruned].sum(axis=1) < 60).all()  # pruning only removes untestable triples


def test_triples_through_attribute_groups_equal_the_reference():
    # The compiled path packs attributes into groups (product of cardinalities <= 12) and takes
    # each triple as a margin of a group triple; counts must equal the numpy reference exactly.
    if not numba_available():
        pytest.skip("numba not installed")
    rng = np.random.default_rng(5)
    cards = [2, 3, 4, 5, 6, 3, 2]
    n = 40_000
    codes = [rng.integers(0, c, n).astype(np.uint8) for c in cards]
    cell = rng.integers(0, 4, n).astype(np.int8)
    pairs = tally_numpy(codes, cards, cell, families=plan_families(len(cards), 2))
    plan = plan_triples(pairs, cards, min_rows=30)
    a = tally_triples(codes, cards, cell, plan=plan, kernel="numpy")
    b = tally_triples(codes, cards, cell, plan=plan, kernel="compiled")
    np.testing.assert_array_equal(a.counts, b.counts)
    ll = rng.random(n)
    c = tally_triples(codes, cards, cell, ll, ll * 0.5, plan=plan, kernel="compiled")
    d = tally_triples(codes, cards, cell, ll, ll * 0.5, plan=plan, kernel="numpy")
    np.testing.assert_array_equal(c.counts, d.counts)
    np.testing.assert_allclose(c.sums, d.sums, rtol=1e-12)


def test_printed_triples_reproduce_their_n_and_the_counts_are_reported():
    df = planted_table(4000, 2)
    res = audit.run(df, label="y", score="p", max_order=3, auc_max_order=-1)
    s = res.slices
    tri = s[s["order"] == 3]
    assert len(tri) > 0
    for _, r in tri.sample(40, random_state=0).iterrows():
        mask = np.ones(len(df), dtype=bool)
        for j in (1, 2, 3):
            mask &= (df[r[f"attribute_{j}"]].astype(str) == r[f"value_{j}"]).to_numpy()
        assert mask.sum() == r["n"], r["slice"]
    t = res.method["triples"]
    cards = [df[a].nunique() for a in df.columns if a not in ("y", "p")]
    assert t["possible"] == sum(math.prod(c) for c in itertools.combinations(cards, 3))
    assert t["kept"] + t["pruned"] == t["possible"]
    assert t["listed"] == len(tri) and t["tested"] == int((tri["status"] == "tested").sum())
    assert t["tested"] <= t["listed"] <= t["kept"]
    # the correction family holds every tested slice of orders 1-3
    assert res.family_size == int((s["status"] == "tested").sum())
    # pruning is exact: every triple with at least min_support rows was kept (pandas counts)
    big = 0
    for fam in itertools.combinations([a for a in df.columns if a not in ("y", "p")], 3):
        big += int((df.groupby(list(fam), observed=True).size() >= 30).sum())
    assert big == int((tri["n"] >= 30).sum())


def test_chunked_run_equals_in_memory_with_triples(tmp_path):
    df = planted_table(3000, 4, effects=[({"plan": "basic", "tenure": "new"}, 0.2)])
    path = tmp_path / "t.csv"
    df.to_csv(path, index=False)
    a = audit.run(df, label="y", score="p", max_order=3, auc_max_order=-1)
    b = audit.run(str(path), label="y", score="p", max_order=3, auc_max_order=-1, chunk_rows=700)
    assert list(a.slices["slice"]) == list(b.slices["slice"])
    for c in ("n", "tp", "fp", "fn", "tn", "flagged", "finding", "echo_of", "finding_rank"):
        assert a.slices[c].equals(b.slices[c]), c
    np.testing.assert_allclose(a.slices["q_value"], b.slices["q_value"], rtol=1e-9)


def test_pure_three_way_weakness_is_flagged_and_a_finding():
    # Parity design: the error rate is 0.15 + 0.08 where an odd number of device=ios,
    # shift=night, promo=yes hold and 0.15 - 0.08 otherwise, so every single value and every pair
    # of these attributes has the base rate in expectation: only triples show it.
    pair_flags = 0
    for seed in range(3):
        df = planted_table(8000, seed, parity=(("device", "ios"), ("shift", "night"), ("promo", "yes")),
                           parity_size=0.08)
        res = audit.run(df, label="y", score="p", max_order=3, auc_max_order=-1)
        s = res.slices.set_index("slice")
        name = "device=ios & shift=night & promo=yes"
        assert s.loc[name, "flagged"] and s.loc[name, "finding"], seed
        assert int(res.findings().set_index("slice").loc[name, "finding_rank"]) <= 4
        three = {"device", "shift", "promo"}
        low = res.slices[(res.slices["order"] <= 2) & res.slices["flagged"]]
        pair_flags += int(sum(set(filter(None, (r.attribute_1, r.attribute_2))) <= three for r in low.itertuples()))
        # the same audit without triples cannot see it
        res2 = audit.run(df, label="y", score="p", max_order=2, auc_max_order=-1)
        sub = res2.slices[res2.slices["flagged"]]
        assert not any(set(filter(None, (r.attribute_1, r.attribute_2))) <= three for r in sub.itertuples())
    assert pair_flags == 0


def test_null_tables_with_triples_flag_in_about_alpha_of_runs():
    # No planted effect; orders 1-3 corrected together by Benjamini-Hochberg, which controls the
    # chance of any flag at alpha = 0.05 when every hypothesis is null (Benjamini & Hochberg
    # 1995, section 3). Pruning looks at row counts only, so it cannot bias this. 200 runs:
    # 0.08 leaves room for the noise of 200 runs (binomial sd about 0.015).
    runs, hits = 200, 0
    for seed in range(runs):
        rng = np.random.default_rng(9000 + seed)
        n = 1500
        y = rng.integers(0, 2, n)
        yhat = np.where(rng.random(n) < 0.2, 1 - y, y)
        df = pd.DataFrame({"y": y, "yhat": yhat, "a": rng.choice(list("abc"), n), "b": rng.choice(list("xyz"), n),
                           "c": rng.choice(list("pq"), n), "d": rng.choice(list("uv"), n)})
        res = audit.run(df, label="y", pred="yhat", max_order=3, auc_max_order=-1)
        assert res.method["triples"]["tested"] > 0
        hits += bool(res.slices["flagged"].any())
    assert hits / runs <= 0.08, hits


def test_cli_accepts_max_order_3(demo_csv, tmp_path, fissure_main):
    r = fissure_main("audit", demo_csv, "--label", "delinquent", "--score", "p_delinquent", "--max-order", "3",
                     "--out", tmp_path / "o", "--quiet")
    assert r.returncode == 0, r
    sl = pd.read_csv(tmp_path / "o" / "slices.csv")
    assert (sl["order"] == 3).any() and {"finding", "explained_by", "echo_of", "finding_rank"} <= set(sl.columns)
