import numpy as np
import pandas as pd
import pytest

from audit.core.encoding import MISSING, Encoding, bin_labels, encode_attributes, fit_encoding, profile_column
from audit.errors import AuditInputError


def test_bin_labels_are_half_open_with_open_tails():
    assert bin_labels([18, 30, 45, 90], lower_tail=False, upper_tail=False) == ["[18, 30)", "[30, 45)", "[45, 90)"]
    assert bin_labels([18, 65], lower_tail=True, upper_tail=True) == ["(-inf, 18)", "[18, 65)", "[65, inf)"]


def test_quantile_bins_put_edge_values_in_upper_bin():
    df = pd.DataFrame({"x": [1.5, 2.5, 3.5, 4.5, 5.5, 6.5, 7.5, 8.5, 9.5, 10.5]})
    (a,), _ = encode_attributes(df, ["x"], explicit=False, n_bins=2)
    assert a.kind == "binned" and a.levels == ("(-inf, 6)", "[6, inf)")
    assert a.codes.tolist() == [0] * 5 + [1] * 5


def test_quantile_edges_are_round_numbers_chosen_before_rows_are_assigned():
    # A printed label is the rule itself: the median 2002.6 becomes the edge 2000, and the row
    # holding 2001 goes to the upper bin because 2001 >= 2000, as the label says.
    df = pd.DataFrame({"w": [855.0, 1200.0, 1999.0, 2001.0, 2004.2, 18811.0]})
    (a,), _ = encode_attributes(df, ["w"], n_bins=2)
    assert a.levels == ("(-inf, 2000)", "[2000, inf)")
    assert a.codes.tolist() == [0, 0, 0, 1, 1, 1]
    big = pd.DataFrame({"v": np.linspace(1e6, 9e6, 101)})
    (b,), _ = encode_attributes(big, ["v"], n_bins=4)
    assert all("e+" not in lv for lv in b.levels)  # plain digits, not scientific notation


def test_explicit_edges_get_two_open_tails_and_missing():
    df = pd.DataFrame({"x": [-5.0, 0.0, 29.9, 30.0, 45.0, 99.0, np.nan]})
    (a,), _ = encode_attributes(df, ["x"], explicit=True, bin_edges={"x": [0, 30, 45]})
    assert a.levels == ("(-inf, 0)", "[0, 30)", "[30, 45)", "[45, inf)", MISSING)
    assert a.codes.tolist() == [0, 1, 1, 2, 3, 3, 4]
    assert a.n_missing == 1 and a.edges == (0.0, 30.0, 45.0)
    inside = pd.DataFrame({"x": [0.0, 12.0, 44.0]})
    (b,), _ = encode_attributes(inside, ["x"], bin_edges={"x": [0, 30, 45]})
    assert b.levels == ("[0, 30)", "[30, 45)") and b.codes.tolist() == [0, 0, 1]


def test_bad_edges():
    df = pd.DataFrame({"x": [1.0, 2.0], "g": ["a", "b"]})
    with pytest.raises(AuditInputError, match=r"bin edges for 'x' must be at least two increasing numbers"):
        encode_attributes(df, ["x"], explicit=True, bin_edges={"x": [3, 1]})
    with pytest.raises(AuditInputError, match=r"bin edges were asked for 'g', which is not numeric"):
        encode_attributes(df, ["g"], explicit=True, bin_edges={"g": [0, 1]})


def test_small_integer_columns_are_categories_and_missing_is_a_level():
    df = pd.DataFrame({"kids": [0, 1, 2, 2, 3, 0], "town": ["b", None, "a", "b", "a", "b"]})
    attrs, skipped = encode_attributes(df, ["kids", "town"], explicit=False)
    kids, town = attrs
    assert kids.kind == "integer category" and kids.levels == ("0", "1", "2", "3")
    assert town.levels == ("a", "b", MISSING) and town.codes.tolist() == [1, 2, 0, 1, 0, 1]
    assert skipped == {}


