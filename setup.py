"""Build hook: the demo profiles and sequences, the protocol specification and its test
vectors go into the wheel as ``rigbench/examples/``.

The top-level ``profiles/``, ``sequences/`` and ``protocol/`` folders stay the one source of
these files; ``build_py`` copies them into the build tree only, so the source package
``bench/rigbench`` never holds a second copy. An editable install skips the copy:
``rigbench.base.examples`` then finds the files in the repository itself. Everything else
about the package is declared in pyproject.toml.
"""

from pathlib import Path

from setuptools import setup
from setuptools.command.build_py import build_py

ROOT = Path(__file__).parent


def _examples_module():
    """bench/rigbench/base/examples.py loaded by path (stdlib only): its EXAMPLES list names
    the files, so the build and the package agree on them."""
    import importlib.util
    import sys

    spec = importlib.util.spec_from_file_location(
        "_rigbench_examples", ROOT / "bench" / "rigbench" / "base" / "examples.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look their module up there
    spec.loader.exec_module(module)
    return module


def example_files():
    """(source path, path relative to rigbench/examples/) of every shipped example file."""
    module = _examples_module()
    files = module.example_files(ROOT)
    missing = [f"{d}/{g}" for d, g in module.EXAMPLES
               if not any(rel.startswith(d + "/") and Path(rel).match(g) for _, rel in files)]
    if missing:
        raise SystemExit(f"setup.py: nothing matches {', '.join(missing)}: the demos would be "
                         "missing from the package (is this a complete source tree?)")
    return files


class build_py_with_examples(build_py):
    def run(self):
        super().run()
        if getattr(self, "editable_mode", False):
            return  # the package finds them in the repository
        target = Path(self.build_lib) / "rigbench" / _examples_module().PACKAGED
        for src, rel in example_files():
            dest = target / rel
            dest.parent.mkdir(parents=True, exist_ok=True)
            self.copy_file(str(src), str(dest), preserve_mode=False)


setup(cmdclass={"build_py": build_py_with_examples})
