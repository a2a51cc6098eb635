"""Run every speed measurement of rigbench side by side and print figures, targets and ratios.

Not a test: the figures depend on the machine and on what else runs on it (the load average
is printed). Sections (``--only`` picks some):

- ``codec``: telemetry frames decoded per second on one core (``HostCodec.receive`` on the
  balance board's real output in read-sized chunks), against 20 000 lines/s (USB full-speed
  CDC, docs/METHODS.md §7); target ≥ 10×. Also with the reader's filing into the ring.
- ``link``: a simulated balance board at 2 kHz on a pseudo-terminal in another process,
  paced in real time, its µs clock set to the monotonic clock; ``Link.open`` on the device
  path here. Frames lost (target 0), latency from the board's time stamp to the row being in
  the host's ring (median, p99), host CPU share (process CPU time / wall).
- ``kill``: under that 2 kHz load, ``link.kill()`` call to kill bytes written (target
  p99 < 10 ms) and to the board having acted on it (fault latched, output forced to zero:
  seen in the board process; the motor is armed before each kill).
- ``sim``: simulated seconds per wall second: plants alone (scripts/bench_plants.py), boards
  in hold (scripts/bench_sim.py), a relay test through ``sim://`` and the host codec; and
  the balance model against ``scipy.integrate.solve_ivp`` at matched accuracy. Target ≥ 100×.
- ``ui``: the terminal UI headless on the 2 kHz pty board (scripts/bench_ui.py's
  ``measure``): redraws per second, time per redraw and CPU share.
- ``autotune``: relay autotune on the docs/METHODS.md §3 plants and both balance drives
  (scripts/bench_autotune.py helpers): rig seconds, cycles, point error.
- ``startup``: how long ``rigbench kill`` takes to start (a kill from a fresh terminal).

    python scripts/bench_all.py [--quick] [--json] [--only codec,link,...]
"""

from __future__ import annotations

import argparse
import json
import math
import multiprocessing as mp
import os
import random
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

from rigbench.wire import HostCodec  # noqa: E402
from rigbench.wire import messages as m  # noqa: E402
from rigbench.link.urls import register_url_handlers  # noqa: E402

register_url_handlers()  # sim:// for serial_for_url

USB_CDC_LINES_S = 20_000.0   # docs/METHODS.md §7: 0.4–1.0 MB/s ≈ 20 000 lines of 48 bytes
U32 = 1 << 32


def _q(values, p):
    return float(np.percentile(np.asarray(values, dtype=float), p)) if len(values) else math.nan


# --------------------------------------------------------------------------- codec


def bench_codec(seconds_of_telemetry: float = 10.0, chunks=(64, 512, 4096),
                repeats: int = 3) -> dict:
    """Decode the balance board's own output (2 kHz telemetry, status, events); frames per
    CPU second, best of ``repeats``."""
    from rigbench.link.ingest import Ingest
    from rigbench.rig.firmware.board import make_board
    board = make_board("balance", rate_hz=2000.0, seed=1)
    host = HostCodec()
    board.receive(host.encode(m.Heartbeat()) + host.command(m.Stream, 2000.0)[1])
    parts = []
    for _ in range(round(seconds_of_telemetry * 2000)):
        board.step()
        parts.append(board.output())
    blob = b"".join(parts)
    names = [s.name for s in board.rig.signals]
    frames = sum(isinstance(x, m.Telemetry) for x in HostCodec().receive(blob))
    out = {"frames": frames, "bytes": len(blob), "bytes_per_frame": len(blob) / frames}
    for size in chunks:
        pieces = [blob[i:i + size] for i in range(0, len(blob), size)]
        best = {"decode": math.inf, "ingest": math.inf}
        for _ in range(repeats):              # best of a few: other work only slows it down
            codec = HostCodec()
            t0 = time.process_time()
            for piece in pieces:
                codec.receive(piece)
            best["decode"] = min(best["decode"], time.process_time() - t0)
            ingest, codec = Ingest(ring_rows=1 << 17), HostCodec()
            ingest.set_layout(names, names)
            t0 = time.process_time()
            for piece in pieces:
                ingest.handle(codec.receive(piece), 0.0)
            best["ingest"] = min(best["ingest"], time.process_time() - t0)
        for key, cpu_s in best.items():
            out[f"{key}_{size}"] = frames / cpu_s
    return out


