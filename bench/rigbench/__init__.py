"""rigbench: tune, verify and document the control loops of actively balanced rigs.

Importing the package has no side effects: the ``sim://`` and ``replay://`` URL schemes are
registered with pyserial when a link opens (``rigbench.link.urls.register_url_handlers``).
"""

__version__ = "0.2.0"
