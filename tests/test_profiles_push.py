"""Pushing and pulling profiles on the simulated balance board (virtual clock): refusal before
anything is sent, one atomic set, read-back, board restarts, save CRC, and the commands."""

from __future__ import annotations

import dataclasses
import json
import re
from pathlib import Path

import crcmod.predefined
import pytest

from rigbench.cli import main
from rigbench.link import Link
from rigbench.profiles.push import PushRefused, image_crc, push_profile
from rigbench.wire.limits import set_lines
from rigbench.profiles.model import dump_profile, load_profile, profile_from_board, save_profile

ROOT = Path(__file__).parents[1]
URL = "sim://balance?clock=virtual"
START = load_profile(ROOT / "profiles" / "demo-balance-start.yaml")
SOFT = load_profile(ROOT / "profiles" / "demo-balance-soft.yaml")


@pytest.fixture
def link():
    with Link.open(URL) as lk:
        yield lk


class WireSpy:
    """Every frame body the host writes to the port, in order."""

    def __init__(self, link):
        self.bodies: list[str] = []
        write = link.port.write

        def spy(data):
            self.bodies += re.findall(r"@([^|@]*)\|", bytes(data).decode("ascii", "replace"))
            return write(data)

        link.port.write = spy

    def verbs(self) -> list[str]:
        return [b.split()[0] for b in self.bodies if b.split()[0] != "hb"]


def test_out_of_range_profile_is_refused_before_anything_is_sent(link):
    bad = load_profile(ROOT / "tests" / "fixtures" / "profiles_bad" / "out_of_range.yaml")
    spy = WireSpy(link)
    with pytest.raises(PushRefused) as e:
        push_profile(link, bad)
    assert spy.verbs() == []  # not even a status or get: only heartbeats went out
    assert f"{bad.path}:8: gains.tilt_kp: 40 is outside the board's range 0..10 rev/s/deg" \
        in str(e.value)
    assert link.get("tilt_kp") == {"tilt_kp": 0.64}  # boot value untouched


def test_push_sends_one_set_and_reads_back(link):
    spy = WireSpy(link)
    report = push_profile(link, SOFT)
    # status, the values before (a get may be split to fit a line), ONE set, the read-back
    assert re.fullmatch(r"status (get )+set (get )+", " ".join(spy.verbs()) + " ")
    set_body = next(b for b in spy.bodies if b.startswith("set "))
    assert set_body.split()[2:] == [f"{k}={v:g}" for k, v in SOFT.values().items()]
    assert report.ok and report.mismatches == () and report.reset is None
    assert report.before["tilt_kp"] == 0.64 and report.readback == SOFT.values()
    assert [r.name for r in report.rows if r.change == "changed"] == ["tilt_kp", "tilt_ki"]


def test_dry_run_sends_no_set(link):
    spy = WireSpy(link)
    report = push_profile(link, SOFT, dry_run=True)
    assert "set" not in spy.verbs() and report.dry_run and report.applied == {}
    assert link.get("tilt_ki") == {"tilt_ki": 9.9}


def test_pull_push_pull_round_trip(link):
    push_profile(link, SOFT)
    first = profile_from_board(link, "tilt", also=["trim"], extra=["tilt_dfilt_s"], date="2025-03-14")
    push_profile(link, START)
    assert push_profile(link, first).ok
    second = profile_from_board(link, "tilt", also=["trim"], extra=["tilt_dfilt_s"], date="2025-03-14")
    assert second == first and dump_profile(second) == dump_profile(first)
    assert first.values() == SOFT.values()


def test_refused_while_a_relay_test_runs(link):
    link.arm()
    link.mode("hold")
    link.mode("relay", loop="tilt", amp=0.5, hyst=0.1, bias=0, bound=8)
    try:
        spy = WireSpy(link)
        with pytest.raises(PushRefused) as e:
            push_profile(link, SOFT)
        assert spy.verbs() == ["status"]
        assert "the board is running mode 'relay' on loop tilt" in str(e.value)
    finally:
        link.kill()


def test_persist_checks_the_save_crc(link):
    report = push_profile(link, SOFT, persist=True)
    assert report.ok and report.save.verified
    writable = [p.name for p in link.params.values() if p.writable]
    values = link.get(*writable)
    image = " ".join(f"{n}={values[n]:.7g}" for n in writable).encode("ascii")
    # An outside implementation of CRC-16/IBM-3740 (crcmod's 'crc-ccitt-false', the same
    # parameters in G. Cook, Catalogue of parametrised CRC algorithms) over the image text
    # of PROTOCOL.md §5.5 gives the CRC the board reported.
    assert crcmod.predefined.mkCrcFun("crc-ccitt-false")(image) == report.save.crc
    assert image_crc(writable, values) == report.save.crc


