"""Ring buffer: what comes out equals the last N samples that went in, whatever the chunking."""

import threading

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rotorwatch.service.ring import Ring


def test_window_before_filled_is_none_then_exact():
    ring = Ring(10)
    ring.write(np.arange(6, dtype=np.float32), end_time_s=6.0)
    assert ring.latest(7) is None
    np.testing.assert_array_equal(ring.latest(6), np.arange(6))
    block, end = ring.latest_with_time(3)
    np.testing.assert_array_equal(block, [3, 4, 5])
    assert end == 6.0


def test_wraparound_keeps_order():
    ring = Ring(8)
    ring.write(np.arange(5, dtype=np.float32))
    ring.write(np.arange(5, 11, dtype=np.float32))  # wraps: head passes the end of the array
    np.testing.assert_array_equal(ring.latest(8), np.arange(3, 11))
    np.testing.assert_array_equal(ring.latest(4), [7, 8, 9, 10])
    assert ring.total == 11


def test_oversized_write_keeps_the_newest():
    ring = Ring(4)
    ring.write(np.arange(10, dtype=np.float32))
    np.testing.assert_array_equal(ring.latest(4), [6, 7, 8, 9])
    ring.write(np.array([10, 11], dtype=np.float32))
    np.testing.assert_array_equal(ring.latest(4), [8, 9, 10, 11])


def test_latest_is_a_copy():
    ring = Ring(4)
    ring.write(np.ones(4, dtype=np.float32))
    out = ring.latest(4)
    out[:] = 5
    np.testing.assert_array_equal(ring.latest(4), np.ones(4))


def test_reset_after_gap_needs_a_fresh_window():
    ring = Ring(6)
    ring.write(np.arange(6, dtype=np.float32))
    ring.reset()
    assert ring.latest(1) is None
    ring.write(np.array([100, 101], dtype=np.float32))
    assert ring.latest(3) is None
    np.testing.assert_array_equal(ring.latest(2), [100, 101])


def test_bad_sizes_are_errors():
    with pytest.raises(ValueError):
        Ring(0)
    ring = Ring(4)
    with pytest.raises(ValueError):
        ring.latest(5)


@settings(max_examples=200, deadline=None)
@given(capacity=st.integers(1, 64), chunks=st.lists(st.integers(0, 100), min_size=1, max_size=30),
       n=st.integers(1, 64))
def test_window_equals_last_n_samples_for_any_chunking(capacity, chunks, n):
    """Property: after any sequence of writes, latest(n) is the tail of everything written."""
    n = min(n, capacity)
    ring = Ring(capacity, dtype=np.float64)
    written = []
    k = 0
    for size in chunks:
        x = np.arange(k, k + size, dtype=np.float64)
        k += size
        written.append(x)
        ring.write(x)
    everything = np.concatenate(written)
    got = ring.latest(n)
    if everything.size < n:
        assert got is None
    else:
        np.testing.assert_array_equal(got, everything[-n:])


def test_concurrent_writer_and_reader_see_consistent_windows():
    """A reader racing a writer always gets n consecutive samples (values are sample indices)."""
    ring = Ring(1000, dtype=np.float64)
    stop = threading.Event()

    def writer():
        k = 0
        for _ in range(3000):
            ring.write(np.arange(k, k + 37, dtype=np.float64))
            k += 37
        stop.set()

    t = threading.Thread(target=writer)
    t.start()
    seen = 0
    while not stop.is_set() or seen == 0:
        w = ring.latest(500)
        if w is not None:
            np.testing.assert_array_equal(np.diff(w), np.ones(499))
            seen += 1
    t.join()
    assert seen > 0
