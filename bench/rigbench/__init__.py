"""rigbench: tune, verify and document the control loops of actively balanced rigs.

Importing the package has no side effects and loads nothing else: the ``sim://`` and
``replay://`` URL schemes are registered with pyserial when a link opens
(``rigbench.link.urls.register_url_handlers``). Scripts use ``rigbench.api``.
``rigbench.__version__`` is the installed distribution's version (pyproject.toml holds the
one number), read from the package metadata when first asked for.
"""

__all__ = ["__version__"]


def __getattr__(name: str):
    if name == "__version__":
        from rigbench.base.version import package_version

        value = globals()["__version__"] = package_version()
        return value
    raise AttributeError(f"module 'rigbench' has no attribute {name!r}")
