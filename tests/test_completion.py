"""`tuikiln completion bash|zsh`: the script made from tuikiln's own parser, run by the real
shells. The variables are bash's programmable-completion interface (bash manual,
"Programmable Completion": COMP_WORDS, COMP_CWORD, COMPREPLY, `complete -F`); zsh runs the
same function through its bashcompinit layer (zsh manual, "Bash compatibility")."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from tuikiln.cli import COMMANDS, main

ROOT = Path(__file__).resolve().parents[1]
BASH = shutil.which("bash")
ZSH = shutil.which("zsh")


def _script(shell: str) -> str:
    done = subprocess.run([sys.executable, "-m", "tuikiln", "completion", shell],
                          capture_output=True, text=True, timeout=60, cwd=ROOT)
    assert done.returncode == 0, done.stderr
    return done.stdout


@pytest.fixture(scope="module")
def bash_script(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("completion") / "tuikiln.bash"
    path.write_text(_script("bash"), encoding="utf-8")
    return path


def _complete_in_bash(script: Path, *words: str) -> list[str]:
    """What Tab offers after `words` (the last one is the word being typed)."""
    if BASH is None:
        pytest.skip("bash is not installed")
    quoted = " ".join("'" + w.replace("'", "'\\''") + "'" for w in words)
    program = (f"source '{script}'\nCOMP_WORDS=({quoted})\n"
               "COMP_CWORD=$(( ${#COMP_WORDS[@]} - 1 ))\nCOMPREPLY=()\n_tuikiln\n"
               'printf "%s\\n" "${COMPREPLY[@]}"\n')
    done = subprocess.run([BASH, "--norc", "--noprofile", "-c", program],
                          capture_output=True, text=True, timeout=30)
    assert done.returncode == 0 and not done.stderr, done.stderr
    return [line for line in done.stdout.splitlines() if line]


def test_every_command_is_offered_and_a_prefix_narrows_it(bash_script) -> None:
    assert set(_complete_in_bash(bash_script, "tuikiln", "")) >= set(COMMANDS)
    assert _complete_in_bash(bash_script, "tuikiln", "se") == ["service"]
    assert _complete_in_bash(bash_script, "tuikiln", "--kiln", "k.toml", "ru") == ["run", "runs"]


def test_options_and_their_choices_come_from_the_parser(bash_script) -> None:
    assert _complete_in_bash(bash_script, "tuikiln", "--log-level", "") == [
        "debug", "info", "warning", "error"]
    assert _complete_in_bash(bash_script, "tuikiln", "run", "--sp") == ["--speed"]
    assert set(_complete_in_bash(bash_script, "tuikiln", "service", "--")) >= {
        "--user", "--system", "--data", "--log-level"}
    assert _complete_in_bash(bash_script, "tuikiln", "sim", "") == ["serve"]
    assert "--pty" in _complete_in_bash(bash_script, "tuikiln", "sim", "serve", "--p")
    assert _complete_in_bash(bash_script, "tuikiln", "completion", "") == ["bash", "zsh"]


def test_a_value_is_not_taken_for_a_command_and_files_are_left_to_the_shell(
        bash_script) -> None:
    # "--data run" is a folder named run, so the command is still to come.
    assert "check" in _complete_in_bash(bash_script, "tuikiln", "--data", "run", "ch")
    # A profile file after `run`: tuikiln offers nothing, bash completes file names
    # (`complete -o default`).
    assert _complete_in_bash(bash_script, "tuikiln", "run", "") == []
    assert _complete_in_bash(bash_script, "tuikiln", "--kiln", "") == []


def test_zsh_registers_the_same_completion() -> None:
    if ZSH is None:
        pytest.skip("zsh is not installed (Debian package zsh)")
    program = (f"source <({sys.executable} -m tuikiln completion zsh)\n"
               "print -r -- \"${_comps[tuikiln]}\"\nsetopt ksharrays\n"
               "COMP_WORDS=(tuikiln --log-level ''); COMP_CWORD=2; _tuikiln\n"
               "print -r -- \"${COMPREPLY[*]}\"\n")
    done = subprocess.run([ZSH, "-f", "-c", program], capture_output=True, text=True,
                          timeout=60, cwd=ROOT)
    assert done.returncode == 0, done.stderr
    registered, offered = done.stdout.splitlines()[-2:]
    assert "_tuikiln" in registered
    assert offered.split() == ["debug", "info", "warning", "error"]


def test_an_unknown_shell_is_a_one_line_mistake(capsys) -> None:
    with pytest.raises(SystemExit) as stopped:
        main(["completion", "fish"])
    assert stopped.value.code == 1
    err = capsys.readouterr().err
    assert "invalid choice: 'fish'" in err and "Traceback" not in err
