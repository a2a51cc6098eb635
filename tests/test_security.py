"""Security: files people share (profiles, sequences, recordings) are data, never code; a
sequence writes only inside its results folder; the pseudo-terminal of a simulated board
is owner-only; nothing in rigbench listens on a network socket.

Checks run two ways where they can: on the source (every module of bench/, parsed with
``ast``) and on the running program (a ``rigbench sim`` process and a host reading it,
looked up in /proc).
"""

from __future__ import annotations

import ast
import os
import socket
import signal
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

from rigbench.cli import main
from rigbench.link import Link, LinkError
from rigbench.link.killsock import socket_path
from rigbench.profiles.model import load_profile, load_profile_text
from rigbench.recordings.recording import RecordingError, load_recording
from rigbench.sequences.file import load_sequence, load_sequence_text
from rigbench.sequences.run import run_sequence
from rigbench.base.yamlload import SchemaError, StrictLoader, load_yaml_text

ROOT = Path(__file__).parents[1]
SOURCES = sorted((ROOT / "bench").rglob("*.py"))
PROFILE = (ROOT / "profiles" / "demo-wheel.yaml").read_text()

# PyYAML's documented unsafe entry points (pyyaml.org, "PyYAML yaml.load(input)
# Deprecation"): anything that can build arbitrary Python objects.
UNSAFE_YAML = {"load", "load_all", "unsafe_load", "unsafe_load_all", "full_load",
               "full_load_all", "Loader", "FullLoader", "UnsafeLoader", "CLoader",
               "CFullLoader", "CUnsafeLoader", "Constructor", "FullConstructor",
               "UnsafeConstructor", "add_constructor", "add_multi_constructor"}


_PARSED: list = []


def _trees():
    if not _PARSED:
        _PARSED.extend((p, ast.parse(p.read_text(), filename=str(p))) for p in SOURCES)
    return _PARSED


def _dotted(node) -> str:
    parts = []
    while isinstance(node, ast.Attribute):
        parts.append(node.attr)
        node = node.value
    if isinstance(node, ast.Name):
        parts.append(node.id)
    return ".".join(reversed(parts))


# --------------------------------------------------------------------------- YAML


SAFE_LOADERS = {"SafeLoader", "CSafeLoader", "BaseLoader", "CBaseLoader", "StrictLoader"}


def _safe_loader_call(node) -> bool:
    """``yaml.load(text, Loader=X)`` where X names only safe loaders (e.g.
    ``getattr(yaml, "CSafeLoader", yaml.SafeLoader)``)."""
    if not (isinstance(node, ast.Call) and _dotted(node.func) in ("yaml.load", "yaml.load_all")):
        return False
    loader = next((k.value for k in node.keywords if k.arg == "Loader"),
                  node.args[1] if len(node.args) > 1 else None)
    if loader is None:
        return False
    words = set()
    for sub in ast.walk(loader):
        if isinstance(sub, ast.Attribute):
            words.add(sub.attr)
        elif isinstance(sub, ast.Name):
            words.add(sub.id)
        elif isinstance(sub, ast.Constant) and isinstance(sub.value, str):
            words.add(sub.value)
    return bool(words & SAFE_LOADERS) and words <= SAFE_LOADERS | {"yaml", "getattr"}


def test_yaml_is_read_only_with_safe_loaders_in_the_source():
    found = []
    for path, tree in _trees():
        approved = {id(n.func) for n in ast.walk(tree) if _safe_loader_call(n)}
        for node in ast.walk(tree):
            if isinstance(node, ast.Attribute) and _dotted(node).startswith("yaml.") \
                    and node.attr in UNSAFE_YAML and id(node) not in approved:
                found.append(f"{path.name}:{node.lineno}: {_dotted(node)}")
            if isinstance(node, ast.ImportFrom) and node.module == "yaml":
                found += [f"{path.name}:{node.lineno}: from yaml import {a.name}"
                          for a in node.names if a.name in UNSAFE_YAML]
            if isinstance(node, ast.ClassDef):        # a loader of our own: a SafeLoader
                bases = [_dotted(b) for b in node.bases]
                if any(b.startswith("yaml.") and b.endswith("Loader") for b in bases) \
                        and "yaml.SafeLoader" not in bases:
                    found.append(f"{path.name}:{node.lineno}: {node.name}({', '.join(bases)})")
    assert not found, found
    assert issubclass(StrictLoader, yaml.SafeLoader)