def test_save_crc_mismatch_is_reported(link, monkeypatch):
    real_save = link.save

    def bad_save(**kw):
        result = real_save(**kw)
        return dataclasses.replace(result, crc=result.crc ^ 0x0100)
    monkeypatch.setattr(link, "save", bad_save)
    report = push_profile(link, SOFT, persist=True)
    assert report.save is not None and not report.save.verified and not report.ok


def test_board_restart_between_set_and_read_back_is_detected(link):
    real_set = link.set
    sim = link.port.link  # the simulated line: its fault timeline reboots the board

    def set_then_reboot(**values):
        applied = real_set(**values)
        before = link.health()
        sim.options = dataclasses.replace(sim.options, reset_after_s=sim.time_s)
        assert link.wait_until(lambda: link.health().resyncs > before.resyncs, 5.0)
        return applied
    link.set = set_then_reboot
    report = push_profile(link, SOFT, persist=True)
    assert not report.ok and report.reset == "the link saw the board restart"
    assert report.mismatches == ("tilt_kp", "tilt_ki")  # back to the stored values
    assert report.save is None  # nothing saved after a restart


class FakeLink:
    """A board that answers ``set`` but keeps its old values (a dropped or undone set)."""

    def __init__(self, real):
        self.info, self.params, self.loops = real.info, real.params, real.loops
        self.values = {n: p.value for n, p in real.params.items()}
        self._status = real.status()

    def status(self):
        return self._status

    def get(self, *names):
        return {n: self.values[n] for n in names}

    def set(self, **values):
        return values


def test_values_back_as_before_are_read_as_a_restart(link):
    report = push_profile(FakeLink(link), SOFT)
    assert report.mismatches == ("tilt_kp", "tilt_ki") and not report.ok
    assert report.reset.startswith("every changed value reads back as it was before")


# --------------------------------------------------------------------------- commands


def _state_url(tmp_path) -> str:
    return f"{URL}&state={tmp_path / 'board-storage.json'}"


def test_commands_round_trip_through_the_boards_storage(tmp_path, capsys):
    port = _state_url(tmp_path)
    a, b = tmp_path / "a.yaml", tmp_path / "b.yaml"
    soft, start = str(ROOT / "profiles" / "demo-balance-soft.yaml"), \
        str(ROOT / "profiles" / "demo-balance-start.yaml")
    assert main(["push", soft, "--port", port, "--persist"]) == 0
    assert main(["pull", "-o", str(a), "--loop", "tilt", "--loop", "trim", "--param", "tilt_dfilt_s",
                 "--port", port]) == 0
    assert load_profile(a).values() == SOFT.values()  # the board booted with what was saved
    assert main(["push", start, "--port", port, "--persist"]) == 0
    assert main(["push", str(a), "--port", port, "--persist", "--json"]) == 0
    out = json.loads(capsys.readouterr().out.strip().splitlines()[-1])
    assert out["ok"] and out["saved"]["verified"] and out["mismatches"] == []
    assert main(["pull", "-o", str(b), "--loop", "tilt", "--loop", "trim", "--param", "tilt_dfilt_s",
                 "--port", port]) == 0

    def no_date(p):
        return re.sub(r"date: .*", "", p.read_text())
    assert no_date(a) == no_date(b)
    assert main(["pull", "-o", str(b), "--loop", "tilt", "--port", port]) == 2  # exists
    assert "exists; give --force" in capsys.readouterr().err


def test_push_command_exit_codes(tmp_path, capsys):
    bad_dir = ROOT / "tests" / "fixtures" / "profiles_bad"
    assert main(["push", str(bad_dir / "out_of_range.yaml"), "--port", URL]) == 4
    err = capsys.readouterr().err
    assert "gains.tilt_kp: 40 is outside the board's range 0..10 rev/s/deg" in err
    assert main(["push", str(bad_dir / "bad_number.yaml"), "--port", URL, "--json"]) == 2
    out = json.loads(capsys.readouterr().out)
    assert out["exit"] == 2 and out["error"].endswith("gains.tilt_ki.value: expected a number, "
                                                      "got text '9,9'")
    assert main(["push", str(ROOT / "profiles" / "demo-wheel.yaml"), "--port",
                 "/dev/rigbench-no-such-port"]) == 3
    assert main(["push", str(ROOT / "profiles" / "demo-balance-soft.yaml"), "--port", URL,
                 "--dry-run"]) == 0
    assert "dry run: nothing sent (2 of 11 values would change)" in capsys.readouterr().out


def test_pull_needs_a_loop_when_the_board_has_several(tmp_path, capsys):
    assert main(["pull", "-o", str(tmp_path / "p.yaml"), "--port", URL]) == 2
    assert "the board has loops trim, tilt: choose one with --loop" in capsys.readouterr().err
    assert not (tmp_path / "p.yaml").exists()