# --------------------------------------------------------------------------- pty board


def _serve_child(url: str, wake_s: float, q, stop) -> None:
    """Child process: a simulated board on a pty, its µs clock = the monotonic clock."""
    import rigbench.rig.pty as pty_mod
    from rigbench.rig.simlink import SimLink
    from rigbench.rig.url import parse_sim_url
    pty_mod.PERIOD_WAKE_S = wake_s          # wake every 0.5 ms: no batching of frames
    options = parse_sim_url(url)
    sim = SimLink(options)
    offs = []
    write = sim.write

    def tapped_write(data: bytes) -> None:
        before = sim.board.motor
        write(data)
        if b"\x18" in data and before != "tripped" and sim.board.motor == "tripped":
            offs.append(time.monotonic())  # the board acted: motor output off

    sim.write = tapped_write
    late, t0 = [], [0.0]
    drain = sim.drain

    def tapped_drain(max_bytes=None) -> bytes:
        data = drain(max_bytes)
        if b"@tm " in data:   # how late the board's output leaves, against its own clock
            late.append(time.monotonic() - (t0[0] + sim.board.time_s))
        return data

    sim.drain = tapped_drain

    def ready(path: str) -> None:
        now = time.monotonic()
        q.put(("ready", path, now, int(now * 1e6) % U32))
        sim.board.clock_start_us = int(now * 1e6) % U32   # serve_pty takes t0 just after
        t0[0] = now

    stats = pty_mod.serve_pty(options, on_ready=ready, stop=stop, link=sim)
    q.put(("done", {"steps": stats.steps, "late_steps": stats.late_steps,
                    "drops": stats.drops, "motor_off_times": offs,
                    "output_late_median_ms": 1e3 * _q(late, 50),
                    "output_late_p99_ms": 1e3 * _q(late, 99)}))


class PtyBoard:
    """A board process serving ``url`` on a pty (real time), as a context manager."""

    def __init__(self, url: str = "sim://balance?rate=2000", wake_s: float = 0.0005) -> None:
        ctx = mp.get_context("spawn")
        self.q, self.stop = ctx.Queue(), ctx.Event()
        self.proc = ctx.Process(target=_serve_child, args=(url, wake_s, self.q, self.stop),
                                daemon=True)
        self.stats: dict = {}

    def __enter__(self) -> "PtyBoard":
        self.proc.start()
        _, self.path, self.t_ready, self.clock_start_us = self.q.get(timeout=60)
        return self

    def sample_time(self, board_s: np.ndarray) -> np.ndarray:
        """Monotonic time of samples stamped ``board_s`` (unwrapped board seconds)."""
        return self.t_ready + (board_s * 1e6 - self.clock_start_us) * 1e-6

    def __exit__(self, *exc) -> None:
        self.stop.set()
        try:
            self.stats = self.q.get(timeout=20)[1]
        except Exception:  # noqa: BLE001 - a board that died reports nothing
            self.stats = {}
        self.proc.join(10)
        if self.proc.is_alive():
            self.proc.terminate()


def _tap_ring(link) -> list:
    """Record (monotonic time, board_time_s, frame) of every block the reader files."""
    ring, seen = link.channel.ingest.ring, []
    append = ring.append

    def tapped(rows):
        append(rows)
        seen.append((time.monotonic(), rows[:, 1].copy(), rows[:, 2].copy()))

    ring.append = tapped
    return seen