def test_the_loader_check_itself_tells_safe_from_unsafe():
    def calls(src):
        return [n for n in ast.walk(ast.parse(src)) if isinstance(n, ast.Call)][0]
    assert _safe_loader_call(calls("yaml.load(t, Loader=getattr(yaml, 'CSafeLoader', "
                                   "yaml.SafeLoader))"))
    assert _safe_loader_call(calls("yaml.load(t, StrictLoader)"))
    assert not _safe_loader_call(calls("yaml.load(t, Loader=yaml.Loader)"))
    assert not _safe_loader_call(calls("yaml.load(t, Loader=getattr(yaml, 'CLoader', "
                                       "yaml.SafeLoader))"))
    assert not _safe_loader_call(calls("yaml.load(t)"))


PAYLOADS = [
    "!!python/object/apply:os.system ['touch {marker}']",
    "!!python/object/new:subprocess.Popen [['touch', '{marker}']]",
    "!!python/name:os.system",
    "!!python/module:os",
    "!!python/object:rigbench.profiles.model.Profile {{}}",
    "!!binary aGVsbG8=",
]


@pytest.mark.parametrize("payload", PAYLOADS, ids=lambda p: p.split()[0])
def test_python_tags_in_profiles_sequences_and_sidecars_are_refused(payload, tmp_path):
    marker = tmp_path / "marker"
    value = payload.format(marker=marker)
    profile = PROFILE.replace("name: wheel speed loop (demo)", f"name: {value}")
    sequence = f"sequence: 1\nname: {value}\nguards: {{stale_s: 0.5}}\nsteps:\n  - arm\n"
    with pytest.raises(SchemaError):
        load_profile_text(profile, "p.yaml")
    with pytest.raises(SchemaError):
        load_sequence_text(sequence, tmp_path / "sequences" / "s.yaml")
    with pytest.raises(SchemaError):
        load_yaml_text(f"{value}\n")                  # as the whole document
    (tmp_path / "p.yaml").write_text(profile)
    with pytest.raises(SchemaError):
        load_profile(tmp_path / "p.yaml")
    (tmp_path / "r.csv").write_text("host_time [s],board_time [s],frame [1]\n0,0,0\n")
    (tmp_path / "r.yaml").write_text(f"format: {value}\ncsv: r.csv\ncolumns: []\n")
    with pytest.raises(RecordingError):
        load_recording(tmp_path / "r.csv")
    assert not marker.exists()


def test_a_yaml_bomb_is_refused_before_it_grows():
    # the "billion laughs" shape: each anchor repeats the one before
    bomb = "a: &a [x, x, x, x, x, x, x, x, x]\n" + "".join(
        f"{c}: &{c} [*{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}]\n"
        for p, c in zip("abcdefgh", "bcdefghi"))
    with pytest.raises(SchemaError, match="anchors and aliases"):
        load_yaml_text(bomb)


# --------------------------------------------------------------------------- sequences


def _project(tmp_path: Path) -> Path:
    (tmp_path / "profiles").mkdir(parents=True)
    (tmp_path / "profiles" / "w.yaml").write_text(PROFILE)
    (tmp_path / "sequences").mkdir()
    return tmp_path


def _seq(steps: str, port: str = "sim://wheel?clock=virtual") -> str:
    return (f"sequence: 1\nname: try\nport: \"{port}\"\nguards: {{stale_s: 0.5}}\n"
            f"steps:\n{steps}")


@pytest.mark.parametrize("step", [
    "  - shell: touch {m}", "  - python: open('{m}', 'w')", "  - exec: {{cmd: touch {m}}}",
    "  - run: touch {m}", "  - system: touch {m}", "  - import: os", "  - eval: 1+1",
    "  - write: {{path: {m}, text: x}}", "  - file: {m}", "  - script: x.py",
    "  - check: __import__('os').system('touch {m}') > 0",
    "  - set: {{speed_kp: \"__import__('os').system('touch {m}')\"}}",
    "  - push: /etc/passwd", "  - push: ../../../etc/passwd",
    "  - push: profiles/../../outside.yaml", "  - push: ~/.ssh/id_rsa",
    "  - record: {{seconds: 1, name: ../escape}}", "  - record: {{seconds: 1, name: /tmp/x}}",
    "  - record: {{seconds: 1, name: a/b}}", "  - record: {{seconds: 1, name: ..}}",
])
def test_a_sequence_cannot_name_the_shell_python_or_paths_outside(step, tmp_path):
    proj = _project(tmp_path / "proj")
    marker = tmp_path / "marker"
    with pytest.raises(SchemaError):
        load_sequence_text(_seq(step.format(m=marker)), proj / "sequences" / "s.yaml")
    assert not marker.exists()