def test_identifier_and_constant_columns_are_skipped_with_reason():
    n = 200
    df = pd.DataFrame({"id": [f"c{i}" for i in range(n)], "const": ["x"] * n, "g": ["a", "b"] * (n // 2)})
    attrs, skipped = encode_attributes(df, ["id", "const", "g"], explicit=False)
    assert [a.name for a in attrs] == ["g"]
    assert skipped["id"].startswith("looks like an identifier (200 distinct values")
    assert skipped["const"] == "a single value in every row"


def test_categorical_dtype_keeps_only_present_levels():
    s = pd.Categorical(["b", "a", None, "b"], categories=["a", "b", "zz"])
    (a,), _ = encode_attributes(pd.DataFrame({"c": s}), ["c"], explicit=False)
    assert a.levels == ("a", "b", MISSING) and a.codes.tolist() == [1, 0, 2, 1]


def test_numeric_identifiers_are_skipped_and_codes_can_be_categories():
    n = 300
    df = pd.DataFrame({"rownames": np.arange(1, n + 1), "branch": np.tile([101, 205, 317, 480, 512, 613, 777, 801,
                                                                           902, 911, 920, 930, 940, 950], 30)[:n],
                       "amount": np.linspace(0, 1, n)})
    attrs, skipped = encode_attributes(df, ["rownames", "branch", "amount"])
    assert skipped["rownames"].startswith("looks like a numeric identifier (300 distinct whole numbers")
    assert [a.name for a in attrs] == ["branch", "amount"] and attrs[0].kind == "binned"
    attrs, _ = encode_attributes(df, ["branch"], categorical=["branch"])
    assert attrs[0].kind == "category" and attrs[0].levels[:3] == ("101", "205", "317")
    kids = pd.DataFrame({"kids": [0, 1, 2, 3] * 10})
    (k,), _ = encode_attributes(kids, ["kids"], numeric=["kids"], n_bins=2)
    assert k.kind == "binned"


def test_a_fitted_encoding_applies_to_other_chunks_and_refuses_unseen_values():
    a = pd.DataFrame({"g": ["x", "y", "x"], "v": [1.5, 20.0, 7.0]})
    b = pd.DataFrame({"g": ["y", "y"], "v": [100.0, -3.0]})
    profiles = [profile_column(a[c], c) + profile_column(b[c], c) for c in ("g", "v")]
    enc = fit_encoding(profiles, n_bins=2)
    codes_a, codes_b = enc.apply(a), enc.apply(b)
    whole = pd.concat([a, b], ignore_index=True)
    assert [np.r_[x, y].tolist() for x, y in zip(codes_a, codes_b)] == [c.tolist() for c in enc.apply(whole)]
    assert Encoding.from_dict(enc.to_dict()) == enc
    with pytest.raises(AuditInputError, match=r"attribute column 'g' has value 'z' at data row 2, which was not seen"):
        enc.apply(pd.DataFrame({"g": ["x", "z"], "v": [1.0, 2.0]}))
    with pytest.raises(AuditInputError, match=r"value '\(missing\)' at data row 1"):
        enc.apply(pd.DataFrame({"g": [None], "v": [1.0]}))


def test_text_columns_profiled_in_parts_state_what_the_parts_know():
    # Two 1,500-row parts profiled with a 1,000-value cap keep only their distinct counts.
    ids = pd.Series([f"c{i}" for i in range(3000)])
    p = profile_column(ids[:1500], "id", cap=1000) + profile_column(ids[1500:], "id", cap=1000)
    assert p.distinct_bounds == (1500, 3000)
    enc = fit_encoding([p])
    # Identifier rule (encoding.ID_MIN_DISTINCT, ID_SHARE): more than 20, at least 90% of 3,000 rows = 2,700.
    assert enc.skipped["id"] == ("at least 1500 and at most 3000 distinct values in 3000 rows (counted chunk by "
                                 "chunk), more than max_levels=100: an identifier or too varied to slice")
    # Listed as categorical, the identifier rule does not apply; too many levels does.
    enc = fit_encoding([p], categorical=["id"])
    assert enc.skipped["id"] == "at least 1500 distinct values, more than max_levels=100; bin or group it first"
    # A part with 2,800 distinct of the 3,000 rows meets the rule by itself.
    q = profile_column(ids[:2800], "id", cap=1000) + profile_column(ids[2800:], "id", cap=1000)
    assert fit_encoding([q]).skipped["id"] == "looks like an identifier (at least 2800 distinct values in 3000 rows)"
    # One part alone is counted exactly: the in-memory wording.
    assert fit_encoding([profile_column(ids, "id", cap=1000)]).skipped["id"] == \
        "looks like an identifier (3000 distinct values in 3000 rows)"
    # Past TEXT_CAP a profile keeps no values but still counts them (was "more than 1 distinct values").
    many = pd.Series([f"c{i}" for i in range(100_001)])
    assert fit_encoding([profile_column(many, "id")]).skipped["id"] == \
        "looks like an identifier (100001 distinct values in 100001 rows)"
    # A profile built elsewhere that dropped its values uncounted had more than TEXT_CAP (the only
    # reason profile_column drops them): the reason says so instead of a number it does not have.
    from audit.core.encoding import ColumnProfile

    bare = ColumnProfile("id", "text", 1_000_000, 0, counts=None)
    assert fit_encoding([bare]).skipped["id"] == ("at least 100001 distinct values in 1000000 rows (not counted "
                                                  "exactly), more than max_levels=100: an identifier or too varied "
                                                  "to slice")