def bench_link_and_kill(seconds: float = 10.0, kills: int = 100) -> dict:
    """{'link': figures, 'kill': figures} from one 2 kHz board process."""
    from rigbench.link import Link
    with PtyBoard() as board:
        with Link.open(board.path) as link:
            seen = _tap_ring(link)
            rate = link.stream(2000.0)
            time.sleep(1.0)                              # settle: ClockMap, buffers
            seen.clear()
            health0 = link.health()
            w0, c0 = time.monotonic(), time.process_time()
            time.sleep(seconds)
            w1, c1 = time.monotonic(), time.process_time()
            health1 = link.health()
            blocks = list(seen)
            arrive = np.concatenate([np.full(len(b), t) for t, b, _ in blocks])
            board_s = np.concatenate([b for _, b, _ in blocks])
            frames = np.concatenate([f for _, _, f in blocks])
            lat = arrive - board.sample_time(board_s)
            link_fig = {
                "rate_hz": rate, "seconds": w1 - w0, "rows": len(frames),
                "rows_per_s": len(frames) / (w1 - w0),
                "frames_lost": int(frames[-1] - frames[0] + 1 - len(frames)),
                "host_counted_lost": health1.lost_frames - health0.lost_frames,
                "board_drops": health1.board_drops - health0.board_drops,
                "latency_median_ms": 1e3 * _q(lat, 50), "latency_p99_ms": 1e3 * _q(lat, 99),
                "latency_max_ms": 1e3 * float(lat.max()),
                "host_cpu_share": (c1 - c0) / (w1 - w0),
            }
            calls, written = [], []
            for _ in range(kills):
                link.clear()
                link.arm()           # armed, not running: a fallen rig's wheel would keep
                time.sleep(random.uniform(0.02, 0.06))   # the interlock from re-arming
                t = time.monotonic()
                written.append(link.kill())
                calls.append(t)
                link.wait_until(lambda: link.motor_state == "tripped", 1.0)
        time.sleep(0.2)
    offs = board.stats.get("motor_off_times", [])
    write_ms = 1e3 * (np.array(written) - np.array(calls))
    kill_fig = {"kills": kills, "write_median_ms": _q(write_ms, 50),
                "write_p99_ms": _q(write_ms, 99), "write_max_ms": float(write_ms.max())}
    if len(offs) == kills:
        off_ms = 1e3 * (np.array(offs) - np.array(calls))
        kill_fig.update(motor_off_median_ms=_q(off_ms, 50), motor_off_p99_ms=_q(off_ms, 99),
                        motor_off_max_ms=float(off_ms.max()))
    else:
        kill_fig["motor_off_note"] = f"{len(offs)} trips seen for {kills} kills: not paired"
    link_fig["board_late_steps"] = board.stats.get("late_steps")
    for key in ("output_late_median_ms", "output_late_p99_ms"):
        link_fig["board_" + key] = board.stats.get(key)
    return {"link": link_fig, "kill": kill_fig}


# --------------------------------------------------------------------------- simulators


def _balance_closed_loop(step_fn, state0, n, dt, offset):
    """Run a tilt PI + rate loop (the one of bench_plants) on any integrator; tilt history."""
    y, integ, out = state0, 0.0, np.empty(n)
    for k in range(n):
        e = y[0] - offset
        integ += e * dt
        y = step_fn(400.0 * e + 40.0 * y[1] + 2000.0 * integ, y)
        out[k] = y[0]
    return out


def bench_solve_ivp(sim_s: float = 2.0, rate: float = 500.0) -> dict:
    """Our fixed-step RK4 balance rig against solve_ivp on the same equations (the rig's own
    ``_accel``), both closed by the same sampled controller; errors against DOP853 at
    rtol 1e-12; solve_ivp (RK45) timed at the loosest tolerance that is as accurate."""
    from scipy.integrate import solve_ivp

    from rigbench.rig.plants.catalog import make_balance
    rig = make_balance("speed", np.random.default_rng(0), 0.0, rate)
    dt, n, off = 1.0 / rate, round(sim_s * rate), rig.params.balance_offset_rad
    lo, hi = rig.input_limits
    y0 = (off + 0.05, 0.0, 0.0, 0.0)

    def ours_step(u, y):
        rig.step(u)
        t = rig.truth()
        return (t["tilt_rad"], t["rate_rad_s"], t["wheel_angle_rad"], t["wheel_rad_s"])

    def ivp_step(method, rtol):
        def step(u, y):
            u = min(max(u, lo), hi)

            def f(_t, s):
                thdd, phdd, _ = rig._accel(u, s[0], s[1], s[3], 0.0, False)
                return (s[1], thdd, s[3], phdd)
            return tuple(solve_ivp(f, (0.0, dt), y, method=method, rtol=rtol,
                                   atol=rtol * 1e-3).y[:, -1])
        return step

    rig.set_state(tilt_rad=y0[0], rate_rad_s=0.0, wheel_rad_s=0.0)
    t0 = time.perf_counter()
    ours = _balance_closed_loop(ours_step, y0, n, dt, off)
    ours_wall = time.perf_counter() - t0
    ref = _balance_closed_loop(ivp_step("DOP853", 1e-12), y0, n, dt, off)
    ours_err = float(np.max(np.abs(ours - ref)))
    out = {"sim_s": sim_s, "ours_sim_per_wall": sim_s / ours_wall, "ours_tilt_err_rad": ours_err}
    for rtol in (1e-1, 1e-2, 1e-3, 1e-4, 1e-5, 1e-6, 1e-7, 1e-8, 1e-9, 1e-10):
        t0 = time.perf_counter()
        got = _balance_closed_loop(ivp_step("RK45", rtol), y0, n, dt, off)
        wall = time.perf_counter() - t0
        err = float(np.max(np.abs(got - ref)))
        if err <= ours_err:
            out.update(ivp_rtol=rtol, ivp_tilt_err_rad=err, ivp_sim_per_wall=sim_s / wall,
                       ratio=wall / ours_wall)
            break
    return out


