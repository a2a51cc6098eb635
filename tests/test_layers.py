"""The layer contract (DEVELOPERS.md, Architecture), checked from the import graph.

``CONTRACT`` is the one table: every package of ``rigbench`` with the packages it may import,
bottom to top. A module may import its own package and what its package's row allows;
nothing else of rigbench. Outside libraries that a layer must not use are listed in
``NO_OUTSIDE``. The graph is read from the source (every ``import`` statement, inside
functions too), so a stray import fails here before it tangles the package; the tests at the
end inject the imports that once slipped through and check that they are caught.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

SRC = Path(__file__).parents[1] / "bench"
PKG = SRC / "rigbench"

# package -> packages of rigbench it may import (bottom to top; "" is the package root)
CONTRACT: dict[str, tuple[str, ...]] = {
    "base": (),
    "wire": ("base",),
    "tuning": ("base",),                                   # sibling of wire
    "link": ("base", "wire"),
    "rig": ("base", "wire"),                               # sibling of link
    "recordings": ("base", "wire", "link"),
    "handlers": ("base", "wire", "link", "rig", "recordings"),
    "experiments": ("base", "wire", "tuning", "link", "recordings"),
    "profiles": ("base", "wire", "link"),                  # sibling of experiments
    "sequences": ("base", "wire", "tuning", "link", "recordings", "experiments", "profiles"),
    "reports": ("base", "wire", "tuning", "recordings", "experiments", "sequences"),
    "ui": ("base", "wire", "tuning", "link", "recordings", "experiments", "profiles",
           "sequences", "reports"),
    "commands": ("base", "wire", "tuning", "link", "rig", "recordings", "experiments",
                 "profiles", "sequences", "reports", "ui"),
    "cli": ("base", "link", "commands"),
    "__main__": ("cli",),
    "api": ("base", "wire", "tuning", "link", "recordings", "experiments", "profiles"),
    "": ("base", "wire", "tuning", "link", "recordings", "experiments", "profiles"),
}

# single modules allowed across the table, with the reason
EXCEPTIONS: dict[tuple[str, str], str] = {
    ("sequences", "rigbench.rig.url"):
        "a sequence may name a sim:// port; its grammar lives with the simulated boards",
}

# package -> outside libraries it must not import (prefix match)
NO_OUTSIDE: dict[str, tuple[str, ...]] = {
    "base": ("serial", "textual", "threading", "control"),
    "wire": ("serial", "threading", "time", "logging", "socket", "numpy", "textual", "control"),
    "tuning": ("serial", "threading", "textual", "control"),
    "link": ("textual", "control"),
    "rig": ("textual", "control"),
    "recordings": ("textual", "control"),
    "handlers": ("textual", "control"),
    "experiments": ("textual", "control"),
    "profiles": ("textual", "control"),
    "sequences": ("textual", "control"),
    "reports": ("textual", "control"),
    "ui": ("control", "serial"),
    "commands": ("control", "textual"),
    "cli": ("control", "textual"),
    "__main__": (),
    "api": ("textual", "control"),
    "": ("textual", "control"),
}


def module_name(path: Path) -> str:
    parts = list(path.relative_to(SRC).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def package_of(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else ""


def imports_of(source: str, module: str, is_package: bool) -> list[str]:
    """Every module name an ``import`` in ``source`` names (relative ones resolved)."""
    out = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Import):
            out += [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = module.split(".")
                base = base[: len(base) - node.level + (1 if is_package else 0)]
                name = ".".join(base + ([node.module] if node.module else []))
            else:
                name = node.module or ""
            out.append(name)
            out += [f"{name}.{alias.name}" for alias in node.names]  # `from pkg import module`
    return out


def graph(sources: dict[str, tuple[str, bool]]) -> dict[str, set[str]]:
    """module -> the rigbench modules it imports (names that are modules of ``sources``)."""
    edges = {}
    for module, (source, is_package) in sources.items():
        edges[module] = {name for name in imports_of(source, module, is_package)
                         if name in sources and name != module}
    return edges


def violations(sources: dict[str, tuple[str, bool]]) -> list[str]:
    """Every import that breaks the contract, as readable lines."""
    bad = []
    for module, (source, is_package) in sorted(sources.items()):
        pkg = package_of(module)
        if pkg not in CONTRACT:
            bad.append(f"{module}: package {pkg!r} is not in the layer contract")
            continue
        for name in imports_of(source, module, is_package):
            root = name.split(".")[0]
            if root != "rigbench":
                if any(name == b or name.startswith(b + ".") for b in NO_OUTSIDE[pkg]):
                    bad.append(f"{module} imports {name} (not allowed in {pkg or 'rigbench'})")
                continue
            target = package_of(name)
            if name == "rigbench" and module != "rigbench":
                bad.append(f"{module} imports the package root rigbench")
            elif target != pkg and target not in CONTRACT[pkg] \
                    and not any(pkg == p and (name == m or name.startswith(m + "."))
                            for p, m in EXCEPTIONS):
                bad.append(f"{module} imports {name} ({pkg} may not import {target})")
    return bad


def cycles(edges: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan)."""
    index, low, stack, on, out = {}, {}, [], set(), []
    counter = [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in edges.get(v, ()):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in sorted(edges):
        if v not in index:
            visit(v)
    return out


def read_sources() -> dict[str, tuple[str, bool]]:
    return {module_name(p): (p.read_text(), p.name == "__init__.py")
            for p in sorted(PKG.rglob("*.py"))}


SOURCES = read_sources()


def test_every_package_is_in_the_contract():
    missing = sorted({package_of(m) for m in SOURCES} - set(CONTRACT))
    assert not missing, f"add these packages to CONTRACT and DEVELOPERS.md: {missing}"


def test_imports_follow_the_contract():
    bad = violations(SOURCES)
    assert not bad, "\n".join(bad)


def test_no_import_cycles():
    found = cycles(graph(SOURCES))
    assert not found, found


def test_the_contract_itself_has_no_cycle_and_points_down():
    # each row may only name packages listed before it
    order = list(CONTRACT)
    for pkg, allowed in CONTRACT.items():
        for dep in allowed:
            assert order.index(dep) < order.index(pkg), (pkg, dep)


def test_developers_guide_names_every_package():
    text = (Path(__file__).parents[1] / "DEVELOPERS.md").read_text()
    missing = [p for p in CONTRACT if p not in ("", "__main__", "cli", "api")
               and f"{p}/" not in text]
    assert not missing, missing


def test_modules_open_with_a_docstring():
    missing = [m for m, (src, _) in SOURCES.items()
               if src.strip() and ast.get_docstring(ast.parse(src)) is None]
    assert not missing, missing


# Modules whose "Must not import" sentence stays until the branch that owns them merges;
# keep this empty once the branches are merged.
PROSE_CONTRACT_PENDING: set[str] = set()


def test_no_module_restates_the_contract_in_prose():
    # the table above is the contract; a sentence in a docstring drifts from it
    import re
    prose = re.compile(r"(?:^|[.:]\s+)(?:It |This module )?Must not import\b", re.M)
    found = sorted(m for m, (src, _) in SOURCES.items()
                   if prose.search(ast.get_docstring(ast.parse(src)) or ""))
    assert found == sorted(m for m in PROSE_CONTRACT_PENDING if m in SOURCES), found


# A test of the test: the imports that once passed an older layer check must fail now.
INJECTED = [
    ("rigbench.wire.crc", "import rigbench.sequences.results"),
    ("rigbench.handlers.board_port", "import rigbench.ui.app"),
    ("rigbench.ui.view", "import rigbench.rig.firmware.boards"),
    ("rigbench.tuning.rules", "from rigbench.link import Link"),
    ("rigbench.profiles.model", "from rigbench.experiments import relay"),
    ("rigbench.link.channel", "import textual"),
    ("rigbench.wire.frame", "import serial"),
    ("rigbench.base.units", "from rigbench import cli"),
]


@pytest.mark.parametrize("module,line", INJECTED, ids=[m for m, _ in INJECTED])
def test_an_injected_upward_import_is_caught(module, line):
    sources = dict(SOURCES)
    source, is_package = sources[module]
    sources[module] = (source + "\n" + line + "\n", is_package)
    assert any(v.startswith(module + " ") for v in violations(sources)), line


def test_an_injected_cycle_is_caught():
    sources = dict(SOURCES)
    source, is_package = sources["rigbench.wire.crc"]
    sources["rigbench.wire.crc"] = (source + "\nimport rigbench.wire.frame\n", is_package)
    assert cycles(graph(sources))


def test_importing_the_package_registers_nothing():
    # no import-time side effects: importing rigbench (and every layer below the CLI)
    # leaves pyserial's handler list alone; a link or the CLI registers explicitly.
    import subprocess
    import sys
    code = ("import serial, rigbench, rigbench.link, rigbench.experiments, rigbench.sequences;"
            "import rigbench.wire;"
            "print('rigbench.handlers' in serial.protocol_handler_packages);"
            "import sys; print('serial' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.split()
    assert out[0] == "False"
    code_wire = "import sys, rigbench.wire; print('serial' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code_wire], capture_output=True, text=True,
                         check=True).stdout.split()
    assert out == ["False"], "import rigbench.wire pulled in pyserial"
