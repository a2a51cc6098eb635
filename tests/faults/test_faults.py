"""Fault injection: a noisy line, garbage, partial lines, a stall, a board reset, an unplug,
a host that dies or starves the watchdog. For each, what the host shows, that nothing it
accepted differs from what the board sent, that the motor ends off, and that the recording
up to the fault loads and is in order. Scenarios: tests/faults/fault_scenarios.py (the same ones
print docs/FAULTS.md through scripts/fault_table.py). Virtual clock except the pty case."""

import os

import pytest
from fault_scenarios import (
    NOISE_RATES, garbage_before_handshake, heartbeat_every, host_killed_on_pty,
    host_stops, noisy_line, partial_lines, reset_mid_experiment, stall, unplug_mid_experiment,
    unplug_mid_recording,
)
from fault_truth import CRC_PASS, BoardTap, compare, wrong_allowed

from rigbench.link import Link
from rigbench.rig.simlink import SimLink
from rigbench.rig.url import parse_sim_url
from rigbench.wire import HostCodec
from rigbench.wire import messages as m


def _never_wrong_and_off(out):
    # nothing wrong accepted beyond what a CRC-16 lets through (0 unless lines lost bytes)
    assert out.accepted_wrong <= out.wrong_allowed, out
    assert out.motor_off, out


@pytest.mark.parametrize("lines", [1, 10, 900, 16000, 10**6])
def test_the_crc_allowance_is_the_poisson_tail(lines):
    # scipy.stats.poisson as the outside reference for the tail sum
    from scipy.stats import poisson
    k = wrong_allowed(lines, "bytes lost or inserted")
    lam = lines * CRC_PASS
    assert poisson.sf(k, lam) <= 1e-6 and (k == 0 or poisson.sf(k - 1, lam) > 1e-6)
    assert wrong_allowed(lines, "bit flips") == 0 == wrong_allowed(lines, "none")


@pytest.mark.parametrize("kind", ["corrupt", "drop"])
@pytest.mark.parametrize("rate", NOISE_RATES)
def test_noisy_line_loses_frames_but_never_accepts_a_wrong_one(kind, rate, tmp_path,
                                                                thread_errors):
    out = noisy_line(kind, rate, workdir=tmp_path)
    _never_wrong_and_off(out)
    if kind == "corrupt":
        assert out.accepted_wrong == 0          # flipped bits: every damaged frame is caught
    assert out.line_bytes_hit > 0 and out.lines_rejected > 0
    assert out.link_state == "ok"
    assert out.fault_end == "kill"              # the kill got through the same line
    assert out.frames_accepted > 0.3 * out.frames_sent
    # the host's own count of missing frames (counter gaps) tells the truth; frames lost
    # before the first or after the last accepted one cannot show as a gap
    assert out.telemetry_lost - out.host_counted_lost == out.unseen_ends <= 50
    assert out.recording_ok and out.recording_rows == out.frames_accepted
    if rate >= 1e-2:
        assert out.resends > 0                  # commands got through by being resent


def test_garbage_before_the_handshake_is_counted_and_costs_nothing(tmp_path, thread_errors):
    out = garbage_before_handshake(workdir=tmp_path)
    _never_wrong_and_off(out)
    assert out.link_state == "ok" and out.lines_rejected >= 5
    assert out.telemetry_lost == 0
    assert out.recording_ok and out.recording_rows == out.frames_accepted


def test_partial_lines_are_joined_and_broken_ones_refused(tmp_path, thread_errors):
    out = partial_lines(workdir=tmp_path)
    _never_wrong_and_off(out)
    assert out.link_state == "ok" and out.lines_rejected > 0
    assert 0 < out.frames_accepted < out.frames_sent
    assert out.recording_ok and out.recording_rows == out.frames_accepted


def test_stall_mid_experiment_stops_it_as_stale_and_the_motor_ends_off(tmp_path, thread_errors):
    out = stall(workdir=tmp_path)
    _never_wrong_and_off(out)
    assert out.stopped_by == "stale" and "kill" in out.host_events
    assert out.motor_end == "tripped" and out.host_motor == "tripped"
    assert out.fault_end == "watchdog"          # its own watchdog, before the queued kill
    assert out.link_state == "ok"               # the board answers again after the stall
    assert out.recording_ok and 0 <= out.recording_gap_s <= 0.01


