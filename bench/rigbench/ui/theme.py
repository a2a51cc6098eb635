"""The terminal UI's own colour theme, registered through Textual's theme API.

Dark, low-glare colours for a bench at night; red is kept for alarms and the kill, amber for
warnings and armed states, green for a healthy link.
"""

from __future__ import annotations

from textual.theme import Theme

BENCH_DARK = Theme(
    name="bench-dark",
    primary="#4FA3D1",
    secondary="#8C7FD0",
    accent="#E8A33D",
    warning="#E8A33D",
    error="#E0483A",
    success="#5DBB6A",
    foreground="#D9DEE3",
    background="#14171B",
    surface="#1B1F24",
    panel="#252A31",
    dark=True,
    variables={
        "footer-key-foreground": "#E8A33D",
        "block-cursor-background": "#2E5A78",
    },
)

BENCH_LIGHT = Theme(
    name="bench-light",
    primary="#1D6E9E",
    secondary="#5B4FA0",
    accent="#B06F0B",
    warning="#B06F0B",
    error="#B8281C",
    success="#2E7D3A",
    foreground="#1E2226",
    background="#F3F1EC",
    surface="#E9E6DF",
    panel="#DAD6CD",
    dark=False,
)

THEMES = (BENCH_DARK, BENCH_LIGHT)
