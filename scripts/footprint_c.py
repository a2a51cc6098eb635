"""Print the footprint of the C board library (protocol/board-c): figures a maker can hold
against a small board's flash, RAM and CPU before porting it.

Not a test: the figures are the host's (this machine's C compiler and processor); a small
board's compiler gives other code sizes and its core is many times slower. Sections:

- code size: ``size`` of the library's objects compiled with -Os and -O2, with ``rb_real``
  double and float (text includes read-only data such as the command and error words; the C
  library's own code — snprintf, strtod, the maths — is not in it);
- static RAM: ``sizeof(rb_board)`` for the default build-time sizes and for a small
  configuration, and the library's own .data/.bss (none: it has no globals);
- stack: the worst path through the library's own functions from rb_step, rb_poll,
  rb_rx_byte and rb_init, from gcc's -fstack-usage and -fcallgraph-info=su; calls into the C
  library and into your port (through a function pointer) are listed with the library stack
  in use where they are made: add the C library's and your port's own stack to those;
- CPU time per call on a balance-like rig (protocol/board-c/test/footprint_main.c, a fake
  port): one loop period (rb_step + rb_poll) with telemetry off and at the full loop rate,
  rb_poll with nothing to do, and one `set` command; median and fastest of several runs, and
  instructions per call from valgrind's callgrind when valgrind is installed (those repeat
  exactly from run to run);
- the same per-call work with the former number text (snprintf "%.*g" / strtod, built with
  -DRB_NUM_LIBC=1, everything else alike) beside the library's own, and the ratio.

    python scripts/footprint_c.py [--json] [--quick] [--cc CC]
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import re
import shutil
import subprocess
import sys
import tempfile
from concurrent.futures import ThreadPoolExecutor
from dataclasses import asdict, dataclass, field
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
BOARD_C = ROOT / "protocol" / "board-c"
MAIN_C = BOARD_C / "test" / "footprint_main.c"
WARN = ("-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Wshadow", "-Werror",
        "-ffp-contract=off")
CONFIGS = {   # build-time sizes (rb_board.h): defaults, float maths, a small board
    "default": (),
    "float": ("-DRB_REAL=float",),
    "small": ("-DRB_TX_SIZE=512", "-DRB_RX_RING=64", "-DRB_MAX_LOOPS=2", "-DRB_REAL=float"),
}
ENTRIES = ("rb_step", "rb_poll", "rb_rx_byte", "rb_init")
OLD_NUMBERS = ("-DRB_NUM_LIBC=1",)   # the former snprintf/strtod number text, for comparison
CASES = ("period_quiet", "period_stream", "poll_idle", "command_set")
CASE_TEXT = {
    "period_quiet": "loop period (rb_step + rb_poll), hold, telemetry off",
    "period_stream": "loop period (rb_step + rb_poll), hold, telemetry every period",
    "poll_idle": "rb_poll, nothing received",
    "command_set": "`set` of 3 gains: rb_rx_byte per byte + rb_poll",
}


@dataclass
class CodeSize:
    """Bytes of the library's objects by section (``size -A``), built without position-
    independent code as a board build is; unwind tables and notes are left out."""

    config: str
    opt: str
    code: int             # .text*
    rodata: int           # .rodata*: words, tables, constants (flash on a board)
    data: int             # .data*: initialised RAM (also copied from flash)
    bss: int              # .bss*, COMMON: zeroed RAM
    per_object: dict = field(default_factory=dict)   # file name -> code bytes

    @property
    def flash(self) -> int:
        return self.code + self.rodata + self.data


@dataclass
class BoardRam:
    config: str
    defines: tuple
    board_bytes: int      # sizeof(rb_board)
    real_bytes: int       # sizeof(rb_real)


@dataclass
class StackPath:
    """Worst stack of one entry point through the library's own functions."""

    entry: str
    bytes: int                    # library frames only, deepest path
    path: list                    # function names along that path
    libc: list                    # C library functions called somewhere below
    bytes_at_libc: int            # library stack in use where a C library call is made
    bytes_at_port: int            # ... where a port function (function pointer) is called
    bounded: bool                 # False: recursion or a dynamic frame was found


