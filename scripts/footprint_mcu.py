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

- an 8-bit AVR board of the ATmega328P class (32 KB flash, 2 KB RAM) when ``avr-gcc`` is
  installed (Debian packages gcc-avr, avr-libc): the same skeleton with the small
  configuration (RB_REAL=float RB_TX_SIZE=512 RB_RX_RING=64 RB_MAX_LOOPS=2 RB_NV_MAX=128
  RB_KEEP_LAST_BODY=0), constants in flash (RB_USE_FLASH, on by default there), -Os
  -mcall-prologues: flash (text + data) and static RAM (data + bss) against the part's.

Bytes are split between the library, the skeleton and the rest from the linker's map (every
input section kept in the image, constant strings included).

    python scripts/footprint_mcu.py [--json] [--cc arm-none-eabi-gcc] [--avr-cc avr-gcc]
"""

from __future__ import annotations

import argparse
import json
import re
import shutil
import sys
import tempfile
import subprocess
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


_MAP_LINE = re.compile(r"^ (\.\S+)?\s+0x[0-9a-f]+\s+0x([0-9a-f]+)\s+(\S+\.o)\b")


def map_split(map_path: Path) -> dict[str, int]:
    """{object file name: bytes it puts in flash} from a GNU ld map (sections named on the
    line before their address are carried over)."""
    out: dict[str, int] = {}
    pending = None
    in_discard = False
    for line in map_path.read_text().splitlines():
        if line.startswith("Discarded input sections"):
            in_discard = True
        elif line.startswith("Memory Configuration") or line.startswith("Linker script"):
            in_discard = False
        if in_discard:
            continue
        m = _MAP_LINE.match(line)
        name = m.group(1) if m and m.group(1) else pending
        if m is None:
            pm = re.match(r"^ (\.\S+)\s*$", line)
            pending = pm.group(1) if pm else None
            continue
        pending = None
        if name is None or name.startswith((".bss", ".noinit", ".debug", ".comment",
                                            ".ARM.attributes", ".stab", "COMMON")):
            continue
        obj = Path(m.group(3).split("(")[0]).name
        out[obj] = out.get(obj, 0) + int(m.group(2), 16)
    return out


def firmware(cc: str, tools: dict, out: Path, flags: tuple, lib_objs: list[Path],
             float_printf: bool) -> Firmware:
    skel_obj = out / "mcu_skeleton.o"
    _run([cc, *WARN, "-Os", *flags, *SECTIONS, "-I", str(BOARD_C / "include"), "-c",
          str(SKELETON), "-o", str(skel_obj)])
    elf = out / ("fw-printf-float.elf" if float_printf else "fw.elf")
    mapf = elf.with_suffix(".map")
    _run([cc, "-Os", *flags, "--specs=nano.specs", "--specs=nosys.specs", "-Wl,--gc-sections",
          "-Wl,--unresolved-symbols=ignore-in-object-files", f"-Wl,-Map={mapf}",
          *(["-u", "_printf_float"] if float_printf else []),
          "-o", str(elf), str(skel_obj), *map(str, lib_objs), "-lm"])
    text, data, bss = (int(x) for x in _run([tools["size"], str(elf)]).splitlines()[1].split()[:3])
    split = map_split(mapf)
    lib = sum(split.get(o.name, 0) for o in lib_objs)
    skel = split.get(skel_obj.name, 0)
    return Firmware(float_printf, text + data, data + bss, lib, skel, text + data - lib - skel)


AVR_MCU = "atmega328p"
AVR_FLASH, AVR_RAM = 32768, 2048
AVR_CONFIG = ("-DRB_REAL=float", "-DRB_TX_SIZE=512", "-DRB_RX_RING=64", "-DRB_MAX_LOOPS=2",
              "-DRB_NV_MAX=128", "-DRB_KEEP_LAST_BODY=0")


def measure_avr(cc: str) -> dict:
    """The skeleton firmware for an ATmega328P-class part (see the module docstring)."""
    size = shutil.which(cc[:-3] + "size") if cc.endswith("gcc") else None
    if size is None:
        raise RuntimeError(f"avr-size is needed beside {cc}")
    flags = (f"-mmcu={AVR_MCU}", "-Os", "-mcall-prologues", *SECTIONS, *AVR_CONFIG)
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp)
        objs = []
        for src in [*sorted((BOARD_C / "src").glob("*.c")), SKELETON]:
            obj = out / (src.stem + ".o")
            _run([cc, "-std=gnu99", "-Wall", "-Wextra", "-Werror", *flags,
                  "-I", str(BOARD_C / "src"), "-c", str(src), "-o", str(obj)])
            objs.append(obj)
        elf, mapf = out / "fw.elf", out / "fw.map"
        # --noinhibit-exec: an image too large for the part is still written, so its size
        # can be reported
        subprocess.run([cc, *flags, "-Wl,--gc-sections", f"-Wl,-Map={mapf}",
                        "-Wl,--unresolved-symbols=ignore-in-object-files",
                        "-Wl,--noinhibit-exec", "-o", str(elf), *map(str, objs), "-lm"],
                       capture_output=True, text=True)
        text, data, bss = (int(x) for x in _run([size, str(elf)]).splitlines()[1].split()[:3])
        split = map_split(mapf)
        lib = sum(v for k, v in split.items() if k.startswith("rb_"))
        skel = split.get("mcu_skeleton.o", 0)
        return {"cc_version": _run([cc, "--version"]).splitlines()[0], "mcu": AVR_MCU,
                "defines": [d.removeprefix("-D") for d in AVR_CONFIG],
                "flash": text + data, "flash_limit": AVR_FLASH, "ram": data + bss,
                "ram_limit": AVR_RAM, "library": lib, "skeleton": skel,
                "c_library": text + data - lib - skel}


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
    print("\nThe library writes and reads numbers itself (no printf or strtod), so the rows "
          "without float printf are the ones that count; those with it show what linking the "
          "C library's float printf would add. Stack: the library's own frames; add your port "
          "functions'.")


def print_avr(avr: dict) -> None:
    print(f"\n8-bit AVR ({avr['mcu']}, {avr['flash_limit'] // 1024} KB flash, "
          f"{avr['ram_limit'] // 1024} KB RAM): {avr['cc_version']}, -Os -mcall-prologues, "
          f"{' '.join(avr['defines'])}, constants in flash")
    print("| firmware | flash | of the part | static RAM | of the part | of the flash: library |"
          " skeleton | C library, soft-float, start-up |")
    print("|---|---|---|---|---|---|---|---|")
    print(f"| examples/mcu_skeleton.c + library + avr-libc | {avr['flash']:,} | "
          f"{100 * avr['flash'] / avr['flash_limit']:.0f} % | {avr['ram']:,} | "
          f"{100 * avr['ram'] / avr['ram_limit']:.0f} % | {avr['library']:,} | "
          f"{avr['skeleton']:,} | {avr['c_library']:,} |")
    if avr["flash"] > avr["flash_limit"]:
        print(f"Does NOT fit: {avr['flash'] - avr['flash_limit']:,} bytes of flash too many.")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    ap.add_argument("--cc", default="arm-none-eabi-gcc", help="bare-metal ARM cross compiler")
    ap.add_argument("--avr-cc", default="avr-gcc", help="AVR cross compiler")
    args = ap.parse_args(argv)
    res: dict = {}
    if shutil.which(args.cc) is None:
        print(f"{args.cc} not found: no ARM figures. On Debian or Ubuntu: apt-get install "
              "gcc-arm-none-eabi libnewlib-arm-none-eabi", file=sys.stderr)
    else:
        res["arm"] = measure(args.cc)
    if shutil.which(args.avr_cc) is None:
        print(f"{args.avr_cc} not found: no AVR figures. On Debian or Ubuntu: apt-get install "
              "gcc-avr avr-libc", file=sys.stderr)
    else:
        res["avr"] = measure_avr(args.avr_cc)
    if not res:
        return 2
    if args.json:
        print(json.dumps(res, indent=1))
        return 0
    if "arm" in res:
        print_report(res["arm"])
    if "avr" in res:
        print_avr(res["avr"])
    return 0


if __name__ == "__main__":
    sys.exit(main())
