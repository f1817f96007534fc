"""Changing a Static's text without laying the whole screen out again.

`Static.update` asks for a layout pass by default, and a layout pass of the live screen
costs more than everything else a second of watching does. When the new text takes as many
lines as the old, repainting the widget is enough.
"""

from __future__ import annotations

from rich.text import Text
from textual.geometry import Size
from textual.widgets import Static

from tuikiln.plaintext import plain


def update_in_place(widget: Static, content: str | Text) -> None:
    """`Static.update`, with a layout pass only when the widget's height changes."""
    width, height = widget.size
    if isinstance(content, str):
        # Always plain text: a profile named "[/x]" is a name, not Rich markup (which would
        # raise MarkupError and take the screen down), and no escape code reaches the terminal.
        content = Text(plain(content, lines=True))
    widget.update(content, layout=False)
    if width <= 0 or widget.get_content_height(Size(0, 0), Size(0, 0), width) != height:
        widget.refresh(layout=True)
