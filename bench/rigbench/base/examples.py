"""The example files that ship with rigbench: the demo gain profiles and sequences, the
protocol specification and its test vectors.

The repository's top-level ``profiles/``, ``sequences/`` and ``protocol/`` folders are the
one source of these files. A wheel carries a copy as package data under
``rigbench/examples/`` (setup.py copies the files named by ``EXAMPLES`` at build time); a
source checkout or an editable install has no such folder, and the files are read from the
repository itself. ``copy_examples`` puts them into a folder of the user's, so the README's
commands (``rigbench push profiles/demo-…``) work after a wheel or pipx install.

Stdlib only: setup.py loads this file by path, before rigbench is installed.
"""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

__all__ = ["EXAMPLES", "ExamplesMissing", "CopyResult", "examples_root", "example_files",
           "copy_examples"]

# (folder in the repository, glob): copied to the same relative place
EXAMPLES: tuple[tuple[str, str], ...] = (
    ("profiles", "*.yaml"),
    ("profiles", "README.md"),
    ("sequences", "*.yaml"),
    ("sequences", "README.md"),
    ("protocol", "PROTOCOL.md"),
    ("protocol/vectors", "frames.json"),
)

PACKAGED = "examples"  # the folder inside the installed package


class ExamplesMissing(FileNotFoundError):
    """Neither the package nor a source checkout holds the example files."""


@dataclass
class CopyResult:
    """What ``copy_examples`` did, as paths inside the destination folder."""

    dest: Path
    written: list[Path] = field(default_factory=list)
    unchanged: list[Path] = field(default_factory=list)


def _files_under(root: Path) -> list[tuple[Path, str]]:
    out = []
    for folder, pattern in EXAMPLES:
        out += [(p, f"{folder}/{p.name}") for p in sorted((root / folder).glob(pattern))
                if p.is_file()]
    return out


def examples_root(package_dir: str | Path | None = None) -> Path:
    """The folder holding ``profiles/``, ``sequences/`` and ``protocol/``: the packaged copy
    in an installed wheel, else the repository of a source checkout."""
    pkg = Path(package_dir) if package_dir else Path(__file__).resolve().parents[1]
    packaged = pkg / PACKAGED
    if (packaged / "profiles").is_dir():
        return packaged
    repo = pkg.parents[1]  # <repo>/bench/rigbench
    if (repo / "pyproject.toml").is_file() and (repo / "protocol" / "PROTOCOL.md").is_file():
        return repo
    raise ExamplesMissing(f"the example files are not in this installation ({packaged} is "
                          "missing and it is not a source checkout); reinstall rigbench from "
                          "a wheel or the source tree")


def example_files(root: str | Path | None = None) -> list[tuple[Path, str]]:
    """(file, path relative to the destination) of every example file, in a stable order."""
    files = _files_under(Path(root) if root else examples_root())
    if not files:
        raise ExamplesMissing(f"no example files under {root or examples_root()}")
    return files


def copy_examples(dest: str | Path, *, force: bool = False,
                  root: str | Path | None = None) -> CopyResult:
    """Copy the example files into ``dest`` (created if missing). A file already there with
    the same content is left alone; one with other content raises FileExistsError naming it,
    unless ``force``. Each file is written atomically."""
    dest = Path(dest)
    files = example_files(root)
    if not force:
        clash = [dest / rel for src, rel in files
                 if (dest / rel).exists() and (dest / rel).read_bytes() != src.read_bytes()]
        if clash:
            raise FileExistsError(f"{clash[0]} exists with other content"
                                  + (f" (and {len(clash) - 1} more)" if len(clash) > 1 else ""))
    result = CopyResult(dest)
    for src, rel in files:
        target = dest / rel
        data = src.read_bytes()
        if target.is_file() and target.read_bytes() == data:
            result.unchanged.append(target)
            continue
        target.parent.mkdir(parents=True, exist_ok=True)
        _write_bytes_atomic(target, data)
        result.written.append(target)
    return result


def _write_bytes_atomic(path: Path, data: bytes) -> None:
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(data)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
