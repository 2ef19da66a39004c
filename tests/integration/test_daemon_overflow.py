"""Input overflows in the running daemon: the windows that hold lost samples read ``sensor_fault``
(``overflow``) on every point, at the first update after the loss, and clear once the loss has left
the window; the loss is counted (``input_overflows``, ``sensor_faults`` by point and kind).

The daemon runs in-process (in a thread, so it installs no signal handlers) on the real simulated
source at real-time pace (speedup 1: one unbroken stream, no scenario jumps). Losing samples cannot be
provoked on demand in a real driver, so the source is wrapped to flag ONE of its chunks with
``overflow=True``, the flag a sound interface's driver sets after an overrun
(``status.input_overflow``, see agent/sources/soundcard.py); the samples themselves are the
simulator's, untouched. Every wait is bounded.
"""

from __future__ import annotations

from dataclasses import replace

from rotorwatch.service.daemon import Daemon, RunOptions, default_source_factory

from .daemon_support import daemon_config, run_daemon_in_thread, write_setup

OVERFLOW_AT_CHUNK = 40  # 40 x 4096 frames at 51.2 kHz: 3.2 s in, after the first good updates


class OverflowOnce:
    """The real source, with the driver's overflow flag set on one chunk."""

    def __init__(self, inner, at_chunk: int):
        self.inner, self.at_chunk, self.n = inner, at_chunk, 0

    def __getattr__(self, name):
        return getattr(self.inner, name)

    def read(self, timeout_s):
        chunk = self.inner.read(timeout_s)
        if chunk is not None:
            self.n += 1
            if self.n == self.at_chunk:
                chunk = replace(chunk, overflow=True)
        return chunk


class RecordingDaemon(Daemon):
    """The daemon, noting every update it delivers and where the capture saw samples lost."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.delivered = []
        self.lost_at_s = None

    def _deliver(self, rt, update, blocks):
        if self.capture is not None and self.capture.last_overflow_s is not None:
            self.lost_at_s = self.capture.last_overflow_s
        self.delivered.append(update)
        super()._deliver(rt, update, blocks)


def test_overflow_reads_sensor_fault_then_clears(tmp_path):
    cfg = daemon_config(None, prefix="x", metrics=False, speedup=1.0, update_interval_s=0.5)
    path = write_setup(tmp_path, cfg)
    window_s = cfg["machines"][0]["analysis"]["window_s"]

    def sources(config, config_dir):
        return OverflowOnce(default_source_factory(config, config_dir), OVERFLOW_AT_CHUNK)

    d = RecordingDaemon(path, RunOptions(state_dir=str(tmp_path / "state"), max_updates=16),
                        source_factory=sources)
    assert run_daemon_in_thread(d) == 0
    lost = d.lost_at_s
    assert lost is not None, "the overflowed chunk never arrived"
    points = ("de-h", "nde-h")
    before = [u for u in d.delivered if u.time_s <= lost]
    during = [u for u in d.delivered if lost < u.time_s < lost + window_s]
    after = [u for u in d.delivered if u.time_s >= lost + window_s]
    assert before and during and after, [(u.time_s - lost, u.state) for u in d.delivered]
    assert all(u.points[p].health.ok for u in before for p in points)
    # the first update after the loss already reports it, on every point, with a reason
    for u in during:
        for p in points:
            pu = u.points[p]
            assert (pu.state, pu.health.fault) == ("sensor_fault", "overflow"), (u.time_s - lost, pu.reason)
            assert "samples were lost" in pu.reason
            assert pu.result is None and all(v.state == "suppressed" for v in pu.values.values())
    assert not [e for u in during for e in u.events if e.new_state in ("warning", "alarm")]
    # a clean window again: analysed, the fault cleared
    assert all(u.points[p].health.ok and u.points[p].result is not None for u in after for p in points)
    assert d.stats.counter("input_overflows") == 1
    for p in points:
        assert d.stats.counter("sensor_faults", machine="ef3", point=p, fault="overflow") == 1
