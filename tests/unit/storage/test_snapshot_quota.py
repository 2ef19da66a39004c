"""Evidence a flood cannot erase: the transition share of the snapshot quota and the on-request limit.

The flood is the one reported in issue 15 (4,714 on-request snapshots asked for in about 10 s), sent
through the storage API with the quota at the smallest the configuration accepts (1 MiB).
"""

from __future__ import annotations

import logging
from types import SimpleNamespace

import pytest

from rotorwatch.settings.storage import SnapshotSettings
from rotorwatch.storage.snapshot_quota import RequestLimiter, evictions
from rotorwatch.storage.snapshots import SnapshotRefused, SnapshotStore

from .samples import T0
from .test_snapshots import save_one

pytestmark = pytest.mark.filterwarnings("ignore::scipy.io.wavfile.WavFileWarning")

MIN_QUOTA = SnapshotSettings.model_fields["quota_bytes"].metadata[0].ge  # the smallest quota accepted


class FakeMonotonic:
    def __init__(self) -> None:
        self.now_s = 1000.0

    def __call__(self) -> float:
        return self.now_s


def info(sid: str, reason: str, t: float, size: int) -> SimpleNamespace:
    return SimpleNamespace(id=sid, reason=reason, time_s=t, size_bytes=size)


def test_minimum_quota_is_one_mebibyte():
    assert MIN_QUOTA == 1024 * 1024


def test_flood_of_requests_at_the_minimum_quota_keeps_every_transition(tmp_path, caplog):
    mono = FakeMonotonic()
    store = SnapshotStore.in_state_dir(tmp_path, SnapshotSettings(quota_bytes=MIN_QUOTA), monotonic=mono)
    evidence = [save_one(store, t=T0 + 60 * k).id for k in range(2)]
    assert sum(i.size_bytes for i in store.list()) < store.reserved_bytes  # both fit the reserved share
    saved, refused = [], 0
    for k in range(4714):  # 4714 requests in 10 s, as in the report
        mono.now_s += 10.0 / 4714
        try:
            saved.append(save_one(store, t=T0 + 600 + k * 0.002, reason="command").id)
        except SnapshotRefused:
            refused += 1
    assert len(saved) == 3 and refused == 4711  # the burst, then nothing within 10 s (one per 600 s)
    kept = store.list()
    assert [i.id for i in kept if i.reason == "transition"] == evidence
    assert sum(i.size_bytes for i in kept) <= store.quota_bytes
    # after the interval one more is allowed, and the refusals are counted in one warning
    mono.now_s += 600.0
    with caplog.at_level(logging.WARNING, logger="rotorwatch.storage.snapshots"):
        save_one(store, t=T0 + 700, reason="command")
    assert any("4711 request(s) refused" in r.getMessage() for r in caplog.records)
    assert [i.id for i in store.list() if i.reason == "transition"] == evidence


def test_unlimited_requests_never_evict_transition_evidence(tmp_path):
    """With the rate limit off, the quota rule alone must protect the evidence."""
    store = SnapshotStore(tmp_path / "s", quota_bytes=MIN_QUOTA, on_request_burst=100, on_request_interval_s=0)
    evidence = [save_one(store, t=T0 + 60 * k).id for k in range(2)]
    refused = 0
    for k in range(40):
        try:
            save_one(store, t=T0 + 600 + k, reason="command" if k % 4 else "schedule")
        except SnapshotRefused:
            refused += 1
    kept = store.list()
    assert [i.id for i in kept if i.reason == "transition"] == evidence
    others = sum(i.size_bytes for i in kept if i.reason != "transition")
    held_t = sum(i.size_bytes for i in kept if i.reason == "transition")
    assert others <= store.quota_bytes - max(held_t, store.reserved_bytes)
    assert others > 0 and refused == 0  # the others' room holds some; the newest are kept, oldest go


