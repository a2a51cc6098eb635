"""The telemetry ring and the cursor log: bounded, read by cursor, overrun reported."""

import numpy as np
import pytest

from rigbench.link.ring import CursorLog, TelemetryRing


def rows(start, n, nsig=2):
    i = np.arange(start, start + n, dtype=float)
    return np.column_stack([i * 0.01, i * 0.01, i] + [i * (k + 1) for k in range(nsig)])


def test_read_since_returns_exactly_the_new_rows_across_the_ring_end():
    ring = TelemetryRing(("a", "b"), ("deg", "1"), rows=10)
    cur = ring.cursor()
    ring.append(rows(0, 7))
    cur, block = ring.read_since(cur)
    assert list(block.frame) == list(range(7)) and block.skipped == 0
    ring.append(rows(7, 6))  # wraps around the end of the storage
    cur, block = ring.read_since(cur)
    assert list(block.frame) == list(range(7, 13)) and cur == 13
    assert np.array_equal(block.column("b"), 2.0 * np.arange(7, 13))
    with pytest.raises(KeyError):
        block.column("c")


def test_overrun_reports_the_skipped_rows():
    ring = TelemetryRing(("a",), ("1",), rows=8)
    ring.append(rows(0, 5, 1))
    ring.append(rows(5, 20, 1))  # more than the ring holds
    cur, block = ring.read_since(0)
    assert block.skipped == 17 and list(block.frame) == list(range(17, 25))
    with pytest.raises(ValueError):
        ring.read_since(cur + 1)


def test_snapshot_by_rows_and_by_seconds():
    ring = TelemetryRing(("a",), ("1",), rows=100)
    ring.append(rows(0, 50, 1))
    assert list(ring.snapshot(rows=3).frame) == [47, 48, 49]
    snap = ring.snapshot(seconds=0.1)  # host times 0.00 .. 0.49 s
    assert snap.host_time_s[0] == pytest.approx(0.39) and len(snap) == 11
    assert len(ring.snapshot()) == 50


def test_relayout_drops_rows_of_the_old_layout():
    ring = TelemetryRing(("a",), ("1",), rows=10)
    ring.append(rows(0, 4, 1))
    ring.relayout(("a", "b"), ("1", "1"))
    cur, block = ring.read_since(0)
    assert len(block) == 0 and block.skipped == 4 and block.signals == ("a", "b")
    with pytest.raises(ValueError):
        ring.append(rows(0, 1, 1))


def test_cursor_log():
    log = CursorLog(maxlen=3)
    for i in range(5):
        log.append(i)
    cur, items = log.since(0)
    assert (cur, items) == (5, [2, 3, 4])
    log.append(5)
    assert log.since(cur) == (6, [5])
    assert log.last(2) == [4, 5]