def _plant_ratio(make, sim_s: float) -> float:
    import bench_plants
    plant, cmd = make()
    return bench_plants.run(plant, sim_s, cmd)[0]


def bench_sim(quick: bool) -> dict:
    import bench_plants
    import bench_sim as bs
    sim_s, repeats = (5.0, 1) if quick else (10.0, 3)   # best of ``repeats``
    out = {"plants": {}, "boards": {}, "relay_via_port": {}}
    for name, make in bench_plants.plant_cases(500.0):
        out["plants"][name] = max(_plant_ratio(make, sim_s) for _ in range(repeats))
    boards = [("balance, speed drive", "balance", {}),
              ("balance, torque drive", "balance", {"drive": "torque"}),
              ("wheel", "wheel", {}),
              ("e^{-0.37s}/(s+1)^3", "plant", {"num": (1.0,), "den": (1.0, 3.0, 3.0, 1.0),
                                                "delay_s": 0.37})]
    for name, rig, kw in boards:
        out["boards"][name] = max(bs.bare_board(sim_s, rig, **kw) for _ in range(repeats))
    for rate in (500.0, 100.0):
        out["relay_via_port"][f"telemetry {rate:g} Hz"] = max(
            bs.relay_run(rate, 3 * sim_s)["ratio"] for _ in range(repeats))
    out["solve_ivp"] = bench_solve_ivp(1.0 if quick else 2.0)
    return out


# --------------------------------------------------------------------------- UI


def ui_figures(seconds: float = 10.0) -> dict:
    """scripts/bench_ui.py's measurement, on the 2 kHz board in its own process."""
    import asyncio

    import bench_ui
    with PtyBoard() as board:
        return asyncio.run(bench_ui.measure(board.path, 2000.0, seconds))


# --------------------------------------------------------------------------- autotune


def bench_autotune(seeds: int = 1) -> dict:
    import bench_autotune as ba

    from rigbench.experiments.relay import run_relay
    from rigbench.link import Link
    cases = [(name, (f"sim://plant?num={ba._url_coeffs(num)}&den={ba._url_coeffs(den)}"
                     f"&delay={delay:g}"), "main", (num, den, delay, ku, tu))
             for name, (num, den, delay, ku, tu) in ba.PLANTS.items()]
    cases += [(f"balance {d}", f"sim://balance?drive={d}", "tilt", d) for d in ("speed", "torque")]
    out = {}
    for name, url, loop, truth in cases:
        for seed in range(seeds):
            with Link.open(f"{url}&seed={seed}&clock=virtual") as link:
                t0 = time.perf_counter()
                run = run_relay(link, loop)
                wall = time.perf_counter() - t0
                board = link.port.board
            row = {"converged": run.converged, "rig_s": run.rig_seconds, "wall_s": wall}
            if run.converged:
                w = run.point.omega_rad_s
                if isinstance(truth, tuple):
                    num, den, delay, ku, tu = truth
                    g = np.polyval(num, 1j * w) / np.polyval(den, 1j * w) * np.exp(-1j * w * delay)
                    row.update(ku_err=run.ku / ku - 1, tu_err=run.tu_s / tu - 1)
                else:
                    g = ba._balance_truth(board, truth, w)
                gain_err, phase_err = ba._errors(run.point, g)
                row.update(relay_s=run.relay_seconds, cycles=run.analysis.cycles,
                           gain_err=gain_err, phase_err_deg=phase_err)
            out[f"{name} seed {seed}"] = row
    return out


# --------------------------------------------------------------------------- start-up


