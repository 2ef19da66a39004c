"""Service settings are strict: inconsistent MQTT/metrics settings are one-line config errors."""

import pytest

from rotorwatch.errors import ConfigError
from rotorwatch.settings.loading import validate
from rotorwatch.settings.service import MetricsSettings, MqttSettings


def check(model, data):
    return validate(model, data, "rotorwatch.toml")


def test_defaults():
    s = check(MqttSettings, {})
    assert (s.qos, s.protocol, s.tls, s.port) == (1, "5", False, 1883)
    m = check(MetricsSettings, {})
    assert (m.bind, m.port) == ("127.0.0.1", 9717)


@pytest.mark.parametrize("data, words", [
    ({"password_file": "p", "password_env": "P"}, "at most one of password_file or password_env"),
    ({"password_file": "p"}, "needs username"),
    ({"client_cert_file": "c.pem", "tls": True}, "go together"),
    ({"ca_file": "ca.pem"}, "tls = false"),
    ({"reconnect_min_s": 10, "reconnect_max_s": 5}, "must not exceed"),
    ({"topic_prefix": "a/+/b"}, "topic_prefix"),
    ({"topic_prefix": "/lead"}, "topic_prefix"),
    ({"qos": 2}, "qos"),
    ({"passwd": "x"}, "unknown key"),
    ({"password_env": "1BAD"}, "password_env"),
])
def test_mqtt_rejections(data, words):
    with pytest.raises(ConfigError) as info:
        check(MqttSettings, data)
    assert words in str(info.value)
    assert str(info.value).startswith("rotorwatch.toml")


def test_metrics_tls_pair():
    with pytest.raises(ConfigError, match="go together"):
        check(MetricsSettings, {"tls_cert_file": "c.pem"})
    assert check(MetricsSettings, {"tls_cert_file": "c.pem", "tls_key_file": "k.pem", "port": 0}).port == 0
