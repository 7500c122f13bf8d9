import numpy as np
import pandas as pd
import pytest

from audit.core.encoding import MISSING, edge_labels, encode_attributes
from audit.errors import AuditInputError


def test_edge_labels_are_half_open_with_closed_last():
    assert edge_labels([18, 30, 45, 90]) == ["[18, 30)", "[30, 45)", "[45, 90]"]


def test_quantile_bins_put_edge_values_in_upper_bin():
    df = pd.DataFrame({"x": [1.5, 2.5, 3.5, 4.5, 5.5, 6.5, 7.5, 8.5, 9.5, 10.5]})
    (a,), _ = encode_attributes(df, ["x"], explicit=False, n_bins=2)
    assert a.kind == "binned" and a.levels == ("[1.5, 6)", "[6, 10.5]")
    assert a.codes.tolist() == [0] * 5 + [1] * 5


def test_explicit_edges_and_out_of_range_and_missing():
    df = pd.DataFrame({"x": [0.0, 29.9, 30.0, 45.0, 99.0, np.nan]})
    (a,), _ = encode_attributes(df, ["x"], explicit=True, bin_edges={"x": [0, 30, 45]})
    assert a.levels == ("[0, 30)", "[30, 45]", "(out of range)", MISSING)
    assert a.codes.tolist() == [0, 0, 1, 1, 2, 3]
    assert a.n_missing == 1 and a.edges == (0.0, 30.0, 45.0)


def test_bad_edges():
    df = pd.DataFrame({"x": [1.0, 2.0], "g": ["a", "b"]})
    with pytest.raises(AuditInputError, match=r"bin edges for 'x' must be at least two increasing numbers"):
        encode_attributes(df, ["x"], explicit=True, bin_edges={"x": [3, 1]})
    with pytest.raises(AuditInputError, match=r"bin edges were given for 'g', which is not numeric"):
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
