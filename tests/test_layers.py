"""Imports point down only (DEVELOPERS.md, Architecture): checked from the source, module by
module, so a stray import of an upper layer fails here before it tangles the package."""

import ast
from pathlib import Path

import pytest

PKG = Path(__file__).parents[1] / "bench"

# layer -> imports it must not make (prefix match on the imported module name)
FORBIDDEN = {
    "wire": ("serial", "threading", "time", "logging", "socket", "numpy", "textual",
             "bench.link", "bench.rig", "bench.ui", "bench.tuning", "bench.commands",
             "bench.handlers"),
    "link": ("textual", "bench.rig", "bench.ui", "bench.tuning", "bench.commands",
             "bench.handlers", "bench.experiments"),
    "rig": ("textual", "bench.link", "bench.ui", "bench.commands", "bench.tuning"),
    "tuning": ("textual", "serial", "bench.link", "bench.rig", "bench.ui", "bench.commands",
               "control"),
    "domain": ("textual", "bench.ui", "bench.commands", "control"),
}


def _imports(path: Path):
    tree = ast.parse(path.read_text(), filename=str(path))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                yield alias.name
        elif isinstance(node, ast.ImportFrom):
            if node.level:  # relative: resolve against the module's package
                parts = path.relative_to(PKG.parent).with_suffix("").parts[:-node.level]
                base = ".".join(parts)
                yield f"{base}.{node.module}" if node.module else base
            else:
                yield node.module or ""


def _layer(path: Path) -> str | None:
    rel = path.relative_to(PKG).parts
    if len(rel) == 1:
        return None if rel[0] in ("__init__.py", "cli.py", "__main__.py") else "domain"
    return {"wire": "wire", "link": "link", "rig": "rig", "tuning": "tuning",
            "experiments": "domain"}.get(rel[0])


MODULES = sorted(p for p in PKG.rglob("*.py") if _layer(p))


@pytest.mark.parametrize("path", MODULES, ids=lambda p: str(p.relative_to(PKG)))
def test_imports_point_down(path):
    bad = FORBIDDEN[_layer(path)]
    offenders = [name for name in _imports(path)
                 if any(name == b or name.startswith(b + ".") for b in bad)]
    assert not offenders, f"{path.relative_to(PKG.parent)} imports {offenders}"


def test_modules_open_with_a_docstring():
    missing = [str(p.relative_to(PKG.parent)) for p in PKG.rglob("*.py")
               if p.stat().st_size and ast.get_docstring(ast.parse(p.read_text())) is None]
    assert not missing, missing
