"""Every document the code and the docs cite is in the repository.

A citation is a ``*.md`` name or path in a ``.py``, ``.md``, ``.c``, ``.h``, ``.yaml`` or
``.toml`` file. A path (``docs/METHODS.md``, ``../PROTOCOL.md``) must resolve, from the
citing file's folder or from the repository root, to a file inside the repository; a bare
name (``PROTOCOL.md``) must be the name of some file in the repository. Nothing may point
outside the repository (``../shared/...``): a reader of a checkout has only the checkout.
"""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).parents[1]
SKIP_DIRS = {".git", ".venv", "venv", "build", "build-san", "__pycache__", ".pytest_cache",
             ".hypothesis", "results", "node_modules"}
SUFFIXES = {".py", ".md", ".c", ".h", ".yaml", ".yml", ".toml"}
CITE_RE = re.compile(r"(?<![\w./-])((?:\.{1,2}/|[\w-]+/)*[\w.-]+\.md)\b")

# Names of Markdown files the program writes into a results folder: outputs, not citations.
OUTPUT_NAMES = {"summary.md": "bench/rigbench/reports/report.py",
                "tune.md": "bench/rigbench/commands/tune.py"}

# Citations in files owned by a branch being worked on in parallel, fixed when it merges:
# (citing file, cited name). Keep this empty once the branches are merged.
PENDING: set[tuple[str, str]] = set()


def _files():
    """The repository's text files (this test's own examples left out)."""
    for path in sorted(ROOT.rglob("*")):
        rel = path.relative_to(ROOT)
        if path.resolve() == Path(__file__).resolve():
            continue
        if any(part in SKIP_DIRS or part.endswith(".egg-info") for part in rel.parts[:-1]):
            continue
        if path.suffix in SUFFIXES and path.is_file():
            yield path


def _citations():
    for path in _files():
        text = path.read_text(encoding="utf-8", errors="replace")
        for n, line in enumerate(text.splitlines(), 1):
            for cited in CITE_RE.findall(line):
                yield path, n, cited


def _resolves(path: Path, cited: str, names: set[str]) -> bool:
    if "/" not in cited:
        return cited in names
    root = ROOT.resolve()
    for base in (path.parent, ROOT):
        target = (base / cited).resolve()
        if target.is_relative_to(root) and target.is_file():
            return True
    return False


def test_cited_documents_exist_in_the_repository():
    names = {p.name for p in _files()}
    missing = []
    for path, n, cited in _citations():
        rel = path.relative_to(ROOT).as_posix()
        if Path(cited).name in OUTPUT_NAMES or (rel, cited) in PENDING:
            continue
        if not _resolves(path, cited, names):
            missing.append(f"{rel}:{n}: {cited}")
    assert not missing, "cited documents not in the repository:\n" + "\n".join(missing)


def test_nothing_cites_outside_the_repository():
    root = ROOT.resolve()
    outside = [f"{p.relative_to(ROOT)}:{n}: {c}" for p, n, c in _citations()
               if "shared/" in c
               or c.startswith("..") and not (p.parent / c).resolve().is_relative_to(root)]
    assert not outside, "\n".join(outside)
    for path in _files():
        assert "../shared" not in path.read_text(encoding="utf-8", errors="replace"), path


def test_the_exceptions_are_still_needed():
    # an output name no longer written, or a pending citation already fixed, leaves the list
    for name, writer in OUTPUT_NAMES.items():
        assert name in (ROOT / writer).read_text(), (name, writer)
    for rel, cited in PENDING:
        assert cited in (ROOT / rel).read_text(), (rel, cited)


def test_a_missing_citation_is_caught(tmp_path):
    # the checker itself: a made-up name and an outside path do not resolve
    names = {p.name for p in _files()}
    here = ROOT / "tests" / "x.py"
    assert not _resolves(here, "NOWHERE.md", names)
    assert not _resolves(here, "../../shared/STYLE.md", names)
    assert _resolves(here, "../protocol/PROTOCOL.md", names)
    assert _resolves(here, "docs/METHODS.md", names)
    assert CITE_RE.findall("see docs/METHODS.md §4 and (PROTOCOL.md)") == \
        ["docs/METHODS.md", "PROTOCOL.md"]