def _files(folder: Path) -> set[Path]:
    return {p for p in folder.rglob("*") if p.is_file()}


def test_a_run_writes_only_inside_its_results_folder(tmp_path, monkeypatch):
    proj = _project(tmp_path / "proj")
    (proj / "sequences" / "s.yaml").write_text(_seq(
        "  - push: {profile: profiles/w.yaml, persist: true}\n  - arm\n  - hold\n"
        "  - record: {seconds: 1, name: quiet}\n  - disarm\n"))
    monkeypatch.chdir(proj)
    seq = load_sequence(proj / "sequences" / "s.yaml")
    before = _files(tmp_path)
    results = proj / "results" / "r1"
    with Link.open(seq.port) as link:
        result = run_sequence(link, sequence=seq, results_dir=results)
    new = _files(tmp_path) - before
    assert new and all(results in p.parents for p in new), sorted(map(str, new))
    assert result is not None


def test_a_sequence_port_cannot_write_files_outside_the_results_folder(tmp_path, monkeypatch):
    proj = _project(tmp_path / "proj")
    outside = tmp_path / "outside.json"
    (proj / "sequences" / "s.yaml").write_text(_seq(
        "  - push: {profile: profiles/w.yaml, persist: true}\n",
        port=f"sim://wheel?clock=virtual&state={outside}"))
    monkeypatch.chdir(proj)
    # refused as `rigbench run` loads it, before any port is opened: file, line and field
    with pytest.raises(SchemaError) as err:
        load_sequence(proj / "sequences" / "s.yaml")
    assert (err.value.path, err.value.line, err.value.field) == \
        (str(proj / "sequences" / "s.yaml"), 3, "port") and "state=" in err.value.message
    assert not outside.exists()


@pytest.mark.parametrize("port", [
    "socket://localhost:7777", "rfc2217://localhost:2217", "loop://", "spy:///dev/ttyUSB0",
    "replay:///etc/passwd", "SIM://wheel?state=/tmp/x", "sim://wheel?clock=virtual&state=nv.json",
    "/dev/../etc/passwd", "/etc/passwd", "ttyUSB0", "/dev/tty USB0", "/dev/x://y", "COM0",
    "/dev/tty", "/dev/fd/0", "/dev/stdin", "/dev/zero", "/dev/tty1", "/dev/mem"])
def test_a_sequence_port_is_a_device_or_a_sim_url_that_writes_no_file(port, tmp_path):
    proj = _project(tmp_path / "proj")
    with pytest.raises(SchemaError) as err:
        load_sequence_text(_seq("  - arm\n", port=port), proj / "sequences" / "s.yaml")
    assert err.value.line == 3 and err.value.field == "port"


@pytest.mark.parametrize("port", [
    "/dev/ttyUSB0", "/dev/ttyACM1", "/dev/pts/7", "COM3", "COM12",
    "/dev/serial/by-path/pci-0000:00:14.0-usb-0:1:1.0-port0",
    "sim://balance?clock=virtual&seed=4&stall=1:0.2", "sim://plant?num=1&den=1,1"])
def test_a_sequence_port_may_be_a_device_or_a_sim_url(port, tmp_path):
    proj = _project(tmp_path / "proj")
    seq = load_sequence_text(_seq("  - arm\n", port=port), proj / "sequences" / "s.yaml")
    assert seq.port == port


def test_the_command_line_port_still_chooses_any_url(tmp_path, monkeypatch, capsys):
    # --port is the user's own choice: a sim:// board keeping its storage in a file works
    proj = _project(tmp_path / "proj")
    (proj / "sequences" / "s.yaml").write_text(_seq(
        "  - push: {profile: profiles/w.yaml, persist: true}\n"))
    nv = tmp_path / "nv.json"
    code = main(["run", str(proj / "sequences" / "s.yaml"), "--no-plots",
                 "--out", str(proj / "results" / "r"),
                 "--port", f"sim://wheel?clock=virtual&state={nv}"])
    capsys.readouterr()
    assert code == 0 and nv.exists()