def test_transition_evidence_evicts_only_older_evidence_with_a_warning(tmp_path, caplog):
    store = SnapshotStore(tmp_path / "s", quota_bytes=MIN_QUOTA)
    save_one(store, t=T0, reason="schedule")
    ids = []
    with caplog.at_level(logging.WARNING, logger="rotorwatch.storage.snapshots"):
        for k in range(12):
            ids.append(save_one(store, t=T0 + 60 * (k + 1)).id)
    kept = [i.id for i in store.list()]
    assert kept == ids[-len(kept):]  # the newest transitions, in order; the daily one went first
    warned = [r.getMessage() for r in caplog.records if "transition evidence" in r.getMessage()]
    assert len(warned) == 12 - len(kept)
    assert ids[0] in warned[0]  # oldest first


def test_an_on_request_snapshot_that_finds_no_room_is_refused_not_kept(tmp_path):
    store = SnapshotStore(tmp_path / "s", quota_bytes=MIN_QUOTA, on_request_burst=100, on_request_interval_s=0)
    for k in range(20):  # evidence fills the quota (older evidence goes once it is full)
        save_one(store, t=T0 + 60 * k)
    evidence = [i.id for i in store.list()]
    assert sum(i.size_bytes for i in store.list()) > MIN_QUOTA - store.list()[0].size_bytes
    with pytest.raises(SnapshotRefused, match="does not fit the room left"):
        save_one(store, t=T0 + 9999, reason="command")
    assert [i.id for i in store.list()] == evidence


def test_eviction_order_oldest_first_the_new_one_last():
    infos = [info("t1", "transition", 1, 100), info("d1", "schedule", 2, 100), info("c1", "command", 3, 100),
             info("d2", "schedule", 4, 100), info("c2", "command", 5, 100)]
    # quota 400, 100 reserved: the others may hold 400 - max(100, 100) = 300 -> the oldest of four goes
    others, trans = evictions(infos, 400, 100, keep="c2")
    assert [i.id for i in others] == ["d1"] and trans == []
    # 250 reserved: room 150 -> three go, oldest first, the one just saved kept
    others, _ = evictions(infos, 400, 250, keep="c2")
    assert [i.id for i in others] == ["d1", "c1", "d2"]
    # room 50: the one just saved does not fit alone and goes too
    others, _ = evictions(infos, 400, 350, keep="c2")
    assert [i.id for i in others] == ["d1", "c1", "d2", "c2"]
    # transitions beyond their share shrink the others' room; alone over the quota, the oldest goes
    infos2 = [info(f"t{k}", "transition", k, 100) for k in range(5)] + [info("c", "command", 9, 50)]
    others, trans = evictions(infos2, 400, 100, keep="t4")
    assert [i.id for i in trans] == ["t0"] and [i.id for i in others] == ["c"]


def test_request_limiter_uses_the_monotonic_clock_per_machine():
    mono = FakeMonotonic()
    lim = RequestLimiter(burst=2, interval_s=600, clock=mono)
    assert [lim.allow("fan-1")[0] for _ in range(3)] == [True, True, False]
    assert lim.allow("pump-2") == (True, 0)  # another machine has its own bucket
    assert lim.wait_s("fan-1") == pytest.approx(600.0)
    mono.now_s += 599.0
    assert lim.allow("fan-1") == (False, 2)
    mono.now_s += 1.0
    assert lim.allow("fan-1") == (True, 2)
    mono.now_s -= 5000.0  # a clock that went back (not monotonic) neither refills nor jams forever
    assert lim.allow("fan-1")[0] is False
    mono.now_s += 5000.0 + 600.0
    assert lim.allow("fan-1")[0] is True


def test_settings_bounds():
    s = SnapshotSettings()
    assert (s.transition_share, s.on_request_burst, s.on_request_interval_s) == (0.5, 3, 600.0)
    with pytest.raises(ValueError):
        SnapshotSettings(transition_share=0.95)
    with pytest.raises(ValueError):
        SnapshotSettings(on_request_burst=0)
