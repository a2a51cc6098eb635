"""Recordings: CSV + sidecar written by Recorder, read by numpy and load_recording; a
recorder killed mid-run (SIGKILL) leaves files that still load."""

import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest
import yaml

from rigbench.link import Link
from rigbench.recordings.recording import Recorder, RecordingError, load_recording, sidecar_path

ROOT = Path(__file__).parents[1]


@pytest.fixture
def sim_link():
    link = Link.open("sim://balance?clock=virtual")
    yield link
    link.close()


def test_round_trip_keeps_rows_events_and_notes(tmp_path, sim_link):
    path = tmp_path / "run1.csv"
    sim_link.stream(100)
    with Recorder(path, sim_link, notes=["bench check"], background=False) as rec:
        sim_link.sleep(2.0)
        rec.poll()
        rec.note("kill next")
        sim_link.kill()
        sim_link.sleep(0.5)
    live = sim_link.snapshot()
    rec_back = load_recording(path)
    assert len(rec_back) == rec.rows == 250
    assert rec_back.signals == tuple(s.name for s in sim_link.signals)
    tail = live.values[-len(rec_back):]
    assert np.allclose(rec_back.values, tail, rtol=1e-5, atol=1e-12)
    assert (np.diff(rec_back.frame) == 1).all()
    assert rec_back.complete and rec_back.sidecar["rows"] == 250
    assert [n["text"] for n in rec_back.sidecar["notes"]] == ["bench check", "kill next"]
    trips = [e for e in rec_back.events if e["kind"] == "trip"]
    assert trips and trips[0]["fields"]["cause"] == "kill"
    motors = [e["fields"]["motor"] for e in rec_back.events if e["kind"] == "state"]
    assert motors == ["off", "tripped"]  # status changes only, not every status frame
    names = np.genfromtxt(path, delimiter=",", names=True).dtype.names
    assert names[:4] == ("host_time_s", "board_time_s", "frame_1", "tilt_deg")


def test_refuses_to_overwrite_and_non_csv_names(tmp_path, sim_link):
    path = tmp_path / "a.csv"
    path.write_text("x\n")
    with pytest.raises(RecordingError, match="exists"):
        Recorder(path, sim_link)
    with pytest.raises(RecordingError, match=".csv"):
        Recorder(tmp_path / "a.txt", sim_link)


CHILD = r"""
import sys, bench
from rigbench.link import Link
from rigbench.recordings.recording import Recorder
link = Link.open("sim://balance")
link.stream(250)
rec = Recorder(sys.argv[1], link, flush_s=0.2, poll_s=0.05).start()
print("recording", flush=True)
while True:
    link.sleep(1.0)
"""


def test_a_killed_recorder_leaves_loadable_files(tmp_path):
    path = tmp_path / "crash.csv"
    child = subprocess.Popen([sys.executable, "-c", CHILD, str(path)], cwd=ROOT,
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    try:
        assert child.stdout.readline().strip() == b"recording"
        for _ in range(400):  # wait (bounded) until a few flushes have reached the disk
            if path.exists() and path.stat().st_size > 20_000:
                break
            time.sleep(0.02)
        child.send_signal(signal.SIGKILL)
        child.wait(10)
    finally:
        if child.poll() is None:
            child.kill()
    raw = path.read_bytes()
    assert raw.endswith(b"\n")  # each flush writes whole lines only
    data = np.loadtxt(path, delimiter=",", skiprows=1, ndmin=2)
    assert data.shape[0] > 50 and data.shape[1] == 9
    assert (np.diff(data[:, 2]) >= 1).all()
    side = yaml.safe_load(sidecar_path(path).read_text())
    assert side["complete"] is False and side["rows"] <= data.shape[0]
    rec = load_recording(path)
    assert len(rec) == data.shape[0] and not rec.complete
    # a kill that lands inside an atomic sidecar write may leave its temporary file beside
    # it (temp + rename); the sidecar itself is always the last complete version
    for tmp in tmp_path.glob(".*.tmp"):
        assert tmp.name.startswith("." + sidecar_path(path).name)


HEADER = "host_time [s],board_time [s],frame [1],tilt [deg]\n"


@pytest.mark.parametrize("text, where", [
    ("", ":1:"),
    ("time,board,frame,tilt\n", ":1:"),
    ("tilt [deg],board_time [s],frame [1],host_time [s]\n", ":1:"),
    (HEADER + "0.1,0.1,0,1.5\n0.2,0.2,1,abc\n", ":3: column 4"),
    (HEADER + "0.1,0.1,0,1.5\n0.2,0.2,1\n", ":3: 3 values"),
    (HEADER + "0.1,0.1,0,1.5\n0.2,0.2,1,2", ":3: last line is cut short"),
])
def test_bad_csv_names_file_and_line(tmp_path, text, where):
    path = tmp_path / "bad.csv"
    path.write_text(text)
    with pytest.raises(RecordingError) as info:
        load_recording(path)
    assert str(path) + where in str(info.value)


def test_csv_without_sidecar_loads_and_bad_sidecar_is_named(tmp_path):
    path = tmp_path / "r.csv"
    path.write_text(HEADER + "0.1,0.1,7,1.5\n0.2,0.2,8,-2e-3\n")
    rec = load_recording(path)
    assert rec.sidecar is None and list(rec.frame) == [7, 8]
    assert rec.signal("tilt") == pytest.approx([1.5, -2e-3])
    sidecar_path(path).write_text(
        "format: rigbench-recording/1\ncsv: r.csv\ncolumns:\n"
        "- {name: host_time, unit: s}\n- {name: board_time, unit: s}\n"
        "- {name: frame, unit: '1'}\n- {name: tilt, unit: deg}\nsurprise: 1\n")
    with pytest.raises(RecordingError) as info:
        load_recording(path)
    assert f"{sidecar_path(path)}:8" in str(info.value) and "surprise" in str(info.value)


def test_the_periodic_sidecar_rewrite_runs_off_the_pulling_thread(tmp_path, sim_link,
                                                                   monkeypatch):
    # an experiment pulls (poll) from the thread that checks its guards: a slow sidecar
    # rewrite there once stopped a long sweep as "stale telemetry"; it runs on the
    # recorder's own thread, and the last sidecar written is the complete one
    writers = []
    dump = Recorder._dump_sidecar

    def spy(self, doc):
        writers.append((threading.current_thread(), doc["complete"]))
        dump(self, doc)

    monkeypatch.setattr(Recorder, "_dump_sidecar", spy)
    sim_link.stream(100)
    rec = Recorder(tmp_path / "r.csv", sim_link, background=False, flush_s=0.01).start()
    for _ in range(5):
        sim_link.sleep(0.2)
        time.sleep(0.02)          # flush_s is wall time
        rec.poll()
    deadline = time.monotonic() + 5.0
    while len(writers) < 2 and time.monotonic() < deadline:
        time.sleep(0.01)          # the writer thread takes the latest periodic sidecar
    rec.close()
    me = threading.current_thread()
    periodic = [t for t, complete in writers[1:-1]]
    assert periodic and all(t is not me for t in periodic)
    assert writers[-1] == (me, True)
    assert load_recording(tmp_path / "r.csv").complete
