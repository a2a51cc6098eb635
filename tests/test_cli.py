"""The rigbench command line: subcommands on the simulated board, exit codes, one-line
errors. Exit codes and messages are checked against the table in bench/rigbench/cli.py."""

import json
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import pytest

from rigbench import cli
from rigbench.recordings.recording import load_recording

ROOT = Path(__file__).parents[1]
VSIM = "sim://balance?clock=virtual"


def run(argv, capsys):
    code = cli.main(argv)
    out, err = capsys.readouterr()
    return code, out, err


def test_every_exit_code_is_in_the_docstring_table():
    for code, meaning in cli.EXIT_CODES.items():
        assert f"\n    {code:<4} " in cli.__doc__, code
    assert {0, 1, 2, 3, 4, 5, 6} <= set(cli.EXIT_CODES)


def test_info_json_on_the_simulated_board(capsys):
    code, out, err = run(["info", "--port", VSIM, "--json"], capsys)
    assert code == 0 and err == ""
    data = json.loads(out)
    assert {"board", "params", "signals", "loops", "health"} <= set(data)
    assert data["board"]["simulated"] is True and data["board"]["protocol"] == "1.0"
    assert "tilt_kp" in data["params"] and data["params"]["tilt_kp"]["writable"] is True
    assert data["signals"][0]["name"] == "tilt"
    assert data["loops"]["tilt"]["gains"] == ["tilt_kp", "tilt_ki", "tilt_kd"]
    assert data["health"]["state"] == "ok" and data["status"]["motor"] == "off"


def test_info_text_marks_the_simulated_board(capsys):
    code, out, _ = run(["info", "--port", VSIM], capsys)
    assert code == 0 and "SIMULATED" in out and "tilt_kp" in out


@pytest.mark.parametrize("port", ["/dev/ttyDOES_NOT_EXIST0", "nosuch://x"])
def test_missing_port_exits_3_with_one_line(port, capsys):
    code, out, err = run(["info", "--port", port], capsys)
    assert code == cli.EXIT_LINK == 3
    assert err.count("\n") == 1 and port in err and "Traceback" not in err


def test_missing_port_in_a_real_process_has_no_traceback():
    proc = subprocess.run([sys.executable, "-m", "rigbench.cli", "info", "--port", "/dev/ttyNOPE9"],
                          cwd=ROOT, capture_output=True, text=True, timeout=60)
    assert proc.returncode == 3
    assert proc.stderr.count("\n") == 1 and "rigbench ports" in proc.stderr


def test_usage_errors_exit_2_with_one_line(capsys):
    for argv in (["info", "--bogus"], ["nosuchcommand"],
                 ["watch", "--seconds", "-1", "--port", VSIM]):
        code, _, err = run(argv, capsys)
        assert code == cli.EXIT_USAGE, argv
        assert err.count("\n") == 1, (argv, err)


def test_plain_rigbench_runs_the_default_command(capsys, monkeypatch):
    import importlib

    module = importlib.import_module(f"rigbench.commands.{cli.DEFAULT_COMMAND}")
    seen = []
    monkeypatch.setattr(module, "run", lambda args: seen.append(args.port) or 0)
    code, _, err = run([], capsys)
    assert code == 0 and seen == [cli.DEFAULT_PORT], err


def test_board_refusal_exits_4(capsys, monkeypatch):
    from rigbench.link import BoardRefused

    def refuse(args):
        raise BoardRefused("range", "tilt_kp 0..10", "set")

    monkeypatch.setattr(cli, "build_parser", _parser_running(refuse))
    code, _, err = run(["info"], capsys)
    assert code == cli.EXIT_REFUSED and "range" in err and err.count("\n") == 1


def test_internal_error_is_one_line_unless_debug(capsys, monkeypatch):
    def boom(args):
        raise RuntimeError("something broke\nsecond line")

    monkeypatch.setattr(cli, "build_parser", _parser_running(boom))
    code, _, err = run(["info"], capsys)
    assert code == cli.EXIT_INTERNAL and err.count("\n") == 1 and "something broke" in err
    code, _, err = run(["info", "--debug"], capsys)
    assert code == cli.EXIT_INTERNAL and "Traceback" in err


def _parser_running(fn):
    real = cli.build_parser

    def build():
        parser = real()
        parser.set_defaults(_run=fn)
        for action in parser._subparsers._group_actions:
            for sub in action.choices.values():
                sub.set_defaults(_run=fn)
        return parser
    return build


def test_watch_records_csv_and_sidecar(tmp_path, capsys):
    path = tmp_path / "w.csv"
    code, out, err = run(["watch", "--port", VSIM, "--seconds", "2", "--rate", "100",
                          "--csv", str(path)], capsys)
    assert code == 0, err
    rec = load_recording(path)
    assert 195 <= len(rec) <= 201 and rec.complete  # 2 s at 100 Hz
    assert "recorded" in out and str(path) in out
    code, _, err = run(["watch", "--port", VSIM, "--seconds", "1", "--csv", str(path)], capsys)
    assert code == cli.EXIT_USAGE and "exists" in err


def test_watch_prints_aligned_columns(capsys):
    code, out, _ = run(["watch", "--port", VSIM, "--seconds", "1", "--every", "0.25"], capsys)
    lines = out.splitlines()
    assert code == 0 and lines[0].split()[:2] == ["time", "[s]"]
    assert len(lines) == 5  # header and one line per 0.25 s
    ends = {len(line) for line in lines}
    assert len(ends) == 1  # every line has the same width: columns line up
    assert [float(line.split()[0]) for line in lines[1:]] == pytest.approx([0.25, 0.5, 0.75, 1.0],
                                                                           abs=0.02)


def test_watch_on_an_unplugged_board_exits_3(capsys, tmp_path):
    path = tmp_path / "u.csv"
    code, _, err = run(["watch", "--port", VSIM + "&unplug=1.0", "--seconds", "5",
                        "--csv", str(path)], capsys)
    assert code == cli.EXIT_LINK and "lost" in err and err.count("\n") == 1
    assert len(load_recording(path)) > 0  # what came before the unplug is kept


def test_kill_confirms_motor_tripped(capsys):
    code, out, _ = run(["kill", "--port", VSIM, "--json"], capsys)
    data = json.loads(out)
    assert code == 0 and data["confirmed"] and data["motor"] == "tripped"
    assert data["fault"] == "kill"


def test_ports_lists_descriptions_or_says_none(capsys, monkeypatch):
    from serial.tools import list_ports

    monkeypatch.setattr(list_ports, "comports", lambda: [])
    code, out, _ = run(["ports"], capsys)
    assert code == 0 and out.startswith("none found")
    fake = SimpleNamespace(device="/dev/ttyACM0", description="USB serial board",
                           hwid="USB VID:PID=1234:5678")
    monkeypatch.setattr(list_ports, "comports", lambda: [fake])
    code, out, _ = run(["ports", "--json"], capsys)
    assert json.loads(out)["ports"][0]["description"] == "USB serial board"


def test_options_before_any_command_go_to_the_default_command(capsys, monkeypatch):
    import importlib

    module = importlib.import_module(f"rigbench.commands.{cli.DEFAULT_COMMAND}")
    seen = []
    monkeypatch.setattr(module, "run", lambda args: seen.append(args.port) or 0)
    code, _, err = run(["--port", "sim://wheel"], capsys)
    assert code == 0 and seen == ["sim://wheel"], err