# --------------------------------------------------------------------------- pty, sockets


def _socket_inodes(pid: int) -> set[str]:
    out = set()
    for fd in Path(f"/proc/{pid}/fd").iterdir():
        try:
            target = os.readlink(fd)
        except OSError:
            continue
        if target.startswith("socket:["):
            out.add(target[8:-1])
    return out


def _net_entries() -> dict[str, list[tuple[str, str, str]]]:
    """/proc/net tables: name -> (inode, state or flags, local address) per socket."""
    tables = {}
    for name in ("tcp", "tcp6", "udp", "udp6", "unix"):
        path = Path("/proc/net") / name
        if not path.exists():
            continue
        rows = path.read_text().splitlines()[1:]
        if name == "unix":   # Num RefCount Protocol Flags Type St Inode Path
            tables[name] = [(r.split()[6], r.split()[3], " ".join(r.split()[7:])) for r in rows]
        else:                # sl local rem st ... inode
            tables[name] = [(r.split()[9], r.split()[3], r.split()[1]) for r in rows]
    return tables


# The one listening socket rigbench has: the kill socket of the program holding a device
# port (rigbench.link.killsock), a Unix-domain socket in an owner-only folder that takes
# only "kill" (stop the motor) or "ping". Nothing else may listen.
KILL_SOCKET_MODULE = "killsock.py"


def test_no_module_opens_a_server_socket():
    # common practice, no source: these are the standard library's ways to listen
    forbidden_imports = ("socketserver", "http.server", "xmlrpc.server", "wsgiref",
                         "multiprocessing.connection")
    forbidden_calls = {"bind", "listen", "accept", "create_server", "start_server",
                       "start_unix_server", "serve_forever", "Listener"}
    found = []
    for path, tree in _trees():
        if path.name == KILL_SOCKET_MODULE and path.parent.name == "link":
            continue   # checked by test_the_kill_socket_is_owner_only_and_takes_only_kill
        for node in ast.walk(tree):
            if isinstance(node, (ast.Import, ast.ImportFrom)):
                names = [a.name for a in node.names] if isinstance(node, ast.Import) \
                    else [node.module or ""]
                found += [f"{path.name}:{node.lineno}: import {n}" for n in names
                          if n == "socket" or n.startswith(forbidden_imports)]
            if isinstance(node, ast.Call):
                name = _dotted(node.func).split(".")[-1]
                if name in forbidden_calls:
                    found.append(f"{path.name}:{node.lineno}: {_dotted(node.func)}()")
    assert not found, found


@pytest.mark.skipif(not (hasattr(os, "openpty") and Path("/proc/net").exists()),
                    reason="needs POSIX ptys and Linux /proc")
