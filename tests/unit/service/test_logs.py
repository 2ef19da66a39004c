"""Log lines: 'level component message key=value', JSON on request, repeats rate-limited."""

import io
import json
import logging

from rotorwatch.logs import RepeatLimiter, fields, setup_logging


def test_text_lines(tmp_path):
    buf = io.StringIO()
    setup_logging("INFO", "text", stream=buf)
    logging.getLogger("rotorwatch.service.mqtt").warning("broker refused", extra=fields(host="127.0.0.1", reason="Not authorized"))
    logging.getLogger("rotorwatch.service.mqtt").debug("hidden")
    assert buf.getvalue() == 'WARNING service.mqtt broker refused host=127.0.0.1 reason="Not authorized"\n'


def test_json_lines():
    buf = io.StringIO()
    setup_logging("INFO", "json", stream=buf)
    logging.getLogger("rotorwatch.service.daemon").info("ready", extra=fields(updates=3, rate=0.25))
    line = json.loads(buf.getvalue())
    assert line["level"] == "INFO" and line["component"] == "service.daemon"
    assert line["message"] == "ready" and line["updates"] == 3 and line["rate"] == 0.25


def test_repeat_limiter():
    now = [0.0]
    lim = RepeatLimiter(60.0, clock=lambda: now[0])
    assert lim.allow("x") == (True, 0)
    assert lim.allow("x") == (False, 0)
    assert lim.allow("x") == (False, 0)
    assert lim.allow("y") == (True, 0)
    now[0] = 61.0
    assert lim.allow("x") == (True, 2)  # two repeats were held back
    lim.reset("x")
    assert lim.allow("x") == (True, 0)
