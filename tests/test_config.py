import tomllib

import pytest

from audit.settings import AuditConfig, load_toml
from audit.errors import AuditInputError


def test_toml_round_trip_keeps_every_setting(tmp_path):
    cfg = AuditConfig(label="y", score="p", positive="1", attributes=("a", "b \"quoted\""), bins=7,
                      bin_edges={"age": (18.0, 30.0, 65.0)}, metric="recall", correction="holm",
                      protected=("sex",), favorable="0", reference={"sex": "female"}, model_name="Model ✓ <x>")
    path = tmp_path / "c.toml"
    path.write_text(cfg.to_toml())
    back = load_toml(str(path))
    assert tomllib.loads(cfg.to_toml()) == back  # a standard TOML parser reads it
    rebuilt = AuditConfig(**{k: (tuple(v) if isinstance(v, list) else v) for k, v in back.items()
                             if k not in ("bin_edges", "reference")},
                          bin_edges={k: tuple(v) for k, v in back["bin_edges"].items()}, reference=back["reference"])
    assert rebuilt == cfg and rebuilt.digest() == cfg.digest()


def test_unknown_key_and_bad_file(tmp_path):
    (tmp_path / "x.toml").write_text('label = "y"\nmetrc = "recall"\n')
    with pytest.raises(AuditInputError, match=r"unknown setting 'metrc'"):
        load_toml(str(tmp_path / "x.toml"))
    (tmp_path / "y.toml").write_text("label = \n")
    with pytest.raises(AuditInputError, match=r"is not valid TOML"):
        load_toml(str(tmp_path / "y.toml"))
    with pytest.raises(AuditInputError, match=r"does not exist"):
        load_toml(str(tmp_path / "nope.toml"))


# ----------------------------------------------------------------------------- canonical settings
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

import audit  # noqa: E402
from audit.faces.cli import main  # noqa: E402
from audit.settings import make_config  # noqa: E402
from conftest import random_table  # noqa: E402


def _rerun_from_toml(cfg, df):
    back = make_config(**tomllib.loads(cfg.to_toml()))
    assert back == cfg and back.digest() == cfg.digest()
    return audit.run(df, **{k: v for k, v in back.as_dict().items()})


@pytest.mark.parametrize("label_values,positive,expected", [
    ([False, True], True, "1"),          # booleans: positive=True means the class written "1"
    ([0.0, 1.0], 1.0, "1"),              # float labels: 1.0 is "1", not "1.0"
    ([0, 1], np.int64(1), "1"),          # numpy integers
    (["0.0", "1.0"], "1.0", "1.0"),      # text that looks like a number stays text
])
def test_class_values_round_trip_through_toml(label_values, positive, expected):
    df = random_table(n=600, seed=3)
    df["y"] = np.array(label_values, dtype=object if isinstance(label_values[0], str) else None)[df["y"].to_numpy()]
    res = audit.run(df, label="y", score="p", positive=positive)
    assert res.config.positive == expected and res.classes[1] == expected
    again = _rerun_from_toml(res.config, df)
    pd.testing.assert_frame_equal(res.slices, again.slices)


def test_a_page_style_float_text_names_the_integer_class():
    df = random_table(n=400, seed=5)
    res = audit.run(df, label="y", score="p", positive="1.0")  # what a page shows for a float label 1
    assert res.config.positive == "1" and res.classes[1] == "1"


def test_list_settings_accept_a_single_name():
    cfg = make_config(label="y", score="p", protected="gender", attributes="region", categorical="branch")
    assert cfg.protected == ("gender",) and cfg.attributes == ("region",) and cfg.categorical == ("branch",)


@pytest.mark.parametrize("kw,msg", [
    ({"bins": 2.5}, r"bins must be a whole number"),
    ({"bins": True}, r"bins must be a whole number"),
    ({"threshold": "0.5"}, r"threshold must be a number"),
    ({"max_order": 4}, r"max_order must be 1 or 2"),
    ({"protected": [1]}, r"protected must be a list of column names"),
    ({"reference": {"sex": "f"}}, r"reference groups were given but no protected attribute"),
    ({"chunk_rows": 0}, r"chunk_rows must be a whole number of at least 1"),
    ({"categorical": ["a"], "numeric": ["a"]}, r"column 'a' is listed as both categorical and numeric"),
    ({"metric": "log_loss", "score": None, "pred": "q"}, r"metric 'log_loss' needs a probability column"),
])
def test_settings_are_checked_before_any_work(kw, msg):
    with pytest.raises(AuditInputError, match=msg) as exc:
        make_config(**{"label": "y", "score": "p", **kw})
    assert exc.value.setting is not None


def test_every_cli_option_round_trips_through_fissure_toml(tmp_path, capsys):
    df = random_table(n=2500, seed=8)
    df["branch"] = np.tile([11, 22, 33, 44, 55], 500)
    df["kids"] = np.tile([0, 1, 2, 3, 4], 500)
    df["q"] = (df["p"] >= 0.4).astype(int)
    df.loc[7, "y"] = np.nan
    data = tmp_path / "t.csv"
    df.to_csv(data, index=False)
    args = ["audit", str(data), "--label", "y", "--pred", "q", "--score", "p", "--positive", "1", "--threshold", "0.4",
            "--attributes", "region,plan,age,branch,kids", "--categorical", "branch", "--numeric", "kids",
            "--drop-unlabelled", "--bins", "4", "--bin-edges", "age=30,45,60", "--metric", "recall",
            "--min-support", "25", "--min-metric-support", "8", "--alpha", "0.1", "--correction", "holm",
            "--interval", "clopper-pearson", "--level", "0.9", "--max-order", "1", "--auc-max-order", "0",
            "--protected", "region,plan", "--favorable", "0", "--reference", "region=r1", "--min-group-share", "0.05",
            "--model-name", "Routing model ✓", "--model-version", "7", "--intended-use", "testing",
            "--encoding", "utf-8", "--chunk-rows", "700", "--quiet", "--out", str(tmp_path / "a")]
    assert main(args) == 0, capsys.readouterr().err
    toml = (tmp_path / "a" / "fissure.toml").read_text()
    cfg = make_config(**tomllib.loads(toml))
    for name in ("pred", "positive", "threshold", "attributes", "categorical", "numeric", "drop_unlabelled", "bins",
                 "bin_edges", "metric", "min_support", "min_metric_support", "alpha", "correction", "interval",
                 "level", "max_order", "auc_max_order", "protected", "favorable", "reference", "min_group_share",
                 "model_name", "model_version", "intended_use", "encoding", "chunk_rows"):
        assert getattr(cfg, name) != getattr(AuditConfig(label="y"), name), name  # every option was recorded
    assert main(["audit", str(data), "--config", str(tmp_path / "a" / "fissure.toml"), "--quiet", "--out",
                 str(tmp_path / "b")]) == 0
    for f in ("slices.csv", "fairness.csv"):
        assert (tmp_path / "a" / f).read_bytes() == (tmp_path / "b" / f).read_bytes()