def bench_startup(repeats: int = 3) -> dict:
    """Wall and CPU time for ``rigbench kill --help`` (all a kill from a fresh terminal
    waits for before it opens the port) and for importing the link layer alone."""
    import resource
    import subprocess
    out = {}
    env = {**os.environ, "PYTHONPATH": str(HERE.parent)}
    for key, cmd in (("cli", [sys.executable, "-m", "rigbench.cli", "kill", "--help"]),
                     ("link_import", [sys.executable, "-c", "import rigbench.link"])):
        walls, cpus = [], []
        for _ in range(repeats):
            r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
            t0 = time.perf_counter()
            subprocess.run(cmd, env=env, stdout=subprocess.DEVNULL, check=True)
            walls.append(time.perf_counter() - t0)
            r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
            cpus.append(r1.ru_utime + r1.ru_stime - r0.ru_utime - r0.ru_stime)
        out[f"{key}_wall_s"], out[f"{key}_cpu_s"] = min(walls), min(cpus)
    return out


# --------------------------------------------------------------------------- report

SECTIONS = {
    "codec": lambda q: bench_codec(5.0, repeats=1) if q else bench_codec(),
    "link": None,    # link and kill share one board process
    "kill": None,
    "sim": bench_sim,
    "ui": lambda q: ui_figures(4.0 if q else 10.0),
    "autotune": lambda q: bench_autotune(1),
    "startup": lambda q: bench_startup(2 if q else 5),
}


def figures(res: dict) -> list[tuple]:
    """(section, figure, value, unit, target text, ratio to target or None, pass or None)."""
    rows = []

    def add(sec, name, value, unit, target=None, ratio=None, ok=None):
        rows.append((sec, name, value, unit, target, ratio, ok))

    if "codec" in res:
        c = res["codec"]
        for key in sorted(k for k in c if k.startswith(("decode_", "ingest_"))):
            what, size = key.split("_")
            r = c[key] / USB_CDC_LINES_S
            add("codec", f"{'HostCodec' if what == 'decode' else 'codec + ring'}, "
                f"{size} B reads", c[key], "frames/s", "≥ 10× 20 000 lines/s", r,
                r >= 10 if what == "decode" else None)
    if "link" in res:
        lk = res["link"]
        add("link", "frames lost at 2 kHz", lk["frames_lost"], "frames", "0", None,
            lk["frames_lost"] == 0)
        add("link", "rows received per s", lk["rows_per_s"], "rows/s")
        add("link", "latency median", lk["latency_median_ms"], "ms")
        add("link", "latency p99", lk["latency_p99_ms"], "ms")
        if lk.get("board_output_late_median_ms") is not None:
            add("link", "of which the board process was late, median / p99",
                f"{lk['board_output_late_median_ms']:.2f} / "
                f"{lk['board_output_late_p99_ms']:.2f}", "ms")
        add("link", "host CPU share", 100 * lk["host_cpu_share"], "% of one core")
    if "kill" in res:
        k = res["kill"]
        add("kill", "kill() to bytes written, median", k["write_median_ms"], "ms")
        add("kill", "kill() to bytes written, p99", k["write_p99_ms"], "ms", "< 10 ms",
            10.0 / k["write_p99_ms"] if k["write_p99_ms"] > 0 else None, k["write_p99_ms"] < 10)
        if "motor_off_p99_ms" in k:
            add("kill", "kill() to board motor off, median", k["motor_off_median_ms"], "ms")
            add("kill", "kill() to board motor off, p99", k["motor_off_p99_ms"], "ms")
    if "sim" in res:
        s = res["sim"]
        for group, label in (("plants", "plant"), ("boards", "board in hold"),
                             ("relay_via_port", "relay test via sim:// + codec")):
            for name, v in s[group].items():
                add("sim", f"{label}: {name}", v, "sim s / wall s", "≥ 100×", v / 100, v >= 100)
        iv = s["solve_ivp"]
        if "ratio" in iv:
            add("sim", f"balance vs solve_ivp RK45 rtol {iv['ivp_rtol']:g} (tilt error "
                f"{iv['ivp_tilt_err_rad']:.1e} vs ours {iv['ours_tilt_err_rad']:.1e} rad)",
                iv["ratio"], "× faster")
    if "ui" in res:
        u = res["ui"]
        add("ui", "redraws per s", u["redraws_per_s"], "/s")
        add("ui", "time per redraw, mean", u["redraw_ms_mean"], "ms")
        add("ui", f"CPU share at {u['telemetry_rows_per_s']:.0f} rows/s (process / UI thread)",
            f"{100 * u['cpu_share_process']:.0f} / {100 * u['cpu_share_ui_thread']:.0f}",
            "% of one core")
        add("ui", "frames lost (counter gaps, whole session)", u["lost_frames"], "frames")
        add("ui", "rows between redraws, mean / max",
            f"{u['backlog_rows_mean']:.0f} / {u['backlog_rows_max']}", "rows")
    if "startup" in res:
        st = res["startup"]
        add("startup", "`rigbench kill --help`: wall / CPU", f"{st['cli_wall_s']:.2f} / "
            f"{st['cli_cpu_s']:.2f}", "s")
        add("startup", "`import rigbench.link`: wall / CPU", f"{st['link_import_wall_s']:.2f} / "
            f"{st['link_import_cpu_s']:.2f}", "s")
    if "autotune" in res:
        for name, r in res["autotune"].items():
            if not r["converged"]:
                add("autotune", f"{name}: not converged", r["rig_s"], "rig s")
                continue
            add("autotune", f"{name}: rig s / relay s / cycles / wall s",
                f"{r['rig_s']:.1f} / {r['relay_s']:.1f} / {r['cycles']} / {r['wall_s']:.2f}", "")
            add("autotune", f"{name}: point gain / phase error",
                f"{100 * r['gain_err']:+.2f} % / {r['phase_err_deg']:+.2f}°", "")
            if "ku_err" in r:
                add("autotune", f"{name}: Ku / Tu (describing function) vs exact",
                    f"{100 * r['ku_err']:+.1f} % / {100 * r['tu_err']:+.1f} %", "")
    return rows


