"""The terminal screens (Textual): home, live run, profile preview, replay, help.

Only this package (and the commands that open it) imports Textual.
"""
