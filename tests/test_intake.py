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
