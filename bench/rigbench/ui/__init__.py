"""The terminal UI (Textual only): screens, widgets, the safety bar and the app that routes
them. Widgets never parse protocol lines, do the tuning maths or open ports: blocking work
runs in thread workers that call domain functions and report back with messages.

Must not be imported by any other layer of bench (it sits on top).
"""