def test_board_reset_mid_experiment_is_seen_and_handshaken_again(tmp_path, thread_errors):
    out = reset_mid_experiment(workdir=tmp_path)
    _never_wrong_and_off(out)
    assert out.stopped_by == "reset"
    assert out.host_events[:2] == ["reset", "resync"] and out.link_state == "ok"
    assert out.recording_ok and 0 <= out.recording_gap_s <= 0.01


def test_unplug_mid_experiment_shows_lost_and_the_watchdog_stops_the_motor(tmp_path,
                                                                           thread_errors):
    out = unplug_mid_experiment(workdir=tmp_path)
    _never_wrong_and_off(out)
    assert out.stopped_by == "lost" and out.link_state == "lost"
    assert out.fault_end == "watchdog"          # the board, running on alone
    assert out.telemetry_lost == 0
    assert out.recording_ok and 0 <= out.recording_gap_s <= 0.01


def test_unplug_mid_recording_keeps_every_row_up_to_the_unplug(tmp_path, thread_errors):
    out = unplug_mid_recording(workdir=tmp_path)
    _never_wrong_and_off(out)
    assert out.link_state == "lost" and out.host_events == ["lost"]
    assert out.recording_ok and out.recording_rows == out.frames_accepted
    assert 0 <= out.recording_gap_s <= 0.01


def test_a_host_that_dies_leaves_a_loadable_recording_and_the_watchdog_trips(tmp_path,
                                                                             thread_errors):
    out = host_stops(workdir=tmp_path)
    _never_wrong_and_off(out)
    assert out.fault_end == "watchdog"
    assert out.recording_ok and out.recording_rows > 0 and "False" in out.notes
    assert out.recording_gap_s <= 1.0           # README.md, Record and replay: a crash loses under a second


@pytest.mark.parametrize("period_s,trips", [(0.4, False), (0.7, True)])
def test_heartbeat_starvation_trips_the_watchdog(period_s, trips, thread_errors):
    # the simulated board declares watchdog_ms=500 (PROTOCOL.md §7.2)
    out = heartbeat_every(period_s)
    _never_wrong_and_off(out)
    if trips:
        assert out.fault_end == "watchdog" and "trip:watchdog" in out.host_events
        assert out.host_motor == "tripped"
    else:
        assert out.fault_end is None and out.host_events == []


@pytest.mark.skipif(not hasattr(os, "openpty"), reason="needs POSIX ptys")
def test_host_process_killed_while_running_the_watchdog_turns_the_motor_off():
    out = host_killed_on_pty()
    assert out.notes.startswith("motor running")   # it was running when the host died
    assert out.motor_end == "tripped" and out.fault_end == "watchdog"


def test_the_comparison_catches_a_row_that_differs_from_what_was_sent(thread_errors):
    # the check behind accepted_wrong == 0 can fail: change one sent value after the fact
    port = __import__("serial").serial_for_url("sim://wheel?clock=virtual", timeout=0.01)
    tap = BoardTap(port.board)
    with Link.attach(port, url="sim://wheel?clock=virtual") as link:
        link.stream(100)
        link.sleep(0.5)
        assert compare(link, tap).wrong == 0
        key = next(iter(tap.telemetry))
        tap.telemetry[key] = tuple(v + 1.0 for v in tap.telemetry[key])
        assert compare(link, tap).wrong == 1


def test_bytes_queued_during_a_stall_are_read_before_later_ones():
    link = SimLink(parse_sim_url("sim://wheel?stall=0.1:0.5"))
    codec = HostCodec()
    while link.time_s < 0.2:
        link.advance()
    link.write(codec.command(m.StatusRequest)[1])   # seq 1: into the stalled board's FIFO
    while link.stalled:
        link.advance()
    link.write(codec.command(m.StatusRequest)[1])   # seq 2: after the stall
    link.advance(2)
    seqs = [x.seq for x in HostCodec().receive(link.drain()) if isinstance(x, (m.Ok, m.Err))]
    assert seqs == [1, 2]                           # a UART's receive buffer keeps order
