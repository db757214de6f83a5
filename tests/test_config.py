import json

import pytest

from driftloop.config import Config, QCConfig, config_from_dict, load_config, provenance
from driftloop.errors import ConfigError


def test_defaults_are_the_documented_thresholds():
    qc = Config().qc
    # Speed thresholds for drogued surface drifters: common practice.
    assert qc.speed_fail_m_s == 3.0
    assert qc.speed_suspect_m_s == 2.0
    assert qc.speed_suspect_m_s < qc.speed_fail_m_s


def test_toml_overrides_one_key_and_keeps_the_rest(tmp_path):
    path = tmp_path / "c.toml"
    path.write_text('[qc]\nspeed_fail_m_s = 2.5\n\n[read]\ncolumns = { id = "buoy" }\n')
    config = load_config(path)
    assert config.qc.speed_fail_m_s == 2.5
    assert config.qc.speed_suspect_m_s == QCConfig().speed_suspect_m_s
    assert config.read.columns == {"id": "buoy"}


def test_integer_accepted_for_float_key(tmp_path):
    path = tmp_path / "c.toml"
    path.write_text("[qc]\nspeed_fail_m_s = 4\n")
    value = load_config(path).qc.speed_fail_m_s
    assert value == 4.0 and isinstance(value, float)


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("[qc]\nspeed_fail = 3\n", "unknown key 'qc.speed_fail'"),
        ("[qcc]\nx = 1\n", "unknown section [qcc]"),
        ('[qc]\nspeed_fail_m_s = "fast"\n', "key 'qc.speed_fail_m_s' must be float"),
        ("[qc]\nland_test = 1\n", "key 'qc.land_test' must be bool"),
        ("[qc\n", "not valid TOML"),
    ],
)
def test_bad_config_names_the_key_and_file(tmp_path, text, expected):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(ConfigError) as info:
        load_config(path)
    message = str(info.value)
    assert expected in message
    assert str(path) in message
    assert "\n" not in message


def test_missing_config_file_is_a_clear_error(tmp_path):
    with pytest.raises(ConfigError, match="cannot read configuration"):
        load_config(tmp_path / "absent.toml")


def test_replace_type_checks():
    config = Config().replace("qc", gap_h=12)
    assert config.qc.gap_h == 12.0
    with pytest.raises(ConfigError, match="qc.gap_h"):
        Config().replace("qc", gap_h="long")


def test_provenance_is_json_and_holds_every_parameter():
    info = provenance(config_from_dict({"qc": {"gap_h": 8.0}}))
    text = json.dumps(info)
    assert json.loads(text)["parameters"]["qc"]["gap_h"] == 8.0
    assert set(info["parameters"]["qc"]) == set(QCConfig.__dataclass_fields__)
    assert info["software"] == "driftloop" and info["version"]
