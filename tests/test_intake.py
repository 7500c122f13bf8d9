import numpy as np
import pandas as pd
import pytest

from audit.errors import AuditInputError
from audit.core.outcomes import read_outcomes
from audit.core.read import read_table


def frame(**kw):
    base = {"y": [0, 1, 0, 1], "p": [0.1, 0.8, 0.4, 0.6], "g": ["a", "b", "a", "b"]}
    base.update(kw)
    return pd.DataFrame(base)


def test_positive_inferred_for_zero_one():
    o = read_outcomes(frame(), label="y", score="p")
    assert o.positive == "1" and o.positive_inferred
    assert o.yhat.tolist() == [0, 1, 0, 1]


@pytest.mark.parametrize("values,pos", [(["no", "yes", "no", "yes"], "yes"), ([False, True, False, True], "1"),
                                        (["N", "Y", "N", "Y"], "Y")])
def test_positive_inferred_for_known_pairs(values, pos):
    o = read_outcomes(frame(y=values), label="y", score="p")
    assert o.positive == pos


def test_unknown_pair_needs_positive():
    with pytest.raises(AuditInputError, match=r"label column 'y' has classes 'bad' and 'good'.*--positive"):
        read_outcomes(frame(y=["good", "bad", "good", "bad"]), label="y", score="p")
    o = read_outcomes(frame(y=["good", "bad", "good", "bad"]), label="y", score="p", positive="bad")
    assert o.y.tolist() == [0, 1, 0, 1]


def test_threshold_is_inclusive():
    o = read_outcomes(frame(p=[0.5, 0.49, 0.51, 1.0]), label="y", score="p", threshold=0.5)
    assert o.yhat.tolist() == [1, 0, 1, 1]


@pytest.mark.parametrize("kw,msg", [
    ({"label": "nope", "score": "p"}, r"label column 'nope' is not in the table"),
    ({"label": "y"}, r"give a prediction column"),
    ({"label": "y", "score": "p", "positive": "7"}, r"positive class '7' does not occur in label column 'y'"),
    ({"label": "y", "score": "y"}, r"probability column 'y' is the label column"),
    ({"label": "y", "score": "p", "threshold": 1.5}, r"threshold must be a number in \[0, 1\]"),
])
def test_bad_settings(kw, msg):
    with pytest.raises(AuditInputError, match=msg):
        read_outcomes(frame(), **kw)


def test_label_problems():
    with pytest.raises(AuditInputError, match=r"label column 'y' has 1 distinct value \(0\); expected two"):
        read_outcomes(frame(y=[0, 0, 0, 0]), label="y", score="p")
    with pytest.raises(AuditInputError, match=r"label column 'y' has 3 distinct values \(0, 1, 2\)"):
        read_outcomes(frame(y=[0, 1, 2, 1]), label="y", score="p")
    with pytest.raises(AuditInputError, match=r"label column 'y' has a missing value at data row 3"):
        read_outcomes(frame(y=[0, 1, np.nan, 1]), label="y", score="p")


def test_probability_problems():
    with pytest.raises(AuditInputError, match=r"probability column 'p' has value 1.2 at data row 2"):
        read_outcomes(frame(p=[0.1, 1.2, 0.3, 0.4]), label="y", score="p")
    with pytest.raises(AuditInputError, match=r"probability column 'p' has a non-numeric value 'high' at data row 4"):
        read_outcomes(frame(p=["0.1", "0.2", "0.3", "high"]), label="y", score="p")
    with pytest.raises(AuditInputError, match=r"probability column 'p' has a missing value at data row 1"):
        read_outcomes(frame(p=[np.nan, 0.2, 0.3, 0.4]), label="y", score="p")


def test_prediction_classes_must_match_label():
    with pytest.raises(AuditInputError, match=r"prediction column 'yhat' has value '2' at data row 3, which is not a class"):
        read_outcomes(frame(yhat=[0, 1, 2, 1]), label="y", pred="yhat")
    o = read_outcomes(frame(yhat=[1.0, 1.0, 0.0, 0.0]), label="y", pred="yhat")
    assert o.yhat.tolist() == [1, 1, 0, 0] and o.prediction_source == "column"


def test_duplicate_columns_in_frame():
    df = pd.DataFrame([[0, 0.1, 0.2]], columns=["y", "p", "p"])
    with pytest.raises(AuditInputError, match=r"column name 'p' more than once"):
        read_outcomes(df, label="y", score="p")


@pytest.mark.parametrize("name,content,msg", [
    ("missing.csv", None, r"does not exist"),
    ("empty.csv", "", r"'empty.csv' is empty"),
    ("head.csv", "y,p,g\n", r"'head.csv' has a header but no data rows"),
    ("dup.csv", "y,p,p\n0,0.1,0.2\n", r"'dup.csv' has the column name 'p' more than once"),
    ("x.json", "{}", r"extension '.json'"),
])
def test_read_table_errors(tmp_path, name, content, msg):
    if content is not None:
        (tmp_path / name).write_text(content)
    with pytest.raises(AuditInputError, match=msg):
        read_table(tmp_path / name)


def test_read_table_parquet_and_hash(tmp_path):
    import hashlib

    df = frame()
    df.to_parquet(tmp_path / "t.parquet")
    back, info = read_table(tmp_path / "t.parquet")
    assert back.equals(df)
    assert info.sha256 == hashlib.sha256((tmp_path / "t.parquet").read_bytes()).hexdigest()


def _stray_label(n=600, seed=4):
    """A two-class table (seeded) where three rows hold a third label value, 2."""
    rng = np.random.default_rng(seed)
    y = rng.integers(0, 2, n)
    y[[123, 301, 477]] = 2
    y[[40, 41]] = 3  # a fourth value, rarer still
    return pd.DataFrame({"y": y, "p": rng.random(n).round(4), "g": rng.choice(["a", "b"], n)})


def test_a_stray_label_value_with_one_probability_column_names_its_first_row(tmp_path):
    import audit

    df = _stray_label()
    y = df["y"]
    # The rarest value outside the two most frequent, and its first data row (1-based), by pandas.
    counts = y.value_counts()
    rarest = counts[~counts.index.isin(counts.index[:2])].idxmin()
    row = int(np.flatnonzero(y.to_numpy() == rarest)[0]) + 1
    assert (rarest, counts[rarest], row) == (3, 2, 41)
    msg = (rf"^label column 'y' has 4 distinct values \(0, 1, 2, 3\) where a two-class audit \(one probability "
           rf"column, 'p'\) expects two: the rarest other value, '3' \(2 rows\), is first at data row {row}; for a "
           r"multi-class audit give one probability column per class: score=\{class: column\}")
    with pytest.raises(AuditInputError, match=msg):
        read_outcomes(df, label="y", score="p")
    path = tmp_path / "t.csv"
    df.to_csv(path, index=False)
    with pytest.raises(AuditInputError, match=msg):  # read in chunks: the same global row
        audit.run(str(path), label="y", score="p", chunk_rows=25)
    # Unlabelled rows left out still count in the row numbering (as every outcome message does).
    gaps = df.astype({"y": float})
    gaps.loc[[5, 6], "y"] = np.nan
    with pytest.raises(AuditInputError, match=msg):
        audit.run(gaps, label="y", score="p", drop_unlabelled=True)
    # Only one stray value: it is the one named (2, three rows, first at data row 124).
    two = df.assign(y=df["y"].replace(3, 0))
    with pytest.raises(AuditInputError, match=r"the rarest other value, '2' \(3 rows\), is first at data row 124;"):
        audit.run(two, label="y", score="p", positive="1")
