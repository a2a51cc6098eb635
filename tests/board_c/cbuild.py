"""Building the C board library for the tests: ``make`` in protocol/board-c, once per run.

``built()`` returns the paths of the shared library (for ctypes), the host simulation and
its sanitizer build, building them first (and compiling examples/mcu_skeleton.c). A build
failure (a warning is an error there) fails the tests that need it with make's output; a
machine without make or a C compiler skips them.
"""

from __future__ import annotations

import shutil
import subprocess
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

ROOT = Path(__file__).parents[2]
BOARD_C = ROOT / "protocol" / "board-c"


@dataclass(frozen=True)
class Built:
    shared_lib: Path          # built with UndefinedBehaviorSanitizer: UB aborts the run
    shared_lib_float: Path    # the same with -DRB_REAL=float
    sim: Path
    sim_sanitized: Path       # AddressSanitizer + UndefinedBehaviorSanitizer


@lru_cache(maxsize=1)
def built() -> Built:
    make = shutil.which("make")
    if make is None or shutil.which("cc") is None:
        # only on a machine without a compiler; CI builds with make before the tests run
        # (.ci/run), so there these tests always run
        import pytest

        pytest.skip("the C board library's tests need make and a C compiler (cc)")
    proc = subprocess.run([make, "-C", str(BOARD_C), "all", "san", "check-skeleton"],
                          capture_output=True, text=True, timeout=300)
    if proc.returncode != 0:
        raise RuntimeError(f"make -C {BOARD_C} failed:\n{proc.stdout}\n{proc.stderr}")
    return Built(BOARD_C / "build-san" / "librb.so", BOARD_C / "build-san" / "librb-float.so",
                 BOARD_C / "build" / "rb-sim",
                 BOARD_C / "build-san" / "rb-sim")
