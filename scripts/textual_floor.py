"""Print the lowest Textual version pyproject.toml allows (the ``>=`` bound of the
``textual`` dependency); .ci/run installs it to run the UI tests against it."""

import re
import sys
import tomllib
from pathlib import Path

ROOT = Path(__file__).parents[1]


def textual_floor(pyproject: Path = ROOT / "pyproject.toml") -> str:
    deps = tomllib.loads(pyproject.read_text())["project"]["dependencies"]
    for dep in deps:
        if re.match(r"textual\b", dep):
            m = re.search(r">=\s*([0-9][0-9.]*)", dep)
            if m:
                return m.group(1)
            sys.exit(f"{pyproject}: the textual dependency {dep!r} has no >= bound")
    sys.exit(f"{pyproject}: no textual dependency")


if __name__ == "__main__":
    print(textual_floor())