def _fmt(v) -> str:
    if isinstance(v, str):
        return v
    if isinstance(v, (int, np.integer)):
        return f"{int(v):,}"
    return f"{v:,.3g}" if abs(v) < 100 else f"{v:,.0f}"


def print_table(rows) -> None:
    print("| section | figure | value | unit | target | ratio | pass |")
    print("|---|---|---|---|---|---|---|")
    for sec, name, value, unit, target, ratio, ok in rows:
        print(f"| {sec} | {name} | {_fmt(value)} | {unit} | {target or ''} | "
              f"{'' if ratio is None else f'{ratio:.1f}×'} | "
              f"{'' if ok is None else ('yes' if ok else 'NO')} |")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="shorter runs (rougher figures)")
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    ap.add_argument("--only", default=",".join(SECTIONS),
                    help=f"comma-separated sections of: {', '.join(SECTIONS)}")
    args = ap.parse_args(argv)
    only = [s.strip() for s in args.only.split(",") if s.strip()]
    unknown = set(only) - set(SECTIONS)
    if unknown:
        ap.error(f"unknown sections: {', '.join(sorted(unknown))}")
    res: dict = {"machine": {"cpus": os.cpu_count(), "python": sys.version.split()[0],
                             "load_before": os.getloadavg()}}
    t0 = time.perf_counter()
    for name in only:
        if name in ("link", "kill"):
            if "link" in res or "kill" in res:
                continue
            q = args.quick
            res.update(bench_link_and_kill(4.0 if q else 10.0, 30 if q else 100))
        else:
            res[name] = SECTIONS[name](args.quick)
        if not args.json:
            print(f"  ({name} done, {time.perf_counter() - t0:.0f} s)", file=sys.stderr)
    res["machine"]["load_after"] = os.getloadavg()
    res["machine"]["wall_s"] = time.perf_counter() - t0
    rows = figures(res)
    if args.json:
        res["figures"] = [dict(zip(("section", "figure", "value", "unit", "target", "ratio",
                                    "pass"), r)) for r in rows]
        print(json.dumps(res, indent=1, default=float))
    else:
        mach = res["machine"]
        print(f"{mach['cpus']} CPUs, Python {mach['python']}, load average "
              f"{mach['load_before'][0]:.2f} before, {mach['load_after'][0]:.2f} after; "
              f"{mach['wall_s']:.0f} s")
        print_table(rows)
    return 0 if all(r[6] is not False for r in rows) else 1


if __name__ == "__main__":
    sys.exit(main())
