"""Fuzzing the recording reader (rigbench.recordings.recording.load_recording): recordings are files people
keep and pass on, and replay:// reads them as a board. A real recording (CSV and YAML
sidecar made by Recorder on the simulated board) is damaged at random — bytes changed,
lines dropped, doubled or cut, text spliced in — and read back: the reader returns a
recording whose columns agree with its header, or raises RecordingError naming the file
(the CSV or its sidecar).
Nothing else may escape.
"""

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rigbench.link import Link
from rigbench.recordings.recording import Recorder, RecordingError, load_recording, sidecar_path


@pytest.fixture(scope="module")
def recording(tmp_path_factory):
    path = tmp_path_factory.mktemp("rec") / "run.csv"
    with Link.open("sim://wheel?clock=virtual") as link:
        link.stream(100)
        with Recorder(path, link, background=False, notes=["fuzz seed"]) as rec:
            link.sleep(0.3)
            rec.poll()
            link.kill()
            link.sleep(0.1)
    return path.read_bytes(), sidecar_path(path).read_bytes()


_BITS = [b",", b"\n", b"\r", b" ", b"[", b"]", b"nan", b"inf", b"-", b"1e999", b"\x00", b"\xff",
         b"#", b":", b"- ", b"{", b"!!python/object:os.system", b"&a", b"*a", b"\t", b"0x1"]


@st.composite
def damaged(draw, data: bytes) -> bytes:
    out = bytearray(data)
    for _ in range(draw(st.integers(1, 4))):
        if not out:
            break
        i = draw(st.integers(0, len(out) - 1))
        kind = draw(st.sampled_from(["flip", "splice", "cut", "drop_line", "dup_line", "trunc"]))
        if kind == "flip":
            out[i] ^= 1 << draw(st.integers(0, 7))
        elif kind == "splice":
            out[i:i] = draw(st.sampled_from(_BITS))
        elif kind == "cut":
            del out[i:i + draw(st.integers(1, 20))]
        elif kind in ("drop_line", "dup_line"):
            lines = bytes(out).split(b"\n")
            k = draw(st.integers(0, len(lines) - 1))
            if kind == "drop_line":
                del lines[k]
            else:
                lines.insert(k, lines[k])
            out = bytearray(b"\n".join(lines))
        else:
            del out[i:]
    return bytes(out)


def _read(tmp_path, csv: bytes, side: bytes | None):
    path = tmp_path / "r.csv"
    path.write_bytes(csv)
    if side is None:
        sidecar_path(path).unlink(missing_ok=True)
    else:
        sidecar_path(path).write_bytes(side)
    try:
        rec = load_recording(path)
    except RecordingError as exc:
        assert str(exc).startswith((str(path), str(sidecar_path(path)))), exc   # names the file
        return None
    n = len(rec)
    assert rec.values.shape == (n, len(rec.signals)) and len(rec.units) == len(rec.signals)
    assert rec.frame.shape == rec.board_time_s.shape == rec.host_time_s.shape == (n,)
    return rec


def test_the_undamaged_recording_reads_back(recording, tmp_path):
    rec = _read(tmp_path, *recording)
    assert rec is not None and len(rec) >= 30 and rec.complete
    assert np.all(np.diff(rec.frame) == 1)


@settings(max_examples=150, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_a_damaged_csv_reads_or_raises_recording_error(recording, tmp_path, data):
    csv, side = recording
    _read(tmp_path, data.draw(damaged(csv)), data.draw(st.sampled_from([side, None])))


@settings(max_examples=150, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_a_damaged_sidecar_reads_or_raises_recording_error(recording, tmp_path, data):
    csv, side = recording
    _read(tmp_path, csv, data.draw(damaged(side)))
