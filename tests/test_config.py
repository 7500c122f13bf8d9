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
