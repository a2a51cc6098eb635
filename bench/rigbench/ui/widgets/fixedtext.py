"""A text widget for values that change many times a second: setting its text repaints it
without asking for a new layout (``Static.update`` re-lays out the screen, which costs tens
of milliseconds on a full screen). Its size comes from CSS, never from its text.
"""

from __future__ import annotations

from textual.content import Content
from textual.widget import Widget


class FixedText(Widget):
    """Plain text (no markup) in a box sized by CSS; ``text`` is what it shows."""

    DEFAULT_CSS = """
    FixedText { height: 1; width: 1fr; }
    """

    def __init__(self, text: str = "", *, id: str | None = None,
                 classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self._text = text

    @property
    def text(self) -> str:
        return self._text

    def set_text(self, text: str) -> None:
        if text != self._text:
            self._text = text
            self.refresh()

    def render(self) -> Content:
        return Content(self._text)
