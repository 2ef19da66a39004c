"""Command parsing: good commands pass, everything else is rejected with one line, never raised raw."""

import json

import pytest

from rotorwatch.service.commands import CommandRejected, parse_command
from rotorwatch.settings.loading import load_config

CONFIG = load_config("config/demo-fan.toml")


def parse(obj):
    raw = obj if isinstance(obj, bytes) else json.dumps(obj).encode()
    return parse_command(raw, CONFIG)


def test_acknowledge_with_point_and_value():
    cmd = parse({"command": "acknowledge", "machine": "ef3", "point": "de-h", "value": "de-outer-race", "id": "a1"})
    assert (cmd.name, cmd.machine, cmd.point, cmd.value, cmd.request_id) == ("acknowledge", "ef3", "de-h", "de-outer-race", "a1")


def test_relearn_needs_a_machine_and_may_name_a_point_or_value():
    cmd = parse({"command": "relearn", "machine": "ef3", "point": "de-h", "id": 9})
    assert (cmd.name, cmd.machine, cmd.point, cmd.value) == ("relearn", "ef3", "de-h", None)
    assert parse({"command": "relearn", "machine": "ef3", "value": "overall"}).value == "overall"
    with pytest.raises(CommandRejected, match="relearn needs 'machine'"):
        parse({"command": "relearn"})


def test_snapshot_and_reload():
    assert parse({"command": "snapshot"}).machine is None
    assert parse({"command": "snapshot", "machine": "ef3", "id": 3}).request_id == 3
    assert parse({"command": "reload"}).name == "reload"


@pytest.mark.parametrize("raw, words", [
    (b"not json", "not JSON"),
    (b"\xff\xfe", "not UTF-8"),
    (b"[1, 2]", "JSON object"),
    (b"{}", "missing 'command'"),
    (b'{"command": "explode"}', "unknown command 'explode'"),
    (b'{"command": "snapshot", "colour": "red"}', "unknown key 'colour'"),
    (b'{"command": "acknowledge"}', "needs 'machine'"),
    (b'{"command": "acknowledge", "machine": "ef9"}', "unknown machine 'ef9'"),
    (b'{"command": "acknowledge", "machine": "ef3", "point": "zz"}', "has no point 'zz'"),
    (b'{"command": "acknowledge", "machine": "ef3", "value": "zz"}', "has no value 'zz'"),
    (b'{"command": "reload", "machine": "ef3"}', "reload takes no 'machine'"),
    (b'{"command": "snapshot", "point": "de-h"}', "takes no 'point'"),
    (b'{"command": 5}', "unknown command"),
    (b'{"command": "acknowledge", "machine": 17}', "machine"),
    (b"x" * 5000, "exceeds"),
])
def test_rejections_are_one_line(raw, words):
    with pytest.raises(CommandRejected) as info:
        parse(raw)
    msg = str(info.value)
    assert words in msg
    assert "\n" not in msg


def test_rejection_keeps_the_request_id():
    with pytest.raises(CommandRejected) as info:
        parse({"command": "acknowledge", "machine": "nope", "id": 42})
    assert info.value.request_id == 42 and info.value.command == "acknowledge"
