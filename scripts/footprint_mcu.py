"""Print the footprint of the C board library built for small microcontroller cores, with a
cross compiler for bare-metal ARM (``arm-none-eabi-gcc``, Debian packages gcc-arm-none-eabi
and libnewlib-arm-none-eabi). The host figures are in scripts/footprint_c.py; these are what
a board's flash and RAM will hold.

Not a test, and optional: without the cross compiler it says how to get one and exits 2.
For each core profile (-Os, unused sections dropped at link):

- the library alone: code, read-only data, RAM of its own (none), worst stack from
  rb_step / rb_poll / rb_rx_byte / rb_init through its own functions (gcc -fstack-usage and
  -fcallgraph-info=su, as in footprint_c.py);
- a whole firmware: protocol/board-c/examples/mcu_skeleton.c linked with the library and
  newlib-nano (the hardware functions the skeleton declares left unresolved: they are your
  drivers), with and without float printf support (``-u _printf_float``, which the library
  needs to write numbers): flash and RAM, and how much of the flash is the library, the
  skeleton, and the C library with the compiler's soft-float routines.

    python scripts/footprint_mcu.py [--json] [--cc arm-none-eabi-gcc]
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import tempfile
from dataclasses import asdict, dataclass
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
from footprint_c import (BOARD_C, ENTRIES, WARN, _run, code_size,  # noqa: E402
                         compile_library, read_call_graph, worst_stack)

SKELETON = BOARD_C / "examples" / "mcu_skeleton.c"
# core profiles: (name, what it is, compiler flags, rb_real)
PROFILES = (
    ("cortex-m0plus", "no FPU", ("-mcpu=cortex-m0plus", "-mthumb"), "float"),
    ("cortex-m4f", "single-precision FPU",
     ("-mcpu=cortex-m4", "-mthumb", "-mfpu=fpv4-sp-d16", "-mfloat-abi=hard"), "float"),
    ("cortex-m7d", "double-precision FPU",
     ("-mcpu=cortex-m7", "-mthumb", "-mfpu=fpv5-d16", "-mfloat-abi=hard"), "double"),
)
SECTIONS = ("-ffunction-sections", "-fdata-sections")


@dataclass
class Firmware:
    float_printf: bool
    flash: int            # text + data of the linked ELF (arm-none-eabi-size)
    ram: int              # data + bss
    library: int          # bytes of the library's functions and constants in the ELF
    skeleton: int
    c_library: int        # everything else: newlib-nano, soft-float, start-up


def _symbols(nm: str, path: Path) -> dict[str, int]:
    """{symbol: size} of defined symbols that take flash: code, constants, initialised
    data (zeroed RAM, bss, takes none)."""
    out = {}
    for line in _run([nm, "-S", "--defined-only", str(path)]).splitlines():
        parts = line.split()
        if len(parts) == 4 and parts[2].lower() in ("t", "r", "d"):
            out[parts[3]] = int(parts[1], 16)
    return out


def firmware(cc: str, tools: dict, out: Path, flags: tuple, lib_objs: list[Path],
             float_printf: bool) -> Firmware:
    skel_obj = out / "mcu_skeleton.o"
    _run([cc, *WARN, "-Os", *flags, *SECTIONS, "-I", str(BOARD_C / "include"), "-c",
          str(SKELETON), "-o", str(skel_obj)])
    elf = out / ("fw-printf-float.elf" if float_printf else "fw.elf")
    _run([cc, "-Os", *flags, "--specs=nano.specs", "--specs=nosys.specs", "-Wl,--gc-sections",
          "-Wl,--unresolved-symbols=ignore-in-object-files",
          *(["-u", "_printf_float"] if float_printf else []),
          "-o", str(elf), str(skel_obj), *map(str, lib_objs), "-lm"])
    text, data, bss = (int(x) for x in _run([tools["size"], str(elf)]).splitlines()[1].split()[:3])
    in_elf = _symbols(tools["nm"], elf)
    lib_names = set().union(*(_symbols(tools["nm"], o) for o in lib_objs))
    skel_names = set(_symbols(tools["nm"], skel_obj))
    lib = sum(v for k, v in in_elf.items() if k in lib_names)
    skel = sum(v for k, v in in_elf.items() if k in skel_names)
    return Firmware(float_printf, text + data, data + bss, lib, skel, text + data - lib - skel)


def measure(cc: str) -> dict:
    prefix = cc[:-3] if cc.endswith("gcc") else ""
    tools = {t: shutil.which(prefix + t) for t in ("size", "nm")}
    if not all(tools.values()):
        raise RuntimeError(f"{prefix}size and {prefix}nm are needed beside {cc}")
    res = {"cc": cc, "cc_version": _run([cc, "--version"]).splitlines()[0], "profiles": []}
    with tempfile.TemporaryDirectory() as tmp:
        for name, what, flags, real in PROFILES:
            out = Path(tmp) / name
            defines = (*flags, *SECTIONS, f"-DRB_REAL={real}")
            objs = compile_library(cc, out / "lib", "-Os", defines, stack_info=True)
            size = code_size(objs, name, "-Os", size_tool=tools["size"])
            frames, calls = read_call_graph(sorted((out / "lib").glob("*.ci")))
            stack = {e: worst_stack(frames, calls, e) for e in ENTRIES}
            fws = [firmware(cc, tools, out, (*flags, f"-DRB_REAL={real}"), objs, pf)
                   for pf in (False, True)]
            res["profiles"].append({
                "profile": name, "core": what, "rb_real": real,
                "library": {"code": size.code, "rodata": size.rodata,
                            "ram": size.data + size.bss},
                "stack": {e: {"bytes": s.bytes, "path": s.path, "libc": s.libc,
                              "bytes_at_libc": s.bytes_at_libc, "bounded": s.bounded}
                          for e, s in stack.items()},
                "firmware": [asdict(f) for f in fws]})
    return res


def print_report(res: dict) -> None:
    print(f"C board library on microcontroller cores: {res['cc_version']}, -Os\n")
    print("| core | rb_real | library code | library read-only | library RAM | "
          "stack rb_poll | stack rb_step | stack rb_rx_byte |")
    print("|---|---|---|---|---|---|---|---|")
    for p in res["profiles"]:
        lib, st = p["library"], p["stack"]
        print(f"| {p['profile']} ({p['core']}) | {p['rb_real']} | {lib['code']:,} | "
              f"{lib['rodata']:,} | {lib['ram']} | {st['rb_poll']['bytes']:,} | "
              f"{st['rb_step']['bytes']:,} | {st['rb_rx_byte']['bytes']} |")
    print("\nA whole firmware: examples/mcu_skeleton.c + the library + newlib-nano "
          "(RAM includes one rb_board with the default sizes)")
    print("| core | float printf | flash | RAM | of the flash: library | skeleton | "
          "C library, soft-float, start-up |")
    print("|---|---|---|---|---|---|---|")
    for p in res["profiles"]:
        for f in p["firmware"]:
            print(f"| {p['profile']} | {'yes' if f['float_printf'] else 'no'} | "
                  f"{f['flash']:,} | {f['ram']:,} | {f['library']:,} | {f['skeleton']:,} | "
                  f"{f['c_library']:,} |")
    print("\nThe library writes numbers with snprintf(\"%.*g\"): without float printf "
          "support every number goes out empty (PORTING.md). Stack: the library's own frames; "
          "add snprintf's and strtod's, and your port functions'.")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    ap.add_argument("--cc", default="arm-none-eabi-gcc", help="bare-metal ARM cross compiler")
    args = ap.parse_args(argv)
    if shutil.which(args.cc) is None:
        print(f"{args.cc} not found. On Debian or Ubuntu: apt-get install gcc-arm-none-eabi "
              "libnewlib-arm-none-eabi", file=sys.stderr)
        return 2
    res = measure(args.cc)
    print(json.dumps(res, indent=1) if args.json else "", end="")
    if not args.json:
        print_report(res)
    return 0


if __name__ == "__main__":
    sys.exit(main())