def test_diff_command_against_the_board(tmp_path, capsys):
    port = _state_url(tmp_path)
    save_profile(dataclasses.replace(SOFT, limits={}), tmp_path / "s.yaml")
    assert main(["diff", str(tmp_path / "s.yaml"), "board", "--port", port]) == 0
    lines = capsys.readouterr().out.splitlines()
    rows = {ln.split()[0]: ln.split() for ln in lines if ln.startswith("tilt_")}
    assert rows["tilt_kp"] == ["tilt_kp", "rev/s/deg", "0.45", "0.64", "+42.2", "%"]
    assert rows["tilt_dfilt_s"][-1] == "same" and "trip_tilt" not in rows
    assert main(["diff", str(tmp_path / "s.yaml"), str(ROOT / "profiles" / "demo-wheel.yaml"),
                 "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert {r["change"] for r in out["rows"]} == {"only_a", "only_b"}


def test_a_cascade_set_pulls_pushes_and_reads_back_as_one(tmp_path, capsys):
    # the tilt loop and its wheel-speed trim loop run together: one profile, one atomic set
    port = _state_url(tmp_path)
    both = tmp_path / "both.yaml"
    assert main(["pull", "-o", str(both), "--loop", "tilt", "--loop", "trim",
                 "--port", port]) == 0
    prof = load_profile(both)
    assert prof.loops == ("tilt", "trim") and "profile: 2\n" in both.read_text()
    assert {"tilt_kp", "tilt_ki", "tilt_kd", "trim_kp", "trim_ki", "trim_kd"} <= set(prof.gains)
    changed = both.read_text().replace(
        f"trim_ki: {{value: {prof.gains['trim_ki'].value!r}",
        f"trim_ki: {{value: {prof.gains['trim_ki'].value * 2!r}")
    assert changed != both.read_text()
    both.write_text(changed)
    capsys.readouterr()
    assert main(["push", str(both), "--port", port, "--persist", "--json"]) == 0
    out = json.loads(capsys.readouterr().out.strip().splitlines()[-1])
    assert out["ok"] and out["mismatches"] == [] and out["saved"]["verified"]
    again = tmp_path / "again.yaml"
    assert main(["pull", "-o", str(again), "--loop", "tilt", "--loop", "trim",
                 "--port", port]) == 0
    assert load_profile(again).values() == pytest.approx(load_profile(both).values())
def test_a_board_refusal_of_the_set_is_exit_4_with_the_boards_code(monkeypatch, capsys):
    from rigbench.link import BoardRefused

    def refuse(self, **values):
        raise BoardRefused("busy", "relay test running", "set")

    monkeypatch.setattr(Link, "set", refuse)
    profile = str(ROOT / "profiles" / "demo-balance-soft.yaml")
    assert main(["push", profile, "--port", URL, "--json"]) == 4
    out = json.loads(capsys.readouterr().out)
    assert out["exit"] == 4 and out["code"] == "busy" and out["text"] == "relay test running"
    assert main(["push", profile, "--port", URL]) == 4
    assert "busy" in capsys.readouterr().err


@pytest.mark.parametrize("command", ["push", "pull", "diff"])
def test_profile_commands_open_the_port_at_the_baud_given(command, monkeypatch, tmp_path):
    seen = []
    real_open = Link.open.__func__

    def spy(cls, url, **kw):
        seen.append(kw.get("baudrate"))
        return real_open(cls, url, **kw)

    monkeypatch.setattr(Link, "open", classmethod(spy))
    profile = str(ROOT / "profiles" / "demo-balance-soft.yaml")
    argv = {"push": ["push", profile, "--dry-run"],
            "pull": ["pull", "-o", str(tmp_path / "p.yaml"), "--loop", "tilt"],
            "diff": ["diff", profile, "board"]}[command]
    assert main(argv + ["--port", URL, "--baud", "57600"]) == 0
    assert seen == [57600]
@pytest.mark.parametrize("url, loop, lines", [(URL, "tilt", 2),
                                              ("sim://wheel?clock=virtual", "speed", 1)])
def test_a_profile_of_every_writable_parameter_pushes_and_reads_back(url, loop, lines):
    # one atomic group longer than a line (PROTOCOL.md §5.5): staged lines, then one set
    with Link.open(url) as lk:
        writable = [n for n, p in lk.params.items() if p.writable]
        everything = profile_from_board(lk, loop, extra=writable, limits=())
        target = {}
        for n in writable:  # a value inside each range, unlike the boot value
            p = lk.params[n]
            target[n] = float(f"{p.minimum + 0.25 * (p.maximum - p.minimum):.4g}")
        profile = dataclasses.replace(everything, gains={
            n: dataclasses.replace(s, value=target[n]) for n, s in everything.gains.items()})
        spy = WireSpy(lk)
        report = push_profile(lk, profile)
        verbs = spy.verbs()
        assert len(set_lines(tuple(target.items()))) == lines
        assert verbs.count("stage") == lines - 1 and verbs.count("set") == 1
        assert lines == 1 or verbs.index("stage") < verbs.index("set")
        assert all(len(b) <= 193 for b in spy.bodies)
        assert report.ok and report.mismatches == ()
        assert lk.get(*writable) == pytest.approx(target, rel=1e-6)
