"""Which characters the screens draw with: braille where the terminal has it, else block or
plain ASCII characters, and a shape for every chart line when colour is off.

The Linux console (TERM=linux) draws from a 256- or 512-glyph font: its default font is the
IBM PC character set (code page 437), which has box drawing and block elements but no braille
(from memory: the kernel's built-in VGA font). So `block` keeps to characters of that set,
and `ascii` to printable ASCII for anything older. With NO_COLOR (no-color.org) the lines are
told apart by their marks instead of their colours, whatever the character set.

Pure (no Textual): the chart drawing and the tests use it alone.
"""

from __future__ import annotations

import argparse
import os
from collections.abc import Mapping
from dataclasses import dataclass, field

from tuikiln.errors import UserError

GLYPH_CHOICES = ("auto", "braille", "block", "ascii")
GLYPHS_ENV = "TUIKILN_GLYPHS"
# Terminals known to lack braille (and most of Unicode): what `auto` falls back for.
BLOCK_TERMS = ("linux",)
ASCII_TERMS = ("vt100", "vt102", "vt220", "ansi", "dumb")


@dataclass(frozen=True)
class Glyphs:
    """The characters of one set: the chart's axis, markers, legend and per-line marks."""

    name: str
    braille: bool
    """Lines are braille dots (2 x 4 per cell); otherwise each line is its mark, one a cell."""
    marks: Mapping[str, str] = field(default_factory=dict)
    """A character per line role, used instead of braille (and when colour is off)."""
    axis_label: str = "┤"
    axis_line: str = "│"
    corner: str = "└"
    time_tick: str = "╵"
    now: str = "│"
    cursor: str = "┃"
    solid: str = "━"
    dashed: str = "┄"

    def mark(self, role: str) -> str:
        return self.marks.get(role, "*")

    def plain(self, text: str) -> str:
        """The screens' symbols (✔, …, ←) in characters this set has; braille: unchanged."""
        return text if self.braille else text.translate(PLAIN_SYMBOLS)


# Each mark its own shape, densest for the chamber (the reading that matters most), so lines
# stay apart in a monochrome terminal. Every one of them is in code page 437.
BLOCK_MARKS = {"chamber": "█", "load": "▒", "core": "░", "setpoint": "+", "plan": "·"}
ASCII_MARKS = {"chamber": "#", "load": "o", "core": ":", "setpoint": "+", "plan": "."}

# Symbols the screens use that code page 437 lacks, and what stands for each there.
PLAIN_SYMBOLS = str.maketrans({"✔": "√", "✖": "x", "●": "*", "▲": "^", "▶": ">", "☛": ">>",
                               "…": "...", "×": "x", "←": "<-", "→": "->", "⏎": "enter",
                               "✎": "+", "┃": "║", "━": "─", "┄": "-", "“": '"', "”": '"',
                               "‘": "'", "’": "'", "—": "-", "–": "-"})

BRAILLE_GLYPHS = Glyphs("braille", True, BLOCK_MARKS)
BLOCK_GLYPHS = Glyphs("block", False, BLOCK_MARKS, time_tick="'", cursor="║", solid="─",
                      dashed="-")
ASCII_GLYPHS = Glyphs("ascii", False, ASCII_MARKS, axis_label="+", axis_line="|", corner="+",
                      time_tick="'", now="|", cursor="!", solid="-", dashed="-")
GLYPH_SETS = {g.name: g for g in (BRAILLE_GLYPHS, BLOCK_GLYPHS, ASCII_GLYPHS)}


def for_terminal(term: str) -> Glyphs:
    """What `auto` picks for a TERM value."""
    base = term.lower().split("-")[0]
    if base in BLOCK_TERMS:
        return BLOCK_GLYPHS
    if base in ASCII_TERMS:
        return ASCII_GLYPHS
    return BRAILLE_GLYPHS


def choose_glyphs(option: str | None = None, environ: Mapping[str, str] | None = None
                  ) -> Glyphs:
    """The set named by the option, else by $TUIKILN_GLYPHS, else by $TERM.

    An unknown name in the variable raises ValueError with the names it could be."""
    env = os.environ if environ is None else environ
    for given, where in ((option, "--glyphs"), (env.get(GLYPHS_ENV), GLYPHS_ENV)):
        if not given:
            continue
        name = given.strip().lower()
        if name == "auto":
            break
        if name not in GLYPH_SETS:
            raise ValueError(f'{where} "{given}": use one of {", ".join(GLYPH_CHOICES)}')
        return GLYPH_SETS[name]
    return for_terminal(env.get("TERM", ""))


def add_glyphs_option(parser: argparse.ArgumentParser) -> None:
    """`--glyphs` for the commands that open a screen."""
    parser.add_argument(
        "--glyphs", choices=GLYPH_CHOICES, type=str.lower, default=None,
        help=f"characters to draw with: braille, block (the Linux console) or ascii "
        f"(default: ${GLYPHS_ENV}, else auto: block when TERM is linux, ascii for vt100 "
        "and the like, braille elsewhere)")


def glyphs_from_args(args: argparse.Namespace) -> Glyphs:
    """The set for a screen command; a bad $TUIKILN_GLYPHS is the user's mistake in words."""
    try:
        return choose_glyphs(getattr(args, "glyphs", None))
    except ValueError as exc:
        raise UserError(str(exc)) from None
