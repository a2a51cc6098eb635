"""The README's quick start and the CI script agree; documented examples stay true."""

import re
from pathlib import Path

ROOT = Path(__file__).parents[1]


def _quickstart_lines():
    text = (ROOT / "README.md").read_text()
    block = re.search(r"## Quick start.*?```(?:sh|bash)?\n(.*?)```", text, re.S)
    assert block, "README has a Quick start code block"
    return [ln for ln in block.group(1).splitlines() if ln.strip()]


def test_quickstart_is_two_lines():
    assert len(_quickstart_lines()) == 2


def test_ci_runs_readme_line_two_exactly():
    line2 = _quickstart_lines()[1]
    ci = [ln for ln in (ROOT / ".ci" / "run").read_text().splitlines()
          if ln.strip() and not ln.startswith("#") and not ln.startswith(("set ", "cd "))]
    # before it only the build of the C board library (its tests need the builds too, and
    # build them themselves when run without .ci/run); after it, steps of their own (the C
    # board behind host-level tests, the lowest declared Textual), which only add checks
    assert line2 in ci
    first = ci.index(line2)
    assert all(ln.startswith("make -C protocol/board-c ") for ln in ci[:first]), ci
    assert all(ln.startswith((".venv/bin/", "RIGBENCH_TEST_BOARD=c .venv/bin/", "low=",
                              "tests/")) or ln.startswith(" ")
               for ln in ci[first + 1:]), ci


def test_protocol_spec_states_crc_parameters_and_check_value():
    spec = (ROOT / "protocol" / "PROTOCOL.md").read_text()
    for needle in ("CRC-16/IBM-3740", "0x1021", "0xFFFF", "0x29B1", "0x18", "not an emergency stop"):
        assert needle in spec


def _documented_commands():
    text = (ROOT / "README.md").read_text()
    for block in re.findall(r"```sh\n(.*?)```", text, re.S):
        for line in block.splitlines():
            line = line.split("  #")[0].strip()
            if line.startswith("rigbench "):
                yield line


def test_readme_examples_parse_with_the_real_command_line():
    # Docs drift from code: every `rigbench ...` example in the README must be accepted by
    # the argument parser (common practice, no source).
    import shlex

    from rigbench.cli import build_parser

    parser = build_parser()
    examples = list(_documented_commands())
    assert len(examples) >= 8
    for line in examples:
        args = parser.parse_args(shlex.split(line)[1:])
        assert getattr(args, "_run", None) is not None, line