@dataclass
class CaseTime:
    case: str
    config: str
    median_ns: float
    fastest_ns: float
    calls: int
    instructions: float | None = None   # per call, from callgrind


# --------------------------------------------------------------------------- building


def find_cc(preferred: str | None = None) -> str | None:
    """The C compiler: ``preferred``, $CC, cc, gcc or clang, whichever is found first."""
    for name in (preferred, os.environ.get("CC"), "cc", "gcc", "clang"):
        if name and shutil.which(name):
            return shutil.which(name)
    return None


def supports_call_graph(cc: str) -> bool:
    """Whether ``cc`` writes call graphs with stack sizes (-fcallgraph-info=su, gcc >= 10)."""
    with tempfile.TemporaryDirectory() as tmp:
        src = Path(tmp) / "probe.c"
        src.write_text("int probe(void);\nint probe(void) { return 0; }\n")
        r = subprocess.run([cc, "-fstack-usage", "-fcallgraph-info=su", "-c", str(src)],
                           cwd=tmp, capture_output=True)
        return r.returncode == 0 and (Path(tmp) / "probe.ci").exists()


def lib_sources() -> list[Path]:
    return sorted((BOARD_C / "src").glob("*.c"))


def _run(cmd, cwd=None) -> str:
    r = subprocess.run(cmd, cwd=cwd, capture_output=True, text=True)
    if r.returncode != 0:
        raise RuntimeError(f"{' '.join(map(str, cmd))} failed:\n{r.stderr}{r.stdout}")
    return r.stdout


def compile_library(cc: str, out_dir: Path, opt: str = "-Os", defines=(),
                    stack_info: bool = False, pic: bool = True) -> list[Path]:
    """Compile every src/*.c into ``out_dir`` (one object each); return the objects.
    ``pic=False``: no position-independent code, as on a board (objects then do not link
    into this host's default executables)."""
    out_dir.mkdir(parents=True, exist_ok=True)
    extra = ("-fstack-usage", "-fcallgraph-info=su") if stack_info else ()
    extra += () if pic else ("-fno-pic",)
    srcs = lib_sources()
    if not srcs:
        raise RuntimeError(f"no library sources in {BOARD_C / 'src'}")
    _run([cc, *WARN, opt, *defines, *extra, "-I", str(BOARD_C / "include"),
          "-I", str(BOARD_C / "src"), "-c", *map(str, srcs)], cwd=out_dir)
    return [out_dir / (s.stem + ".o") for s in srcs]


def code_size(objects: list[Path], config: str = "", opt: str = "", size_tool: str = "size"
              ) -> CodeSize:
    tool = shutil.which(size_tool)
    if tool is None:
        raise RuntimeError(f"`{size_tool}` (binutils) not found")
    total = CodeSize(config, opt, 0, 0, 0, 0)
    for obj in objects:
        code = 0
        for line in _run([tool, "-A", str(obj)]).splitlines():
            parts = line.split()
            if len(parts) != 3 or not parts[1].isdigit():
                continue
            name, nbytes = parts[0], int(parts[1])
            if name.startswith(".text"):
                code += nbytes
            elif name.startswith((".rodata", ".data.rel.ro")):
                total.rodata += nbytes
            elif name.startswith(".data"):
                total.data += nbytes
            elif name.startswith((".bss", "COMMON")):
                total.bss += nbytes
        total.code += code
        total.per_object[obj.name] = code
    return total


def build_main(cc: str, out_dir: Path, opt: str = "-Os", defines=()) -> Path:
    """footprint_main linked with the library built alike; the executable's path."""
    objects = compile_library(cc, out_dir / "lib", opt, defines)
    exe = out_dir / "footprint_main"
    _run([cc, *WARN, opt, *defines, "-I", str(BOARD_C / "include"), "-o", str(exe),
          str(MAIN_C), *map(str, objects), "-lm"])
    return exe


