"""A full disk or a failing write while recording: the recording stops at its last whole
line and says why, an experiment stops the motor, the command exits 7 with one line, and
every file left behind reads back (CSV, sidecar, events)."""

import errno
import os
import shutil
import subprocess
import uuid
from pathlib import Path

import numpy as np
import pytest
import yaml

from rigbench import cli
from rigbench.base.stops import EXIT_DISK
from rigbench.link import Link
from rigbench.recordings import recording as recmod
from rigbench.recordings.recording import Recorder, load_recording

VSIM = "sim://balance?clock=virtual"
_REAL_WRITE = os.write


class _Disk:
    """``os.write`` for the recorder that takes ``room`` more bytes, then a part of one
    write, then raises ENOSPC (as a full file system does)."""

    def __init__(self, room: int) -> None:
        self.room = room
        self.full = False

    def __call__(self, fd, data):
        if self.full or len(data) > self.room:
            part = min(self.room, len(data) // 2)
            self.full = True
            self.room = 0
            if part:
                return _REAL_WRITE(fd, bytes(data[:part]))  # a cut line, as a full disk leaves
            raise OSError(errno.ENOSPC, "No space left on device")
        self.room -= len(data)
        return _REAL_WRITE(fd, data)


@pytest.fixture
def sim_link():
    link = Link.open(VSIM)
    yield link
    link.close()


def test_a_write_that_fails_leaves_whole_lines_and_says_why(tmp_path, sim_link, monkeypatch):
    path = tmp_path / "r.csv"
    sim_link.stream(100)
    rec = Recorder(path, sim_link, background=False).start()
    sim_link.sleep(1.0)
    rec.poll()
    rec.flush()
    kept = rec.rows
    assert kept > 50 and rec.failed is None
    disk = _Disk(room=3000)
    monkeypatch.setattr(recmod, "_os_write", disk)
    for _ in range(6):
        sim_link.sleep(0.5)
        rec.poll()
        rec.flush()
    assert rec.failed and "No space left" in rec.failed
    monkeypatch.undo()
    rec.close()  # does not raise: the caller reads ``failed``
    back = load_recording(path)
    assert path.read_bytes().endswith(b"\n")
    assert len(back) == rec.rows and kept <= rec.rows
    assert (np.diff(back.frame) == 1).all()
    assert back.sidecar["complete"] is False and "No space left" in back.sidecar["incomplete"]


def test_watch_csv_on_a_full_disk_exits_7_with_one_line(tmp_path, monkeypatch, capsys):
    path = tmp_path / "w.csv"
    monkeypatch.setattr(recmod, "_os_write", _Disk(room=20000))
    code = cli.main(["watch", "--port", VSIM, "--seconds", "30", "--rate", "100",
                     "--csv", str(path)])
    out, err = capsys.readouterr()
    monkeypatch.undo()
    assert code == EXIT_DISK == 7, err
    assert len(err.strip().splitlines()) == 1 and "cannot write" in err
    assert "internal error" not in err
    back = load_recording(path)
    assert len(back) > 10 and not back.complete


def test_a_sequence_on_a_full_disk_stops_the_motor_and_exits_7(tmp_path, monkeypatch, capsys):
    seq = tmp_path / "s.yaml"
    seq.write_text(f"sequence: 1\nname: full disk\nport: {VSIM}\n"
                   "guards: {tilt_deg: 15, wheel_fraction: 0.8}\non_abort: kill\nsteps:\n"
                   "  - arm\n  - hold\n  - record: {name: long, seconds: 20}\n  - disarm\n")
    monkeypatch.setattr(recmod, "_os_write", _Disk(room=40000))
    code = cli.main(["run", str(seq), "--out", str(tmp_path / "res"), "--no-plots"])
    out, err = capsys.readouterr()
    monkeypatch.undo()
    assert code == EXIT_DISK, (out, err)
    assert "internal error" not in err
    back = load_recording(tmp_path / "res" / "long.csv")
    assert not back.complete and "No space left" in back.sidecar["incomplete"]
    summary = yaml.safe_load((tmp_path / "res" / "summary.yaml").read_text())
    assert summary["stopped_by"] == "disk" and summary["motor_after"] in ("off", "tripped")


def _mount_tmpfs(where: Path, size: str) -> bool:
    if os.geteuid() != 0 or shutil.which("mount") is None:
        return False
    where.mkdir()
    got = subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size}", "tmpfs", str(where)],
                         capture_output=True)
    return got.returncode == 0


def test_watch_csv_on_a_small_tmpfs_fills_it_and_leaves_a_readable_file(tmp_path, capsys):
    where = tmp_path / f"small-{uuid.uuid4().hex[:6]}"
    if not _mount_tmpfs(where, "64k"):
        pytest.skip("cannot mount a small tmpfs here (not root, or not permitted)")
    try:
        path = where / "w.csv"
        code = cli.main(["watch", "--port", VSIM, "--seconds", "60", "--rate", "500",
                         "--csv", str(path)])
        _, err = capsys.readouterr()
        assert code == EXIT_DISK, err
        assert "internal error" not in err and len(err.strip().splitlines()) == 1
        back = load_recording(path)
        assert len(back) > 100 and not back.complete
    finally:
        subprocess.run(["umount", str(where)], capture_output=True)
