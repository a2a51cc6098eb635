"""Unwrapping the board's 32-bit clock and frame counter; mapping board time to host time.

Expected values follow from modular arithmetic on 2**32 (PROTOCOL.md §6.1: 32-bit
microsecond clock and frame counter, wrapping): common practice, no source.
"""

import pytest

from rigbench.link.timebase import U32, BoardClock, ClockMap, FrameCounter


def test_board_clock_unwraps_across_the_32_bit_wrap():
    clock = BoardClock()
    raws = [U32 - 3000, U32 - 1000, 500, 2500]
    secs = [clock.update(r).seconds for r in raws]
    assert secs[0] == pytest.approx((U32 - 3000) * 1e-6)
    assert secs[2] == pytest.approx((U32 + 500) * 1e-6)
    assert secs[3] - secs[2] == pytest.approx(2000e-6)
    assert clock.wraps == 1
    assert all(b > a for a, b in zip(secs, secs[1:]))


def test_board_clock_two_wraps_keep_counting():
    clock = BoardClock()
    step = U32 // 3  # forward steps of a third of the range: always read as forward
    t = 0
    last = clock.update(0).seconds
    for _ in range(7):
        t += step
        now = clock.update(t % U32).seconds
        assert now - last == pytest.approx(step * 1e-6)
        last = now
    assert clock.wraps == 2


def test_small_step_back_is_reordering_large_step_back_is_a_restart():
    clock = BoardClock(back_tolerance_s=1.0)
    clock.update(10_000_000)
    small = clock.update(9_999_000)
    assert not small.went_back and small.seconds == pytest.approx(9.999)
    # a small step back across the wrap point is placed before the wrap, not after
    clock2 = BoardClock()
    clock2.update(200)
    early = clock2.update(U32 - 300)
    assert not early.went_back and early.seconds == pytest.approx(-300e-6)
    big = clock.update(1_000)
    assert big.went_back


def test_frame_counter_gaps_wrap_repeat_and_restart():
    fc = FrameCounter()
    assert fc.update(U32 - 2).gap == 0
    s = fc.update(U32 - 1)
    assert (s.gap, s.total) == (0, U32 - 1)
    s = fc.update(2)  # frames 0 and 1 missing, across the wrap
    assert (s.gap, s.total, s.went_back) == (2, U32 + 2, False)
    assert fc.update(2).repeated
    assert fc.update(1).went_back


def test_clock_map_takes_the_smallest_delay_and_creeps_up_slowly():
    cmap = ClockMap(drift_per_s=1e-3)
    delays = [0.012, 0.004, 0.020, 0.007, 0.004, 0.030]
    for i, d in enumerate(delays):
        cmap.update(10.0 + i * 0.1, 10.0 + i * 0.1 + 1.5 + d)
    # after the 0.004 minimum, one later delay can raise the offset by drift·dt only
    assert cmap.offset_s == pytest.approx(1.5 + 0.004 + 1e-3 * 0.1)
    assert cmap.host_time(20.0) == pytest.approx(21.5 + 0.004 + 1e-4)
    cmap.reset()
    cmap.update(0.0, 3.0)
    assert cmap.offset_s == 3.0