def board_ram(cc: str, out_dir: Path, config: str = "default") -> BoardRam:
    exe = build_main(cc, out_dir, "-Os", CONFIGS[config])
    vals = dict(line.split() for line in _run([str(exe), "size"]).splitlines())
    return BoardRam(config, CONFIGS[config], int(vals["board_bytes"]), int(vals["real_bytes"]))


# --------------------------------------------------------------------------- stack

_NODE = re.compile(r'node: \{ title: "([^"]+)" label: "[^"]*?\\n[^"]*?'
                   r'(?:\\n(\d+) bytes \(([^)]*)\))?"')
_EDGE = re.compile(r'edge: \{ sourcename: "([^"]+)" targetname: "([^"]+)"')


def read_call_graph(ci_files: list[Path]):
    """({(file, fn): (bytes, qualifier)}, {(file, fn): [callee names]}) from gcc's .ci
    files; a function defined in a file is keyed by that file (static names may repeat)."""
    frames, calls = {}, {}
    for ci in ci_files:
        text = ci.read_text()
        for name, nbytes, qual in _NODE.findall(text):
            if nbytes:
                frames[(ci.stem, name)] = (int(nbytes), qual)
        for src, dst in _EDGE.findall(text):
            calls.setdefault((ci.stem, src), []).append(dst)
    return frames, calls


def worst_stack(frames: dict, calls: dict, entry: str) -> StackPath:
    """Deepest path from ``entry`` through the library; calls it cannot resolve to a library
    function are the C library's, ``__indirect_call`` is the port's."""
    by_name: dict[str, list] = {}
    for key in frames:
        by_name.setdefault(key[1], []).append(key)

    def resolve(file: str, name: str):
        if (file, name) in frames:             # a static or local function of the same file
            return (file, name)
        found = by_name.get(name, [])
        return max(found, key=lambda k: frames[k][0]) if found else None

    memo: dict = {}
    bounded = [True]

    def visit(node, stack):
        if node in memo:
            return memo[node]
        if node in stack:                      # recursion: depth not bounded by the graph
            bounded[0] = False
            return (0, [], set(), -1, -1)
        own, qual = frames[node]
        if qual not in ("static", "dynamic,bounded"):   # gcc: the frame has no upper bound
            bounded[0] = False
        best, best_path, libc, at_libc, at_port = 0, [], set(), -1, -1
        for callee in calls.get(node, []):
            if callee == "__indirect_call":
                at_port = max(at_port, own)
                continue
            target = resolve(node[0], callee)
            if target is None:
                libc.add(callee)
                at_libc = max(at_libc, own)
                continue
            d, p, lc, al, ap = visit(target, stack | {node})
            if d > best:
                best, best_path = d, p
            libc |= lc
            if al >= 0:
                at_libc = max(at_libc, own + al)
            if ap >= 0:
                at_port = max(at_port, own + ap)
        memo[node] = (own + best, [node[1]] + best_path, libc, at_libc, at_port)
        return memo[node]

    start = resolve("", entry)
    if start is None:
        raise RuntimeError(f"{entry} not found in the call graph")
    depth, path, libc, at_libc, at_port = visit(start, frozenset())
    return StackPath(entry, depth, path, sorted(libc), max(at_libc, 0), max(at_port, 0),
                     bounded[0])


def stack_usage(cc: str, out_dir: Path, opt: str = "-Os", config: str = "default"
                ) -> dict[str, StackPath]:
    compile_library(cc, out_dir, opt, CONFIGS[config], stack_info=True)
    frames, calls = read_call_graph(sorted(out_dir.glob("*.ci")))
    return {e: worst_stack(frames, calls, e) for e in ENTRIES}


# --------------------------------------------------------------------------- CPU


