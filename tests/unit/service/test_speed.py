"""Speed readings from MQTT: plain numbers or {"rpm": x}; stale after mqtt_max_age_s."""

import pytest

from rotorwatch.service.speed import SpeedBoard, SpeedRejected, parse_rpm
from rotorwatch.settings.models import Config


def config():
    return Config.model_validate({
        "acquisition": {"channels": 1},
        "machines": [{
            "id": "p1", "speed": {"mode": "mqtt", "rpm": 1480, "mqtt_topic": "plc/p1/rpm", "mqtt_max_age_s": 10},
            "points": [{"id": "a", "sensor": {"channel": 0, "sensitivity_mv_per_g": 100}}],
        }],
    })


@pytest.mark.parametrize("raw, rpm", [(b"1482", 1482.0), (b" 1482.5\n", 1482.5), (b'{"rpm": 990}', 990.0),
                                      (b'{"rpm": 0}', 0.0)])
def test_parse_good(raw, rpm):
    assert parse_rpm(raw) == rpm


@pytest.mark.parametrize("raw", [b"", b"fast", b'{"speed": 3}', b'{"rpm": "1"}', b"-5", b"NaN", b"true",
                                 b"1e9", b"\xff"])
def test_parse_bad(raw):
    with pytest.raises(SpeedRejected):
        parse_rpm(raw)


def test_board_takes_topic_and_goes_stale():
    now = [1000.0]
    board = SpeedBoard(config(), clock=lambda: now[0])
    assert board.topics == ["plc/p1/rpm"]
    assert board.rpm("p1") is None
    assert board.offer("other/topic", b"5") is False
    assert board.offer("plc/p1/rpm", b"oops") is False
    assert board.offer("plc/p1/rpm", b'{"rpm": 1470}') is True
    assert board.rpm("p1") == 1470.0
    now[0] += 9.9
    assert board.rpm("p1") == 1470.0
    now[0] += 0.2
    assert board.rpm("p1") is None  # older than mqtt_max_age_s: the pipeline falls back to nominal
