"""No dead code that vulture (a general-purpose dead-code finder) is sure of: unused imports,
variables and arguments, and unreachable code, at 90 % confidence and up, in tuikiln,
drivers and simulator (tests are left out: a fixture taken for its effect looks unused).
Below that it guesses (Textual calls compose, on_* and action_* by name), so the 60 % list
is read by hand: DEVELOPERS.md says how."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def vulture(*paths: str, confidence: int) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "vulture", *paths,
                           "--min-confidence", str(confidence)],
                          capture_output=True, text=True, cwd=ROOT)


def test_vulture_finds_an_unused_variable(tmp_path: Path) -> None:
    """The check below could pass because vulture saw nothing: show it sees this."""
    sample = tmp_path / "sample.py"
    sample.write_text("def f(x):\n    return 1\n    print(x)\n", encoding="utf-8")
    out = vulture(str(sample), confidence=90)
    assert "unreachable code" in out.stdout, out.stdout + out.stderr


def test_no_code_vulture_is_sure_is_dead() -> None:
    out = vulture("tuikiln", "drivers", "simulator", confidence=90)
    assert out.returncode == 0 and not out.stdout.strip(), out.stdout + out.stderr