def cpu_time(exe: Path, config: str = "default", runs: int = 7, calls: int = 20000
             ) -> dict[str, CaseTime]:
    out = {}
    for line in _run([str(exe), "time", str(runs), str(calls)]).splitlines():
        _, case, median, fastest, n = line.split()
        out[case] = CaseTime(case, config, float(median), float(fastest), int(n))
    return out


def instructions(exe: Path, case: str, calls=(100, 600)) -> float | None:
    """Instructions per call under callgrind, counted inside the library's entry points
    only; the difference of two run lengths cancels the set-up."""
    tool = shutil.which("valgrind")
    if tool is None:
        return None
    counts = []
    with tempfile.TemporaryDirectory() as tmp:
        for n in calls:
            outf = Path(tmp) / f"cg.{n}"
            _run([tool, "--tool=callgrind", f"--callgrind-out-file={outf}",
                  "--toggle-collect=rb_step", "--toggle-collect=rb_poll",
                  "--toggle-collect=rb_rx_byte", str(exe), "count", case, str(n)])
            m = re.search(r"^totals:\s*(\d+)", outf.read_text(), re.M)
            if m is None:
                return None
            counts.append(int(m.group(1)))
    return (counts[1] - counts[0]) / (calls[1] - calls[0])


# --------------------------------------------------------------------------- all of it


def measure(cc: str, quick: bool = False) -> dict:
    runs, calls = (3, 5000) if quick else (9, 20000)
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)

        def sized(config, opt):
            objs = compile_library(cc, tmp / f"size-{config}{opt}", opt, CONFIGS[config],
                                   pic=False)
            return code_size(objs, config, opt)

        jobs = [("default", "-Os"), ("default", "-O2"), ("float", "-Os"), ("float", "-O2")]
        with ThreadPoolExecutor(max_workers=os.cpu_count() or 2) as pool:
            sizes = list(pool.map(lambda j: sized(*j), jobs))
            rams = list(pool.map(lambda c: board_ram(cc, tmp / f"ram-{c}", c),
                                 ("default", "small")))
            exes = dict(zip(("default", "small"), pool.map(
                lambda c: build_main(cc, tmp / f"cpu-{c}", "-Os", CONFIGS[c]),
                ("default", "small"))))
            old_exe = build_main(cc, tmp / "cpu-libc", "-Os", OLD_NUMBERS)
        stacks, stack_note = {}, f"{cc} has no -fcallgraph-info=su (gcc 10 or newer has)"
        if supports_call_graph(cc):
            stacks = {opt: stack_usage(cc, tmp / f"stack{opt}", opt) for opt in ("-Os", "-O2")}
            stack_note = ""
        times = {}
        for config, exe in exes.items():
            got = cpu_time(exe, config, runs, calls)
            for case in CASES:
                got[case].instructions = instructions(exe, case)
            times[config] = got
        old = {}
        for case in ("period_stream", "command_set"):
            old[case] = {"own": times["default"][case].instructions,
                         "libc": instructions(old_exe, case)}
    return {
        "machine": {"cc": cc, "cc_version": _run([cc, "--version"]).splitlines()[0],
                    "processor": platform.machine(), "system": platform.system()},
        "code_size": [{**asdict(s), "flash": s.flash} for s in sizes],
        "board_ram": [asdict(r) for r in rams],
        "stack": {opt: {e: asdict(s) for e, s in st.items()} for opt, st in stacks.items()},
        "stack_note": stack_note,
        "cpu": {c: {k: asdict(v) for k, v in t.items()} for c, t in times.items()},
        "cpu_runs": runs, "cpu_calls": calls,
        "numbers_vs_libc": old,
    }