def test_rigbench_sim_pty_is_owner_only_and_no_process_listens(tmp_path):
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    # what `rigbench sim wheel` runs, without the start-up cost of the whole CLI
    code = "from rigbench.rig.pty import run_sim_server; raise SystemExit(run_sim_server('wheel'))"
    server = subprocess.Popen([sys.executable, "-c", code], cwd=tmp_path,
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    try:
        line = server.stdout.readline()
        path = next((w for w in line.split() if w.startswith("/dev/")), None)
        assert path, (line, server.stderr.read() if server.poll() is not None else "")
        st = os.stat(path)
        assert st.st_mode & 0o777 == 0o600 and st.st_uid == os.getuid(), oct(st.st_mode)
        with Link.open(path) as link:                   # a host on the board: this process
            link.stream(100)
            link.sleep(0.3)
            assert link.health().telemetry_per_s > 0
            tables = _net_entries()
            for pid in (server.pid, os.getpid()):
                mine = _socket_inodes(pid)
                for name, rows in tables.items():
                    for inode, state, local in rows:
                        if inode in mine:
                            # an inet socket of any kind, or a listening unix socket (flag
                            # __SO_ACCEPTCON 0x10000), would be a way in; the host's kill
                            # socket (owner-only folder, takes only "kill") is the exception
                            listening = name == "unix" and int(state, 16) & 0x10000
                            assert name == "unix" and (not listening or (
                                pid == os.getpid() and local == str(socket_path(path)))), \
                                (pid, name, local)
    finally:
        if server.poll() is None:
            server.send_signal(signal.SIGINT)           # Ctrl-C: a clean stop
            try:
                server.wait(20)
            except subprocess.TimeoutExpired:
                server.kill()
                server.wait(10)
    assert server.returncode == 0


@pytest.mark.skipif(not hasattr(socket, "AF_UNIX"), reason="needs Unix-domain sockets")
def test_the_kill_socket_is_owner_only_and_takes_only_kill(monkeypatch):
    # the holder of a port answers `rigbench kill` from another terminal: its socket lives
    # in a folder only this user can enter, and anything but "kill" or "ping" does nothing
    import shutil
    import tempfile

    tmp_path = Path(tempfile.mkdtemp(prefix="rk"))   # short: a socket path has ~100 bytes
    monkeypatch.setenv("XDG_RUNTIME_DIR", str(tmp_path))
    kills = []

    class FakeLink:
        def event_cursor(self):
            return 0

    import rigbench.link.killsock as ks

    monkeypatch.setattr(ks, "kill_and_confirm",
                        lambda link, **kw: kills.append(kw) or kw["on_sent"](1.0))
    service = ks.KillService(FakeLink(), str(tmp_path / "ttyX")).start()
    try:
        folder = service.path.parent
        assert folder.stat().st_mode & 0o777 == 0o700 and folder.stat().st_uid == os.getuid()
        for junk in (b"arm\n", b"mode 1 hold\n", b"\x00" * 64):
            with socket.socket(socket.AF_UNIX, socket.SOCK_STREAM) as c:
                c.settimeout(2.0)
                c.connect(str(service.path))
                c.sendall(junk)
                assert c.recv(100) == b""          # closed without an answer
        assert kills == []
        assert ks.request_kill(str(service.path), probe=True)["pid"] == os.getpid()
        assert kills == []
    finally:
        service.close()
        shutil.rmtree(tmp_path, ignore_errors=True)
    assert not service.path.exists()
# --------------------------------------------------------------------------- hostile files


def test_a_results_link_out_of_the_project_folder_is_refused(tmp_path, capsys):
    proj = _project(tmp_path / "proj")
    outside = tmp_path / "elsewhere"
    outside.mkdir()
    (proj / "results").symlink_to(outside)
    (proj / "sequences" / "s.yaml").write_text(_seq("  - arm\n  - disarm\n"))
    code = main(["run", str(proj / "sequences" / "s.yaml"), "--no-plots"])
    err = capsys.readouterr().err
    assert code == 2 and "outside the project folder" in err
    assert not any(outside.iterdir())


@pytest.mark.parametrize("state", ["/dev/zero", "/dev/null", "."])
def test_sim_state_must_be_a_regular_file(state, tmp_path):
    with pytest.raises(LinkError, match="not a regular file|cannot read"):
        Link.open(f"sim://wheel?clock=virtual&state={state}")


@pytest.mark.parametrize("query", [
    "num=1e308&den=1,1e-308", "num=1&den=1,1e300", "num=1&den=1e-300,1",
    "num=1e300&den=1,-1", "num=1&den=1,1e150,1"])
def test_sim_plants_that_would_step_into_nan_are_refused(query):
    # common practice, no source: a state-space form with overflowing entries is unusable
    with pytest.raises(LinkError, match="not finite"):
        Link.open(f"sim://plant?{query}&clock=virtual")


def test_a_set_step_may_not_loosen_trip_limits_while_armed(tmp_path, capsys):
    proj = _project(tmp_path / "proj")
    seq = ("sequence: 1\nname: loosen\nport: sim://balance?clock=virtual\n"
           "guards: {tilt_deg: 15, wheel_fraction: 0.8}\nsteps:\n"
           "  - arm\n  - hold\n  - set: {trip_tilt: 28}\n  - wait: 1\n  - disarm\n")
    (proj / "sequences" / "s.yaml").write_text(seq)
    code = main(["run", str(proj / "sequences" / "s.yaml"), "--out", str(tmp_path / "r1"),
                 "--no-plots"])
    out = capsys.readouterr().out
    assert code == 4 and "loosen trip_tilt" in out and "loosen_limits: true" in out
    (proj / "sequences" / "s.yaml").write_text(
        seq.replace("{trip_tilt: 28}", "{trip_tilt: 28, loosen_limits: true}"))
    code = main(["run", str(proj / "sequences" / "s.yaml"), "--out", str(tmp_path / "r2"),
                 "--no-plots"])
    assert code == 0, capsys.readouterr()