def print_report(res: dict) -> None:
    mach = res["machine"]
    print(f"C board library footprint, host figures: {mach['cc_version']} on "
          f"{mach['processor']} {mach['system']}\n")
    print("Code size, bytes (the library's objects; it calls only memcpy, memmove, memset, "
          "memcmp and strlen of the C library)")
    print("| rb_real | opt | code | read-only data | data | bss | flash |")
    print("|---|---|---|---|---|---|---|")
    for s in res["code_size"]:
        real = "float" if s["config"] == "float" else "double"
        print(f"| {real} | {s['opt']} | {s['code']:,} | {s['rodata']:,} | {s['data']:,} | "
              f"{s['bss']:,} | {s['flash']:,} |")
    lib = next(s for s in res["code_size"] if s["config"] == "default" and s["opt"] == "-Os")
    print("\nStatic RAM, bytes (one rb_board, declared static by your firmware)")
    print("| configuration | sizeof(rb_board) | library .data + .bss |")
    print("|---|---|---|")
    for r in res["board_ram"]:
        flags = " ".join(d.removeprefix("-D") for d in r["defines"]) or "defaults"
        print(f"| {r['config']}: {flags} | {r['board_bytes']:,} | {lib['data'] + lib['bss']} |")
    print("\nStack, bytes: worst path through the library's own functions")
    if not res["stack"]:
        print(f"(not measured: {res['stack_note']})")
    for opt, st in res["stack"].items():
        print(f"\n{opt}:")
        print("| entry | library | deepest path | where it calls the C library | "
              "where it calls your port |")
        print("|---|---|---|---|---|")
        for e, s in st.items():
            libc = f"{s['bytes_at_libc']} + libc's own ({', '.join(s['libc'])})" \
                if s["libc"] else "none"
            port = f"{s['bytes_at_port']} + your function's own" if s["bytes_at_port"] else "none"
            flag = "" if s["bounded"] else " (NOT bounded: recursion or dynamic frame)"
            print(f"| {e} | {s['bytes']}{flag} | {' > '.join(s['path'])} | {libc} | {port} |")
    print(f"\nCPU per call on this machine, ns (median / fastest of {res['cpu_runs']} runs "
          f"of {res['cpu_calls']:,} calls; -Os; instructions from callgrind)")
    print("| configuration | case | median ns | fastest ns | instructions/call |")
    print("|---|---|---|---|---|")
    for config, cases in res["cpu"].items():
        for case, t in cases.items():
            ins = "-" if t["instructions"] is None else f"{t['instructions']:,.0f}"
            print(f"| {config} | {CASE_TEXT.get(case, case)} | {t['median_ns']:,.0f} | "
                  f"{t['fastest_ns']:,.0f} | {ins} |")
    print("\nOwn number text against the C library's (snprintf \"%.*g\" / strtod, built with "
          "-DRB_NUM_LIBC=1, all else alike), default configuration, instructions per call")
    print("| case | own numbers | snprintf/strtod | ratio |")
    print("|---|---|---|---|")
    for case, v in res["numbers_vs_libc"].items():
        if v["own"] is None or v["libc"] is None:
            print(f"| {CASE_TEXT[case]} | - | - | (valgrind not installed) |")
            continue
        print(f"| {CASE_TEXT[case]} | {v['own']:,.0f} | {v['libc']:,.0f} | "
              f"{v['libc'] / v['own']:.1f}x fewer |")
    print("\nHost figures. A small board's core runs these instructions many times slower: "
          "divide the instruction count by its clock (and more for double maths without a "
          "double FPU, and for float formatting in software) to judge the loop budget.")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    ap.add_argument("--quick", action="store_true", help="fewer and shorter timing runs")
    ap.add_argument("--cc", default=None, help="C compiler (default: $CC, cc, gcc, clang)")
    args = ap.parse_args(argv)
    cc = find_cc(args.cc)
    if cc is None:
        print("no C compiler found (cc, gcc, clang); install one or pass --cc", file=sys.stderr)
        return 2
    res = measure(cc, args.quick)
    if args.json:
        print(json.dumps(res, indent=1))
    else:
        print_report(res)
    return 0


if __name__ == "__main__":
    sys.exit(main())
